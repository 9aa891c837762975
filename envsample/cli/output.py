"""How commands print: aligned ``key  value`` rows, numbers, sizes, warnings as lines, progress bars.

Progress bars (tqdm) go to stderr and only appear on a terminal.
"""

from __future__ import annotations

import contextlib
import json
import sys
import warnings

import click

from envsample.cli.app import flags
from envsample.core.text import number, one_line
from envsample.errors import EnvsampleWarning


@contextlib.contextmanager
def warnings_as_lines(notes_seen: list[str]):
    """Collect envsample warnings and print each once as ``warning: ...``, unless a printed note says it."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", EnvsampleWarning)
        try:
            yield
        finally:
            for w in caught:
                text = one_line(str(w.message))
                if issubclass(w.category, EnvsampleWarning):
                    if not any(n and n in text for n in notes_seen):
                        click.echo(f"warning: {flags(text)}", err=True)
                else:
                    warnings.showwarning(w.message, w.category, w.filename, w.lineno)


def progress_bar(total: int, desc: str):
    """A tqdm bar on stderr, shown only when stderr is a terminal."""
    from tqdm import tqdm

    return tqdm(total=total, desc=desc, file=sys.stderr, leave=False, disable=not sys.stderr.isatty(),
                bar_format="{desc} {bar} {n_fmt}/{total_fmt} [{elapsed}]")


def print_rows(pairs, *, out=None) -> None:
    """Print ``key  value`` lines with the values aligned; a key of "" continues the previous key."""
    pairs = [(k, v) for k, v in pairs if v is not None]
    width = max((len(k) for k, _ in pairs), default=0)
    for key, value in pairs:
        click.echo(f"{key:<{width}}  {value}", file=out)


def num(x: float) -> str:
    """A compact number (4 significant digits), written as in every report (:func:`envsample._text.number`)."""

    return number(x, 4)


def size_text(n: int) -> str:
    for unit, scale in (("GB", 1 << 30), ("MB", 1 << 20), ("kB", 1 << 10)):
        if n >= scale:
            return f"{n / scale:.1f} {unit}"
    return f"{n} B"


def rgb_line(rgb, y=None, primaries=None) -> str:
    text = "  ".join(f"{c} {num(v)}" for c, v in zip("RGB", rgb))
    if y is not None:
        text += f"  Y {num(y)}" + (f" ({primaries})" if primaries else "")
    return text


def direction_text(d: dict) -> str:
    return f"azimuth {d['azimuth_deg']:.1f} deg, elevation {d['elevation_deg']:.1f} deg"


def echo_json(doc) -> None:
    click.echo(json.dumps(doc, indent=2))
