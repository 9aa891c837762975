"""The batch index page in a real browser: headless Chromium (Debian's ``chromium`` package).

Skipped, with the reason, where no Chromium is installed (``scripts/screenshot.sh`` says how to
install it).  Chromium parses the page (``--dump-dom`` prints the DOM it built, WHATWG HTML) and
takes a screenshot with ``scripts/screenshot.sh``; every link of the parsed page must lead to a page
that exists (relative files) or an element that exists (``#id``), and the rows must come worst
verdict first.  Subprocesses run under a timeout so a browser that hangs fails the test.
"""

from __future__ import annotations

import os
import re
import shutil
import subprocess
from html.parser import HTMLParser
from pathlib import Path
from urllib.parse import unquote

import numpy as np
import pytest

from envsample.io.maps import write_map
from envsample.pipeline.batch import run_batch
from envsample.synth.skies import make_sky

BROWSER = os.environ.get("CHROMIUM", "chromium")
ROOT = Path(__file__).resolve().parents[2]
pytestmark = pytest.mark.skipif(shutil.which(BROWSER) is None,
                                reason=f"{BROWSER} not installed (apt-get install -y chromium; see scripts/screenshot.sh)")
TIMEOUT = 120  # seconds: a safety net for a browser that hangs, not a timing assertion
SEVERITY = {"pass": 0, "warn": 1, "fail": 2, "error": 3}


class _Dom(HTMLParser):
    def __init__(self):
        super().__init__()
        self.hrefs, self.ids, self.rows = [], set(), []

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if "id" in a:
            self.ids.add(a["id"])
        if tag == "a" and "href" in a:
            self.hrefs.append(a["href"])
        if tag == "tr" and (a.get("class") or "").startswith("r-"):
            self.rows.append(a["class"][2:])


@pytest.fixture(scope="module")
def batch_dir(tmp_path_factory):
    lib = tmp_path_factory.mktemp("lib")
    write_map(lib / "sunny.exr", make_sky("sun", width=64), pixel_type="float")
    write_map(lib / "studio.exr", make_sky("studio", width=64))
    write_map(lib / "square.exr", make_sky("sun", width=64, height=64))  # fails the aspect check
    bad = make_sky("overcast", width=64)
    bad[10:12, 20:30] = np.nan
    write_map(lib / "holes.exr", bad, pixel_type="float")  # fails the nan check
    (lib / "broken.exr").write_bytes(b"not an exr")
    out = tmp_path_factory.mktemp("out")
    run_batch([lib], out, workers=0, verify=True)
    return out


def _dom(page: Path) -> _Dom:
    proc = subprocess.run([BROWSER, "--headless", "--no-sandbox", "--disable-gpu", "--no-first-run",
                           "--disable-background-networking", "--disable-component-update", "--disable-sync",
                           f"--user-data-dir={page.parent / '.chromium-profile'}", "--dump-dom", page.as_uri()],
                          capture_output=True, text=True, timeout=TIMEOUT)
    assert proc.returncode == 0 and "</html>" in proc.stdout, proc.stderr[-1000:]
    dom = _Dom()
    dom.feed(proc.stdout)
    return dom


def test_every_link_of_the_index_resolves_to_a_page_or_an_anchor(batch_dir):
    dom = _dom(batch_dir / "index.html")
    assert dom.hrefs
    pages = [h for h in dom.hrefs if not h.startswith("#")]
    assert pages and all(h.endswith(".html") for h in pages), pages  # pages, never JSON
    for h in pages:
        assert (batch_dir / unquote(h)).is_file(), h
    for h in dom.hrefs:
        if h.startswith("#"):
            assert h[1:] in dom.ids, h
    # Each linked page is itself a page the browser can read, with its own links resolving.
    for h in {h for h in pages if h.endswith("report.html")}:
        sub = _dom(batch_dir / unquote(h))
        assert all(not x.startswith(("http:", "https:", "file:")) for x in sub.hrefs)


def test_rows_come_worst_first_grouped_by_verdict(batch_dir):
    dom = _dom(batch_dir / "index.html")
    order = [SEVERITY[v] for v in dom.rows if v in SEVERITY]
    assert len(order) == 5 and order == sorted(order, reverse=True)
    assert {"verdict-error", "verdict-fail"} <= dom.ids
    # The jump list by failing check id leads to the rows that fail it.
    text = (batch_dir / "index.html").read_text()
    assert re.search(r"By failing check:.*aspect \(1\)", text, re.S) and re.search(r"nan \(1\)", text)


def test_a_screenshot_of_the_index_is_taken(batch_dir, tmp_path):
    shot = tmp_path / "index.png"
    proc = subprocess.run(["sh", str(ROOT / "scripts" / "screenshot.sh"), str(batch_dir / "index.html"), str(shot),
                           "1400x1800"], capture_output=True, text=True, timeout=TIMEOUT,
                          env={**os.environ, "CHROMIUM": BROWSER})
    assert proc.returncode == 0, proc.stderr
    data = shot.read_bytes()
    assert data.startswith(b"\x89PNG\r\n\x1a\n") and len(data) > 10_000
    keep = os.environ.get("ENVSAMPLE_SCREENSHOTS")  # set it to keep the pictures for a look
    if keep:
        shutil.copy(shot, Path(keep) / "index.png")
