"""The stages in pipeline order: one entry each, with its kind (see contract).  Adding a stage is
one module and one entry here; README "How to add a stage" has the steps."""
from __future__ import annotations

from . import clean, dedup, export, ingest, langid, normalise, qualityfilter, script, split, variants
from .contract import Kind, Stage, Survey

__all__ = ["STAGES", "STAGE_ORDER", "MAP_STAGES", "GLOBAL_STAGES", "stages_of_kind"]

_ENTRIES = (
    Stage("ingest", Kind.INGEST, ingest.Params),
    Stage("clean", Kind.MAP, clean.Params, clean.apply,
          survey=Survey(clean.survey_partition, clean.merge_surveys, clean.partition_context)),
    Stage("normalise", Kind.MAP, normalise.Params, normalise.apply, normalise.context_key, normalise.build_context,
          figures=normalise.NormaliseFigures, idempotent=True),
    Stage("script", Kind.MAP, script.Params, script.apply, script.context_key, script.build_context,
          figures=script.ScriptFigures, idempotent=True),
    Stage("variants", Kind.MAP, variants.Params, variants.apply, variants.context_key, variants.build_context,
          figures=variants.VariantFigures),
    Stage("langid", Kind.MAP, langid.Params, langid.apply, langid.context_key, langid.build_context, idempotent=True),
    Stage("filter", Kind.MAP, qualityfilter.Params, qualityfilter.apply, qualityfilter.context_key,
          qualityfilter.build_context, idempotent=True),
    Stage("dedup", Kind.GLOBAL, dedup.Params, dedup.apply, decide=dedup.decide),
    Stage("split", Kind.GLOBAL, split.Params, split.apply, decide=split.decide, idempotent=True),
    Stage("export", Kind.EXPORT, export.Params),
)

STAGES: dict[str, Stage] = {s.name: s for s in _ENTRIES}
STAGE_ORDER = list(STAGES)


def stages_of_kind(kind: Kind) -> tuple[str, ...]:
    return tuple(name for name, s in STAGES.items() if s.kind is kind)


MAP_STAGES = stages_of_kind(Kind.MAP)
GLOBAL_STAGES = stages_of_kind(Kind.GLOBAL)
