"""Spelling variants: mapping tables the team controls, applied to word tokens.

The table is a TSV of our own design (see ``corpuskit.variants_table``):
``variant<TAB>canonical<TAB>scope<TAB>note`` where scope is ``all``,
``dialect:NAME`` or ``source:ID``; a rules file holds ordered regular
expressions over graphemes with context; a protected list is never rewritten.
Tokens come from Unicode word segmentation (UAX #29, via the regex module).
Case and surrounding punctuation are preserved; ``original`` keeps the text
as it was.
"""
from __future__ import annotations

from collections import Counter
from dataclasses import dataclass, field

from ..ledger import LedgerRow, rewrite
from ..config import Checked, param
from ..storage import file_sha256, stable_hash
from .. import variants_table as vt
from .contract import Applied, Figures

VERSION = "4"


@dataclass(frozen=True)
class Params(Checked):
    table: str = param("", help="variant table (TSV: variant, canonical, scope, note)")
    rules: str = param("", help="ordered rewrite rules (TSV: pattern, replacement, scope, note)")
    protected: str = param("", help="words never rewritten, one per line")
    costs: str = param("", help="edit costs for variant discovery (TSV: from, to, cost), e.g. ɛ/e cheap")
    wordlist: str = param("", help="the language's word list for variant discovery: a Hunspell .dic (with its .aff "
                                   "beside it) or one word per line; pairs of two listed words are shown as likely "
                                   "minimal pairs, below keyboard stand-ins")


def _paths(recipe, params):
    return [(k, recipe.resolve(v, f"[stages.variants] {k}")) for k, v in
            (("table", params.table), ("rules", params.rules), ("protected", params.protected)) if v]


@dataclass
class VariantFigures(Figures):
    rewrites: Counter = field(default_factory=Counter)      # (rule, dialect) -> tokens rewritten


def context_key(recipe, params) -> str:
    return stable_hash({k: file_sha256(p) for k, p in _paths(recipe, params)}, list(recipe.corpus.protected_patterns))


def build_context(recipe, params, cache, key):
    paths = dict(_paths(recipe, params))
    return vt.Mapper(vt.load_table(paths["table"]) if "table" in paths else [],
                     vt.load_rules(paths["rules"]) if "rules" in paths else [],
                     vt.load_protected(paths["protected"]) if "protected" in paths else set(),
                     tuple(recipe.corpus.protected_patterns), recipe.corpus.language)


def apply(docs: list[dict], params: Params, mapper):
    rows: list[LedgerRow] = []
    figures = VariantFigures()
    if mapper is None or mapper.empty:
        return Applied(docs, rows, figures)
    for doc in docs:
        n_doc = 0
        for i, seg in enumerate(doc["segments"]):
            new, used = mapper.apply(seg, doc["dialect"], doc["source"])
            if used:
                doc["segments"][i] = new
                n_doc += sum(used.values())
                figures.rewrites.update({(rule, doc["dialect"] or "unknown"): n for rule, n in used.items()})
                rows.append(rewrite("variants", doc["id"], doc["seg_index"][i], "variant-rule",
                                    ", ".join(f"{rule} x{n}" for rule, n in sorted(used.items())), seg[:500]))
        doc["variants_applied"] = n_doc
    return Applied(docs, rows, figures)
