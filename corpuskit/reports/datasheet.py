"""The corpus datasheet: the sections of Datasheets for Datasets (Gebru et al., 2018/2021)
plus the data-statement fields of Bender and Friedman (2018).

Answers a person must give come from an answers file (TOML) next to the
recipe; measured facts are filled in from the run.  ``unanswered`` lists the
questions still open, which ``corpuskit check`` prints.
"""
from __future__ import annotations

import tomllib
from dataclasses import dataclass

SECTIONS = {
    "motivation": ("Motivation", ["purpose", "creators", "funding"]),
    "composition": ("Composition", ["instances", "sample", "labels", "missing", "errors", "confidential",
                                    "offensive", "people", "subpopulations", "identification", "sensitive"]),
    "collection": ("Collection process", ["how", "who", "timeframe", "ethical_review", "notice", "consent", "revocation"]),
    "preprocessing": ("Preprocessing / cleaning / labelling", ["raw_kept"]),
    "uses": ("Uses", ["used_for", "other_tasks", "risks", "not_for"]),
    "distribution": ("Distribution", ["to_whom", "how", "when", "terms"]),
    "maintenance": ("Maintenance", ["who", "contact", "updates", "retention", "contributions"]),
    "data_statement": ("Data statement", ["language_variety", "speakers", "speech_situation", "text_characteristics",
                                          "transcription", "annotators", "recording_quality"]),
}

CAUTIONS = """\
## Cautions: consent, privacy and community governance

- This corpus contains the words of people. Use it only within the consent
  they gave: the consent scope is recorded per source and per document
  (`consent`), and sources whose scope or licence does not allow
  redistribution are kept out of the public files.
- Personal data was scrubbed automatically (phone numbers, e-mail addresses,
  personal URLs, configured ID numbers), and the names of speakers, message
  senders and contributors were replaced by stable pseudonyms unless a
  source's consent covers attribution. Automatic scrubbing helps but
  guarantees nothing: names, places and stories in the text can still
  identify people. A person from the community reviews before publication.
- The community that speaks the language has a say over its data (collective
  benefit, authority to control, responsibility and ethics, as in the CARE
  principles for Indigenous data governance). Material the community
  restricts must stay restricted, whatever a licence says.
- `private/` (the ledger with the text of removed segments, review sheets,
  the pseudonym mapping and its secret) is the team's working folder, never
  for publication; `restricted/` holds the sources that may not be
  redistributed. Before the manifest was written, a leak audit scanned every
  public file for personal data, restricted text and real names.
- Local law on personal data and on cultural heritage, and the community's
  own rules, take precedence over anything in this datasheet or in the tool.
"""


def load_answers(recipe) -> dict:
    if not recipe.corpus.answers:
        return {}
    path = recipe.resolve(recipe.corpus.answers, "[corpus] answers")
    if not path.exists():
        return {}
    from ..errors import RecipeError
    try:
        return tomllib.loads(path.read_text(encoding="utf-8"))
    except tomllib.TOMLDecodeError as exc:
        raise RecipeError(f"{path}: TOML syntax error: {exc}; fix the line named.") from None


def unanswered(answers: dict) -> list[str]:
    return [f"{sec}.{q}" for sec, (_, qs) in SECTIONS.items() for q in qs
            if not str(answers.get(sec, {}).get(q, "")).strip()]


def _answer(answers: dict, sec: str, q: str) -> str:
    value = str(answers.get(sec, {}).get(q, "")).strip()
    return value or "_Not answered yet (add it to the answers file)._"


def _fmt(x) -> str:
    return f"{x:.3f}" if isinstance(x, float) else str(x)


def _table(rows: list[dict], columns: list[str]) -> str:
    if not rows:
        return "_none_\n"
    lines = ["| " + " | ".join(columns) + " |", "|" + "---|" * len(columns)]
    lines += ["| " + " | ".join(str(r.get(c, "")) for c in columns) + " |" for r in rows]
    return "\n".join(lines) + "\n"


@dataclass(frozen=True)
class RunFacts:
    """What the run measured, for the datasheet (export fills it in)."""
    stages: list[dict]            # per stage: {"stage": name, **Counts.as_dict()}
    conservation: dict            # ledger.conservation()
    balance: dict                 # reports.balance.write_report()
    tokenizer: dict               # {"summary": ..., "dialects": [...]}
    public_docs: int
    restricted_docs: int
    splits: dict[str, int]        # split -> public documents
    restricted_policy: str        # [stages.export] restricted
    langid: dict | None = None    # the language-ID report's summary, when the stage trained one
    dedup: dict | None = None     # the near-duplicate parameters and totals


