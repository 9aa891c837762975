"""The ``envsample`` command line: a thin layer over the library.

Every command calls one library function and formats its result:

=========  =====================================================
build      :func:`envsample.workflow.build_from_file`
inspect    :func:`envsample.workflow.map_facts` / :func:`envsample.workflow.table_facts`
vectors    :func:`envsample.workflow.golden_vectors` + :func:`envsample.workflow.write_vectors`
sky        :func:`envsample.skies.make_sky` + :func:`envsample.io.write_map`
verify     :func:`envsample.verify.verify_map`
check      :func:`envsample.qa.check_map` (+ :func:`envsample.html.check_page` for --html)
batch      :func:`envsample.batch.run_batch`
demo       :func:`envsample.demo.run_demo`
=========  =====================================================

Angles are degrees on the command line and radians inside the library.
Errors a user can fix (:class:`envsample.errors.EnvsampleError`, click usage
errors, ``OSError`` on files, ``ValueError`` from option checks) print one line
``error: ...`` on stderr and exit with status 2; ``--debug`` adds the traceback.
Anything else is a bug: one line, status 3, and the traceback with ``--debug``.
Progress bars (tqdm) go to stderr and only appear on a terminal.
Every input is checked before anything is written.
"""

from __future__ import annotations

import contextlib
import inspect
import json
import math
import sys
import traceback
import warnings
from pathlib import Path

import click

from envsample._version import __version__
from envsample.core.color import PRIMARY_NAMES
from envsample.core.constants import PRIMARY_ALIASES
from envsample.core.latlong import MAPPINGS
from envsample.core.sphere import UP_AXES
from envsample.core.text import caution
from envsample.errors import EnvsampleError, EnvsampleWarning

__all__ = ["main", "EXIT_USER_ERROR", "EXIT_INTERNAL_ERROR"]

#: Exit status for input, usage and file errors.
EXIT_USER_ERROR = 2
#: Exit status for unexpected failures (bugs).
EXIT_INTERNAL_ERROR = 3

# Library messages name Python keyword arguments; on the command line the remedy is a flag.
_FLAG_WORDS = (
    ("pass repair=True", "pass --repair"),
    ("(repair=True)", "(--repair)"),
    ("validate_map(repair=True)", "--repair"),
    ("pass allow_aspect=True", "pass --allow-aspect"),
    ("because allow_aspect=True", "because of --allow-aspect"),
    ("choose one with layer=NAME", "choose one with --layer NAME"),
    ("pass one of them as layer=", "pass one of them with --layer"),
    ("pixel_type='float'", "--pixel-type float"),
)


def _flags(message: str) -> str:
    for lib, flag in _FLAG_WORDS:
        message = message.replace(lib, flag)
    return message


def _one_line(message: str) -> str:
    return " ".join(str(message).split())


# --------------------------------------------------------------------------- errors


def _describe_os_error(e: OSError) -> str:
    if e.filename and e.strerror:
        return f"{e.filename}: {e.strerror.lower()}; check the path and its permissions"
    return str(e)


# click >= 8.2 raises this for a bare 'envsample'; showing the help is the friendly answer.
_NO_ARGS = getattr(click.exceptions, "NoArgsIsHelpError", ())


class _Main(click.Group):
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
            click.echo(f"error: {_one_line(e.format_message()).rstrip('.')}{hint}", err=True)
            code = EXIT_USER_ERROR
        except (EnvsampleError, ValueError, OSError) as e:
            if debug:
                traceback.print_exc()
            text = _describe_os_error(e) if isinstance(e, OSError) and not isinstance(e, EnvsampleError) else str(e)
            click.echo(f"error: {_one_line(_flags(text))}", err=True)
            code = EXIT_USER_ERROR
        except Exception as e:  # noqa: BLE001 - the last resort of a command-line tool
            if debug:
                traceback.print_exc()
                hint = "please report the traceback above"
            else:
                hint = "this is a bug; rerun with --debug and report the traceback"
            click.echo(f"error: internal error ({type(e).__name__}: {_one_line(e)}); {hint}", err=True)
            code = EXIT_INTERNAL_ERROR
        if standalone_mode:
            sys.exit(code)
        return code


