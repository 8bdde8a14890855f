"""Many texts as one array of code points, and tables that classify each code point once.

Stages that look at characters one by one (the quality filter's shares, script detection) do so
for whole partitions at a time: the texts end to end as a numpy array, a table of every code
point's class filled the first time the code point is seen (by the same patterns and Unicode data
the per-character code used), and per-text figures from cumulative sums.
"""
from __future__ import annotations

from typing import Callable

import numpy as np

__all__ = ["code_points", "CodePointTable", "count_per_text", "any_per_text"]

LAST_CODE_POINT = 0x10FFFF


def code_points(texts: list[str]) -> tuple[np.ndarray, np.ndarray]:
    """All texts' code points, end to end, and where each text starts (one more: the end).
    Lone surrogates are kept as their code points."""
    starts = np.zeros(len(texts) + 1, dtype=np.int64)
    np.cumsum([len(t) for t in texts], out=starts[1:])
    joined = "".join(texts).encode("utf-32-le", "surrogatepass")
    return np.frombuffer(joined, dtype="<u4"), starts


class CodePointTable:
    """``classify(character) -> int`` for every code point, computed the first time a code point
    is looked up and kept for the life of the process."""

    def __init__(self, classify: Callable[[str], int], dtype=np.int32, unknown: int = -1):
        self._classify, self._unknown = classify, unknown
        self._table = np.full(LAST_CODE_POINT + 1, unknown, dtype=dtype)

    def __call__(self, points: np.ndarray) -> np.ndarray:
        table = self._table
        new = np.unique(points[table[points] == self._unknown])
        if len(new):
            table[new] = [self._classify(chr(c)) for c in new.tolist()]
        return table[points]


def count_per_text(flags: np.ndarray, starts: np.ndarray) -> list[int]:
    """How many of each text's positions are set."""
    total = np.zeros(len(flags) + 1, dtype=np.int64)
    np.cumsum(flags, out=total[1:])
    return (total[starts[1:]] - total[starts[:-1]]).tolist()


def any_per_text(flags: np.ndarray, starts: np.ndarray) -> np.ndarray:
    """Whether any of each text's positions is set."""
    total = np.zeros(len(flags) + 1, dtype=np.int64)
    np.cumsum(flags, out=total[1:])
    return total[starts[1:]] > total[starts[:-1]]
