"""Tests of envsample.pipeline.verify (verify_map): the validation render of a map into a folder, its files and metrics.

Sources, named per test:
- Lambert's cosine law: a uniform map of radiance L gives E = pi L for every normal, and
  cosine-weighted sampling of it has zero variance (f/p = pi L for every sample; textbook).
- Exact solid angle of a lat-long cell, 2 pi / W (cos theta_i - cos theta_{i+1}) (textbook
  spherical geometry), written out here for the averaging weights.
- ITU-R BT.709 luminance row from colour-science (``colour.RGB_COLOURSPACES["ITU-R BT.709"]``),
  to recompute errors from the EXR files independently of envsample's constants.
- The OpenEXR bindings read the EXR files directly (not through envsample.io).
- Veach (1997) PhD thesis, Theorem 9.2, and the mixture bound of one-sample MIS: with half
  the samples per strategy, the balance heuristic's per-sample variance is at most
  2 sigma_k^2 + mu^2 for any single strategy k.
- The large-sample standard error of a sample variance, (m4 - m2^2)/n (Kendall & Stuart, from memory).

Maps are small (128 x 64), normals 16 x 8, spp 16 (64 for the hard map), so the file runs in seconds.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from envsample.pipeline.verify import load_source, verify_map
from envsample.sampling.table import build_table
from envsample.synth import skies
from envsample.validation.render import DEFAULT_ESTIMATORS

OpenEXR = pytest.importorskip("OpenEXR")

#: Standard errors allowed by statistical comparisons (fixed seeds; a 4-sigma event is ~6e-5 two-sided).
SIGMAS = 4.0
GRID = (16, 8)
SPP = 16

#: Keys of metrics.json that depend on wall time (or are derived from it) and so differ between runs.
TIMING_KEYS = {"seconds", "time_per_sample_s", "samples_per_second", "efficiency", "efficiency_note",
               "reference_seconds", "accuracy_seconds"}


def _read_exr(path) -> np.ndarray:
    with OpenEXR.File(str(path)) as f:
        return np.array(f.channels()["RGB"].pixels)


def _bt709_row() -> np.ndarray:
    colour = pytest.importorskip("colour")
    return np.asarray(colour.RGB_COLOURSPACES["ITU-R BT.709"].matrix_RGB_to_XYZ[1], dtype=np.float64)


def _cell_solid_angles(width: int, height: int) -> np.ndarray:
    """2 pi / W (cos theta_i - cos theta_{i+1}) per row, repeated over the columns; flat (H*W,)."""
    t = np.pi * np.arange(height + 1) / height
    return np.repeat(2.0 * np.pi / width * (np.cos(t[:-1]) - np.cos(t[1:])), width)


def _hard_map() -> np.ndarray:
    """A small (8 deg) very bright sun over a dim overcast sky: the sun holds ~99.9% of the power."""
    return skies.make_sky("sun", width=128, sky="overcast", zenith_luminance=0.01, sun_diameter_deg=8.0,
                          sun_illuminance=50.0, elevation_deg=40.0, azimuth_deg=30.0)


@pytest.fixture(scope="module")
def rooftop_report(tmp_path_factory):
    out = tmp_path_factory.mktemp("rooftop")
    doc = verify_map(skies.make_sky("rooftop", width=128), out, spp=SPP, normals=GRID, seed=11)
    return doc, out


@pytest.fixture(scope="module")
def hard_report(tmp_path_factory):
    out = tmp_path_factory.mktemp("hard")
    doc = verify_map(_hard_map(), out, spp=64, normals=GRID, seed=5, sphere=False,
                     estimators=("cosine", "table", "mis-balance", "one-sample-balance"))
    return doc, out


# ---------------------------------------------------------------------------
# the render on a demo map
# ---------------------------------------------------------------------------

def test_report_writes_every_file(rooftop_report):
    doc, out = rooftop_report
    names = list(doc["estimators"])
    assert names == list(DEFAULT_ESTIMATORS)
    expected = {"map.png", "reference.exr", "convergence.png", "sphere.png", "metrics.json"}
    expected |= {f"estimate_{n}.exr" for n in names}
    expected |= set(doc["files"]["errors"])
    assert len(doc["files"]["errors"]) == math.ceil(len(names) / 4)
    present = {p.name for p in out.iterdir()}
    assert expected <= present
    assert not [p for p in present if p.endswith(".tmp")], "temporary files left behind"
    for name in ("map.png", "convergence.png", "sphere.png", *doc["files"]["errors"]):
        assert (out / name).read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # ISO/IEC 15948 signature


def test_images_have_the_grid_shape_and_finite_values(rooftop_report):
    doc, out = rooftop_report
    w, h = GRID
    ref = _read_exr(out / "reference.exr")
    assert ref.shape == (h, w, 3) and ref.dtype == np.float32
    assert np.all(np.isfinite(ref)) and ref.min() >= 0.0 and ref.max() > 0.0
    for name in doc["estimators"]:
        est = _read_exr(out / f"estimate_{name}.exr")
        assert est.shape == (h, w, 3) and est.dtype == np.float32
        assert np.all(np.isfinite(est)) and est.min() >= 0.0


def test_metrics_json_parses_and_rmse_matches_the_exrs(rooftop_report):
    """Recompute each estimator's relative RMSE and bias from the EXR files.

    Luminance from colour-science's BT.709 row, weights from the exact cell solid angle:
    both independent of envsample.  float32 pixels, float64 arithmetic: agreement to 1e-6.
    """
    doc, out = rooftop_report
    parsed = json.loads((out / "metrics.json").read_text())
    assert parsed["schema"] == "envsample.verify-metrics"
    assert "not certified" in parsed["caution"]
    assert parsed["seed"] == 11 and parsed["spp"] == SPP
    assert (parsed["normals"]["width"], parsed["normals"]["height"]) == GRID
    assert parsed["recommended"]["estimator"] in parsed["estimators"]
    row = _bt709_row()
    wts = _cell_solid_angles(*GRID)
    yr = _read_exr(out / "reference.exr").reshape(-1, 3).astype(np.float64) @ row
    ebar = np.dot(wts, yr) / wts.sum()
    assert parsed["reference"]["mean_luminance"] == pytest.approx(ebar, rel=1e-6)
    for name, entry in parsed["estimators"].items():
        y = _read_exr(out / entry["file"]).reshape(-1, 3).astype(np.float64) @ row
        rmse = math.sqrt(np.dot(wts, (y - yr) ** 2) / wts.sum()) / ebar
        bias = np.dot(wts, y - yr) / wts.sum() / ebar
        assert entry["relative_rmse"] == pytest.approx(rmse, rel=1e-6), name
        assert entry["mean_bias"] == pytest.approx(bias, rel=1e-6, abs=1e-9), name
        for key in ("variance_per_sample", "firefly_index", "time_per_sample_s", "mean_bias_se"):
            assert entry[key] is not None and entry[key] >= 0.0, (name, key)


def test_mis_estimates_are_consistent_with_the_reference(rooftop_report):
    """Every MIS combination is unbiased (Veach 1997, ch. 9): measured bias within 4 SE (+ reference accuracy)."""
    doc, _ = rooftop_report
    for name, e in doc["estimators"].items():
        if e["kind"] != "single":
            assert e["bias_consistent_with_zero"], (name, e["mean_bias"], e["mean_bias_se"])


def test_convergence_follows_the_ladder(rooftop_report):
    doc, _ = rooftop_report
    conv = doc["convergence"]
    assert conv["spp"] == [4, 16, 64]  # 4, 16, 64, ... capped at 4 x spp
    assert len(conv["plotted"]) <= 8 and doc["recommended"]["estimator"] in conv["plotted"]
    # The table's relative RMSE falls with spp (N^-1/2 would be a factor 4 from 4 to 64 spp).
    table = conv["relative_rmse"]["table"]
    assert table[-1] < table[0] / 2.0


@pytest.mark.parametrize("up", ["y", "z"])
def test_sphere_picture_faces_the_camera(up):
    """Convention of envsample.sphere (forward, right, up per up axis, right = forward x up):

    the camera looks along forward, so the centre of the picture shows the normal -forward,
    the right edge +right and the top edge +up; every normal on the disk is a unit vector.
    """
    from envsample.core.sphere import UP_AXES
    from envsample.validation.grid import sphere_normals

    f, r, a = (np.array(v) for v in UP_AXES[up])
    n, mask = sphere_normals(65, up=up)
    np.testing.assert_allclose(n[32, 32], -f, atol=1e-12)
    np.testing.assert_allclose(n[32, 64], r, atol=0.2)
    np.testing.assert_allclose(n[0, 32], a, atol=0.2)
    np.testing.assert_allclose(np.linalg.norm(n[mask], axis=1), 1.0, atol=1e-12)
    assert not mask[0, 0] and np.all(n[~mask] == 0.0)
    assert mask.sum() == pytest.approx(math.pi / 4 * 65 ** 2, rel=0.02)  # disk area


def test_uniform_map_reference_and_zero_variance_cosine(tmp_path):
    """Lambert's cosine law: E = pi L everywhere; cosine sampling of a constant map has zero variance."""
    L = 0.75
    doc = verify_map(skies.make_sky("uniform", width=64, radiance=L), tmp_path, spp=SPP, normals=GRID,
                     estimators=("cosine", "table", "mis-balance"), sphere=False)
    ref = _read_exr(tmp_path / "reference.exr")
    np.testing.assert_allclose(ref, math.pi * L, rtol=1e-6)
    cos = doc["estimators"]["cosine"]
    assert cos["relative_rmse"] < 1e-6 and cos["variance_per_sample"] < 1e-10
    assert doc["estimators"]["table"]["variance_per_sample"] > 1e-3  # f/p = 4 pi L cos varies
    assert doc["recommended"]["estimator"] == "cosine"


