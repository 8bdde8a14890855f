"""Measures used by the balance report; each is checked against a published worked example."""
from __future__ import annotations

from typing import Iterable, Mapping

import numpy as np

__all__ = ["shannon_entropy", "effective_number", "imbalance_ratio", "temperature_weights", "heaps_fit", "jaccard"]


def _probs(counts: Iterable[float]) -> np.ndarray:
    c = np.array([x for x in counts if x > 0], dtype=float)
    return c / c.sum() if c.size else c


def shannon_entropy(counts: Iterable[float]) -> float:
    """H = -sum p log2 p in bits (Shannon 1948).

    >>> shannon_entropy([1, 1, 1, 1])
    2.0
    """
    p = _probs(counts)
    return float(-(p * np.log2(p)).sum()) if p.size else 0.0


def effective_number(counts: Iterable[float]) -> float:
    """2^H: the number of equally common groups with the same entropy (Hill's N1)."""
    return float(2 ** shannon_entropy(counts))


def imbalance_ratio(counts: Iterable[float]) -> float:
    c = [x for x in counts if x > 0]
    return float(max(c) / min(c)) if c else 0.0


def temperature_weights(sizes: Mapping[str, float], alpha: float) -> dict[str, float]:
    """q_i = p_i^alpha / sum_j p_j^alpha (exponential smoothing across groups).

    Published alphas: 0.7 for multilingual BERT (Devlin et al. 2018, multilingual
    README), 0.5 for XLM (Lample & Conneau 2019; from memory), 0.3 for XLM-R
    (Conneau et al. 2020) and mT5 (Xue et al. 2021), 0.2 (T = 5) in Arivazhagan et al. 2019
    (from memory).
    """
    total = sum(sizes.values())
    if total <= 0:
        return {k: 0.0 for k in sizes}
    raised = {k: (v / total) ** alpha if v > 0 else 0.0 for k, v in sizes.items()}
    z = sum(raised.values())
    return {k: v / z for k, v in raised.items()}


def heaps_fit(points: list[tuple[int, int]]) -> tuple[float, float]:
    """Least-squares fit of log V = log K + beta log T (Heaps' law, IIR 5.1.1)."""
    pts = [(t, v) for t, v in points if t > 0 and v > 0]
    if len(pts) < 2:
        return float("nan"), float("nan")
    x = np.log10([t for t, _ in pts])
    y = np.log10([v for _, v in pts])
    beta, logk = np.polyfit(x, y, 1)
    return float(10 ** logk), float(beta)


def jaccard(a: set, b: set) -> float:
    return len(a & b) / len(a | b) if a | b else 0.0
