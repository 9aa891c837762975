"""The ``envsample`` command group: exit statuses and one-line errors for everything a user can fix.

Errors a user can fix (:class:`envsample.errors.EnvsampleError`, click usage
errors, ``OSError`` on files, ``ValueError`` from option checks) print one line
``error: ...`` on stderr and exit with status 2; ``--debug`` adds the traceback.
Anything else is a bug: one line, status 3, and the traceback with ``--debug``.
Library messages that name Python keywords (``repair=True``) are shown as flags
(``--repair``) through :data:`FLAG_WORDS`.
"""

from __future__ import annotations

import sys
import traceback

import click

from envsample._version import __version__
from envsample.core.text import one_line
from envsample.errors import EnvsampleError

__all__ = ["main", "EXIT_USER_ERROR", "EXIT_INTERNAL_ERROR", "FLAG_WORDS", "flags"]

#: Exit status for input, usage and file errors.
EXIT_USER_ERROR = 2
#: Exit status for unexpected failures (bugs).
EXIT_INTERNAL_ERROR = 3

# Library messages name Python keyword arguments; on the command line the remedy is a flag.
FLAG_WORDS = (
    ("pass repair=True", "pass --repair"),
    ("(repair=True)", "(--repair)"),
    ("validate_map(repair=True)", "--repair"),
    ("pass allow_aspect=True", "pass --allow-aspect"),
    ("because allow_aspect=True", "because of --allow-aspect"),
    ("choose one with layer=NAME", "choose one with --layer NAME"),
    ("pass one of them as layer=", "pass one of them with --layer"),
    ("pixel_type='float'", "--pixel-type float"),
    ("(batch --build-failed, build_failed=True in Python, builds it anyway)", "(--build-failed builds it anyway)"),
    ("pass follow_links=True", "pass --follow-links"),
)


def flags(message: str) -> str:
    for lib, flag in FLAG_WORDS:
        message = message.replace(lib, flag)
    return message



def describe_os_error(e: OSError) -> str:
    if e.filename and e.strerror:
        return f"{e.filename}: {e.strerror.lower()}; check the path and its permissions"
    return str(e)


# click >= 8.2 raises this for a bare 'envsample'; showing the help is the friendly answer.
_NO_ARGS = getattr(click.exceptions, "NoArgsIsHelpError", ())


class Main(click.Group):
    """The command group; turns errors into one line and an exit status."""

    def main(self, args=None, prog_name=None, complete_var=None, standalone_mode=True, **extra):
        argv = list(sys.argv[1:] if args is None else args)
        end = argv.index("--") if "--" in argv else len(argv)
        debug = "--debug" in argv[:end]
        if debug:
            # Accept --debug anywhere before '--': move it in front of the command, where click expects it.
            argv = ["--debug"] + [a for a in argv[:end] if a != "--debug"] + argv[end:]
        try:
            rv = super().main(argv, prog_name or "envsample", complete_var, standalone_mode=False, **extra)
            code = rv if isinstance(rv, int) else 0
        except _NO_ARGS as e:
            e.show()
            code = EXIT_USER_ERROR
        except click.exceptions.Abort:
            click.echo("error: interrupted; nothing partial was left behind (writes are atomic)", err=True)
            code = 130
        except click.ClickException as e:
            if debug:
                traceback.print_exc()
            hint = ""
            ctx = getattr(e, "ctx", None)
            if isinstance(e, click.UsageError) and ctx is not None:
                hint = f"; see '{ctx.command_path} --help'"
            click.echo(f"error: {one_line(e.format_message()).rstrip('.')}{hint}", err=True)
            code = EXIT_USER_ERROR
        except (EnvsampleError, ValueError, OSError) as e:
            if debug:
                traceback.print_exc()
            text = describe_os_error(e) if isinstance(e, OSError) and not isinstance(e, EnvsampleError) else str(e)
            click.echo(f"error: {one_line(flags(text))}", err=True)
            code = EXIT_USER_ERROR
        except Exception as e:  # noqa: BLE001 - the last resort of a command-line tool
            if debug:
                traceback.print_exc()
                hint = "please report the traceback above"
            else:
                hint = "this is a bug; rerun with --debug and report the traceback"
            click.echo(f"error: internal error ({type(e).__name__}: {one_line(e)}); {hint}", err=True)
            code = EXIT_INTERNAL_ERROR
        if standalone_mode:
            sys.exit(code)
        return code



@click.group("envsample", cls=Main, context_settings={"help_option_names": ["-h", "--help"], "max_content_width": 100})
@click.version_option(__version__, "--version", prog_name="envsample", message="%(prog)s %(version)s")
@click.option("--debug", is_flag=True, help="Show the traceback of an error (may also follow the command).")
def main(debug):
    """Check equirectangular HDR environment maps, build their importance-sampling
    tables, prove them with MIS validation renders, and write golden vectors for
    checking a renderer's loader; one map at a time or a whole library.

    Angles are given in degrees. Errors print one line and exit with status 2.
    Start with 'envsample demo' to see the whole flow on invented maps.
    """
