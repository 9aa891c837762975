"""Helpers of the command-line tests (tests/cli): small invented maps and the one-line error check."""

from __future__ import annotations

import json

import numpy as np

from envsample.cli.app import EXIT_USER_ERROR
from envsample.io.maps import write_map

#: The size of the small test maps (rows, columns).
H, W = 32, 64


def write_test_map(path, rgb, pixel_type="float"):
    """Write ``rgb`` to ``path`` as a map and return the path."""
    write_map(path, np.asarray(rgb, dtype=np.float32), pixel_type=pixel_type)
    return path


def gradient(h=H, w=W):
    """Invented positive test map with one bright pixel (row 5, col 40)."""
    rng = np.random.default_rng(11)
    rgb = rng.uniform(0.1, 1.0, size=(h, w, 3)).astype(np.float32)
    rgb[5, 40] = (400.0, 300.0, 200.0)
    return rgb


def json_of(result):
    """The JSON a successful command printed."""
    assert result.exit_code == 0, result.output
    return json.loads(result.stdout)


def assert_one_line_error(result, match, *, alone=False):
    """A usage error: exit status 2 and one ``error: ...`` line on stderr holding ``match``, no traceback.

    ``alone``: nothing else printed at all (a library's own chatter on stdout would fail it).
    """
    assert result.exit_code == EXIT_USER_ERROR, result.output
    err = result.stderr.strip()
    assert err.startswith("error: "), err
    assert "\n" not in err, err
    assert "Traceback" not in result.output
    assert match in err, err
    if alone:
        lines = [ln for ln in result.output.splitlines() if ln.strip()]
        assert len(lines) == 1 and lines[0].startswith("error: ") and match in lines[0], result.output


def ldr_png(d):
    """An 8-bit PNG (an LDR image, refused as a map) in folder ``d``."""
    import cv2

    p = d / "ldr.png"
    cv2.imwrite(str(p), np.full((H, W, 3), 128, np.uint8))
    return p


def nan_map(d):
    """A map in folder ``d`` with one NaN and one +Inf value in two pixels."""
    rgb = gradient()
    rgb[3, 4, 1] = np.nan
    rgb[7, 9, 0] = np.inf
    return write_test_map(d / "nan.exr", rgb)
