"""``envsample vectors``: :func:`envsample.pipeline.workflow.golden_vectors` + :func:`~envsample.pipeline.workflow.write_vectors`."""

from __future__ import annotations

from pathlib import Path

import click

from envsample.cli.app import main
from envsample.cli.output import print_rows, size_text
from envsample.io.tables import table_paths
from envsample.pipeline.workflow import check_output_folder, golden_vectors, write_vectors
from envsample.sampling.table import load_table


@main.command()
@click.argument("table_path", metavar="TABLE", type=click.Path(path_type=Path))
@click.option("-o", "--output", "output", required=True, type=click.Path(dir_okay=False, path_type=Path),
              metavar="FILE", help="JSON file to write (atomically; missing folders are created).")
@click.option("--count", "-n", type=click.IntRange(1, 100_000), default=256, show_default=True,
              help="Number of vectors.")
@click.option("--seed", "-s", type=click.IntRange(0, None), default=0, show_default=True,
              help="Seed of numpy.random.default_rng that draws the uniforms.")
@click.option("--method", type=click.Choice(["inverse", "alias", "both"]), default="both", show_default=True,
              help="Cell choice to record.")
def vectors(table_path, output, count, seed, method):
    """Write golden test vectors of a saved TABLE (prefix or its .json).

    Each vector holds the two uniforms u that went in and, per method, the
    direction, pdf (per steradian), cell index and radiance that came out. A
    loader in another language reads the same table, feeds it the same u and
    must give the same results. The same seed always writes the same file.
    """

    check_output_folder(output)
    table = load_table(table_path)
    doc = golden_vectors(table, count=count, seed=seed, method=method, table_json=table_paths(table_path)["json"])
    path = write_vectors(output, doc)
    print_rows([
        ("table", f"{table_paths(table_path)['json']}  ({table.table_width}x{table.table_height} cells, "
                  f"{table.mapping})"),
        ("vectors", f"{count} x {', '.join(doc['methods'])}, seed {seed}"),
        ("wrote", f"{path}  ({size_text(path.stat().st_size)})"),
    ])
