"""Export: shards, splits, tokenizer, reports, ledger, datasheet and manifest.

Streams the final partitions once; documents whose source may not be
redistributed go to ``restricted/`` (or are excluded, by recipe) and never to
the public shards, splits or tokenizer.
"""
from __future__ import annotations

import contextlib
import csv
import heapq
import io
import json
import random
import sys
import unicodedata
from collections import Counter, defaultdict
from dataclasses import dataclass, field
from importlib import metadata
from pathlib import Path

from ..ledger import Counts, LedgerRow, conservation, remove_document
from ..recipe import param
from ..storage import atomic_gzip_text, atomic_write_text, file_sha256
from . import tokenizer as tok
from . import transliterate as translit
from . import variants as variants_stage
from ._shards import DocumentSet
from .qualityfilter import scrub
from .split import SPLITS

VERSION = "1"
PACKAGES = ("corpuskit", "fasttext-wheel", "numpy", "sentencepiece", "regex", "datasketch", "pandas", "pyarrow",
            "typer", "rich", "ftfy", "matplotlib", "fonttools", "confusable-homoglyphs", "langcodes", "license-expression")


@dataclass(frozen=True)
class Params:
    restricted: str = param("separate", choices=("separate", "exclude"),
                            help="documents that may not be redistributed: a separate restricted/ folder, or left out")
    vocab_size: int = param(8000, low=50, help="requested tokenizer vocabulary size")
    model_type: str = param("unigram", choices=("unigram", "bpe"), help="tokenizer model")
    alpha: float = param(0.3, low=0.0, high=1.0, help="temperature-sampling exponent across dialects")
    dialect_floor: float = param(0.1, low=0, high=1, help="warn when a dialect's share of words is below this")
    medium_floor: float = param(0.05, low=0, high=1, help="warn when a medium's share of words is below this")


@dataclass
class LedgerSummary:
    """What the export's reports need from the ledger, gathered while it is written."""
    totals: dict = field(default_factory=dict)
    removal_examples: dict = field(default_factory=lambda: defaultdict(list))
    rewrite_by_reason: Counter = field(default_factory=Counter)
    round_trip: Counter = field(default_factory=Counter)
    variant_rewrites: Counter = field(default_factory=Counter)
    nfkc_folds: Counter = field(default_factory=Counter)


def write_ledger(path: Path, runner, export_rows: list[LedgerRow], by_source: dict[str, Counter]) -> LedgerSummary:
    """Stream every stage's ledger rows (stage and partition order) into ``ledger.jsonl.gz``,
    counting removals per stage and per source (``by_source`` is updated) on the way.

    Removed text stays in the ledger for the team, with personal data scrubbed; reports
    (which are published) take examples only from redistributable sources."""
    from .registry import STAGE_ORDER
    recipe, cache = runner.recipe, runner.cache
    filter_params = recipe.stages["filter"]
    scrub_pii = filter_params.pii != "keep"
    not_public = {s.id for s in recipe.sources if not s.redistributable}
    led = LedgerSummary()

    def rows_of(stage):
        if stage == "export":
            yield from (r.as_dict() for r in export_rows)
            return
        for key in runner.last_keys.get(stage, []):
            yield from cache.read_ledger(stage, key).to_pylist()

    with atomic_gzip_text(path) as stream:
        for stage in STAGE_ORDER:
            tot = {"documents": 0, "segments_of_documents": 0, "segments": 0}
            for r in rows_of(stage):
                if r.get("text") and scrub_pii:
                    r["text"] = scrub(r["text"], filter_params.id_patterns)[0]
                stream.write(json.dumps(r, ensure_ascii=False, sort_keys=True))
                stream.write("\n")
                source_tally = by_source.setdefault(r["doc_id"].split(":", 1)[0], Counter())
                if r["action"] == "removed" and r["unit"] == "document":
                    tot["documents"] += 1
                    tot["segments_of_documents"] += r["segments"]
                    source_tally["documents removed"] += 1
                    source_tally["segments removed"] += r["segments"]
                elif r["action"] == "removed" and r["unit"] == "segment":
                    tot["segments"] += 1
                    source_tally["segments removed"] += 1
                if r["action"] == "removed" and r["unit"] in ("document", "segment"):
                    ex = led.removal_examples[f"{stage}:{r['reason']}"]
                    if len(ex) < 3 and r.get("text") and r["doc_id"].split(":", 1)[0] not in not_public:
                        ex.append(r["text"][:120])
                elif r["action"] == "rewritten":
                    _count_rewrite(led, stage, r)
            led.totals[stage] = tot
    return led


