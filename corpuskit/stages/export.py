"""Export: shards, splits, tokenizer, reports, ledger, datasheet and manifest.

Each final partition becomes a cached *piece* on the engine's workers (see
``export_pieces``); this module joins the pieces into the output files and merges their
summaries into the reports, so a re-run rewrites only what changed partitions
contribute.  Documents whose source may not be redistributed go to
``restricted/`` (or are excluded, by recipe) and never to the public shards,
splits or tokenizer.
"""
from __future__ import annotations

import hashlib
import json
import sys
import unicodedata
from collections import Counter, defaultdict
from dataclasses import dataclass, field
from importlib import metadata
from pathlib import Path
from typing import Any, Callable

import numpy as np

from ..ledger import Counts, conservation
from ..config import Checked, param
from ..sheets import csv_text
from ..storage import atomic_write_text, file_sha256, stable_hash
from .. import tokenizer as tok
from .. import transliterate as translit
from .export_pieces import (EMPTY_GZIP, VERSION as PIECES_VERSION, LedgerSettings, LedgerSummary, PieceSettings, ReviewPool,
                      SampleMerger, destination, document_piece_task, join_sections, ledger_piece_task, read_section,
                      shard_groups, unpack_texts)
from . import langid
from .contract import Services
from .split import SPLITS
from .. import audit
from ..audit import PUBLIC_FILES, PUBLIC_PARTS, public_files

__all__ = ["Params", "write_outputs", "destination", "variants_report", "transliteration_report"]

VERSION = "2"
PACKAGES = ("corpuskit", "fasttext-wheel", "numpy", "sentencepiece", "regex", "datasketch", "pandas", "pyarrow",
            "typer", "rich", "ftfy", "matplotlib", "fonttools", "confusable-homoglyphs", "langcodes", "license-expression")


@dataclass(frozen=True)
class Params(Checked):
    restricted: str = param("separate", choices=("separate", "exclude"),
                            help="documents that may not be redistributed: a separate restricted/ folder, or left out")
    vocab_size: int = param(8000, low=50, high=1_000_000, help="requested tokenizer vocabulary size")
    model_type: str = param("unigram", choices=("unigram", "bpe"), help="tokenizer model")
    alpha: float = param(0.3, low=0.0, high=1.0, help="temperature-sampling exponent across dialects")
    dialect_floor: float = param(0.1, low=0, high=1, help="warn when a dialect's share of words is below this")
    medium_floor: float = param(0.05, low=0, high=1, help="warn when a medium's share of words is below this")


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
                     "segments in": c["segments kept"] + c["segments removed"],
                     "segments kept": c["segments kept"]})
    return rows


def one_split_sources(by_source: dict[str, Counter]) -> list[str]:
    """Public sources whose documents all went to one split while others reach several: typically
    a source that is one long document (a recording, a chat export) with no unit to divide it."""
    splits = {sid: {k[6:] for k, v in c.items() if k.startswith("split:") and v} for sid, c in by_source.items()}
    used = set().union(*splits.values()) if splits else set()
    if len(used) < 2:
        return []
    return [f"source '{sid}': all {by_source[sid][f'split:{next(iter(s))}']} of its documents are in {next(iter(s))}; "
            "the other splits have none of it (give its reader a unit, e.g. options.minutes for subtitles)"
            for sid, s in sorted(splits.items()) if len(s) == 1]


def _orthography(rep: Path, inventory, recipe) -> list[str]:
    """With [corpus] letters set: letters outside the orthography per source (reports/orthography.csv),
    and a warning for each source where they pass 0.5% of its letters."""
    if not recipe.corpus.letters:
        return []
    allowed = set(recipe.corpus.letters.lower())
    rows, totals, outside = [], Counter(), Counter()
    for (source, dialect, script, ch), n in sorted(inventory.chars.items()):
        if not ch.isalpha():
            continue
        totals[source] += n
        if ch.lower() not in allowed and unicodedata.normalize("NFD", ch.lower())[0] not in allowed:
            outside[source] += n
            rows.append({"source": source, "dialect": dialect, "script": script, "letter": ch,
                         "code_point": f"U+{ord(ch):04X}", "count": n})
    atomic_write_text(rep / "orthography.csv", csv_text(rows, ["source", "dialect", "script", "letter", "code_point", "count"]))
    return [f"source '{s}': {n} of {totals[s]} letters are outside [corpus] letters (reports/orthography.csv)"
            for s, n in sorted(outside.items()) if n > 0.005 * totals[s]]


