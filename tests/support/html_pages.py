"""Reading the HTML pages envsample writes, for tests: a strict parse and the self-contained checks.

Sources, outside this project:
- the page is parsed by Python's own ``html.parser`` (a tokenizer following the WHATWG HTML
  syntax) and every non-void element must be closed in order (void elements: WHATWG HTML
  Living Standard, section 13.1.2);
- pictures are ``data:`` URIs (RFC 2397) whose base64 payload (RFC 4648) must decode strictly
  (``base64.b64decode(validate=True)``) to a PNG (ISO/IEC 15948 signature) that imageio reads,
  with the pixel size the <img> tag states.
"""

from __future__ import annotations

import base64
import re
from html.parser import HTMLParser
from pathlib import Path

import imageio.v3 as iio
import numpy as np

# Void elements of the HTML syntax (WHATWG HTML Living Standard, 13.1.2): they have no end tag.
VOID = {"area", "base", "br", "col", "embed", "hr", "img", "input", "link", "meta", "source", "track", "wbr"}


class PageParser(HTMLParser):
    """Collects tags, <img> attributes, links and text; records unbalanced end tags."""

    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.stack: list[str] = []
        self.problems: list[str] = []
        self.imgs: list[dict] = []
        self.refs: list[tuple[str, str, str]] = []
        self.text: list[str] = []
        self.ids: list[str] = []
        self.id_cells: list[str] = []
        self.style = ""
        self._in_style = False
        self._in_id_cell = False

    def _open(self, tag, attrs):
        a = {k: (v or "") for k, v in attrs}
        if tag == "img":
            self.imgs.append(a)
        for key in ("src", "href", "action", "poster", "srcset"):
            if key in a:
                self.refs.append((tag, key, a[key]))
        if "id" in a:
            self.ids.append(a["id"])
        self._in_style = tag == "style"
        self._in_id_cell = tag == "td" and "id" in a.get("class", "").split()
        return a

    def handle_starttag(self, tag, attrs):
        self._open(tag, attrs)
        if tag not in VOID:
            self.stack.append(tag)

    def handle_startendtag(self, tag, attrs):
        self._open(tag, attrs)

    def handle_endtag(self, tag):
        if tag in VOID:
            return
        if not self.stack or self.stack[-1] != tag:
            self.problems.append(f"</{tag}> closes {self.stack[-1] if self.stack else 'nothing'}")
            return
        self.stack.pop()
        self._in_style = False
        if tag == "td":
            self._in_id_cell = False

    def handle_data(self, data):
        if self._in_style:
            self.style += data
        else:
            self.text.append(data)
        if self._in_id_cell:
            self.id_cells.append(data)

    @property
    def all_text(self) -> str:
        return " ".join(" ".join(self.text).split())


def parse(path: Path) -> tuple[PageParser, str]:
    raw = path.read_text(encoding="utf-8")
    p = PageParser()
    p.feed(raw)
    p.close()
    assert not p.problems, p.problems[:5]
    assert not p.stack, f"unclosed elements: {p.stack}"
    return p, raw


def decode_png(src: str) -> tuple[bytes, np.ndarray]:
    prefix = "data:image/png;base64,"
    assert src.startswith(prefix), src[:40]
    data = base64.b64decode(src[len(prefix):], validate=True)
    assert data.startswith(b"\x89PNG\r\n\x1a\n")
    return data, iio.imread(data, extension=".png")


def assert_self_contained(p: PageParser, raw: str) -> None:
    """No resource from anywhere else: only data: pictures and in-page anchors; no script, no CSS url()."""
    for tag, key, value in p.refs:
        assert value.startswith(("data:image/png;base64,", "#")), (tag, key, value[:60])
    assert "<script" not in raw.lower()
    assert "url(" not in p.style and "@import" not in p.style
    assert not re.search(r"""(?:src|href)\s*=\s*["']?\s*(?:https?:|file:|//|/)""", raw, re.I)


def assert_images_valid(p: PageParser) -> None:
    assert p.imgs, "the page has no pictures"
    for a in p.imgs:
        _, pic = decode_png(a["src"])
        assert pic.ndim in (2, 3) and pic.shape[0] > 0 and pic.shape[1] > 0
        assert (pic.shape[1], pic.shape[0]) == (int(a["width"]), int(a["height"])), a.get("alt")
        assert a.get("alt"), "every picture has a text alternative"
