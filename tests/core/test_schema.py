"""Every JSON document names its schema one way; the former style of QA and batch files is still recognised."""

from __future__ import annotations

from envsample.core.schema import Schema, schema_of


def test_header_and_match_in_the_dotted_style():
    s = Schema("envsample.qa-report", 2)
    doc = {**s.header(), "verdict": "pass"}
    assert doc["schema"] == "envsample.qa-report" and doc["schema_version"] == 2
    assert s.matches(doc) and str(s) == "envsample.qa-report v2"
    assert not Schema("envsample.qa-report", 1).matches(doc)


def test_the_former_nested_style_is_read_as_the_same_name():
    old = {"schema": {"name": "envsample-batch-map", "version": 1}}
    assert schema_of(old) == ("envsample.batch-map", 1)
    assert Schema("envsample.batch-map", 1).matches(old)
    assert not Schema("envsample.batch-map", 2).matches(old)


def test_documents_without_a_schema_name_none():
    assert schema_of([]) == (None, None)
    assert schema_of({"schema": 3}) == (None, None)
    assert schema_of({"schema": "envsample.x", "schema_version": True}) == ("envsample.x", None)
