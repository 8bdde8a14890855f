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

import numpy as np
import regex

from ..casing import comparison_key
from ..codepoints import CodePointTable, code_points, count_per_text
from ..ledger import LedgerRow, remove_document
from ..pii import PLACEHOLDER, scrub
from ..scripts import unicode_scripts
from ..config import Checked, param
from ..storage import stable_hash
from .contract import Applied
from .units import drop_empty, keep_segments

VERSION = "5"   # the column-wise count decides as the per-segment patterns did: results unchanged


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


# Bits of a code point's class: what the share filters count.  Each distinct code point is
# classified once per process with the patterns above (so the regex module's Unicode data decides,
# as it would character by character), and whole partitions are then counted with numpy.
_CLASSES = (DIGIT, PUNCTUATION, SYMBOL, EMOJI, LETTER)
_DIGIT_BIT, _PUNCT_BIT, _SYMBOL_BIT, _EMOJI_BIT, _LETTER_BIT, _IN_SCRIPT_BIT = (1 << i for i in range(6))
_TABLES: dict[str, CodePointTable] = {}   # target script -> class bits of every code point


def _class_bits(points: np.ndarray, target: str) -> np.ndarray:
    """The class bits of each code point, for letters also whether they are in the target script."""
    table = _TABLES.get(target)
    if table is None:
        in_script = _in_script(target)

        def classify(ch: str) -> int:
            b = sum(1 << i for i, pattern in enumerate(_CLASSES) if pattern.match(ch))
            return b | _IN_SCRIPT_BIT if b & _LETTER_BIT and in_script.match(ch) else b

        table = _TABLES[target] = CodePointTable(classify, np.uint8, 255)
    return table(points)


def _has_repeat(points: np.ndarray, starts: np.ndarray, repeat: int) -> list[bool]:
    """Whether a text holds one character (not a line feed: '.' does not match it) more than
    ``repeat`` times in a row, as ``_repeat(repeat)`` would find."""
    same = (points[1:] == points[:-1]) & (points[1:] != 10)
    inner = np.ones(len(same), dtype=bool)
    inner[starts[1:-1][(starts[1:-1] > 0) & (starts[1:-1] <= len(same))] - 1] = False   # pairs across two texts
    same &= inner
    if len(same) < repeat:
        return [False] * (len(starts) - 1)
    window = np.convolve(same.astype(np.int32), np.ones(repeat, dtype=np.int32), "valid")
    at = np.flatnonzero(window >= repeat)
    hit = np.zeros(len(starts) - 1, dtype=bool)
    hit[np.searchsorted(starts, at, side="right") - 1] = True
    return hit.tolist()


def segment_problems(texts: list[str], params: Params, target: str) -> list[tuple[str, str] | None]:
    """The first filter each segment fails, as (reason, detail), or None; counted column-wise
    over all the texts at once."""
    bares = [PLACEHOLDER.sub("", t) if "<" in t else t for t in texts]
    points, starts = code_points(bares)
    bits = _class_bits(points, target)
    digits, punctuation, symbols, emoji, letters, in_script = (
        count_per_text((bits & bit) != 0, starts) for bit in (_DIGIT_BIT, _PUNCT_BIT, _SYMBOL_BIT, _EMOJI_BIT, _LETTER_BIT, _IN_SCRIPT_BIT))
    repeats = _has_repeat(points, starts, params.max_char_repeat)
    out: list[tuple[str, str] | None] = []
    for k, bare in enumerate(bares):
        n = len(bare)
        if not bare.strip():
            out.append(("no-text", "nothing left but placeholders or spaces"))
        elif n < params.min_chars:
            out.append(("too-short", f"{n} characters < {params.min_chars}"))
        elif n > params.max_chars:
            out.append(("too-long", f"{n} characters > {params.max_chars}"))
        elif repeats[k]:
            m = _repeat(params.max_char_repeat).search(bare)
            out.append(("repeated-characters", f"'{m.group(1)}' repeated {len(m.group())} times"))
        else:
            url_chars = sum(len(u) for u in URL.findall(bare)) if "://" in bare or "www." in bare else 0
            out.append(_share_problem(n, ((digits[k], params.max_digit_share, "digits"),
                                          (punctuation[k], params.max_punct_share, "punctuation"),
                                          (symbols[k], params.max_symbol_share, "symbols"),
                                          (url_chars, params.max_url_share, "urls"),
                                          (emoji[k], params.max_emoji_share, "emoji")),
                                      letters[k], in_script[k], params, target))
    return out


def _share_problem(n: int, shares, letters: int, in_script: int, params: Params, target: str) -> tuple[str, str] | None:
    for count, limit, name in shares:
        if count / n > limit:
            return f"too-many-{name}", f"{count / n:.2f} > {limit}"
    if letters and in_script / letters < params.min_script_share:
        return "wrong-script", f"{in_script / letters:.2f} of letters in {target} < {params.min_script_share}"
    return None


def segment_problem(text: str, params: Params, script: str, target: str) -> tuple[str, str] | None:
    """The first filter one segment fails, as (reason, detail), or None."""
    return segment_problems([text], params, target)[0]


def apply(docs: list[dict], params: Params, ctx: dict | None):
    ctx = ctx or {"target_script": "Latn", "regions": ()}
    target_script, regions = ctx["target_script"], tuple(ctx["regions"])
    # Per document in order: its rows so far, and the document when its segments are to be checked
    # (all of them are then checked at once); the rows keep the documents' order.
    planned: list[tuple[list[LedgerRow], dict | None]] = []
    for doc in docs:
        found: Counter = Counter()
        own: list[LedgerRow] = []
        if params.pii != "keep":
            for i, seg in enumerate(doc["segments"]):
                new, counts = scrub(seg, params.id_patterns, regions)
                if counts:
                    found += counts
                    doc["segments"][i] = new
                    own.append(LedgerRow("filter", "segment", "rewritten", doc["id"], doc["seg_index"][i], 0,
                                         "personal-data", ", ".join(f"{k}={v}" for k, v in sorted(counts.items())), None, None))
            if doc.get("original"):
                doc["original"] = [scrub(s, params.id_patterns, regions)[0] for s in doc["original"]]
            if found and params.pii == "drop-document":
                own.append(remove_document("filter", doc, "personal-data", ", ".join(f"{k}={v}" for k, v in sorted(found.items()))))
                planned.append((own, None))
                continue
        keys = Counter(comparison_key(s) for s in doc["segments"])
        repeated = sum(v - 1 for v in keys.values())
        if len(doc["segments"]) > 2 and repeated / len(doc["segments"]) > params.max_repeated_lines:
            own.append(remove_document("filter", doc, "repeated-lines", f"{repeated} of {len(doc['segments'])} segments repeat"))
            planned.append((own, None))
            continue
        planned.append((own, doc))
    problems = iter(segment_problems([s for _, doc in planned if doc is not None for s in doc["segments"]], params, target_script))
    rows: list[LedgerRow] = []
    out = []
    for own, doc in planned:
        rows += own
        if doc is None:
            continue
        mine = [next(problems) for _ in doc["segments"]]
        keep_segments("filter", doc, [p is None for p in mine], [p[0] if p else None for p in mine],
                      [p[1] if p else "" for p in mine], rows)
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
