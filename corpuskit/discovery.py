"""Spelling-variant discovery: ranked candidate pairs with evidence, and the review loop.

Candidates come from the corpus itself.  Word types (UAX #29 tokens, case-folded)
are blocked by a folding key (tone and other marks stripped, the language's cheap
letter alternations folded, doubled letters collapsed) and by the key's one-deletion
neighbourhood (symmetric deletion: one substitution, insertion or deletion apart).
Each pair is then scored on

* a weighted grapheme edit distance (Damerau-Levenshtein over extended grapheme
  clusters) with a per-language cost table: a dropped diacritic or a known letter
  alternation (ɛ/e, ŋ/ng, an OCR confusion) is cheap, other edits cost 1;
* the similarity of the two words' contexts: cosine of positive pointwise mutual
  information (PPMI) vectors of neighbouring words, from the corpus;
* how lopsided the two forms' frequencies are (a slip is rare beside its canonical
  form; two distinct words need not be) and how well attested the pair is;
* whether one form is the other typed on a plain keyboard (all ASCII, special
  letters and marks replaced by the cost table's ASCII sides).

A pair whose difference needs a full-cost edit and whose two forms are used by
disjoint sets of dialects is shown as a dialect difference, not an error.

The review sheet is a CSV that opens safely in a spreadsheet; ``accept_sheet``
reads it back into the variant table and remembers rejected pairs, which are
never proposed again.
"""
from __future__ import annotations

import csv
import math
import unicodedata
from collections import Counter, defaultdict
from dataclasses import dataclass, field
from pathlib import Path

import regex

from .casing import fold_case
from .words import needs_dictionary, words as split_words
from .errors import DataError, RecipeError
from .variants_table import TABLE_HEADER, load_table, restore_cell, tokens

__all__ = ["CostTable", "TypeStats", "Candidate", "collect", "propose", "weighted_distance", "fold_key",
           "load_costs", "accept_sheet", "load_rejected", "rejected_path", "sheet_rows",
           "ppmi_vectors", "cosine", "candidate_pairs", "SHEET_COLUMNS", "COSTS_HEADER"]

COSTS_HEADER = "# corpuskit variant costs 1"
_GRAPHEME = regex.compile(r"\X")
_WORDISH = regex.compile(r"\w", regex.V1)
MARK_COST, DOUBLE_COST, TRANSPOSE_COST = 0.2, 0.3, 0.8
MAX_DISTANCE = 1.5
MAX_BUCKET = 60  # deletion buckets larger than this (short, common shapes) are skipped

SHEET_COLUMNS = ["decision", "variant", "canonical", "scope", "kind", "score", "distance", "context_similarity",
                 "variant_count", "canonical_count", "variant_dialects", "canonical_dialects", "variant_sources",
                 "canonical_sources", "variant_examples", "canonical_examples", "why"]


# -- cost table and folding ---------------------------------------------------------------------

@dataclass
class CostTable:
    """Cheap edits for one language: (a, b, cost) alternations, either direction."""
    alternations: list[tuple[str, str, float]] = field(default_factory=list)
    mark_cost: float = MARK_COST
    double_cost: float = DOUBLE_COST

    def fold_pairs(self) -> list[tuple[str, str]]:
        """Alternations folded together in the blocking key: every cheap one, longest first."""
        pairs = [(a, b) if len(a) >= len(b) else (b, a) for a, b, c in self.alternations if c <= 0.5]
        return sorted(pairs, key=lambda p: -len(p[0]))


def load_costs(path: Path) -> CostTable:
    """A TSV: header line, then ``from<TAB>to<TAB>cost[<TAB>note]``."""
    lines = Path(path).read_text(encoding="utf-8").splitlines()
    if not lines or lines[0].strip() != COSTS_HEADER:
        raise RecipeError(f"{path} line 1: expected the header '{COSTS_HEADER}'; add it as the first line.")
    table = CostTable()
    for n, line in enumerate(lines[1:], 2):
        if not line.strip() or line.startswith("#"):
            continue
        cols = line.split("\t")
        try:
            table.alternations.append((unicodedata.normalize("NFC", cols[0].casefold()),
                                       unicodedata.normalize("NFC", cols[1].casefold()), float(cols[2])))
        except (IndexError, ValueError):
            raise RecipeError(f"{path} line {n}: expected 'from<TAB>to<TAB>cost' with a number for the cost.") from None
    return table


