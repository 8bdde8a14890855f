"""Exact and near-duplicate removal (MinHash + LSH, verified exactly) and cross-source boilerplate.

Texts are compared after case folding and collapsing white space (``normalise_for_hash``), as
sets of character (or word) n-grams.  Signatures are computed vectorised with numpy: the n-grams
of a document are hashed at once with a polynomial rolling hash, mixed with the Murmur3 64-bit
finaliser, and permuted with ``num_perm`` affine maps ``(a*h + b) mod 2^32`` (a odd), taking each
column's minimum: the min-wise scheme of Broder (1997).  Bands and rows are chosen so that a pair
at the threshold becomes a candidate with probability at least 0.99 (``lsh_params``).

Every candidate pair is then verified exactly: the Jaccard similarity of the two documents'
n-gram sets, kept per partition.  Documents are visited in keep order (the recipe's source
priority, the source's own priority, longer first, earlier first); a document is removed when a
document already kept has exact Jaccard at or above the threshold with it, and the ledger names
that kept twin and the similarity.  So every removal is within the threshold of its named twin;
unlike clustering by connected components, a chain A~B~C where only B is close to both keeps C
when B is removed (C is not a near-duplicate of anything kept).
"""
from __future__ import annotations

import hashlib
import io
import mmap
import os
from collections import Counter, defaultdict
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from ..ledger import LedgerRow, remove_document
from ..config import Checked, param
from ..lsh import BANDWISE_ABOVE, band_keys, band_pairs, candidates_by_shuffle, candidates_by_sorting, lsh_params, s_curve
from ..minhash import (batch_signatures, exact_jaccard,
                       normalise_for_hash, permutations, shingles_of_texts)
from ..storage import Cache, atomic_write_bytes, stable_hash
from .contract import Applied, Decisions, Services
from .units import keep_segments

VERSION = "3"


@dataclass(frozen=True)
class Params(Checked):
    num_perm: int = param(128, low=16, high=1024, help="MinHash permutations")
    threshold: float = param(0.7, low=0.1, high=1.0, help="Jaccard similarity at which documents are near-duplicates")
    shingle: str = param("char", choices=("char", "word"), help="n-grams of characters or of words")
    ngram: int = param(5, low=1, high=20, help="n-gram length")
    min_shingles: int = param(5, low=1, high=100_000, help="documents with fewer n-grams only take part in exact-duplicate removal")
    fp_weight: float = param(0.3, low=0.0, high=1.0, help="no longer used: bands and rows are chosen so that a pair at "
                                                         "the threshold is a candidate with probability 0.99, and every "
                                                         "candidate is verified exactly")
    source_priority: list[str] = param([], help="source ids, most trusted first, for choosing which twin to keep")
    boilerplate_min_docs: int = param(5, low=2, high=10_000_000, help="a segment in this many documents ...")
    boilerplate_min_sources: int = param(2, low=1, high=100_000, help="... of this many sources is boilerplate")


# -- shingle sets, verification, signatures per partition ----------------------------------

class NpyFiles:
    """Open ``.npy`` files of uint32 values, by number: (file, offset of the data, shape), the
    header read once; at most ``limit`` are held open (all are closed when it is reached)."""

    def __init__(self, paths: list[Path], ndim: int, limit: int = 64):
        self.paths, self.ndim, self.limit = paths, ndim, limit
        self._open: dict[int, tuple[Any, int, tuple]] = {}
        self._layouts: dict[int, tuple[int, tuple]] = {}

    def get(self, p: int) -> tuple[Any, int, tuple]:
        if p not in self._open:
            if len(self._open) >= self.limit:
                self._open.clear()      # the files close as they are dropped
            f = open(self.paths[p], "rb", buffering=0)
            if p not in self._layouts:
                version = np.lib.format.read_magic(f)
                read_header = np.lib.format.read_array_header_1_0 if version == (1, 0) else np.lib.format.read_array_header_2_0
                shape, _, dtype = read_header(f)
                if dtype != np.dtype("<u4") or len(shape) != self.ndim:
                    raise ValueError(f"{self.paths[p]}: not an array of {self.ndim} dimension(s) of uint32")
                self._layouts[p] = (f.tell(), shape)
            self._open[p] = (f, *self._layouts[p])
        return self._open[p]


