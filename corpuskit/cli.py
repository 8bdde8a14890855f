"""The command line: parse, validate, call the library, print.  Exit codes: 0 success,
1 a run that failed on data, 2 a usage or recipe error."""
from __future__ import annotations

import contextlib
import sys
import time
from pathlib import Path
from typing import Optional

import typer
from rich.console import Console
from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeElapsedColumn
from rich.markup import escape
from rich.table import Table

from .errors import CorpusError

app = typer.Typer(add_completion=False, no_args_is_help=True, pretty_exceptions_show_locals=False,
                  context_settings={"help_option_names": ["-h", "--help"]},
                  help="Turn scattered text in a mostly-spoken language into a clean, documented corpus.\n\n"
                       "Exit codes: 0 success; 1 a run that failed on its data, or a crash; 2 a mistake in the recipe "
                       "or the command line (the message names the key or file and the fix).")
err = Console(stderr=True)
out = Console(width=100 if not sys.stdout.isatty() else None)


def _version(value: bool) -> None:
    if value:
        from . import __version__
        out.print(f"corpuskit {__version__}", highlight=False, markup=False)
        raise typer.Exit(0)


@app.callback()
def _root(version: bool = typer.Option(False, "--version", callback=_version, is_eager=True,
                                       help="print the version and exit")) -> None:
    """corpuskit: one staged recipe from scattered sources to a documented corpus.

    Exit codes: 0 success; 1 a run that failed on its data or a crash; 2 a mistake in the recipe or
    the command line (the message names the key or file and the fix)."""


def _fail(exc: CorpusError) -> None:
    # Messages name recipe tables such as [[sources]] and [stages.dedup]: print them as text, not markup.
    err.print(f"[bold red]error:[/] {escape(str(exc))}", highlight=False, soft_wrap=True)
    raise typer.Exit(exc.exit_code)


def _progress_factory(enabled: bool):
    progress = Progress(TextColumn("{task.description:<20}"), BarColumn(), MofNCompleteColumn(),
                        TextColumn("{task.fields[docs]} docs, {task.fields[rate]} docs/s"), TimeElapsedColumn(),
                        console=err, disable=not enabled)

    @contextlib.contextmanager
    def stage(name: str, total: int):
        if total == 0:
            yield lambda n: None
            return
        started = time.perf_counter()
        task = progress.add_task(name, total=total, docs=0, rate="-")
        done = {"docs": 0}

        def tick(n: int):
            done["docs"] += n
            rate = done["docs"] / max(time.perf_counter() - started, 1e-6)
            progress.update(task, advance=1, docs=done["docs"], rate=f"{rate:,.0f}")
        yield tick

    return progress, stage


def _summary(result) -> None:
    """Counts per stage in a table that fits 80 columns, then what was removed and what was rewritten
    (per stage, by reason), per-source counts, the conservation check; warnings come last."""
    t = Table(title="Run summary", title_justify="left")
    for col in ("stage", "documents", "segments", "removed", "merged", "rewritten"):
        t.add_column(col, justify="left" if col == "stage" else "right")
    for s in result.stages:
        c = s.counts
        t.add_row(s.name, f"{c.docs_in} → {c.docs_out}", f"{c.segs_in} → {c.segs_out}",
                  str(sum(c.removed.values())), str(sum(c.merged.values())), str(sum(c.rewritten.values())))
    out.print(t)
    for title, attr in (("Removed", "removed"), ("Merged into a neighbour", "merged"), ("Rewritten", "rewritten")):
        lines = [f"  {s.name}: " + ", ".join(f"{k.split(':', 1)[1]} {v}" for k, v in sorted(getattr(s.counts, attr).items()))
                 for s in result.stages if getattr(s.counts, attr)]
        if lines:
            out.print(f"{title} (reason and count):", highlight=False, markup=False)
            for line in lines:
                out.print(line, highlight=False, markup=False, soft_wrap=True)
    sources = (result.manifest or {}).get("sources") or []
    if sources:
        ts = Table(title="Sources", title_justify="left")
        for col in ("source", "output", "documents in → kept", "segments in → kept"):
            ts.add_column(col, justify="left" if col in ("source", "output") else "right")
        for row in sources:
            ts.add_row(row["source"], row["output"], f"{row['documents in']} → {row['documents kept']}",
                       f"{row['segments in']} → {row['segments kept']}")
        out.print(ts)
    if result.conservation:
        cd, cs = result.conservation["documents"], result.conservation["segments"]
        ok = cd["holds"] and cs["holds"]
        out.print("Conservation " + ("[green]holds[/]" if ok else "[red]FAILS[/]") + f": documents {cd['in']} = "
                  f"{cd['kept']} kept + {cd['removed']} removed;\n  segments {cs['in']} = {cs['kept']} kept + "
                  f"{cs['removed']} removed ({cs.get('merged_into_neighbours', 0)} of them merged into a neighbour)", highlight=False)


