"""The stage contract, checked for every stage in the registry on the demo's partitions:

- conservation: every document and segment in is out, or leaves with a ledger row;
- determinism: the same input gives the same output and rows;
- chunking: the output over a partition equals the outputs over its halves, joined
  (global stages: the same decisions whatever the partitioning);
- idempotence, for the stages that claim it: applying a stage to its own output changes nothing.

Then the import graph (no cycles) and a stage added the way README "How to add a stage" says.
"""
import ast
import contextlib
import copy
import dataclasses
import gzip
from pathlib import Path

import pytest

from corpuskit.errors import DataError
from corpuskit.ledger import LedgerRow, remove_segment
from corpuskit.recipe import load_recipe
from corpuskit.records import new_document
from corpuskit.runner import Runner, check_partition
from corpuskit.engines.local import Later
from corpuskit.stages import ingest
from corpuskit.stages.contract import Applied, Kind, Partition, Services, Stage
from corpuskit.stages.registry import STAGES
from corpuskit.storage import Cache

from .conftest import ROOT, copy_demo

PACKAGE = ROOT / "corpuskit"


class SerialEngine:
    """Runs tasks in this process, in order: what a worker pool does, without the pool."""
    name = "serial"
    workers = 1

    def imap(self, func, args):
        for i, a in enumerate(args):
            yield i, func(*a)

    def start(self, func, *args):
        return Later(func, args)


@contextlib.contextmanager
def _no_progress(name, total):
    yield lambda n: None


# -- inputs: the demo's ingested partitions, carried through the map stages -----------------------

@pytest.fixture(scope="module")
def stage_inputs(demo_run):
    """{stage name: [(source, docs), ...]}: each stage's input partitions, made by applying the
    stages before it in registry order to the demo's ingested partitions; and the contexts."""
    recipe = load_recipe(ROOT / "recipes" / "demo.toml")
    cache = Cache(demo_run.out)
    units = Runner(recipe, demo_run.out, None).ingest_units()
    parts = [(source.id, cache.read_docs("ingest", k)) for source, _, key in units
             for k in cache.get_json("ingest", f"{key}.unit.json")["parts"]]
    inputs, contexts = {}, {}
    for name, stage in STAGES.items():
        if stage.kind is not Kind.MAP:
            inputs[name] = parts
            continue
        inputs[name] = parts
        contexts[name] = _contexts(stage, recipe, cache, parts)
        parts = [(src, stage.apply(copy.deepcopy(docs), recipe.stages[name], contexts[name][src]).docs)
                 for src, docs in parts]
    return recipe, inputs, contexts


def _contexts(stage: Stage, recipe, cache, parts) -> dict[str, object]:
    """Per source, the context ``apply`` gets: the stage's, or the one its survey makes."""
    params = recipe.stages[stage.name]
    ctx = stage.build_context(recipe, params, cache, stage.context_key(recipe, params))
    sources = sorted({src for src, _ in parts})
    if stage.survey is None:
        return dict.fromkeys(sources, ctx)
    return {src: stage.survey.context(ctx, stage.survey.merge(
        [stage.survey.partition(copy.deepcopy(docs), params) for s, docs in parts if s == src], params))
        for src in sources}


def _run(stage: Stage, docs, params, ctx) -> Applied:
    result = stage.apply(copy.deepcopy(docs), params, ctx)
    assert isinstance(result, Applied), f"{stage.name}.apply must return Applied"
    return result


def _segments(docs) -> int:
    return sum(len(d["segments"]) for d in docs)


# -- map stages ------------------------------------------------------------------------------------

MAP = [n for n, s in STAGES.items() if s.kind is Kind.MAP]
GLOBAL = [n for n, s in STAGES.items() if s.kind is Kind.GLOBAL]


def test_every_registered_stage_is_covered_by_a_kind_check():
    kinds = {s.kind for s in STAGES.values()}
    assert kinds <= set(Kind) and set(MAP) | set(GLOBAL) | {"ingest", "export"} == set(STAGES)


@pytest.mark.parametrize("name", MAP)
def test_map_stage_conserves_units(stage_inputs, name):
    recipe, inputs, contexts = stage_inputs
    stage = STAGES[name]
    for i, (src, docs) in enumerate(inputs[name]):
        out, rows, _ = _run(stage, docs, recipe.stages[name], contexts[name][src])
        check_partition(name, str(i), len(docs), _segments(docs), out, rows)   # raises on a unit unaccounted for
        gone_docs = [r for r in rows if r.unit == "document" and r.action == "removed"]
        gone_segs = [r for r in rows if r.unit == "segment" and r.action == "removed"]
        assert len(docs) == len(out) + len(gone_docs)
        assert _segments(docs) == _segments(out) + len(gone_segs) + sum(r.segments for r in gone_docs)