@contextlib.contextmanager
def _warnings_as_lines(notes_seen: list[str]):
    """Collect envsample warnings and print each once as ``warning: ...``, unless a printed note says it."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", EnvsampleWarning)
        try:
            yield
        finally:
            for w in caught:
                text = _one_line(str(w.message))
                if issubclass(w.category, EnvsampleWarning):
                    if not any(n and n in text for n in notes_seen):
                        click.echo(f"warning: {_flags(text)}", err=True)
                else:
                    warnings.showwarning(w.message, w.category, w.filename, w.lineno)


def _progress_bar(total: int, desc: str):
    """A tqdm bar on stderr, shown only when stderr is a terminal."""
    from tqdm import tqdm

    return tqdm(total=total, desc=desc, file=sys.stderr, leave=False, disable=not sys.stderr.isatty(),
                bar_format="{desc} {bar} {n_fmt}/{total_fmt} [{elapsed}]")


# --------------------------------------------------------------------------- formatting


def _rows(pairs, *, out=None) -> None:
    """Print ``key  value`` lines with the values aligned; a key of "" continues the previous key."""
    pairs = [(k, v) for k, v in pairs if v is not None]
    width = max((len(k) for k, _ in pairs), default=0)
    for key, value in pairs:
        click.echo(f"{key:<{width}}  {value}", file=out)


def _num(x: float) -> str:
    """A compact number (4 significant digits), written as in every report (:func:`envsample._text.number`)."""
    from envsample.core.text import number

    return number(x, 4)


def _bytes(n: int) -> str:
    for unit, scale in (("GB", 1 << 30), ("MB", 1 << 20), ("kB", 1 << 10)):
        if n >= scale:
            return f"{n / scale:.1f} {unit}"
    return f"{n} B"


def _rgb_line(rgb, y=None, primaries=None) -> str:
    text = "  ".join(f"{c} {_num(v)}" for c, v in zip("RGB", rgb))
    if y is not None:
        text += f"  Y {_num(y)}" + (f" ({primaries})" if primaries else "")
    return text


def _direction_text(d: dict) -> str:
    return f"azimuth {d['azimuth_deg']:.1f} deg, elevation {d['elevation_deg']:.1f} deg"


def _echo_json(doc) -> None:
    click.echo(json.dumps(doc, indent=2))


# --------------------------------------------------------------------------- parameter types


class _SizeType(click.ParamType):
    """``WIDTHxHEIGHT`` -> (width, height)."""

    name = "WxH"

    def convert(self, value, param, ctx):
        if isinstance(value, tuple):
            return value
        from envsample.core.latlong import parse_size

        try:
            return parse_size(value)
        except ValueError as e:
            self.fail(str(e), param, ctx)


class _FiniteFloat(click.ParamType):
    """A finite float, optionally within [lo, hi]."""

    name = "DEG"

    def __init__(self, lo=-math.inf, hi=math.inf, name="NUMBER"):
        self.lo, self.hi, self.name = lo, hi, name

    def convert(self, value, param, ctx):
        try:
            x = float(value)
        except (TypeError, ValueError):
            self.fail(f"{value!r} is not a number", param, ctx)
        if not math.isfinite(x) or not self.lo <= x <= self.hi:
            self.fail(f"{value} is outside [{self.lo:g}, {self.hi:g}]", param, ctx)
        return x


SIZE = _SizeType()
DEGREES = _FiniteFloat(-360.0, 360.0, "DEG")

#: ``--primaries`` choices: the library's names and their aliases (``srgb``, ``rec709``...).
PRIMARY_CHOICES = PRIMARY_NAMES + tuple(PRIMARY_ALIASES)


class _RenamedOption(click.Option):
    """An option whose later names are old spellings: accepted, but not shown in ``--help``."""

    def get_help_record(self, ctx):
        record = super().get_help_record(ctx)
        if record is None or len(self.opts) < 2:
            return record
        names, text = record
        for old in self.opts[1:]:
            names = names.replace(f", {old}", "")
        return names, text


def _table_options(command):
    """The table options shared by ``build`` and ``batch`` (the keywords of build_table)."""
    options = (
        click.option("--size", type=SIZE, default=None, help="Table grid WIDTHxHEIGHT (area-weighted, "
                     "power-preserving reduction); default: the map's own size."),
        click.option("--primaries", type=click.Choice(PRIMARY_CHOICES, case_sensitive=False), default="bt709",
                     show_default=True, help="Luminance weights the table follows."),
        click.option("--mapping", type=click.Choice(MAPPINGS), default="equal-area",
                     show_default=True, help="Placement within a cell: equal-area (pdf constant per cell) or uv-linear."),
        click.option("--uniform-mix", type=click.FloatRange(0.0, 1.0, max_open=True), default=0.0, show_default=True,
                     metavar="F", help="Weight of uniform sphere sampling mixed in, so the pdf is never zero."),
        click.option("--up", type=click.Choice(tuple(UP_AXES)), default="y", show_default=True, help="World up axis."),
        click.option("--rotation", "--rotate", "rotation_deg", cls=_RenamedOption, type=DEGREES, default=0.0,
                     show_default=True, help="Rotation of the map about the up axis, degrees."),
    )
    for option in reversed(options):
        command = option(command)
    return command


# --------------------------------------------------------------------------- the group


@click.group("envsample", cls=_Main, context_settings={"help_option_names": ["-h", "--help"], "max_content_width": 100})
@click.version_option(__version__, "--version", prog_name="envsample", message="%(prog)s %(version)s")
@click.option("--debug", is_flag=True, help="Show the traceback of an error (may also follow the command).")
def main(debug):
    """Check equirectangular HDR environment maps, build their importance-sampling
    tables, prove them with MIS validation renders, and write golden vectors for
    checking a renderer's loader; one map at a time or a whole library.

    Angles are given in degrees. Errors print one line and exit with status 2.
    Start with 'envsample demo' to see the whole flow on invented maps.
    """


# --------------------------------------------------------------------------- build


@main.command()
@click.argument("map_path", metavar="MAP", type=click.Path(dir_okay=False, path_type=Path))
@click.option("-o", "--output", "prefix", required=True, metavar="PREFIX",
              help="Table prefix: writes PREFIX.npz and PREFIX.json (and PREFIX.bin with --raw). "
                   "An existing folder (or a path ending in '/') gets the map's name. "
                   "Missing folders are created, but only once the map has passed every check.")
@_table_options
@click.option("--compensate", is_flag=True, help="MIS-compensated table (sphere-mean luminance subtracted); "
              "valid only inside an MIS combination.")
@click.option("--tune", is_flag=True, help="Run a short pilot and store the best one-sample MIS selection "
              "(heuristic, table fraction, measured variance ratio) in the table's metadata.")
@click.option("--raw", is_flag=True, help="Also write PREFIX.bin: little-endian arrays at offsets listed in the JSON.")
@click.option("--repair", is_flag=True, help="Replace NaN/Inf pixels with 0 (and say how many) instead of refusing.")
@click.option("--allow-aspect", is_flag=True, help="Accept a map that is not 2:1.")
@click.option("--layer", default=None, metavar="NAME", help="EXR layer to read when the file has several.")
def build(map_path, prefix, size, primaries, mapping, uniform_mix, up, rotation_deg, compensate, tune, raw, repair,
          allow_aspect, layer):
    """Build the sampling table of MAP (.exr or .hdr).

    The map is read and checked (HDR, finite, 2:1, at least 8x4; negative
    values are clamped and counted) before anything is written. Existing
    table files with the same prefix are replaced atomically.
    """
    from envsample.pipeline.workflow import build_from_file

    printed: list[str] = []
    stages = ("read", "check", "build", "tune", "save") if tune else ("read", "check", "build", "save")
    with _warnings_as_lines(printed), _progress_bar(len(stages), "build") as bar:
        def progress(label):
            bar.n = stages.index(label) if label in stages else bar.n
            bar.set_description(label)

        result = build_from_file(
            map_path, prefix, raw=raw, repair=repair, allow_aspect=allow_aspect, layer=layer, progress=progress,
            size=size, primaries=primaries.lower(), mapping=mapping, uniform_mix=uniform_mix, up=up,
            rotation_deg=rotation_deg, compensate=compensate, tune=tune,
        )
        printed.extend(result.notes)
    t, img = result.table, result.image
    opts = [t.mapping, f"primaries {t.primaries}", f"up {t.up}", f"rotation {t.rotation_deg:g} deg"]
    if t.uniform_mix:
        opts.append(f"uniform mix {t.uniform_mix:g}")
    if t.compensated:
        opts.append("compensated (valid only inside MIS)")
    rows = [
        ("map", f"{img.path}  {img.width}x{img.height} {img.format} {img.pixel_type}, sha256 {img.sha256[:12]}"),
        ("table", f"{t.table_width}x{t.table_height} cells, " + ", ".join(opts)),
        ("integral", _rgb_line(t.integrals["rgb"], t.integrals["luminance"]) + "  (map units x sr)"),
        ("time", f"{result.seconds:.2f} s to build"),
    ]
    rec = t.metadata.get("recommendation")
    if rec:
        rows.append(("tuned", f"one-sample MIS, {rec['heuristic']} heuristic, table fraction {rec['table_fraction']:g}: "
                              f"variance {rec['variance_ratio']:.3g}x the default (balance, 0.5) "
                              f"+- {rec['variance_ratio_se']:.2g}"))
    for k, note in enumerate(result.notes):
        rows.append(("note" if k == 0 else "", _flags(note)))
    for k, p in enumerate(result.paths):
        rows.append(("wrote" if k == 0 else "", f"{p}  ({_bytes(p.stat().st_size)})"))
    _rows(rows)
    click.echo(f"({caution('integrals')})")


# --------------------------------------------------------------------------- inspect


def _is_table(path: Path) -> bool:
    if path.suffix.lower() in (".json", ".npz", ".bin"):
        return True
    return not path.suffix and path.with_name(path.name + ".json").exists()


def _print_map_facts(f: dict) -> None:
    rng = f["range"]
    integ = f["integrals"]
    b = f["brightest"]
    size = f"{f['width']}x{f['height']}" + ("" if f["width"] == 2 * f["height"] else "  (not 2:1)")
    kind = f"{f['format']}, {f['pixel_type']}, channels {' '.join(f['channels'] or [])}"
    if f.get("compression"):
        kind += f", {f['compression']} compression"
    if f.get("file_bytes") is not None:
        kind += f", {_bytes(f['file_bytes'])}"
    if not f["is_hdr"]:
        kind += "  (LDR)"
    bad = []
    if f["non_finite_values"]:
        bad.append(f"{f['non_finite_values']} NaN/Inf values (counted as 0 below)")
    if f["negative_values"]:
        bad.append(f"{f['negative_values']} negative values")
    verdict = "ok" if f["build"]["ok"] else "refused: " + _flags(f["build"]["problem"])
    if f["build"]["ok"] and f["build"]["notes"]:
        verdict += " (" + "; ".join(_flags(n) for n in f["build"]["notes"]) + ")"
    chroma = f.get("chromaticities")
    _rows([
        ("map", f["path"]),
        ("file", kind),
        ("sha256", f["sha256"]),
        ("size", size),
        ("range", "  ".join(f"{c} {_num(lo)}..{_num(hi)}" for c, lo, hi in zip("RGB", rng["min"], rng["max"]))),
        ("pixels", "; ".join(bad) if bad else None),
        ("primaries", None if chroma is None else "file says " + ", ".join(
            f"{k} ({v[0]:.4f}, {v[1]:.4f})" for k, v in chroma.items())),
        ("integral", _rgb_line(integ["rgb"], integ["luminance"], integ["primaries"]) + "  (map units x sr)"),
        ("brightest", f"{_direction_text(b)}  (pixel row {b['row']}, col {b['col']}; Y {_num(b['luminance'])})"),
        ("build", verdict),
    ])
    click.echo(f"({f['caution']})")


def _print_table_facts(f: dict) -> None:
    o, integ, big = f["options"], f["integrals"], f["largest_cell"]
    conv = f["convention"]
    opts = [f["mapping"], f"primaries {f['primaries']}", f"up {conv['up_axis']}",
            f"rotation {float(conv['rotation_deg']):g} deg"]
    if o.get("uniform_mix"):
        opts.append(f"uniform mix {o['uniform_mix']:g}")
    if f["valid_only_inside_mis"]:
        opts.append("compensated: valid only inside MIS")
    src = f.get("source") or {}
    source = None
    if src:
        source = f"{Path(src['path']).name if src.get('path') else '(in memory)'}"
        if src.get("sha256"):
            source += f"  sha256 {src['sha256'][:12]}"
    rows = [
        ("table", f["path"]),
        ("schema", f"{f['schema']}, written by envsample {f['tool_version']}"),
        ("source", source),
        ("size", f"image {f['image']['width']}x{f['image']['height']}, "
                 f"table {f['table']['width']}x{f['table']['height']} cells"),
        ("options", ", ".join(opts)),
        ("integral", _rgb_line(integ["rgb"], integ["luminance"], f["primaries"]) + "  (map units x sr)"),
        ("cells", f"{f['nonzero_cells']} of {f['cells']} have nonzero probability "
                  f"({100.0 * f['nonzero_cells'] / f['cells']:.1f}%)"),
        ("largest", f"p {_num(big['probability'])} ({_num(big['pdf_per_sr'])} /sr) at {_direction_text(big)}"),
    ]
    if f.get("recommendation"):
        rows.append(("advice", json.dumps(f["recommendation"])))
    for k, note in enumerate(f["notes"]):
        rows.append(("note" if k == 0 else "", note))
    for k, item in enumerate(f["files"]):
        rows.append(("files" if k == 0 else "", f"{item['path']}  ({_bytes(item['bytes'])})"))
    _rows(rows)
    click.echo(f"({f['caution']})")


@main.command("inspect")
@click.argument("target", metavar="MAP_OR_TABLE", type=click.Path(path_type=Path))
@click.option("--json", "as_json", is_flag=True, help="Print the facts as JSON.")
@click.option("--primaries", type=click.Choice(PRIMARY_CHOICES, case_sensitive=False), default="bt709",
              show_default=True, help="Luminance weights for a map's Y integral and brightest pixel.")
@click.option("--up", type=click.Choice(["y", "z"]), default="y", show_default=True,
              help="Up axis for a map's direction vectors (azimuth and elevation do not depend on it).")
@click.option("--layer", default=None, metavar="NAME", help="EXR layer to read when the file has several.")
def inspect_command(target, as_json, primaries, up, layer):
    """Show the facts of a map or of a saved table.

    MAP_OR_TABLE is a map (.exr, .hdr, or an LDR image, which build refuses),
    or a table given by its prefix or its .json/.npz/.bin file. A table is
    loaded and verified (checksums, shapes, CDFs) on the way.
    """
    from envsample.pipeline.workflow import map_facts, table_facts

    if _is_table(target):
        facts = table_facts(target)
        show = _print_table_facts
    else:
        from envsample.io.maps import read_map

        facts = map_facts(read_map(target, layer=layer), primaries=primaries.lower(), up=up)
        show = _print_map_facts
    if as_json:
        _echo_json(facts)
    else:
        show(facts)


# --------------------------------------------------------------------------- vectors


@main.command()
@click.argument("table_path", metavar="TABLE", type=click.Path(path_type=Path))
@click.option("-o", "--output", "output", required=True, type=click.Path(dir_okay=False, path_type=Path),
              metavar="FILE", help="JSON file to write (atomically; missing folders are created).")
@click.option("--count", "-n", type=click.IntRange(1, 100_000), default=256, show_default=True,
              help="Number of vectors.")
@click.option("--seed", "-s", type=click.IntRange(0, None), default=0, show_default=True,
              help="Seed of numpy.random.default_rng that draws the uniforms.")
@click.option("--method", type=click.Choice(["inverse", "alias", "both"]), default="both", show_default=True,
              help="Cell choice to record.")
def vectors(table_path, output, count, seed, method):
    """Write golden test vectors of a saved TABLE (prefix or its .json).

    Each vector holds the two uniforms u that went in and, per method, the
    direction, pdf (per steradian), cell index and radiance that came out. A
    loader in another language reads the same table, feeds it the same u and
    must give the same results. The same seed always writes the same file.
    """
    from envsample.io.tables import table_paths
    from envsample.pipeline.workflow import check_output_folder, golden_vectors, write_vectors
    from envsample.sampling.table import load_table

    check_output_folder(output)
    table = load_table(table_path)
    doc = golden_vectors(table, count=count, seed=seed, method=method, table_json=table_paths(table_path)["json"])
    path = write_vectors(output, doc)
    _rows([
        ("table", f"{table_paths(table_path)['json']}  ({table.table_width}x{table.table_height} cells, "
                  f"{table.mapping})"),
        ("vectors", f"{count} x {', '.join(doc['methods'])}, seed {seed}"),
        ("wrote", f"{path}  ({_bytes(path.stat().st_size)})"),
    ])


# --------------------------------------------------------------------------- sky


#: CLI option -> (make_sky keyword, the kinds that take it).
SKY_OPTIONS = {
    "azimuth": ("azimuth_deg", ("sun",)),
    "elevation": ("elevation_deg", ("sun",)),
    "sun_illuminance": ("sun_illuminance", ("sun",)),
    "sky_model": ("sky", ("sun",)),
    "zenith": ("zenith_luminance", ("overcast", "sun")),
    "ground_albedo": ("ground_albedo", ("overcast", "sun")),
    "radiance": ("radiance", ("uniform",)),
    "background": ("background", ("studio",)),
    "lights": ("lights", ("studio",)),
}


def _flag_name(option: str) -> str:
    return "--light" if option == "lights" else "--" + option.replace("_", "-")


def _parse_light(text: str):
    parts = text.split(",")
    try:
        values = [float(p) for p in parts]
    except ValueError:
        values = []
    if len(values) != 5 or not all(math.isfinite(v) for v in values):
        raise click.BadParameter(
            f"{text!r} is not AZ0,AZ1,EL0,EL1,RADIANCE (degrees and a radiance, e.g. -50,-20,20,50,5)",
            param_hint="'--light'",
        )
    a0, a1, e0, e1, radiance = values
    return ((a0, a1), (e0, e1), radiance)


def _sky_kinds():
    from envsample.synth.skies import sky_kinds

    return sky_kinds()


def _sky_help() -> str:
    from envsample.synth.skies import SKY_DESCRIPTIONS

    return "\n".join(f"{k:<16}{v}" for k, v in SKY_DESCRIPTIONS.items())


@main.command()
@click.argument("kind", metavar="KIND", type=click.Choice(_sky_kinds()))
@click.option("-o", "--output", "output", required=True, type=click.Path(dir_okay=False, path_type=Path),
              metavar="MAP", help="Map to write: .exr or .hdr (atomically; missing folders are created).")
@click.option("--size", type=SIZE, default="1024x512", show_default=True, help="Map size WIDTHxHEIGHT.")
@click.option("--pixel-type", type=click.Choice(["half", "float"]), default="half", show_default=True,
              help="EXR pixel type (.hdr is always RGBE).")
@click.option("--azimuth", type=DEGREES, default=None, help="sun: azimuth, degrees (0 = image centre, + to the right).")
@click.option("--elevation", type=_FiniteFloat(-90.0, 90.0, "DEG"), default=None, help="sun: elevation, degrees.")
@click.option("--sun-illuminance", type=_FiniteFloat(0.0, math.inf, "E"), default=None,
              help="sun: illuminance on a surface facing the sun (map units x sr).")
@click.option("--sky-model", type=click.Choice(["clear", "overcast", "none"]), default=None,
              help="sun: the sky behind the sun.")
@click.option("--zenith", type=_FiniteFloat(0.0, math.inf, "L"), default=None,
              help="overcast, sun: zenith radiance of the sky.")
@click.option("--ground-albedo", type=_FiniteFloat(0.0, 1.0, "A"), default=None,
              help="overcast, sun: albedo of a Lambertian ground lit by the sky (default: black ground).")
@click.option("--radiance", type=_FiniteFloat(0.0, math.inf, "L"), default=None, help="uniform: the radiance.")
@click.option("--background", type=_FiniteFloat(0.0, math.inf, "L"), default=None,
              help="studio: background radiance.")
@click.option("--light", "lights", multiple=True, metavar="AZ0,AZ1,EL0,EL1,L",
              help="studio: a rectangular light from azimuth AZ0 to AZ1 and elevation EL0 to EL1 (degrees) "
                   "with radiance L; repeat for more lights.")
def sky(kind, output, size, pixel_type, **given):
    """Write an analytic map of the given KIND.

    \b
    KIND is one of:
    {kinds}

    Options apply to the kinds named in their help; others are refused.
    """
    from envsample.core.constants import HALF_FLOAT_MAX
    from envsample.io.maps import supported_extensions, write_map
    from envsample.pipeline.workflow import check_output_folder
    from envsample.synth.skies import make_sky, sun_position

    if output.suffix.lower() not in supported_extensions(write=True):
        raise click.BadParameter(f"{output}: write .exr or .hdr", param_hint="'-o' / '--output'")
    check_output_folder(output)
    options = {}
    for name, value in given.items():
        if value is None or value == ():
            continue
        keyword, kinds = SKY_OPTIONS[name]
        if kind not in kinds:
            valid = [_flag_name(n) for n, (_, ks) in SKY_OPTIONS.items() if kind in ks]
            raise click.UsageError(
                f"{_flag_name(name)} does not apply to sky '{kind}'; options for it: {', '.join(valid) or 'none'}"
            )
        options[keyword] = [_parse_light(v) for v in value] if name == "lights" else value
    width, height = size
    rgb = make_sky(kind, width=width, height=height, **options)
    peak = float(rgb.max())
    if output.suffix.lower() == ".exr" and pixel_type == "half" and peak > HALF_FLOAT_MAX:
        raise click.UsageError(
            f"{output}: the map peaks at {peak:.4g}, above the half-float maximum 65504; use --pixel-type float"
        )
    output.parent.mkdir(parents=True, exist_ok=True)
    path = write_map(output, rgb, pixel_type=pixel_type)
    from envsample.pipeline.workflow import map_integrals

    per_rgb, y, _ = map_integrals(rgb, "bt709")
    sun = sun_position(kind, **options)
    what = f"{width}x{height} {kind}" + ("" if path.suffix.lower() == ".hdr" else f", {pixel_type} EXR")
    _rows([
        ("map", what),
        ("sun", None if sun is None else f"azimuth {sun[0]:g} deg, elevation {sun[1]:g} deg"),
        ("peak", _num(peak)),
        ("integral", _rgb_line(per_rgb, y, "bt709") + "  (map units x sr)"),
        ("wrote", f"{path}  ({_bytes(path.stat().st_size)})"),
    ])
    click.echo(f"({caution('integrals')})")


sky.help = inspect.cleandoc(sky.help).replace("{kinds}", _sky_help())


# --------------------------------------------------------------------------- verify


@main.command()
@click.argument("source", metavar="MAP_OR_TABLE", required=False, type=click.Path(path_type=Path))
@click.option("-o", "--output", "outdir", type=click.Path(file_okay=False, path_type=Path),
              help="Report folder (created if missing): metrics.json, EXR images, PNG pictures.")
@click.option("--spp", type=click.IntRange(1, 1 << 16), default=64, show_default=True,
              help="Samples per normal for each estimator.")
@click.option("--normals", type=SIZE, default="128x64", show_default=True,
              help="Grid of normals WIDTHxHEIGHT (a lat-long image of normals).")
@click.option("--estimators", default=None, metavar="LIST",
              help="Comma-separated estimator names (default: all irradiance estimators; see 'envsample verify --list').")
@click.option("--roughness", type=click.FloatRange(1e-4, 1.0), default=None,
              help="Also check glossy GGX reflection at this roughness (alpha).")
@click.option("--seed", type=click.IntRange(0, None), default=0, show_default=True, help="Random seed (recorded).")
@click.option("--table-size", type=SIZE, default=None, help="Table grid when SOURCE is a map (default: its size).")
@click.option("--no-sphere", is_flag=True, help="Skip the picture of a shaded sphere.")
@click.option("--list", "list_only", is_flag=True, is_eager=True, expose_value=True,
              help="List the estimator names and exit.")
def verify(source, outdir, spp, normals, estimators, roughness, seed, table_size, no_sphere, list_only):
    """Render irradiance over a sphere of normals with every sampling strategy and
    MIS combination, compare with the exact reference, and say which is best.

    Writes metrics.json (relative RMSE, bias with its standard error, variance,
    firefly index, time per sample, efficiency, the recommended estimator), EXR
    images of the reference and each estimate, error heat maps and a convergence plot.
    """
    from envsample.estimation.estimators import estimators as estimator_names
    from envsample.validation.verify import verify_map

    if list_only:
        click.echo("\n".join(estimator_names("irradiance")))
        return 0
    if source is None or outdir is None:
        raise click.UsageError("give MAP_OR_TABLE and -o OUTDIR (or --list)")
    names = None if estimators is None else [e.strip() for e in estimators.split(",") if e.strip()]
    with _progress_bar(0, "verify") as bar:
        def progress(label):
            bar.set_description(label)
            bar.refresh()

        m = verify_map(source, outdir, spp=spp, normals=normals, estimators=names, roughness=roughness, seed=seed,
                       table_size=table_size, sphere=not no_sphere, progress=progress)
    tab = m["table"]
    ref = m["reference"]
    _rows([
        ("verify", f"{source}  (table {tab['cells'][0]}x{tab['cells'][1]}, {tab['mapping']})"),
        ("normals", f"{m['normals']['width']}x{m['normals']['height']} x {m['spp']} spp, seed {m['seed']}"),
        ("reference", f"exact, relative error bound {ref['relative_error_bound']:.1e} ({ref['seconds']:.1f} s)"),
    ])
    click.echo("")
    head = f"{'estimator':<20} {'rel. RMSE':>9}  {'bias +- SE':>17}  {'firefly':>8}  {'ns/sample':>9}  {'efficiency':>10}"
    click.echo(head)
    rec = m["recommended"]
    for name, e in m["estimators"].items():
        bias = f"{e['mean_bias']:+.3f} +- {e['mean_bias_se']:.3f}"
        # An unbiased estimator whose mean is many SE off has missed rare, bright samples (the sun).
        mark = "  <- recommended" if name == rec["estimator"] else ("" if e["bias_consistent_with_zero"]
                                                                   else "  (mean off: misses rare bright light)")
        click.echo(f"{name:<20} {e['relative_rmse']:>9.4g}  {bias:>17}  {e['firefly_index']:>8.3g}  "
                   f"{e['time_per_sample_s'] * 1e9:>9.0f}  {e['efficiency']:>10.3g}{mark}")
    click.echo("")
    _rows([
        ("recommended", f"{rec['estimator']} (highest efficiency among estimators whose bias is within 4 SE; "
                        f"least variance: {rec['lowest_variance']})"),
        ("wrote", f"{outdir}/ (metrics.json and {len(list(Path(outdir).glob('*.exr')))} EXR, "
                  f"{len(list(Path(outdir).glob('*.png')))} PNG files)"),
    ])
    click.echo(f"({m['caution']})")
    return 0


# --------------------------------------------------------------------------- check


@main.command()
@click.argument("maps", metavar="MAP...", nargs=-1, required=True, type=click.Path(dir_okay=False, path_type=Path))
@click.option("--profile", "profile_path", type=click.Path(dir_okay=False, exists=True, path_type=Path), default=None,
              help="Thresholds (TOML); default: the built-in profile (see 'envsample/profiles/default.toml').")
@click.option("--json", "json_path", type=click.Path(dir_okay=False, path_type=Path), default=None, metavar="FILE",
              help="Also write every check with its values as JSON ('-' for standard output).")
@click.option("--html", "html_path", type=click.Path(dir_okay=False, path_type=Path), default=None, metavar="FILE",
              help="Also write one self-contained HTML page for all the maps.")
@click.option("--strict", is_flag=True, help="Exit with status 1 on warnings too.")
@click.option("--only", "only", default=None, metavar="ID,ID",
              help="Run only these checks (comma-separated ids; 'read' always runs).")
def check(maps, profile_path, json_path, html_path, strict, only):
    """Check HDR environment maps before they enter the library.

    Each check has a stable id, a severity (pass, warn, fail), the measured value,
    its threshold, a message and a remedy. Exit status: 0 all pass, 1 any fail
    (with --strict also any warn), 2 unreadable input or usage error.
    Light levels are estimates for asset preparation, not certified lighting calculations.
    """
    from envsample.qa.checks import check_map, format_report, load_profile, report_to_json

    profile = load_profile(profile_path)
    ids = None if only is None else [c.strip() for c in only.split(",") if c.strip()]
    for out in (json_path, html_path):
        if out is not None and str(out) != "-" and not out.parent.exists():
            raise click.UsageError(f"{out.parent}: output folder does not exist; create it first")
    reports = []
    with _progress_bar(len(maps), "checking") as bar:
        for path in maps:
            reports.append(check_map(path, profile=profile, checks=ids))
            bar.update(1)
    click.echo(format_report(reports, color=sys.stdout.isatty()))
    if json_path is not None:
        text = report_to_json(reports) + "\n"
        if str(json_path) == "-":
            click.echo(text, nl=False)
        else:
            from envsample.core.files import atomic_write_text

            atomic_write_text(json_path, text)
            click.echo(f"wrote {json_path}")
    if html_path is not None:
        from envsample.reports.pages import check_page

        check_page(reports, html_path)
        click.echo(f"wrote {html_path}")
    return max(r.exit_code(strict=strict) for r in reports)


# --------------------------------------------------------------------------- batch


@main.command()
@click.argument("sources", metavar="SOURCE...", nargs=-1, required=True)
@click.option("-o", "--output", "outdir", required=True, type=click.Path(file_okay=False, path_type=Path),
              help="Output folder (created if missing): maps/<name>-<sha8>/, summary.csv, summary.json, index.html.")
@click.option("--workers", type=click.IntRange(0, None), default=None,
              help="Worker processes (default: the cores available; 0 runs in this process).")
@click.option("--verify", is_flag=True, help="Also run a small validation render per map.")
@click.option("--force", is_flag=True, help="Redo maps whose outputs are already up to date.")
@click.option("--scheduler", default=None, metavar="ADDRESS",
              help="Send the work to a Dask distributed scheduler (needs 'pip install envsample[dask]').")
@click.option("--profile", "profile_path", type=click.Path(dir_okay=False, exists=True, path_type=Path), default=None,
              help="QA thresholds (TOML); default: the built-in profile.")
@click.option("--strict", is_flag=True, help="Exit with status 1 when any map warns, too.")
@_table_options
def batch(sources, outdir, workers, verify, force, scheduler, profile_path, strict, size, primaries, mapping,
          uniform_mix, up, rotation_deg):
    """Check, build tables for (and optionally verify) every map under SOURCE.

    SOURCE is files, folders (searched recursively) or glob patterns. Each map's
    outputs appear in OUTDIR only when complete, so an interrupted batch can be
    rerun to resume; maps whose source and options are unchanged are skipped.
    Source files are never modified. Exit status: 0 every map passed or warned,
    1 any map failed or could not be read (with --strict also any warning), 2 usage
    error, 130 interrupted.
    """
    from envsample.pipeline.batch import BatchInterrupted, run_batch
    from envsample.qa.checks import load_profile

    profile = load_profile(profile_path)
    options = {"size": size, "primaries": primaries.lower(), "mapping": mapping, "uniform_mix": uniform_mix,
               "up": up, "rotation_deg": rotation_deg}
    bar = _progress_bar(0, "maps")

    def progress(p):
        bar.total = p.total
        bar.n = p.done
        c = p.counts
        bar.set_postfix_str(f"pass {c['pass']} warn {c['warn']} fail {c['fail']} error {c['error']} "
                            f"up-to-date {c['skipped']}", refresh=True)

    try:
        with bar:
            result = run_batch(list(sources), outdir, workers=workers, verify=verify, force=force,
                               scheduler=scheduler, options=options, profile=profile, progress=progress)
    except BatchInterrupted as e:
        c = e.result.counts
        click.echo(f"interrupted: {c['done']} of {c['maps']} maps finished (their folders are complete); "
                   "rerun the same command to resume", err=True)
        return 130
    for m in result.maps:
        if m.verdict == "pass":
            continue
        failed, warned = m.figures.get("failed_checks") or [], m.figures.get("warned_checks") or []
        detail = m.error or "; ".join(
            f"{label} {', '.join(ids)}" for label, ids in (("failed:", failed), ("warned:", warned)) if ids)
        click.echo(f"{m.verdict:<5}  {m.source}" + (f"  {detail}" if detail else ""))
    c = result.counts
    click.echo(f"{c['maps']} maps: {c['pass']} pass, {c['warn']} warn, {c['fail']} fail, {c['error']} error "
               f"({c['skipped']} up to date, not redone)")
    for dup in result.duplicates:
        click.echo("duplicate: " + " == ".join(dup["sources"]))
    if result.summary:
        names = ", ".join(Path(p).name for p in result.summary.values())
        click.echo(f"wrote {outdir}/ ({names})")
    return result.exit_code(strict=strict)


# --------------------------------------------------------------------------- demo


@main.command()
@click.argument("outdir", required=False, default="envsample-demo", type=click.Path(file_okay=False, path_type=Path))
@click.option("--width", type=click.IntRange(16, 8192), default=1024, show_default=True,
              help="Width of the generated maps (height is half of it); must be even.")
@click.option("--json", "as_json", is_flag=True, help="Print the summary as JSON.")
def demo(outdir, width, as_json):
    """Run the whole flow on invented maps.

    Writes into OUTDIR (default envsample-demo, created if missing). Generates a late-afternoon rooftop, a product studio and an overcast sky
    as .exr maps, builds their tables (the rooftop's also as raw .bin), writes
    golden vectors for the rooftop and prints a summary. Nothing is downloaded.
    """
    from envsample.synth.demo import demo_steps, run_demo

    if width % 2:
        raise click.BadParameter(f"{width} is odd; the maps are 2:1, give an even width", param_hint="'--width'")
    steps = demo_steps()
    with _warnings_as_lines([]), _progress_bar(len(steps), "demo") as bar:
        def progress(label, done, total):
            bar.set_description(label)
            bar.n = done
            bar.refresh()

        summary = run_demo(outdir, width=width, steps=steps, progress=progress)
    if as_json:
        _echo_json(summary)
        return
    _print_demo(summary)


def _print_demo(s: dict) -> None:
    header = ("map", "size", "integral Y", "brightest (az, el)", "table", "build", "check", "best sampling (rel. RMSE)")
    checks = s.get("extra", {}).get("checks", {})
    verified = s.get("extra", {}).get("verify", {})
    lines = []
    for m in s["maps"]:
        if "size" not in m:
            continue
        b = m["brightest"]
        v = verified.get(m["name"])
        lines.append((
            m["name"],
            f"{m['size'][0]}x{m['size'][1]}",
            _num(m["integrals"]["luminance"]),
            f"{b['azimuth_deg']:.1f}, {b['elevation_deg']:.1f} deg",
            f"{m['table_size'][0]}x{m['table_size'][1]}",
            f"{m['build_seconds']:.2f} s",
            checks.get(m["name"], {}).get("verdict", "-"),
            (f"{v['recommended']} ({v['relative_rmse']:.3g}"
             + (f"; cosine {v['cosine_relative_rmse']:.3g})" if v["recommended"] != "cosine" else ")")) if v else "-",
        ))
    widths = [max(len(r[i]) for r in [header] + lines) for i in range(len(header))]
    click.echo(f"demo in {s['outdir']}: invented scenes, generated here ({len(s['files'])} files, "
               f"{s['seconds']:.1f} s)")
    click.echo("")
    for r in [header] + lines:
        click.echo("  ".join(c.ljust(w) for c, w in zip(r, widths)).rstrip())
    click.echo("")
    for m in s["maps"]:
        click.echo(f"{m['name']:<{widths[0]}}  {m['description']}")
    for v in s["vectors"]:
        click.echo(f"golden vectors: {v['path']} ({v['count']}, seed {v['seed']})")
    if checks or verified:
        click.echo(f"reports: {s['outdir']}/reports/<map>/check.html and verify/metrics.json")
    first = next((m for m in s["maps"] if "table_files" in m), None)
    if first is not None:
        json_file = next(p for p in first["table_files"] if p.endswith(".json"))
        click.echo(f"next: envsample inspect {json_file}")
    click.echo(f"({s['caution']})")


if __name__ == "__main__":  # pragma: no cover
    main()
