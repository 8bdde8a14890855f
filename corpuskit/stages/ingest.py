"""Ingest: read every source with its reader and attach the source's provenance."""
from __future__ import annotations

import json
import os
from collections import defaultdict
from dataclasses import dataclass
from pathlib import Path
from typing import Iterator

from ..ledger import Counts, LedgerRow
from ..readers import READERS
from ..readers._decode import TextFile
from ..recipe import SourceSpec, build
from ..records import new_document

VERSION = "1"


@dataclass(frozen=True)
class Params:
    pass


def group_files(source: SourceSpec, files: list[Path], folder: Path) -> list[list[tuple[Path, str]]]:
    """Files read together: one per file, or all pages of a booklet folder for OCR pages."""
    rel = [(p, os.path.relpath(p, folder)) for p in files]
    if source.format == "ocr-pages" and source.options.get("booklet", "folder") == "folder":
        groups: dict[str, list] = defaultdict(list)
        for p, r in rel:
            groups[os.path.dirname(r)].append((p, r))
        return [groups[k] for k in sorted(groups)]
    return [[x] for x in rel]


def _provenance(source: SourceSpec) -> dict:
    return {"source": source.id, "dialect": source.dialect or None, "script": source.script or None,
            "medium": source.medium, "licence": source.licence, "consent": source.consent,
            "contributor": source.contributor or None, "date": source.date or None,
            "redistributable": bool(source.redistributable)}


def _documents(source: SourceSpec, files: list[tuple[str, str]], issues: list[LedgerRow],
               warnings: list[str]) -> Iterator[dict]:
    reader = READERS[source.format]
    opts = build(reader.Options, source.options, f"[[sources]] id = '{source.id}' options", "recipe")
    base = _provenance(source)
    if source.format == "ocr-pages" and getattr(opts, "booklet", "") == "folder":
        segments, pages, lines = [], [], []
        for path, rel in files:
            tf = TextFile(Path(path), rel, source.id, source.encoding)
            for d in reader.read(tf, opts):
                pages.append({"file": rel, "first": len(segments), "count": len(d["segments"])})
                segments.extend(d["segments"])
                lines.extend(d["meta"]["lines"])
            issues.extend(tf.issues)
            warnings.extend(tf.warnings)
        if segments:
            folder = os.path.dirname(files[0][1]) or "."
            yield new_document(id=f"{source.id}:{folder}", segments=segments,
                               meta={"folder": folder, "pages": pages}, **base)
        return
    for path, rel in files:
        tf = TextFile(Path(path), rel, source.id, source.encoding)
        if source.format == "warc":
            tf.lines = lambda: iter(())  # the WARC reader streams records itself
        for d in reader.read(tf, opts):
            fields = dict(base)
            for name in ("dialect", "contributor", "date"):
                if d.get(name):
                    fields[name] = d[name]
            yield new_document(id=f"{source.id}:{rel}:{d['key']}", segments=d["segments"], meta=d["meta"], **fields)
        issues.extend(tf.issues)
        warnings.extend(tf.warnings)


def ingest_unit(source: SourceSpec, files: list[tuple[str, str]], partition_docs: int):
    """Partitions of (documents, ledger rows) for one group of files; at least one partition."""
    issues: list[LedgerRow] = []
    warnings: list[str] = []
    parts, chunk, seen = [], [], set()
    for doc in _documents(source, files, issues, warnings):
        if doc["id"] in seen:  # ids must be unique: make a repeated key unique by position
            doc["id"] = f"{doc['id']}#{len(seen)}"
        seen.add(doc["id"])
        chunk.append(doc)
        if len(chunk) >= partition_docs:
            parts.append((chunk, []))
            chunk = []
    if chunk or not parts:
        parts.append((chunk, []))
    parts[0] = (parts[0][0], issues)
    return parts, warnings


def counts(docs: list[dict], rows: list[LedgerRow]) -> Counts:
    segs = sum(len(d["segments"]) for d in docs)
    c = Counts(len(docs), len(docs), segs, segs)
    for r in rows:
        key = f"{r.unit}:{r.reason}"
        if r.action == "removed":
            c.removed[key] += 1
            if r.unit == "segment":
                c.segs_in += 1
        else:
            c.rewritten[key] += 1
    return c


def context_key(recipe, params) -> str:  # pragma: no cover - ingest is planned by the runner
    return ""


def dumps(doc: dict) -> str:  # pragma: no cover - debugging aid
    return json.dumps(doc, ensure_ascii=False)
