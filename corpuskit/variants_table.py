"""Variant tables, rewrite rules and protected words, and their application to word tokens.

Table (TSV, UTF-8, first line a header)::

    # corpuskit variant table 1
    variant	canonical	scope	note
    ngɔ	ŋɔ	all	ASCII stand-in for eng
    kele	kɛlɛ	dialect:river	river spelling

Rules (TSV): ``pattern<TAB>replacement<TAB>scope<TAB>note``; patterns are
regular expressions applied in order to each word token (graphemes with
``\\X``, context with look-arounds).
"""
from __future__ import annotations

from collections import Counter
from dataclasses import dataclass, field
from pathlib import Path

import regex

from .casing import fold_case
from .errors import RecipeError
from .sheets import neutralise_cell, restore_cell, write_sheet  # noqa: F401 (re-exported)

__all__ = ["VariantEntry", "Rule", "Mapper", "load_table", "load_rules", "load_protected", "tokens", "match_case",
           "TABLE_HEADER", "neutralise_cell", "restore_cell", "write_sheet", "type_counts"]

TABLE_HEADER = "# corpuskit variant table 1"
RULES_HEADER = "# corpuskit variant rules 1"
_WORD = regex.compile(r"\w", regex.V1)


@dataclass(frozen=True)
class VariantEntry:
    variant: str
    canonical: str
    scope: str = "all"
    note: str = ""


@dataclass(frozen=True)
class Rule:
    pattern: str
    replacement: str
    scope: str = "all"
    note: str = ""
    line: int = 0


def _rows(path: Path, header: str, columns: int) -> list[tuple[int, list[str]]]:
    try:
        lines = Path(path).read_text(encoding="utf-8").splitlines()
    except FileNotFoundError:
        raise RecipeError(f"{path}: file not found; check the path in [stages.variants].") from None
    if not lines or lines[0].strip() != header:
        raise RecipeError(f"{path} line 1: expected the header '{header}'; add it as the first line.")
    out = []
    for n, line in enumerate(lines[1:], 2):
        if not line.strip() or line.startswith("#"):
            continue
        cols = line.split("\t")
        if n == 2 and cols[0] in ("variant", "pattern"):
            continue
        if len(cols) < 2:
            raise RecipeError(f"{path} line {n}: expected at least {columns} tab-separated columns; separate them with tabs.")
        out.append((n, cols + [""] * (4 - len(cols))))
    return out


def _check_scope(scope: str, where: str) -> str:
    scope = scope or "all"
    if scope != "all" and not scope.startswith(("dialect:", "source:")):
        raise RecipeError(f"{where}: scope '{scope}' is not 'all', 'dialect:NAME' or 'source:ID'.")
    return scope


def load_table(path: Path) -> list[VariantEntry]:
    return [VariantEntry(c[0].strip(), c[1].strip(), _check_scope(c[2].strip(), f"{path} line {n}"), c[3].strip())
            for n, c in _rows(path, TABLE_HEADER, 2)]


def load_rules(path: Path) -> list[Rule]:
    rules = []
    for n, c in _rows(path, RULES_HEADER, 2):
        try:
            regex.compile(c[0])
        except regex.error as exc:
            raise RecipeError(f"{path} line {n}: the pattern is not a valid regular expression ({exc}).") from None
        rules.append(Rule(c[0], c[1], _check_scope(c[2].strip(), f"{path} line {n}"), c[3].strip(), n))
    return rules


def load_protected(path: Path) -> set[str]:
    return {line.strip().casefold() for line in Path(path).read_text(encoding="utf-8").splitlines()
            if line.strip() and not line.startswith("#")}


def tokens(text: str) -> list[str]:
    """UAX #29 word segmentation, keeping every piece so that ''.join(tokens) == text.

    >>> tokens("Kɛlɛ, ba’a!")
    ['Kɛlɛ', ',', ' ', 'ba’a', '!']
    """
    return [t for t in regex.split(r"(?w)\b", text) if t]


_JOINERS = "\N{ZERO WIDTH NON-JOINER}\N{ZERO WIDTH JOINER}"


def _drops_joiner(token: str, canonical: str) -> bool:
    return any(j in token and j not in canonical for j in _JOINERS)


def match_case(source: str, target: str) -> str:
    """Give ``target`` the casing pattern of ``source`` (lower, Capitalised or UPPER)."""
    if source.isupper() and len(source) > 1:
        return target.upper()
    if source[:1].isupper():
        return target[:1].upper() + target[1:]
    return target


@dataclass
class Mapper:
    entries: list[VariantEntry]
    rules: list[Rule]
    protected: set[str] = field(default_factory=set)
    protected_patterns: tuple = ()          # extra protected-span patterns from the recipe
    language: str = ""                      # folds case as the language does (Turkish İ/ı)

    def __post_init__(self):
        self._compiled = [(r, regex.compile(r.pattern)) for r in self.rules]
        self._by_variant: dict[str, list[VariantEntry]] = {}
        for e in self.entries:
            self._by_variant.setdefault(fold_case(e.variant, self.language), []).append(e)
        self.protected = {fold_case(w, self.language) for w in self.protected}

    @property
    def empty(self) -> bool:
        return not self.entries and not self.rules

    @staticmethod
    def _applies(scope: str, dialect: str | None, source: str | None) -> bool:
        return scope == "all" or scope == f"dialect:{dialect}" or scope == f"source:{source}"

    def map_token(self, tok: str, dialect: str | None, source: str | None) -> tuple[str, str | None]:
        low = fold_case(tok, self.language)
        if not _WORD.search(tok) or low in self.protected:
            return tok, None
        for e in self._by_variant.get(low, ()):
            if _drops_joiner(tok, e.canonical):   # a joiner is spelling, never removed by a variant rule
                continue
            if self._applies(e.scope, dialect, source):
                return match_case(tok, e.canonical), f"table:{e.variant}→{e.canonical}"
        for r, pat in self._compiled:
            if self._applies(r.scope, dialect, source):
                new = pat.sub(r.replacement, low)
                if new != low:
                    return match_case(tok, new), f"rule:{r.line}:{r.pattern}"
        return tok, None

    def apply(self, text: str, dialect: str | None = None, source: str | None = None) -> tuple[str, Counter]:
        """The text with variant tokens mapped, outside protected spans; how often each entry or rule fired."""
        from .protect import pieces
        used: Counter = Counter()
        out = []
        for protected, piece in pieces(text, self.protected_patterns):
            if protected:
                out.append(piece)
                continue
            for tok in tokens(piece):
                new, how = self.map_token(tok, dialect, source)
                if how:
                    used[how] += 1
                out.append(new)
        return "".join(out), used


def type_counts(texts) -> Counter:
    c: Counter = Counter()
    for t in texts:
        c.update(tok.casefold() for tok in tokens(t) if _WORD.search(tok))
    return c