def _count_rewrite(led: LedgerSummary, stage: str, r: dict) -> None:
    led.rewrite_by_reason[f"{stage}:{r['reason']}"] += 1
    if r["reason"] == "variant-rule":
        rule, n, dialect = variants_stage.parse_rule_row(r["detail"])
        led.variant_rewrites[(rule, dialect)] += n
    elif r["reason"] == "transliterated":
        led.round_trip[r["detail"].rsplit("; ", 1)[-1]] += 1
    elif r["reason"] == "normalised" and "nfkc-folded:" in r["detail"]:
        for item in r["detail"].split("nfkc-folded:", 1)[1].split(",", 1)[0].split():
            code, n = item.split("x")
            led.nfkc_folds[code] += int(n)


def variants_report(types_by_dialect: dict[str, set[str]], rewrites: Counter) -> list[dict]:
    """Per dialect: tokens each table entry or rule rewrote, and word types before and after.

    "Before" adds back the variant forms a table entry removed (``table:variant→canonical``);
    a form that also occurs unrewritten (protected, or outside the entry's scope) was never
    lost.  Forms removed by regular-expression rules cannot be recovered this way, so with
    rules "before" is a lower bound."""
    dialects = set(types_by_dialect) | {dialect for _, dialect in rewrites}
    rows = []
    for dialect in sorted(dialects):
        after = types_by_dialect.get(dialect, set())
        mine = {rule: n for (rule, d), n in rewrites.items() if d == dialect}
        gone = {rule.split(":", 1)[1].split("→")[0].casefold() for rule in mine if rule.startswith("table:")}
        for rule, n in sorted(mine.items()):
            rows.append({"dialect": dialect, "rule": rule, "tokens_rewritten": n, "types_before": "", "types_after": ""})
        rows.append({"dialect": dialect, "rule": "(all)", "tokens_rewritten": sum(mine.values()),
                     "types_before": len(after | gone), "types_after": len(after)})
    return rows


def transliteration_report(recipe, round_trip: Counter) -> list[dict]:
    """Every rule of every table the recipe uses, with whether it reads back, then the
    segments whose transliteration did and did not map back to the original."""
    paths = {f"[stages.script] tables.{k}": v for k, v in recipe.stages["script"].tables.items()}
    paths.update({f"[[sources]] id = '{s.id}' key 'transliterate'": s.transliterate for s in recipe.sources if s.transliterate})
    seen, rows = set(), []
    for where, path in paths.items():
        resolved = recipe.resolve(path, where)
        if resolved in seen:
            continue
        seen.add(resolved)
        rows += translit.rule_report(translit.load_table(resolved))
    for outcome, n in sorted(round_trip.items()):
        rows.append({"table": "(all segments)", "line": "", "from": "", "to": "", "reversible": outcome, "reason": f"{n} segments"})
    return rows


def destination(doc: dict, restricted_policy: str) -> str:
    """'public', 'restricted' or 'excluded': only a document whose consent scope and licence
    both allow redistribution is public (the flag is set at ingest from the source's metadata)."""
    if doc["redistributable"] is True:
        return "public"
    return "excluded" if restricted_policy == "exclude" else "restricted"


