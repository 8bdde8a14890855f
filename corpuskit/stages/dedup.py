"""Exact and near-duplicate removal (MinHash + LSH) and cross-source boilerplate segments.

Signatures are computed vectorised with numpy: the character (or word)
n-grams of a document are hashed at once with a polynomial rolling hash,
mixed with the Murmur3 64-bit finaliser, and permuted with ``num_perm``
affine maps ``(a*h + b) mod 2^32`` (a odd), taking each column's minimum: the
min-wise scheme of Broder (1997).  The rows are handed to datasketch's
MinHashLSH index as LeanMinHash hash values; bands and rows come from its
optimisation.  Candidate pairs are verified by their estimated Jaccard,
clustered by union-find, and one document per cluster is kept: highest
source priority, then longest, then earliest.
"""
from __future__ import annotations

import hashlib
import json
from collections import defaultdict
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from ..ledger import LedgerRow, remove_document, remove_segment
from ..recipe import param
from ..storage import Cache, atomic_write_bytes, stable_hash

VERSION = "1"
MASK32 = np.uint64(0xFFFFFFFF)
SCHEME_SEED = 20261201


@dataclass(frozen=True)
class Params:
    num_perm: int = param(128, low=16, high=1024, help="MinHash permutations")
    threshold: float = param(0.7, low=0.1, high=1.0, help="Jaccard similarity at which documents are near-duplicates")
    shingle: str = param("char", choices=("char", "word"), help="n-grams of characters or of words")
    ngram: int = param(5, low=1, high=20, help="n-gram length")
    min_shingles: int = param(5, low=1, help="documents with fewer n-grams only take part in exact-duplicate removal")
    fp_weight: float = param(0.3, low=0.0, high=1.0, help="LSH false-positive weight (false-negative weight is 1 minus it)")
    source_priority: list[str] = param([], help="source ids, most trusted first, for choosing which twin to keep")
    boilerplate_min_docs: int = param(5, low=2, help="a segment in this many documents ...")
    boilerplate_min_sources: int = param(2, low=1, help="... of this many sources is boilerplate")


# -- shingles and signatures ---------------------------------------------------------------

def normalise_for_hash(text: str) -> str:
    return " ".join(text.casefold().split())


def fmix64(h: np.ndarray) -> np.ndarray:
    """Murmur3's 64-bit finaliser: spreads every input bit over the output."""
    h = h.astype(np.uint64, copy=True)
    with np.errstate(over="ignore"):
        h ^= h >> np.uint64(33)
        h *= np.uint64(0xFF51AFD7ED558CCD)
        h ^= h >> np.uint64(33)
        h *= np.uint64(0xC4CEB93FCA2E2A21)
        h ^= h >> np.uint64(33)
    return h


def shingle_hashes(text: str, ngram: int, unit: str = "char") -> np.ndarray:
    """Distinct 32-bit hashes of the text's n-grams, computed as arrays.

    >>> len(shingle_hashes("a rose is a rose is a rose", 4, "word"))  # IIR 19.6
    3
    """
    text = normalise_for_hash(text)
    if unit == "word":
        words = text.split(" ")
        codes = np.array([int.from_bytes(hashlib.blake2b(w.encode(), digest_size=8).digest(), "little") for w in words],
                         dtype=np.uint64) if text else np.zeros(0, np.uint64)
    else:
        codes = np.frombuffer(text.encode("utf-32-le"), dtype=np.uint32).astype(np.uint64)
    n = len(codes) - ngram + 1
    if n <= 0:
        return np.zeros(0, dtype=np.uint32) if not len(codes) else np.unique(fmix64(codes[:1] + np.uint64(len(codes))).__and__(MASK32).astype(np.uint32))
    h = np.zeros(n, dtype=np.uint64)
    with np.errstate(over="ignore"):
        for j in range(ngram):
            h = h * np.uint64(1_000_003) + codes[j:j + n]
    return np.unique((fmix64(h) & MASK32).astype(np.uint32))


