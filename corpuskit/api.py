"""A small Python API for notebooks: run a recipe, load the corpus, ledger or a report table."""
from __future__ import annotations

import gzip
import json
from pathlib import Path

import pandas as pd

from .engines import make_engine
from .recipe import load_recipe
from .runner import OutputLock, Runner, RunResult

__all__ = ["run", "load_corpus", "load_ledger", "load_report"]


def run(recipe_path, out, engine: str = "local", workers: int | None = None, until: str | None = None,
        only: str | None = None, scheduler: str | None = None) -> RunResult:
    """Run a recipe into ``out`` and return the per-stage counts."""
    recipe = load_recipe(recipe_path)
    out = Path(out)
    with OutputLock(out), make_engine(engine, workers, scheduler) as eng:
        return Runner(recipe, out, eng).run(until=until, only=only)


def _jsonl(paths) -> pd.DataFrame:
    rows = []
    for p in sorted(paths):
        with gzip.open(p, "rt", encoding="utf-8") as f:
            rows.extend(json.loads(line) for line in f)
    return pd.DataFrame(rows)


def load_corpus(out, split: str | None = None, restricted: bool = False) -> pd.DataFrame:
    out = Path(out)
    if split:
        return _jsonl([out / "splits" / f"{split}.jsonl.gz"])
    return _jsonl((out / ("restricted" if restricted else "corpus")).glob("*.jsonl.gz"))


def load_ledger(out) -> pd.DataFrame:
    return _jsonl([Path(out) / "private" / "ledger.jsonl.gz"])


def load_report(out, name: str) -> pd.DataFrame:
    """A CSV table from ``reports/`` by name, e.g. ``balance-dialect`` or ``duplicate-clusters``."""
    return pd.read_csv(Path(out) / "reports" / f"{name}.csv")