def _warnings(warnings: list[str], limit: int = 20) -> None:
    """The closing warnings block: one line each, the first ``limit``, the rest counted."""
    if not warnings:
        return
    err.print(f"\n[bold yellow]Warnings ({len(warnings)})[/]", highlight=False)
    for w in warnings[:limit]:
        err.print(f"[yellow]-[/] {escape(w)}", highlight=False, soft_wrap=True)
    if len(warnings) > limit:
        err.print(f"... and {len(warnings) - limit} more in run.log", highlight=False)


def _where(result) -> None:
    o = result.out
    out.print(f"\nCorpus:     {o / 'corpus'}  (public shards and corpus.txt)", highlight=False, markup=False)
    if (o / "restricted").exists() and any((o / "restricted").iterdir()):
        out.print(f"Restricted: {o / 'restricted'}  (not for redistribution)", highlight=False, markup=False)
    out.print(f"Splits:     {o / 'splits'}", highlight=False, markup=False)
    out.print(f"Tokenizer:  {o / 'tokenizer'}", highlight=False, markup=False)
    out.print(f"Reports:    {o / 'reports'}  (open balance.html)", highlight=False, markup=False)
    out.print(f"Private:    {o / 'private'}  (ledger, review sheets, pseudonyms: never publish)", highlight=False, markup=False)
    out.print(f"Datasheet:  {o / 'datasheet.md'}", highlight=False, markup=False)
    out.print(f"Manifest:   {o / 'manifest.json'}  (leak audit passed; 'corpuskit pack' makes the archive to publish)",
              highlight=False, markup=False)


def _run(recipe: Path, out_dir: Path, engine: str, workers: Optional[int], scheduler: Optional[str],
         until: Optional[str], only: Optional[str], progress: bool) -> None:
    from .engines import make_engine
    from .recipe import load_recipe
    from .runner import OutputLock, Runner

    try:
        r = load_recipe(recipe)
        prog, stage = _progress_factory(progress and err.is_terminal)
        with OutputLock(out_dir), make_engine(engine, workers, scheduler) as eng, prog:
            result = Runner(r, out_dir, eng, stage).run(until=until, only=only)
    except CorpusError as exc:
        _fail(exc)
    _summary(result)
    if result.manifest:
        _where(result)
    _warnings(result.warnings)      # last, where they are seen


@app.command()
def run(recipe: Path = typer.Argument(..., help="the recipe TOML file"),
        out_dir: Path = typer.Option(None, "--out", help="output folder (default: OUT next to the recipe)"),
        engine: str = typer.Option("local", help="local or dask"),
        scheduler: Optional[str] = typer.Option(None, help="address of a Dask scheduler"),
        workers: Optional[int] = typer.Option(None, help="worker processes (default: the machine's cores)"),
        until: Optional[str] = typer.Option(None, help="stop after this stage"),
        only: Optional[str] = typer.Option(None, help="run only this stage (its inputs must be cached)"),
        progress: bool = typer.Option(True, help="show progress bars")) -> None:
    """Run every stage of RECIPE, reusing what is cached and still valid."""
    _run(recipe, out_dir or recipe.parent / "OUT", engine, workers, scheduler, until, only, progress)


@app.command()
def demo(out_dir: Path = typer.Option(Path("demo-output"), "--out", help="output folder"),
         progress: bool = typer.Option(True, help="show progress bars")) -> None:
    """Run the bundled demo recipe (an invented language and sources)."""
    recipe = _demo_recipe()
    out.print(f"Demo recipe: {recipe}", highlight=False, markup=False)
    _run(recipe, out_dir, "local", None, None, None, None, progress)


def _demo_recipe() -> Path:
    here = Path(__file__).resolve().parent.parent / "recipes" / "demo.toml"
    if here.exists():
        return here
    raise typer.BadParameter("the demo recipe is missing from this installation; run from a checkout.")