def strip_marks(text: str) -> str:
    return unicodedata.normalize("NFC", "".join(c for c in unicodedata.normalize("NFD", text)
                                                if not unicodedata.combining(c)))


def fold_key(word: str, costs: CostTable) -> str:
    """Marks stripped, cheap alternations folded, doubled letters collapsed.

    >>> fold_key("ŋɔ́ɔ", CostTable([("ŋ", "ng", 0.3), ("ɔ", "o", 0.3)]))
    'ngo'
    """
    key = strip_marks(word.casefold())
    for a, b in costs.fold_pairs():
        key = key.replace(strip_marks(a), strip_marks(b))
    return regex.sub(r"(.)\1+", r"\1", key)


def graphemes(word: str) -> list[str]:
    return _GRAPHEME.findall(unicodedata.normalize("NFC", word))


def weighted_distance(a: str, b: str, costs: CostTable) -> tuple[float, list[str]]:
    """Damerau-Levenshtein distance over grapheme clusters with the language's costs,
    and the names of the edits on one cheapest path.

    >>> weighted_distance("ngɔ", "ŋɔ", CostTable([("ŋ", "ng", 0.3)]))[0]
    0.3
    """
    x, y = graphemes(a.casefold()), graphemes(b.casefold())
    alts_by_first: dict[str, list] = defaultdict(list)
    for p, q, c in costs.alternations:
        gp, gq = graphemes(p), graphemes(q)
        alts_by_first[gp[0]].append((gp, gq, c))
        alts_by_first[gq[0]].append((gq, gp, c))
    inf = float("inf")
    dist = [[inf] * (len(y) + 1) for _ in range(len(x) + 1)]
    how: list[list[tuple]] = [[()] * (len(y) + 1) for _ in range(len(x) + 1)]
    dist[0][0] = 0.0

    def relax(i, j, ni, nj, cost, name):
        if dist[i][j] + cost < dist[ni][nj] - 1e-12:
            dist[ni][nj] = dist[i][j] + cost
            how[ni][nj] = (i, j, name)

    for i in range(len(x) + 1):
        for j in range(len(y) + 1):
            if dist[i][j] == inf:
                continue
            if i < len(x) and j < len(y):
                if x[i] == y[j]:
                    relax(i, j, i + 1, j + 1, 0.0, "")
                elif strip_marks(x[i]) == strip_marks(y[j]):
                    relax(i, j, i + 1, j + 1, costs.mark_cost, "diacritic")
                else:
                    relax(i, j, i + 1, j + 1, 1.0, f"{x[i]}→{y[j]}")
            if i < len(x):
                doubled = (i > 0 and x[i - 1] == x[i]) or (i + 1 < len(x) and x[i + 1] == x[i])
                relax(i, j, i + 1, j, costs.double_cost if doubled else 1.0, "doubling" if doubled else f"-{x[i]}")
            if j < len(y):
                doubled = (j > 0 and y[j - 1] == y[j]) or (j + 1 < len(y) and y[j + 1] == y[j])
                relax(i, j, i, j + 1, costs.double_cost if doubled else 1.0, "doubling" if doubled else f"+{y[j]}")
            if i + 1 < len(x) and j + 1 < len(y) and x[i] == y[j + 1] and x[i + 1] == y[j] and x[i] != x[i + 1]:
                relax(i, j, i + 2, j + 2, TRANSPOSE_COST, "transposition")
            for p, q, c in (alts_by_first.get(x[i], ()) if i < len(x) else ()):
                if x[i:i + len(p)] == p and y[j:j + len(q)] == q:
                    relax(i, j, i + len(p), j + len(q), c, f"{''.join(p)}/{''.join(q)}")
    edits, i, j = [], len(x), len(y)
    while (i, j) != (0, 0):
        pi, pj, name = how[i][j]
        if name:
            edits.append(name)
        i, j = pi, pj
    return round(dist[len(x)][len(y)], 6), edits[::-1]


