"""Quality filters and personal-data scrubbing, each with its own reason code.

Personal data (phone numbers, e-mail addresses, URLs carrying personal
identifiers, and ID-number patterns from the recipe) is replaced by typed
placeholders, or the document dropped, by recipe; the ledger counts each
replacement without keeping the text.
"""
from __future__ import annotations

from collections import Counter
from dataclasses import dataclass
from functools import lru_cache

import regex

from ..casing import comparison_key
from ..ledger import LedgerRow, remove_document
from ..pii import PLACEHOLDER, scrub
from ..scripts import unicode_scripts
from ..config import Checked, param
from ..storage import stable_hash
from .contract import Applied
from .units import drop_empty, keep_segments

VERSION = "5"


@dataclass(frozen=True)
class Params(Checked):
    min_chars: int = param(8, low=0, high=100_000, help="shorter segments are removed")
    max_chars: int = param(5000, low=1, high=100_000_000, help="longer segments are removed")
    min_script_share: float = param(0.5, low=0, high=1, help="least share of letters in the target script")
    max_char_repeat: int = param(6, low=2, high=200, help="a character repeated more times in a row is junk")
    max_digit_share: float = param(0.3, low=0, high=1, help="most share of digits")
    max_punct_share: float = param(0.3, low=0, high=1, help="most share of punctuation")
    max_symbol_share: float = param(0.2, low=0, high=1, help="most share of symbols")
    max_url_share: float = param(0.3, low=0, high=1, help="most share of characters inside URLs")
    max_emoji_share: float = param(0.3, low=0, high=1, help="most share of emoji")
    max_repeated_lines: float = param(0.5, low=0, high=1, help="most share of repeated segments in a document")
    pii: str = param("replace", choices=("replace", "drop-document", "keep"), help="what to do with personal data")
    id_patterns: list[str] = param([], help="regular expressions for ID numbers to scrub")


URL = regex.compile(r"https?://\S+|www\.\S+")
# Pictographs and skin-tone modifiers; not the zero-width joiner, which Indic and Arabic scripts
# use inside words (it only glues emoji together, and is counted with them).
EMOJI = regex.compile(r"[\p{Extended_Pictographic}\p{Emoji_Modifier}]")


DIGIT = regex.compile(r"\p{Nd}")
PUNCTUATION = regex.compile(r"\p{P}")
SYMBOL = regex.compile(r"[\p{S}--\p{Extended_Pictographic}]", flags=regex.V1)
LETTER = regex.compile(r"\p{L}")


@lru_cache(maxsize=8)
def _repeat(n: int):
    return regex.compile(r"(.)\1{%d,}" % n)


def segment_problem(text: str, params: Params, script: str, target: str) -> tuple[str, str] | None:
    """The first filter a segment fails, as (reason, detail), or None."""
    bare = PLACEHOLDER.sub("", text)
    n = len(bare)
    if not bare.strip():
        return "no-text", "nothing left but placeholders or spaces"
    if n < params.min_chars:
        return "too-short", f"{n} characters < {params.min_chars}"
    if n > params.max_chars:
        return "too-long", f"{n} characters > {params.max_chars}"
    m = _repeat(params.max_char_repeat).search(bare)
    if m:
        return "repeated-characters", f"'{m.group(1)}' repeated {len(m.group())} times"
    url_chars = sum(len(u) for u in URL.findall(bare))
    shares = [
        ("digits", len(DIGIT.findall(bare)) / n, params.max_digit_share),
        ("punctuation", len(PUNCTUATION.findall(bare)) / n, params.max_punct_share),
        ("symbols", len(SYMBOL.findall(bare)) / n, params.max_symbol_share),
        ("urls", url_chars / n, params.max_url_share),
        ("emoji", len(EMOJI.findall(bare)) / n, params.max_emoji_share),
    ]
    for name, share, limit in shares:
        if share > limit:
            return f"too-many-{name}", f"{share:.2f} > {limit}"
    letters = LETTER.findall(bare)
    if letters:
        in_script = len(_in_script(target).findall("".join(letters)))
        if in_script / len(letters) < params.min_script_share:
            return "wrong-script", f"{in_script / len(letters):.2f} of letters in {target} < {params.min_script_share}"
    return None


def apply(docs: list[dict], params: Params, ctx: dict | None):
    ctx = ctx or {"target_script": "Latn", "regions": ()}
    target_script, regions = ctx["target_script"], tuple(ctx["regions"])
    rows: list[LedgerRow] = []
    out = []
    for doc in docs:
        found: Counter = Counter()
        if params.pii != "keep":
            for i, seg in enumerate(doc["segments"]):
                new, counts = scrub(seg, params.id_patterns, regions)
                if counts:
                    found += counts
                    doc["segments"][i] = new
                    rows.append(LedgerRow("filter", "segment", "rewritten", doc["id"], doc["seg_index"][i], 0,
                                          "personal-data", ", ".join(f"{k}={v}" for k, v in sorted(counts.items())), None, None))
            if doc.get("original"):
                doc["original"] = [scrub(s, params.id_patterns, regions)[0] for s in doc["original"]]
            if found and params.pii == "drop-document":
                rows.append(remove_document("filter", doc, "personal-data", ", ".join(f"{k}={v}" for k, v in sorted(found.items()))))
                continue
        keys = Counter(comparison_key(s) for s in doc["segments"])
        repeated = sum(v - 1 for v in keys.values())
        if len(doc["segments"]) > 2 and repeated / len(doc["segments"]) > params.max_repeated_lines:
            rows.append(remove_document("filter", doc, "repeated-lines", f"{repeated} of {len(doc['segments'])} segments repeat"))
            continue
        problems = [segment_problem(s, params, "", target_script) for s in doc["segments"]]
        keep_segments("filter", doc, [p is None for p in problems], [p[0] if p else None for p in problems],
                      [p[1] if p else "" for p in problems], rows)
        out.append(doc)
    return Applied(drop_empty("filter", out, rows), rows)



def context_key(recipe, params) -> str:
    return stable_hash(recipe.corpus.target_script, list(recipe.corpus.regions))


def build_context(recipe, params, cache, key):
    return {"target_script": recipe.corpus.target_script, "regions": list(recipe.corpus.regions)}


@lru_cache(maxsize=16)
def _in_script(target: str):
    """Letters written in the target script (an ISO 15924 code: any of the Unicode scripts it uses)."""
    scripts = unicode_scripts(target) or ("Zzzz",)
    return regex.compile("[%s]" % "".join(r"\p{scx=%s}" % t for t in scripts))