def split_sizes(cells: dict[tuple[str, str], list[int]]) -> list[dict]:
    """Documents and segments per dialect and split, with each split's share of the dialect."""
    totals = Counter()
    for (dialect, _), (n, _) in cells.items():
        totals[dialect] += n
    return [{"dialect": dialect, "split": name, "documents": n, "segments": segs, "share": f"{n / totals[dialect]:.3f}"}
            for (dialect, name), (n, segs) in sorted(cells.items())]


def _langid_report(services: Services) -> dict | None:
    """This run's language-ID report (its classifier's calibration and cross-validation)."""
    key = services.context_keys.get("langid")
    name = langid.report_blob(key) if key is not None else None
    return services.cache.get_json("langid", name) if name and services.cache.has_blob("langid", name) else None


def _langid_threshold(services: Services) -> float | None:
    report = _langid_report(services)
    return report["threshold"]["value"] if report else None


@dataclass
class ExportResult:
    counts: Counts
    conservation: dict
    manifest: dict
    pieces_computed: int
    pieces_reused: int


def write_outputs(services: Services, in_stage: str, parts, reports) -> ExportResult:
    """Write the output folder from the last stage's partitions and every stage's ledger; ``reports``
    are the earlier stages' StageReports (counts and typed figures)."""
    from ..reports import balance, datasheet

    recipe, cache, out = services.recipe, services.cache, services.out
    params: Params = recipe.stages["export"]
    for stale in (out / "manifest.json", out / "ledger.jsonl.gz"):  # no manifest until the audit passes
        stale.unlink(missing_ok=True)
    for sub in ("corpus", "splits", "tokenizer", "reports", "restricted", "private"):
        p = out / sub
        if p.exists():
            for f in p.iterdir():
                if f.is_file() and f.name != "pseudonym-secret.txt":
                    f.unlink()
    secret = _people_secret(services)
    doc_pieces, ledger_pieces, computed, reused = _make_pieces(services, in_stage, parts, secret)
    m = merge_pieces(services, doc_pieces, ledger_pieces)
    stats, script_inventory, by_source, review = m.stats, m.script_inventory, m.by_source, m.review
    split_counts, samples, led, counts, summaries = m.split_counts, m.samples, m.ledger, m.counts, m.summaries
    kept_docs, kept_segs = counts.docs_out, counts.segs_out
    public_count, restricted_count = _join_documents(out, cache, doc_pieces, summaries, params, recipe.corpus.shard_docs)
    split_docs = {name: sum(s["files"].get(name, 0) for s in summaries) for name in SPLITS}
    _join_ledger(out / "private" / "ledger.jsonl.gz", cache, ledger_pieces, doc_pieces, summaries)

    # Tokenizer on a sample of the public train split (on a worker), report on the dev split.
    lines = _sample_lines(cache, doc_pieces, summaries, samples)
    dev = {g.split(":", 1)[1]: v for g, v in lines.items() if g.startswith("dev:")}
    train_by_dialect = {g.split(":", 1)[1]: v for g, v in lines.items() if g.startswith("train:")}
    finish_tokenizer = _tokenizer(services, params, lines.get("train", []), dev or train_by_dialect,
                                  "dev" if dev else "train")

    # The leak audit of the corpus and split files (final from here on), meanwhile.
    people = _write_private(out, m.people, secret)
    checker = _leak_checker(cache, doc_pieces, summaries, people, recipe)
    record_files = [p for p in public_files(out) if p.relative_to(out).parts[0] in ("corpus", "splits")]
    records_audit = _records_audit(services, checker, doc_pieces, summaries, record_files)
    plots = balance.plots(stats)          # meanwhile, in this process
    tok_info = finish_tokenizer()
    used = tok_info["summary"].get("vocab_used")
    if used and used != params.vocab_size:
        services.warn(f"tokenizer: vocabulary {used} instead of the requested {params.vocab_size} "
                               + ("(the text has more distinct characters than that; each needs a piece)"
                                  if used > params.vocab_size else "(the largest this much text supports)")
                               + "; set [stages.export] vocab_size to silence this")

    ledger_totals, removal_examples, rewrite_by_reason = led.totals, led.removal_examples, led.rewrite_by_reason
    figures = {r.name: r.figures for r in reports if r.figures is not None}
    round_trip = figures["script"].round_trip if "script" in figures else Counter()
    variant_rewrites = figures["variants"].rewrites if "variants" in figures else Counter()
    nfkc_folds = figures["normalise"].nfkc_folds if "normalise" in figures else Counter()
    ingest = reports[0].counts
    cons = conservation(ledger_totals, ingest.docs_in, ingest.segs_in, kept_docs, kept_segs)

    # Reports.
    rep = out / "reports"
    services.warnings.extend(one_split_sources(by_source))
    services.warnings.extend(_orthography(rep, script_inventory, recipe))
    bal = balance.write_report(rep, stats, params, recipe, services.warnings, plots)
    services.warnings.extend(f"balance: {w}" for w in bal["warnings"])
    atomic_write_text(rep / "script-inventory.csv", script_inventory.csv())
    removal_rows = []
    for s in reports + [type("R", (), {"name": "export", "counts": counts})()]:
        for reason, n in sorted(s.counts.removed.items()):
            removal_rows.append({"stage": s.name, "reason": reason, "removed": n,
                                 "examples": " | ".join(removal_examples.get(f"{s.name}:{reason.split(':', 1)[1]}", []))})
    atomic_write_text(rep / "removals.csv", csv_text(removal_rows, ["stage", "reason", "removed", "examples"]))
    atomic_write_text(rep / "rewrites.csv", csv_text([{"stage_reason": k, "rewrites": v} for k, v in sorted(rewrite_by_reason.items())],
                                                 ["stage_reason", "rewrites"]))
    extra = _stage_reports(services, rep, out / "private", review, led)
    atomic_write_text(rep / "variants.csv", csv_text(variants_report(stats.types["dialect"], variant_rewrites),
                                                 ["dialect", "rule", "tokens_rewritten", "types_before", "types_after"]))
    source_rows = source_counts(recipe, by_source)
    atomic_write_text(rep / "sources.csv", csv_text(source_rows, SOURCE_COLUMNS))
    translit_rows = transliteration_report(recipe, round_trip)
    if translit_rows:
        atomic_write_text(rep / "transliteration.csv", csv_text(translit_rows, ["table", "line", "from", "to", "reversible", "reason"]))
    if nfkc_folds:
        atomic_write_text(rep / "compatibility-folds.csv", csv_text(
            [{"code_point": c, "character": chr(int(c[2:], 16)), "folded_to": unicodedata.normalize("NFKC", chr(int(c[2:], 16))),
              "name": unicodedata.name(chr(int(c[2:], 16)), ""), "count": n} for c, n in sorted(nfkc_folds.items())],
            ["code_point", "character", "folded_to", "name", "count"]))
    atomic_write_text(rep / "splits.csv", csv_text(split_sizes(split_counts), ["dialect", "split", "documents", "segments", "share"]))

    summary = {
        "stages": [{"stage": s.name, **s.counts.as_dict()} for s in reports] + [{"stage": "export", **counts.as_dict()}],
        "conservation": cons,
    }
    facts = datasheet.RunFacts(summary["stages"], cons, bal, tok_info, public_count, restricted_count,
                               {k: v for k, v in split_docs.items() if v}, params.restricted,
                               extra.get("langid_summary"), extra.get("dedup_params"))
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
        "documents": {"public": public_count, "restricted": restricted_count},
        "sources": source_rows,
        "datasheet_unanswered": unanswered,
    }
    hits = _leak_audit(out, checker, records_audit, record_files)
    if hits:
        from ..errors import DataError
        shown = "; ".join(h.describe() for h in hits[:5])
        raise DataError(f"{out}: the leak audit found {len(hits)} problem(s) in public files: {shown}"
                        f"{' ...' if len(hits) > 5 else ''}; no manifest was written. The full list is in "
                        "private/leak-audit.json; fix the source (scrub it, mark it restricted) and run again.")
    manifest["leak_audit"] = {"passed": True, "public_files_scanned": len(public_files(out)),
                              "names_checked": len(people), "restricted_segments_checked": m.restricted_count}
    files = sorted(p for p in out.rglob("*") if p.is_file() and _in_contract(p.relative_to(out)))
    manifest["files"] = {str(p.relative_to(out)): {"sha256": file_sha256(p), "bytes": p.stat().st_size,
                                                   "public": p.relative_to(out).parts[0] != "restricted"} for p in files}
    atomic_write_text(out / "manifest.json", json.dumps(manifest, indent=2, ensure_ascii=False, sort_keys=True) + "\n")
    if not (cons["documents"]["holds"] and cons["segments"]["holds"]):
        from ..errors import DataError
        raise DataError(f"{out}: the conservation check failed ({json.dumps(cons)}); the ledger does not account "
                        "for every unit. This is a bug; the manifest records the figures.")
    return ExportResult(counts, cons, manifest, computed, reused)


