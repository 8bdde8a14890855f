"""Medium-specific clean-up.

- speech transcripts: non-speech annotations dropped, speaker labels moved to
  metadata, cue fragments of one speaker joined into utterances;
- OCR'd booklets: running headers, footers and page numbers found by
  repetition across pages and dropped; line-end hyphenation rejoined where the
  joined word is attested in the source; broken lines rejoined into paragraphs;
- message exports: system lines dropped, forwarded copies kept once;
- web pages: navigation and lines repeated across pages dropped.

Every removal and join is a ledger row.
"""
from __future__ import annotations

import json
from collections import Counter
from dataclasses import dataclass
from functools import lru_cache
from typing import Any

import numpy as np
import regex

from ..casing import comparison_key
from ..ledger import LedgerRow, merge_segment, remove_document, remove_segment
from ..config import Checked, param
from ..storage import digest64
from .contract import Applied
from .units import drop_empty

VERSION = "4"


@dataclass(frozen=True)
class Params(Checked):
    annotation_pattern: str = param(r"\[[^\]\n]{1,40}\]|\((?:laughs?|music|inaudible|noise|applause|pause|crosstalk|coughs?|silence)\)",
                                    help="non-speech annotations in transcripts")
    speaker_pattern: str = param(r"^(?P<speaker>[\p{Lu}][\p{L}\p{M}'. -]{0,30}):\s+",
                                 help="a speaker label at the start of a cue")
    join_gap: float = param(1.5, low=0, high=3600, help="largest pause (s) between cue fragments that are joined")
    header_lines: int = param(2, low=0, high=5, help="lines at the top and bottom of a page checked for headers")
    header_min_pages: int = param(3, low=2, high=100_000, help="a header must repeat on at least this many pages")
    header_share: float = param(0.3, low=0, high=1, help="... and on at least this share of the pages")
    hyphens: str = param("-\u00ad\u00ac\u2010", help="characters that mark a line-end hyphenation")
    join_lines: bool = param(True, help="rejoin broken OCR lines into paragraphs")
    system_pattern: str = param(r"^(?:.{0,40}\b(?:joined|left|was added|was removed|changed the (?:group|subject)|created group)\b.{0,40}|<media omitted>|message deleted)$",
                                help="message-export system lines")
    forward_pattern: str = param(r"^(?:fwd?:|\[forwarded\]|forwarded:|>>)\s*", help="marker of a forwarded message")
    boilerplate_min_pages: int = param(3, low=2, high=1_000_000, help="a web line repeated on this many pages is boilerplate")
    boilerplate_share: float = param(0.2, low=0, high=1, help="... and on this share of the pages")



PAGE_NUMBER = regex.compile(r"""^\s*(?:
      [-–—.\s]*\d{1,4}[-–—.\s]*              # 12, - 12 -, 12.
    | (?:page|p\.|pg\.?)\s*\d{1,4}           # page 12
    | [ivxlcdm]{1,7}                         # roman numerals
    | \d{1,4}\s*/\s*\d{1,4}                  # 3 / 40
    )\s*$""", regex.I | regex.X)
SENTENCE_END = regex.compile(r"[.!?…:;»\"”’)\]]\s*$")
WORD = regex.compile(r"[\p{L}\p{M}\p{Lm}ʼ'’]+")
HYPHENATED = regex.compile(r"[\p{L}\p{M}]+(?:-[\p{L}\p{M}]+)+")
SPACE_BEFORE_PUNCT = regex.compile(r"\s+([.,!?;:…])")
NAV_SEPARATORS = regex.compile(r"\s[|»›·•/]\s")
_DIGITS = regex.compile(r"\d+")


@lru_cache(maxsize=16)
def _pattern(text: str):
    """A recipe's pattern, compiled once (case-insensitive, as the recipe reference says)."""
    return regex.compile(text, flags=regex.I)


def line_key(line: str) -> str:
    """Lines compare equal across pages after digits become # and case and spacing are folded."""
    return " ".join(_DIGITS.sub("#", line.casefold()).split())


def _pages(doc: dict) -> list[list[int]]:
    meta = json.loads(doc["meta"])
    pages = meta.get("pages") or [{"first": 0, "count": len(doc["segments"])}]
    return [list(range(p["first"], p["first"] + p["count"])) for p in pages]


# -- survey: per-source statistics ---------------------------------------------------------
# Lines and message texts are counted as 64-bit digests (numpy arrays, not dicts of strings), so
# a survey of a large source stays small in memory and in the context sent with each task.

