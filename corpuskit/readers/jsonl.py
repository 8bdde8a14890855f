"""JSON Lines: one document per line, fields mapped in the recipe."""
from __future__ import annotations

import json
import re
from dataclasses import dataclass
from typing import Iterator

from ..ledger import LedgerRow, rewrite
from ..config import Checked, param
from .decode import TextFile


@dataclass(frozen=True)
class Options(Checked):
    text_field: str = param("text", help="the field with the text (a string or a list of segments)")
    id_field: str = param("id", help="the field with a stable id")
    dialect_field: str = param("dialect", help="the field naming the dialect")
    contributor_field: str = param("contributor", help="the field naming the contributor")


JSON_LINE_BYTES = 64 << 20   # one record may hold a whole book
_SURROGATE = re.compile("[\ud800-\udfff]")


def _without_lone_surrogates(value):
    """JSON allows escapes of unpaired surrogates (RFC 8259 section 8.2); they are not text and
    cannot be written as UTF-8.  Each becomes U+FFFD; returns the value and how many there were."""
    if isinstance(value, str):
        return _SURROGATE.subn("\ufffd", value) if _SURROGATE.search(value) else (value, 0)
    if isinstance(value, list):
        pairs = [_without_lone_surrogates(v) for v in value]
        return [v for v, _ in pairs], sum(k for _, k in pairs)
    if isinstance(value, dict):
        pairs = {k: _without_lone_surrogates(v) for k, v in value.items()}
        return {k: v for k, (v, _) in pairs.items()}, sum(n for _, n in pairs.values())
    return value, 0


def read(tf: TextFile, opts: Options) -> Iterator[dict]:
    tf.max_line_bytes = JSON_LINE_BYTES
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
        obj, fixed = _without_lone_surrogates(obj)
        if fixed:
            tf.issues.append(rewrite("ingest", tf.file_id, n, "lone-surrogates",
                                     f"{tf.rel} line {n}: {fixed} lone surrogate escapes (\\ud800-\\udfff) "
                                     "replaced by U+FFFD"))
        text = obj.get(opts.text_field)
        segments = text if isinstance(text, list) else str(text or "").split("\n")
        for blank in (str(s) for s in segments if str(s) and not str(s).strip()):
            tf.whitespace_only(n, blank)
        segments = [str(s) for s in segments if str(s).strip()]
        if not segments:
            continue
        doc = {"key": str(obj.get(opts.id_field) or n), "segments": segments, "meta": {"file": tf.rel, "lines": [n]}}
        for field_name, key in (("dialect", opts.dialect_field), ("contributor", opts.contributor_field)):
            if obj.get(key):
                doc[field_name] = str(obj[key])
        yield doc