def _in_contract(rel: Path) -> bool:
    """Files the manifest lists: the public ones and restricted/ (never private/)."""
    return rel.parts[0] in PUBLIC_PARTS + ("restricted",) or str(rel) in PUBLIC_FILES


PRIVATE_README = """\
This folder is for the team that prepares the corpus, never for publication:
- ledger.jsonl.gz: every removed or rewritten unit, with the removed text (personal data scrubbed);
- langid-review.csv: uncertain segments for review, from every source, restricted ones included;
- pseudonyms.csv: the real names of speakers, senders and contributors and their pseudonyms;
- pseudonym-secret.txt: a copy of the secret the pseudonyms are made with (the recipe's
  [corpus] pseudonym_secret); whoever has it can test whether a name belongs to a pseudonym;
- leak-audit.json: what the leak audit of the public files found.
Keep it with the team and the community that holds the material.
"""


def _write_private(out: Path, people: dict[str, str], secret: bytes | None) -> dict[str, str]:
    """The private folder: its README, the pseudonym mapping and a copy of the secret."""
    folder = out / "private"
    atomic_write_text(folder / "README.txt", PRIVATE_README)
    atomic_write_text(folder / "pseudonyms.csv", csv_text([{"name": n, "pseudonym": p} for n, p in sorted(people.items())],
                                                      ["name", "pseudonym"]))
    if secret:
        atomic_write_text(folder / "pseudonym-secret.txt", secret.hex() + "\n")
        (folder / "pseudonym-secret.txt").chmod(0o600)
    return people