class ShingleSets:
    """Each document's n-gram hashes, read from the partitions' files on demand."""

    CACHE_VALUES = 8_000_000   # distinct n-gram hashes kept for rows asked for again (32 MB)

    def __init__(self, files: list[Path] | None = None, offsets: list[np.ndarray] | None = None,
                 part_offsets: np.ndarray | None = None, sets: list[np.ndarray] | None = None):
        self.files, self.offsets, self.part_offsets, self._sets = NpyFiles(files or [], 1), offsets or [], part_offsets, sets
        self._distinct: dict[int, np.ndarray] = {}
        self._held = 0

    def get(self, row: int) -> np.ndarray:
        """Row ``row``'s distinct n-gram hashes, sorted (only candidates are ever asked for)."""
        got = self._distinct.get(row)
        if got is None:
            if self._held > self.CACHE_VALUES:
                self._distinct.clear()
                self._held = 0
            got = self._distinct[row] = np.unique(self._raw(row))
            self._held += len(got)
        return got

    def _raw(self, row: int) -> np.ndarray:
        """The row's n-gram hashes as stored: one positioned read of its partition's file (a
        numpy memory map per read cost 0.2 ms of set-up, and rows are asked for in no order)."""
        if self._sets is not None:
            return self._sets[row]
        p = int(np.searchsorted(self.part_offsets, row, side="right") - 1)
        local = row - int(self.part_offsets[p])
        start, stop = int(self.offsets[p][local]), int(self.offsets[p][local + 1])
        f, data_at, _ = self.files.get(p)
        return np.frombuffer(os.pread(f.fileno(), 4 * (stop - start), data_at + 4 * start), dtype="<u4")


# Candidates whose estimated Jaccard is this far below the threshold are not verified: at 128
# permutations that is more than four standard errors (sqrt(J(1-J)/k) <= 0.044), so a true
# near-duplicate is skipped with probability well under 1 in 10,000.
ESTIMATE_MARGIN = 0.18


