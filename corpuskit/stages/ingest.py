"""Ingest: read every source with its reader and attach the source's provenance."""
from __future__ import annotations

import hashlib
import math
import os
from collections import defaultdict
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Iterator

from ..ledger import Counts, LedgerRow
from ..readers import READERS
from ..readers.decode import TextFile
from ..config import Checked, build
from ..globs import glob_prefix
from ..records import new_document
from ..storage import digest64

if TYPE_CHECKING:                     # a type only: the recipe module imports the stages
    from ..recipe import SourceSpec

VERSION = "5"


@dataclass(frozen=True)
class Params(Checked):
    pass


UNIT_BYTES = 16 << 20   # a unit of files read by one task aims at about this much input


def group_files(source: SourceSpec, files: list[Path], folder: Path) -> list[list[tuple[Path, str]]]:
    """Files read together by one task, in path order.

    Small files are batched so that a source of thousands of files does not become thousands
    of partitions.  A unit ends after a file (or, for OCR pages, a booklet folder) whose path
    hash is 0 modulo k, with k chosen from the mean file size: the boundaries depend on each
    path alone, so adding or changing one file changes only the unit it falls in and the rest
    stay cached.  Units are also cut at four times UNIT_BYTES.
    """
    rel = [(p, os.path.relpath(p, folder)) for p in files]
    if source.format == "ocr-pages" and source.options.get("booklet", "folder") == "folder":
        by_folder: dict[str, list] = defaultdict(list)
        for p, r in rel:
            by_folder[os.path.dirname(r)].append((p, r))
        items = [(k, by_folder[k]) for k in sorted(by_folder)]
    else:
        items = [(r, [(p, r)]) for p, r in rel]
    if not items:
        return []
    sizes = [sum(os.path.getsize(p) for p, _ in group) for _, group in items]
    mean = max(1.0, sum(sizes) / len(items))
    k = 1 << max(0, min(10, round(math.log2(max(1.0, UNIT_BYTES / mean)))))
    units, current, current_bytes = [], [], 0
    for (name, group), size in zip(items, sizes):
        current.extend(group)
        current_bytes += size
        if int(hashlib.sha1(name.encode("utf-8")).hexdigest()[:8], 16) % k == 0 or current_bytes >= 4 * UNIT_BYTES:
            units.append(current)
            current, current_bytes = [], 0
    if current:
        units.append(current)
    return units


def _provenance(source: SourceSpec) -> dict:
    return {"source": source.id, "dialect": source.dialect or None, "script": source.script or None,
            "medium": source.medium, "licence": source.licence, "consent": source.consent,
            "contributor": source.contributor or None, "date": source.date or None,
            "redistributable": bool(source.redistributable)}


def id_path(source: SourceSpec):
    """Paths as document ids use them: below the source's own root (its path up to the first
    wildcard), so renaming or moving the folder that holds a source keeps every id, and with it
    every train/dev/test assignment.

    >>> from corpuskit.recipe import SourceSpec
    >>> s = SourceSpec(id="web", path="../texts/web/*.txt", format="text", medium="web", licence="CC0-1.0",
    ...                consent="redistribution")
    >>> id_path(s)("../texts/web/page-1.txt")
    'page-1.txt'
    """
    root = os.path.dirname(glob_prefix(source.path))   # a single file: its folder

    def key(rel: str) -> str:
        inside = os.path.relpath(rel, root) if root else rel
        return inside if inside != "." else os.path.basename(rel)
    return key


def _documents(source: SourceSpec, files: list[tuple[str, str]], issues: list[LedgerRow],
               warnings: list[str]) -> Iterator[dict]:
    reader = READERS[source.format]
    opts = build(reader.Options, source.options, f"[[sources]] id = '{source.id}' options", "recipe")
    base = _provenance(source)
    key_of = id_path(source)
    if source.format == "ocr-pages" and getattr(opts, "booklet", "") == "folder":
        by_folder: dict[str, list] = defaultdict(list)
        for path, rel in files:
            by_folder[os.path.dirname(rel) or "."].append((path, rel))
        for folder in sorted(by_folder):  # one document per booklet folder, pages in order
            segments, pages = [], []
            for path, rel in by_folder[folder]:
                tf = TextFile(Path(path), rel, source.id, source.encoding, issues, warnings, tuple(source.encodings))
                for d in reader.read(tf, opts):
                    pages.append({"file": rel, "first": len(segments), "count": len(d["segments"])})
                    segments.extend(d["segments"])
            if segments:
                yield new_document(id=f"{source.id}:{key_of(folder)}", segments=segments,
                                   meta={"folder": folder, "pages": pages}, **base)
        return
    for path, rel in files:
        tf = TextFile(Path(path), rel, source.id, source.encoding, issues, warnings, tuple(source.encodings))
        if source.format == "warc":
            tf.lines = lambda: iter(())  # the WARC reader streams records itself
        prefix = f"{source.id}:{key_of(rel)}:"
        for d in reader.read(tf, opts):
            fields = dict(base)
            for name in ("dialect", "contributor", "date"):
                if d.get(name):
                    fields[name] = d[name]
            yield new_document(id=f"{prefix}{d['key']}", segments=d["segments"], meta=d["meta"], **fields)


def ingest_unit(source: SourceSpec, files: list[tuple[str, str]], partition_docs: int,
                warnings: list[str]) -> Iterator[tuple[list[dict], list[LedgerRow]]]:
    """Partitions of (documents, ledger rows) for one group of files, at least one, yielded as
    they fill: memory holds one partition, not the unit.  Each partition carries the rows of
    the lines read since the previous one; the last carries the rest."""
    issues: list[LedgerRow] = []
    chunk: list[dict] = []
    seen: set[int] = set()     # 64-bit digests of the ids so far: a set of ints, not of strings
    for doc in _documents(source, files, issues, warnings):
        if len(chunk) >= partition_docs:
            yield chunk, issues[:]
            chunk = []
            issues.clear()
        digest = digest64(doc["id"])
        if digest in seen:  # ids must be unique: make a repeated key unique by position
            doc["id"] = f"{doc['id']}#{len(seen)}"
            digest = digest64(doc["id"])
        seen.add(digest)
        chunk.append(doc)
    yield chunk, issues


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

