"""The stage graph: planning, caching, resumption and the closing counts.

Every partition artefact is keyed by the hash of its input partition key, the
stage's parameters and version, and the content of any tables or models it
reads.  A run computes only the keys that are not in the cache, so a second
run executes nothing, adding a source computes only its partitions (plus the
stages that must see everything), and a killed run resumes where it stopped.
"""
from __future__ import annotations

import contextlib
import fcntl
import json
import os
import platform
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable

from .errors import DataError, LockedError, RecipeError
from .ledger import Counts, count_partition
from .recipe import Recipe, SourceSpec
from .stages.contract import Applied, Figures, Kind, Partition, Services, module_version, partition_key, survey_key
from .stages.registry import STAGE_ORDER, STAGES
from .storage import Cache, file_sha256, stable_hash

__all__ = ["Runner", "RunResult", "StageReport", "Partition", "run_map_task", "run_chain_task", "run_survey_task",
           "OutputLock"]


@dataclass
class StageReport:
    name: str
    counts: Counts = field(default_factory=Counts)
    computed: int = 0          # partitions computed in this run
    reused: int = 0            # partitions taken from the cache
    seconds: float = 0.0
    figures: Figures | None = None   # the stage's typed figures, summed over its partitions


@dataclass
class RunResult:
    out: Path
    stages: list[StageReport]
    conservation: dict[str, Any] | None = None
    manifest: dict[str, Any] | None = None
    warnings: list[str] = field(default_factory=list)

    def stage(self, name: str) -> StageReport:
        return next(s for s in self.stages if s.name == name)

    @property
    def executed(self) -> dict[str, int]:
        return {s.name: s.computed for s in self.stages}


@contextlib.contextmanager
def _quiet_progress(name: str, total: int):
    yield lambda n: None


def remove_stale_temporaries(out: Path) -> int:
    """Delete half-written files a killed run left behind (``.<name>.<random>.tmp``, see storage);
    only called while holding the folder's lock, so no live writer owns them."""
    stale = [p for p in out.rglob(".*.tmp") if p.is_file()]
    for p in stale:
        p.unlink(missing_ok=True)
    return len(stale)