def verify_exactly(data: "SignatureSet", shingles: ShingleSets, pairs: np.ndarray,
                   threshold: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The candidate pairs whose exact Jaccard reaches ``threshold``: (left, right, Jaccard)."""
    if not len(pairs):
        return np.zeros(0, np.int64), np.zeros(0, np.int64), np.zeros(0)
    left, right, est = verify_pairs(data, pairs, threshold - ESTIMATE_MARGIN)
    exact = np.array([exact_jaccard(shingles.get(int(a)), shingles.get(int(b)))
                      for a, b in zip(left.tolist(), right.tolist())], dtype=float)
    keep = exact >= threshold - 1e-12
    return left[keep], right[keep], exact[keep]


def keep_order_removals(n: int, pairs: "NearPairs", order: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Visit documents in keep order; one with a verified twin among the documents already kept is
    removed.  Returns per row the kept twin (-1: kept) and the similarity with it."""
    twin = np.full(n, -1, dtype=np.int64)
    sim = np.zeros(n)
    if not len(pairs):
        return twin, sim
    rank = np.empty(n, dtype=np.int64)
    rank[order] = np.arange(n)
    neighbours: dict[int, list[tuple[int, float]]] = {}
    for a, b, j in pairs:
        neighbours.setdefault(a, []).append((b, j))
        neighbours.setdefault(b, []).append((a, j))
    for row in sorted(neighbours, key=lambda r: rank[r]):
        kept = [(j, -rank[other], other) for other, j in neighbours[row] if rank[other] < rank[row] and twin[other] < 0]
        if kept:
            j, _, other = max(kept)
            twin[row], sim[row] = other, j
    return twin, sim


def signatures_task(cache_root: str, in_stage: str, in_key: str, params: Params, out_name: str, stage: str,
                    earlier: tuple[str, str] | None = None) -> str:
    """One partition's signatures (``<name>.npy``, memory-mappable) and its per-document facts
    (``<name>.npz``: ids, shingle counts, lengths, exact-text and segment hashes).  ``earlier``
    (stage, name) names signatures of an earlier stage over the same documents: a document found
    there with as many segments (stages in between only drop whole segments) has the same text,
    and its signature is taken from there instead of computed again."""
    cache = Cache(Path(cache_root).parent)
    facts_path = cache.blob_path(stage, f"{out_name}.npz")
    if facts_path.exists():
        return out_name
    docs = cache.read_docs(in_stage, in_key)
    a, b = permutations(params.num_perm)
    texts = [" ".join(doc["segments"]) for doc in docs]
    seg_hashes = [segment_hash(s) for doc in docs for s in doc["segments"]]
    seg_offsets = np.cumsum([0] + [len(doc["segments"]) for doc in docs])
    found = _earlier_rows(cache, earlier, docs)
    fresh = [i for i, row in enumerate(found) if row < 0]
    hash_sets: list = [None] * len(docs)
    for i, h in zip(fresh, shingles_of_texts([texts[i] for i in fresh], params.ngram, params.shingle)):
        hash_sets[i] = h
    sigs = np.zeros((len(docs), params.num_perm), np.uint32)
    if fresh:
        sigs[fresh] = batch_signatures([hash_sets[i] for i in fresh], a, b)
    n_shingles = np.zeros(len(docs), np.int64)
    n_shingles[fresh] = [len(hash_sets[i]) for i in fresh]
    if len(fresh) < len(docs):
        reused = np.flatnonzero(found >= 0)
        earlier_sigs = np.load(cache.blob_path(earlier[0], f"{earlier[1]}.npy"), mmap_mode="r")
        sigs[reused] = earlier_sigs[found[reused]]
        with np.load(cache.blob_path(earlier[0], f"{earlier[1]}.npz")) as z:
            n_shingles[reused] = z["n_shingles"][found[reused]]
    buf = io.BytesIO()
    np.save(buf, sigs)
    atomic_write_bytes(cache.blob_path(stage, f"{out_name}.npy"), buf.getvalue())
    if stage == "dedup":   # each document's n-gram hashes, for exact verification (made distinct when read)
        sets = hash_sets   # (dedup is given no ``earlier``: every set is computed)
        buf = io.BytesIO()
        np.save(buf, np.concatenate(sets + [np.zeros(0, np.uint32)]).astype(np.uint32))
        atomic_write_bytes(cache.blob_path(stage, f"{out_name}.shingles.npy"), buf.getvalue())
        shingle_offsets = np.concatenate([[0], np.cumsum([len(x) for x in sets], dtype=np.int64)]).astype(np.int64)
    else:
        shingle_offsets = np.zeros(len(docs) + 1, np.int64)
    buf = io.BytesIO()
    np.savez(buf, ids=np.array([d["id"] for d in docs], dtype=str), n_shingles=n_shingles,
             exact=np.array([text_hash(t) for t in texts], dtype=np.uint64),
             lengths=np.array([sum(map(len, d["segments"])) for d in docs], dtype=np.int64),
             sources=np.array([d["source"] for d in docs], dtype=str),
             seg_hashes=np.array(seg_hashes, dtype=np.int64), seg_offsets=seg_offsets.astype(np.int64),
             shingle_offsets=shingle_offsets)
    atomic_write_bytes(facts_path, buf.getvalue())  # written last: its presence means both are complete
    return out_name


def _earlier_rows(cache: Cache, earlier: tuple[str, str] | None, docs: list[dict]) -> np.ndarray:
    """Per document, its row in the earlier signatures when its text is unchanged there, else -1."""
    rows = np.full(len(docs), -1, dtype=np.int64)
    if earlier is None or not cache.has_blob(earlier[0], f"{earlier[1]}.npz") \
            or not cache.has_blob(earlier[0], f"{earlier[1]}.npy"):
        return rows
    with np.load(cache.blob_path(earlier[0], f"{earlier[1]}.npz")) as z:
        index = {doc_id: row for row, doc_id in enumerate(z["ids"].tolist())}
        segments = np.diff(z["seg_offsets"]).tolist()
    for i, doc in enumerate(docs):
        row = index.get(doc["id"], -1)
        if row >= 0 and segments[row] == len(doc["segments"]):
            rows[i] = row
    return rows


def text_hash(text: str) -> int:
    """64-bit hash of a text after case folding and whitespace collapsing (exact duplicates)."""
    return int.from_bytes(hashlib.sha1(normalise_for_hash(text).encode()).digest()[:8], "little")


def segment_hash(segment: str) -> int:
    return int(hashlib.sha1(normalise_for_hash(segment).encode()).hexdigest()[:15], 16)


class SignatureSet:
    """The signatures and per-document facts of a stage's partitions, rows in partition order.

    Small per-document columns are held as arrays (a few dozen bytes a document); the
    signatures themselves stay in their partition files and are read a partition at a
    time (band keys) or row by row through a memory map (verifying candidate pairs), so a
    run holds no ``documents x num_perm`` array."""

    def __init__(self, num_perm: int, sig_files: list[Path] | None = None, fact_files: list[Path] | None = None,
                 part_keys: list[str] | None = None, sigs: np.ndarray | None = None, n_shingles: np.ndarray | None = None):
        self.num_perm = num_perm
        self.sig_files, self.fact_files, self.part_keys = sig_files or [], fact_files or [], part_keys or []
        self._in_memory = sigs
        self._low: np.ndarray | None = None
        self._files = NpyFiles(self.sig_files, 2)
        cols = defaultdict(list)
        self.shingle_offsets: list = []
        sizes, seg_base = [], 0
        self.source_names: list[str] = []
        for path in self.fact_files:
            with np.load(path) as z:
                sizes.append(len(z["ids"]))
                for k in ("n_shingles", "lengths", "exact"):
                    cols[k].append(z[k])
                cols["source"].append(_codes(z["sources"], self.source_names))
                cols["seg_hashes"].append(z["seg_hashes"])
                self.shingle_offsets.append(z["shingle_offsets"] if "shingle_offsets" in z.files else None)
                cols["seg_offsets"].append(z["seg_offsets"][1:] + seg_base)
                seg_base += int(z["seg_offsets"][-1])
        if sigs is not None:
            sizes = [len(sigs)]
            cols["n_shingles"] = [np.asarray(n_shingles if n_shingles is not None else np.full(len(sigs), num_perm))]
        self.offsets = np.concatenate([[0], np.cumsum(sizes, dtype=np.int64)]).astype(np.int64)

        def column(name, dtype):
            return np.concatenate(cols[name]).astype(dtype) if cols[name] else np.zeros(0, dtype)
        n = int(self.offsets[-1])
        self.n_shingles = column("n_shingles", np.int64)
        self.lengths = column("lengths", np.int64) if cols["lengths"] else np.zeros(n, np.int64)
        self.exact = column("exact", np.uint64) if cols["exact"] else np.arange(n, dtype=np.uint64)
        self.source = column("source", np.int32) if cols["source"] else np.zeros(n, np.int32)
        self.seg_hashes = column("seg_hashes", np.int64)
        self.seg_offsets = np.concatenate([[0], column("seg_offsets", np.int64)]).astype(np.int64)

    def shingles(self) -> ShingleSets:
        """The documents' n-gram sets (dedup's signature files keep them)."""
        files = [Path(str(f)[:-len(".npy")] + ".shingles.npy") for f in self.sig_files]
        return ShingleSets(files, self.shingle_offsets, self.offsets)

    @classmethod
    def from_arrays(cls, sigs: np.ndarray, n_shingles: np.ndarray | None = None) -> "SignatureSet":
        """A set held in memory (tests, benchmarks)."""
        return cls(sigs.shape[1], sigs=np.asarray(sigs, dtype=np.uint32), n_shingles=n_shingles)

    def __len__(self) -> int:
        return int(self.offsets[-1])

    @property
    def names(self) -> list[str]:
        """The partitions' signature names (the files' names without ``.npy``)."""
        return [Path(f).name[:-len(".npy")] for f in self.sig_files] if self._in_memory is None else ["memory"]

    def part_index(self, rows: np.ndarray) -> np.ndarray:
        return np.searchsorted(self.offsets, rows, side="right") - 1

    def _by_partition(self, rows: np.ndarray):
        """(partition number, positions in ``rows``, rows within the partition) per partition touched."""
        part = self.part_index(rows)
        order = np.argsort(part, kind="stable")
        bounds = np.flatnonzero(np.diff(part[order])) + 1
        for sel in np.split(order, bounds) if len(order) else []:
            p = int(part[sel[0]])
            yield p, sel, rows[sel] - self.offsets[p]

    def take(self, rows) -> np.ndarray:
        """Signatures of the given rows."""
        rows = np.asarray(rows, dtype=np.int64)
        if self._in_memory is not None:
            return self._in_memory[rows]
        out = np.empty((len(rows), self.num_perm), dtype=np.uint32)
        for p, sel, local in self._by_partition(rows):
            # Mapped for this read only: pages left mapped would count in the process's
            # resident memory until the end of the stage.  (A plain mmap: numpy's memmap spent
            # 0.1 ms resolving the path each time.)
            f, offset, shape = self._files.get(p)
            with mmap.mmap(f.fileno(), 0, access=mmap.ACCESS_READ) as mapped:
                view = np.frombuffer(mapped, dtype="<u4", count=shape[0] * shape[1], offset=offset).reshape(shape)
                out[sel] = view[local]
                del view
        return out

    def fingerprints(self) -> np.ndarray:
        """The lowest byte of every signature value (documents x num_perm, uint8), read once."""
        if self._low is None:
            if self._in_memory is not None:
                self._low = (self._in_memory & 0xFF).astype(np.uint8)
            else:
                self._low = np.empty((len(self), self.num_perm), dtype=np.uint8)
                for p, path in enumerate(self.sig_files):
                    self._low[self.offsets[p]:self.offsets[p + 1]] = np.load(path, mmap_mode="r") & 0xFF
        return self._low

    def ids(self, rows) -> list[str]:
        """Document ids of the given rows."""
        rows = np.asarray(rows, dtype=np.int64)
        if self._in_memory is not None:
            return [str(r) for r in rows]
        out = [""] * len(rows)
        for p, sel, local in self._by_partition(rows):
            with np.load(self.fact_files[p]) as z:
                names = z["ids"][local]
            for at, name in zip(sel.tolist(), names.tolist()):
                out[at] = name
        return out

    def partition_of(self, row: int) -> str:
        return self.part_keys[int(self.part_index(np.array([row]))[0])]

    def band_keys(self, rows: np.ndarray, bands: int, rows_per_band: int, only: range | None = None) -> np.ndarray:
        """``band_keys`` of the given (sorted) rows, reading one partition's signatures at a time."""
        if self._in_memory is not None:
            return band_keys(self._in_memory[rows], bands, rows_per_band, only)
        keys = np.zeros((len(rows), bands if only is None else len(only)), dtype=np.uint64)
        for p, sel, local in self._by_partition(np.asarray(rows, dtype=np.int64)):
            keys[sel] = band_keys(np.load(self.sig_files[p])[local], bands, rows_per_band, only)
        return keys


def _codes(values: np.ndarray, names: list[str]) -> np.ndarray:
    """Small integer codes for strings, extending ``names`` with the new ones."""
    uniq, inverse = np.unique(values, return_inverse=True)
    index = {name: i for i, name in enumerate(names)}
    for u in uniq.tolist():
        if u not in index:
            index[u] = len(names)
            names.append(u)
    return np.array([index[u] for u in uniq.tolist()], dtype=np.int32)[inverse] if len(values) else np.zeros(0, np.int32)


def signature_name(in_key: str, params: Params) -> str:
    """The cache name of one input partition's signatures."""
    from ..codeversion import code_version
    return f"sig-{stable_hash(f'{VERSION}:{code_version(__name__)}', in_key, params.num_perm, params.ngram, params.shingle)}"


def load_signatures(services, stage: str, in_stage: str, parts, params: Params,
                    earlier: dict[str, tuple[str, str]] | None = None) -> SignatureSet:
    """Compute (or reuse) every partition's signatures; the set of them in partition order.
    ``earlier`` maps a partition key to (stage, name) of signatures over the same documents that
    an earlier stage made (see ``signatures_task``)."""
    names = {p.key: signature_name(p.key, params) for p in parts}
    todo = [p for p in parts if not services.cache.has_blob(stage, f"{names[p.key]}.npz")]
    args = [(str(services.cache.root), in_stage, p.key, params, names[p.key], stage, (earlier or {}).get(p.key))
            for p in todo]
    with services.progress(f"{stage}:signatures", len(args)) as tick:
        for _ in services.map(signatures_task, args):
            tick(0)
    services.rest(idle=True)  # what follows runs in this process
    path = services.cache.blob_path
    return SignatureSet(params.num_perm, [path(stage, f"{names[p.key]}.npy") for p in parts],
                        [path(stage, f"{names[p.key]}.npz") for p in parts], [p.key for p in parts])


# -- candidates, clusters ------------------------------------------------------------------

def candidate_pairs(sigs, eligible: np.ndarray, bands: int, rows: int, engine=None) -> np.ndarray:
    """Pairs of row numbers (smaller first, sorted, distinct) that share at least one LSH band;
    ``sigs`` is a SignatureSet or an array of signatures."""
    sigset = sigs if isinstance(sigs, SignatureSet) else SignatureSet.from_arrays(np.asarray(sigs))
    idx = np.flatnonzero(eligible)
    if len(idx) < 2:
        return np.zeros((0, 2), dtype=np.int64)
    if engine is not None and hasattr(engine, "frame_map"):
        return candidates_by_shuffle(sigset.band_keys(idx, bands, rows), idx, engine, len(sigset))
    return candidates_by_sorting(sigset.band_keys(idx, bands, rows), idx, len(sigset))


class NearPairs:
    """Verified pairs as arrays: rows ``left`` < ``right`` and their estimated Jaccard; iterating
    gives (left, right, similarity) tuples."""

    def __init__(self, left: np.ndarray, right: np.ndarray, similarity: np.ndarray):
        self.left, self.right, self.similarity = left, right, similarity

    def __len__(self) -> int:
        return len(self.left)

    def __iter__(self):
        return zip(self.left.tolist(), self.right.tolist(), self.similarity.tolist())


BANDS_AT_ONCE = 8   # band keys held at once when verifying band by band (8 bytes a document each)


class KnownPairs:
    """The verdicts of an earlier run over partitions this run still has, unchanged: a pair of
    documents that were both eligible then would be verified again with the same result (their
    signatures and n-gram sets are the same), so it is not; the pairs accepted then are taken
    as they were.  ``old_row``: per row of this run, its row in the earlier run (-1: not there);
    ``was_eligible``: per earlier row; ``left``, ``right``, ``similarity``: the earlier accepted
    pairs, in earlier rows."""

    def __init__(self, old_row: np.ndarray, was_eligible: np.ndarray, left: np.ndarray, right: np.ndarray,
                 similarity: np.ndarray):
        self.old_row, self.was_eligible = old_row, was_eligible
        self.left, self.right, self.similarity = left, right, similarity

    def settled(self, pairs: np.ndarray) -> np.ndarray:
        """Per pair (rows of this run), whether the earlier run decided it."""
        old = self.old_row[pairs]
        known = (old >= 0).all(axis=1)
        known[known] = self.was_eligible[old[known]].all(axis=1)
        return known

    def accepted(self, eligible: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """The earlier accepted pairs whose documents are both here and eligible now, in this
        run's rows (smaller first)."""
        new_row = np.full(len(self.was_eligible), -1, dtype=np.int64)
        here = np.flatnonzero(self.old_row >= 0)
        new_row[self.old_row[here]] = here
        a, b = new_row[self.left], new_row[self.right]
        keep = (a >= 0) & (b >= 0)
        keep[keep] = eligible[a[keep]] & eligible[b[keep]]
        a, b = a[keep], b[keep]
        return np.minimum(a, b), np.maximum(a, b), self.similarity[keep]


def eligible_rows(data: "SignatureSet", params: Params, alive: np.ndarray | None = None) -> np.ndarray:
    """Documents that take part in near-duplicate search: enough n-grams, and ``alive``."""
    eligible = data.n_shingles >= params.min_shingles
    return eligible & alive if alive is not None else eligible


def near_duplicate_pairs(data, threshold: float, params: Params, engine=None,
                         alive: np.ndarray | None = None, verify=None,
                         known: KnownPairs | None = None) -> tuple[NearPairs, tuple[int, int]]:
    """Candidate pairs that ``verify`` accepts (default: estimated Jaccard reaches ``threshold``;
    ``verify_exactly`` for exact Jaccard), and the (bands, rows) used.  With ``known``, pairs the
    earlier run decided are taken from it instead of verified again (the result is the same)."""
    verify = verify or (lambda d, p, t: verify_pairs(d, p, t))
    data = data if isinstance(data, SignatureSet) else SignatureSet.from_arrays(data["sigs"], data["n_shingles"])
    eligible = eligible_rows(data, params, alive)
    bands, rows = lsh_params(threshold, params.num_perm)
    idx = np.flatnonzero(eligible)
    found = [known.accepted(eligible)] if known is not None else []

    def unsettled(pairs: np.ndarray) -> np.ndarray:
        return pairs[~known.settled(pairs)] if known is not None else pairs

    if len(idx) > BANDWISE_ABOVE and not (engine is not None and hasattr(engine, "frame_map")):
        # Band by band: only verified pairs are kept, never the whole candidate set (nor every
        # band's keys: they are computed BANDS_AT_ONCE at a time).  A near duplicate shares many
        # bands: a pair already accepted is not verified again.
        accepted = np.unique(found[0][0] * len(data) + found[0][1]) if found else np.zeros(0, dtype=np.int64)
        for band in range(bands):
            if band % BANDS_AT_ONCE == 0:
                keys = data.band_keys(idx, bands, rows, only=range(band, min(bands, band + BANDS_AT_ONCE)))
            pairs = unsettled(band_pairs(keys[:, band % BANDS_AT_ONCE], idx))
            pairs = pairs[~np.isin(pairs[:, 0] * len(data) + pairs[:, 1], accepted)]
            found.append(verify(data, pairs, threshold))
            accepted = np.union1d(accepted, found[-1][0] * len(data) + found[-1][1])
    else:
        found.append(verify(data, unsettled(candidate_pairs(data, eligible, bands, rows, engine)), threshold))
    left, right, sim = (np.concatenate(col) for col in zip(*found))
    order = np.argsort(left * len(data) + right)    # each pair once: a band's pairs are distinct
    return NearPairs(left[order], right[order], sim[order]), (bands, rows)


def known_pairs_name(threshold: float, params: Params, exact: bool) -> str:
    """The cache name under which a run keeps its verdicts for the next run with these settings."""
    from ..codeversion import code_version
    return "verdicts-" + stable_hash(VERSION, code_version(__name__), threshold, params.num_perm, params.ngram,
                                     params.shingle, params.min_shingles, exact) + ".npz"


def load_known_pairs(cache: Cache, stage: str, name: str, data: "SignatureSet") -> KnownPairs | None:
    """The verdicts an earlier run kept under ``name``, mapped onto this run's rows through the
    partitions' signature names (a partition whose input changed has another name)."""
    if not cache.has_blob(stage, name):
        return None
    with np.load(cache.blob_path(stage, name)) as z:
        names, offsets = z["names"].tolist(), z["offsets"]
        was_eligible, left, right, similarity = z["eligible"], z["left"], z["right"], z["similarity"]
    once = {n for n, c in Counter(names + data.names).items() if c == 2}     # in each run once
    where = {n: i for i, n in enumerate(names) if n in once}
    old_row = np.full(len(data), -1, dtype=np.int64)
    for p, sig_name in enumerate(data.names):
        q = where.get(sig_name)
        if q is not None and offsets[q + 1] - offsets[q] == data.offsets[p + 1] - data.offsets[p]:
            old_row[data.offsets[p]:data.offsets[p + 1]] = np.arange(offsets[q], offsets[q + 1])
    return KnownPairs(old_row, was_eligible, left, right, similarity)


def keep_known_pairs(cache: Cache, stage: str, name: str, data: "SignatureSet", eligible: np.ndarray,
                     pairs: NearPairs) -> None:
    """Keep this run's verdicts for the next (see ``KnownPairs``)."""
    buf = io.BytesIO()
    np.savez(buf, names=np.array(data.names, dtype=str), offsets=data.offsets, eligible=eligible,
             left=pairs.left, right=pairs.right, similarity=pairs.similarity)
    cache.put_blob(stage, name, buf.getvalue())


def verify_pairs(data: SignatureSet, pairs: np.ndarray, threshold: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The pairs whose estimated Jaccard (share of equal signature values) reaches ``threshold``:
    (left rows, right rows, estimates), computed in blocks of 100,000 pairs.

    Each pair is first compared on the lowest byte of each value (``SignatureSet.fingerprints``,
    a quarter of the bytes, held in memory): equal values have equal bytes, so a pair whose
    bytes agree too seldom cannot reach ``threshold`` and is dropped; only the rest are compared
    in full.  Most candidates of a low threshold are such pairs."""
    kept = [(np.zeros(0, np.int64), np.zeros(0, np.int64), np.zeros(0))]
    low = data.fingerprints() if len(pairs) else None
    for start in range(0, len(pairs), 100_000):
        block = pairs[start:start + 100_000]
        block = block[(low[block[:, 0]] == low[block[:, 1]]).mean(axis=1) >= threshold]
        est = (data.take(block[:, 0]) == data.take(block[:, 1])).mean(axis=1)
        keep = est >= threshold
        kept.append((block[keep, 0], block[keep, 1], est[keep]))
    return tuple(np.concatenate(col) for col in zip(*kept))


def near_duplicates_of_texts(texts: list[str], params: Params) -> tuple[NearPairs, np.ndarray, np.ndarray]:
    """The stage's decision on a list of texts held in memory (tests, benchmarks): verified pairs,
    and per text its kept twin (-1: kept) and the exact Jaccard with it.  Keep order is longer
    first, then earlier, as for documents of one source."""
    a, b = permutations(params.num_perm)
    sets = shingles_of_texts(texts, params.ngram, params.shingle)
    data = SignatureSet.from_arrays(batch_signatures(sets, a, b), np.array([len(x) for x in sets]))
    shingles = ShingleSets(sets=sets)
    pairs, _ = near_duplicate_pairs(data, params.threshold, params,
                                    verify=lambda d, p, t: verify_exactly(d, shingles, p, t))
    order = np.lexsort((np.arange(len(texts)), -np.array([len(t) for t in texts])))
    twin, sim = keep_order_removals(len(texts), pairs, order)
    return pairs, twin, sim


def clusters_from_pairs(n: int, pairs) -> list[list[int]]:
    """Connected components (scipy.sparse.csgraph) of the documents in ``pairs``, each sorted,
    ordered by their first member; documents in no pair are left out."""
    from scipy.sparse import coo_matrix
    from scipy.sparse.csgraph import connected_components
    if isinstance(pairs, NearPairs):
        edges = np.stack([pairs.left, pairs.right], axis=1)
    else:
        edges = np.array([(p[0], p[1]) for p in pairs], dtype=np.int64).reshape(-1, 2)
    if not len(edges):
        return []
    nodes, inverse = np.unique(edges, return_inverse=True)
    inverse = inverse.reshape(-1, 2)
    graph = coo_matrix((np.ones(len(edges), dtype=np.int8), (inverse[:, 0], inverse[:, 1])), shape=(len(nodes),) * 2)
    _, labels = connected_components(graph, directed=False)
    order = np.argsort(labels, kind="stable")
    groups = np.split(nodes[order], np.flatnonzero(np.diff(labels[order])) + 1)
    return sorted((g.tolist() for g in groups), key=lambda g: g[0])


# -- the global stage ------------------------------------------------------------------------

REASONS = ("", "exact-duplicate", "near-duplicate")


def keep_ranks(data: SignatureSet, listed: dict[str, int], source_priority: dict[str, int]) -> tuple[np.ndarray, ...]:
    """Per row, the keys that choose a cluster's kept document, smallest first: position in the
    recipe's source priority list, then the source's own priority (higher first), then
    length (longer first), then the row (earlier first)."""
    listed_rank = np.array([listed.get(s, len(listed)) for s in data.source_names] or [0], dtype=np.int64)[data.source]
    own = np.array([source_priority.get(s, 0) for s in data.source_names] or [0], dtype=np.int64)[data.source]
    return listed_rank, -own, -data.lengths, np.arange(len(data))


def decide(services: Services, in_stage: str, parts, params: Params) -> Decisions:
    data = load_signatures(services, "dedup", in_stage, parts, params)
    n = len(data)
    ranks = keep_ranks(data, {s: i for i, s in enumerate(params.source_priority)},
                       {s.id: s.priority for s in services.recipe.sources})
    reason = np.zeros(n, dtype=np.int8)
    twin = np.full(n, -1, dtype=np.int64)
    similarity = np.zeros(n)
    # Exact duplicates first: sorted by text hash, then by the keep order; the first of each run stays.
    order = np.lexsort(tuple(reversed((data.exact,) + ranks)))
    first = np.concatenate([[True], data.exact[order][1:] != data.exact[order][:-1]]) if n else np.zeros(0, bool)
    run_start = order[np.maximum.accumulate(np.where(first, np.arange(n), 0))] if n else order
    reason[order[~first]], twin[order[~first]], similarity[order[~first]] = 1, run_start[~first], 1.0
    shingles = data.shingles()
    verdicts = known_pairs_name(params.threshold, params, exact=True)
    pairs, (bands, rows) = near_duplicate_pairs(data, params.threshold, params, services.engine,
                                                alive=reason == 0,
                                                verify=lambda d, p, t: verify_exactly(d, shingles, p, t),
                                                known=load_known_pairs(services.cache, "dedup", verdicts, data))
    keep_known_pairs(services.cache, "dedup", verdicts, data, eligible_rows(data, params, reason == 0), pairs)
    keep_order = np.lexsort(tuple(reversed(ranks))) if n else np.zeros(0, np.int64)
    near_twin, near_sim = keep_order_removals(n, pairs, keep_order)
    gone = np.flatnonzero(near_twin >= 0)
    reason[gone], twin[gone], similarity[gone] = 2, near_twin[gone], near_sim[gone]
    removed = np.flatnonzero(reason)
    named = np.unique(np.concatenate([removed, twin[removed], pairs.left, pairs.right]).astype(np.int64))
    name_of = dict(zip(named.tolist(), data.ids(named)))
    kept_twins = sorted(set(twin[removed].tolist()))
    cluster_rows = []
    for c, k in enumerate(kept_twins):
        members = [k] + sorted(np.flatnonzero(twin == k).tolist())
        cluster_rows += [{"cluster": c, "doc_id": name_of[m], "source": data.source_names[data.source[m]],
                          "kept": m == k, "kept_id": name_of[k], "reason": REASONS[reason[m]] or "kept",
                          "jaccard_with_kept": 1.0 if m == k else round(float(similarity[m]), 4)} for m in members]
    pair_rows = [{"doc_a": name_of[a], "doc_b": name_of[b], "jaccard": round(float(j), 4),
                  "a_kept": bool(twin[a] < 0), "b_kept": bool(twin[b] < 0)} for a, b, j in pairs]
    decisions: dict[str, dict] = {p.key: {"remove": {}, "boilerplate": []} for p in parts}
    for i in removed.tolist():
        decisions[data.partition_of(i)]["remove"][name_of[i]] = [REASONS[reason[i]], name_of[int(twin[i])],
                                                                 round(float(similarity[i]), 4)]
    boiler = boilerplate_segments(data, reason == 0, params)
    for key, hashes in boiler.items():
        decisions[key]["boilerplate"] = hashes
    report = {"bands": bands, "rows": rows, "num_perm": params.num_perm, "threshold": params.threshold,
              "shingle": f"{params.shingle} {params.ngram}-grams", "scheme": "affine32 (own numpy, fmix64)",
              "s_curve": {f"{s:.1f}": round(s_curve(s, bands, rows), 6) for s in np.arange(0.1, 1.0001, 0.1)},
              "candidate_probability_at_threshold": round(s_curve(params.threshold, bands, rows), 6),
              "verification": "exact Jaccard of the n-gram sets of every candidate pair",
              "normalisation": "case folded, white space collapsed to single spaces",
              "exact_duplicates": int(np.sum(reason == 1)), "near_duplicates": int(np.sum(reason == 2)),
              "verified_pairs": len(pairs),
              "boilerplate_segment_types": len(set().union(*boiler.values())) if boiler else 0, "clusters": cluster_rows,
              "pairs": pair_rows}
    return Decisions(decisions, report)


def _distinct_pairs(a: np.ndarray, b: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The distinct (a, b) pairs, sorted by a then b."""
    order = np.lexsort((b, a))
    a, b = a[order], b[order]
    new = np.concatenate([[True], (a[1:] != a[:-1]) | (b[1:] != b[:-1])]) if len(a) else np.zeros(0, bool)
    return a[new], b[new]


def boilerplate_segments(data: SignatureSet, survivors: np.ndarray, params: Params) -> dict[str, list[int]]:
    """Segment hashes found in at least ``boilerplate_min_docs`` surviving documents of at least
    ``boilerplate_min_sources`` sources, listed per partition that holds them (sorted)."""
    doc_of = np.repeat(np.arange(len(data)), np.diff(data.seg_offsets))
    alive = survivors[doc_of]
    hashes, docs = _distinct_pairs(data.seg_hashes[alive], doc_of[alive])
    uniq, doc_counts = np.unique(hashes, return_counts=True)
    by_source, _ = _distinct_pairs(hashes, data.source[docs].astype(np.int64))
    _, source_counts = np.unique(by_source, return_counts=True)
    boiler = uniq[(doc_counts >= params.boilerplate_min_docs) & (source_counts >= params.boilerplate_min_sources)]
    hit = np.isin(hashes, boiler)
    out: dict[str, list[int]] = {}
    part = data.part_index(docs[hit])
    for p in np.unique(part).tolist():
        out[data.part_keys[p]] = sorted(set(hashes[hit][part == p].tolist()))
    return out


def apply(docs: list[dict], params: Params, decision: dict):
    rows: list[LedgerRow] = []
    out = []
    boiler = set(decision["boilerplate"])
    for doc in docs:
        rm = decision["remove"].get(doc["id"])
        if rm:
            reason, twin, sim = rm
            what = "the same text" if reason == "exact-duplicate" else f"exact Jaccard {sim:.4f}"
            rows.append(remove_document("dedup", doc, reason, f"{what} with the kept twin {twin}", dup_of=twin))
            continue
        if boiler:
            keep = [segment_hash(s) not in boiler for s in doc["segments"]]
            if not all(keep):
                keep_segments("dedup", doc, keep, ["boilerplate-segment"] * len(keep),
                              ["repeated across documents of several sources"] * len(keep), rows)
                if not doc["segments"]:
                    rows.append(remove_document("dedup", doc, "no-segments-left", "every segment was boilerplate"))
                    continue
        out.append(doc)
    return Applied(out, rows)


def report_json(cache: Cache) -> dict:
    return cache.get_json("dedup", "report.json")
