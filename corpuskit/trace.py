"""Trace one document through the stages from the ledger and the outputs."""
from __future__ import annotations

import gzip
import json
from pathlib import Path

from .errors import RecipeError


def trace_document(out: Path, doc_id: str) -> list[str]:
    out = Path(out)
    ledger = out / "private" / "ledger.jsonl.gz"
    if not ledger.exists():
        raise RecipeError(f"{out}: no private/ledger.jsonl.gz here; run the recipe first or give the right --out.")
    lines = [f"document {doc_id}"]
    fate = None
    with gzip.open(ledger, "rt", encoding="utf-8") as f:
        for raw in f:
            r = json.loads(raw)
            if r["doc_id"] != doc_id:
                continue
            where = f"segment {r['seg_index']}" if r["unit"] == "segment" else "document"
            twin = f" (twin: {r['dup_of']})" if r.get("dup_of") else ""
            lines.append(f"  {r['stage']:<10} {r['action']:<9} {where}: {r['reason']}{twin} {r['detail'] or ''}".rstrip())
            if r["unit"] == "document" and r["action"] == "removed":
                fate = f"removed at stage '{r['stage']}' ({r['reason']})"
    for folder in ("corpus", "restricted"):
        for shard in sorted((out / folder).glob("*.jsonl.gz")) if (out / folder).exists() else []:
            with gzip.open(shard, "rt", encoding="utf-8") as f:
                for raw in f:
                    if f'"id": "{doc_id}"' in raw:
                        d = json.loads(raw)
                        fate = f"kept in {folder}/{shard.name}, split '{d.get('split')}', {len(d['segments'])} segments"
    if fate is None and len(lines) == 1:
        raise RecipeError(f"{out}: no document '{doc_id}' in the ledger or the corpus; ids look like 'SOURCE:FILE:KEY'.")
    lines.append(f"fate: {fate or 'kept (segments rewritten or removed as listed)'}")
    return lines