# ---------------------------------------------------------------------------
# a map made to be hard
# ---------------------------------------------------------------------------

def test_cosine_has_far_more_fireflies_than_the_table(hard_report):
    """Table samples of a luminance table carry f/p = (integral of Y) cos <= integral of Y, and the mean

    contribution over the sphere of normals is about a quarter of that integral, so the table's
    index is a few units (bounded here by 8, with room for the lat-long grid's unequal weighting).
    A cosine sample that hits the sun carries pi L_sun, about 4 pi / Omega_sun ~ 800 times the mean.
    """
    doc, _ = hard_report
    cos = doc["estimators"]["cosine"]["firefly_index"]
    tab = doc["estimators"]["table"]["firefly_index"]
    assert tab <= 8.0
    assert cos >= 20.0 * tab
    assert doc["estimators"]["cosine"]["largest_sample"]["strategy"] == "cosine"


def test_mis_balance_is_never_much_worse_than_the_best_single_strategy(hard_report):
    """Veach 1997, Theorem 9.2 (and the mixture bound for one-sample MIS), with half the samples each:

    sigma_bal^2 <= 2 sigma_k^2 + mu^2 per sample, for the best single strategy k.  In the metrics'
    units (divided by Ebar^2, solid-angle-weighted over normals) mu^2 becomes
    mean(E_ref^2) / Ebar^2.  Tolerance: the bound itself plus 4 standard errors of the measured
    variances (large-sample formula).  It cannot be tighter: here the table alone is nearly
    exact, and one-sample MIS that spends half its samples elsewhere gets about
    (1/c - 1) mu^2 = mu^2 per sample, which nearly attains the bound.  The best single
    strategy on this map must be the table.
    """
    doc, out = hard_report
    est = doc["estimators"]
    singles = {n: e for n, e in est.items() if e["kind"] == "single"}
    best = min(singles, key=lambda n: singles[n]["variance_per_sample"])
    assert best == "table"
    row = _bt709_row()
    wts = _cell_solid_angles(*GRID)
    yr = _read_exr(out / "reference.exr").reshape(-1, 3).astype(np.float64) @ row
    ebar = np.dot(wts, yr) / wts.sum()
    mu2 = np.dot(wts, yr * yr) / wts.sum() / ebar ** 2
    vb, sb = est[best]["variance_per_sample"], est[best]["variance_per_sample_se"]
    for name in ("mis-balance", "one-sample-balance"):
        v, s = est[name]["variance_per_sample"], est[name]["variance_per_sample_se"]
        assert v <= 2.0 * vb + mu2 + SIGMAS * math.hypot(s, 2.0 * sb), name
        # And in practice far better than the cosine strategy it also uses.
        assert v < est["cosine"]["variance_per_sample"], name


