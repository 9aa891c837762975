"""Tests of envsample.pictures.

Sources: the sRGB transfer function of IEC 61966-2-1:1999 (written out here from the
standard's formula, and colour-science's ``eotf_inverse_sRGB`` as a reference library);
Reinhard et al. (2002) eq. 1-3 for the exposure; the PNG signature of ISO/IEC 15948;
imageio as an independent PNG reader.
"""

from __future__ import annotations

import base64
import math
import subprocess
import sys

import imageio.v3 as iio
import numpy as np
import pytest

from envsample.reports import pictures as P

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # ISO/IEC 15948, section 5.2


def _iec_srgb(x: float) -> float:
    """IEC 61966-2-1:1999 encoding, written from the standard: 12.92 L below 0.0031308, else 1.055 L^(1/2.4) - 0.055."""
    return 12.92 * x if x <= 0.0031308 else 1.055 * x ** (1.0 / 2.4) - 0.055


# ---------------------------------------------------------------------------
# sRGB transfer function
# ---------------------------------------------------------------------------

@pytest.mark.parametrize("x", [0.0, 0.001, 0.0031308, 0.0031309, 0.01, 0.18, 0.5, 0.9, 1.0])
def test_srgb_encode_matches_iec_formula(x):
    assert math.isclose(float(P.srgb_encode(x)), _iec_srgb(x), rel_tol=1e-12, abs_tol=1e-15)


def test_srgb_knee_is_continuous_and_endpoints_exact():
    """At the 0.0031308 knee both branches give 0.04045 (IEC 61966-2-1); 0 -> 0 and 1 -> 1."""
    lin = 12.92 * 0.0031308
    powr = 1.055 * 0.0031308 ** (1 / 2.4) - 0.055
    assert math.isclose(lin, powr, abs_tol=1e-7)
    assert math.isclose(float(P.srgb_encode(0.0031308)), 0.0404499, abs_tol=1e-7)
    assert float(P.srgb_encode(0.0)) == 0.0
    assert math.isclose(float(P.srgb_encode(1.0)), 1.0, rel_tol=1e-12)


def test_srgb_encode_agrees_with_colour_science():
    """Reference library: colour.models.eotf_inverse_sRGB over [0, 1]."""
    colour = pytest.importorskip("colour")
    x = np.linspace(0.0, 1.0, 1001)
    np.testing.assert_allclose(P.srgb_encode(x), colour.models.eotf_inverse_sRGB(x), atol=1e-12)


def test_srgb_encode_clips_and_handles_nan():
    np.testing.assert_allclose(P.srgb_encode([-1.0, np.nan, 2.0, np.inf]), [0.0, 0.0, 1.0, 1.0], atol=1e-15)


# ---------------------------------------------------------------------------
# tone mapping
# ---------------------------------------------------------------------------

def test_tonemap_dtype_shape_range_with_bad_pixels():
    rng = np.random.default_rng(7)
    img = (rng.lognormal(0.0, 3.0, size=(32, 64, 3))).astype(np.float32)
    img[0, 0] = np.nan
    img[0, 1] = np.inf
    img[0, 2] = -5.0
    out = P.tonemap(img)
    assert out.dtype == np.uint8 and out.shape == (32, 64, 3)
    assert len(np.unique(out)) > 64  # a map spanning many stops keeps many levels, not a flat picture
    assert tuple(out[0, 0]) == (0, 0, 0)  # NaN shows black
    assert tuple(out[0, 2]) == (0, 0, 0)  # negative clamped
    assert out[0, 1].min() > 200  # +Inf is the brightest


@pytest.mark.parametrize("curve", ["reinhard", "clip"])
@pytest.mark.parametrize("exposure", [None, 0.0, -3.0])
def test_tonemap_is_monotonic(curve, exposure):
    ramp = np.logspace(-5, 5, 400)
    img = np.repeat(ramp[None, :, None], 3, axis=2).astype(np.float32)
    out = P.tonemap(img, exposure=exposure, curve=curve)[0, :, 1].astype(int)
    assert np.all(np.diff(out) >= 0)
    assert out[-1] > out[0]


def test_tonemap_stops_and_clip_reach_255():
    """exposure=2 stops on 0.25 gives 1.0 -> 255 through the IEC transfer function."""
    img = np.full((2, 2, 3), 0.25, np.float32)
    assert np.all(P.tonemap(img, exposure=2.0, curve="clip") == 255)
    assert np.all(P.tonemap(img * 4, exposure=0.0, curve="clip") == 255)


