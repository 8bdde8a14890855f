"""End-to-end behaviour of the runner: conservation, determinism, caching, resumption, the CLI."""
import hashlib
import json
import os
import signal
import subprocess
import sys
from pathlib import Path

import pytest
from hypothesis import given, strategies as st
from typer.testing import CliRunner

from corpuskit.api import load_corpus, load_ledger, load_report, run
from corpuskit.cli import app
from corpuskit.ledger import count_partition, remove_document, remove_segment
from corpuskit.records import new_document
from corpuskit.runner import check_partition

from .conftest import ROOT, copy_demo

CONTRACT = ("corpus", "splits", "tokenizer", "reports", "restricted", "private", "datasheet.md", "manifest.json")


def contract_files(out: Path) -> dict[str, str]:
    files = {}
    for p in sorted(out.rglob("*")):
        rel = p.relative_to(out)
        if p.is_file() and rel.parts[0] in CONTRACT:
            files[str(rel)] = hashlib.sha256(p.read_bytes()).hexdigest()
    return files


def test_demo_outputs_and_conservation(demo_run):
    out = demo_run.out
    for name in ("corpus/corpus-00000.jsonl.gz", "corpus/corpus.txt", "private/ledger.jsonl.gz", "manifest.json", "datasheet.md",
                 "splits/train.jsonl.gz", "tokenizer/tokenizer.model", "tokenizer/dialects.csv", "reports/balance.html"):
        assert (out / name).exists(), name
    m = json.loads((out / "manifest.json").read_text())
    assert m["conservation"]["documents"]["holds"] and m["conservation"]["segments"]["holds"]
    c = m["conservation"]["documents"]
    assert c["in"] == c["kept"] + c["removed"]
    for rel, info in m["files"].items():
        assert hashlib.sha256((out / rel).read_bytes()).hexdigest() == info["sha256"]
    # The manifest and outputs carry no absolute paths or timestamps.
    assert str(out) not in (out / "manifest.json").read_text()


def test_every_source_kind_ingested(demo_run):
    ingest = demo_run.stage("ingest").counts
    assert ingest.docs_in > 300
    df = load_corpus(demo_run.out)
    restricted = load_corpus(demo_run.out, restricted=True)
    assert set(df["source"]) | set(restricted["source"]) >= {"radio-vtt", "radio-srt", "booklets", "group-chat",
                                                             "sentence-sheet", "valley-radio-web", "river-hymns"}


def test_restricted_source_never_public(demo_run):
    public = load_corpus(demo_run.out)
    assert "group-chat" not in set(public["source"])
    for split in ("train", "dev", "test"):
        df = load_corpus(demo_run.out, split=split)
        assert df.empty or "group-chat" not in set(df["source"])
    assert "group-chat" in set(load_corpus(demo_run.out, restricted=True)["source"])


def test_api_loads_ledger_and_reports(demo_run):
    ledger = load_ledger(demo_run.out)
    assert {"stage", "reason", "doc_id"} <= set(ledger.columns)
    assert not load_report(demo_run.out, "balance-dialect").empty


def test_determinism_and_cache(tmp_path):
    recipe = copy_demo(tmp_path)
    a = run(recipe, tmp_path / "a", workers=1)
    b = run(recipe, tmp_path / "b", workers=2)
    assert contract_files(tmp_path / "a") == contract_files(tmp_path / "b")
    again = run(recipe, tmp_path / "a", workers=1)
    assert all(n == 0 for n in again.executed.values()), again.executed   # export pieces included
    assert contract_files(tmp_path / "a") == contract_files(tmp_path / "b")
    # Touch one source: only its partitions are recomputed by per-partition stages.
    page = tmp_path / "sample_texts" / "web" / "page-001.txt"
    page.write_text(page.read_text() + "Mɛkɔ bé yɔŋé lɔ́ wasi dená sekɛ.\n")
    changed = run(recipe, tmp_path / "a", workers=1)
    assert changed.stage("ingest").computed == 1
    web_parts = changed.stage("clean").computed
    assert 1 <= web_parts < a.stage("clean").computed + a.stage("clean").reused
    assert changed.stage("langid").computed == web_parts
    # The export rebuilds the changed partition's document piece and the ledger pieces of the
    # partitions recomputed by any stage, and reuses the rest; the result equals a fresh run.
    recomputed = sum(changed.stage(s).computed for s in ("clean", "normalise", "script", "variants", "langid",
                                                         "filter", "dedup", "split"))
    export = changed.stage("export")
    assert export.computed <= recomputed + web_parts + changed.stage("split").computed
    assert export.computed < export.reused
    run(recipe, tmp_path / "fresh", workers=1)
    assert contract_files(tmp_path / "a") == contract_files(tmp_path / "fresh")
    # Pruning removes what the edited page replaced and nothing the current recipe needs.
    pruned = CliRunner().invoke(app, ["prune", "--out", str(tmp_path / "a")], env={"COLUMNS": "300"})
    assert pruned.exit_code == 0 and int(pruned.stdout.split()[1]) >= 9, pruned.output  # one old partition per stage at least
    after = run(recipe, tmp_path / "a", workers=1)
    assert all(n == 0 for n in after.executed.values()), after.executed
    assert contract_files(tmp_path / "a") == contract_files(tmp_path / "fresh")
    # A run that reused everything still records the models it would need: after pruning
    # again, a further edit is processed with the cached language-ID model.
    CliRunner().invoke(app, ["prune", "--out", str(tmp_path / "a")])
    page.write_text(page.read_text() + "Bé sekɛ dená lɔ́.\n")
    assert run(recipe, tmp_path / "a", workers=1).stage("langid").computed >= 1
    del b