def test_glossy_estimates_agree_with_the_quadrature_reference(tmp_path):
    """GGX (Walter et al. 2007; Heitz 2018 visible normals) estimates of L_o against reference_glossy.

    On a smooth overcast sky (CIE S 003 traditional overcast) every estimator is unbiased
    (Veach 1997, ch. 9), so each view's mean bias is within 4 SE plus the quadrature's accuracy.
    """
    doc = verify_map(skies.make_sky("overcast", width=64), tmp_path, spp=SPP, normals=(8, 4),
                     estimators=("mis-balance",), roughness=0.5, sphere=False)
    g = doc["glossy"]
    assert g["roughness"] == 0.5 and len(g["view_angles_deg"]) == 3
    assert set(g["estimators"]) == {"bsdf", "table", "mis-balance", "mis-power", "one-sample-balance"}
    for name, e in g["estimators"].items():
        assert all(x is not None and math.isfinite(x) for x in e["relative_rmse"]), name
        assert all(e["bias_consistent_with_zero"]), (name, e["mean_bias"], e["mean_bias_se"])
        assert all(v > 0.0 for v in e["variance_per_sample"]), name
    assert g["reference_relative_accuracy"] < 1e-2


# ---------------------------------------------------------------------------
# reproducibility
# ---------------------------------------------------------------------------