def _leak_checker(cache, names: list[str], summaries: list[dict], people: dict[str, str], recipe):
    """The leak audit's checker (see ``corpuskit.audit``) for this run's pieces and names."""
    fparams = recipe.stages["filter"]
    restricted = [t for name in names for t in cache.get_json("export", f"{name}.json").get("restricted_texts", [])]
    public = [np.frombuffer(read_section(cache.blob_path("export", f"{name}.bin"), s["sections"]["public.digests"]),
                            dtype="<u8") for name, s in zip(names, summaries) if "public.digests" in s["sections"]]
    public_digests = np.unique(np.concatenate(public)) if public else np.zeros(0, np.uint64)
    return audit.LeakAudit(audit.restricted_keys(restricted, public_digests),
                           list(people), {s.id for s in recipe.sources if not s.redistributable}, public_digests,
                           tuple(fparams.id_patterns), tuple(recipe.corpus.regions), fparams.pii != "keep")


def _records_audit(services: Services, checker, names: list[str], summaries: list[dict], record_files: list[Path]):
    """The leak audit of the corpus and split files, which hold the pieces' public sections byte
    for byte.  Each piece made the checks that depend on it alone when it was built (personal
    data, records of restricted sources) and kept the strings of its records' other fields; if
    no piece found anything and none of those strings holds restricted text or a real name of
    this run, the files are clean (None).  Otherwise they are scanned whole, on a worker, to name
    the file and line of every hit."""
    if all(s["audit_clean"] for s in summaries) and not any(
            checker.field_verdicts(_field_strings(services.cache, name, s)) for name, s in zip(names, summaries)):
        return None
    return services.start(audit.scan_files, checker, services.out, record_files)