# -- corpus statistics ---------------------------------------------------------------------

@dataclass
class TypeStats:
    count: int = 0
    dialects: Counter = field(default_factory=Counter)
    sources: Counter = field(default_factory=Counter)
    examples: list[str] = field(default_factory=list)
    full: int = 0        # uses in lines that type letters beyond ASCII (full-orthography lines)


def words_of(text: str, language: str = "") -> list[str]:
    if needs_dictionary(text):    # scripts without spaces between words: a dictionary segmenter
        return [fold_case(w, language) for w in split_words(text, language)]
    return [fold_case(t, language) for t in tokens(text) if _WORDISH.search(t) and not t.isdigit()]


_NON_ASCII_LETTER = regex.compile(r"[^\x00-\x7f](?<=\p{L}|\p{M})")


def full_orthography(text: str) -> bool:
    """Whether a line uses letters beyond ASCII: its writer could type the special letters."""
    return not text.isascii() and bool(_NON_ASCII_LETTER.search(text))


def collect(docs, window: int = 2, examples: int = 3, language: str = "") -> tuple[dict[str, TypeStats], dict[str, Counter]]:
    """Type statistics (counts by dialect and source, uses in full-orthography lines, example
    segments) and context counts."""
    stats: dict[str, TypeStats] = defaultdict(TypeStats)
    contexts: dict[str, Counter] = defaultdict(Counter)
    for doc in docs:
        for seg in doc["segments"]:
            words = words_of(seg, language)
            full = full_orthography(seg)
            for k, w in enumerate(words):
                st = stats[w]
                st.count += 1
                st.full += full
                st.dialects[doc.get("dialect") or "unknown"] += 1
                st.sources[doc["source"]] += 1
                if len(st.examples) < examples and seg not in st.examples:
                    st.examples.append(seg[:160])
                for c in words[max(0, k - window):k] + words[k + 1:k + 1 + window]:
                    contexts[w][c] += 1
    return dict(stats), dict(contexts)


def ppmi_vectors(contexts: dict[str, Counter], words: set[str]) -> dict[str, dict[str, float]]:
    """Positive PMI of each word with its context words (Church and Hanks 1990; Turney and Pantel 2010)."""
    total = sum(sum(c.values()) for c in contexts.values())
    if not total:
        return {}
    word_tot = {w: sum(c.values()) for w, c in contexts.items()}
    ctx_tot: Counter = Counter()
    for c in contexts.values():
        ctx_tot.update(c)
    out = {}
    for w in words:
        vec = {}
        for c, n in contexts.get(w, {}).items():
            pmi = math.log((n * total) / (word_tot[w] * ctx_tot[c]))
            if pmi > 0:
                vec[c] = pmi
        out[w] = vec
    return out


def cosine(u: dict[str, float], v: dict[str, float]) -> float:
    if not u or not v:
        return 0.0
    dot = sum(x * v.get(k, 0.0) for k, x in u.items())
    nu, nv = math.sqrt(sum(x * x for x in u.values())), math.sqrt(sum(x * x for x in v.values()))
    return dot / (nu * nv) if nu and nv else 0.0


# -- candidates ---------------------------------------------------------------------------

@dataclass
class Candidate:
    variant: str
    canonical: str
    score: float
    distance: float
    context_similarity: float
    kind: str
    scope: str
    why: str


