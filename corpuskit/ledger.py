"""The ledger: one row per removed or rewritten unit, and the conservation check.

``documents in = documents kept + documents removed`` and the same for
segments, where a removed document takes its remaining segments with it.
A segment joined into a neighbour (a transcript's cue fragment, a broken OCR
line) leaves as a unit but its text lives on: its row is a removal with
``merged_into`` set to the position of the segment that took it, and the
counts show such merges apart from the removals proper.
"""
from __future__ import annotations

from collections import Counter
from dataclasses import dataclass
from typing import Any, Iterable

import pyarrow as pa

__all__ = ["LedgerRow", "LEDGER_SCHEMA", "remove_document", "remove_segment", "merge_segment", "rewrite",
           "Counts", "count_partition", "conservation"]

LEDGER_SCHEMA = pa.schema([
    ("stage", pa.string()),
    ("unit", pa.string()),          # document | segment
    ("action", pa.string()),        # removed | rewritten
    ("doc_id", pa.string()),
    ("seg_index", pa.int32()),      # position at ingest; -1 for a document row
    ("segments", pa.int32()),       # segments leaving with a removed document
    ("reason", pa.string()),
    ("detail", pa.string()),
    ("dup_of", pa.string()),
    ("text", pa.string()),          # the removed or original text, when safe to keep
    ("lang", pa.string()),          # the language label language ID gave the unit (a document: its majority)
    ("lang_score", pa.float32()),   # P(target language) of a segment; a document's mean over its target segments
    ("target_segments", pa.int32()),  # a removed document: how many of its segments were in the target language
    ("merged_into", pa.int32()),    # a segment joined into a neighbour: that neighbour's position at ingest
])


@dataclass(frozen=True)
class LedgerRow:
    stage: str
    unit: str
    action: str
    doc_id: str
    seg_index: int
    segments: int
    reason: str
    detail: str = ""
    dup_of: str | None = None
    text: str | None = None
    lang: str | None = None
    lang_score: float | None = None
    target_segments: int | None = None
    merged_into: int | None = None

    def as_dict(self) -> dict[str, Any]:
        return dict(self.__dict__)      # the fields in order; every one is a scalar (asdict's deep copy is slow)


def remove_document(stage: str, doc: dict, reason: str, detail: str = "", dup_of: str | None = None,
                    keep_text: bool = False) -> LedgerRow:
    """A removed document; with `keep_text`, its segments (one per line, 2000 characters at most) go along."""
    text = "\n".join(doc["segments"])[:2000] if keep_text else None
    labels = doc.get("seg_lang") or []
    majority = max(sorted(set(labels)), key=labels.count) if labels else None
    language = doc.get("lang")
    target = sum(1 for lab in labels if lab == language) if labels and language else None
    return LedgerRow(stage, "document", "removed", doc["id"], -1, len(doc["segments"]), reason, detail, dup_of, text,
                     majority, doc.get("langid_score"), target)


def remove_segment(stage: str, doc: dict, position: int, reason: str, detail: str = "",
                   keep_text: bool = True, dup_of: str | None = None) -> LedgerRow:
    text = doc["segments"][position] if keep_text else None
    labels, scores = doc.get("seg_lang") or [], doc.get("seg_score") or []
    return LedgerRow(stage, "segment", "removed", doc["id"], int(doc["seg_index"][position]), 1,
                     reason, detail, dup_of, text[:500] if text else text,
                     labels[position] if position < len(labels) else None,
                     scores[position] if position < len(scores) else None)


def merge_segment(stage: str, doc: dict, position: int, into: int, reason: str, detail: str = "") -> LedgerRow:
    """A segment joined into the segment at ingest position ``into``: the unit leaves, its text does not."""
    return LedgerRow(stage, "segment", "removed", doc["id"], int(doc["seg_index"][position]), 1, reason, detail, None,
                     doc["segments"][position][:500], merged_into=int(into))


def rewrite(stage: str, doc_id: str, seg_index: int, reason: str, detail: str = "", text: str | None = None) -> LedgerRow:
    return LedgerRow(stage, "segment" if seg_index >= 0 else "document", "rewritten", doc_id, seg_index, 0,
                     reason, detail, None, text)


@dataclass
class Counts:
    docs_in: int = 0
    docs_out: int = 0
    segs_in: int = 0
    segs_out: int = 0
    removed: Counter | None = None      # reason -> documents or segments removed
    rewritten: Counter | None = None    # reason -> rewrites
    merged: Counter | None = None       # reason -> segments joined into a neighbour (not in ``removed``)

    def __post_init__(self) -> None:
        self.removed = Counter(self.removed or {})
        self.rewritten = Counter(self.rewritten or {})
        self.merged = Counter(self.merged or {})

    def add(self, other: "Counts") -> "Counts":
        return Counts(self.docs_in + other.docs_in, self.docs_out + other.docs_out,
                      self.segs_in + other.segs_in, self.segs_out + other.segs_out,
                      self.removed + other.removed, self.rewritten + other.rewritten, self.merged + other.merged)

    @property
    def docs_removed(self) -> int:
        return self.docs_in - self.docs_out

    def as_dict(self) -> dict[str, Any]:
        return {"docs_in": self.docs_in, "docs_out": self.docs_out, "segs_in": self.segs_in,
                "segs_out": self.segs_out, "removed": dict(sorted(self.removed.items())),
                "rewritten": dict(sorted(self.rewritten.items())), "merged": dict(sorted(self.merged.items()))}

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> "Counts":
        return cls(d["docs_in"], d["docs_out"], d["segs_in"], d["segs_out"], d["removed"], d["rewritten"], d.get("merged"))


def count_partition(docs_in: Iterable[dict], docs_out: Iterable[dict], rows: Iterable[LedgerRow | dict]) -> Counts:
    docs_in, docs_out = list(docs_in), list(docs_out)
    c = Counts(len(docs_in), len(docs_out), sum(len(d["segments"]) for d in docs_in),
               sum(len(d["segments"]) for d in docs_out))
    for row in rows:
        r = row if isinstance(row, dict) else row.as_dict()
        key = f"{r['unit']}:{r['reason']}"
        if r["action"] == "removed" and r.get("merged_into") is not None:
            c.merged[key] += 1
        elif r["action"] == "removed":
            c.removed[key] += 1
        else:
            c.rewritten[key] += 1
    return c


def conservation(stage_ledgers: dict[str, dict[str, int]], docs_in: int, segs_in: int,
                 docs_kept: int, segs_kept: int) -> dict[str, Any]:
    """Check in = kept + removed for documents and segments over a whole run.

    ``stage_ledgers`` maps each stage to its removal totals from the ledger:
    ``{"documents": n, "segments_of_documents": m, "segments": k, "segments_merged": j}``, where
    ``segments`` counts every segment row (merges included) and ``segments_merged`` the merges
    among them, shown apart.
    """
    docs_removed = sum(v["documents"] for v in stage_ledgers.values())
    segs_removed = sum(v["segments"] + v["segments_of_documents"] for v in stage_ledgers.values())
    segs_merged = sum(v.get("segments_merged", 0) for v in stage_ledgers.values())
    return {
        "documents": {"in": docs_in, "kept": docs_kept, "removed": docs_removed,
                      "holds": docs_in == docs_kept + docs_removed},
        "segments": {"in": segs_in, "kept": segs_kept, "removed": segs_removed, "merged_into_neighbours": segs_merged,
                     "holds": segs_in == segs_kept + segs_removed},
    }