def _field_strings(cache, name: str, summary: dict) -> list[str]:
    path, sections = cache.blob_path("export", f"{name}.bin"), summary["sections"]
    return unpack_texts(read_section(path, sections["audit.lengths"]), read_section(path, sections["audit.strings"]))


def _leak_audit(out: Path, checker, records_audit, record_files: list[Path]) -> list:
    """Every public file scanned: the corpus and split files by ``records_audit`` (None: found
    clean piece by piece), the rest here; the hits in file order, also in private/leak-audit.json."""
    hits = list(records_audit.result()) if records_audit is not None else []
    scanned = set(record_files)
    hits += audit.scan_files(checker, out, [p for p in public_files(out) if p not in scanned])
    audit.write_report(out / "private" / "leak-audit.json", hits)
    return hits


def _version(name: str) -> str:
    try:
        return metadata.version(name)
    except metadata.PackageNotFoundError:
        return "not installed"


# Lines the tokenizer is trained on at most, and lines per dialect for its report: bottom-k
# samples of the train (and dev) split.  300,000 sentences are plenty for vocabularies of a
# few thousand pieces (common practice; sentencepiece's own sampling option serves the same end).
TOKENIZER_LINES = 300_000
DIALECT_LINES = 50_000
SAMPLE_LINES = {"train": TOKENIZER_LINES, "train:": DIALECT_LINES, "dev:": DIALECT_LINES}


def _make_pieces(services: Services, in_stage: str, parts, secret: bytes | None
                 ) -> tuple[list[str], list[tuple[str, list[str]]], int, int]:
    """Build the pieces not yet in the cache, on the engine's workers.  Returns the document
    piece names in partition order; per stage in pipeline order, its ledger piece names; and
    how many pieces were computed and reused."""
    recipe, cache = services.recipe, services.cache
    fparams = recipe.stages["filter"]
    ledger_settings = LedgerSettings(fparams.pii != "keep", tuple(fparams.id_patterns),
                                     tuple(sorted(s.id for s in recipe.sources if not s.redistributable)),
                                     tuple(recipe.corpus.regions))
    settings = PieceSettings(recipe.stages["export"].restricted, _langid_threshold(services),
                             recipe.stages["langid"].review_size, SAMPLE_LINES, ledger_settings,
                             secret.hex() if secret else "",
                             tuple((s.id, s.contributor or None, s.attribution) for s in recipe.sources),
                             recipe.corpus.language)
    from ..codeversion import code_version
    pieces_version = f"{PIECES_VERSION}:{code_version('corpuskit.stages.export_pieces')}"
    doc_names = [f"doc-{stable_hash(pieces_version, VERSION, p.key, settings)}" for p in parts]
    ledger_pieces = [(stage, [f"ledger-{stable_hash(pieces_version, stage, key, ledger_settings)}"
                              for key in keys])
                     for stage, keys in services.last_keys.items()]
    root = str(cache.root)
    doc_args = [(root, in_stage, p.key, settings, name) for p, name in zip(parts, doc_names)
                if not cache.has_blob("export", f"{name}.json")]
    ledger_args = [(root, stage, key, ledger_settings, name) for stage, names in ledger_pieces
                   for key, name in zip(services.last_keys[stage], names) if not cache.has_blob("export", f"{name}.json")]
    with services.progress("export", len(doc_args) + len(ledger_args)) as tick:
        for _ in services.map(document_piece_task, doc_args):
            tick(0)
        for _ in services.map(ledger_piece_task, ledger_args):
            tick(0)
    services.rest()  # the workers stay for the leak audit and the tokenizer, unless they grew large
    computed = len(doc_args) + len(ledger_args)
    return doc_names, ledger_pieces, computed, len(doc_names) + sum(len(n) for _, n in ledger_pieces) - computed