@app.command()
def check(recipe: Path = typer.Argument(..., help="the recipe TOML file")) -> None:
    """Validate RECIPE and its sources without running."""
    from .reports.datasheet import load_answers, unanswered
    from .recipe import load_recipe
    from .runner import Runner
    from .stages.registry import STAGES
    from .validate import validate

    try:
        r = load_recipe(recipe)
        files = {s.id: len(r.source_files(s)) for s in r.sources}
        notes = validate(r)
        runner = Runner(r, Path("/nonexistent"), None)
        runner.ingest_units()
        notes += runner.warnings
        for name, stage in STAGES.items():   # each stage's context key reads its tables and seeds
            stage.context_key(r, r.stages[name])
        open_q = unanswered(load_answers(r))
    except CorpusError as exc:
        _fail(exc)
    for note in notes:
        err.print(f"[yellow]warning:[/] {escape(note)}", highlight=False, soft_wrap=True)
    out.print(f"{recipe}: valid; {len(r.sources)} sources, "
              + ", ".join(f"{k} ({v} files)" for k, v in files.items()), highlight=False, markup=False)
    if open_q:
        out.print(f"Datasheet questions not answered yet ({len(open_q)}): " + ", ".join(open_q), highlight=False, markup=False)


@app.command()
def status(recipe: Path = typer.Argument(..., help="the recipe TOML file"),
           out_dir: Path = typer.Option(None, "--out", help="output folder")) -> None:
    """Show which stages are fresh or stale, and why."""
    from .recipe import load_recipe
    from .status import stage_status

    try:
        rows = stage_status(load_recipe(recipe), out_dir or recipe.parent / "OUT")
    except CorpusError as exc:
        _fail(exc)
    t = Table(title="Stage status", title_justify="left")
    for col in ("stage", "state", "why"):
        t.add_column(col)
    for name, state, why in rows:
        t.add_row(name, state, why)
    out.print(t)


@app.command()
def prune(out_dir: Path = typer.Option(..., "--out", help="output folder of a finished run")) -> None:
    """Delete cached results the last complete run did not use (earlier recipes, replaced partitions)."""
    from .runner import OutputLock
    from .storage import Cache

    try:
        with OutputLock(out_dir):
            files, size = Cache(out_dir).prune()
    except CorpusError as exc:
        _fail(exc)
    out.print(f"removed {files} cached files ({size / 2**20:.1f} MB) that the last complete run did not use",
              highlight=False, markup=False)


@app.command()
def pack(out_dir: Path = typer.Option(..., "--out", help="output folder of a finished run"),
         archive: Optional[Path] = typer.Option(None, help="archive to write (default: OUT/<corpus>-public.tar.gz)")) -> None:
    """Pack exactly the publishable files, as the manifest lists them, into one archive (only after the leak audit passed)."""
    from .pack import pack as pack_files

    try:
        path, n = pack_files(out_dir, archive)
    except CorpusError as exc:
        _fail(exc)
    out.print(f"packed {n} public files into {path}; restricted/ and private/ are not in it", highlight=False, markup=False)


@app.command()
def trace(doc_id: str = typer.Argument(..., help="a document id"),
          out_dir: Path = typer.Option(..., "--out", help="output folder of a finished run")) -> None:
    """Follow one document through every stage and print its fate."""
    from .trace import trace_document

    try:
        lines = trace_document(out_dir, doc_id)
    except CorpusError as exc:
        _fail(exc)
    for line in lines:
        out.print(line, highlight=False, markup=False)


@app.command()
def new(folder: Path = typer.Argument(..., help="folder for the new language project"),
        language: str = typer.Option("qaa", help="BCP 47 tag of the language"),
        name: str = typer.Option("my-corpus", help="a short name for the corpus")) -> None:
    """Start a language project: a commented recipe, folders for sources and seeds, datasheet answers."""
    from .project import new_project
    try:
        made = new_project(folder, language, name)
    except CorpusError as exc:
        _fail(exc)
    for p in made:
        out.print(f"created {p}", highlight=False, markup=False)
    out.print(f"Next: put your files under {folder / 'sources'}, edit {folder / 'recipe.toml'}, then run "
              f"'corpuskit check {folder / 'recipe.toml'}'.", highlight=False, markup=False)


langid_app = typer.Typer(help="Language identification between runs.", no_args_is_help=True)
app.add_typer(langid_app, name="langid")