@pytest.mark.parametrize("level", [1e-3, 1.0, 250.0])
def test_auto_exposure_maps_log_average_to_key(level):
    """Reinhard et al. (2002) eq. 1-2: a grey image maps to the key 0.18 whatever its level; eq. 3 then gives 0.18/1.18."""
    img = np.full((4, 8, 3), level, np.float32)
    clip = P.tonemap(img, curve="clip")
    assert np.all(clip == round(255 * _iec_srgb(0.18)))
    rein = P.tonemap(img, curve="reinhard")
    assert np.all(rein == round(255 * _iec_srgb(0.18 / 1.18)))


def test_log_average_is_geometric_mean_of_nonblack_pixels():
    """Eq. 1 with negligible delta on two grey levels a, b is sqrt(a*b); black pixels are left out."""
    img = np.zeros((2, 4, 3), np.float32)
    img[0] = 0.5
    img[1, :2] = 8.0
    assert math.isclose(P.log_average_luminance(img), (0.5 ** 4 * 8.0 ** 2) ** (1 / 6), rel_tol=1e-5)
    assert P.log_average_luminance(np.zeros((2, 2, 3), np.float32)) == 0.0
    assert P.tonemap(np.zeros((2, 2, 3), np.float32)).max() == 0


def test_tonemap_rejects_bad_input():
    with pytest.raises(ValueError, match="unknown tone curve 'film'; valid: clip, reinhard"):
        P.tonemap(np.ones((2, 2, 3), np.float32), curve="film")
    with pytest.raises(ValueError, match=r"shape \(\.\.\., 3\)"):
        P.tonemap(np.ones((2, 2), np.float32))
    with pytest.raises(ValueError, match="must be float"):
        P.tonemap(np.ones((2, 2, 3), np.uint8))


def test_thumbnail_averages_in_linear_light():
    """A 2x2 block of (0, 0, 0, 4) becomes 1.0 before tone mapping: exposure 0 + clip -> 255."""
    img = np.zeros((4, 8, 3), np.float32)
    img[1::2, 1::2] = 4.0
    th = P.thumbnail(img, width=4, exposure=0.0, curve="clip")
    assert th.shape == (2, 4, 3)
    assert np.all(th == 255)


# ---------------------------------------------------------------------------
# PNG files and data URIs
# ---------------------------------------------------------------------------

def test_write_png_round_trips_uint8(tmp_path):
    rng = np.random.default_rng(3)
    pic = rng.integers(0, 256, size=(20, 40, 3), dtype=np.uint8)
    path = P.write_png(tmp_path / "sub" / "pic.png", pic)
    data = path.read_bytes()
    assert data.startswith(PNG_SIGNATURE)
    np.testing.assert_array_equal(iio.imread(path), pic)
    assert [p.name for p in path.parent.iterdir()] == ["pic.png"]  # no temporary file left behind
    # Overwriting replaces the file in one step.
    P.write_png(path, pic[::-1].copy())
    np.testing.assert_array_equal(iio.imread(path), pic[::-1])


def test_write_png_tonemaps_float_images(tmp_path):
    img = np.full((8, 16, 3), 3.0, np.float32)
    path = P.write_png(tmp_path / "f.png", img)
    np.testing.assert_array_equal(iio.imread(path), P.tonemap(img))


def test_write_png_rejects_other_dtypes(tmp_path):
    with pytest.raises(ValueError, match="uint8 or float"):
        P.write_png(tmp_path / "x.png", np.zeros((4, 4, 3), np.int32))


def test_png_data_uri_decodes_to_the_file(tmp_path):
    pic = np.arange(4 * 6 * 3, dtype=np.uint8).reshape(4, 6, 3)
    path = P.write_png(tmp_path / "a.png", pic)
    uri = P.png_data_uri(path)
    assert uri.startswith("data:image/png;base64,")
    raw = base64.b64decode(uri.split(",", 1)[1], validate=True)
    assert raw == path.read_bytes()
    from_array = base64.b64decode(P.png_data_uri(pic).split(",", 1)[1])
    np.testing.assert_array_equal(iio.imread(from_array, extension=".png"), pic)


def test_png_data_uri_rejects_non_png(tmp_path):
    bad = tmp_path / "not.png"
    bad.write_bytes(b"GIF89a....")
    with pytest.raises(ValueError, match="not a PNG file"):
        P.png_data_uri(bad)
    with pytest.raises(ValueError, match="cannot read"):
        P.png_data_uri(tmp_path / "missing.png")


# ---------------------------------------------------------------------------
# figures
# ---------------------------------------------------------------------------

def _read_png(path):
    data = path.read_bytes()
    assert len(data) > 1000 and data.startswith(PNG_SIGNATURE)
    return iio.imread(path)


