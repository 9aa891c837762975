"""``envsample inspect``: :func:`envsample.pipeline.workflow.map_facts` or :func:`~envsample.pipeline.workflow.table_facts`."""

from __future__ import annotations

from pathlib import Path

import click

from envsample.cli.app import flags, main
from envsample.cli.options import PRIMARY_CHOICES
from envsample.cli.output import direction_text, echo_json, num, print_rows, rgb_line, size_text
from envsample.io.maps import read_map
from envsample.pipeline.workflow import map_facts, table_facts
from envsample.validation.tuning import advice_text


def _is_table(path: Path) -> bool:
    if path.suffix.lower() in (".json", ".npz", ".bin"):
        return True
    return not path.suffix and path.with_name(path.name + ".json").exists()


def _print_map_facts(f: dict) -> None:
    rng = f["range"]
    integ = f["integrals"]
    b = f["brightest"]
    size = f"{f['width']}x{f['height']}" + ("" if f["width"] == 2 * f["height"] else "  (not 2:1)")
    kind = f"{f['format']}, {f['pixel_type']}, channels {' '.join(f['channels'] or [])}"
    if f.get("compression"):
        kind += f", {f['compression']} compression"
    if f.get("file_bytes") is not None:
        kind += f", {size_text(f['file_bytes'])}"
    if not f["is_hdr"]:
        kind += "  (LDR)"
    bad = []
    if f["non_finite_values"]:
        bad.append(f"{f['non_finite_values']} NaN/Inf values (counted as 0 below)")
    if f["negative_values"]:
        bad.append(f"{f['negative_values']} negative values")
    verdict = "ok" if f["build"]["ok"] else "refused: " + flags(f["build"]["problem"])
    if f["build"]["ok"] and f["build"]["notes"]:
        verdict += " (" + "; ".join(flags(n) for n in f["build"]["notes"]) + ")"
    chroma = f.get("chromaticities")
    print_rows([
        ("map", f["path"]),
        ("file", kind),
        ("sha256", f["sha256"]),
        ("size", size),
        ("range", "  ".join(f"{c} {num(lo)}..{num(hi)}" for c, lo, hi in zip("RGB", rng["min"], rng["max"]))),
        ("pixels", "; ".join(bad) if bad else None),
        ("primaries", None if chroma is None else "file says " + ", ".join(
            f"{k} ({v[0]:.4f}, {v[1]:.4f})" for k, v in chroma.items())),
        ("integral", rgb_line(integ["rgb"], integ["luminance"], integ["primaries"]) + "  (map units x sr)"),
        ("brightest", f"{direction_text(b)}  (pixel row {b['row']}, col {b['col']}; Y {num(b['luminance'])})"),
        ("build", verdict),
    ])
    click.echo(f"({f['caution']})")


def _print_table_facts(f: dict) -> None:
    o, integ, big = f["options"], f["integrals"], f["largest_cell"]
    conv = f["convention"]
    opts = [f["mapping"], f"primaries {f['primaries']}", f"up {conv['up']}",
            f"rotation {float(conv['rotation_deg']):g} deg"]
    if o.get("uniform_mix"):
        opts.append(f"uniform mix {o['uniform_mix']:g}")
    if f["valid_only_inside_mis"]:
        opts.append("compensated: valid only inside MIS")
    src = f.get("source") or {}
    source = None
    if src:
        source = f"{Path(src['path']).name if src.get('path') else '(in memory)'}"
        if src.get("sha256"):
            source += f"  sha256 {src['sha256'][:12]}"
    rows = [
        ("table", f["path"]),
        ("schema", f"{f['schema']}, written by envsample {f['tool_version']}"),
        ("source", source),
        ("size", f"image {f['image']['width']}x{f['image']['height']}, "
                 f"table {f['table']['width']}x{f['table']['height']} cells"),
        ("options", ", ".join(opts)),
        ("integral", rgb_line(integ["rgb"], integ["luminance"], f["primaries"]) + "  (map units x sr)"),
        ("cells", f"{f['nonzero_cells']} of {f['cells']} have nonzero probability "
                  f"({100.0 * f['nonzero_cells'] / f['cells']:.1f}%)"),
        ("largest", f"p {num(big['probability'])} ({num(big['pdf_per_sr'])} /sr) at {direction_text(big)}"),
        ("radiance", {"source": "from the source map (re-read and verified on demand)",
                      "embedded": "embedded copy", "none": "none (built from an in-memory map)"}[f["radiance"]]),
        ("verified", "every checksum and the distribution checked" if f["verified"]
         else "metadata and file sizes only (--verify reads and checks the arrays)"),
    ]
    if f.get("recommendation"):

        for k, line in enumerate(advice_text(f["recommendation"])):
            rows.append(("advice" if k == 0 else "", line))
    for k, note in enumerate(f["notes"]):
        rows.append(("note" if k == 0 else "", note))
    for k, item in enumerate(f["files"]):
        rows.append(("files" if k == 0 else "", f"{item['path']}  ({size_text(item['bytes'])})"))
    print_rows(rows)
    click.echo(f"({f['caution']})")


@main.command("inspect")
@click.argument("target", metavar="MAP_OR_TABLE", type=click.Path(path_type=Path))
@click.option("--json", "as_json", is_flag=True, help="Print the facts as JSON.")
@click.option("--primaries", type=click.Choice(PRIMARY_CHOICES, case_sensitive=False), default="bt709",
              show_default=True, help="Luminance weights for a map's Y integral and brightest pixel.")
@click.option("--up", type=click.Choice(["y", "z"]), default="y", show_default=True,
              help="Up axis for a map's direction vectors (azimuth and elevation do not depend on it).")
@click.option("--layer", default=None, metavar="NAME", help="EXR layer to read when the file has several.")
@click.option("--verify/--no-verify", "verify", default=None,
              help="For a table: read every array and check its checksum and the distribution. Default: only "
                   "when MAP_OR_TABLE is the table's .npz or .bin file itself.")
def inspect_command(target, as_json, primaries, up, layer, verify):
    """Show the facts of a map or of a saved table.

    MAP_OR_TABLE is a map (.exr, .hdr, or an LDR image, which build refuses),
    or a table given by its prefix or its .json/.npz/.bin file. For a table,
    the JSON is checked and the files' sizes compared with it; the arrays are
    read and verified (checksums, distribution) with --verify, or when the
    .npz or .bin file itself is given.
    """

    if _is_table(target):
        facts = table_facts(target, verify=verify)
        show = _print_table_facts
    else:

        facts = map_facts(read_map(target, layer=layer), primaries=primaries.lower(), up=up)
        show = _print_map_facts
    if as_json:
        echo_json(facts)
    else:
        show(facts)
