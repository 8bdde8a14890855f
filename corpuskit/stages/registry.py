"""The stages in pipeline order.  Map stages run per partition; global stages decide over all
partitions first, then apply their decisions per partition; export writes the output folder."""
from __future__ import annotations

from . import clean, dedup, export, ingest, langid, normalise, qualityfilter, script, split, variants

STAGES = {
    "ingest": ingest,
    "clean": clean,
    "normalise": normalise,
    "script": script,
    "variants": variants,
    "langid": langid,
    "filter": qualityfilter,
    "dedup": dedup,
    "split": split,
    "export": export,
}
STAGE_ORDER = list(STAGES)
MAP_STAGES = ("clean", "normalise", "script", "variants", "langid", "filter")
GLOBAL_STAGES = ("dedup", "split")