SOURCE_COLUMNS = ["source", "medium", "dialect", "output", "documents in", "documents kept", "segments in", "segments kept"]


def source_counts(recipe, by_source: dict[str, Counter]) -> list[dict]:
    """Per source: what came in (kept plus removed, as the ledger counts it) and what was kept."""
    specs = {s.id: s for s in recipe.sources}
    rows = []
    for sid, c in by_source.items():
        spec = specs.get(sid)
        rows.append({"source": sid, "medium": spec.medium if spec else "", "dialect": (spec.dialect if spec else "") or "mixed",
                     "output": "public" if spec is None or spec.redistributable else "restricted",
                     "documents in": c["documents kept"] + c["documents removed"], "documents kept": c["documents kept"],
                     "segments in": c["segments kept"] + c["segments removed"], "segments kept": c["segments kept"]})
    return rows


def split_sizes(cells: dict[tuple[str, str], list[int]]) -> list[dict]:
    """Documents and segments per dialect and split, with each split's share of the dialect."""
    totals = Counter()
    for (dialect, _), (n, _) in cells.items():
        totals[dialect] += n
    return [{"dialect": dialect, "split": name, "documents": n, "segments": segs, "share": f"{n / totals[dialect]:.3f}"}
            for (dialect, name), (n, segs) in sorted(cells.items())]


class LineSample:
    """At most ``size`` lines, a uniform sample when there are more (reservoir sampling,
    Vitter's algorithm R, with a fixed seed: the same input gives the same sample)."""

    def __init__(self, size: int, seed: int = 0):
        self.size, self.seen, self.lines = size, 0, []
        self._rng = random.Random(seed)

    def add(self, line: str) -> None:
        self.seen += 1
        if len(self.lines) < self.size:
            self.lines.append(line)
        else:
            j = self._rng.randrange(self.seen)
            if j < self.size:
                self.lines[j] = line


class ReviewPool:
    """The ``size`` segments whose P(target) is closest to the threshold, kept while streaming."""

    def __init__(self, threshold: float | None, size: int):
        self.threshold, self.size, self.items = threshold, size, []

    def extend(self, scored) -> None:
        if self.threshold is None or not self.size:
            return
        self.items.extend(scored)
        if len(self.items) > 4 * self.size + 1000:
            self.items = self.best()

    def best(self) -> list[tuple[str, str, float]]:
        return heapq.nsmallest(self.size, self.items, key=lambda x: (abs(x[2] - self.threshold), x[0]))


def _langid_threshold(runner) -> float | None:
    name = getattr(runner, "langid_report", None)
    if name and runner.cache.has_blob("langid", name):
        return runner.cache.get_json("langid", name)["threshold"]["value"]
    return None


def _csv(rows: list[dict], columns: list[str] | None = None) -> str:
    columns = columns or (list(rows[0]) if rows else ["empty"])
    buf = io.StringIO()
    w = csv.DictWriter(buf, fieldnames=columns, lineterminator="\n", extrasaction="ignore")
    w.writeheader()
    for r in rows:
        w.writerow(r)
    return buf.getvalue()


