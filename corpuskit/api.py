"""A small Python API for notebooks and scripts: run a recipe, load the corpus, ledger or a report table."""
from __future__ import annotations

import gzip
import json
import sys
from pathlib import Path

import pandas as pd

from .engines import make_engine
from .errors import RecipeError
from .recipe import load_recipe
from .runner import OutputLock, Runner, RunResult

__all__ = ["run", "propose_variants", "load_corpus", "load_ledger", "load_report"]


def run(recipe_path, out, engine: str = "local", workers: int | None = None, until: str | None = None,
        only: str | None = None, scheduler: str | None = None) -> RunResult:
    """Run a recipe into ``out`` and return the per-stage counts."""
    if _reimported_script():
        raise RecipeError("corpuskit.run() was called while a worker process imported your script; put the call "
                          "under `if __name__ == \"__main__\":` (or run it from a notebook or the command line).")
    recipe = load_recipe(recipe_path)
    out = Path(out)
    with OutputLock(out), make_engine(engine, workers, scheduler) as eng:
        return Runner(recipe, out, eng).run(until=until, only=only)


def propose_variants(recipe, out: Path, sheet: Path, top: int) -> int:
    """Run the recipe up to the quality filter (cached work is reused), collect the corpus's
    word types and write the ranked candidates to a review sheet.  Returns the number written."""
    from .discovery import (SHEET_COLUMNS, CostTable, WordList, collect, load_costs, load_rejected,
                            load_rejected_forms, propose, rejected_path, sheet_rows)
    from .casing import fold_case
    from .variants_table import load_protected, load_table, write_sheet

    params = recipe.stages["variants"]
    costs = load_costs(recipe.resolve(params.costs, "[stages.variants] costs")) if params.costs else CostTable()
    exclude: set[tuple[str, str]] = set()
    rejected_forms: dict[str, int] = {}
    if params.table:
        table = recipe.resolve(params.table, "[stages.variants] table")
        if table.exists():
            exclude |= {(e.variant.casefold(), e.canonical.casefold()) for e in load_table(table)}
        exclude |= load_rejected(rejected_path(table))
        rejected_forms = load_rejected_forms(rejected_path(table))
    protected = load_protected(recipe.resolve(params.protected, "[stages.variants] protected")) if params.protected else set()
    wordlist = WordList(recipe.resolve(params.wordlist, "[stages.variants] wordlist")) if params.wordlist else None
    with OutputLock(out), make_engine("local", None, None) as engine:
        runner = Runner(recipe, Path(out), engine)
        runner.run(until="filter")
        docs = [d for key in runner.last_keys["filter"] for d in runner.cache.read_docs("filter", key)]
    language = recipe.corpus.language
    stats, contexts = collect(docs, language=language)
    candidates = propose(stats, contexts, costs, recipe.corpus.letters, top, exclude, language=language,
                         wordlist=wordlist, protected={fold_case(w, language) for w in protected},
                         rejected_forms=rejected_forms)
    write_sheet(Path(sheet), sheet_rows(candidates, stats), SHEET_COLUMNS)
    return len(candidates)


def _reimported_script() -> bool:
    """Whether this call comes from a script that a worker process is importing again
    (multiprocessing's forkserver and spawn run a script's top level as ``__mp_main__``)."""
    frame = sys._getframe(1)
    while frame is not None:
        if frame.f_globals.get("__name__") == "__mp_main__":
            return True
        frame = frame.f_back
    return False


def _output(out) -> Path:
    out = Path(out)
    if not (out / "manifest.json").exists() and not (out / "corpus").is_dir():
        raise RecipeError(f"{out}: not the output folder of a finished corpuskit run (no manifest.json, no corpus/); "
                          "give the folder passed as --out.")
    return out


def _jsonl(paths, text: bool = False) -> pd.DataFrame:
    rows = []
    for p in sorted(paths):
        with gzip.open(p, "rt", encoding="utf-8", newline="\n") as f:
            rows.extend(json.loads(line) for line in f)
    df = pd.DataFrame(rows)
    if text and "segments" in df:
        df["text"] = df["segments"].map("\n".join)     # the document as plain text, one segment per line
    return df


RESTRICTED_CHOICES = ("exclude", "include", "only")


def load_corpus(out, split: str | None = None, restricted: str | bool = "exclude") -> pd.DataFrame:
    """The kept documents as a table (a ``text`` column beside ``segments`` and the provenance).

    ``split``: "train", "dev" or "test" (public documents only).  ``restricted``: which documents
    whose consent or licence forbids redistribution come along: "exclude" (the default: the public
    corpus), "include" (public and restricted) or "only" (restricted only; ``True`` means this too).
    """
    out = _output(out)
    choice = {False: "exclude", True: "only"}.get(restricted, restricted) if isinstance(restricted, bool) else restricted
    if choice not in RESTRICTED_CHOICES:
        raise RecipeError(f"restricted = {restricted!r}; use one of {', '.join(RESTRICTED_CHOICES)}.")
    if split:
        return _jsonl([out / "splits" / f"{split}.jsonl.gz"], text=True)
    folders = {"exclude": ["corpus"], "include": ["corpus", "restricted"], "only": ["restricted"]}[choice]
    return _jsonl([p for folder in folders for p in (out / folder).glob("*.jsonl.gz")], text=True)


def load_ledger(out) -> pd.DataFrame:
    return _jsonl([_output(out) / "private" / "ledger.jsonl.gz"])


def load_report(out, name: str) -> pd.DataFrame:
    """A CSV table from ``reports/`` by name, e.g. ``balance-dialect`` or ``duplicate-clusters``."""
    path = _output(out) / "reports" / f"{name}.csv"
    if not path.exists():
        known = sorted(p.stem for p in path.parent.glob("*.csv"))
        raise RecipeError(f"{path}: no such report; known: {', '.join(known)}.")
    return pd.read_csv(path)