def candidate_pairs(words: list[str], costs: CostTable, min_length: int = 2) -> set[tuple[str, str]]:
    """Pairs sharing a folding key, or whose keys are one deletion apart (symmetric deletion)."""
    by_key: dict[str, list[str]] = defaultdict(list)
    for w in words:
        if len(w) >= min_length:
            by_key[fold_key(w, costs)].append(w)
    pairs: set[tuple[str, str]] = set()
    for group in by_key.values():
        pairs.update((a, b) for a in group for b in group if a < b)
    deletions: dict[str, set[str]] = defaultdict(set)
    for key in by_key:
        if len(key) >= 4:
            deletions[key].add(key)
            for i in range(len(key)):
                deletions[key[:i] + key[i + 1:]].add(key)
    for keys in deletions.values():
        if 1 < len(keys) <= MAX_BUCKET:
            keys = sorted(keys)
            for x in range(len(keys)):
                for y in range(x + 1, len(keys)):
                    pairs.update((min(a, b), max(a, b)) for a in by_key[keys[x]] for b in by_key[keys[y]])
    return pairs


def plain_form(word: str, costs: CostTable) -> str:
    """``word`` typed on a plain keyboard: every cheap alternation with an ASCII side replaced by it
    (longest first: ä -> ae, ł -> l), then the remaining marks stripped."""
    plain = word.lower()
    for a, b, cost in sorted(costs.alternations, key=lambda t: -max(len(t[0]), len(t[1]))):
        if cost <= 0.5:
            ascii_side, other = (a, b) if a.isascii() else (b, a)
            if ascii_side.isascii() and not other.isascii():
                plain = plain.replace(other, ascii_side)
    return strip_marks(plain)


def is_stand_in(variant: str, canonical: str, costs: CostTable) -> bool:
    """Whether ``variant`` is ``canonical`` written on a plain keyboard: all ASCII, and equal to
    ``plain_form(canonical)``, which has letters beyond ASCII.

    >>> costs = CostTable([("ü", "ue", 0.2)])
    >>> is_stand_in("natuerlich", "natürlich", costs), is_stand_in("laenge", "lange", costs)
    (True, False)
    """
    if not variant.isascii() or variant == canonical or canonical.isascii():
        return False
    return plain_form(canonical, costs) == variant


def corpus_dialect_shares(stats: dict[str, "TypeStats"]) -> dict[str, float]:
    total: Counter = Counter()
    for st in stats.values():
        total.update(st.dialects)
    n = sum(total.values())
    return {d: c / n for d, c in total.items()} if n else {}


def dialect_pattern(variant: "TypeStats", canonical: "TypeStats", share: dict[str, float]) -> bool:
    """One form is (nearly) confined to a dialect in which the other is (nearly) absent:
    at least 80% of the variant's uses are in dialect d, while d has less than half its
    corpus-wide share among the canonical form's uses."""
    if variant.count < 2 or canonical.count < 3 or not variant.dialects:
        return False
    d, n = max(variant.dialects.items(), key=lambda kv: (kv[1], kv[0]))
    if d == "unknown" or n < 0.8 * variant.count:
        return False
    return canonical.dialects.get(d, 0) / canonical.count < 0.5 * share.get(d, 0.0)


def _dialects(st: "TypeStats", min_count: int = 2) -> set[str]:
    """The dialects a form is used in, when it is used often enough to say."""
    return {d for d, n in st.dialects.items() if d != "unknown"} if st.count >= min_count else set()


def _orthography_weight(word: str, letters: str) -> int:
    """How much of the orthography a form uses: marks, the alphabet's non-ASCII letters, and
    zero-width joiners and non-joiners (spelling in Persian and Indic scripts)."""
    return (sum(1 for g in graphemes(word) if g != strip_marks(g) or (not g.isascii() and g in letters))
            + sum(word.count(j) for j in "\N{ZERO WIDTH NON-JOINER}\N{ZERO WIDTH JOINER}"))