def batch_shingle_hashes(texts: list[str], ngram: int, unit: str = "char", distinct: bool = True) -> list[np.ndarray]:
    """``shingle_hashes`` of many texts, with the rolling hash computed once over all of them
    (character n-grams; word n-grams go text by text).  With ``distinct=False`` repeated
    n-grams stay in (a MinHash signature does not change) and the sort is saved."""
    if unit != "char":
        return [shingle_hashes(t, ngram, unit) for t in texts]
    texts = [normalise_for_hash(t) for t in texts]
    lengths = np.array([len(t) for t in texts], dtype=np.int64)
    codes = np.frombuffer("".join(texts).encode("utf-32-le"), dtype=np.uint32).astype(np.uint64)
    n = max(len(codes) - ngram + 1, 0)
    h = np.zeros(n, dtype=np.uint64)
    with np.errstate(over="ignore"):
        for j in range(ngram):
            h = h * np.uint64(1_000_003) + codes[j:j + n]
    h = fmix64(h) & MASK32
    starts = np.concatenate([[0], np.cumsum(lengths)[:-1]]).astype(np.int64)
    if not distinct:  # n-grams that would run into the next text are never read
        return [h[a:a + length - ngram + 1].astype(np.uint32) if length >= ngram else shingle_hashes(text, ngram)
                for a, text, length in zip(starts, texts, lengths)]
    # Tag each n-gram inside one text with the text's number in the high 32 bits; one sort
    # then gives every text's distinct hashes in order.
    owner = np.repeat(np.arange(len(texts), dtype=np.uint64), lengths)[:n]
    inside = np.arange(n) <= (starts + lengths - ngram)[owner.astype(np.int64)]
    keyed = np.sort((owner[inside] << np.uint64(32)) | h[inside])
    keyed = keyed[np.concatenate([[True], keyed[1:] != keyed[:-1]])] if len(keyed) else keyed
    bounds = np.searchsorted(keyed >> np.uint64(32), np.arange(len(texts) + 1, dtype=np.uint64))
    values = (keyed & MASK32).astype(np.uint32)
    return [values[bounds[i]:bounds[i + 1]] if length >= ngram else shingle_hashes(text, ngram)
            for i, (text, length) in enumerate(zip(texts, lengths))]


def permutations(num_perm: int, seed: int = SCHEME_SEED) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    a = rng.integers(1, 2**32, size=num_perm, dtype=np.uint64) | np.uint64(1)
    b = rng.integers(0, 2**32, size=num_perm, dtype=np.uint64)
    return a, b