def survey_partition(docs: list[dict], params: Params) -> dict:
    edges: list[int] = []             # per page, its distinct header/footer lines (page numbers left out)
    web: list[int] = []               # per web page, its distinct lines
    vocab: Counter = Counter()
    first_text: dict[int, str] = {}   # message digest -> the first message with that text
    forwarded: set[int] = set()       # digests of forwarded messages
    pages = web_docs = 0
    h = params.header_lines
    for doc in docs:
        if doc["medium"] == "print-ocr":
            for page in _pages(doc):
                pages += 1
                lines = [doc["segments"][i] for i in page]
                keys = {line_key(x) for x in lines[:h] + lines[-h:] if x.strip()}
                edges.extend(digest64(k) for k in keys if not PAGE_NUMBER.match(k.replace("#", "1")))
            for seg in doc["segments"]:
                vocab.update(w.casefold() for w in WORD.findall(seg))
                vocab.update(w.casefold() for w in HYPHENATED.findall(seg))
        elif doc["medium"] == "web":
            web_docs += 1
            web.extend(digest64(k) for k in {line_key(s) for s in doc["segments"]})
        elif doc["medium"] == "typed-message":
            digest = _message_digest(doc, params)
            first_text.setdefault(digest, doc["id"])
            if _is_forwarded(doc, params):
                forwarded.add(digest)
    return {"edges": np.array(edges, dtype=np.uint64), "pages": pages, "web": np.array(web, dtype=np.uint64),
            "web_docs": web_docs, "vocab": vocab, "first": first_text, "forwarded": forwarded}


def merge_surveys(partials: list[dict], params: Params) -> dict:
    vocab: Counter = Counter()
    first: dict[int, str] = {}
    forwarded: set[int] = set()
    for p in partials:
        vocab.update(p["vocab"])
        for k, v in p["first"].items():
            first.setdefault(k, v)
        forwarded.update(p["forwarded"])
    pages = sum(p["pages"] for p in partials)
    web_docs = sum(p["web_docs"] for p in partials)
    need_pages = max(params.header_min_pages, params.header_share * pages)
    need_web = max(params.boilerplate_min_pages, params.boilerplate_share * web_docs)
    return {"headers": _repeated([p["edges"] for p in partials], need_pages),
            "boilerplate": _repeated([p["web"] for p in partials], need_web),
            "vocab": sorted(vocab),
            # only what forwarded messages look up: the context sent with each task stays small
            "first": {_hex(d): first[d] for d in sorted(forwarded)}}


def _hex(digest: int) -> str:
    return f"{digest:016x}"


def _line_digest(line: str) -> str:
    return _hex(digest64(line_key(line)))


def _repeated(arrays: list[np.ndarray], need: float) -> list[str]:
    """The digests (as hex) occurring at least ``need`` times in all arrays together."""
    values, counts = np.unique(np.concatenate(arrays + [np.zeros(0, np.uint64)]), return_counts=True)
    return [_hex(int(v)) for v in values[counts >= need]]


def partition_context(ctx: Any, survey: dict | None) -> dict | None:
    return survey


# -- apply -------------------------------------------------------------------------------

def apply(docs: list[dict], params: Params, survey: dict | None):
    rows: list[LedgerRow] = []
    survey = survey or {"headers": [], "boilerplate": [], "vocab": [], "first": {}}
    headers, vocab, boilerplate = set(survey["headers"]), set(survey["vocab"]), set(survey["boilerplate"])
    out = []
    for doc in docs:
        medium = doc["medium"]
        if medium == "speech-transcript":
            doc = clean_transcript(doc, params, rows)
        elif medium == "print-ocr":
            doc = clean_ocr(doc, params, headers, vocab, rows)
        elif medium == "typed-message":
            doc = clean_message(doc, params, survey["first"], rows)
        elif medium == "web":
            doc = clean_web(doc, params, boilerplate, rows)
        if doc is not None:
            doc["original"] = list(doc["segments"])
            out.append(doc)
    return Applied(drop_empty("clean", out, rows), rows)


def _drop(doc: dict, drop: dict[int, tuple[str, str]], rows: list[LedgerRow]) -> dict:
    for i in sorted(drop):
        reason, detail = drop[i]
        rows.append(remove_segment("clean", doc, i, reason, detail))
    keep = [i for i in range(len(doc["segments"])) if i not in drop]
    doc["segments"] = [doc["segments"][i] for i in keep]
    doc["seg_index"] = [doc["seg_index"][i] for i in keep]
    return doc


