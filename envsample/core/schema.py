"""How every JSON document envsample writes names its schema: ``"schema"`` and ``"schema_version"``.

One style for tables, golden vectors, QA reports, verify metrics and batch files::

    {"schema": "envsample.qa-report", "schema_version": 2, ...}

Documents written before this style (QA reports and batch files of version 1 used
``"schema": {"name": "envsample-qa-report", "version": 1}``) are still recognised by
:func:`schema_of`, so readers can tell an old file from a foreign one.
"""

from __future__ import annotations

from dataclasses import dataclass

__all__ = ["Schema", "schema_of"]


@dataclass(frozen=True)
class Schema:
    """A schema's dotted name (``envsample.<what>``) and integer version."""

    name: str
    version: int

    def header(self) -> dict:
        """The two keys that open a document of this schema."""
        return {"schema": self.name, "schema_version": self.version}

    def matches(self, doc) -> bool:
        """True when ``doc`` is a document of this schema and version (either style)."""
        return schema_of(doc) == (self.name, self.version)

    def __str__(self) -> str:
        return f"{self.name} v{self.version}"


def schema_of(doc) -> tuple[str | None, int | None]:
    """``(name, version)`` of a JSON document, in the dotted form; ``(None, None)`` if it names none.

    Reads ``{"schema": "envsample.x", "schema_version": n}`` and the former
    ``{"schema": {"name": "envsample-x", "version": n}}``.
    """
    if not isinstance(doc, dict):
        return None, None
    s = doc.get("schema")
    if isinstance(s, dict):  # the former style
        name, version = s.get("name"), s.get("version")
        if isinstance(name, str) and name.startswith("envsample-"):
            name = "envsample." + name[len("envsample-"):]
    else:
        name, version = s, doc.get("schema_version")
    if not isinstance(name, str):
        return None, None
    if isinstance(version, bool) or not isinstance(version, int):
        version = None
    return name, version