def _people_secret(services: Services) -> bytes | None:
    """The pseudonym secret, created (with a warning) on a project's first run."""
    from ..people import load_or_create_secret
    path = services.recipe.secret_path
    secret, created = load_or_create_secret(path)
    if created:
        services.warn(f"{path}: created a new pseudonym secret; keep it private and keep it (with it, the same "
                               "person gets the same pseudonym in every run; without it, all pseudonyms change)")
    return secret


@dataclass
class Merged:
    """The pieces' summaries combined, in partition order."""
    stats: Any
    script_inventory: Any
    by_source: dict
    review: ReviewPool
    split_counts: dict
    samples: SampleMerger
    ledger: LedgerSummary
    counts: Counts
    summaries: list[dict]   # per document piece, what joining its files needs
    people: dict = field(default_factory=dict)      # real name -> pseudonym
    restricted_count: int = 0                       # restricted segments the leak audit looks for


def merge_pieces(services: Services, doc_pieces: list[str], ledger_pieces: list[tuple[str, list[str]]]) -> Merged:
    from ..reports import balance
    recipe, cache = services.recipe, services.cache
    m = Merged(balance.Accumulator(recipe.corpus.language), balance.ScriptInventory(), {s.id: Counter() for s in recipe.sources},
               ReviewPool(_langid_threshold(services), recipe.stages["langid"].review_size),
               defaultdict(lambda: [0, 0]), SampleMerger(SAMPLE_LINES), LedgerSummary(), Counts(), [])
    for stage, names in ledger_pieces:
        for name in names:
            m.ledger.merge(stage, cache.get_json("export", f"{name}.json"))
    for name in doc_pieces:
        summary = {**cache.get_json("export", f"{name}.json"), "_bin": f"{name}.bin"}
        m.summaries.append({k: summary[k] for k in ("files", "sections", "sample_groups", "_bin", "audit_clean")})
        m.counts = m.counts.add(Counts.from_dict(summary["counts"]))
        for source, tally in summary["by_source"].items():
            m.by_source.setdefault(source, Counter()).update(tally)
        for dialect, split, n, segs in summary["split_counts"]:
            m.split_counts[(dialect, split)][0] += n
            m.split_counts[(dialect, split)][1] += segs
        m.stats.merge(summary["stats"])
        m.script_inventory.merge(summary["scripts"])
        m.review.extend(summary["review"])
        m.samples.add_priorities(summary["sample_groups"], _priorities(cache, summary))
        m.ledger.merge("export", summary["ledger"])
        m.people.update(summary.get("people", {}))
        m.restricted_count += len(summary.get("restricted_texts", []))
    for source, tally in m.ledger.by_source.items():
        m.by_source.setdefault(source, Counter()).update(tally)
    return m


def _priorities(cache, summary: dict) -> np.ndarray:
    data = read_section(cache.blob_path("export", summary["_bin"]), summary["sections"]["sample.priorities"])
    return np.frombuffer(data, dtype="<u8")