def render(recipe, facts: RunFacts) -> tuple[str, list[str]]:
    answers = load_answers(recipe)
    open_questions = unanswered(answers)
    c = recipe.corpus
    bal, tok = facts.balance, facts.tokenizer
    out = [f"# Datasheet: {c.name}", "",
           f"Language: `{c.language}` (BCP 47); target script: `{c.target_script}` (ISO 15924). "
           f"Generated by corpuskit from recipe `{recipe.path.name}` (SHA-256 `{recipe.sha256[:16]}…`).", ""]
    for sec, (title, qs) in SECTIONS.items():
        out.append(f"## {title}\n")
        for q in qs:
            out.append(f"**{q.replace('_', ' ').capitalize()}.** {_answer(answers, sec, q)}\n")
        if sec == "composition":
            out.append("### Measured composition\n")
            out.append(f"Documents: {facts.public_docs} public, {facts.restricted_docs} restricted. "
                       f"Splits (public): {', '.join(f'{k} {v}' for k, v in sorted(facts.splits.items()))}.\n")
            out.append(_table(bal["tables"]["dialect"], ["dialect", "documents", "segments", "words", "types", "words_share"]))
            out.append(_table(bal["tables"]["medium"], ["medium", "documents", "words", "words_share"]))
            out.append(_table(bal["tables"]["script"], ["script", "documents", "words"]))
            m = bal["measures"]
            out.append(f"Entropy over dialects: {m['dialect']['entropy_bits']} bits (effective number "
                       f"{m['dialect']['effective_number']}); over sources: {m['source']['entropy_bits']} bits "
                       f"(effective number {m['source']['effective_number']}).\n")
            for w in bal["warnings"]:
                out.append(f"- Warning: {w}")
            out.append("")
        if sec == "collection":
            out.append("### Sources\n")
            out.append(_table([{"source": s.id, "medium": s.medium, "dialect": s.dialect or "(per row)", "licence": s.licence,
                                "consent": s.consent, "public": "yes" if s.redistributable else "no (restricted)"}
                               for s in recipe.sources], ["source", "medium", "dialect", "licence", "consent", "public"]))
        if sec == "preprocessing":
            out.append("### What the pipeline did (measured)\n")
            rows = [{"stage": s["stage"], "documents in": s["docs_in"], "documents out": s["docs_out"],
                     "segments in": s["segs_in"], "segments out": s["segs_out"],
                     "removed (reason: count)": "; ".join(f"{k}: {v}" for k, v in s["removed"].items()),
                     "merged into a neighbour": "; ".join(f"{k}: {v}" for k, v in s.get("merged", {}).items()),
                     "rewritten": sum(s["rewritten"].values())}
                    for s in facts.stages]
            out.append(_table(rows, list(rows[0]) if rows else []))
            cons = facts.conservation
            out.append(f"Conservation check: documents {cons['documents']['in']} in = {cons['documents']['kept']} kept + "
                       f"{cons['documents']['removed']} removed ({'holds' if cons['documents']['holds'] else 'FAILS'}); "
                       f"segments {cons['segments']['in']} in = {cons['segments']['kept']} kept + "
                       f"{cons['segments']['removed']} removed ({'holds' if cons['segments']['holds'] else 'FAILS'}; "
                       f"{cons['segments'].get('merged_into_neighbours', 0)} of the removed segments were joined into "
                       "a neighbour, their text kept). "
                       "Every removal and rewrite is in the ledger (`private/ledger.jsonl.gz`, not for publication).\n")
            ts = tok.get("summary", {})
            if ts.get("trained"):
                out.append(f"Tokenizer: SentencePiece {ts['model_type']}, vocabulary {ts['vocab_used']} "
                           f"(requested {ts['vocab_requested']}), character coverage {ts['character_coverage']}, "
                           f"normalisation `{ts['normalization']}`.\n")
                out.append(_table(tok["dialects"], ["dialect", "words", "pieces", "fertility", "unknown_rate", "gap_to_best"]))
            lid = facts.langid
            if lid:
                th = lid.get("threshold") or {}
                out.append(f"Language identification: fastText from seed text; {lid.get('folds')}-fold cross-validated "
                           f"accuracy {_fmt(lid.get('accuracy'))}, macro-F1 {_fmt(lid.get('macro_f1'))} over all seed labels "
                           f"(dialect labels included); target-language threshold {_fmt(th.get('value'))} "
                           f"(precision {_fmt(th.get('precision'))}, recall {_fmt(th.get('recall'))} on held-out seed folds; "
                           f"the recipe's target {_fmt(lid.get('target_precision'))} judged by the Wilson lower bound "
                           f"{_fmt(th.get('precision_lower_bound'))}). The classifier averages the {lid.get('folds')} fold "
                           "models, so the threshold means on new text what it meant on the held-out folds. "
                           "See `reports/langid-classes.csv` and `reports/langid-confusion.csv`.\n")
                if lid.get("target_segments_lost"):
                    out.append(f"Whole documents below the recipe's target share were removed, taking "
                               f"{lid['target_segments_lost']} target-language segments with them.\n")
            dd = facts.dedup
            if dd:
                out.append(f"Near-duplicates: MinHash ({dd['num_perm']} permutations, {dd['shingle']}, text case-folded "
                           f"and white space collapsed), LSH with {dd['bands']} bands × {dd['rows']} rows (a pair at "
                           f"Jaccard {dd['threshold']} becomes a candidate with probability "
                           f"{dd.get('candidate_probability_at_threshold', 0):.3f}); every candidate verified by exact "
                           f"Jaccard; a document is removed only when a kept document reaches the threshold with it. "
                           f"{dd['exact_duplicates']} exact and {dd['near_duplicates']} near duplicates removed "
                           "(`reports/near-duplicate-pairs.csv` lists every verified pair).\n")
        if sec == "distribution":
            out.append(f"Public files: `corpus/`, `splits/`, `tokenizer/`. Documents whose consent or licence forbids "
                       f"redistribution ({facts.restricted_docs}) are "
                       + ("in `restricted/`, which must not be published." if facts.restricted_policy == "separate"
                          else "left out of every output.") + "\n")
            lic = sorted({s.licence for s in recipe.sources})
            out.append(f"Licences (SPDX) of the sources: {', '.join(lic)}.\n")
    out.append(CAUTIONS)
    if open_questions:
        out.append("## Questions still open\n")
        out.extend(f"- {q}" for q in open_questions)
        out.append("")
    return "\n".join(out) + "\n", open_questions
