"""The document record and its Arrow schema.

A document is the unit of provenance (one transcript, one page, one message,
one sheet row); its ``segments`` are lines or utterances.  Stages may add
fields but never drop the provenance fields.
"""
from __future__ import annotations

import json
from typing import Any, Iterable

import pyarrow as pa

__all__ = ["SCHEMA", "PROVENANCE_FIELDS", "new_document", "to_table", "from_table", "jsonable"]

PROVENANCE_FIELDS = (
    "id", "source", "dialect", "script", "lang", "medium",
    "licence", "consent", "contributor", "date",
)

SCHEMA = pa.schema([
    pa.field("id", pa.string(), nullable=False),
    pa.field("source", pa.string(), nullable=False),
    pa.field("segments", pa.list_(pa.string())),
    # Position of each segment at ingest: the ledger names segments by it.
    pa.field("seg_index", pa.list_(pa.int32())),
    # Segments as they were after medium clean-up, before any rewriting stage.
    pa.field("original", pa.list_(pa.string())),
    pa.field("dialect", pa.string()),
    pa.field("script", pa.string()),
    pa.field("lang", pa.string()),
    pa.field("medium", pa.string()),
    pa.field("licence", pa.string()),
    pa.field("consent", pa.string()),
    pa.field("contributor", pa.string()),
    pa.field("date", pa.string()),
    # Free-form metadata, stored as a JSON object string.
    pa.field("meta", pa.string()),
    # Per-segment fields added by stages.
    pa.field("seg_script", pa.list_(pa.string())),
    pa.field("seg_lang", pa.list_(pa.string())),
    pa.field("seg_score", pa.list_(pa.float32())),
    pa.field("langid_score", pa.float32()),
    pa.field("variants_applied", pa.int32()),
    pa.field("transliterated", pa.bool_()),
    pa.field("redistributable", pa.bool_()),
    pa.field("split", pa.string()),
])

_DEFAULTS: dict[str, Any] = {name: None for name in SCHEMA.names}


def new_document(**fields: Any) -> dict[str, Any]:
    """A record with every schema field present (missing ones are None).

    >>> d = new_document(id="s:1", source="s", segments=["a", "b"])
    >>> d["seg_index"], d["dialect"]
    ([0, 1], None)
    """
    unknown = set(fields) - set(SCHEMA.names)
    if unknown:
        raise KeyError(f"unknown record fields: {sorted(unknown)}")
    doc = dict(_DEFAULTS)
    doc.update(fields)
    if doc["segments"] is None:
        doc["segments"] = []
    if doc["seg_index"] is None:
        doc["seg_index"] = list(range(len(doc["segments"])))
    if isinstance(doc["meta"], dict):
        doc["meta"] = json.dumps(doc["meta"], ensure_ascii=False, sort_keys=True)
    elif doc["meta"] is None:
        doc["meta"] = "{}"
    return doc


def to_table(docs: Iterable[dict[str, Any]]) -> pa.Table:
    return pa.Table.from_pylist(list(docs), schema=SCHEMA)


def from_table(table: pa.Table) -> list[dict[str, Any]]:
    return table.to_pylist()


def jsonable(doc: dict[str, Any]) -> dict[str, Any]:
    """The exported form of a record: meta as an object, empty stage fields dropped."""
    out: dict[str, Any] = {}
    for key, value in doc.items():
        if key == "meta":
            out[key] = json.loads(value or "{}")
        elif key in PROVENANCE_FIELDS or key == "segments" or value is not None:
            out[key] = value
    return out