@pytest.mark.parametrize("name", MAP)
def test_map_stage_is_deterministic(stage_inputs, name):
    recipe, inputs, contexts = stage_inputs
    stage = STAGES[name]
    for src, docs in inputs[name]:
        first = _run(stage, docs, recipe.stages[name], contexts[name][src])
        again = _run(stage, docs, recipe.stages[name], contexts[name][src])
        assert first == again


@pytest.mark.parametrize("name", MAP)
def test_map_stage_gives_the_same_output_chunked_and_unchunked(stage_inputs, name):
    recipe, inputs, contexts = stage_inputs
    stage = STAGES[name]
    for src, docs in inputs[name]:
        whole = _run(stage, docs, recipe.stages[name], contexts[name][src])
        half = len(docs) // 2
        left = _run(stage, docs[:half], recipe.stages[name], contexts[name][src])
        right = _run(stage, docs[half:], recipe.stages[name], contexts[name][src])
        assert whole.docs == left.docs + right.docs
        assert whole.rows == left.rows + right.rows
        if stage.figures is not None:
            assert whole.figures == left.figures.merge(right.figures)


@pytest.mark.parametrize("name", [n for n in MAP if STAGES[n].idempotent])
def test_map_stage_that_claims_idempotence_changes_nothing_the_second_time(stage_inputs, name):
    recipe, inputs, contexts = stage_inputs
    stage = STAGES[name]
    for src, docs in inputs[name]:
        once = _run(stage, docs, recipe.stages[name], contexts[name][src])
        twice = _run(stage, once.docs, recipe.stages[name], contexts[name][src])
        assert twice.docs == once.docs
        assert twice.rows == [], name


# -- global stages -------------------------------------------------------------------------------

def _services(tmp: Path, recipe, in_stage: str, partitions: list[tuple[str, list[dict]]]):
    cache = Cache(tmp)
    parts = []
    for i, (src, docs) in enumerate(partitions):
        key = f"p{i:03d}"
        cache.write_partition(in_stage, key, docs, [], {"counts": {}})
        parts.append(Partition(src, key))
    return Services(recipe, tmp, cache, SerialEngine(), _no_progress), parts


def _global_outputs(tmp, recipe, name, partitions, in_stage="filter"):
    """Decide over the partitions, apply per partition; the documents and rows in partition order."""
    stage = STAGES[name]
    services, parts = _services(tmp, recipe, in_stage, partitions)
    decisions = stage.decide(services, in_stage, parts, recipe.stages[name])
    assert set(decisions.per_partition) == {p.key for p in parts}
    docs, rows = [], []
    for p, (_, part_docs) in zip(parts, partitions):
        out, part_rows, _ = stage.apply(copy.deepcopy(part_docs), recipe.stages[name], decisions.per_partition[p.key])
        check_partition(name, p.key, len(part_docs), _segments(part_docs), out, part_rows)
        docs += out
        rows += part_rows
    return docs, rows, decisions


@pytest.mark.parametrize("name", GLOBAL)
def test_global_stage_conserves_is_deterministic_and_ignores_partitioning(stage_inputs, name, tmp_path):
    recipe, inputs, _ = stage_inputs
    partitions = inputs[name]
    docs, rows, decisions = _global_outputs(tmp_path / "a", recipe, name, partitions)
    again, rows_again, decisions_again = _global_outputs(tmp_path / "b", recipe, name, partitions)
    assert (docs, rows) == (again, rows_again) and decisions.report == decisions_again.report
    # The same documents cut into partitions of 7: the same kept documents, splits and rows.
    flat = [(src, d) for src, part in partitions for d in part]
    sevens = [(flat[i][0], [d for _, d in flat[i:i + 7]]) for i in range(0, len(flat), 7)]
    chunked, chunked_rows, _ = _global_outputs(tmp_path / "c", recipe, name, sevens)
    assert sorted((d["id"], d.get("split")) for d in chunked) == sorted((d["id"], d.get("split")) for d in docs)
    assert sorted(chunked_rows, key=repr) == sorted(rows, key=repr)
    if STAGES[name].idempotent:
        twice, twice_rows, _ = _global_outputs(tmp_path / "d", recipe, name, [("all", docs)])
        assert twice == docs and twice_rows == []


