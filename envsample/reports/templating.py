"""The template environment of the HTML pages: jinja2 with autoescaping, templates and CSS as package data.

Every value a template prints is escaped (``autoescape=True``: ``&``, ``<``, ``>``, quotes),
so a file name, a message or a profile string can never become markup; only the
templates themselves, which ship with the package (``envsample/reports/templates/``),
contain tags.  Pictures enter pages as PNG ``data:`` URIs (RFC 2397, base64 of RFC 4648)
with their pixel size, so a page is one self-contained file.

References
----------
- Masinter, L. (1998). RFC 2397: The "data" URL scheme. IETF.
- Josefsson, S. (2006). RFC 4648: The Base16, Base32, and Base64 Data Encodings. IETF.
"""

from __future__ import annotations

import functools
from pathlib import Path

from envsample._version import __version__
from envsample.core.files import atomic_write_bytes
from envsample.errors import EnvsampleError
from envsample.reports.pictures import png_data_uri, png_size

__all__ = ["TEMPLATES", "picture", "render", "write_page", "check_folder"]

#: Folder of the templates and the style sheet (package data).
TEMPLATES = Path(__file__).with_name("templates")


@functools.lru_cache(maxsize=1)
def _environment():
    import jinja2

    return jinja2.Environment(loader=jinja2.FileSystemLoader(TEMPLATES), autoescape=True,
                              undefined=jinja2.StrictUndefined, trim_blocks=True, lstrip_blocks=True,
                              keep_trailing_newline=True)


def render(template: str, **context) -> str:
    """Render one of the package's templates with ``context`` (every value is escaped)."""

    return _environment().get_template(template).render(version=__version__, **context)


def picture(data: bytes, alt: str) -> dict:
    """What a template needs to show PNG bytes: the data URI, the pixel size and the text alternative."""

    w, h = png_size(data)
    return {"uri": png_data_uri(data), "width": w, "height": h, "alt": alt}


def check_folder(path) -> None:
    path = Path(path)
    if not path.parent.is_dir():
        raise EnvsampleError(f"{path}: output folder {path.parent} does not exist; create it first")


def write_page(path, text: str) -> Path:
    """Write UTF-8 HTML atomically (temporary file in the same folder, then :func:`os.replace`)."""
    path = Path(path)
    check_folder(path)
    return atomic_write_bytes(path, text.encode("utf-8"))