class OutputLock:
    """An exclusive lock on the output folder; the kernel drops it if the holder dies."""

    def __init__(self, out: Path):
        self.path = Path(out) / ".lock"
        self._fd: int | None = None

    def __enter__(self) -> "OutputLock":
        self.path.parent.mkdir(parents=True, exist_ok=True)
        self._fd = os.open(self.path, os.O_RDWR | os.O_CREAT, 0o644)
        try:
            fcntl.flock(self._fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            os.close(self._fd)
            self._fd = None
            raise LockedError(f"{self.path.parent}: another corpuskit run is using this output folder; "
                              "wait for it to finish or choose another --out.") from None
        os.ftruncate(self._fd, 0)
        os.write(self._fd, str(os.getpid()).encode())
        remove_stale_temporaries(self.path.parent)
        return self

    def __exit__(self, *exc: Any) -> None:
        if self._fd is not None:
            fcntl.flock(self._fd, fcntl.LOCK_UN)
            os.close(self._fd)


# -- tasks (top-level so that worker processes can run them) ---------------------------

def run_ingest_task(cache_root: str, source: SourceSpec, files: list[tuple[str, str]], unit_key: str,
                    partition_docs: int) -> dict:
    from .stages import ingest
    cache = Cache(Path(cache_root).parent)
    warnings: list[str] = []
    keys = []
    total = Counts()
    trouble: dict[str, list] = {}
    for i, (docs, rows) in enumerate(ingest.ingest_unit(source, files, partition_docs, warnings)):
        key = f"{unit_key}-{i:04d}"
        counts = ingest.counts(docs, rows)
        for r in rows:
            if r.reason not in QUIET_INGEST_REASONS:
                trouble.setdefault(r.reason, [0, r.detail.split(":", 1)[0] or r.doc_id])[0] += 1
        cache.write_partition("ingest", key, docs, rows, {"counts": counts.as_dict()})
        keys.append(key)
        total = total.add(counts)
    marker = {"parts": keys, "counts": total.as_dict(), "warnings": warnings, "trouble": trouble}
    cache.put_json("ingest", f"{unit_key}.unit.json", marker)
    return marker


# Ingest rows that are not trouble (the ledger keeps them; the terminal does not list them).
QUIET_INGEST_REASONS = {"whitespace-only", "encoding-detected"}


def run_map_task(cache_root: str, stage_name: str, params: Any, ctx: Any, in_stage: str, in_key: str,
                 out_key: str) -> dict:
    cache = Cache(Path(cache_root).parent)
    return apply_stage(cache, stage_name, params, ctx, cache.read_docs(in_stage, in_key), in_key, out_key)[1]


def run_chain_task(cache_root: str, steps: list[tuple[str, Any, Any, str]], in_stage: str, in_key: str) -> list[dict]:
    """Consecutive map stages on one partition in one task: ``steps`` are (stage, params, context,
    output key).  The input is read once; each stage's output is written to the cache as its own
    partition (``--until``, ``--only`` and later runs find it there) and handed to the next stage
    as the cache would give it back."""
    cache = Cache(Path(cache_root).parent)
    docs = cache.read_docs(in_stage, in_key)
    results = []
    for n, (stage_name, params, ctx, out_key) in enumerate(steps, 1):
        table, result = apply_stage(cache, stage_name, params, ctx, docs, in_key, out_key)
        if n < len(steps):
            docs, in_key = table.to_pylist(), out_key
        results.append(result)
    return results


def apply_stage(cache: Cache, stage_name: str, params: Any, ctx: Any, docs: list[dict], in_key: str,
                out_key: str):
    """Apply one map (or global) stage to one partition's documents, check that no unit was lost,
    and write the output partition; its table and its counts."""
    stage = STAGES[stage_name]
    n_in = len(docs)
    segs_in = sum(len(d["segments"]) for d in docs)
    started = time.perf_counter()
    result = stage.apply(docs, params, ctx)
    if not isinstance(result, Applied):
        raise TypeError(f"stage '{stage_name}': apply must return Applied(docs, rows[, figures]), not {type(result).__name__}")
    out, rows, figures = result
    counts = count_partition([], out, rows)
    counts.docs_in, counts.segs_in = n_in, segs_in
    check_partition(stage_name, in_key, n_in, segs_in, out, rows)
    marker = {"counts": counts.as_dict(), "docs": n_in, "seconds": time.perf_counter() - started}
    if figures is not None:
        marker["figures"] = figures.as_dict()
    table = cache.write_partition(stage_name, out_key, out, rows, marker)
    return table, {"counts": counts.as_dict()}


def run_survey_task(cache_root: str, stage_name: str, params: Any, in_stage: str, in_key: str) -> Any:
    """One partition's part of a per-source survey (e.g. the lines repeated at page edges)."""
    return STAGES[stage_name].survey.partition(Cache(Path(cache_root).parent).read_docs(in_stage, in_key), params)


def check_partition(stage_name: str, key: str, n_in: int, segs_in: int, docs_out: list, rows: list) -> None:
    """A stage may not lose a document or segment without a ledger row."""
    removed_docs = [r for r in rows if r.unit == "document" and r.action == "removed"]
    removed_segs = sum(1 for r in rows if r.unit == "segment" and r.action == "removed")
    segs_out = sum(len(d["segments"]) for d in docs_out)
    if n_in != len(docs_out) + len(removed_docs) or \
            segs_in != segs_out + removed_segs + sum(r.segments for r in removed_docs):
        raise DataError(f"stage '{stage_name}' lost units without a ledger row in partition {key} "
                        f"(documents {n_in} -> {len(docs_out)} + {len(removed_docs)} removed; "
                        f"segments {segs_in} -> {segs_out} + {removed_segs} removed); this is a bug, please report it.")


WRONG_SCRIPT_SHARE = 0.9    # a stage that removes this share of segments for their script stops the run


def _check_script_removals(recipe: Recipe, report: StageReport) -> None:
    """Nearly every segment removed for being in another script means the recipe's target script is
    not the script of the text: stop with the script found instead of finishing an empty corpus."""
    counts = report.counts
    segments = sum(n for k, n in counts.removed.items() if k.startswith("segment:") and "script" in k)
    documents = sum(n for k, n in counts.removed.items() if k.startswith("document:") and "script" in k)
    share = max(segments / counts.segs_in if counts.segs_in else 0.0, documents / counts.docs_in if counts.docs_in else 0.0)
    if counts.segs_in >= 20 and share >= WRONG_SCRIPT_SHARE:
        raise RecipeError(f"{recipe.path}: stage '{report.name}' removed {share:.0%} of the text as not written in the "
                          f"target script {recipe.corpus.target_script}; set [corpus] target_script to the script the "
                          "text is written in (the script inventory of a run with --until script shows it).")


def map_chains(names: list[str]) -> dict[str, list[str]]:
    """Runs of two or more consecutive map stages, by their first stage; a stage with a survey
    (which must see all of its input partitions first) can only begin one."""
    chains: list[list[str]] = []
    current: list[str] = []
    for name in names + [""]:
        stage = STAGES.get(name)
        if stage is not None and stage.kind is Kind.MAP and not (current and stage.survey is not None):
            current.append(name)
            continue
        if len(current) > 1:
            chains.append(current)
        current = [name] if stage is not None and stage.kind is Kind.MAP else []
    return {c[0]: c for c in chains}


# -- the runner ----------------------------------------------------------------------------

class Runner:
    def __init__(self, recipe: Recipe, out: Path, engine, progress: Callable | None = None):
        self.recipe = recipe
        self.out = Path(out)
        self.cache = Cache(self.out)
        self.engine = engine
        self.progress = progress or _quiet_progress
        self.services = Services(self.recipe, self.out, self.cache, engine, self.progress)
        self.warnings = self.services.warnings           # shared with the stages through services
        self.last_keys = self.services.last_keys

    # planning ---------------------------------------------------------------------------
    def ingest_units(self) -> list[tuple[SourceSpec, list[tuple[str, str]], str]]:
        """(source, [(path, path relative to the recipe)], unit key) in a stable order."""
        from .readers import READERS
        from .stages import ingest

        units = []
        for source in self.recipe.sources:
            files, notes = self.recipe.source_files_and_notes(source)
            self.warnings.extend(f"source '{source.id}': {note}" for note in notes)
            groups = ingest.group_files(source, files, self.recipe.folder)
            reader = READERS[source.format]
            for group in groups:
                fingerprints = [(rel, file_sha256(Path(p))) for p, rel in group]
                key = stable_hash("ingest", module_version(ingest), module_version(reader), source, fingerprints,
                                  self.recipe.corpus.partition_docs)
                units.append((source, [(str(p), rel) for p, rel in group], key))
        return units

    # running ------------------------------------------------------------------------------
    def run(self, until: str | None = None, only: str | None = None) -> RunResult:
        for name in (until, only):
            if name and name not in STAGE_ORDER:
                from .config import suggest
                raise RecipeError(f"stage '{name}' is not known{suggest(name, STAGE_ORDER)}")
        from .validate import validate
        self.warnings.extend(validate(self.recipe))   # everything a stage would fail on, before any stage
        last = until or only or STAGE_ORDER[-1]
        reports: list[StageReport] = []
        parts = self._ingest(reports, execute=not only or only == "ingest")
        stage_in = "ingest"
        names = STAGE_ORDER[1:STAGE_ORDER.index(last) + 1]
        chains = map_chains(names) if not only else {}     # with --only, each stage alone
        in_chain = {n for chain in chains.values() for n in chain[1:]}
        for name in names:
            execute = not only or only == name
            kind = STAGES[name].kind
            if kind is Kind.MAP and name not in in_chain:   # one map stage, or the first of a pass
                chain = chains.get(name, [name])
                parts = self._map_stages(chain, stage_in, parts, reports, execute)
                for report in reports[-len(chain):]:
                    _check_script_removals(self.recipe, report)
            elif kind is Kind.MAP:
                pass                  # run in its pass
            elif kind is Kind.GLOBAL:
                parts = self._global_stage(name, stage_in, parts, reports, execute)
            elif kind is Kind.EXPORT:
                return self._export(stage_in, parts, reports)
            else:
                raise RecipeError(f"stage '{name}' of kind '{kind.value}' cannot follow ingest")
            stage_in = name
        return RunResult(self.out, reports, warnings=self.warnings)

    def _require(self, stage: str, key: str) -> None:
        if not self.cache.done(stage, key):
            raise RecipeError(f"stage '{stage}' has no cached result for this recipe yet; "
                              f"run 'corpuskit run RECIPE --until {stage}' first.")

    def _ingest(self, reports: list[StageReport], execute: bool) -> list[Partition]:
        report = StageReport("ingest")
        started = time.perf_counter()
        units = self.ingest_units()
        todo = [u for u in units if not self.cache.has_blob("ingest", f"{u[2]}.unit.json")]
        if todo and not execute:
            raise RecipeError("the sources, or the code that reads them, changed since the last run; run 'corpuskit run RECIPE --until ingest' first.")
        args = [(str(self.cache.root), src, files, key, self.recipe.corpus.partition_docs) for src, files, key in todo]
        with self.progress("ingest", len(args)) as tick:
            for _, marker in self.engine.imap(run_ingest_task, args):
                tick(Counts.from_dict(marker["counts"]).docs_out)
        self._rest(bool(todo))
        parts = []
        trouble: dict[str, list] = {}
        for source, _, key in units:
            marker = self.cache.get_json("ingest", f"{key}.unit.json")
            self.warnings.extend(marker.get("warnings", []))
            for reason, (n, first) in sorted(marker.get("trouble", {}).items()):
                trouble.setdefault(reason, [0, first])[0] += n
            report.counts = report.counts.add(Counts.from_dict(marker["counts"]))
            parts.extend(Partition(source.id, k) for k in marker["parts"])
        report.computed, report.reused = len(todo), len(units) - len(todo)
        self.last_keys.clear()
        self.last_keys["ingest"] = [p.key for p in parts]
        self.warnings.extend(f"ingest: {reason} x{n} (first: {first}); the rows are in private/ledger.jsonl.gz, "
                             "stage ingest" for reason, (n, first) in sorted(trouble.items()))
        report.seconds = time.perf_counter() - started
        reports.append(report)
        return parts

    def _run_partitions(self, name: str, in_stage: str, jobs: list[tuple[Partition, str, Any]],
                        report: StageReport, execute: bool) -> list[Partition]:
        """Compute every (input partition, output key, context) job not yet in the cache."""
        todo = [(p, k, c) for p, k, c in jobs if not self.cache.done(name, k)]
        if todo and not execute:
            self._require(name, todo[0][1])
        args = [(str(self.cache.root), name, self.recipe.stages[name], ctx, in_stage, p.key, k) for p, k, ctx in todo]
        with self.progress(name, len(args)) as tick:
            for i, result in self.engine.imap(run_map_task, args):
                tick(result["counts"]["docs_in"])
        self._rest(bool(todo))
        self._collect(name, [k for _, k, _ in jobs], report)
        report.computed, report.reused = len(todo), len(jobs) - len(todo)
        return [Partition(p.source, k) for p, k, _ in jobs]

    def _collect(self, name: str, keys: list[str], report: StageReport) -> list[dict]:
        """A stage's counts and figures from its partitions' markers, into ``report``; the stage's
        keys are recorded for export.  The markers, in order."""
        figures_type = STAGES[name].figures
        markers = [self.cache.marker(name, k) for k in keys]
        for marker in markers:
            report.counts = report.counts.add(Counts.from_dict(marker["counts"]))
            if figures_type is not None:
                part = figures_type.from_dict(marker.get("figures", {}))
                report.figures = part if report.figures is None else report.figures.merge(part)
        self.last_keys[name] = keys
        return markers

    def _map_stages(self, names: list[str], in_stage: str, parts: list[Partition],
                    reports: list[StageReport], execute: bool = True) -> list[Partition]:
        """One map stage, or consecutive map stages as one pass: each partition goes through all
        of them in one task (from the first stage whose result is not cached), each stage's result
        cached under its own key, the same whether it runs alone or in a pass.  A stage's seconds
        are its share of the pass's time, in proportion to the time its partitions took on the
        workers.  Without ``execute`` (another stage's ``--only``) every result must be cached."""
        started = time.perf_counter()
        stages = [STAGES[n] for n in names]
        params = [self.recipe.stages[n] for n in names]
        ctx_keys, keys, survey_keys = [], [], {}
        in_keys = [p.key for p in parts]
        for j, (name, stage) in enumerate(zip(names, stages)):
            ctx_key = stage.context_key(self.recipe, params[j])
            self.cache.use_context(name, ctx_key)
            self.services.context_keys[name] = ctx_key
            ctx_keys.append(ctx_key)
            if stage.survey is not None:       # only a chain's first stage has one (see map_chains)
                for source in self.recipe.sources:
                    skey = survey_key(stage, params[j], ctx_key, [p.key for p in parts if p.source == source.id])
                    survey_keys[source.id] = skey
                    self.cache.use(name, f"survey-{skey}")
            keys.append([partition_key(stage, params[j], k, ctx_key, survey_keys.get(p.source, "") if j == 0 else "")
                         for p, k in zip(parts, in_keys)])
            in_keys = keys[-1]
        first_missing = [next((j for j in range(len(names)) if not self.cache.done(names[j], keys[j][i])), None)
                         for i in range(len(parts))]
        if not execute:
            for i, f in enumerate(first_missing):
                if f is not None:
                    self._require(names[f], keys[f][i])
        contexts: list[Any] = [None] * len(names)
        for j, (name, stage) in enumerate(zip(names, stages)):
            if any(f is not None and f <= j for f in first_missing):
                contexts[j] = stage.build_context(self.recipe, params[j], self.cache, ctx_keys[j])
        surveys: dict[str, Any] = {}
        if stages[0].survey is not None:
            needed = sorted({p.source for p, f in zip(parts, first_missing) if f == 0} & set(survey_keys))
            surveys = self._surveys(names[0], stages[0], params[0], in_stage, parts, {s: survey_keys[s] for s in needed})

        def context(j: int, part: Partition) -> Any:
            if j == 0 and stages[0].survey is not None:
                return stages[0].survey.context(contexts[0], surveys.get(part.source))
            return contexts[j]

        args = [(str(self.cache.root), [(names[j], params[j], context(j, p), keys[j][i]) for j in range(f, len(names))],
                 in_stage if f == 0 else names[f - 1], p.key if f == 0 else keys[f - 1][i])
                for i, (p, f) in enumerate(zip(parts, first_missing)) if f is not None]
        with self.progress(f"{names[0]}..{names[-1]}" if len(names) > 1 else names[0], len(args)) as tick:
            for _, results in self.engine.imap(run_chain_task, args):
                tick(results[0]["counts"]["docs_in"])
        self._rest(bool(args))
        chain_reports, worker_seconds = [], []
        for j, name in enumerate(names):
            computed = [i for i, f in enumerate(first_missing) if f is not None and f <= j]
            report = StageReport(name, computed=len(computed), reused=len(parts) - len(computed))
            markers = self._collect(name, keys[j], report)
            chain_reports.append(report)
            worker_seconds.append(sum(markers[i].get("seconds", 0.0) for i in computed))
        wall, total = time.perf_counter() - started, sum(worker_seconds)
        for report, spent in zip(chain_reports, worker_seconds):
            report.seconds = wall * spent / total if total else wall / len(names)
        reports.extend(chain_reports)
        return [Partition(p.source, k) for p, k in zip(parts, keys[-1])]

    def _rest(self, worked: bool) -> None:
        """After a step that did work: the engine frees what it can (large workers exit, heaps
        are trimmed), so a stage's leftovers do not add up over the run."""
        if worked:
            self.services.rest()

    def _surveys(self, name, stage, params, in_stage, parts, survey_keys: dict[str, str]) -> dict[str, Any]:
        """Per source, its survey: from the cache, or from its partitions' parts computed on the
        workers (all sources at once) and merged in partition order."""
        result, todo = {}, {}
        for source_id, skey in survey_keys.items():
            if self.cache.has_blob(name, f"survey-{skey}.json"):
                result[source_id] = self.cache.get_json(name, f"survey-{skey}.json")
            else:
                todo[source_id] = [p.key for p in parts if p.source == source_id]
        args = [(str(self.cache.root), name, params, in_stage, key) for keys in todo.values() for key in keys]
        partials: list = [None] * len(args)
        for i, partial in self.engine.imap(run_survey_task, args):
            partials[i] = partial
        self._rest(bool(args))
        start = 0
        for source_id, keys in todo.items():
            survey = stage.survey.merge(partials[start:start + len(keys)], params)
            start += len(keys)
            self.cache.put_json(name, f"survey-{survey_keys[source_id]}.json", survey)
            # the same values a later run reads back from the cache (tuples become lists), without the read
            result[source_id] = json.loads(json.dumps(survey, sort_keys=True, ensure_ascii=False))
        return result

    def _global_stage(self, name: str, in_stage: str, parts: list[Partition], reports: list[StageReport],
                      execute: bool) -> list[Partition]:
        stage = STAGES[name]
        params = self.recipe.stages[name]
        report = StageReport(name)
        started = time.perf_counter()
        decisions = stage.decide(self.services, in_stage, parts, params)
        self.cache.put_json(name, "report.json", decisions.report)
        self._rest(True)
        jobs = [(p, partition_key(stage, params, p.key, decision=decisions.per_partition[p.key]),
                 decisions.per_partition[p.key]) for p in parts]
        out = self._run_partitions(name, in_stage, jobs, report, execute)
        report.seconds = time.perf_counter() - started
        reports.append(report)
        return out

    def _export(self, in_stage: str, parts: list[Partition], reports: list[StageReport]) -> RunResult:
        from .stages import export
        started = time.perf_counter()
        result = export.write_outputs(self.services, in_stage, parts, reports)
        report = StageReport("export", counts=result.counts, computed=result.pieces_computed, reused=result.pieces_reused)
        report.seconds = time.perf_counter() - started
        reports.append(report)
        res = RunResult(self.out, reports, result.conservation, result.manifest, warnings=self.warnings)
        for stage, keys in self.last_keys.items():  # partitions that workers read and wrote
            for key in keys:
                self.cache.use(stage, key)
        self.cache.save_in_use()
        self._write_log(res)
        return res

    def _write_log(self, res: RunResult) -> None:
        lines = [f"corpuskit run of {self.recipe.path.name} on {platform.node()} ({platform.platform()}), "
                 f"engine {self.engine.name} with {getattr(self.engine, 'workers', 1)} workers"]
        for s in res.stages:
            lines.append(f"{s.name}: {s.computed} computed, {s.reused} reused, {s.seconds:.2f} s")
        lines.extend(f"warning: {w}" for w in self.warnings)
        with open(self.out / "run.log", "a", encoding="utf-8") as f:
            f.write(time.strftime("%Y-%m-%dT%H:%M:%S ") + "\n".join(lines) + "\n\n")
