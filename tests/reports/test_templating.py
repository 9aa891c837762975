"""Tests of envsample.reports.templating: the template environment of the pages.

References: escaping of the HTML syntax (WHATWG HTML Living Standard: ``<``, ``>``, ``&`` and quotes in
attribute values) checked by parsing back with Python's html.parser; the PNG IHDR chunk (ISO/IEC
15948, 11.2.2) for the picture size, read independently with imageio; the templates ship as package
data (``pyproject.toml``).
"""

from __future__ import annotations

import base64
from html.parser import HTMLParser

import imageio.v3 as iio
import numpy as np
import pytest

from envsample.errors import EnvsampleError
from envsample.reports.pictures import encode_png
from envsample.reports.templating import TEMPLATES, picture, render, write_page


class _Text(HTMLParser):
    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.text, self.tags = [], []

    def handle_starttag(self, tag, attrs):
        self.tags.append(tag)

    def handle_data(self, data):
        self.text.append(data)


def test_every_value_is_escaped_and_comes_back_unchanged():
    hostile = '</title><script>alert("x")</script> & <b>'
    page = render("verify.html", title=hostile, v={"folder": hostile, "rows": [], "recommendation": None,
                                                    "glossy_rows": [], "wide": [], "other": [], "notes": [hostile]},
                  state="pass", summary=hostile, caution="c")
    p = _Text()
    p.feed(page)
    assert "script" not in p.tags and "b" not in p.tags
    assert hostile in "".join(p.text)


def test_a_missing_value_is_an_error_not_an_empty_string():
    import jinja2

    with pytest.raises(jinja2.UndefinedError):
        render("verify.html", title="t")


def test_picture_gives_the_data_uri_and_the_png_size():
    img = np.zeros((7, 13, 3), np.uint8)
    pic = picture(encode_png(img), "seven by thirteen")
    assert (pic["width"], pic["height"], pic["alt"]) == (13, 7, "seven by thirteen")
    data = base64.b64decode(pic["uri"].split(",", 1)[1], validate=True)
    assert iio.imread(data, extension=".png").shape == (7, 13, 3)
    with pytest.raises(ValueError, match="not a PNG"):
        picture(b"GIF89a", "no")


def test_templates_and_style_sheet_are_package_files():
    assert {p.name for p in TEMPLATES.iterdir()} >= {"base.html", "check.html", "index.html", "verify.html",
                                                     "macros.html", "map_section.html", "verify_section.html",
                                                     "style.css"}


def test_write_page_needs_its_folder(tmp_path):
    with pytest.raises(EnvsampleError, match="does not exist; create it first"):
        write_page(tmp_path / "no" / "p.html", "<p>x</p>")
    assert write_page(tmp_path / "p.html", "<p>é</p>").read_text(encoding="utf-8") == "<p>é</p>"
