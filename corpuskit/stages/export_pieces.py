"""The export's work per partition, done by the engine's workers and kept in the cache.

A *piece* is what one final partition contributes to the output folder: its documents
as a gzip member and a block of plain text for each destination (public corpus,
restricted, train / dev / test), its share of every report (counts, balance tables,
script inventory, uncertain segments, tokenizer sample lines) as a small JSON summary,
and the ledger rows of one stage's partition as a gzip member.  Pieces are named by the
hash of what they are made from, so a re-run rebuilds only the pieces of partitions that
changed; the export then joins pieces by copying bytes (a gzip file may hold several
members, RFC 1952 section 2.2) and merges the summaries.
"""
from __future__ import annotations

import gzip
import hashlib
import heapq
import json
from collections import Counter, defaultdict
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..audit import LEAK_MIN_CHARS, LEAK_PREFIX_CHARS, leak_key, scan_piece
from ..ledger import Counts, remove_document
from ..people import pseudonymise_document
from ..records import jsonable
from ..storage import Cache, atomic_open, atomic_write_bytes, digest64
from .split import SPLITS

__all__ = ["PieceSettings", "LedgerSettings", "document_piece_task", "ledger_piece_task", "LedgerSummary",
           "ReviewPool", "SampleMerger", "shard_groups", "join_sections", "read_section", "pack_texts", "unpack_texts"]

VERSION = "6"
STAGE = "export"


@dataclass(frozen=True)
class PieceSettings:
    restricted: str                 # "separate" or "exclude"
    review_threshold: float | None  # the language-ID threshold, for the review sheet
    review_size: int
    sample_lines: dict              # sample group kind -> most lines kept ("train", "train:", "dev:")
    ledger: "LedgerSettings"
    secret: str = ""                # the pseudonym secret (hex); empty: names are kept
    named_as: tuple = ()            # (source, the team name the recipe gives it, keeps real names)
    language: str = ""              # BCP 47 tag, for word segmentation


@dataclass(frozen=True)
class LedgerSettings:
    scrub_pii: bool
    id_patterns: tuple
    not_public: tuple               # sources whose removed text may not appear in reports
    regions: tuple = ()             # regions whose national phone formats are scrubbed


def destination(doc: dict, restricted_policy: str) -> str:
    """'public', 'restricted' or 'excluded': only a document whose consent scope and licence
    both allow redistribution is public (the flag is set at ingest from the source's metadata)."""
    if doc["redistributable"] is True:
        return "public"
    return "excluded" if restricted_policy == "exclude" else "restricted"


def line_priority(doc_id: str, position: int) -> int:
    """A 64-bit priority per segment for bottom-k sampling: the k lowest over the whole corpus
    are a uniform sample that does not depend on the order documents arrive in."""
    return int.from_bytes(hashlib.blake2b(f"{doc_id}\x1f{position}".encode(), digest_size=8).digest(), "big")


class ReviewPool:
    """The ``size`` segments whose P(target) is closest to the threshold, kept while streaming."""

    def __init__(self, threshold: float | None, size: int):
        self.threshold, self.size, self.items = threshold, size, []

    def extend(self, scored) -> None:
        if self.threshold is None or not self.size:
            return
        self.items.extend(tuple(x) for x in scored)
        if len(self.items) > 4 * self.size + 1000:
            self.items = self.best()

    def best(self) -> list[tuple[str, str, float]]:
        return heapq.nsmallest(self.size, self.items, key=lambda x: (abs(x[2] - self.threshold), x[0]))


# -- the documents of one partition ---------------------------------------------------------