def choose_canonical(a: str, b: str, stats: dict[str, TypeStats], letters: str) -> tuple[str, str, str]:
    """(variant, canonical, reason): the form that writes more of the orthography when writers who
    type the special letters use it; else the form more used in such full-orthography lines;
    else the more frequent."""
    wa, wb = _orthography_weight(a, letters), _orthography_weight(b, letters)
    ca, cb = stats[a].count, stats[b].count
    fa, fb = stats[a].full, stats[b].full
    if wa != wb:
        special, other = (b, a) if wb > wa else (a, b)
        if stats[special].full or not stats[other].full:
            return other, special, (f"'{special}' uses the orthography's letters or marks and is written in lines "
                                    f"that type them ({stats[special].full} uses)")
    if fa != fb:
        variant, canonical = (a, b) if fb > fa else (b, a)
        return variant, canonical, f"'{canonical}' is more used in lines that type the special letters ({max(fa, fb)} vs {min(fa, fb)})"
    if ca != cb:
        variant, canonical = (a, b) if cb > ca else (b, a)
        return variant, canonical, f"'{canonical}' is more frequent ({max(ca, cb)} vs {min(ca, cb)})"
    return (max(a, b), min(a, b), "equal evidence; alphabetical")


# A plain form is taken for a word of its own when at least this many of its uses, and this share
# of the rate at which words in general appear in full-orthography lines, are in such lines: a
# stand-in typed by someone who can type the letters is rare (measured on wordfreq vocabularies of
# Czech, Polish and Turkish, benchmarks/variants_real.py).
MINIMAL_PAIR_USES = 3
MINIMAL_PAIR_SHARE = 0.15


def minimal_pair_evidence(variant: str, canonical: str, stats: dict[str, TypeStats], full_share: float,
                          wordlist: set[str] | None) -> str:
    """Why the two forms look like two real words (empty: no such evidence).  A writer who types the
    special letters elsewhere in the same line meant the plain form: a plain form used in such lines
    about as often as words in general are is a word of its own."""
    if wordlist is not None and variant in wordlist and canonical in wordlist:
        return "both are words of the recipe's word list"
    v = stats[variant]
    if v.count and v.full >= MINIMAL_PAIR_USES and v.full / v.count >= MINIMAL_PAIR_SHARE * full_share:
        return (f"'{variant}' is also written in lines that type the special letters ({v.full} of {v.count} uses, "
                f"against {full_share:.0%} of all words)")
    return ""


def propose(stats: dict[str, TypeStats], contexts: dict[str, Counter], costs: CostTable, letters: str = "",
            top: int = 200, exclude: set[tuple[str, str]] = frozenset(), language: str = "",
            wordlist: set[str] | None = None, protected: set[str] = frozenset(),
            rejected_forms: dict[str, int] | None = None) -> list[Candidate]:
    """Ranked candidate pairs, best first: keyboard stand-ins and slips first, pairs that look like
    two real words (minimal pairs) ranked below them, with the evidence in ``why``.  Pairs with a
    protected word, and variant forms rejected before (with any partner, until their count has
    doubled since), are not proposed."""
    rejected_forms = rejected_forms or {}
    pairs = candidate_pairs(sorted(stats), costs)
    total = sum(st.count for st in stats.values())
    full_share = sum(st.full for st in stats.values()) / total if total else 0.0
    scored = []
    for a, b in sorted(pairs):
        if (a, b) in exclude or (b, a) in exclude or a in protected or b in protected:
            continue
        d, edits = weighted_distance(a, b, costs)
        if d > MAX_DISTANCE:
            continue
        scored.append((a, b, d, edits))
    vectors = ppmi_vectors(contexts, {w for a, b, _, _ in scored for w in (a, b)})
    dialect_share = corpus_dialect_shares(stats)
    out = []
    for a, b, d, edits in scored:
        ctx = cosine(vectors.get(a, {}), vectors.get(b, {}))
        form = max(0.0, 1.0 - d / MAX_DISTANCE)
        attested = min(1.0, math.log10(1 + max(stats[a].count, stats[b].count)) / 2)
        variant, canonical, reason = choose_canonical(a, b, stats, letters)
        before = rejected_forms.get(variant)
        if before is not None and stats[variant].count < 2 * max(before, 1):
            continue
        minimal = minimal_pair_evidence(variant, canonical, stats, full_share, wordlist)
        stand_in = is_stand_in(variant, canonical, costs) and not minimal
        # a slip or stand-in is rare next to its canonical form: only that direction counts
        lopsided = max(0.0, 1.0 - stats[variant].count / max(stats[canonical].count, 1))
        score = 0.35 * form + 0.15 * ctx + 0.05 * attested + 0.25 * stand_in + 0.2 * lopsided - 0.6 * bool(minimal)
        if stand_in:
            reason = (f"'{variant}' is '{canonical}' typed without its special letters and marks "
                      f"(a keyboard stand-in, used only in lines without them); {reason}")
        if minimal:
            reason = f"likely a minimal pair, two real words: {minimal}; {reason}"
        da, db = _dialects(stats[variant]), _dialects(stats[canonical])
        if (da and db and not (da & db)) or dialect_pattern(stats[variant], stats[canonical], dialect_share):
            kind, scope = "dialect", f"dialect:{sorted(da)[0]}" if len(da) == 1 else "all"
            why = (f"used in {', '.join(sorted(da))} while '{canonical}' is used in {', '.join(sorted(db))}: "
                   "a dialect difference, not an error")
        else:
            kind, scope = ("minimal-pair" if minimal else "spelling"), "all"
            why = reason
        why += f"; edits: {', '.join(edits) or 'none'}"
        out.append(Candidate(variant, canonical, round(score, 4), d, round(ctx, 4), kind, scope, why))
    out.sort(key=lambda c: (-c.score, c.distance, c.variant, c.canonical))
    # A form is rewritten to one canonical form: keep each variant's best pair only.
    best, seen = [], set()
    for c in out:
        if c.variant not in seen:
            seen.add(c.variant)
            best.append(c)
    return best[:top]