def write_outputs(runner, in_stage: str, parts, reports) -> dict:
    from ..reports import balance, datasheet

    recipe, cache, out = runner.recipe, runner.cache, runner.out
    params: Params = recipe.stages["export"]
    for sub in ("corpus", "splits", "tokenizer", "reports", "restricted"):
        p = out / sub
        if p.exists():
            for f in p.iterdir():
                if f.is_file():
                    f.unlink()
    export_rows: list[LedgerRow] = []
    shard_docs = recipe.corpus.shard_docs
    stats = balance.Accumulator()
    script_inventory = balance.ScriptInventory()
    kept_docs = kept_segs = 0
    by_source: dict[str, Counter] = {s.id: Counter() for s in recipe.sources}
    review = ReviewPool(_langid_threshold(runner), recipe.stages["langid"].review_size)
    split_counts: dict[tuple[str, str], list[int]] = defaultdict(lambda: [0, 0])
    train_sample, dev_sample = LineSample(TOKENIZER_LINES), defaultdict(lambda: LineSample(DIALECT_LINES))
    train_by_dialect = defaultdict(lambda: LineSample(DIALECT_LINES))
    counts = Counts()
    # Documents stream from the cache into the output files: memory holds one partition.
    with contextlib.ExitStack() as stack:
        public = DocumentSet(stack, out / "corpus", "corpus", shard_docs)
        restricted = DocumentSet(stack, out / "restricted", "corpus", shard_docs) if params.restricted == "separate" else None
        splits = {name: DocumentSet(stack, out / "splits", name, None) for name in SPLITS}
        for p in parts:
            for d in cache.read_docs(in_stage, p.key):
                counts.docs_in += 1
                counts.segs_in += len(d["segments"])
                where = destination(d, params.restricted)
                if where == "excluded":
                    export_rows.append(remove_document("export", d, "not-redistributable",
                                                       f"consent '{d['consent']}' / licence '{d['licence']}'"))
                    continue
                kept_docs += 1
                kept_segs += len(d["segments"])
                by_source[d["source"]]["documents kept"] += 1
                by_source[d["source"]]["segments kept"] += len(d["segments"])
                counts.docs_out += 1
                counts.segs_out += len(d["segments"])
                stats.add(d)
                script_inventory.add(d)
                if d.get("seg_score"):
                    review.extend((d["id"], s, sc) for s, sc in zip(d["segments"], d["seg_score"]) if sc is not None)
                if where == "restricted":
                    restricted.add(d)
                    continue
                public.add(d)
                split = d["split"] or "train"
                splits[split].add(d)
                cell = split_counts[(d.get("dialect") or "unknown", split)]
                cell[0] += 1
                cell[1] += len(d["segments"])
                dialect = d.get("dialect") or "unknown"
                for seg in d["segments"]:
                    if split == "train":
                        train_sample.add(seg)
                        train_by_dialect[dialect].add(seg)
                    elif split == "dev":
                        dev_sample[dialect].add(seg)
        for doc_set in [public, restricted, *splits.values()]:
            if doc_set is not None:
                doc_set.finish()
    if restricted is not None and restricted.count:
        atomic_write_text(out / "restricted" / "README.txt",
                          "Documents whose consent scope or licence does not allow redistribution.\n"
                          "Keep this folder with the community that holds the material; do not publish it.\n")
    elif restricted is not None:  # nothing restricted: no folder, as with restricted = "exclude"
        for f in (out / "restricted").glob("*"):
            f.unlink()
        (out / "restricted").rmdir()
    for r in export_rows:
        counts.removed[f"{r.unit}:{r.reason}"] += 1

    # Tokenizer on the public train split, report on the dev split.
    tok_info = _tokenizer(out, params, recipe, train_sample.lines,
                          {k: v.lines for k, v in (dev_sample or train_by_dialect).items()}, "dev" if dev_sample else "train")

    led = write_ledger(out / "ledger.jsonl.gz", runner, export_rows, by_source)
    ledger_totals, removal_examples, rewrite_by_reason = led.totals, led.removal_examples, led.rewrite_by_reason
    round_trip, variant_rewrites, nfkc_folds = led.round_trip, led.variant_rewrites, led.nfkc_folds
    ingest = reports[0].counts
    cons = conservation(ledger_totals, ingest.docs_in, ingest.segs_in, kept_docs, kept_segs)

    # Reports.
    rep = out / "reports"
    bal = balance.write_report(rep, stats, params, recipe)
    atomic_write_text(rep / "script-inventory.csv", script_inventory.csv())
    removal_rows = []
    for s in reports + [type("R", (), {"name": "export", "counts": counts})()]:
        for reason, n in sorted(s.counts.removed.items()):
            removal_rows.append({"stage": s.name, "reason": reason, "removed": n,
                                 "examples": " | ".join(removal_examples.get(f"{s.name}:{reason.split(':', 1)[1]}", []))})
    atomic_write_text(rep / "removals.csv", _csv(removal_rows, ["stage", "reason", "removed", "examples"]))
    atomic_write_text(rep / "rewrites.csv", _csv([{"stage_reason": k, "rewrites": v} for k, v in sorted(rewrite_by_reason.items())],
                                                 ["stage_reason", "rewrites"]))
    extra = _stage_reports(runner, rep, review)
    atomic_write_text(rep / "variants.csv", _csv(variants_report(stats.types["dialect"], variant_rewrites),
                                                 ["dialect", "rule", "tokens_rewritten", "types_before", "types_after"]))
    source_rows = source_counts(recipe, by_source)
    atomic_write_text(rep / "sources.csv", _csv(source_rows, SOURCE_COLUMNS))
    translit_rows = transliteration_report(recipe, round_trip)
    if translit_rows:
        atomic_write_text(rep / "transliteration.csv", _csv(translit_rows, ["table", "line", "from", "to", "reversible", "reason"]))
    if nfkc_folds:
        atomic_write_text(rep / "compatibility-folds.csv", _csv(
            [{"code_point": c, "character": chr(int(c[2:], 16)), "folded_to": unicodedata.normalize("NFKC", chr(int(c[2:], 16))),
              "name": unicodedata.name(chr(int(c[2:], 16)), ""), "count": n} for c, n in sorted(nfkc_folds.items())],
            ["code_point", "character", "folded_to", "name", "count"]))
    atomic_write_text(rep / "splits.csv", _csv(split_sizes(split_counts), ["dialect", "split", "documents", "segments", "share"]))

    summary = {
        "stages": [{"stage": s.name, **s.counts.as_dict()} for s in reports] + [{"stage": "export", **counts.as_dict()}],
        "conservation": cons,
    }
    facts = {"recipe": recipe, "summary": summary, "balance": bal, "tokenizer": tok_info, "extra": extra,
             "public_docs": public.count, "restricted_docs": restricted.count if restricted else 0, "params": params,
             "splits": {k: v.count for k, v in splits.items() if v.count}, "sources": recipe.sources}
    ds_text, unanswered = datasheet.render(recipe, facts)
    atomic_write_text(out / "datasheet.md", ds_text)

    manifest = {
        "corpus": recipe.corpus.name, "language": recipe.corpus.language,
        "recipe": {"file": recipe.path.name, "sha256": recipe.sha256},
        "packages": {p: _version(p) for p in PACKAGES},
        "python": ".".join(map(str, sys.version_info[:3])),
        "unicode": {"python_unicodedata": __import__("unicodedata").unidata_version,
                    "regex": getattr(__import__("regex"), "__version__", "")},
        "counts": summary["stages"], "conservation": cons,
        "tokenizer": tok_info.get("summary", {}), "dedup": extra.get("dedup_params", {}),
        "langid": extra.get("langid_summary", {}),
        "documents": {"public": public.count, "restricted": restricted.count if restricted else 0},
        "sources": source_rows,
        "datasheet_unanswered": unanswered,
    }
    files = sorted(p for p in out.rglob("*") if p.is_file() and _in_contract(p.relative_to(out)))
    manifest["files"] = {str(p.relative_to(out)): {"sha256": file_sha256(p), "bytes": p.stat().st_size} for p in files}
    atomic_write_text(out / "manifest.json", json.dumps(manifest, indent=2, ensure_ascii=False, sort_keys=True) + "\n")
    if not (cons["documents"]["holds"] and cons["segments"]["holds"]):
        from ..errors import DataError
        raise DataError(f"{out}: the conservation check failed ({json.dumps(cons)}); the ledger does not account "
                        "for every unit. This is a bug; the manifest records the figures.")
    return {"counts": counts, "conservation": cons, "manifest": manifest}