# -- ingest and export: the whole run, partitioned differently ---------------------------------------

def test_ingest_conserves_and_is_deterministic():
    recipe = load_recipe(ROOT / "recipes" / "demo.toml")
    for source in recipe.sources:
        files = [(str(p), str(p)) for p in recipe.source_files(source)]
        first = list(ingest.ingest_unit(source, files, 1000, []))
        again = list(ingest.ingest_unit(source, files, 1000, []))
        assert first == again
        small = list(ingest.ingest_unit(source, files, 3, []))
        assert [d for docs, _ in small for d in docs] == [d for docs, _ in first for d in docs]
        for docs, rows in first:
            c = ingest.counts(docs, rows)
            assert c.docs_in == len(docs) + sum(1 for r in rows if r.unit == "document" and r.action == "removed")


def test_a_run_with_other_partitions_writes_the_same_outputs(demo_run, tmp_path):
    """Ingest and export (and every stage between) over partitions of 7 documents instead of 200."""
    from corpuskit.api import run
    recipe = copy_demo(tmp_path)
    recipe.write_text(recipe.read_text().replace("partition_docs = 200", "partition_docs = 7"))
    secret = demo_run.out / "private" / "pseudonym-secret.txt"
    # the same people get the same pseudonyms: use the demo run's secret
    target = load_recipe(recipe).secret_path
    target.parent.mkdir(parents=True, exist_ok=True)
    target.write_bytes(secret.read_bytes())
    result = run(recipe, tmp_path / "out", workers=1)
    assert result.conservation["documents"]["holds"] and result.conservation["segments"]["holds"]
    for part in ("corpus", "splits", "restricted", "tokenizer"):
        a, b = demo_run.out / part, tmp_path / "out" / part
        names = sorted(p.name for p in a.iterdir())
        assert names == sorted(p.name for p in b.iterdir())
        for name in names:
            # A shard is one gzip member per partition's piece (so a new source rewrites only its
            # own pieces): the compressed bytes follow the partitioning, the text must not.
            read = (lambda p: gzip.decompress(p.read_bytes())) if name.endswith(".gz") else Path.read_bytes
            assert read(a / name) == read(b / name), (part, name)


def test_consecutive_map_stages_form_one_pass_and_a_surveying_stage_begins_one():
    from corpuskit.runner import map_chains
    from corpuskit.stages.registry import STAGE_ORDER
    assert map_chains(STAGE_ORDER[1:]) == {"clean": ["clean", "normalise", "script", "variants", "langid", "filter"]}
    assert map_chains(["normalise", "clean", "script"]) == {"clean": ["clean", "script"]}   # clean has a survey
    assert map_chains(["filter", "dedup", "split"]) == {} and map_chains(["script"]) == {}


def _partitions(out: Path) -> dict[str, bytes]:
    return {str(p.relative_to(out)): p.read_bytes() for p in sorted((out / ".cache").glob("*/*.parquet"))}


def test_one_pass_caches_what_the_stages_cache_run_one_at_a_time(tmp_path):
    """The map stages run as one pass per partition write, under the same keys, byte for byte the
    partitions they write when each runs alone (``--only``); the outputs are the same; and a
    changed stage in the middle of the pass recomputes it and the stages after it only."""
    from corpuskit.api import run
    from corpuskit.stages.registry import STAGE_ORDER
    recipe = copy_demo(tmp_path)
    run(recipe, tmp_path / "alone", workers=1, until="ingest")
    for name in STAGE_ORDER[1:STAGE_ORDER.index("split") + 1]:
        assert run(recipe, tmp_path / "alone", workers=1, only=name).stage(name).computed > 0
    alone = run(recipe, tmp_path / "alone", workers=1)
    assert all(s.computed == 0 for s in alone.stages if s.name not in ("export", "ingest"))
    together = run(recipe, tmp_path / "pass", workers=1)
    assert _partitions(tmp_path / "alone") == _partitions(tmp_path / "pass")
    for part in ("corpus", "splits", "reports"):
        for a in sorted((tmp_path / "alone" / part).iterdir()):
            b = tmp_path / "pass" / part / a.name
            read = (lambda p: gzip.decompress(p.read_bytes())) if a.name.endswith(".gz") else Path.read_bytes
            assert read(a) == read(b), a.name
    assert [s.name for s in together.stages] == STAGE_ORDER
    recipe.write_text(recipe.read_text().replace("[stages.script]", "[stages.filter]\nmin_chars = 12\n\n[stages.script]"))
    changed = run(recipe, tmp_path / "pass", workers=1)
    n = changed.stage("clean").reused
    assert [(changed.stage(s).computed, changed.stage(s).reused) for s in ("clean", "normalise", "script", "variants", "langid")] \
        == [(0, n)] * 5
    assert (changed.stage("filter").computed, changed.stage("filter").reused) == (n, 0)


