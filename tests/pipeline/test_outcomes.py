"""Tests of envsample.pipeline.outcomes: what a batch reports (counts, exit statuses, rows)."""

from __future__ import annotations

from pathlib import Path

from envsample.pipeline.outcomes import ROW_FIELDS, VERDICTS, BatchResult, MapResult, count_verdicts, result_from_row


def _maps(*verdicts, status="done"):
    return [MapResult(f"m{k}.exr", status, v) for k, v in enumerate(verdicts)]


def test_counts_after_an_interruption_name_every_map_asked_for():
    """issue 12 item 11: Ctrl-C said "4 of 4 maps finished" when 12 were asked for."""
    r = BatchResult(outdir=Path("."), maps=_maps("pass", "warn", "fail", "error"), options={}, interrupted=True,
                    requested=12)
    c = r.counts
    assert (c["done"], c["maps"], c["pending"]) == (4, 12, 8)
    assert [c[v] for v in VERDICTS] == [1, 1, 1, 1]
    assert r.exit_code() == 130


def test_exit_codes_follow_the_worst_verdict():
    ok = BatchResult(outdir=Path("."), maps=_maps("pass", "warn"), options={})
    assert ok.exit_code() == 0 and ok.exit_code(strict=True) == 1
    assert BatchResult(outdir=Path("."), maps=_maps("pass", "fail"), options={}).exit_code() == 1
    assert BatchResult(outdir=Path("."), maps=_maps("error"), options={}).exit_code() == 1


def test_skipped_maps_are_counted_and_pending_entries_are_not():
    c = count_verdicts(_maps("pass", status="skipped") + [None, None], total=3)
    assert (c["skipped"], c["done"], c["pending"], c["pass"]) == (1, 1, 2, 1)


def test_a_row_round_trips_through_result_from_row():
    row = {k: None for k in ROW_FIELDS}
    row.update(source="a.exr", status="done", verdict="warn", folder="maps/a-1", sha256="ab", dynamic_range=9.5,
               note="kept")
    m = result_from_row(row, status="skipped")
    assert m.status == "skipped" and m.figures["dynamic_range"] == 9.5
    back = m.to_row()
    assert tuple(back) == ROW_FIELDS and back["note"] == "kept" and back["status"] == "skipped"