def _strip_timings(x):
    if isinstance(x, dict):
        return {k: _strip_timings(v) for k, v in x.items() if k not in TIMING_KEYS}
    if isinstance(x, list):
        return [_strip_timings(v) for v in x]
    return x


def test_same_seed_gives_identical_metrics_and_images(tmp_path):
    rgb = skies.make_sky("product-studio", width=64)
    names = ("table", "mis-power", "one-sample-balance")
    a = verify_map(rgb, tmp_path / "a", spp=SPP, normals=GRID, estimators=names, seed=7, sphere=False)
    b = verify_map(rgb, tmp_path / "b", spp=SPP, normals=GRID, estimators=names, seed=7, sphere=False)
    assert a["recommended"]["lowest_variance"] == b["recommended"]["lowest_variance"] is not None
    for doc in (a, b):
        doc.pop("outdir")
        # The ranking uses efficiency, which includes wall time.
        doc.pop("recommended")
    assert _strip_timings(a) == _strip_timings(b)
    for n in names:
        np.testing.assert_array_equal(_read_exr(tmp_path / "a" / f"estimate_{n}.exr"),
                                      _read_exr(tmp_path / "b" / f"estimate_{n}.exr"))
    c = verify_map(rgb, tmp_path / "c", spp=SPP, normals=GRID, estimators=names, seed=8, sphere=False)
    assert c["estimators"]["table"]["relative_rmse"] != a["estimators"]["table"]["relative_rmse"]


def test_seed_none_is_recorded_and_replays(tmp_path):
    rgb = skies.make_sky("overcast", width=64)
    a = verify_map(rgb, tmp_path / "a", spp=4, normals=(8, 4), estimators=("mis-balance",), seed=None, sphere=False)
    verify_map(rgb, tmp_path / "b", spp=4, normals=(8, 4), estimators=("mis-balance",), seed=a["seed"],
               sphere=False)
    np.testing.assert_array_equal(_read_exr(tmp_path / "a" / "estimate_mis-balance.exr"),
                                  _read_exr(tmp_path / "b" / "estimate_mis-balance.exr"))


# ---------------------------------------------------------------------------
# inputs
# ---------------------------------------------------------------------------