def test_the_conservation_check_raises_on_a_lost_segment():
    doc = {"id": "s:1", "segments": ["a", "b", "c"], "seg_index": [0, 1, 2]}
    lost = dict(doc, segments=["a", "c"], seg_index=[0, 2])
    with pytest.raises(DataError, match="lost units without a ledger row"):
        check_partition("t", "k", 1, 3, [lost], [])
    check_partition("t", "k", 1, 3, [lost], [remove_segment("t", doc, 1, "r")])   # accounted for: no error


def test_a_stage_returning_a_bare_tuple_is_refused(tmp_path):
    from corpuskit.runner import run_map_task
    cache = Cache(tmp_path)
    cache.write_partition("ingest", "k", [new_document(id="s:1", source="s", segments=["a"])], [], {"counts": {}})
    bad = Stage("bad", Kind.MAP, STAGES["split"].params, lambda docs, params, ctx: (docs, []))
    with pytest.MonkeyPatch.context() as mp:
        mp.setitem(STAGES, "bad", bad)
        with pytest.raises(TypeError, match="apply must return Applied"):
            run_map_task(str(cache.root), "bad", bad.params(), None, "ingest", "k", "out")


def test_a_stage_entry_missing_what_its_kind_needs_is_refused():
    with pytest.raises(TypeError, match="needs apply, decide"):
        Stage("x", Kind.GLOBAL, STAGES["split"].params)
    with pytest.raises(TypeError, match="params must be a dataclass"):
        Stage("x", Kind.MAP, dict, lambda d, p, c: Applied(d, []))


# -- the import graph --------------------------------------------------------------------------

def import_graph(package: Path) -> dict[str, set[str]]:
    """Module -> the package's modules it imports (at any depth of the file, function bodies
    included; imports under ``if TYPE_CHECKING:`` are not run and are left out)."""
    modules = {}
    for path in package.rglob("*.py"):
        parts = path.relative_to(package.parent).with_suffix("").parts
        name = ".".join(parts[:-1] if parts[-1] == "__init__" else parts)
        modules[name] = path
    graph = {}
    for name, path in modules.items():
        pkg = name if path.name == "__init__.py" else name.rpartition(".")[0]
        found = set()

        def visit(node):
            for child in ast.iter_child_nodes(node):
                if isinstance(child, ast.If) and getattr(child.test, "id", "") == "TYPE_CHECKING":
                    continue
                if isinstance(child, ast.ImportFrom):
                    base = pkg.split(".")[:len(pkg.split(".")) - child.level + 1] if child.level else []
                    target = ".".join(base + ([child.module] if child.module else []))
                    for alias in child.names:
                        found.add(f"{target}.{alias.name}" if f"{target}.{alias.name}" in modules else target)
                elif isinstance(child, ast.Import):
                    found.update(a.name for a in child.names)
                visit(child)
        visit(ast.parse(path.read_text("utf-8")))
        graph[name] = {m for m in found if m in modules and m != name}
    return graph


def cycles(graph: dict[str, set[str]]) -> list[list[str]]:
    """The strongly connected components with more than one module (Tarjan's algorithm)."""
    index, low, stack, on, out, counter = {}, {}, [], set(), [], [0]

    def connect(v):
        index[v] = low[v] = counter[0]
        counter[0] += 1
        stack.append(v)
        on.add(v)
        for w in sorted(graph[v]):
            if w not in index:
                connect(w)
                low[v] = min(low[v], low[w])
            elif w in on:
                low[v] = min(low[v], index[w])
        if low[v] == index[v]:
            comp = []
            while True:
                w = stack.pop()
                on.discard(w)
                comp.append(w)
                if w == v:
                    break
            if len(comp) > 1:
                out.append(sorted(comp))

    for v in sorted(graph):
        if v not in index:
            connect(v)
    return out


def test_the_package_has_no_import_cycle():
    assert cycles(import_graph(PACKAGE)) == []


