"""Helpers for stages that drop segments and documents, with a ledger row each."""
from __future__ import annotations

from typing import Callable

from ..ledger import LedgerRow, remove_document, remove_segment


def keep_segments(stage: str, doc: dict, keep: list[bool], reasons: list[str | None], details: list[str],
                  rows: list[LedgerRow], keep_text: Callable[[str], bool] = lambda r: True) -> dict:
    """Drop the segments whose ``keep`` is False, with a ledger row each; return the document."""
    if all(keep):
        return doc
    for i, k in enumerate(keep):
        if not k:
            rows.append(remove_segment(stage, doc, i, reasons[i] or "removed", details[i], keep_text(reasons[i] or "")))
    idx = [i for i, k in enumerate(keep) if k]
    for name in ("segments", "seg_index", "original", "seg_script", "seg_lang", "seg_score"):
        if doc.get(name) is not None and len(doc[name]) == len(keep):
            doc[name] = [doc[name][i] for i in idx]
    return doc


def drop_empty(stage: str, docs: list[dict], rows: list[LedgerRow], reason: str = "no-segments-left") -> list[dict]:
    out = []
    for d in docs:
        if d["segments"]:
            out.append(d)
        else:
            rows.append(remove_document(stage, d, reason, "every segment was removed"))
    return out
