"""Near-duplicate detection: the dedup stage's batched signatures next to datasketch's per-shingle loop.

Both sides get the same documents, the same character 5-gram shingles, the same
number of permutations and the same LSH bands and rows; each finds candidate
pairs with datasketch's MinHashLSH and keeps those whose estimated Jaccard
reaches the threshold.  Recall and precision are measured against the exact
Jaccard of every pair (sparse matrix product), so speed is not bought with misses.

    python benchmarks/dedup.py [--docs 3000] [--threshold 0.7] [--num-perm 128]
"""
from __future__ import annotations

import argparse
import random
import time

import numpy as np
from scipy import sparse

from corpuskit.demo.generate import Lexicon
from corpuskit.stages.dedup import (Params, batch_shingle_hashes, batch_signatures, candidate_pairs, estimate_jaccard, lsh_params,
                                    normalise_for_hash, permutations)


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


def exact_pairs(docs: list[str], n: int, threshold: float) -> set[tuple[int, int]]:
    """Every pair whose exact Jaccard similarity reaches the threshold (a sparse 0/1 matrix product)."""
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
    keep = jac >= threshold
    return set(zip(inter.row[keep].tolist(), inter.col[keep].tolist()))


def our_signatures(docs: list[str], params: Params):
    a, b = permutations(params.num_perm)
    hashes = batch_shingle_hashes(docs, params.ngram, distinct=False)
    return batch_signatures(hashes, a, b), np.array([len(h) >= params.min_shingles for h in hashes])


def our_pairs(signed, params: Params, bands: int, rows: int) -> set[tuple[int, int]]:
    sigs, eligible = signed
    return {(i, j) for i, j in candidate_pairs(sigs, eligible, bands, rows)
            if estimate_jaccard(sigs[i], sigs[j]) >= params.threshold}


def loop_signatures(docs: list[str], params: Params):
    from datasketch import MinHash
    hashes = []
    for d in docs:
        m = MinHash(num_perm=params.num_perm, seed=1)
        for s in char_shingles(d, params.ngram):
            m.update(s.encode("utf-8"))
        hashes.append(m)
    return hashes


def loop_pairs(hashes, params: Params, bands: int, rows: int) -> set[tuple[int, int]]:
    from datasketch import MinHashLSH
    lsh = MinHashLSH(num_perm=params.num_perm, params=(bands, rows))
    for i, m in enumerate(hashes):
        lsh.insert(i, m)
    pairs = set()
    for i, m in enumerate(hashes):
        for j in lsh.query(m):
            if j != i and m.jaccard(hashes[j]) >= params.threshold:
                pairs.add((min(i, j), max(i, j)))
    return pairs


def score(found: set, truth: set) -> tuple[float, float]:
    hit = len(found & truth)
    return hit / max(len(truth), 1), hit / max(len(found), 1)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--docs", type=int, default=3000)
    ap.add_argument("--threshold", type=float, default=0.7)
    ap.add_argument("--num-perm", type=int, default=128)
    args = ap.parse_args()
    params = Params(num_perm=args.num_perm, threshold=args.threshold)
    bands, rows = lsh_params(params.threshold, params.num_perm, params.fp_weight)
    docs = make_documents(args.docs)
    mb = sum(len(d.encode("utf-8")) for d in docs) / 2**20
    truth = exact_pairs(docs, params.ngram, params.threshold)
    print(f"{len(docs)} documents, {mb:.2f} MB, {len(truth)} pairs with exact Jaccard >= {params.threshold}; "
          f"{params.num_perm} permutations, {bands} bands x {rows} rows")
    times = {}
    for name, sign, pair in (("dedup stage (batched numpy)", our_signatures, our_pairs),
                             ("datasketch per-shingle update", loop_signatures, loop_pairs)):
        t0 = time.perf_counter()
        signed = sign(docs, params)
        t1 = time.perf_counter()
        found = pair(signed, params, bands, rows)
        t2 = time.perf_counter()
        recall, precision = score(found, truth)
        times[name] = (t1 - t0, t2 - t0)
        print(f"{name:30s} signatures {t1 - t0:7.2f} s ({len(docs) / (t1 - t0):8.0f} docs/s, {mb / (t1 - t0):7.3f} MB/s)  "
              f"with LSH and checks {t2 - t0:7.2f} s ({mb / (t2 - t0):7.3f} MB/s)  recall {recall:.3f}  precision {precision:.3f}")
    (fast_sig, fast_all), (slow_sig, slow_all) = times.values()
    print(f"speed ratio, signatures (the per-shingle loop's part): {slow_sig / fast_sig:.1f}")
    print(f"speed ratio, end to end (both use datasketch's LSH index): {slow_all / fast_all:.1f}")

if __name__ == "__main__":
    main()
