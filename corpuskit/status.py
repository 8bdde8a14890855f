"""Which stages are fresh or stale for a recipe and output folder, and why."""
from __future__ import annotations

from pathlib import Path

from .recipe import Recipe
from .runner import Runner
from .stages.contract import Partition, partition_key, survey_key
from .stages.registry import GLOBAL_STAGES, MAP_STAGES, STAGES
from .storage import Cache


def stage_status(recipe: Recipe, out: Path) -> list[tuple[str, str, str]]:
    cache = Cache(Path(out))
    runner = Runner(recipe, Path(out), None)
    units = runner.ingest_units()
    missing = [u for u in units if not cache.has_blob("ingest", f"{u[2]}.unit.json")]
    rows = []
    if missing:
        srcs = sorted({u[0].id for u in missing})
        rows.append(("ingest", "stale", f"{len(missing)} of {len(units)} file groups new or changed (sources: {', '.join(srcs)})"))
        rows += [(n, "stale", "waits for ingest") for n in list(MAP_STAGES) + list(GLOBAL_STAGES) + ["export"]]
        return rows
    rows.append(("ingest", "fresh", f"{len(units)} file groups cached"))
    parts = [Partition(src.id, k) for src, _, key in units for k in cache.get_json("ingest", f"{key}.unit.json")["parts"]]
    for name in MAP_STAGES:
        stage, params = STAGES[name], recipe.stages[name]
        ctx_key = stage.context_key(recipe, params)
        surveys = {}
        if stage.survey is not None:
            for s in recipe.sources:
                surveys[s.id] = survey_key(stage, params, ctx_key, [p.key for p in parts if p.source == s.id])
        keys = [partition_key(stage, params, p.key, ctx_key, surveys.get(p.source, "")) for p in parts]
        stale = [k for k in keys if not cache.done(name, k)]
        if stale:
            rows.append((name, "stale", f"{len(stale)} of {len(keys)} partitions to compute (inputs, parameters, "
                                        "tables or seeds changed)"))
            rows += [(n, "stale", f"waits for {name}") for n in MAP_STAGES[MAP_STAGES.index(name) + 1:]]
            break
        rows.append((name, "fresh", f"{len(keys)} partitions cached"))
        parts = [Partition(p.source, k) for p, k in zip(parts, keys)]
    for name in GLOBAL_STAGES:
        rows.append((name, "global", "re-evaluated every run from cached signatures; recomputes only partitions "
                                     "whose decisions changed"))
    rows.append(("export", "global", "joins cached per-partition pieces every run; builds pieces only for partitions "
                                     "that changed"))
    return rows
