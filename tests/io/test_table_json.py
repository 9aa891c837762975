"""Tests of envsample.io.table_json: the strict reader of a table's JSON metadata (format v2).

Every refusal is a TableFormatError naming the JSON file, never a bare KeyError or ValueError.
External references: the JSON grammar (RFC 8259; Python's ``json`` module parses the documents the
tests edit), and the schema and version rules of docs/table-format.md (the project's own format).
"""

from __future__ import annotations

import re

import pytest
from support.table_files import names_file, rewrite_json, saved

from envsample.errors import TableFormatError
from envsample.io.tables import SCHEMA_VERSION
from envsample.sampling.table import load_table


def test_missing_json_is_refused(tmp_path):
    with pytest.raises(TableFormatError, match=names_file(tmp_path / "nothing.json") + ".*not found"):
        load_table(tmp_path / "nothing")


def test_invalid_json_is_refused(tmp_path, table):
    _, paths = saved(tmp_path, table)
    paths["json"].write_text('{"schema": "envsample.sampling-table", "schema_version": 1,')
    with pytest.raises(TableFormatError, match=names_file(paths["json"]) + ".*not valid JSON"):
        load_table(paths["json"])
    paths["json"].write_bytes(b"\xff\xfe\x00garbage")
    with pytest.raises(TableFormatError, match=names_file(paths["json"]) + ".*not valid JSON"):
        load_table(paths["json"])


def test_other_schema_or_version_is_refused(tmp_path, table):
    _, paths = saved(tmp_path, table)
    rewrite_json(paths["json"], lambda d: d.update(schema_version=SCHEMA_VERSION + 1))
    with pytest.raises(TableFormatError, match=names_file(paths["json"]) + f".*schema version {SCHEMA_VERSION + 1}"):
        load_table(paths["json"])
    rewrite_json(paths["json"], lambda d: d.update(schema="someone.else", schema_version=SCHEMA_VERSION))
    with pytest.raises(TableFormatError, match=names_file(paths["json"]) + ".*not an envsample table"):
        load_table(paths["json"])
    paths["json"].write_text("[1, 2, 3]")
    with pytest.raises(TableFormatError, match="not an envsample table"):
        load_table(paths["json"])


@pytest.mark.parametrize(
    "label, edit",
    [
        ("entry without checksum", lambda d: d["arrays"]["cell_pdf"].pop("xxh64")),
        ("entry without dtype", lambda d: d["arrays"]["cell_pdf"].pop("dtype")),
        ("table without height", lambda d: d["table"].pop("height")),
        ("arrays as a list", lambda d: d.update(arrays=[1, 2])),
        ("convention without up", lambda d: d["convention"].pop("up")),
        ("convention without handedness", lambda d: d["convention"].pop("handedness")),
        ("height of 1e400", lambda d: d["table"].update(height=float("inf"))),
        ("source as a string", lambda d: d.update(source="somewhere")),
        ("integrals as a list", lambda d: d.update(integrals=[1, 2])),
        ("notes as an int", lambda d: d.update(notes=3)),
        ("a huge integer height", lambda d: d["table"].update(height=10**400)),
        ("options without uniform_mix", lambda d: d["options"].pop("uniform_mix")),
        ("height as text", lambda d: d["table"].update(height="eight")),
        ("sampled_integral as text", lambda d: d.update(sampled_integral="x")),
        ("unknown up axis", lambda d: d["convention"].update(up="w")),
    ],
)
def test_malformed_json_structure_is_refused(tmp_path, table, label, edit):
    """Valid JSON of the wrong structure (hand-edited or written by another tool) is refused with a
    TableFormatError that names the JSON file, not a bare KeyError/ValueError."""
    _, paths = saved(tmp_path, table)
    rewrite_json(paths["json"], edit)
    with pytest.raises(TableFormatError, match=names_file(paths["json"])):
        load_table(paths["json"])


def test_missing_json_key_is_refused(tmp_path, table):
    _, paths = saved(tmp_path, table)
    rewrite_json(paths["json"], lambda d: d.pop("arrays"))
    with pytest.raises(TableFormatError, match=names_file(paths["json"]) + ".*arrays is missing"):
        load_table(paths["json"])


def test_unknown_mapping_is_refused(tmp_path, table):
    _, paths = saved(tmp_path, table)
    rewrite_json(paths["json"], lambda d: d["options"].update(mapping="spiral"))
    with pytest.raises(TableFormatError, match=names_file(paths["json"]) + ".*options.mapping must be one of equal-area"):
        load_table(paths["json"])


def test_a_version_1_table_is_refused_with_the_command_that_rebuilds_it(tmp_path, table):
    _, paths = saved(tmp_path, table)
    rewrite_json(paths["json"], lambda d: d.update(schema_version=1, source={"path": "/maps/roof top.exr"}))
    with pytest.raises(TableFormatError, match=names_file(paths["json"]) + ".*version 1 table.*rebuild it with "
                       "envsample build '/maps/roof top.exr' -o " + re.escape(str(tmp_path / "rooftop"))):
        load_table(paths["json"])


def test_deeply_nested_or_huge_json_is_refused_in_one_line(tmp_path, table, monkeypatch):
    _, paths = saved(tmp_path, table)
    paths["json"].write_text("[" * 100_000 + "]" * 100_000)
    with pytest.raises(TableFormatError, match=names_file(paths["json"]) + ".*nested too deeply|not an envsample"):
        load_table(paths["json"])
    monkeypatch.setattr("envsample.io.table_json.MAX_JSON_BYTES", 1000)
    paths["json"].write_text(" " * 2000)
    with pytest.raises(TableFormatError, match="far larger than a table's metadata"):
        load_table(paths["json"])
