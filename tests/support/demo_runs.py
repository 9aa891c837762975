"""One run of the demo for the tests (the session fixture ``demo_run`` in tests/conftest.py), and the
checksums of the tables it wrote."""

from __future__ import annotations

import json

from envsample.synth.demo import DemoStep, demo_steps, run_demo

#: The demo's width in the tests (a 64x32 map per scene).
DEMO_WIDTH = 64


def table_checksums(summary) -> list[dict]:
    """The stored arrays' checksums (XXH64) of every scene's table, read from its JSON."""
    out = []
    for m in summary["maps"]:
        doc = json.loads(open(next(p for p in m["table_files"] if p.endswith(".json")), encoding="utf-8").read())
        out.append({k: v["xxh64"] for k, v in doc["arrays"].items()})
    return out


def demo_once(folder):
    """One demo run into ``folder``, with an extra step appended and the progress calls recorded."""
    out = folder / "envsample-demo"
    seen, calls = {}, []

    def extra(ctx):
        seen["tables"] = sorted(ctx.tables)
        ctx.extra["checked"] = len(ctx.tables)

    steps = demo_steps() + [DemoStep("count tables", extra)]
    summary = run_demo(out, width=DEMO_WIDTH, steps=steps, progress=lambda *a: calls.append(a))
    vectors = json.loads(open(summary["vectors"][0]["path"], encoding="utf-8").read())["vectors"]
    return {"out": out, "summary": summary, "steps": steps, "seen": seen, "calls": calls,
            "checksums": table_checksums(summary), "vectors": vectors}