def _join(doc: dict, groups: list[list[int]], reasons: dict[int, str], rows: list[LedgerRow], sep: dict[int, str],
          details: dict[int, str] | None = None) -> dict:
    """Join each group of positions into its first segment; the others leave with a ledger row each (merged_into set)."""
    segs, idx = [], []
    for group in groups:
        text = doc["segments"][group[0]]
        for j in group[1:]:
            joiner = sep.get(j, " ")
            where = f"joined into segment {doc['seg_index'][group[0]]}"
            rows.append(merge_segment("clean", doc, j, doc["seg_index"][group[0]], reasons.get(j, "joined"),
                                      f"{details[j]}; {where}" if details and j in details else where))
            text = (text[:-1] if joiner == "" and text and text[-1] in "-\u00ad\u00ac\u2010" else text) + joiner + doc["segments"][j].lstrip()
        segs.append(text)
        idx.append(doc["seg_index"][group[0]])
    doc["segments"], doc["seg_index"] = segs, idx
    return doc


def clean_transcript(doc: dict, params: Params, rows: list[LedgerRow]) -> dict:
    meta = json.loads(doc["meta"])
    cues = {c_i: c for c_i, c in enumerate(meta.get("cues", []))}
    annotation = regex.compile(params.annotation_pattern, regex.I)
    speaker_re = regex.compile(params.speaker_pattern)
    drop, speakers = {}, {}
    for i, seg in enumerate(doc["segments"]):
        cue = cues.get(doc["seg_index"][i], {})
        m = speaker_re.match(seg)
        if m:
            speakers[i] = m.group("speaker").strip()
            seg = seg[m.end():]
        else:
            speakers[i] = cue.get("speaker")
        stripped = annotation.sub(" ", seg)
        if stripped != seg:  # an inline annotation leaves no space before the closing punctuation
            stripped = SPACE_BEFORE_PUNCT.sub(r"\1", stripped)
        stripped = " ".join(stripped.split())
        if not stripped.strip(" -–—.,"):
            drop[i] = ("non-speech", "only a non-speech annotation")
            continue
        if stripped != seg.strip():
            rows.append(LedgerRow("clean", "segment", "rewritten", doc["id"], doc["seg_index"][i], 0,
                                  "annotation-removed", "non-speech annotation or speaker label removed", None, doc["segments"][i][:500]))
        elif m:
            rows.append(LedgerRow("clean", "segment", "rewritten", doc["id"], doc["seg_index"][i], 0,
                                  "speaker-label", f"speaker label '{speakers[i]}' moved to metadata", None, None))
        doc["segments"][i] = stripped.lstrip("- ").strip()
    speaker_by_index = {doc["seg_index"][i]: s for i, s in speakers.items() if s}
    doc = _drop(doc, drop, rows)
    groups: list[list[int]] = []
    for i, seg in enumerate(doc["segments"]):
        si = doc["seg_index"][i]
        if groups:
            prev = groups[-1][-1]
            psi = doc["seg_index"][prev]
            gap = cues.get(si, {}).get("start", 0) - cues.get(psi, {}).get("end", 0)
            if (not SENTENCE_END.search(doc["segments"][prev]) and speaker_by_index.get(si) == speaker_by_index.get(psi)
                    and gap <= params.join_gap and seg[:1].islower()):
                groups[-1].append(i)
                continue
        groups.append([i])
    doc = _join(doc, groups, {}, rows, {})
    meta["speakers"] = {str(k): v for k, v in sorted(speaker_by_index.items())}
    doc["meta"] = json.dumps(meta, ensure_ascii=False, sort_keys=True)
    return doc


