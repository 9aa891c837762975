"""Tests of envsample.html: self-contained check pages and the batch index page.

Sources the tests check against, outside this project:
- the page is parsed by Python's own ``html.parser`` (a tokenizer following the WHATWG HTML
  syntax) and every non-void element must be closed in order (void elements: WHATWG HTML
  Living Standard, section 13.1.2; the parser is tests/support/html_pages.py);
- pictures are ``data:`` URIs (RFC 2397) whose base64 payload (RFC 4648) must decode strictly
  (``base64.b64decode(validate=True)``) to a PNG (ISO/IEC 15948 signature) that imageio reads,
  with the pixel size the <img> tag states;
- escaping: every message must come back unchanged from the standard library's parser
  (``html.parser`` with ``convert_charrefs``), and raw markup characters must not appear;
- the ring around the sun is compared with the sun position the analytic sky was built with
  (:func:`envsample.skies.make_sky`, its documented convention: azimuth 0 at the image centre,
  positive to the right, elevation 90 deg at the top row), not with the QA check's estimate.

Maps are small (128 x 64) so the file runs in a few seconds.
"""

from __future__ import annotations

import html as std_html
import json
import re
from pathlib import Path

import imageio.v3 as iio
import numpy as np
import pytest
from support.html_pages import assert_images_valid, assert_self_contained, decode_png, parse

from envsample.errors import EnvsampleError
from envsample.io.maps import write_map
from envsample.qa.checks import CHECKS
from envsample.qa.run import check_map
from envsample.reports.pages import CAUTION, INDEX_ROW_KEYS, THUMB_WIDTH, check_page, index_page, report_row
from envsample.synth.skies import make_sky

WIDTH = 128
SUN_AZ, SUN_EL = 60.0, 35.0
ODD_NAME = "sky<b>&.exr"  # a legal POSIX file name full of markup characters
SUN_RING_RGB = (255, 60, 170)  # envsample.html._SUN_RING colour
OTHER_RING_RGB = (0, 215, 255)  # envsample.html._OTHER_RING colour


def no_temp_files(folder: Path) -> list[str]:
    return [p.name for p in folder.iterdir() if p.name.endswith(".tmp") or p.name.startswith(".")]


# --------------------------------------------------------------------------- fixtures


@pytest.fixture(scope="module")
def maps(tmp_path_factory):
    """A clean sun sky and a defective one (upside down, a block of NaN pixels), as EXR files."""
    folder = tmp_path_factory.mktemp("maps")
    clean = make_sky("sun", width=WIDTH, elevation_deg=SUN_EL, azimuth_deg=SUN_AZ)
    bad = np.ascontiguousarray(make_sky("sun", width=WIDTH, elevation_deg=20.0, azimuth_deg=-100.0)[::-1])
    bad[40:43, 10:20] = np.nan
    clean_path, bad_path = folder / "clean.exr", folder / ODD_NAME
    write_map(clean_path, clean, pixel_type="float")
    write_map(bad_path, bad, pixel_type="float")
    return {"folder": folder, "clean": clean_path, "bad": bad_path,
            "r_clean": check_map(clean_path), "r_bad": check_map(bad_path)}


@pytest.fixture(scope="module")
def pages(tmp_path_factory, maps):
    """The pages of the clean and the defective map, drawn once for the tests that only read them."""
    folder = tmp_path_factory.mktemp("pages")
    return {"clean": check_page(maps["r_clean"], folder / "clean.html"),
            "bad": check_page(maps["r_bad"], folder / "bad.html")}


@pytest.fixture(scope="module")
def verify_dir(tmp_path_factory, maps):
    from envsample.pipeline.verify import verify_map

    out = tmp_path_factory.mktemp("verify")
    verify_map(maps["clean"], out, spp=4, normals=(16, 8), estimators=["cosine", "table", "mis-balance"],
               sphere=False)
    return out


# --------------------------------------------------------------------------- check_page