def signature(hashes: np.ndarray, a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Per-permutation minima of (a*h + b) mod 2^32 over the shingle hashes."""
    if not len(hashes):
        return np.full(len(a), 0xFFFFFFFF, dtype=np.uint32)
    with np.errstate(over="ignore"):
        perm = (hashes.astype(np.uint64)[:, None] * a[None, :] + b[None, :]) & MASK32
    return perm.min(axis=0).astype(np.uint32)


def batch_signatures(hash_sets: list[np.ndarray], a: np.ndarray, b: np.ndarray,
                     chunk_shingles: int = 16384) -> np.ndarray:
    """Signatures of many documents at once.

    The 32-bit shingle hashes of a batch of documents are concatenated and permuted in
    one array operation, laid out as permutations x shingles (uint32 arithmetic wraps,
    which is the mod 2^32 of the affine hash), then reduced to per-document minima with
    ``minimum.reduceat`` along the contiguous axis.  Rows equal ``signature(h, a, b)``.
    Batches of about 16k shingles (8 MB at 128 permutations) measured fastest here.
    """
    a32, b32 = a.astype(np.uint32)[:, None], b.astype(np.uint32)[:, None]
    sigs = np.full((len(hash_sets), len(a)), 0xFFFFFFFF, dtype=np.uint32)
    lengths = np.array([len(h) for h in hash_sets], dtype=np.int64)
    start = 0
    while start < len(hash_sets):
        stop, total = start, 0
        while stop < len(hash_sets) and (stop == start or total + lengths[stop] <= chunk_shingles):
            total += lengths[stop]
            stop += 1
        rows = np.flatnonzero(lengths[start:stop] > 0)
        if len(rows):
            flat = np.concatenate([hash_sets[start + r] for r in rows]).astype(np.uint32, copy=False)
            offsets = np.concatenate([[0], np.cumsum(lengths[start:stop][rows][:-1])])
            perm = np.multiply.outer(a32[:, 0], flat)
            np.add(perm, b32, out=perm)
            sigs[start + rows] = np.minimum.reduceat(perm, offsets, axis=1).T
        start = stop
    return sigs


def estimate_jaccard(s1: np.ndarray, s2: np.ndarray) -> float:
    return float(np.mean(s1 == s2))


def signatures_task(cache_root: str, in_stage: str, in_key: str, params: Params, out_name: str, stage: str) -> str:
    """Signatures, exact-text hashes and segment hashes of one partition, saved as .npz."""
    cache = Cache(Path(cache_root).parent)
    path = cache.blob_path(stage, out_name)
    if path.exists():
        return out_name
    docs = cache.read_docs(in_stage, in_key)
    a, b = permutations(params.num_perm)
    sigs = np.zeros((len(docs), params.num_perm), dtype=np.uint32)
    n_sh = np.zeros(len(docs), dtype=np.int64)
    exact, seg_hashes, seg_offsets = [], [], [0]
    texts = [" ".join(doc["segments"]) for doc in docs]
    hash_sets = batch_shingle_hashes(texts, params.ngram, params.shingle, distinct=False)
    for i, (doc, text) in enumerate(zip(docs, texts)):
        n_sh[i] = len(hash_sets[i])
        exact.append(hashlib.sha1(normalise_for_hash(text).encode()).hexdigest()[:16])
        seg_hashes.extend(int(hashlib.sha1(normalise_for_hash(s).encode()).hexdigest()[:15], 16) for s in doc["segments"])
        seg_offsets.append(len(seg_hashes))
    sigs[:] = batch_signatures(hash_sets, a, b)
    import io
    buf = io.BytesIO()
    np.savez(buf, ids=np.array([d["id"] for d in docs], dtype=object), sigs=sigs, n_shingles=n_sh,
             exact=np.array(exact, dtype=object), lengths=np.array([sum(map(len, d["segments"])) for d in docs]),
             sources=np.array([d["source"] for d in docs], dtype=object),
             dialects=np.array([d["dialect"] or "" for d in docs], dtype=object),
             seg_hashes=np.array(seg_hashes, dtype=np.int64), seg_offsets=np.array(seg_offsets, dtype=np.int64))
    atomic_write_bytes(path, buf.getvalue())
    return out_name


def load_signatures(runner, stage: str, in_stage: str, parts, params: Params) -> dict[str, Any]:
    """Compute (or reuse) every partition's signatures and stack them in partition order."""
    names = {p.key: f"sig-{stable_hash(VERSION, p.key, params.num_perm, params.ngram, params.shingle)}.npz" for p in parts}
    todo = [p for p in parts if not runner.cache.has_blob(stage, names[p.key])]
    args = [(str(runner.cache.root), in_stage, p.key, params, names[p.key], stage) for p in todo]
    with runner.progress(f"{stage}:signatures", len(args)) as tick:
        for _ in runner.engine.imap(signatures_task, args):
            tick(0)
    cols = defaultdict(list)
    part_of = []
    seg_hashes, seg_offsets, base = [], [0], 0
    for p in parts:
        with np.load(runner.cache.blob_path(stage, names[p.key]), allow_pickle=True) as z:
            for k in ("ids", "sigs", "n_shingles", "exact", "lengths", "sources", "dialects"):
                cols[k].append(z[k])
            part_of.extend([p.key] * len(z["ids"]))
            seg_hashes.append(z["seg_hashes"])
            seg_offsets.extend((z["seg_offsets"][1:] + base).tolist())
            base += int(z["seg_offsets"][-1])
    num_perm = params.num_perm
    out = {k: (np.concatenate(v) if v else np.zeros((0, num_perm) if k == "sigs" else 0)) for k, v in cols.items()}
    if not cols:
        out = {"ids": np.zeros(0, object), "sigs": np.zeros((0, num_perm), np.uint32), "n_shingles": np.zeros(0, np.int64),
               "exact": np.zeros(0, object), "lengths": np.zeros(0, np.int64), "sources": np.zeros(0, object),
               "dialects": np.zeros(0, object)}
    out["part_of"] = part_of
    out["seg_hashes"] = np.concatenate(seg_hashes) if seg_hashes else np.zeros(0, np.int64)
    out["seg_offsets"] = np.array(seg_offsets, dtype=np.int64)
    return out


# -- candidates, clusters ------------------------------------------------------------------

def lsh_params(threshold: float, num_perm: int, fp_weight: float) -> tuple[int, int]:
    """(bands, rows per band) from datasketch's optimisation of the weighted error."""
    from datasketch import MinHashLSH
    weights = (round(fp_weight, 6), round(1.0 - fp_weight, 6))
    lsh = MinHashLSH(threshold=threshold, num_perm=num_perm, weights=weights)
    return lsh.b, lsh.r


def s_curve(s: float, bands: int, rows: int) -> float:
    """Probability that a pair of Jaccard similarity s becomes a candidate: 1 - (1 - s^r)^b."""
    return 1.0 - (1.0 - s ** rows) ** bands


def candidate_pairs(sigs: np.ndarray, eligible: np.ndarray, bands: int, rows: int, engine=None) -> set[tuple[int, int]]:
    """Pairs of row numbers that share at least one LSH band."""
    idx = np.flatnonzero(eligible)
    if len(idx) < 2:
        return set()
    if engine is not None and hasattr(engine, "frame_groups"):
        return _candidates_by_shuffle(sigs, idx, bands, rows, engine)
    if len(idx) > DATASKETCH_INDEX_LIMIT:
        return _candidates_by_sorting(sigs, idx, bands, rows)
    from datasketch import LeanMinHash, MinHashLSH
    lsh = MinHashLSH(num_perm=sigs.shape[1], params=(bands, rows))
    with lsh.insertion_session() as session:
        for i in idx:
            session.insert(int(i), LeanMinHash(seed=SCHEME_SEED, hashvalues=sigs[i], scheme="affine32"),
                           check_duplication=False)
    # Every bucket of every band holds documents that agree on that band: the same pairs as
    # querying each document, without building its MinHash a second time.
    pairs = set()
    for table in lsh.hashtables:
        for key in table.keys():
            members = table.get(key)
            if len(members) > 1:
                pairs.update(bucket_pairs(np.fromiter(members, dtype=np.int64)))
    return pairs


def band_keys(sigs: np.ndarray, bands: int, rows: int) -> np.ndarray:
    """A 64-bit key per (document, band) from the band's hash values."""
    keys = np.zeros((sigs.shape[0], bands), dtype=np.uint64)
    with np.errstate(over="ignore"):
        for band in range(bands):
            k = np.full(sigs.shape[0], np.uint64(band), dtype=np.uint64)
            for c in range(band * rows, (band + 1) * rows):
                k = fmix64(k * np.uint64(0x100000001B3) ^ sigs[:, c].astype(np.uint64))
            keys[:, band] = k
    return keys


# datasketch's in-memory index keeps a Python dict entry per document and band; beyond this
# many documents the same bands are grouped by sorting numpy arrays instead (same pairs,
# a fraction of the memory).
DATASKETCH_INDEX_LIMIT = 50_000
# A bucket with more members than this links each member to its first one only (enough for
# clustering by connected components) instead of every pair, which would grow quadratically.
FULL_BUCKET = 64


def bucket_pairs(members: np.ndarray) -> list[tuple[int, int]]:
    members = np.sort(members)
    if len(members) > FULL_BUCKET:
        return [(int(members[0]), int(m)) for m in members[1:]]
    return [(int(members[x]), int(members[y])) for x in range(len(members)) for y in range(x + 1, len(members))]


def _candidates_by_sorting(sigs: np.ndarray, idx: np.ndarray, bands: int, rows: int) -> set[tuple[int, int]]:
    """Documents agreeing on a band, found band by band by sorting the band keys."""
    pairs: set[tuple[int, int]] = set()
    keys_by_band = band_keys(sigs[idx], bands, rows)
    for band in range(bands):
        keys = keys_by_band[:, band]
        order = np.argsort(keys, kind="stable")
        ordered = keys[order]
        starts = np.flatnonzero(np.concatenate([[True], ordered[1:] != ordered[:-1]]))
        ends = np.append(starts[1:], len(ordered))
        for a, b in zip(starts[ends - starts > 1], ends[ends - starts > 1]):
            pairs.update(bucket_pairs(idx[order[a:b]]))
    return pairs


def _candidates_by_shuffle(sigs, idx, bands, rows, engine) -> set[tuple[int, int]]:
    import pandas as pd
    keys = band_keys(sigs[idx], bands, rows)
    frame = pd.DataFrame({"band": np.repeat(np.arange(bands, dtype=np.int16)[None, :], len(idx), 0).ravel(),
                          "key": keys.ravel(), "doc": np.repeat(idx, bands)})
    groups = engine.frame_groups(frame, ["band", "key"], "doc")
    pairs = set()
    for members in groups["doc"]:
        pairs.update(bucket_pairs(np.array([int(m) for m in members])))
    return pairs


class UnionFind:
    def __init__(self, n: int):
        self.parent = list(range(n))

    def find(self, x: int) -> int:
        while self.parent[x] != x:
            self.parent[x] = self.parent[self.parent[x]]
            x = self.parent[x]
        return x

    def union(self, x: int, y: int) -> None:
        rx, ry = self.find(x), self.find(y)
        if rx != ry:
            self.parent[max(rx, ry)] = min(rx, ry)


def near_duplicate_pairs(data: dict, threshold: float, params: Params, engine=None, alive: np.ndarray | None = None):
    sigs = data["sigs"]
    eligible = data["n_shingles"] >= params.min_shingles
    if alive is not None:
        eligible &= alive
    bands, rows = lsh_params(threshold, params.num_perm, params.fp_weight)
    pairs = np.array(sorted(candidate_pairs(sigs, eligible, bands, rows, engine)), dtype=np.int64).reshape(-1, 2)
    verified = []
    for start in range(0, len(pairs), 100_000):  # estimated Jaccard of a block of pairs at once
        block = pairs[start:start + 100_000]
        est = (sigs[block[:, 0]] == sigs[block[:, 1]]).mean(axis=1)
        keep = est >= threshold
        verified.extend(zip(block[keep, 0].tolist(), block[keep, 1].tolist(), est[keep].tolist()))
    return verified, (bands, rows)


def clusters_from_pairs(n: int, pairs) -> list[list[int]]:
    uf = UnionFind(n)
    for i, j, *_ in pairs:
        uf.union(i, j)
    groups = defaultdict(list)
    for i in range(n):
        groups[uf.find(i)].append(i)
    return [g for g in groups.values() if len(g) > 1]


def keeper(members: list[int], data: dict, priority: dict[str, int]) -> int:
    """Source priority list first, then the source's priority, then longest, then earliest."""
    return min(members, key=lambda i: (priority.get(data["sources"][i], len(priority)), -int(data["src_priority"][i]),
                                       -int(data["lengths"][i]), i))


# -- the global stage ------------------------------------------------------------------------

def decide(runner, in_stage: str, parts, params: Params) -> dict[str, Any]:
    data = load_signatures(runner, "dedup", in_stage, parts, params)
    n = len(data["ids"])
    src_priority = {s.id: s.priority for s in runner.recipe.sources}
    data["src_priority"] = np.array([src_priority.get(s, 0) for s in data["sources"]], dtype=np.int64)
    priority = {s: i for i, s in enumerate(params.source_priority)}
    removed: dict[int, tuple[str, int, float]] = {}
    # Exact duplicates first.
    by_text = defaultdict(list)
    for i, h in enumerate(data["exact"]):
        by_text[h].append(i)
    cluster_rows = []
    for members in by_text.values():
        if len(members) > 1:
            k = keeper(members, data, priority)
            for m in members:
                if m != k:
                    removed[m] = ("exact-duplicate", k, 1.0)
    alive = np.array([i not in removed for i in range(n)], dtype=bool)
    pairs, (bands, rows) = near_duplicate_pairs(data, params.threshold, params, getattr(runner, "engine", None), alive)
    best_sim = {}
    for i, j, est in pairs:
        best_sim[i] = max(best_sim.get(i, 0), est)
        best_sim[j] = max(best_sim.get(j, 0), est)
    for c, members in enumerate(clusters_from_pairs(n, pairs)):
        k = keeper(members, data, priority)
        for m in sorted(members):
            cluster_rows.append({"cluster": c, "doc_id": data["ids"][m], "source": data["sources"][m],
                                 "kept": m == k, "kept_id": data["ids"][k], "max_similarity": round(best_sim.get(m, 1.0), 4)})
            if m != k:
                removed[m] = ("near-duplicate", k, best_sim.get(m, 0.0))
    # Boilerplate segments: repeated across many documents of different sources.
    survivors = [i for i in range(n) if i not in removed]
    seg_docs: dict[int, set] = defaultdict(set)
    seg_sources: dict[int, set] = defaultdict(set)
    offs, sh = data["seg_offsets"], data["seg_hashes"]
    for i in survivors:
        for h in set(sh[offs[i]:offs[i + 1]].tolist()):
            seg_docs[h].add(i)
            seg_sources[h].add(data["sources"][i])
    boiler = {h for h, ds in seg_docs.items()
              if len(ds) >= params.boilerplate_min_docs and len(seg_sources[h]) >= params.boilerplate_min_sources}
    decisions: dict[str, dict] = {p.key: {"remove": {}, "boilerplate": []} for p in parts}
    for i, (reason, k, sim) in sorted(removed.items()):
        decisions[data["part_of"][i]]["remove"][data["ids"][i]] = [reason, data["ids"][k], round(sim, 4)]
    for i in survivors:
        hs = sorted(set(sh[offs[i]:offs[i + 1]].tolist()) & boiler)
        if hs:
            decisions[data["part_of"][i]]["boilerplate"] = sorted(set(decisions[data["part_of"][i]]["boilerplate"]) | set(hs))
    report = {"bands": bands, "rows": rows, "num_perm": params.num_perm, "threshold": params.threshold,
              "shingle": f"{params.shingle} {params.ngram}-grams", "scheme": "affine32 (own numpy, fmix64)",
              "s_curve": {f"{s:.1f}": round(s_curve(s, bands, rows), 6) for s in np.arange(0.1, 1.0001, 0.1)},
              "exact_duplicates": sum(1 for r in removed.values() if r[0] == "exact-duplicate"),
              "near_duplicates": sum(1 for r in removed.values() if r[0] == "near-duplicate"),
              "boilerplate_segment_types": len(boiler), "clusters": cluster_rows}
    runner.cache.put_json("dedup", "report.json", report)
    return decisions


def partition_context(ctx, survey):  # pragma: no cover - global stage; see decide()
    return ctx


def apply(docs: list[dict], params: Params, decision: dict):
    rows: list[LedgerRow] = []
    out = []
    boiler = set(decision["boilerplate"])
    for doc in docs:
        rm = decision["remove"].get(doc["id"])
        if rm:
            reason, twin, sim = rm
            rows.append(remove_document("dedup", doc, reason, f"estimated Jaccard {sim:.2f} with the kept twin", dup_of=twin))
            continue
        if boiler:
            keep = [int(hashlib.sha1(normalise_for_hash(s).encode()).hexdigest()[:15], 16) not in boiler for s in doc["segments"]]
            if not all(keep):
                for i, k in enumerate(keep):
                    if not k:
                        rows.append(remove_segment("dedup", doc, i, "boilerplate-segment", "repeated across documents of several sources"))
                idx = [i for i, k in enumerate(keep) if k]
                for name in ("segments", "seg_index", "original", "seg_script", "seg_lang", "seg_score"):
                    if doc.get(name) is not None and len(doc[name]) == len(keep):
                        doc[name] = [doc[name][i] for i in idx]
                if not doc["segments"]:
                    rows.append(remove_document("dedup", doc, "no-segments-left", "every segment was boilerplate"))
                    continue
        out.append(doc)
    return out, rows


def report_json(cache: Cache) -> dict:
    return cache.get_json("dedup", "report.json")


def dumps(x) -> str:  # pragma: no cover
    return json.dumps(x)
