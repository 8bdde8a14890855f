"""Leak-free train / dev / test splits.

Documents whose estimated Jaccard similarity reaches ``leak_threshold`` (lower
than the dedup threshold) are clustered, and whole clusters go to one split,
so no near-duplicate pair crosses splits (Lee et al. 2022; Lewis et al. 2021).
Clusters are assigned per dialect, in a seeded order, to the split furthest
below its target share.
"""
from __future__ import annotations

import hashlib
from collections import defaultdict
from dataclasses import dataclass

from ..recipe import param
from . import dedup

VERSION = "1"
SPLITS = ("train", "dev", "test")


@dataclass(frozen=True)
class Params:
    ratios: dict = param({"train": 0.8, "dev": 0.1, "test": 0.1}, help="share of documents per split")
    leak_threshold: float = param(0.5, low=0.05, high=1.0, help="similarity at which documents must share a split")
    seed: int = param(0, help="seed of the assignment order")

    def __post_init__(self):
        if set(self.ratios) != set(SPLITS) or any(not isinstance(v, (int, float)) or v < 0 for v in self.ratios.values()):
            raise ValueError("key 'ratios' must give train, dev and test shares, e.g. {train = 0.8, dev = 0.1, test = 0.1}")
        if abs(sum(self.ratios.values()) - 1.0) > 1e-6:
            raise ValueError(f"key 'ratios' must sum to 1, got {sum(self.ratios.values()):g}")


def assign(clusters: list[list[int]], dialects: list[str], ratios: dict, seed: int, names: list[str]) -> dict[int, str]:
    """Split per document index; each cluster whole, per dialect, greedily toward the ratios."""
    by_dialect = defaultdict(list)
    for c in clusters:
        by_dialect[dialects[c[0]]].append(c)
    result = {}
    for dialect in sorted(by_dialect):
        group = sorted(by_dialect[dialect],
                       key=lambda c: hashlib.sha256(f"{seed}:{min(names[i] for i in c)}".encode()).hexdigest())
        total = sum(len(c) for c in group)
        size = {s: 0 for s in SPLITS}
        for c in group:
            deficit = {s: ratios[s] * total - size[s] for s in SPLITS}
            choice = max(SPLITS, key=lambda s: (deficit[s], -SPLITS.index(s)))
            size[choice] += len(c)
            for i in c:
                result[i] = choice
    return result


def decide(runner, in_stage: str, parts, params: Params):
    dparams = runner.recipe.stages["dedup"]
    data = dedup.load_signatures(runner, "split", in_stage, parts, dparams)
    n = len(data["ids"])
    pairs, _ = dedup.near_duplicate_pairs(data, params.leak_threshold,
                                          dparams.__class__(**{**dparams.__dict__, "min_shingles": 1}),
                                          getattr(runner, "engine", None))
    clustered = dedup.clusters_from_pairs(n, pairs)
    seen = {i for c in clustered for i in c}
    clusters = clustered + [[i] for i in range(n) if i not in seen]
    names = [str(x) for x in data["ids"]]
    dialects = [str(x) for x in data["dialects"]]
    assignment = assign(clusters, dialects, params.ratios, params.seed, names)
    decisions = {p.key: {} for p in parts}
    for i in range(n):
        decisions[data["part_of"][i]][names[i]] = assignment[i]
    runner.cache.put_json("split", "report.json", {"leak_threshold": params.leak_threshold,
                                                   "leak_clusters": len(clustered),
                                                   "docs_in_leak_clusters": len(seen)})
    return decisions


def apply(docs: list[dict], params: Params, decision: dict):
    for doc in docs:
        doc["split"] = decision.get(doc["id"], "train")
    return docs, []