@langid_app.command("evaluate")
def langid_evaluate(recipe: Path = typer.Argument(...),
                    out_dir: Path = typer.Option(None, "--out")) -> None:
    """Train the classifier from the seeds and print its cross-validated figures."""
    from .recipe import load_recipe
    from .stages import langid
    from .storage import Cache

    try:
        r = load_recipe(recipe)
        params = r.stages["langid"]
        cache = Cache(out_dir or recipe.parent / "OUT")
        key = langid.context_key(r, params)
        ctx = langid.build_context(r, params, cache, key)
        report = cache.get_json("langid", ctx["report"])
    except CorpusError as exc:
        _fail(exc)
    th = report["threshold"]
    out.print(f"{report.get('folds')}-fold cross-validation on {report.get('examples')} seed lines: accuracy "
              f"{report.get('accuracy', 0):.3f}, macro-F1 {report.get('macro_f1', 0):.3f}", highlight=False, markup=False)
    out.print(f"threshold on P(target) {th['value']:.3f}: precision {th.get('precision') or 0:.3f} (lower bound "
              f"{th.get('precision_lower_bound') or 0:.3f}), recall {th.get('recall') or 0:.3f}, target "
              f"{report.get('target_precision')}: {'reached' if th.get('reached') else 'NOT reached'}",
              highlight=False, markup=False)
    t = Table(title="Per label", title_justify="left")
    for col in ("label", "precision", "recall", "F1", "seed lines"):
        t.add_column(col, justify="left" if col == "label" else "right")
    for lab, v in sorted(report.get("per_class", {}).items()):
        t.add_row(lab, f"{v['precision']:.3f}", f"{v['recall']:.3f}", f"{v['f1']:.3f}", str(v["support"]))
    out.print(t)


variants_app = typer.Typer(help="Spelling variants: propose candidates, accept a reviewed sheet.", no_args_is_help=True)
app.add_typer(variants_app, name="variants")


@variants_app.command("propose")
def variants_propose(recipe: Path = typer.Argument(...),
                     out_dir: Path = typer.Option(None, "--out", help="the run's output folder (default: OUT next to the recipe)"),
                     sheet: Optional[Path] = typer.Option(None, help="review sheet to write (default: OUT/private/variant-review.csv)"),
                     top: int = typer.Option(200, help="candidates to propose")) -> None:
    """Propose ranked variant candidates from the corpus into a review sheet."""
    from .api import propose_variants
    from .recipe import load_recipe

    out_dir = out_dir or recipe.parent / "OUT"
    sheet = sheet or out_dir / "private" / "variant-review.csv"
    try:
        sheet.parent.mkdir(parents=True, exist_ok=True)
        n = propose_variants(load_recipe(recipe), out_dir, sheet, top)
    except CorpusError as exc:
        _fail(exc)
    out.print(f"wrote {n} candidates to {sheet}; mark each row accept or reject, then run 'corpuskit variants accept'.",
              highlight=False, markup=False)


@variants_app.command("accept")
def variants_accept(sheet: Path = typer.Argument(..., help="the reviewed sheet"),
                    table: Path = typer.Option(..., help="variant table to update"),
                    rejected: Path = typer.Option(None, help="file remembering rejected pairs"),
                    recipe: Optional[Path] = typer.Option(None, help="the recipe, to check that it uses this table")) -> None:
    """Read a reviewed sheet back: accepted pairs into the table, rejected pairs remembered."""
    from .discovery import accept_sheet
    try:
        added, refused = accept_sheet(sheet, table, rejected or table.with_suffix(".rejected.tsv"))
        used = _recipe_uses_table(recipe, table) if recipe else None
    except CorpusError as exc:
        _fail(exc)
    out.print(f"{added} pairs added to {table}; {refused} rejected pairs remembered.", highlight=False, markup=False)
    if used is False:
        err.print(f"[yellow]note:[/] {escape(str(recipe))} does not use this table, so runs will not apply it; add "
                  f"[stages.variants] table = {escape(repr(str(table)))} (a path relative to the recipe).",
                  highlight=False, soft_wrap=True)
    elif used is None:
        out.print("Runs apply the table when the recipe's [stages.variants] table names it (give --recipe to check).",
                  highlight=False, markup=False)


def _recipe_uses_table(recipe_path: Path, table: Path) -> bool:
    from .recipe import load_recipe
    r = load_recipe(recipe_path)
    named = r.stages["variants"].table
    return bool(named) and r.resolve(named, "[stages.variants] table").resolve() == table.resolve()


def main() -> None:
    try:
        app()
    except KeyboardInterrupt:  # pragma: no cover
        err.print("interrupted; finished partitions are kept and the next run resumes.")
        sys.exit(130)
    except CorpusError as exc:   # a user's mistake raised outside a command's own handling
        err.print(f"[bold red]error:[/] {escape(str(exc))}", highlight=False, soft_wrap=True)
        sys.exit(exc.exit_code)



if __name__ == "__main__":
    main()