def test_sources_by_extension(tmp_path):
    from envsample.io.maps import write_map

    rgb = skies.make_sky("studio", width=64)
    write_map(tmp_path / "m.exr", rgb, pixel_type="float")
    table, info = load_source(tmp_path / "m.exr")
    assert info["kind"] == "map" and len(info["sha256"]) == 64
    np.testing.assert_array_equal(table.image, rgb)
    table.save(tmp_path / "t")
    loaded, info = load_source(str(tmp_path / "t"))
    assert info["kind"] == "table"
    np.testing.assert_array_equal(loaded.image, rgb)
    _, info = load_source(rgb, table_size=(32, 16))
    assert info["kind"] == "map" and len(info["array_sha256"]) == 64
    with pytest.raises(ValueError, match="table_size applies to maps"):
        load_source(loaded, table_size=(32, 16))


def test_bad_arguments_are_refused_with_the_remedy(tmp_path):
    rgb = skies.make_sky("uniform", width=64)
    with pytest.raises(ValueError, match="unknown estimator.*valid names"):
        verify_map(rgb, tmp_path, estimators="cosine,nope")
    with pytest.raises(ValueError, match="spp must be an integer >= 2"):
        verify_map(rgb, tmp_path, spp=1)
    with pytest.raises(ValueError, match="normals"):
        verify_map(rgb, tmp_path, normals="0x4")
    with pytest.raises(ValueError, match="seed must be"):
        verify_map(rgb, tmp_path, seed=-1)
    with pytest.raises(ValueError, match="roughness"):
        verify_map(rgb, tmp_path, roughness=2.0)
    from envsample.errors import MapValidationError

    bad = rgb.copy()
    bad[0, 0, 0] = np.nan
    with pytest.raises(MapValidationError, match="repair"):
        verify_map(bad, tmp_path)
    assert not (tmp_path / "metrics.json").exists()


def test_black_map_reports_nothing_to_rank(tmp_path):
    """An all-black map is legal (warned at build); its report says there is nothing to compare."""
    from envsample.errors import EnvsampleWarning

    with pytest.warns(EnvsampleWarning, match="black"):
        doc = verify_map(np.zeros((16, 32, 3), np.float32), tmp_path, spp=4, normals=(8, 4),
                         estimators=("cosine", "table"))
    assert doc["recommended"]["estimator"] is None
    assert doc["estimators"]["table"]["relative_rmse"] is None
    assert np.all(_read_exr(tmp_path / "reference.exr") == 0.0)
    assert json.loads((tmp_path / "metrics.json").read_text())["notes"]


def test_compensated_table_is_used_only_inside_mis(tmp_path):
    """Karlik et al. 2019: a compensated table is valid only inside MIS, so the lone table is left out."""
    table = build_table(skies.make_sky("rooftop", width=64), compensate=True)
    doc = verify_map(table, tmp_path, spp=8, normals=(8, 4), sphere=False)
    assert "table" not in doc["estimators"] and "mis-balance" in doc["estimators"]
    assert any("inside MIS" in n for n in doc["notes"])
    assert doc["estimators"]["mis-balance"]["bias_consistent_with_zero"]
    with pytest.raises(ValueError, match="inside MIS"):
        verify_map(table, tmp_path, estimators=("table",))


def test_rerun_in_the_same_folder_leaves_only_this_runs_files(tmp_path):
    # A report folder reused with fewer estimators must not keep images metrics.json no longer lists.
    import json

    from envsample.pipeline.verify import verify_map
    from envsample.synth.skies import make_sky

    rgb = make_sky("overcast", width=32)
    out = tmp_path / "r"
    verify_map(rgb, out, spp=4, normals=(8, 4), estimators=["cosine", "table", "mis-balance"], sphere=False)
    assert (out / "estimate_mis-balance.exr").exists()
    verify_map(rgb, out, spp=4, normals=(8, 4), estimators=["table"], sphere=False)
    doc = json.loads((out / "metrics.json").read_text())
    listed = set(doc["files"]["estimates"].values())
    assert {p.name for p in out.glob("estimate_*.exr")} == listed == {"estimate_table.exr"}
