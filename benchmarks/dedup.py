"""Near-duplicate detection: the dedup stage's batched signatures next to datasketch's per-shingle loop.

Both sides get the same documents, the same character 5-gram shingles, the same
number of permutations and the same LSH bands and rows.  The stage (``near_duplicates_of_texts``)
verifies every candidate pair exactly and removes a document only for a kept twin at the
threshold; the per-shingle script, written as a user would, keeps the pairs whose estimated
Jaccard reaches the threshold and removes every member of a connected cluster but its first.
Both are scored against the exact Jaccard of every pair (sparse matrix product): recall and
precision of the pairs, and the precision of each removal against the twin it names.

    python benchmarks/dedup.py [--docs 3000] [--threshold 0.7] [--num-perm 128]
"""
from __future__ import annotations

import argparse
import random
import time

import numpy as np
from scipy import sparse

from corpuskit.demo.generate import Lexicon
from corpuskit.stages.dedup import Params, clusters_from_pairs, near_duplicates_of_texts
from corpuskit.minhash import normalise_for_hash
from corpuskit.lsh import lsh_params


def make_documents(n: int, seed: int = 11) -> list[str]:
    """Paragraphs of the invented demo language; a quarter are edited copies of earlier ones."""
    rng = random.Random(seed)
    lex = Lexicon(rng)
    docs: list[str] = []
    for _ in range(n):
        if docs and rng.random() < 0.25:
            words = rng.choice(docs).split()
            for _ in range(rng.randint(0, max(1, len(words) // 8))):
                words[rng.randrange(len(words))] = rng.choice(lex.base)
            docs.append(" ".join(words))
        else:
            docs.append(" ".join(lex.sentence(rng, rng.choice(["hill", "river", "coast"]), (8, 16)) for _ in range(4)))
    return docs


def char_shingles(text: str, n: int) -> set[str]:
    text = normalise_for_hash(text)
    return {text[i:i + n] for i in range(max(1, len(text) - n + 1))}


def exact_jaccards(docs: list[str], n: int) -> dict[tuple[int, int], float]:
    """The exact Jaccard of every pair that shares an n-gram (a sparse 0/1 matrix product)."""
    vocab: dict[str, int] = {}
    rows, cols = [], []
    for i, d in enumerate(docs):
        for s in char_shingles(d, n):
            rows.append(i)
            cols.append(vocab.setdefault(s, len(vocab)))
    m = sparse.csr_matrix((np.ones(len(rows), dtype=np.int32), (rows, cols)), shape=(len(docs), len(vocab)))
    sizes = np.asarray(m.sum(axis=1)).ravel()
    inter = sparse.triu(m @ m.T, k=1).tocoo()
    jac = inter.data / (sizes[inter.row] + sizes[inter.col] - inter.data)
    return dict(zip(zip(inter.row.tolist(), inter.col.tolist()), jac.tolist()))


def our_run(docs: list[str], params: Params):
    pairs, twin, _ = near_duplicates_of_texts(docs, params)
    return {(a, b) for a, b, _ in pairs}, {int(r): int(twin[r]) for r in np.flatnonzero(twin >= 0)}


def loop_run(docs: list[str], params: Params, bands: int, rows: int):
    from datasketch import MinHash, MinHashLSH
    hashes = []
    for d in docs:
        m = MinHash(num_perm=params.num_perm, seed=1)
        for s in char_shingles(d, params.ngram):
            m.update(s.encode("utf-8"))
        hashes.append(m)
    lsh = MinHashLSH(num_perm=params.num_perm, params=(bands, rows))
    for i, m in enumerate(hashes):
        lsh.insert(i, m)
    pairs = set()
    for i, m in enumerate(hashes):
        for j in lsh.query(m):
            if j != i and m.jaccard(hashes[j]) >= params.threshold:
                pairs.add((min(i, j), max(i, j)))
    removals = {m: c[0] for c in clusters_from_pairs(len(docs), sorted(pairs)) for m in c[1:]}
    return pairs, removals


def score(found: set, truth: set) -> tuple[float, float]:
    hit = len(found & truth)
    return hit / max(len(truth), 1), hit / max(len(found), 1)


def twin_precision(removals: dict[int, int], jaccard: dict, threshold: float) -> float:
    ok = [jaccard.get((min(d, t), max(d, t)), 0.0) >= threshold for d, t in removals.items()]
    return sum(ok) / len(ok) if ok else 1.0


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--docs", type=int, default=3000)
    ap.add_argument("--threshold", type=float, default=0.7)
    ap.add_argument("--num-perm", type=int, default=128)
    ap.add_argument("--repeat", type=int, default=3)
    args = ap.parse_args()
    params = Params(num_perm=args.num_perm, threshold=args.threshold)
    bands, rows = lsh_params(params.threshold, params.num_perm)
    docs = make_documents(args.docs)
    mb = sum(len(d.encode("utf-8")) for d in docs) / 2**20
    jaccard = exact_jaccards(docs, params.ngram)
    truth = {k for k, v in jaccard.items() if v >= params.threshold}
    print(f"{len(docs)} documents, {mb:.2f} MB, {len(truth)} pairs with exact Jaccard >= {params.threshold}; "
          f"{params.num_perm} permutations, {bands} bands x {rows} rows")
    times: dict[str, float] = {}
    results = {}
    sides = (("dedup stage (exact verification)", lambda: our_run(docs, params)),
             ("datasketch per-shingle script", lambda: loop_run(docs, params, bands, rows)))
    for _ in range(args.repeat):     # interleaved A B A B ...; the fastest run of each counts
        for name, go in sides:
            t0 = time.perf_counter()
            results[name] = go()
            times[name] = min(times.get(name, float("inf")), time.perf_counter() - t0)
    for name, _ in sides:
        found, removals = results[name]
        recall, precision = score(found, truth)
        print(f"{name:34s} {times[name]:7.2f} s ({mb / times[name]:7.3f} MB/s)  pair recall {recall:.3f}  "
              f"pair precision {precision:.3f}  removals {len(removals)}, within the threshold of the named twin "
              f"{twin_precision(removals, jaccard, params.threshold):.3f}")
    fast, slow = times.values()
    print(f"speed ratio, end to end (fastest of {args.repeat} interleaved runs each): {slow / fast:.1f}")


if __name__ == "__main__":
    main()