def sheet_rows(candidates: list[Candidate], stats: dict[str, TypeStats]) -> list[dict]:
    def spread(c: Counter) -> str:
        return "; ".join(f"{k} {v}" for k, v in sorted(c.items()))

    rows = []
    for c in candidates:
        v, k = stats[c.variant], stats[c.canonical]
        rows.append({"decision": "", "variant": c.variant, "canonical": c.canonical, "scope": c.scope, "kind": c.kind,
                     "score": f"{c.score:.3f}", "distance": f"{c.distance:.2f}",
                     "context_similarity": f"{c.context_similarity:.3f}", "variant_count": v.count,
                     "canonical_count": k.count, "variant_dialects": spread(v.dialects),
                     "canonical_dialects": spread(k.dialects), "variant_sources": spread(v.sources),
                     "canonical_sources": spread(k.sources), "variant_examples": " | ".join(v.examples),
                     "canonical_examples": " | ".join(k.examples), "why": c.why})
    return rows


# -- the review loop ------------------------------------------------------------------------

REJECTED_HEADER = "# corpuskit rejected variant pairs 1"


class WordList:
    """The recipe's word list: a Hunspell dictionary (``.dic`` with its ``.aff`` beside it, read with
    spylls, a pure-Python port of Hunspell) or a plain list, one word per line.  ``word in wordlist``
    asks the dictionary (its affix rules included), once per word."""

    def __init__(self, path: Path):
        self.path = Path(path)
        self._known: dict[str, bool] = {}
        aff = self.path.with_suffix(".aff")
        if self.path.suffix == ".dic" and aff.exists():
            from spylls.hunspell import Dictionary
            self._dictionary = Dictionary.from_files(str(self.path.with_suffix("")))
            self._words = None
        else:
            self._dictionary = None
            self._words = {unicodedata.normalize("NFC", line.strip().lower())
                           for line in self.path.read_text(encoding="utf-8").splitlines() if line.strip()}

    def __contains__(self, word: str) -> bool:
        if self._words is not None:
            return word in self._words
        if word not in self._known:
            d = self._dictionary
            self._known[word] = bool(d.lookup(word) or d.lookup(word.capitalize()))
        return self._known[word]