def test_the_cycle_check_finds_a_planted_cycle(tmp_path):
    pkg = tmp_path / "pkg"
    (pkg / "sub").mkdir(parents=True)
    (pkg / "__init__.py").write_text("")
    (pkg / "sub" / "__init__.py").write_text("")
    (pkg / "a.py").write_text("from .sub import b\n")
    (pkg / "sub" / "b.py").write_text("def f():\n    from ..c import x\n")
    (pkg / "c.py").write_text("from typing import TYPE_CHECKING\nfrom . import a\nif TYPE_CHECKING:\n    from . import d\n")
    (pkg / "d.py").write_text("from . import c\n")
    assert cycles(import_graph(pkg)) == [["pkg.a", "pkg.c", "pkg.sub.b"]]


def test_no_module_imports_a_private_name_of_another():
    for path in PACKAGE.rglob("*.py"):
        for node in ast.walk(ast.parse(path.read_text("utf-8"))):
            if isinstance(node, ast.ImportFrom) and (node.level or (node.module or "").startswith("corpuskit")):
                names = [a.name for a in node.names] + (node.module or "").split(".")
                assert not [n for n in names if n.startswith("_") and not n.startswith("__")], (path.name, names)


# -- adding a stage, as README "How to add a stage" says ---------------------------------------------

@dataclasses.dataclass(frozen=True)
class UpperParams:
    pass


def upper_apply(docs, params, ctx):
    """A trivial stage: every segment upper-cased, one rewrite row per segment changed."""
    rows = []
    for doc in docs:
        for i, seg in enumerate(doc["segments"]):
            if seg.upper() != seg:
                rows.append(LedgerRow("upper", "segment", "rewritten", doc["id"], doc["seg_index"][i], 0, "upper-cased"))
                doc["segments"][i] = seg.upper()
    return Applied(docs, rows)


def test_a_stage_added_by_one_registry_entry_runs_and_is_cached(tmp_path, monkeypatch):
    from corpuskit.api import run
    from corpuskit.stages import registry
    import corpuskit.recipe as recipe_module
    stages = dict(registry.STAGES)
    entries = list(stages.items())
    at = [n for n, _ in entries].index("filter") + 1
    new = dict(entries[:at] + [("upper", Stage("upper", Kind.MAP, UpperParams, upper_apply, idempotent=True))] + entries[at:])
    monkeypatch.setattr(registry, "STAGES", new)
    for module in ("corpuskit.runner", "corpuskit.recipe", "corpuskit.status"):
        mod = __import__(module, fromlist=["STAGES"])
        if hasattr(mod, "STAGES"):
            monkeypatch.setattr(mod, "STAGES", new)
    import corpuskit.runner as runner_module
    monkeypatch.setattr(runner_module, "STAGE_ORDER", list(new))
    recipe = copy_demo(tmp_path)
    result = run(recipe, tmp_path / "out", workers=1)
    upper = result.stage("upper")
    assert upper.computed > 0 and upper.counts.rewritten["segment:upper-cased"] > 0
    text = (tmp_path / "out" / "corpus" / "corpus.txt").read_text("utf-8")
    assert text == text.upper()
    again = run(recipe, tmp_path / "out", workers=1)
    assert again.stage("upper").computed == 0 and again.stage("upper").reused == upper.computed
    assert recipe_module.load_recipe(recipe).stages["upper"] == UpperParams()


# -- joins: units that leave while their text stays -----------------------------------------------

def test_joined_segments_are_ledger_removals_shown_apart_as_merges(demo_run):
    """The contract's check holds on the ledger alone (segments in = kept + segment rows + segments
    of removed documents), and the joins among the rows are the merges the counts show apart."""
    from corpuskit.api import load_ledger
    ledger = load_ledger(demo_run.out)
    cons = demo_run.conservation["segments"]
    seg_rows = ledger[(ledger.unit == "segment") & (ledger.action == "removed")]
    doc_rows = ledger[(ledger.unit == "document") & (ledger.action == "removed")]
    assert cons["in"] == cons["kept"] + len(seg_rows) + int(doc_rows.segments.sum())
    merged = seg_rows[seg_rows.merged_into.notna()]
    assert len(merged) > 0 and set(merged.reason) <= {"joined", "line-joined", "dehyphenated"}
    assert (merged.merged_into != merged.seg_index).all()
    counted = sum(sum(s.counts.merged.values()) for s in demo_run.stages)
    assert counted == len(merged) == cons["merged_into_neighbours"]
    assert not any(k.split(":", 1)[1] in ("joined", "line-joined") for s in demo_run.stages for k in s.counts.removed)
