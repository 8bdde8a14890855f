"""What a new user meets first: the command line, the Python API, the balance page's summary."""
import pytest
from typer.testing import CliRunner

from corpuskit.api import load_corpus, load_report
from corpuskit.cli import app
from corpuskit.errors import RecipeError

from .conftest import ROOT


def test_version_and_short_help():
    from corpuskit import __version__
    r = CliRunner().invoke(app, ["--version"])
    assert r.exit_code == 0 and r.output.strip() == f"corpuskit {__version__}"
    r = CliRunner().invoke(app, ["-h"])
    assert r.exit_code == 0 and "Exit codes: 0 success" in " ".join(r.output.replace("│", " ").split())
    assert CliRunner().invoke(app, ["run", "-h"]).exit_code == 0


def test_user_mistakes_exit_2_with_a_sentence(tmp_path):
    missing = CliRunner().invoke(app, ["check", str(tmp_path / "nope.toml")])
    assert missing.exit_code == 2 and "no such recipe file" in missing.output
    wrong_stage = CliRunner().invoke(app, ["run", str(ROOT / "recipes" / "demo.toml"), "--out", str(tmp_path / "o"),
                                           "--until", "dedupe"])
    assert wrong_stage.exit_code == 2 and "did you mean 'dedup'" in wrong_stage.output
    assert CliRunner().invoke(app, ["run", "--workers", "x"]).exit_code == 2


def test_langid_evaluate_prints_a_table(demo_run):
    r = CliRunner().invoke(app, ["langid", "evaluate", str(ROOT / "recipes" / "demo.toml"), "--out", str(demo_run.out)])
    assert r.exit_code == 0, r.output
    assert "5-fold cross-validation on 1500 seed lines" in r.output and "Per label" in r.output
    assert "qnv-x-hill" in r.output and "{" not in r.output


def test_run_summary_fits_80_columns(demo_run, tmp_path):
    import os
    r = CliRunner().invoke(app, ["run", str(ROOT / "recipes" / "demo.toml"), "--out", str(demo_run.out), "--no-progress"],
                           env={**os.environ, "COLUMNS": "80"})
    assert r.exit_code == 0
    table = r.output.split("Removed (reason")[0]
    assert max(len(line) for line in table.splitlines()) <= 80
    assert "Rewritten (reason and count)" in r.output and "personal-data 19" in r.output
    assert r.output.rfind("Warnings (") > r.output.rfind("Manifest:")     # warnings last


def test_api_refuses_a_folder_that_is_not_an_output(tmp_path):
    with pytest.raises(RecipeError, match="not the output folder of a finished corpuskit run"):
        load_corpus(tmp_path)


def test_api_text_column_and_restricted_choice(demo_run):
    public = load_corpus(demo_run.out)
    assert public.text.iloc[0] == "\n".join(public.segments.iloc[0])
    only = load_corpus(demo_run.out, restricted="only")
    both = load_corpus(demo_run.out, restricted="include")
    assert set(only.source) == {"group-chat"} and len(both) == len(public) + len(only)
    with pytest.raises(RecipeError, match="use one of exclude, include, only"):
        load_corpus(demo_run.out, restricted="yes")


def test_a_script_without_a_main_guard_gets_a_message(tmp_path):
    import subprocess
    import sys
    script = tmp_path / "go.py"
    script.write_text("import corpuskit\n"
                      f"corpuskit.run({str(ROOT / 'recipes' / 'demo.toml')!r}, {str(tmp_path / 'out')!r}, workers=2, "
                      "until='clean')\nprint('finished')\n", "utf-8")
    r = subprocess.run([sys.executable, str(script)], capture_output=True, text=True, timeout=300)
    assert r.returncode == 1 and "if __name__ == \"__main__\":" in r.stderr


def test_documents_without_a_dialect_keep_their_natural_share():
    from types import SimpleNamespace
    from corpuskit.reports.balance import Accumulator, write_report
    import tempfile
    from pathlib import Path
    acc = Accumulator()
    for dialect, n in (("a", 90), ("b", 10), (None, 100)):
        for i in range(n):
            acc.add({"segments": ["kema tabu sɛli"], "source": "s", "dialect": dialect, "medium": "web", "script": "Latn"})
    recipe = SimpleNamespace(corpus=SimpleNamespace(name="t", language="qnv"), sources=[])
    params = SimpleNamespace(alpha=0.3, dialect_floor=0.0, medium_floor=0.0)
    with tempfile.TemporaryDirectory() as tmp:
        bal = write_report(Path(tmp), acc, params, recipe)
    shares = {r["dialect"]: r["sampling_share"] for r in bal["sampling"]}
    assert shares["unknown"] == pytest.approx(0.5) and sum(shares.values()) == pytest.approx(1.0)
    assert shares["b"] > 0.05 * 1.5          # the small dialect is sampled up, not the unknown one
    assert any("without a dialect" in w for w in bal["warnings"])


def test_balance_page_leads_with_a_summary(demo_run):
    page = (demo_run.out / "reports" / "balance.html").read_text("utf-8")
    summary = page.split("<section id='summary'>")[1].split("</section>")[0]
    assert "largest <b>river</b> (71% of documents, 41% of words)" in summary
    assert "documents" in summary and "Warnings of this run" in summary and "equally large dialects" in summary
    assert "(restricted)" in page and "documents_share" not in page and "Documents and words per dialect" in page
    assert not load_report(demo_run.out, "balance-dialect").empty


def test_moving_the_folder_of_the_sources_keeps_ids_and_splits(tmp_path):
    """Document ids are the path below each source's own folder: renaming the folder that holds
    the sources changes no id and moves no document between train, dev and test."""
    import shutil
    from corpuskit.api import run
    from .conftest import copy_demo
    recipe = copy_demo(tmp_path)
    first = run(recipe, tmp_path / "a", workers=1)
    before = {r.id: r.split for r in load_corpus(first.out).itertuples()}
    shutil.move(tmp_path / "sample_texts", tmp_path / "collected-2025")
    recipe.write_text(recipe.read_text("utf-8").replace("../sample_texts/", "../collected-2025/"), "utf-8")
    second = run(recipe, tmp_path / "b", workers=1)
    after = {r.id: r.split for r in load_corpus(second.out).itertuples()}
    assert before == after and len(before) > 100


def test_variants_accept_says_when_the_recipe_will_not_use_the_table(tmp_path):
    from .conftest import copy_demo
    recipe = copy_demo(tmp_path)
    sheet = tmp_path / "sheet.csv"
    sheet.write_text("decision,variant,canonical,scope\naccept,kema,kɛma,all\n", "utf-8")
    other = tmp_path / "other-table.tsv"
    r = CliRunner().invoke(app, ["variants", "accept", str(sheet), "--table", str(other), "--recipe", str(recipe)])
    assert r.exit_code == 0 and "does not use this table" in " ".join(r.output.split())
    used = recipe.parent / "tables" / "demo-variants.tsv"
    r = CliRunner().invoke(app, ["variants", "accept", str(sheet), "--table", str(used), "--recipe", str(recipe)])
    assert r.exit_code == 0 and "does not use" not in r.output