def _in_contract(rel: Path) -> bool:
    return rel.parts[0] in ("corpus", "splits", "tokenizer", "reports", "restricted") or \
        str(rel) in ("ledger.jsonl.gz", "datasheet.md")


def _version(name: str) -> str:
    try:
        return metadata.version(name)
    except metadata.PackageNotFoundError:
        return "not installed"


TOKENIZER_LINES = 1_000_000   # lines of the train split the tokenizer sees at most (sampled)
DIALECT_LINES = 50_000        # lines per dialect for the fertility report at most (sampled)


def _tokenizer(out: Path, params: Params, recipe, train_lines: list[str], eval_lines: dict[str, list[str]],
               evaluated_on: str) -> dict:
    if not train_lines:
        atomic_write_text(out / "tokenizer" / "README.txt", "No public training text; no tokenizer was trained.\n")
        return {"summary": {"trained": False}}
    model, used = tok.train_tokenizer(train_lines, params.vocab_size, params.model_type, recipe.corpus.letters)
    (out / "tokenizer").mkdir(parents=True, exist_ok=True)
    from ..storage import atomic_write_bytes
    atomic_write_bytes(out / "tokenizer" / "tokenizer.model", model)
    rows = tok.dialect_report(model, eval_lines)
    atomic_write_text(out / "tokenizer" / "dialects.csv", _csv(rows))
    summary = {"trained": True, "model_type": params.model_type, "vocab_requested": params.vocab_size,
               "vocab_used": used, "character_coverage": 1.0, "normalization": "identity",
               "train_lines": len(train_lines), "evaluated_on": evaluated_on}
    atomic_write_text(out / "tokenizer" / "summary.json", json.dumps(summary, indent=2, sort_keys=True) + "\n")
    return {"summary": summary, "dialects": rows}


