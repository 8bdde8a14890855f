"""Leak-free train / dev / test splits.

Documents whose estimated Jaccard similarity reaches ``leak_threshold`` (lower
than the dedup threshold) are clustered, and whole clusters go to one split,
so no near-duplicate pair crosses splits (Lee et al. 2022; Lewis et al. 2021).
Each cluster goes to the split its hash falls in (``split_of``), so a
re-run with new material keeps every earlier assignment.
"""
from __future__ import annotations

import hashlib
from dataclasses import dataclass

import numpy as np

from ..config import Checked, param
from . import dedup
from .contract import Applied, Decisions, Services

VERSION = "3"
SPLITS = ("train", "dev", "test")


@dataclass(frozen=True)
class Params(Checked):
    ratios: dict = param({"train": 0.8, "dev": 0.1, "test": 0.1}, help="share of documents per split")
    leak_threshold: float = param(0.5, low=0.05, high=1.0, help="similarity at which documents must share a split")
    seed: int = param(0, help="seed of the assignment order")

    def __post_init__(self):
        super().__post_init__()
        if set(self.ratios) != set(SPLITS) or any(not isinstance(v, (int, float)) or v < 0 for v in self.ratios.values()):
            raise ValueError("key 'ratios' must give train, dev and test shares, e.g. {train = 0.8, dev = 0.1, test = 0.1}")
        if abs(sum(self.ratios.values()) - 1.0) > 1e-6:
            raise ValueError(f"key 'ratios' must sum to 1, got {sum(self.ratios.values()):g}")


def split_of(name: str, ratios: dict, seed: int) -> str:
    """The split of the cluster whose smallest document id is ``name``: a 64-bit hash of the
    seed and the name, read as a number in [0, 1), placed on the cumulative ratios.

    The choice depends on nothing else, so adding material never moves a document that is
    already assigned (unless a new document joins its cluster to another), and dialects,
    sources and media are spread over the splits in proportion (common practice for stable
    hash-based splits)."""
    u = int.from_bytes(hashlib.sha256(f"{seed}:{name}".encode()).digest()[:8], "big") / 2.0**64
    edge = 0.0
    for split in SPLITS:
        edge += ratios[split]
        if u < edge:
            return split
    return next(s for s in reversed(SPLITS) if ratios[s] > 0)  # u above a sum rounded below 1


def assign(clusters: list[list[int]], names: list[str], ratios: dict, seed: int) -> dict[int, str]:
    """Split per document index: each cluster whole, by ``split_of`` its smallest name."""
    result = {}
    for c in clusters:
        choice = split_of(min(names[i] for i in c), ratios, seed)
        for i in c:
            result[i] = choice
    return result


def decide(services: Services, in_stage: str, parts, params: Params) -> Decisions:
    dparams = services.recipe.stages["dedup"]
    data = dedup.load_signatures(services, "split", in_stage, parts, dparams, _dedup_signatures(services, in_stage, dparams))
    near = dparams.__class__(**{**dparams.__dict__, "min_shingles": 1})
    verdicts = dedup.known_pairs_name(params.leak_threshold, near, exact=False)
    pairs, _ = dedup.near_duplicate_pairs(data, params.leak_threshold, near, services.engine,
                                          known=dedup.load_known_pairs(services.cache, "split", verdicts, data))
    dedup.keep_known_pairs(services.cache, "split", verdicts, data, dedup.eligible_rows(data, near), pairs)
    clustered = dedup.clusters_from_pairs(len(data), pairs)
    members = np.array([i for c in clustered for i in c], dtype=np.int64)
    name_of = dict(zip(members.tolist(), data.ids(members)))
    cluster_name = {}
    for c in clustered:
        smallest = min(name_of[m] for m in c)  # once per cluster: leak clusters can be large
        cluster_name.update(dict.fromkeys(c, smallest))
    # A partition's decision names the cluster of each of its documents that is in one; every
    # other document is a cluster of its own, placed by its own id when the partition is written.
    part_of = np.searchsorted(data.offsets, members, side="right") - 1
    decisions: dict[str, dict[str, str]] = {part.key: {} for part in parts}
    for row, p in zip(members.tolist(), part_of.tolist()):
        decisions[parts[p].key][name_of[row]] = cluster_name[row]
    return Decisions(decisions, {"leak_threshold": params.leak_threshold, "leak_clusters": len(clustered),
                                 "docs_in_leak_clusters": len(members)})


def _dedup_signatures(services: Services, in_stage: str, dparams) -> dict[str, tuple[str, str]]:
    """Per input partition (dedup's output), the signatures dedup made of its input partition: the
    same documents, and the same texts unless dedup dropped boilerplate segments of one."""
    stages = list(services.last_keys)
    if in_stage != "dedup" or "dedup" not in stages or stages.index("dedup") == 0:
        return {}
    before = services.last_keys[stages[stages.index("dedup") - 1]]
    after = services.last_keys["dedup"]
    if len(before) != len(after):
        return {}
    return {out_key: ("dedup", dedup.signature_name(in_key, dparams)) for in_key, out_key in zip(before, after)}


def apply(docs: list[dict], params: Params, decision: dict):
    """``decision`` maps a document in a near-duplicate cluster to the cluster's name."""
    for doc in docs:
        doc["split"] = split_of(decision.get(doc["id"], doc["id"]), params.ratios, params.seed)
    return Applied(docs, [])