def test_second_run_on_same_folder_refused(tmp_path):
    from corpuskit.errors import LockedError
    from corpuskit.runner import OutputLock
    with OutputLock(tmp_path):
        with pytest.raises(LockedError, match="another corpuskit run"):
            with OutputLock(tmp_path):
                pass
    with OutputLock(tmp_path):  # released: not stuck
        pass


def test_cli_runner_and_subprocess(tmp_path, demo_run):
    runner = CliRunner()
    r = runner.invoke(app, ["check", str(ROOT / "recipes" / "demo.toml")], env={"COLUMNS": "300"})
    assert r.exit_code == 0, r.output
    assert "valid" in r.stdout
    bad = tmp_path / "bad.toml"
    bad.write_text("[corpus]\nname = 'x'\nlanguage = 'qnv'\nfoo = 1\n")
    r = runner.invoke(app, ["check", str(bad)], env={"COLUMNS": "300"})
    assert r.exit_code == 2 and "unknown key 'foo'" in r.stderr
    bad.write_text("[corpus]\nname = 'x'\nlanguage = 'qnv'\n[stages.dedup]\nthreshhold = 0.5\n")
    r = runner.invoke(app, ["check", str(bad)], env={"COLUMNS": "300"})
    assert r.exit_code == 2 and "no [[sources]] given" in r.stderr  # table names are text, not console markup
    doc = load_corpus(demo_run.out)["id"].iloc[0]
    r = runner.invoke(app, ["trace", doc, "--out", str(demo_run.out)], env={"COLUMNS": "300"})
    assert r.exit_code == 0 and "kept in corpus/" in r.stdout
    proc = subprocess.run([str(Path(sys.executable).parent / "corpuskit"), "status", str(ROOT / "recipes" / "demo.toml"),
                           "--out", str(tmp_path / "none")], capture_output=True, text=True)
    assert proc.returncode == 0 and "stale" in proc.stdout


def test_new_project_checks(tmp_path):
    r = CliRunner().invoke(app, ["new", str(tmp_path / "proj"), "--language", "qab"])
    assert r.exit_code == 0, r.output
    assert (tmp_path / "proj" / "recipe.toml").exists() and (tmp_path / "proj" / "datasheet-answers.toml").exists()


# -- conservation as a property ------------------------------------------------------------

@given(st.lists(st.lists(st.text(min_size=1, max_size=5), min_size=0, max_size=6), min_size=0, max_size=8),
       st.integers(0, 2**32 - 1))
def test_conservation_holds_for_random_drop_and_rewrite(docs_segments, seed):
    import random
    rng = random.Random(seed)
    docs = [new_document(id=f"d{i}", source="s", segments=list(segs)) for i, segs in enumerate(docs_segments)]
    n_in, segs_in = len(docs), sum(len(d["segments"]) for d in docs)
    rows, out = [], []
    for d in docs:
        r = rng.random()
        if r < 0.2:
            rows.append(remove_document("t", d, "random"))
            continue
        keep = [rng.random() < 0.7 for _ in d["segments"]]
        for i, k in enumerate(keep):
            if not k:
                rows.append(remove_segment("t", d, i, "random"))
        d["segments"] = [s.upper() for s, k in zip(d["segments"], keep) if k]
        out.append(d)
    check_partition("t", "k", n_in, segs_in, out, rows)  # raises if anything is unaccounted for
    c = count_partition([], out, rows)
    assert n_in == c.docs_out + sum(1 for r in rows if r.unit == "document")


