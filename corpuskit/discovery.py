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

from .errors import DataError, RecipeError
from .variants_table import TABLE_HEADER, load_table, restore_cell, tokens, write_sheet

__all__ = ["CostTable", "TypeStats", "Candidate", "collect", "propose", "weighted_distance", "fold_key",
           "load_costs", "propose_from_run", "accept_sheet", "load_rejected", "rejected_path", "sheet_rows",
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


def words_of(text: str) -> list[str]:
    return [t.casefold() for t in tokens(text) if _WORDISH.search(t) and not t.isdigit()]


def collect(docs, window: int = 2, examples: int = 3) -> tuple[dict[str, TypeStats], dict[str, Counter]]:
    """Type statistics (counts by dialect and source, example segments) and context counts."""
    stats: dict[str, TypeStats] = defaultdict(TypeStats)
    contexts: dict[str, Counter] = defaultdict(Counter)
    for doc in docs:
        for seg in doc["segments"]:
            words = words_of(seg)
            for k, w in enumerate(words):
                st = stats[w]
                st.count += 1
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


def is_stand_in(variant: str, canonical: str, costs: CostTable) -> bool:
    """Whether ``variant`` is ``canonical`` written on a plain keyboard: all ASCII, and equal to it
    once marks are stripped and every cheap alternation is replaced by its ASCII side."""
    if not variant.isascii() or variant == canonical:
        return False
    plain = strip_marks(canonical.casefold())
    for a, b, cost in costs.alternations:
        if cost <= 0.5:
            ascii_side, other = (a, b) if a.isascii() else (b, a)
            if ascii_side.isascii() and not other.isascii():
                plain = plain.replace(strip_marks(other), ascii_side)
    return plain == variant


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
    """How much of the orthography a form uses: marks and the alphabet's non-ASCII letters."""
    return sum(1 for g in graphemes(word) if g != strip_marks(g) or (not g.isascii() and g in letters))


def choose_canonical(a: str, b: str, stats: dict[str, TypeStats], letters: str) -> tuple[str, str, str]:
    """(variant, canonical, reason): the form using more of the orthography, else the more frequent."""
    wa, wb = _orthography_weight(a, letters), _orthography_weight(b, letters)
    ca, cb = stats[a].count, stats[b].count
    if wa != wb:
        variant, canonical = (a, b) if wb > wa else (b, a)
        return variant, canonical, f"'{canonical}' uses the orthography's letters or marks"
    if ca != cb:
        variant, canonical = (a, b) if cb > ca else (b, a)
        return variant, canonical, f"'{canonical}' is more frequent ({max(ca, cb)} vs {min(ca, cb)})"
    return (max(a, b), min(a, b), "equal evidence; alphabetical")


def propose(stats: dict[str, TypeStats], contexts: dict[str, Counter], costs: CostTable, letters: str = "",
            top: int = 200, exclude: set[tuple[str, str]] = frozenset()) -> list[Candidate]:
    """Ranked candidate pairs, best first."""
    pairs = candidate_pairs(sorted(stats), costs)
    scored = []
    for a, b in sorted(pairs):
        if (a, b) in exclude or (b, a) in exclude:
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
        stand_in = is_stand_in(variant, canonical, costs)
        low, high = sorted((stats[a].count, stats[b].count))
        lopsided = 1.0 - low / high   # a slip is rare next to its canonical form; two real words need not be
        score = 0.35 * form + 0.15 * ctx + 0.05 * attested + 0.25 * stand_in + 0.2 * lopsided
        if stand_in:
            reason = (f"'{variant}' is '{canonical}' typed without its special letters and marks "
                      f"(a keyboard stand-in); {reason}")
        da, db = _dialects(stats[variant]), _dialects(stats[canonical])
        if (da and db and not (da & db)) or dialect_pattern(stats[variant], stats[canonical], dialect_share):
            kind, scope = "dialect", f"dialect:{sorted(da)[0]}" if len(da) == 1 else "all"
            why = (f"used in {', '.join(sorted(da))} while '{canonical}' is used in {', '.join(sorted(db))}: "
                   "a dialect difference, not an error")
        else:
            kind, scope = "spelling", "all"
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


def load_rejected(path: Path) -> set[tuple[str, str]]:
    if not Path(path).exists():
        return set()
    return {tuple(line.split("\t")[:2]) for line in Path(path).read_text(encoding="utf-8").splitlines()[1:]
            if line.strip() and not line.startswith("#") and "\t" in line}


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
            reject.append((variant, canonical))
    if add:
        text = table.read_text(encoding="utf-8") if table.exists() else f"{TABLE_HEADER}\nvariant\tcanonical\tscope\tnote\n"
        text = text if text.endswith("\n") else text + "\n"
        text += "".join(f"{v}\t{c}\t{s}\taccepted in review: {note}\n" for v, c, s, note in add)
        table.write_text(text, encoding="utf-8")
    if reject:
        text = rejected.read_text(encoding="utf-8") if rejected.exists() else f"{REJECTED_HEADER}\n"
        text += "".join(f"{v}\t{c}\n" for v, c in reject)
        rejected.write_text(text, encoding="utf-8")
    return len(add), len(reject)


def rejected_path(table: Path) -> Path:
    return table.with_suffix(".rejected.tsv")


def propose_from_run(recipe, out: Path, sheet: Path, top: int) -> int:
    """Run the recipe up to the quality filter (cached work is reused), collect the corpus's
    word types and write the ranked candidates to a review sheet.  Returns the number written."""
    from .engines import make_engine
    from .runner import OutputLock, Runner

    params = recipe.stages["variants"]
    costs = load_costs(recipe.resolve(params.costs, "[stages.variants] costs")) if params.costs else CostTable()
    exclude: set[tuple[str, str]] = set()
    if params.table:
        table = recipe.resolve(params.table, "[stages.variants] table")
        if table.exists():
            exclude |= {(e.variant.casefold(), e.canonical.casefold()) for e in load_table(table)}
        exclude |= load_rejected(rejected_path(table))
    with OutputLock(out), make_engine("local", None, None) as engine:
        runner = Runner(recipe, Path(out), engine)
        runner.run(until="filter")
        docs = [d for key in runner.last_keys["filter"] for d in runner.cache.read_docs("filter", key)]
    stats, contexts = collect(docs)
    candidates = propose(stats, contexts, costs, recipe.corpus.letters, top, exclude)
    write_sheet(Path(sheet), sheet_rows(candidates, stats), SHEET_COLUMNS)
    return len(candidates)