def document_piece_task(cache_root: str, in_stage: str, key: str, settings: PieceSettings, name: str) -> str:
    """Write the piece ``name`` of partition ``key``; its summary JSON is written last."""
    from ..reports import balance
    cache = Cache(Path(cache_root).parent)
    if cache.has_blob(STAGE, f"{name}.json"):
        return name
    docs = cache.read_docs(in_stage, key)
    lines: dict[str, list[str]] = defaultdict(list)
    records: dict[str, list[str]] = defaultdict(list)
    stats, inventory = balance.Accumulator(settings.language), balance.ScriptInventory()
    review = ReviewPool(settings.review_threshold, settings.review_size)
    samples: dict[str, list[tuple[int, str]]] = defaultdict(list)
    by_source: dict[str, Counter] = defaultdict(Counter)
    split_counts: dict[tuple[str, str], list[int]] = defaultdict(lambda: [0, 0])
    counts, export_rows = Counts(), []
    secret = bytes.fromhex(settings.secret) if settings.secret else b""
    naming = {source: (team, keeps) for source, team, keeps in settings.named_as}
    people: dict[str, str] = {}
    restricted_texts: set[str] = set()
    public_digests: set[int] = set()
    inventory_docs: list[tuple[dict, bool]] = []
    for d in docs:
        team, keeps_names = naming.get(d["source"], (None, False))
        if secret and not keeps_names:
            pseudonymise_document(d, secret, team, people)
        counts.docs_in += 1
        counts.segs_in += len(d["segments"])
        where = destination(d, settings.restricted)
        keys = [k for k in map(leak_key, d["segments"]) if len(k) >= LEAK_MIN_CHARS]
        if where == "public":
            public_digests.update(map(digest64, keys))
            public_digests.update(digest64(k[:LEAK_PREFIX_CHARS]) for k in keys if len(k) > LEAK_PREFIX_CHARS)
        else:
            restricted_texts.update(keys)
        if where == "excluded":
            export_rows.append(remove_document("export", d, "not-redistributable",
                                               f"consent '{d['consent']}' / licence '{d['licence']}'"))
            counts.removed["document:not-redistributable"] += 1
            continue
        counts.docs_out += 1
        counts.segs_out += len(d["segments"])
        by_source[d["source"]]["documents kept"] += 1
        by_source[d["source"]]["segments kept"] += len(d["segments"])
        stats.add(d)
        inventory_docs.append((d, where == "public"))
        if d.get("seg_score"):
            review.extend((d["id"], s, sc) for s, sc in zip(d["segments"], d["seg_score"]) if sc is not None)
        targets = [where] if where == "restricted" else [where, d["split"] or "train"]
        record = json.dumps(jsonable(d), ensure_ascii=False, sort_keys=True)
        for target in targets:
            records[target].append(record)
            lines[target].extend(d["segments"])
            lines[target].append("")
        if where == "restricted":
            continue
        split, dialect = d["split"] or "train", d.get("dialect") or "unknown"
        by_source[d["source"]][f"split:{split}"] += 1
        cell = split_counts[(dialect, split)]
        cell[0] += 1
        cell[1] += len(d["segments"])
        groups = ["train", f"train:{dialect}"] if split == "train" else [f"dev:{dialect}"] if split == "dev" else []
        for i, seg in enumerate(d["segments"]):
            priority = line_priority(d["id"], i) if groups else 0
            for g in groups:
                samples[g].append((priority, seg))
    inventory.add_many(inventory_docs)
    sections = PieceFile()
    files, text_of = {}, {}
    for target, recs in records.items():
        text_of[target] = "\n".join(lines[target])
        sections.add(f"{target}.jsonl.gz", gzip.compress(("\n".join(recs) + "\n").encode("utf-8"), compresslevel=6, mtime=0))
        sections.add(f"{target}.txt", text_of[target].encode("utf-8"))
        files[target] = len(recs)
    # The leak audit's checks that depend on this piece alone, on the very lines the public files get.
    public = [t for t in records if t != "restricted"]
    ls = settings.ledger
    audit_hits, field_strings = scan_piece({t: records[t] for t in public}, {t: text_of[t] for t in public},
                                           ls.not_public, ls.id_patterns, ls.regions, ls.scrub_pii)
    string_lengths, strings = pack_texts(field_strings)
    sections.add("audit.lengths", string_lengths)
    sections.add("audit.strings", strings)
    sample_groups, priorities, texts = {}, [], []
    for g in sorted(samples):
        limit = settings.sample_lines["train" if g == "train" else g.split(":", 1)[0] + ":"]
        chosen = heapq.nsmallest(limit, samples[g])
        sample_groups[g] = len(chosen)
        priorities.extend(p for p, _ in chosen)
        texts.extend(t for _, t in chosen)
    sections.add("sample.priorities", np.array(priorities, dtype="<u8").tobytes())
    lengths, joined = pack_texts(texts)
    sections.add("sample.lengths", lengths)
    sections.add("sample.text", joined)
    sections.add("public.digests", np.array(sorted(public_digests), dtype="<u8").tobytes())
    ledger_rows = [r.as_dict() for r in export_rows]
    ledger = summarise_ledger_rows(ledger_rows, settings.ledger)
    if ledger_rows:
        sections.add("ledger.gz", _gzip_rows(ledger_rows))
    atomic_write_bytes(cache.blob_path(STAGE, f"{name}.bin"), sections.data())
    summary = {"counts": counts.as_dict(), "files": files, "by_source": {k: dict(v) for k, v in by_source.items()},
               "split_counts": [[d, s, n, segs] for (d, s), (n, segs) in sorted(split_counts.items())],
               "stats": stats.state(), "scripts": inventory.state(), "review": review.best() if review.threshold is not None else [],
               "sample_groups": sample_groups, "sections": sections.index, "ledger": ledger,
               "people": dict(sorted(people.items())), "restricted_texts": sorted(restricted_texts),
               "audit_clean": not audit_hits}
    cache.put_json(STAGE, f"{name}.json", summary)
    return name