@pytest.mark.parametrize("log", [False, True])
def test_heatmap_figure_writes_a_readable_png(tmp_path, log):
    rng = np.random.default_rng(11)
    a = rng.random((32, 64)) + 0.01
    b = a * 2.0
    b[5, 5] = np.nan
    b[6, 6] = 0.0
    path = P.heatmap_figure([("reference", a), ("estimate", b)], path=tmp_path / "heat.png",
                            label="irradiance (map units)", log=log, title="two panels")
    pic = _read_png(path)
    assert pic.ndim == 3 and pic.shape[1] > pic.shape[0] > 100
    assert np.all(pic[0, 0, :3] == 255)  # white background


def test_heatmap_figure_handles_constant_and_non_latlong_panels(tmp_path):
    path = P.heatmap_figure([("flat", np.ones((10, 13)))], path=tmp_path / "h.png", label="value")
    assert _read_png(path).shape[0] > 50


def test_heatmap_figure_rejects_bad_panels(tmp_path):
    with pytest.raises(ValueError, match="at least one"):
        P.heatmap_figure([], path=tmp_path / "h.png", label="x")
    with pytest.raises(ValueError, match=r"panels\[0\] \(vector\) must be a non-empty 2D array"):
        P.heatmap_figure([("vector", np.ones(5))], path=tmp_path / "h.png", label="x")
    with pytest.raises(ValueError, match="vmin must be > 0"):
        P.heatmap_figure([("a", np.ones((4, 8)))], path=tmp_path / "h.png", label="x", log=True, vmin=0.0)


def test_convergence_plot_writes_a_readable_png(tmp_path):
    spp = [1, 4, 16, 64, 256]
    series = {"table": [0.5, 0.25, 0.12, 0.06, 0.03], "mis": [0.4, 0.2, 0.1, 0.0, np.nan]}
    path = P.convergence_plot(spp, series, path=tmp_path / "conv.png", title="irradiance")
    pic = _read_png(path)
    assert pic.shape[0] > 200 and pic.shape[1] > 300
    assert np.all(pic[0, 0, :3] == 255)


def test_convergence_plot_rejects_mismatched_series(tmp_path):
    with pytest.raises(ValueError, match="series 'a' has 2 values for 3 spp_values"):
        P.convergence_plot([1, 2, 4], {"a": [1.0, 0.5]}, path=tmp_path / "c.png")
    with pytest.raises(ValueError, match="positive sample counts"):
        P.convergence_plot([0, 2], {"a": [1.0, 0.5]}, path=tmp_path / "c.png")


# ---------------------------------------------------------------------------
# markers
# ---------------------------------------------------------------------------

def test_mark_points_draws_a_ring_and_leaves_the_input_alone():
    pic = np.full((32, 64, 3), 100, np.uint8)
    out = P.mark_points(pic, [(0.5, 0.5)], color=(255, 0, 0), radius=6, thickness=2)
    assert np.all(pic == 100)
    assert tuple(out[16, 32]) == (100, 100, 100)  # centre untouched
    ring = np.all(out == (255, 0, 0), axis=2)
    rows, cols = np.nonzero(ring)
    dist = np.hypot(rows + 0.5 - 16, cols + 0.5 - 32)
    assert ring.sum() > 20 and np.all(np.abs(dist - 6) <= 1.0)
    assert np.any(np.all(out == (0, 0, 0), axis=2))  # the outline


def test_mark_points_wraps_across_the_seam():
    pic = np.zeros((32, 64, 3), np.uint8)
    out = P.mark_points(pic, [(0.0, 0.5)], color=(0, 255, 0), radius=4, outline=None)
    green = np.all(out == (0, 255, 0), axis=2)
    assert green[:, :8].any() and green[:, -8:].any()
    assert not green[:, 16:48].any()


def test_mark_points_rejects_float_pictures():
    with pytest.raises(ValueError, match="uint8"):
        P.mark_points(np.zeros((4, 8, 3), np.float32), [(0.5, 0.5)])


def test_import_is_cheap():
    """Importing the module must not import matplotlib (it is loaded inside the drawing functions)."""
    code = "import sys, envsample.reports.pictures; print('matplotlib' in sys.modules)"
    res = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert res.stdout.strip() == "False"


def test_large_heatmap_panels_are_block_averaged_over_valid_values(monkeypatch):
    """Wide panels are reduced by block means of their finite (log: positive) values before drawing."""
    monkeypatch.setattr(P, "_HEATMAP_MAX_COLUMNS", 4)
    a = np.arange(32, dtype=np.float64).reshape(4, 8)
    a[0, 0] = np.nan
    a[2:, 6:] = np.nan
    out = P._reduce_panel(a, log=False)
    assert out.shape == (2, 4)
    assert out[0, 0] == np.mean([1.0, 8.0, 9.0])
    assert np.isnan(out[1, 3])
    assert P._reduce_panel(a, log=True)[0, 0] == np.mean([1.0, 8.0, 9.0])


