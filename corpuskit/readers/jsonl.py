"""JSON Lines: one document per line, fields mapped in the recipe."""
from __future__ import annotations

import json
from dataclasses import dataclass
from typing import Iterator

from ..ledger import LedgerRow
from ..recipe import param
from ._decode import TextFile


@dataclass(frozen=True)
class Options:
    text_field: str = param("text", help="the field with the text (a string or a list of segments)")
    id_field: str = param("id", help="the field with a stable id")
    dialect_field: str = param("dialect", help="the field naming the dialect")
    contributor_field: str = param("contributor", help="the field naming the contributor")


def read(tf: TextFile, opts: Options) -> Iterator[dict]:
    for n, line in tf.lines():
        if not line.strip():
            continue
        try:
            obj = json.loads(line)
            if not isinstance(obj, dict):
                raise ValueError("not a JSON object")
        except ValueError as exc:
            tf.issues.append(LedgerRow("ingest", "segment", "removed", f"{tf.file_id}:{n}", n, 1, "malformed-json",
                                       f"{tf.rel} line {n}: {str(exc)[:200]}; line skipped", None, line[:500]))
            continue
        text = obj.get(opts.text_field)
        segments = text if isinstance(text, list) else str(text or "").split("\n")
        segments = [str(s) for s in segments if str(s).strip()]
        if not segments:
            continue
        doc = {"key": str(obj.get(opts.id_field) or n), "segments": segments, "meta": {"file": tf.rel, "lines": [n]}}
        for field_name, key in (("dialect", opts.dialect_field), ("contributor", opts.contributor_field)):
            if obj.get(key):
                doc[field_name] = str(obj[key])
        yield doc