def _join_documents(out: Path, cache, names: list[str], summaries: list[dict], params: Params,
                    shard_docs: int) -> tuple[int, int]:
    """Public shards and text, restricted documents, and the three splits, from the pieces."""
    def sections(target: str, kind: str, which=None):
        chosen = range(len(names)) if which is None else which
        return [(cache.blob_path("export", f"{names[i]}.bin"), summaries[i]["sections"][f"{target}.{kind}"])
                for i in chosen if f"{target}.{kind}" in summaries[i]["sections"]]

    sizes = [s["files"].get("public", 0) for s in summaries]
    for index, group in enumerate(shard_groups(sizes, shard_docs)):
        join_sections(out / "corpus" / f"corpus-{index:05d}.jsonl.gz", sections("public", "jsonl.gz", group), empty=EMPTY_GZIP)
    join_sections(out / "corpus" / "corpus.txt", sections("public", "txt"), separator=b"\n")
    for name in SPLITS:
        join_sections(out / "splits" / f"{name}.jsonl.gz", sections(name, "jsonl.gz"), empty=EMPTY_GZIP)
        join_sections(out / "splits" / f"{name}.txt", sections(name, "txt"), separator=b"\n")
    restricted = sum(s["files"].get("restricted", 0) for s in summaries)
    folder = out / "restricted"
    if restricted:
        sizes = [s["files"].get("restricted", 0) for s in summaries]
        for index, group in enumerate(shard_groups(sizes, shard_docs)):
            join_sections(folder / f"corpus-{index:05d}.jsonl.gz", sections("restricted", "jsonl.gz", group))
        join_sections(folder / "corpus.txt", sections("restricted", "txt"), separator=b"\n")
        atomic_write_text(folder / "README.txt",
                          "Documents whose consent scope or licence does not allow redistribution.\n"
                          "Keep this folder with the community that holds the material; do not publish it.\n")
    elif folder.exists():  # nothing restricted: no folder, as with restricted = "exclude"
        for f in folder.glob("*"):
            f.unlink()
        folder.rmdir()
    return sum(s["files"].get("public", 0) for s in summaries), restricted


def _join_ledger(path: Path, cache, ledger_pieces, doc_names: list[str], summaries: list[dict]) -> None:
    """Every stage's rows in stage and partition order, then the export's own rows."""
    paths = [cache.blob_path("export", f"{name}.gz") for _, names in ledger_pieces for name in names]
    members = [(path, [0, path.stat().st_size]) for path in paths if path.exists()]
    members += [(cache.blob_path("export", f"{name}.bin"), s["sections"]["ledger.gz"])
                for name, s in zip(doc_names, summaries) if "ledger.gz" in s["sections"]]
    join_sections(path, members, empty=EMPTY_GZIP)


def _sample_lines(cache, names: list[str], summaries: list[dict], samples: SampleMerger) -> dict[str, list[str]]:
    """The sampled lines per group, in priority order (independent of partition order)."""
    cutoffs = samples.cutoffs()
    chosen: dict[str, list[tuple[int, str]]] = defaultdict(list)
    for name, summary in zip(names, summaries):
        if not summary["sample_groups"]:
            continue
        path, sections = cache.blob_path("export", f"{name}.bin"), summary["sections"]
        texts = unpack_texts(read_section(path, sections["sample.lengths"]), read_section(path, sections["sample.text"]))
        SampleMerger.read(texts, summary["sample_groups"], _priorities(cache, summary),
                          cutoffs, chosen)
    return {g: [text for _, text in sorted(items)] for g, items in chosen.items()}


def tokenizer_task(train_lines: list[str], vocab_size: int, model_type: str, letters: str,
                   eval_lines: dict[str, list[str]], language: str) -> tuple[bytes, int, list[dict]]:
    """Train the tokenizer and report on the evaluation lines per dialect (runs on a worker)."""
    model, used = tok.train_tokenizer(train_lines, vocab_size, model_type, letters)
    return model, used, tok.dialect_report(model, eval_lines, language)