def pack_texts(texts: list[str]) -> tuple[bytes, bytes]:
    """Texts as their lengths (code points, little-endian uint32) and their UTF-8 concatenation:
    any character may occur in a text, line breaks included (lone surrogates pass through)."""
    return (np.array([len(t) for t in texts], dtype="<u4").tobytes(),
            "".join(texts).encode("utf-8", "surrogatepass"))


def unpack_texts(lengths: bytes, joined: bytes) -> list[str]:
    """The texts ``pack_texts`` packed."""
    text = joined.decode("utf-8", "surrogatepass")
    ends = np.cumsum(np.frombuffer(lengths, dtype="<u4"), dtype=np.int64).tolist()
    return [text[start:end] for start, end in zip([0] + ends, ends)]


class PieceFile:
    """Byte sections of one piece, written as a single file; ``index`` maps labels to
    (offset, length)."""

    def __init__(self):
        self.index: dict[str, list[int]] = {}
        self._parts: list[bytes] = []
        self._size = 0

    def add(self, label: str, data: bytes) -> None:
        self.index[label] = [self._size, len(data)]
        self._parts.append(data)
        self._size += len(data)

    def data(self) -> bytes:
        return b"".join(self._parts)


def read_section(path: Path, section: list[int]) -> bytes:
    with open(path, "rb") as f:
        f.seek(section[0])
        return f.read(section[1])


def _gzip_rows(rows) -> bytes:
    text = "".join(json.dumps(r, ensure_ascii=False, sort_keys=True) + "\n" for r in rows)
    return gzip.compress(text.encode("utf-8"), compresslevel=6, mtime=0)


def _totals(rows) -> dict:
    tot = {"documents": 0, "segments_of_documents": 0, "segments": 0, "segments_merged": 0}
    for r in rows:
        if r["action"] == "removed" and r["unit"] == "document":
            tot["documents"] += 1
            tot["segments_of_documents"] += r["segments"]
        elif r["action"] == "removed" and r["unit"] == "segment":
            tot["segments"] += 1
            if r.get("merged_into") is not None:
                tot["segments_merged"] += 1
    return tot


class SampleMerger:
    """Bottom-k samples over all pieces: the k lowest line priorities of each group."""

    def __init__(self, limits: dict):
        self.limits = limits
        self.priorities: dict[str, list[np.ndarray]] = defaultdict(list)

    def limit(self, group: str) -> int:
        return self.limits["train" if group == "train" else group.split(":", 1)[0] + ":"]

    def add_priorities(self, groups: dict, priorities: np.ndarray) -> None:
        start = 0
        for g, n in groups.items():
            self.priorities[g].append(priorities[start:start + n])
            start += n

    def cutoffs(self) -> dict[str, int | None]:
        """Per group, the largest priority that is in the sample (None: the group is empty)."""
        out: dict[str, int | None] = {}
        for g, arrays in self.priorities.items():
            allp = np.concatenate(arrays)
            k = min(self.limit(g), len(allp))
            out[g] = int(np.partition(allp, k - 1)[k - 1]) if k else None
        return out

    @staticmethod
    def read(texts: list[str], groups: dict, priorities: np.ndarray, cutoffs: dict, into: dict) -> None:
        """Add this piece's sampled lines (priority, text) per group to ``into``."""
        start = 0
        for g, n in groups.items():
            cutoff = cutoffs.get(g)
            take = 0 if cutoff is None else int(np.searchsorted(priorities[start:start + n], np.uint64(cutoff), side="right"))
            into[g].extend(zip(priorities[start:start + take].tolist(), texts[start:start + take]))
            start += n


# -- the ledger rows of one stage's partition ------------------------------------------------