def test_image_panels_names_each_picture(tmp_path):
    # Two pictures side by side in one PNG that imageio reads back; the figure is wider than one panel.
    import imageio.v3 as iio

    from envsample.reports.pictures import image_panels

    a = np.zeros((40, 40, 3), np.uint8)
    b = np.full((40, 40, 3), 255, np.uint8)
    path = image_panels([("reference", a), ("estimate", b)], path=tmp_path / "p.png", title="t")
    img = iio.imread(path)
    assert img.ndim == 3 and img.shape[1] > 80
    with pytest.raises(ValueError, match="at least one"):
        image_panels([], path=tmp_path / "q.png")


# ---------------------------------------------------------------------------
# rings on heat maps, range overlay, lat-long axes
# ---------------------------------------------------------------------------

def test_ringed_panel_draws_the_ring_around_the_peak_of_the_values():
    values = np.full((32, 64), 1.0)
    values[8, 48] = 100.0  # a peak at u = 48.5/64, v = 8.5/32
    uv = [((48 + 0.5) / 64, (8 + 0.5) / 32)]
    pic = P.ringed_panel(values, [{"uv": uv, "color": (255, 60, 170), "radius": 12.0, "thickness": 3.0}],
                         vmin=1.0, vmax=100.0, log=True, cmap="viridis")
    assert pic.shape == (256, 512, 3)  # enlarged by pixel repetition to about 512 columns
    ring = np.all(pic == (255, 60, 170), axis=2)
    rows, cols = np.nonzero(ring)
    assert ring.sum() > 50
    assert abs((cols + 0.5).mean() - uv[0][0] * 512) < 1.0 and abs((rows + 0.5).mean() - uv[0][1] * 256) < 1.0
    # The peak's colour (the top of viridis) sits inside the ring, untouched.
    assert tuple(pic[8 * 8 + 4, 48 * 8 + 4]) == tuple(P.colorize(np.array([[100.0]]), vmin=1.0, vmax=100.0, log=True,
                                                                  cmap="viridis")[0, 0])


def test_colorize_uses_the_end_colours_and_grey_for_bad_values():
    import matplotlib

    out = P.colorize(np.array([[0.5, 1.0, np.nan, 3.0]]), vmin=0.5, vmax=1.0, cmap="magma")
    top = np.rint(np.array(matplotlib.colormaps["magma"](1.0)[:3]) * 255).astype(np.uint8)
    assert tuple(out[0, 1]) == tuple(top) == tuple(out[0, 3]) and tuple(out[0, 2]) == (212, 212, 212)


def test_range_overlay_marks_each_class_where_it_is():
    rgb = np.full((32, 64, 3), 0.5, np.float32)
    rgb[4:7, 10:13] = 500.0          # a plateau at the clip level
    rgb[20, 40] = [1e6, 0.0, 0.0]    # above the half-float maximum
    rgb[25, 5] = [np.nan, 0.0, 0.0]  # invalid
    rgb[26, 60] = [-1.0, 0.5, 0.5]   # invalid
    pic, counts = P.range_overlay(rgb, clip_level=500.0, clip_tolerance=1e-3, over_level=65504.0, width=64)
    assert counts == {"clipped": 9, "over range": 1, "invalid": 2}
    colors = P.RANGE_COLORS
    assert np.all(pic[4:7, 10:13] == colors["clipped"])
    assert tuple(pic[20, 40]) == colors["over range"] and tuple(pic[25, 5]) == colors["invalid"]
    assert tuple(pic[26, 60]) == colors["invalid"]
    others = np.ones((32, 64), bool)
    others[4:7, 10:13] = others[20, 40] = others[25, 5] = others[26, 60] = False
    assert np.all(pic[others][:, 0] == pic[others][:, 1])  # the rest is grey
    clean, none = P.range_overlay(np.full((32, 64, 3), 0.5, np.float32), over_level=65504.0, width=64)
    assert none == {"clipped": 0, "over range": 0, "invalid": 0} and np.all(clean[..., 0] == clean[..., 2])


def test_range_overlay_keeps_a_single_bad_pixel_when_downsampled():
    rgb = np.full((256, 512, 3), 0.5, np.float32)
    rgb[100, 300] = np.inf
    pic, counts = P.range_overlay(rgb, over_level=65504.0, width=128)
    assert counts["over range"] == 1
    assert tuple(pic[100 // 4, 300 // 4]) == P.RANGE_COLORS["over range"]


def test_latlong_figure_writes_a_png_with_axes(tmp_path):
    pic = np.zeros((32, 64, 3), np.uint8)
    out = P.latlong_figure(pic, path=tmp_path / "map.png", title="map")
    img = iio.imread(out)
    # Axes with labels make the figure larger than the picture and put dark tick text on white.
    assert img.shape[0] > 32 and img.shape[1] > 64 and (img[..., :3] == 255).all(axis=2).mean() > 0.3