def test_per_source_counts_add_up_to_the_ingested_totals(demo_run):
    rows = demo_run.manifest["sources"]
    cons = demo_run.conservation
    assert {r["source"] for r in rows} == {"radio-vtt", "radio-srt", "booklets", "group-chat", "sentence-sheet",
                                          "valley-radio-web", "river-hymns"}
    assert sum(r["documents in"] for r in rows) == cons["documents"]["in"]
    assert sum(r["segments in"] for r in rows) == cons["segments"]["in"]
    assert sum(r["documents kept"] for r in rows) == cons["documents"]["kept"]
    assert [r["output"] for r in rows if r["source"] == "group-chat"] == ["restricted"]


KILLER = """
import os, re, signal, sys
from corpuskit import storage
pattern, hit = re.compile(sys.argv[1]), int(sys.argv[2])
seen = {"n": 0}
real_replace = storage.os.replace

def replace(src, dst):
    if pattern.search(str(dst)):
        seen["n"] += 1
        if seen["n"] == hit:  # the temporary file is written; die before it takes its name
            os.kill(os.getpid(), signal.SIGKILL)
    return real_replace(src, dst)

storage.os.replace = replace
from corpuskit.cli import app
sys.argv = ["corpuskit"] + sys.argv[3:]
app()
"""

# (file the run is about to publish, which one of them): one point in each kind of stage.
KILL_POINTS = [
    (r"/ingest/.*\.parquet$", 3),           # an ingest partition's data, before its ledger and marker
    (r"/clean/.*\.ledger\.parquet$", 2),    # a map stage's ledger, data already written
    (r"/langid/.*\.json$", 2),              # a langid partition's marker (all its files written)
    (r"/dedup/sig-.*\.npz$", 1),            # the signatures of the global near-duplicate stage
    (r"/corpus/corpus-00000\.jsonl\.gz$", 1),  # the first public shard of the export
    (r"/manifest\.json$", 1),               # the very last file
]


def test_killed_at_chosen_points_resumes_to_identical_output(tmp_path, demo_run):
    recipe = copy_demo(tmp_path)
    out = tmp_path / "killed"
    for pattern, hit in KILL_POINTS:
        proc = subprocess.run([sys.executable, "-c", KILLER, pattern, str(hit), "run", str(recipe), "--out", str(out),
                               "--workers", "1", "--no-progress"], capture_output=True, cwd=tmp_path)
        assert proc.returncode == -signal.SIGKILL, (pattern, proc.stderr[-400:])
    run(recipe, out, workers=1)
    assert contract_files(out) == contract_files(demo_run.out)
    assert not list(out.rglob("*.tmp"))


def test_dask_engine_gives_byte_identical_output(tmp_path, demo_run):
    """The same recipe on a Dask LocalCluster of two worker processes (started and closed here)."""
    pytest.importorskip("distributed")
    recipe = copy_demo(tmp_path)
    result = run(recipe, tmp_path / "dask", engine="dask", workers=2)
    assert result.stage("dedup").computed >= 1
    assert contract_files(result.out) == contract_files(demo_run.out)


def test_workers_exit_between_steps_only_when_they_have_grown(monkeypatch):
    from corpuskit.engines import local

    assert 1 < local.private_mb(os.getpid()) < float("inf")
    assert local.private_mb(2**22 + 1) == float("inf")  # above Linux's largest pid: unreadable
    engine = local.LocalEngine(2)
    try:
        assert len(list(engine.imap(os.getpid, [(), (), ()]))) == 3
        pool = engine._pool
        monkeypatch.setattr(local, "REST_ABOVE_MB", 1 << 20)
        engine.rest()
        assert engine._pool is pool            # small workers stay
        monkeypatch.setattr(local, "REST_ABOVE_MB", 0)
        engine.rest()
        assert engine._pool is None            # grown workers exit; the next imap starts a pool
        assert len(list(engine.imap(os.getpid, [(), ()]))) == 2 and engine._pool is not None
        monkeypatch.setattr(local, "REST_ABOVE_MB", 1 << 20)
        engine.rest(idle=True)
        assert engine._pool is None            # before a long step in this process, all exit
    finally:
        engine.close()