def clean_ocr(doc: dict, params: Params, headers: set[str], vocab: set[str], rows: list[LedgerRow]) -> dict:
    h = params.header_lines
    drop: dict[int, tuple[str, str]] = {}
    page_of: dict[int, int] = {}
    for p, page in enumerate(_pages(doc)):
        for i in page:
            page_of[i] = p
        top, bottom = page[:h], page[-h:] if h else []
        for pos in dict.fromkeys(top + bottom):
            line = doc["segments"][pos]
            where = "header" if pos in top else "footer"
            if PAGE_NUMBER.match(line):
                drop[pos] = ("page-number", f"page number at the {'top' if where == 'header' else 'bottom'} of page {p + 1}")
            elif _line_digest(line) in headers:
                drop[pos] = (f"running-{where}", f"repeated at the {'top' if where == 'header' else 'bottom'} of pages")
    meta = json.loads(doc["meta"])
    doc = _drop(doc, drop, rows)
    # Rejoin hyphenated words and broken lines.
    groups: list[list[int]] = []
    reasons, sep, details = {}, {}, {}
    hyphens = params.hyphens
    for i, seg in enumerate(doc["segments"]):
        if groups:
            prev = doc["segments"][groups[-1][-1]].rstrip()
            nxt = seg.lstrip()
            if prev and prev[-1] in hyphens and len(prev) > 1 and prev[-2].isalpha() and nxt[:1].isalpha() and nxt[:1].islower():
                head = WORD.findall(prev[:-1])
                tail = WORD.findall(nxt)
                left, right = (head[-1] if head else ""), (tail[0] if tail else "")
                if prev[-1] == "-" and f"{left}-{right}".casefold() in vocab and (left + right).casefold() not in vocab:
                    reasons[i], sep[i] = "line-joined", "-"
                    details[i] = f"kept the hyphen of '{left}-{right}', attested with it"
                    doc["segments"][groups[-1][-1]] = prev[:-1]
                else:
                    # Common practice: a line-end hyphen between two lower-case parts is a break
                    # unless the hyphenated form is attested and the joined one is not.
                    reasons[i], sep[i] = "dehyphenated", ""
                    attested = "attested" if (left + right).casefold() in vocab else "not attested either way"
                    details[i] = f"rejoined '{left + right}' ({attested})"
                groups[-1].append(i)
                continue
            if params.join_lines and not SENTENCE_END.search(prev) and nxt[:1].islower():
                reasons[i] = "line-joined"
                groups[-1].append(i)
                continue
        groups.append([i])
    doc = _join(doc, groups, reasons, rows, sep, details)
    meta["pages_removed_lines"] = len(drop)
    doc["meta"] = json.dumps(meta, ensure_ascii=False, sort_keys=True)
    return doc


def _message_key(doc: dict, params: Params) -> str:
    text = " ".join(doc["segments"])
    text = _pattern(params.forward_pattern).sub("", text)
    return comparison_key(text)


def _message_digest(doc: dict, params: Params) -> int:
    return digest64(_message_key(doc, params))


def _is_forwarded(doc: dict, params: Params) -> bool:
    return bool(doc["segments"]) and bool(_pattern(params.forward_pattern).match(doc["segments"][0]))


def clean_message(doc: dict, params: Params, first: dict[str, str], rows: list[LedgerRow]) -> dict | None:
    """``first`` maps the digest (16 hex digits) of a forwarded message's text to the first
    message with that text."""
    text = " ".join(doc["segments"]).strip()
    if _pattern(params.system_pattern).match(text):
        rows.append(remove_document("clean", doc, "system-message", text[:200]))
        return None
    meta = json.loads(doc["meta"])
    if _is_forwarded(doc, params):
        meta["forwarded"] = True
        original = first.get(_hex(_message_digest(doc, params)))
        if original and original != doc["id"]:
            rows.append(remove_document("clean", doc, "forwarded-copy", "a forwarded copy of an earlier message", dup_of=original))
            return None
        doc["segments"][0] = _pattern(params.forward_pattern).sub("", doc["segments"][0])
        rows.append(LedgerRow("clean", "segment", "rewritten", doc["id"], doc["seg_index"][0], 0, "forward-marker",
                              "forward marker removed; kept as forwarded", None, None))
    doc["meta"] = json.dumps(meta, ensure_ascii=False, sort_keys=True)
    drop = {i: ("empty", "empty after clean-up") for i, s in enumerate(doc["segments"]) if not s.strip()}
    return _drop(doc, drop, rows)


def clean_web(doc: dict, params: Params, boilerplate: set[str], rows: list[LedgerRow]) -> dict:
    drop = {}
    for i, seg in enumerate(doc["segments"]):
        if len(NAV_SEPARATORS.findall(seg)) >= 2 and len(seg) < 200:
            drop[i] = ("navigation", "a navigation line")
        elif _line_digest(seg) in boilerplate:
            drop[i] = ("web-boilerplate", "repeated across pages of the source")
    return _drop(doc, drop, rows)