def _stage_reports(runner, rep: Path, review) -> dict:
    cache, recipe = runner.cache, runner.recipe
    extra: dict = {}
    if cache.has_blob("dedup", "report.json"):
        d = cache.get_json("dedup", "report.json")
        atomic_write_text(rep / "duplicate-clusters.csv",
                          _csv(d["clusters"], ["cluster", "doc_id", "source", "kept", "kept_id", "max_similarity"]))
        d = {k: v for k, v in d.items() if k != "clusters"}
        atomic_write_text(rep / "dedup.json", json.dumps(d, indent=2, sort_keys=True) + "\n")
        extra["dedup_params"] = d
    if cache.has_blob("split", "report.json"):
        extra["split"] = cache.get_json("split", "report.json")
    ctx_report = getattr(runner, "langid_report", None)
    if ctx_report and cache.has_blob("langid", ctx_report):
        r = cache.get_json("langid", ctx_report)
        atomic_write_text(rep / "langid.json", json.dumps(r, indent=2, sort_keys=True) + "\n")
        if "confusion" in r:
            labels = r["labels"]
            atomic_write_text(rep / "langid-confusion.csv",
                              _csv([{"gold": g, **{p: r["confusion"][g][p] for p in labels}} for g in labels], ["gold"] + labels))
            atomic_write_text(rep / "langid-classes.csv",
                              _csv([{"label": k, **v} for k, v in sorted(r["per_class"].items())],
                                   ["label", "precision", "recall", "f1", "support"]))
        extra["langid_summary"] = {"accuracy": r.get("accuracy"), "macro_f1": r.get("macro_f1"),
                                   "threshold": r.get("threshold"), "examples": r.get("examples")}
        from .langid import review_rows
        from ..variants_table import neutralise_cell
        rows = review_rows(review.best(), r["threshold"]["value"], recipe.stages["langid"].review_size)
        atomic_write_text(rep / "langid-review.csv",
                          _csv([{k: neutralise_cell(str(v)) for k, v in x.items()} for x in rows],
                               ["doc_id", "text", "p_target", "label"]))
    return extra