def _tokenizer(services: Services, params: Params, train_lines: list[str], eval_lines: dict[str, list[str]],
               evaluated_on: str) -> Callable[[], dict]:
    """Begin the tokenizer: reused from the cache, or trained on a worker.  The function returned
    waits for it, writes tokenizer/ and returns its summary and report rows."""
    out, cache, recipe = services.out, services.cache, services.recipe
    if not train_lines:
        def nothing() -> dict:
            atomic_write_text(out / "tokenizer" / "README.txt", "No public training text; no tokenizer was trained.\n")
            return {"summary": {"trained": False}}
        return nothing
    # The model and its report depend only on the sampled lines and the settings: reuse them.
    key = stable_hash("tokenizer", params.vocab_size, params.model_type, recipe.corpus.letters,
                      hashlib.sha256("\n".join(train_lines).encode("utf-8")).hexdigest(),
                      {d: hashlib.sha256("\n".join(v).encode("utf-8")).hexdigest() for d, v in sorted(eval_lines.items())})
    cached = cache.has_blob("export", f"tokenizer-{key}.json")
    job = None if cached else services.start(tokenizer_task, train_lines, params.vocab_size, params.model_type,
                                             recipe.corpus.letters, eval_lines, recipe.corpus.language)

    def finish() -> dict:
        if cached:
            model = cache.blob_path("export", f"tokenizer-{key}.model").read_bytes()
            used, rows = cache.get_json("export", f"tokenizer-{key}.json")
        else:
            model, used, rows = job.result()
            cache.put_blob("export", f"tokenizer-{key}.model", model)
            # (not put_json: that sorts keys, and the rows' key order is the CSV's column order)
            cache.put_blob("export", f"tokenizer-{key}.json", json.dumps([used, rows], ensure_ascii=False).encode("utf-8"))
        (out / "tokenizer").mkdir(parents=True, exist_ok=True)
        from ..storage import atomic_write_bytes
        atomic_write_bytes(out / "tokenizer" / "tokenizer.model", model)
        atomic_write_text(out / "tokenizer" / "dialects.csv", csv_text(rows))
        summary = {"trained": True, "model_type": params.model_type, "vocab_requested": params.vocab_size,
                   "vocab_used": used, "character_coverage": 1.0, "normalization": "identity",
                   "train_lines": len(train_lines), "evaluated_on": evaluated_on}
        atomic_write_text(out / "tokenizer" / "summary.json", json.dumps(summary, indent=2, sort_keys=True) + "\n")
        return {"summary": summary, "dialects": rows}
    return finish


def _stage_reports(services: Services, rep: Path, private: Path, review, ledger_summary) -> dict:
    cache, recipe = services.cache, services.recipe
    extra: dict = {}
    if cache.has_blob("dedup", "report.json"):
        d = cache.get_json("dedup", "report.json")
        atomic_write_text(rep / "duplicate-clusters.csv",
                          csv_text(d["clusters"], ["cluster", "doc_id", "source", "kept", "kept_id", "reason",
                                                   "jaccard_with_kept"]))
        atomic_write_text(rep / "near-duplicate-pairs.csv",
                          csv_text(d.get("pairs", []), ["doc_a", "doc_b", "jaccard", "a_kept", "b_kept"]))
        d = {k: v for k, v in d.items() if k not in ("clusters", "pairs")}
        atomic_write_text(rep / "dedup.json", json.dumps(d, indent=2, sort_keys=True) + "\n")
        extra["dedup_params"] = d
    if cache.has_blob("split", "report.json"):
        extra["split"] = cache.get_json("split", "report.json")
    r = _langid_report(services)
    if r is not None:
        atomic_write_text(rep / "langid.json", json.dumps(r, indent=2, sort_keys=True) + "\n")
        if "confusion" in r:
            labels = r["labels"]
            atomic_write_text(rep / "langid-confusion.csv",
                              csv_text([{"gold": g, **{p: r["confusion"][g][p] for p in labels}} for g in labels], ["gold"] + labels))
            atomic_write_text(rep / "langid-classes.csv",
                              csv_text([{"label": k, **v} for k, v in sorted(r["per_class"].items())],
                                   ["label", "precision", "recall", "f1", "support"]))
        extra["langid_summary"] = {"accuracy": r.get("accuracy"), "macro_f1": r.get("macro_f1"),
                                   "threshold": r.get("threshold"), "examples": r.get("examples"),
                                   "folds": r.get("folds"), "hyperparameters": r.get("hyperparameters"),
                                   "target_precision": r.get("target_precision"),
                                   "target_segments_lost": ledger_summary.target_segments_lost}
        rows = langid.review_rows(review.best(), r["threshold"]["value"], recipe.stages["langid"].review_size)
        atomic_write_text(private / "langid-review.csv",
                          csv_text([{k: str(v) for k, v in x.items()} for x in rows],
                               ["doc_id", "text", "p_target", "label"]))
    return extra