def test_clean_page_parses_and_every_picture_is_an_embedded_png(pages):
    p, raw = parse(pages["clean"])
    assert_self_contained(p, raw)
    assert_images_valid(p)
    # Thumbnail, pdf heat map and range overlay.
    assert len(p.imgs) == 3
    thumb = [a for a in p.imgs if a["alt"].startswith("tone-mapped thumbnail")]
    assert len(thumb) == 1
    # A 128-px map is enlarged by pixel repetition to the documented thumbnail width, 2:1.
    assert (int(thumb[0]["width"]), int(thumb[0]["height"])) == (THUMB_WIDTH, THUMB_WIDTH // 2)


def test_verdict_counts_caution_and_every_check_id_appear(maps, pages):
    r = maps["r_clean"]
    p, _ = parse(pages["clean"])
    text = p.all_text
    assert r.verdict.upper() in text
    c = r.counts()
    assert f"checks: {c['fail']} failed, {c['warn']} warned, {c['pass']} passed" in text
    assert CAUTION in text
    shown = [t.strip() for t in p.id_cells]
    assert shown == [x.id for x in r.checks]
    assert set(shown) <= set(CHECKS)


def test_defective_map_shows_failures_with_word_and_shape(maps, pages):
    r = maps["r_bad"]
    assert r.verdict == "fail" and "nan" in r.ids("fail")
    p, raw = parse(pages["bad"])
    assert_self_contained(p, raw)
    assert_images_valid(p)
    text = p.all_text
    for cid in r.ids("fail") + r.ids("warn"):
        assert cid in text
    for x in r.checks:
        assert " ".join(x.message.split()) in text
        if x.remedy:
            assert " ".join(x.remedy.split()) in text
    # Every severity mark holds a shape element and the severity word (readable without colour).
    marks = re.findall(r'<span class="sev s-(\w+)"><span class="shape" aria-hidden="true"></span>(\w+)</span>', raw)
    assert len(marks) == raw.count('class="sev ')
    assert marks and all(word == sev.upper() for sev, word in marks)
    assert {"fail", "warn", "pass"} <= {sev for sev, _ in marks}
    # The three shapes differ in form, not only in colour.
    css = p.style
    assert "border-radius: 50%" in css.split(".s-pass .shape")[1].split("}")[0]
    assert "clip-path: polygon" in css.split(".s-warn .shape")[1].split("}")[0]
    assert "background" in css.split(".s-fail .shape")[1].split("}")[0]


def test_file_name_with_markup_is_shown_literally(pages):
    p, raw = parse(pages["bad"])
    assert ODD_NAME in p.all_text
    assert "sky<b>" not in raw
    assert std_html.escape(ODD_NAME) in raw
    # No <b> element was injected: every <b> in the page is one of our own labels.
    assert "&.exr" not in raw.replace("&amp;.exr", "")


def test_measured_values_thresholds_and_units_are_shown(maps, pages):
    r = maps["r_clean"]
    _, raw = parse(pages["clean"])
    row = raw.split('<td class="id">resolution</td>')[1].split("</tr>")[0]
    cells = re.findall(r"<td[^>]*>(.*?)</td>", row)
    assert cells[0] == str(r["resolution"].value) and cells[1] == str(r["resolution"].threshold)
    assert cells[2] == "px wide"
    # Shares are shown in per cent with the unit saying so, the number the report holds (qa-report v3
    # stores each value in its unit, so the terminal, the page and the JSON show the same number).
    row = raw.split('<td class="id">orientation</td>')[1].split("</tr>")[0]
    cells = re.findall(r"<td[^>]*>(.*?)</td>", row)
    assert r["orientation"].unit == "%"
    assert float(cells[0]) == pytest.approx(r["orientation"].value, rel=1e-3)
    assert cells[2].startswith("% of the light")
    assert "<th>measured</th><th>threshold</th><th>unit</th>" in raw


def test_sun_ring_sits_on_the_sun_of_the_analytic_sky(pages):
    p, _ = parse(pages["clean"])
    thumb = next(a for a in p.imgs if a["alt"].startswith("tone-mapped thumbnail"))
    _, pic = decode_png(thumb["src"])
    ring = np.all(pic[..., :3] == SUN_RING_RGB, axis=-1)
    assert ring.sum() > 20, "no sun ring drawn"
    rows, cols = np.nonzero(ring)
    h, w = pic.shape[:2]
    # Where make_sky put the sun: u = 1/2 + az/360, v = (90 - el)/180 (envsample.skies convention).
    x_sun, y_sun = (0.5 + SUN_AZ / 360.0) * w, (90.0 - SUN_EL) / 180.0 * h
    pixel = w / WIDTH  # one map pixel in thumbnail pixels
    assert abs((cols + 0.5).mean() - x_sun) < pixel
    assert abs((rows + 0.5).mean() - y_sun) < pixel
    # The ring is around the sun, not on it: the centre pixel is not ring-coloured.
    assert not ring[int(y_sun), int(x_sun)]


def test_pdf_map_peaks_at_the_sun_and_is_flat_for_a_uniform_sky(pages, tmp_path):
    """The caption's brightest cell is where make_sky put the sun (within one cell of the
    reduced table); a uniform sky has the closed-form pdf 1/(4 pi) per steradian everywhere."""
    p, _ = parse(pages["clean"])
    m = re.search(r"in the cell at azimuth (-?[\d.]+)\u00b0, elevation (-?[\d.]+)\u00b0", p.all_text)
    assert m, "the pdf caption names the brightest cell"
    cell_az, cell_el = 360.0 / WIDTH, 180.0 / (WIDTH // 2)  # the map is smaller than PDF_TABLE_SIZE
    assert abs(float(m.group(1)) - SUN_AZ) <= cell_az and abs(float(m.group(2)) - SUN_EL) <= cell_el
    img = make_sky("uniform", width=64)
    p, _ = parse(check_page(check_map(img, checks=["aspect"]), tmp_path / "u.html", images=[img]))
    assert f"1/4\u03c0 = {1 / (4 * np.pi):.4f} /sr" in p.all_text
    assert f"nearly flat (peak {1 / (4 * np.pi):.3g} /sr)" in p.all_text


def test_diffuse_emitters_get_the_other_ring(tmp_path):
    """Studio lights are bright but not sun-like (about 31 deg across): thin cyan rings, none magenta."""
    img = make_sky("studio", width=WIDTH)
    r = check_map(img)
    emitters = r["sun"].details["emitters"]
    assert emitters and not any(e["sun_like"] for e in emitters)
    p, _ = parse(check_page(r, tmp_path / "studio.html", images=[img]))
    _, pic = decode_png(next(a for a in p.imgs if a["alt"].startswith("tone-mapped"))["src"])
    assert np.all(pic[..., :3] == OTHER_RING_RGB, axis=-1).sum() > 20
    assert not np.all(pic[..., :3] == SUN_RING_RGB, axis=-1).any()


def test_batch_page_with_verify_pictures_embedded_byte_for_byte(maps, verify_dir, tmp_path):
    reports = [maps["r_clean"], maps["r_bad"]]
    page = check_page(reports, tmp_path / "batch.html", verify_dirs=[verify_dir, None])
    p, raw = parse(page)
    assert_self_contained(p, raw)
    assert_images_valid(p)
    assert {"map-1", "map-2"} <= set(p.ids)
    assert [v for t, k, v in p.refs if t == "a"] == ["#map-1", "#map-2"]
    text = p.all_text
    counts = [x.verdict for x in reports]
    assert f"2 maps: {counts.count('pass')} pass, {counts.count('warn')} warn, {counts.count('fail')} fail" in text
    assert raw.index('<div class="summary v-fail">') < raw.index('id="map-1"')  # the worst verdict leads
    metrics = json.loads((verify_dir / "metrics.json").read_text())
    embedded = {decode_png(a["src"])[0] for a in p.imgs}
    for name in metrics["files"]["errors"] + [metrics["files"]["convergence"]]:
        assert (verify_dir / name).read_bytes() in embedded, name
    for est in metrics["estimators"]:
        assert est in text
    # A thumbnail, a pdf map and a range overlay per map, plus the verify pictures of the first
    # (map.png, the error maps and the convergence plot).
    assert len(p.imgs) == 6 + 1 + len(metrics["files"]["errors"]) + 1
    assert set(CHECKS) - {s["id"] for r in reports for s in r.skipped} <= set(t.strip() for t in p.id_cells)


def test_summary_counts_maps_by_verdict(maps, tmp_path):
    clean_again = check_map(make_sky("sun", width=WIDTH), checks=["aspect", "nan"])  # passes
    p, _ = parse(check_page([clean_again, maps["r_bad"]], tmp_path / "two.html", images=[None, maps["bad"]]))
    assert "2 maps: 1 pass, 0 warn, 1 fail" in p.all_text


def test_page_is_written_atomically(maps, tmp_path, monkeypatch):
    out = tmp_path / "page.html"
    check_page(maps["r_clean"], out)
    assert no_temp_files(tmp_path) == []
    before = out.read_bytes()

    import os

    real_replace = os.replace
    attempts = []

    def fail_on_the_page(src, dst, *args, **kwargs):
        # Only the final rename of the page fails (pictures drawn on the way are renamed too).
        if Path(dst) == out:
            attempts.append(Path(src))
            raise OSError("disk full (simulated)")
        return real_replace(src, dst, *args, **kwargs)

    monkeypatch.setattr(os, "replace", fail_on_the_page)
    with pytest.raises(OSError, match="simulated"):
        check_page(maps["r_bad"], out)
    assert attempts and attempts[0].parent == tmp_path, "the page goes through a temporary file beside it"
    assert out.read_bytes() == before, "a failed write must leave the old page untouched"
    assert no_temp_files(tmp_path) == []


def test_missing_output_folder_and_verify_folder_are_one_line_errors(maps, tmp_path):
    with pytest.raises(EnvsampleError, match="does not exist; create it first"):
        check_page(maps["r_clean"], tmp_path / "nowhere" / "page.html")
    with pytest.raises(EnvsampleError, match=r"verify folder does not exist"):
        check_page(maps["r_clean"], tmp_path / "page.html", verify_dirs=tmp_path / "no-verify")
    with pytest.raises(ValueError, match="one per report"):
        check_page([maps["r_clean"], maps["r_bad"]], tmp_path / "page.html", verify_dirs=[None])
    with pytest.raises(TypeError, match=r"reports\[0\]"):
        check_page(["not a report"], tmp_path / "page.html")
    assert no_temp_files(tmp_path) == []


def test_report_dict_form_gives_the_same_page(maps, pages, tmp_path):
    """A check.json read back (Report.to_dict) renders exactly like the Report itself."""
    b = check_page(json.loads(json.dumps(maps["r_bad"].to_dict())), tmp_path / "b.html")
    assert pages["bad"].read_bytes() == b.read_bytes()


@pytest.mark.parametrize("case", ["in-memory", "unreadable", "black", "square", "ldr"])
def test_awkward_inputs_still_give_a_valid_page(case, tmp_path):
    images = None
    if case == "in-memory":
        report = check_map(make_sky("sun", width=64))
        expect_pictures = False
    elif case == "unreadable":
        bad = tmp_path / "broken.exr"
        bad.write_bytes(b"not an exr file")
        report = check_map(bad)
        expect_pictures = False
    elif case == "black":
        img = np.zeros((32, 64, 3), np.float32)
        report, images, expect_pictures = check_map(img), [img], True
    elif case == "square":
        img = make_sky("sun", width=64, height=64)
        report, images, expect_pictures = check_map(img), [img], True
    else:
        png = tmp_path / "ldr.png"
        iio.imwrite(png, (np.linspace(0, 255, 64 * 32 * 3) % 256).astype(np.uint8).reshape(32, 64, 3))
        report, expect_pictures = check_map(png), True
    p, raw = parse(check_page(report, tmp_path / "page.html", images=images))
    assert_self_contained(p, raw)
    if expect_pictures:
        assert_images_valid(p)
    else:
        assert not p.imgs
    for x in report.checks:
        assert x.id in [t.strip() for t in p.id_cells]
    assert report.verdict.upper() in p.all_text


# --------------------------------------------------------------------------- index_page


def test_report_row_takes_the_key_figures_from_the_checks(maps):
    r = maps["r_clean"]
    row = report_row(r, page="maps/clean/check.html")
    assert set(row) <= set(INDEX_ROW_KEYS)
    assert row["name"] == "clean.exr" and row["verdict"] == r.verdict
    assert (row["width"], row["height"]) == (WIDTH, WIDTH // 2)
    assert row["sampling_relative_rmse"] == r["sampling"].value
    d = r["sampling"].details
    assert row["peak_sample_share"] == d["estimators"][d["estimator"]]["peak_sample_share"]
    assert row["irradiance_up"] == r["light-level"].value
    sun = [e for e in r["sun"].details["emitters"] if e["sun_like"]][0]
    assert (row["sun_azimuth_deg"], row["sun_elevation_deg"], row["sun_share"]) == (
        sun["azimuth_deg"], sun["elevation_deg"], sun["share"])
    # The QA estimate lies within a pixel (2.8 deg) of where the sky put the sun.
    assert abs(row["sun_azimuth_deg"] - SUN_AZ) < 360.0 / WIDTH
    assert abs(row["sun_elevation_deg"] - SUN_EL) < 180.0 / (WIDTH // 2)
    assert row["failed_checks"] == r.ids("fail") and row["warned_checks"] == r.ids("warn")


def test_index_page_rows_thumbnails_links_and_escaping(maps, tmp_path):
    from envsample.reports.pictures import thumbnail, write_png

    (tmp_path / "maps" / "a").mkdir(parents=True)
    thumb_file = write_png(tmp_path / "maps" / "a" / "thumb.png", thumbnail(make_sky("sun", width=WIDTH), width=64))
    rows = [
        report_row(maps["r_clean"], thumbnail="maps/a/thumb.png", page="maps/a/page.html",
                   links={"report (JSON)": "maps/a/check.json", "odd & <name>": "maps/a/x y#1.json"}),
        report_row(maps["r_bad"], thumbnail=np.full((16, 32, 3), 90, np.uint8)),
        {"source": "lib/broken.exr", "verdict": "error", "error": "lib/broken.exr: truncated <file>"},
    ]
    page = index_page(rows, tmp_path / "index.html")
    assert no_temp_files(tmp_path) == []
    p, raw = parse(page)
    assert_images_valid(p)
    assert len(p.imgs) == 2
    clean_thumb = next(a for a in p.imgs if a["alt"] == "thumbnail of clean.exr")
    assert decode_png(clean_thumb["src"])[0] == thumb_file.read_bytes()
    hrefs = [v for t, k, v in p.refs if t == "a" and not v.startswith("#")]
    assert hrefs == ["maps/a/page.html", "maps/a/check.json", "maps/a/x%20y#1.json"]
    for h in hrefs:
        assert not re.match(r"^(?:[a-z][a-z0-9+.-]*:|/)", h, re.I)
    text = p.all_text
    assert ODD_NAME in text and "broken.exr" in text and "truncated <file>" in text
    assert "odd & <name>" in text and "sky<b>" not in raw
    assert "3 maps: 0 pass, 1 warn, 1 fail, 1 error" in text
    assert CAUTION in text
    for head in ("size (px)", "dynamic range (stops)", "sun elevation (deg)", "sun share (% of light)"):
        assert head in text
    assert "ERROR" in text and "FAIL" in text and "WARN" in text


def test_index_page_refuses_absolute_links_and_nameless_rows(tmp_path):
    for bad in ("/etc/passwd", "file:///tmp/x.html", "http://example.invalid/x", "C:\\maps\\x.html"):
        with pytest.raises(ValueError, match="relative"):
            index_page([{"name": "x", "page": bad}], tmp_path / "index.html")
    with pytest.raises(ValueError, match="neither 'name' nor 'source'"):
        index_page([{"verdict": "pass"}], tmp_path / "index.html")
    assert not (tmp_path / "index.html").exists()
    assert no_temp_files(tmp_path) == []


def test_index_page_of_batch_rows_as_they_are(tmp_path):
    """Rows shaped like envsample.batch summary rows (ROW_FIELDS) render without extra keys."""
    from envsample.pipeline.outcomes import ROW_FIELDS

    row = {k: None for k in ROW_FIELDS}
    row.update(source="lib/sky.exr", status="skipped", verdict="pass", width=64, height=32, format="exr",
               dynamic_range=9.5, sun_elevation_deg=12.0, sun_azimuth_deg=-30.0, sun_share=0.25,
               failed_checks=[], warned_checks=[])
    p, raw = parse(index_page([row], tmp_path / "index.html", title="Library <2>"))
    text = p.all_text
    assert "Library <2>" in text and "<2>" not in raw
    assert "sky.exr" in text and "up to date" in text and "9.5" in text and "25" in text
    assert "1 map: 1 pass, 0 warn, 0 fail, 0 error" in text


# --------------------------------------------------------------------------- pictures that show the numbers


def test_the_pdf_map_rings_the_sun_like_the_thumbnail(maps):
    """issue 10: the sun was a near-invisible dot on the pdf map.  The ringed panel of the page's pdf
    (before the figure scales it) has the sun ring centred where make_sky put the sun, and the page's
    pdf picture carries the ring colour."""
    from envsample.reports.map_parts import _emitters, _rings, pdf_values
    from envsample.reports.pictures import ringed_panel

    rgb = make_sky("sun", width=WIDTH, elevation_deg=SUN_EL, azimuth_deg=SUN_AZ)
    pdf = pdf_values(rgb, "bt709")
    rings = _rings(_emitters(maps["r_clean"].to_dict()), 512)
    pic = ringed_panel(pdf, rings, vmin=float(pdf[pdf > 0].min()), vmax=float(pdf.max()), log=True, cmap="viridis")
    ring = np.all(pic == SUN_RING_RGB, axis=-1)
    rows, cols = np.nonzero(ring)
    h, w = pic.shape[:2]
    x_sun, y_sun = (0.5 + SUN_AZ / 360.0) * w, (90.0 - SUN_EL) / 180.0 * h
    pixel = w / WIDTH
    assert ring.sum() > 20
    assert abs((cols + 0.5).mean() - x_sun) < pixel and abs((rows + 0.5).mean() - y_sun) < pixel
    p, _ = parse(check_page(maps["r_clean"], maps["folder"] / "pdf-ring.html"))
    _, shown = decode_png(next(a for a in p.imgs if a["alt"].startswith("sampling pdf"))["src"])
    assert np.all(shown[..., :3] == SUN_RING_RGB, axis=-1).sum() > 20


def test_the_range_overlay_marks_a_clipped_sun_and_not_a_clean_one(tmp_path):
    """issue 10: a clipped and a clean sun looked identical.  The overlay paints the plateau the
    clipping check failed on in the 'clipped' colour, at the sun (support.qa_maps.clipped_sun, sun at
    azimuth 40, elevation 35), and nothing on the same sky unclipped."""
    from support.qa_maps import SUN_AZ as AZ
    from support.qa_maps import SUN_EL as EL
    from support.qa_maps import W, clipped_sun, sunny

    from envsample.reports.pictures import RANGE_COLORS

    for img, expect in ((clipped_sun(), True), (sunny(), False)):
        report = check_map(img)
        p, raw = parse(check_page(report, tmp_path / "o.html", images=[img]))
        _, pic = decode_png(next(a for a in p.imgs if a["alt"].startswith("range overlay"))["src"])
        mask = np.all(pic[..., :3] == RANGE_COLORS["clipped"], axis=-1)
        assert mask.any() == expect == (report["clipping"].severity == "fail")
        assert "clipped:" in p.all_text and "over range:" in p.all_text  # the legend
        if expect:
            rows, cols = np.nonzero(mask)
            scale = pic.shape[1] / W
            assert abs((cols + 0.5).mean() / pic.shape[1] - (0.5 + AZ / 360.0)) < 2 * scale / pic.shape[1] + 0.01
            assert abs((rows + 0.5).mean() / pic.shape[0] - (90.0 - EL) / 180.0) < 0.02
