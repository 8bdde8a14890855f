"""Locality-sensitive hashing over MinHash signatures (the banding technique, Leskovec, Rajaraman
and Ullman, Mining of Massive Datasets, ch. 3): bands and rows chosen for a recall target at the
threshold, the S-curve, and candidate pairs found by sorting band keys (or by a shuffle on an
engine that has one)."""
from __future__ import annotations

import numpy as np

from .minhash import fmix64

__all__ = ["CANDIDATE_RECALL", "lsh_params", "s_curve", "band_keys", "band_pairs", "candidates_by_sorting",
           "candidates_by_shuffle", "BANDWISE_ABOVE"]

CANDIDATE_RECALL = 0.99   # a pair at the threshold becomes a candidate with at least this probability


def lsh_params(threshold: float, num_perm: int) -> tuple[int, int]:
    """(bands, rows per band), b * r <= num_perm, such that a pair whose Jaccard equals the
    threshold becomes a candidate with probability 1 - (1 - t^r)^b >= CANDIDATE_RECALL; among
    those, the most rows per band (the steepest S-curve, so the fewest candidates far below the
    threshold), then the most bands.  Candidates are verified exactly, so a false candidate costs
    one comparison, while a missed one cannot be recovered.

    >>> lsh_params(0.8, 128)
    (21, 6)
    """
    best = (num_perm, 1)
    for rows in range(1, num_perm + 1):
        bands = num_perm // rows
        if bands >= 1 and s_curve(threshold, bands, rows) >= CANDIDATE_RECALL:
            best = (bands, rows)
    return best


def s_curve(s: float, bands: int, rows: int) -> float:
    """Probability that a pair of Jaccard similarity s becomes a candidate: 1 - (1 - s^r)^b."""
    return 1.0 - (1.0 - s ** rows) ** bands


def band_keys(sigs: np.ndarray, bands: int, rows: int, only: range | None = None) -> np.ndarray:
    """A 64-bit key per (document, band) from the band's hash values; with ``only``, the
    columns of those bands alone."""
    only = range(bands) if only is None else only
    keys = np.zeros((sigs.shape[0], len(only)), dtype=np.uint64)
    with np.errstate(over="ignore"):
        for j, band in enumerate(only):
            k = np.full(sigs.shape[0], np.uint64(band), dtype=np.uint64)
            for c in range(band * rows, (band + 1) * rows):
                k = fmix64(k * np.uint64(0x100000001B3) ^ sigs[:, c].astype(np.uint64))
            keys[:, j] = k
    return keys


# Beyond this many documents, candidates are found and verified band by band, so that the whole
# candidate set is never held at once.
BANDWISE_ABOVE = 50_000
# A bucket with more members than this links each member to its first one only (enough for
# clustering by connected components) instead of every pair, which would grow quadratically.
FULL_BUCKET = 64


def candidates_by_sorting(keys_by_band: np.ndarray, idx: np.ndarray, n: int) -> np.ndarray:
    """Documents agreeing on a band, found band by band by sorting the band keys; the pairs are
    kept as one sorted array of ``smaller * n + larger`` codes (8 bytes a pair)."""
    codes = [np.zeros(0, dtype=np.int64)]
    for band in range(keys_by_band.shape[1]):
        pairs = band_pairs(keys_by_band[:, band], idx)
        codes.append(pairs[:, 0] * n + pairs[:, 1])
    codes = np.concatenate(codes)
    codes.sort()  # distinct by sorting: numpy's hash-based unique measured 20 times slower here
    codes = codes[np.concatenate([[True], codes[1:] != codes[:-1]])] if len(codes) else codes
    return np.stack([codes // n, codes % n], axis=1)


def band_pairs(keys: np.ndarray, idx: np.ndarray) -> np.ndarray:
    """The candidate pairs of every bucket of one band at once: rows sorted by (key, row), then
    each row is paired with the rows 1, 2, ... places after it in the same bucket (buckets of
    at most FULL_BUCKET members), or with its bucket's first row (larger buckets)."""
    if len(keys) < 2:
        return np.zeros((0, 2), dtype=np.int64)
    order = np.lexsort((idx, keys))
    k, members = keys[order], idx[order].astype(np.int64)
    starts_here = np.concatenate([[True], k[1:] != k[:-1]])
    group = np.cumsum(starts_here) - 1
    starts = np.flatnonzero(starts_here)
    sizes = np.diff(np.append(starts, len(k)))
    small = (sizes <= FULL_BUCKET)[group]
    out = [np.zeros((0, 2), dtype=np.int64)]
    for d in range(1, int(sizes[sizes <= FULL_BUCKET].max(initial=1))):
        same = (group[:-d] == group[d:]) & small[:-d]
        out.append(np.stack([members[:-d][same], members[d:][same]], axis=1))
    big = ~small & ~starts_here
    if big.any():
        out.append(np.stack([members[starts][group[big]], members[big]], axis=1))
    return np.concatenate(out)


def candidates_by_shuffle(keys: np.ndarray, idx: np.ndarray, engine, n: int) -> np.ndarray:
    """The same pairs as ``candidates_by_sorting``, with the band keys shuffled across the
    cluster so that documents sharing a key meet in one partition, which pairs them there.
    (Each band's keys are hashed from the band number on, so one key column serves all bands.)"""
    import pandas as pd
    frame = pd.DataFrame({"key": keys.ravel(), "doc": np.repeat(idx, keys.shape[1]).astype(np.int64)})
    pairs = engine.frame_map(frame, "key", _partition_pairs, {"left": "int64", "right": "int64"})
    codes = pairs["left"].to_numpy() * n + pairs["right"].to_numpy()
    codes.sort()
    codes = codes[np.concatenate([[True], codes[1:] != codes[:-1]])] if len(codes) else codes
    return np.stack([codes // n, codes % n], axis=1)


def _partition_pairs(part):
    import pandas as pd
    pairs = band_pairs(part["key"].to_numpy(), part["doc"].to_numpy())
    return pd.DataFrame({"left": pairs[:, 0], "right": pairs[:, 1]})