@dataclass
class LedgerSummary:
    """What the export's reports need from the ledger."""
    totals: dict = field(default_factory=dict)
    by_source: dict = field(default_factory=lambda: defaultdict(Counter))
    removal_examples: dict = field(default_factory=lambda: defaultdict(list))
    rewrite_by_reason: Counter = field(default_factory=Counter)
    target_segments_lost: int = 0     # target-language segments of documents language ID removed whole

    def merge(self, stage: str, piece: dict) -> None:
        tot = self.totals.setdefault(stage, {"documents": 0, "segments_of_documents": 0, "segments": 0,
                                             "segments_merged": 0})
        for k, v in piece["totals"].items():
            tot[k] += v
        for source, tally in piece["by_source"].items():
            self.by_source[source].update(tally)
        for reason, examples in piece["examples"].items():
            have = self.removal_examples[f"{stage}:{reason}"]
            have.extend(examples[:3 - len(have)])
        self.rewrite_by_reason.update({f"{stage}:{k}": v for k, v in piece["rewrites"].items()})
        if stage == "langid":
            self.target_segments_lost += piece.get("target_segments_lost", 0)


def summarise_ledger_rows(rows: list[dict], settings: LedgerSettings) -> dict:
    """Scrub personal data from the rows' text (in place) and count what the reports need:
    removals per stage total and per source, up to three examples per reason from
    redistributable sources, rewrites by reason.  (Stage figures such as variant rewrites come
    from the stages' typed figures, not from the rows.)"""
    from ..pii import scrub
    by_source: dict[str, Counter] = defaultdict(Counter)
    examples: dict[str, list[str]] = defaultdict(list)
    rewrites = Counter()
    for r in rows:
        if r.get("text") and settings.scrub_pii:
            r["text"] = scrub(r["text"], settings.id_patterns, settings.regions)[0]
        source = r["doc_id"].split(":", 1)[0]
        if r["action"] == "removed" and r["unit"] == "document":
            by_source[source]["documents removed"] += 1
            by_source[source]["segments removed"] += r["segments"]
        elif r["action"] == "removed" and r["unit"] == "segment":
            by_source[source]["segments removed"] += 1
        else:
            by_source.setdefault(source, Counter())
        if r["action"] == "removed" and r["unit"] in ("document", "segment"):
            ex = examples[r["reason"]]
            if len(ex) < 3 and r.get("text") and source not in settings.not_public:
                ex.append(r["text"][:120])
        elif r["action"] == "rewritten":
            rewrites[r["reason"]] += 1
    return {"rows": len(rows), "totals": _totals(rows), "by_source": {k: dict(v) for k, v in by_source.items()},
            "examples": dict(examples), "rewrites": dict(rewrites),
            "target_segments_lost": sum(r.get("target_segments") or 0 for r in rows
                                        if r["stage"] == "langid" and r["unit"] == "document")}


def ledger_piece_task(cache_root: str, stage: str, key: str, settings: LedgerSettings, name: str) -> str:
    """Scrub and compress one partition's ledger rows; summarise them for the reports."""
    cache = Cache(Path(cache_root).parent)
    if cache.has_blob(STAGE, f"{name}.json"):
        return name
    rows = cache.read_ledger(stage, key).to_pylist()
    summary = summarise_ledger_rows(rows, settings)
    if rows:
        atomic_write_bytes(cache.blob_path(STAGE, f"{name}.gz"), _gzip_rows(rows))
    cache.put_json(STAGE, f"{name}.json", summary)
    return name


# -- joining pieces ---------------------------------------------------------------------------

def shard_groups(sizes: list[int], shard_docs: int | None) -> list[list[int]]:
    """Pieces (by position) per output shard.  Shards hold whole pieces: a shard closes before
    the piece that would take it past ``shard_docs`` documents, so a piece larger than that is a
    shard of its own.  Empty pieces are skipped; there is always at least one shard."""
    groups, current, n = [], [], 0
    for i, size in enumerate(sizes):
        if not size:
            continue
        if current and shard_docs is not None and n + size > shard_docs:
            groups.append(current)
            current, n = [], 0
        current.append(i)
        n += size
    if current or not groups:
        groups.append(current)
    return groups


def join_sections(path: Path, pieces: list[tuple[Path, list[int]]], separator: bytes = b"",
                  empty: bytes = b"") -> None:
    """Concatenate byte sections of piece files into ``path`` (``separator`` between them,
    ``empty`` when there are none), published atomically."""
    with atomic_open(path) as out:
        if not pieces:
            out.write(empty)
        for i, (piece, (offset, length)) in enumerate(pieces):
            if i and separator:
                out.write(separator)
            with open(piece, "rb") as f:
                f.seek(offset)
                while length:
                    chunk = f.read(min(length, 1 << 20))
                    out.write(chunk)
                    length -= len(chunk)


EMPTY_GZIP = gzip.compress(b"", compresslevel=6, mtime=0)
