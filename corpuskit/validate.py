"""Everything a run would fail on, checked before any stage: ``corpuskit check`` and every run.

Files the recipe names (seed sets, transliteration, variant and cost tables, a supplied model,
the datasheet answers) must exist and parse; seed labels must name the target language; CSV
sources must have their text column.  Each problem is a RecipeError naming the file or key and
the fix (exit code 2).
"""
from __future__ import annotations

import csv
from pathlib import Path

from .errors import RecipeError

__all__ = ["validate"]

MIN_SEED_LINES = 20   # a label with fewer hand-checked lines cannot be told apart (see stages/langid.py)


def validate(recipe) -> list[str]:
    """Raise on the first problem; return notes (warnings) for what is odd but allowed."""
    notes: list[str] = []
    _tables(recipe)
    notes += _seeds(recipe)
    _answers(recipe)
    notes += _csv_headers(recipe)
    notes += _script_notes(recipe)
    return notes


def _script_notes(recipe) -> list[str]:
    """A target script Unicode encodes no characters for; letters outside the target script."""
    import regex
    from .scripts import unicode_scripts
    target = recipe.corpus.target_script
    scripts = unicode_scripts(target)
    if not scripts:
        return [f"[corpus] target_script = '{target}': Unicode encodes no characters for this script, so no text can "
                "be in it; check the code"]
    outside = [c for c in recipe.corpus.letters if c.isalpha()
               and not any(regex.match(r"\p{scx=%s}" % s, c) for s in scripts)]
    if outside:
        return [f"[corpus] letters has {len(outside)} letters outside the target script {target} "
                f"({''.join(outside[:10])}); check letters and target_script"]
    return []


def _exists(recipe, value: str, key: str) -> Path:
    path = recipe.resolve(value, key)
    if not path.is_file():
        raise RecipeError(f"{recipe.path}: {key} = '{value}': no such file; check the path (relative to the recipe).")
    return path


def _tables(recipe) -> None:
    from . import variants_table as vt
    from .discovery import load_costs
    from . import transliterate as translit
    from .stages.script import same_script

    for label, value in recipe.stages["script"].tables.items():
        translit.load_table(_exists(recipe, value, f"[stages.script] tables.{label}"))
    for s in recipe.sources:
        if s.transliterate:
            translit.load_table(_exists(recipe, s.transliterate, f"[[sources]] id = '{s.id}' key 'transliterate'"))
        elif s.script and not same_script(s.script, recipe.corpus.target_script) and s.script not in recipe.stages["script"].tables:
            raise RecipeError(f"{recipe.path}: [[sources]] id = '{s.id}' is written in {s.script}, not the target script "
                              f"{recipe.corpus.target_script}, and [stages.script] tables has no {s.script} table; add "
                              f"tables = {{ {s.script} = 'tables/....tsv' }}, or give the source a transliterate table.")
    v = recipe.stages["variants"]
    for key, value, load in (("table", v.table, vt.load_table), ("rules", v.rules, vt.load_rules),
                             ("protected", v.protected, vt.load_protected), ("costs", v.costs, load_costs),
                             ("wordlist", v.wordlist, lambda p: p)):
        if value:
            load(_exists(recipe, value, f"[stages.variants] {key}"))


def _seeds(recipe) -> list[str]:
    from .stages.langid import is_target
    params = recipe.stages["langid"]
    if params.model:
        _exists(recipe, params.model, "[stages.langid] model")
    if not params.seeds and not params.model:
        raise RecipeError(f"{recipe.path}: [stages.langid] needs seeds (files of hand-checked lines per label) or a "
                          "model; add seeds = {<language> = 'seeds/...txt', other = '...'}.")
    notes = []
    for label, value in sorted(params.seeds.items()):
        path = _exists(recipe, value, f"[stages.langid] seeds.{label}")
        try:
            lines = [x for x in path.read_text(encoding="utf-8").splitlines() if x.strip() and not x.startswith("#")]
        except UnicodeDecodeError as exc:
            raise RecipeError(f"{path}: seed file is not UTF-8 (byte {exc.start}); save it as UTF-8.") from None
        if len(lines) < MIN_SEED_LINES:
            raise RecipeError(f"{recipe.path}: [stages.langid] seeds.{label} has {len(lines)} lines; each label needs at "
                              f"least {MIN_SEED_LINES} hand-checked lines to be told apart (a few hundred is better): add "
                              "lines, or merge the label into another.")
    if params.seeds and not params.model and not any(is_target(lab, recipe.corpus.language) for lab in params.seeds):
        raise RecipeError(f"{recipe.path}: [stages.langid] seeds has no label for the target language "
                          f"'{recipe.corpus.language}' (labels: {', '.join(sorted(params.seeds))}); name one seed set "
                          f"'{recipe.corpus.language}' or '{recipe.corpus.language}-x-<dialect>'.")
    return notes


def _answers(recipe) -> None:
    from .reports.datasheet import load_answers
    load_answers(recipe)


def _csv_headers(recipe) -> list[str]:
    """Each CSV source's first file must have the text column under its delimiter."""
    from .readers.csvsheet import sniff_delimiter
    notes = []
    for s in recipe.sources:
        if s.format != "csv":
            continue
        files = recipe.source_files(s)
        first = files[0]
        try:
            with open(first, encoding="utf-8-sig", errors="replace", newline="") as f:
                header_line = f.readline().rstrip("\r\n")
        except OSError as exc:
            raise RecipeError(f"{first}: cannot read ({exc.strerror}).") from None
        text_column = s.options.get("text_column", "text")
        declared = s.options.get("delimiter", ",")
        delim = "\t" if declared in ("\\t", "tab") else declared
        if text_column in next(csv.reader([header_line], delimiter=delim), []):
            continue
        found = sniff_delimiter(header_line, text_column)
        if found is None:
            raise RecipeError(f"{first} line 1: no column '{text_column}' in the header ({header_line[:120]}); set "
                              f"[[sources]] id = '{s.id}' options.text_column to the column holding the text.")
        notes.append(f"{first.name}: the header is separated by {found!r}, not {declared!r}; reading it with {found!r} "
                     f"(set options.delimiter = {found!r} in source '{s.id}' to silence this)")
    return notes