def _rejected_lines(path: Path) -> list[list[str]]:
    if not Path(path).exists():
        return []
    return [line.split("\t") for line in Path(path).read_text(encoding="utf-8").splitlines()[1:]
            if line.strip() and not line.startswith("#") and "\t" in line]


def load_rejected(path: Path) -> set[tuple[str, str]]:
    return {(cols[0], cols[1]) for cols in _rejected_lines(path)}


def load_rejected_forms(path: Path) -> dict[str, int]:
    """Variant forms rejected in review, with their count then (0 where unknown): such a form is not
    proposed again with another partner until its count has doubled."""
    forms: dict[str, int] = {}
    for cols in _rejected_lines(path):
        count = int(cols[2]) if len(cols) > 2 and cols[2].strip().isdigit() else 0
        forms[cols[0]] = max(forms.get(cols[0], 0), count)
    return forms


def accept_sheet(sheet: Path, table: Path, rejected: Path) -> tuple[int, int]:
    """Accepted rows go into the variant table (once), rejected pairs into the rejected file.

    A decision cell reads ``accept`` or ``reject`` (``yes``/``no``, ``y``/``n`` also do); an
    empty one leaves the pair for later.  Returns (pairs added, pairs rejected)."""
    try:
        with open(sheet, encoding="utf-8", newline="") as f:
            reader = csv.DictReader(f)
            missing = {"decision", "variant", "canonical"} - set(reader.fieldnames or [])
            if missing:
                raise DataError(f"{sheet} line 1: the sheet has no column {', '.join(sorted(missing))}; "
                                "keep the header that 'corpuskit variants propose' wrote.")
            rows = [(n, {k: restore_cell(v or "") for k, v in r.items() if k}) for n, r in enumerate(reader, 2)]
    except FileNotFoundError:
        raise DataError(f"{sheet}: review sheet not found.") from None
    existing = load_table(table) if table.exists() else []
    have = {(e.variant.casefold(), e.canonical.casefold(), e.scope) for e in existing}
    seen_rejected = load_rejected(rejected)
    add, reject = [], []
    for n, r in rows:
        decision = r.get("decision", "").strip().casefold()
        variant, canonical = r["variant"].strip(), r["canonical"].strip()
        scope = r.get("scope", "").strip() or "all"
        if not decision:
            continue
        if decision not in ("accept", "yes", "y", "reject", "no", "n"):
            raise DataError(f"{sheet} line {n}: decision '{r['decision']}' is not accept or reject.")
        if not variant or not canonical:
            raise DataError(f"{sheet} line {n}: variant and canonical must both be filled in.")
        if scope != "all" and not scope.startswith(("dialect:", "source:")):
            raise DataError(f"{sheet} line {n}: scope '{scope}' is not 'all', 'dialect:NAME' or 'source:ID'.")
        if decision in ("accept", "yes", "y"):
            if (variant.casefold(), canonical.casefold(), scope) not in have:
                have.add((variant.casefold(), canonical.casefold(), scope))
                add.append((variant, canonical, scope, r.get("why", "")[:120].replace("\t", " ")))
        elif (variant, canonical) not in seen_rejected:
            seen_rejected.add((variant, canonical))
            count = r.get("variant_count", "").strip()
            reject.append((variant, canonical, count if count.isdigit() else "0"))
    if add:
        text = table.read_text(encoding="utf-8") if table.exists() else f"{TABLE_HEADER}\nvariant\tcanonical\tscope\tnote\n"
        text = text if text.endswith("\n") else text + "\n"
        text += "".join(f"{v}\t{c}\t{s}\taccepted in review: {note}\n" for v, c, s, note in add)
        table.write_text(text, encoding="utf-8")
    if reject:
        text = rejected.read_text(encoding="utf-8") if rejected.exists() else f"{REJECTED_HEADER}\n"
        text += "".join(f"{v}\t{c}\t{n}\n" for v, c, n in reject)
        rejected.write_text(text, encoding="utf-8")
    return len(add), len(reject)


def rejected_path(table: Path) -> Path:
    return table.with_suffix(".rejected.tsv")
