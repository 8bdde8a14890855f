"""Unicode normalisation (UAX #15), invisible characters, character mapping tables and mojibake repair.

Steps, in order, each a small named function (the ledger names the steps that
changed a segment):

``mojibake``   ftfy under conservative settings, only where its badness score drops;
``invisible``  zero-width spaces, soft hyphens, stray BOMs, bidi and C0/C1 controls removed;
               ZWJ/ZWNJ kept next to letters of scripts that use them (and in emoji);
``nfc``        NFC (or NFKC, with the folded compatibility characters reported);
``apostrophe`` apostrophe-like characters inside words written one way, per the corpus;
``quotes``, ``dashes``, ``digits``   mapping tables;
``whitespace`` Unicode spaces to U+0020, runs collapsed, ends trimmed.

The result is idempotent: normalising twice changes nothing more.
"""
from __future__ import annotations

import unicodedata
from collections import Counter
from dataclasses import dataclass, field
from functools import lru_cache

import numpy as np
import regex

from ..codepoints import CodePointTable, any_per_text, code_points
from ..ledger import LedgerRow
from ..protect import outside
from ..storage import stable_hash
from ..config import Checked, param
from .contract import Applied, Figures
from .units import drop_empty, keep_segments

VERSION = "4"


@dataclass(frozen=True)
class Params(Checked):
    form: str = param("NFC", choices=("NFC", "NFKC"), help="Unicode normalisation form")
    repair_mojibake: bool = param(True, help="repair text decoded with the wrong code page (ftfy)")
    quotes: str = param("ascii", choices=("keep", "ascii"), help="curly and angle quotes")
    dashes: str = param("hyphen", choices=("keep", "hyphen"), help="hyphen-like dashes and minus signs")
    digits: str = param("keep", choices=("keep", "ascii"), help="decimal digits of other scripts (Persian ۴, Thai ๔, "
                                                               "Bengali ৪): kept as written, or turned into ASCII 0-9")
    letter_variants: str = param("", choices=("", "persian"), help="a language's letter-variant table: 'persian' writes "
                                                                   "Arabic yeh and kaf (ي ك) and alef maksura as the "
                                                                   "Persian letters (ی ک)")


@dataclass
class NormaliseFigures(Figures):
    nfkc_folds: Counter = field(default_factory=Counter)     # "U+FB01" -> characters folded


def context_key(recipe, params) -> str:
    return stable_hash(recipe.corpus.apostrophe, list(recipe.corpus.protected_patterns))


def build_context(recipe, params, cache, key):
    return {"apostrophe": recipe.corpus.apostrophe, "protected": list(recipe.corpus.protected_patterns)}


# Characters removed everywhere, written by name.
INVISIBLE = frozenset(
    "\N{ZERO WIDTH SPACE}\N{SOFT HYPHEN}\N{ZERO WIDTH NO-BREAK SPACE}\N{WORD JOINER}"
    "\N{LEFT-TO-RIGHT MARK}\N{RIGHT-TO-LEFT MARK}\N{ARABIC LETTER MARK}"
    "\N{LEFT-TO-RIGHT EMBEDDING}\N{RIGHT-TO-LEFT EMBEDDING}\N{POP DIRECTIONAL FORMATTING}"
    "\N{LEFT-TO-RIGHT OVERRIDE}\N{RIGHT-TO-LEFT OVERRIDE}\N{LEFT-TO-RIGHT ISOLATE}"
    "\N{RIGHT-TO-LEFT ISOLATE}\N{FIRST STRONG ISOLATE}\N{POP DIRECTIONAL ISOLATE}"
    "\N{MONGOLIAN VOWEL SEPARATOR}\N{FUNCTION APPLICATION}\N{INVISIBLE TIMES}\N{INVISIBLE SEPARATOR}"
)
JOINERS = "\N{ZERO WIDTH JOINER}\N{ZERO WIDTH NON-JOINER}"
# Scripts whose orthographies use ZWJ/ZWNJ (UAX #31 and the Unicode core spec, ch. 23).
JOINER_SCRIPTS = ("Arab", "Syrc", "Deva", "Beng", "Guru", "Gujr", "Orya", "Taml",   # ISO 15924 codes
                  "Telu", "Knda", "Mlym", "Sinh", "Khmr", "Mymr", "Mong", "Tibt")
_JOINER_NEIGHBOUR = regex.compile(r"[%s\p{Extended_Pictographic}\p{M}]" % "".join(f"\\p{{scx={s}}}" for s in JOINER_SCRIPTS))
CONTROLS = regex.compile(r"[\p{Cc}--[\t\n]]", regex.V1)
APOSTROPHES = "'\N{RIGHT SINGLE QUOTATION MARK}\N{MODIFIER LETTER APOSTROPHE}\N{ACUTE ACCENT}\N{GRAVE ACCENT}\N{PRIME}\N{MODIFIER LETTER PRIME}"
_IN_WORD_APOSTROPHE = regex.compile(r"(?<=[\p{L}\p{M}])[%s](?=\p{L})" % regex.escape(APOSTROPHES))
APOSTROPHE_FORM = {"modifier": "\N{MODIFIER LETTER APOSTROPHE}", "ascii": "'"}
QUOTES = str.maketrans({"\N{LEFT DOUBLE QUOTATION MARK}": '"', "\N{RIGHT DOUBLE QUOTATION MARK}": '"',
                        "\N{DOUBLE LOW-9 QUOTATION MARK}": '"', "\N{DOUBLE HIGH-REVERSED-9 QUOTATION MARK}": '"',
                        "\N{LEFT-POINTING DOUBLE ANGLE QUOTATION MARK}": '"', "\N{RIGHT-POINTING DOUBLE ANGLE QUOTATION MARK}": '"',
                        "\N{LEFT SINGLE QUOTATION MARK}": "'", "\N{SINGLE LOW-9 QUOTATION MARK}": "'"})
DASHES = str.maketrans({"\N{HYPHEN}": "-", "\N{NON-BREAKING HYPHEN}": "-", "\N{MINUS SIGN}": "-",
                        "\N{FIGURE DASH}": "-"})
_HAS_QUOTE = regex.compile("[%s]" % regex.escape("".join(chr(c) for c in QUOTES)))
_HAS_DASH = regex.compile("[%s]" % regex.escape("".join(chr(c) for c in DASHES)))
# Per-language letter-variant tables.  Persian: Arabic yeh U+064A and alef maksura U+0649 are written
# as Farsi yeh U+06CC, Arabic kaf U+0643 as keheh U+06A9 (the Persian orthography's letters, as the
# Academy of Persian Language and Literature's spelling rules prescribe; from memory).
LETTER_VARIANTS = {"persian": str.maketrans({"\N{ARABIC LETTER YEH}": "\N{ARABIC LETTER FARSI YEH}",
                                              "\N{ARABIC LETTER ALEF MAKSURA}": "\N{ARABIC LETTER FARSI YEH}",
                                              "\N{ARABIC LETTER KAF}": "\N{ARABIC LETTER KEHEH}"})}
_OTHER_DIGIT = regex.compile(r"[\p{Nd}--[0-9]]", regex.V1)


def _safe_ftfy_config():
    import ftfy
    return ftfy.TextFixerConfig(uncurl_quotes=False, fix_latin_ligatures=False, fix_character_width=False,
                                fix_line_breaks=False, unescape_html=False, normalization=None,
                                restore_byte_a0=False, replace_lossy_sequences=False,
                                decode_inconsistent_utf8=False, remove_terminal_escapes=False,
                                remove_control_chars=False, fix_surrogates=True, explain=True)


@lru_cache(maxsize=1)
def mojibake_marks() -> frozenset[str] | None:
    """Characters without one of which ftfy's badness test cannot match.

    Each alternative of ftfy's pattern (``ftfy.badness.BADNESS_RE``) must match a non-ASCII
    character given as a literal or in a class of such characters ("[ÂÃÎÐ]", the C1 controls,
    "[{upper_accented}]" ...); for each alternative the smallest such element is taken, and a text
    holding none of their characters is not bad.  Worked out from the pattern itself when first
    needed; None (test every non-ASCII text) if an alternative has no such element, as a later
    ftfy might."""
    import re
    from ftfy.badness import BADNESS_RE
    try:
        from re import _constants as sre, _parser as sre_parse
    except ImportError:  # pragma: no cover - Python before 3.11
        import sre_constants as sre
        import sre_parse
    if BADNESS_RE.flags & re.IGNORECASE:
        return None
    items = list(sre_parse.parse(BADNESS_RE.pattern, BADNESS_RE.flags))
    branches = items[0][1][1] if len(items) == 1 and items[0][0] is sre.BRANCH else [items]
    marks: set[int] = set()
    for branch in branches:
        required = [chars for chars in map(_non_ascii_element, branch) if chars]
        if not required:
            return None
        marks.update(min(required, key=len))
    return frozenset(map(chr, marks))


def _non_ascii_element(item) -> set[int]:
    """The code points one pattern element matches, if it matches one character and only non-ASCII
    ones (a literal, or a class of literals and ranges); else the empty set."""
    try:
        from re import _constants as sre
    except ImportError:  # pragma: no cover
        import sre_constants as sre
    op, arg = item
    if op is sre.LITERAL:
        chars = {arg}
    elif op is sre.IN and all(o in (sre.LITERAL, sre.RANGE) for o, _ in arg):
        chars = set()
        for o, a in arg:
            chars.update([a] if o is sre.LITERAL else range(a[0], a[1] + 1))
    else:
        return set()
    return chars if chars and min(chars) > 0x7F else set()


def _may_be_mojibake(text: str) -> bool:
    """Whether ftfy's badness test could find anything: the text holds one of ``mojibake_marks``."""
    if text.isascii():
        return False
    marks = mojibake_marks()
    return marks is None or not marks.isdisjoint(text)


def mojibake(text: str) -> tuple[str, str]:
    """Repair mojibake where ftfy's badness measure says the result is more plausible.

    >>> mojibake("bÉ›lÉ› kamÉ›")[0]
    'bɛlɛ kamɛ'
    """
    if not _may_be_mojibake(text):
        return text, ""      # most text: none of the characters any of ftfy's patterns needs
    import ftfy
    from ftfy.badness import badness, is_bad

    how: list[str] = []
    # Repeat while each round makes the text more plausible, so that a second pass finds nothing
    # (one round can turn C1 controls into cp1252 letters that read as mojibake on the next).
    for _ in range(4):
        if not is_bad(text):
            break
        fixed, steps = ftfy.fix_and_explain(text, _safe_ftfy_config())
        if fixed == text or badness(fixed) >= badness(text):
            break
        text = fixed
        how += [f"{s.action}:{s.parameter}" for s in steps or []]
    return text, ",".join(how)


_INVISIBLE_OR_CONTROL = regex.compile(r"[%s%s\p{Cc}--[\t\n]]" % ("".join(sorted(INVISIBLE)), JOINERS), regex.V1)


def invisible(text: str) -> str:
    """Remove invisible and control characters; keep ZWJ/ZWNJ next to a script that uses them."""
    if not _INVISIBLE_OR_CONTROL.search(text):
        return text
    out = []
    for i, ch in enumerate(text):
        if ch in INVISIBLE:
            continue
        if ch in JOINERS:
            before = text[i - 1] if i else ""
            after = text[i + 1] if i + 1 < len(text) else ""
            if not (_JOINER_NEIGHBOUR.match(before) or _JOINER_NEIGHBOUR.match(after)):
                continue
        out.append(ch)
    return CONTROLS.sub("", "".join(out))


def compatibility_folds(text: str) -> Counter:
    """Characters that NFKC changes beyond NFC, with counts."""
    return Counter(ch for ch in text if unicodedata.normalize("NFKC", ch) != unicodedata.normalize("NFC", ch))


def digits(text: str) -> str:
    return _OTHER_DIGIT.sub(lambda m: str(unicodedata.digit(m.group(), 0)) if unicodedata.digit(m.group(), None) is not None else m.group(), text)


_SPACE_RUN = regex.compile(r"[\p{Zs}\t]+")
_MARK = regex.compile(r"\p{M}")
_SPACE_TO_CHANGE = regex.compile(r"[\p{Zs}\t]{2}|[[\p{Zs}\t]--\x20]|^[\p{Zs}\t]|[\p{Zs}\t]$", regex.V1)


def whitespace(text: str) -> str:
    """Unicode spaces and tabs become one U+0020, ends trimmed; but a space that carries a
    combining mark (an isolated diacritic written on a space or no-break space, as the Unicode
    Standard's section 7.9 describes) is kept as it is.

    >>> whitespace("  a \u00a0\u0301 b  ")
    'a \xa0\u0301 b'
    """
    if not _SPACE_TO_CHANGE.search(text):
        return text                       # single U+0020 between words only: nothing changes

    def collapse(m):
        run, after = m.group(), m.end()
        if after < len(text) and _MARK.match(text, after):
            return (" " if len(run) > 1 and m.start() > 0 else "") + run[-1]
        return " "

    text = _SPACE_RUN.sub(collapse, text).rstrip(" ")
    while text[:1] == " " and not _MARK.match(text, 1):
        text = text[1:]
    return text


def normalise_text(text: str, params: Params, apostrophe: str = "keep",
                   protected: tuple = (), folds: Counter | None = None) -> tuple[str, list[str]]:
    """The normalised text and the names of the steps that changed it.

    A later step can turn repaired text into something ftfy reads as mojibake again
    (a C1 control becomes a curly quote, then an ASCII one), so while ftfy still finds
    the result suspicious the pass is repeated, a few times at most: the output is a
    fixed point and a second run changes nothing.  ``folds`` (if given) counts the characters
    that NFKC folded.
    """
    text, steps = _normalise_once(text, params, apostrophe, protected, folds)
    for _ in range(3):
        if not (params.repair_mojibake and steps and _looks_bad(text)):
            break
        again, more = _normalise_once(text, params, apostrophe, protected, folds)
        if again == text:
            break
        text, steps = again, steps + more
    return text, steps


def _looks_bad(text: str) -> bool:
    from ftfy.badness import is_bad
    return _may_be_mojibake(text) and is_bad(text)


def _normalise_once(text: str, params: Params, apostrophe: str, protected: tuple = (),
                    fold_counts: Counter | None = None) -> tuple[str, list[str]]:
    steps = []

    def step(name, new):
        nonlocal text
        if new != text:
            steps.append(name)
            text = new

    if params.repair_mojibake:
        fixed, how = mojibake(text)
        step("mojibake" + (f"({how})" if how else ""), fixed)
    step("invisible", invisible(text))
    if params.form == "NFKC":
        folds = compatibility_folds(text)
        if folds:
            if fold_counts is not None:
                fold_counts.update({f"U+{ord(c):04X}": n for c, n in folds.items()})
            steps.append("nfkc-folded:" + " ".join(f"U+{ord(c):04X}x{n}" for c, n in sorted(folds.items())))
        text = unicodedata.normalize("NFKC", text)
    else:
        step("nfc", unicodedata.normalize("NFC", text))
    # The mapping passes leave protected spans (placeholders, tags, URLs, numbers with units) alone.
    # Quotes first: a mapped quote between letters is then an apostrophe, as on the next pass.
    if params.quotes == "ascii":
        if _HAS_QUOTE.search(text):
            step("quotes", outside(text, lambda t: t.translate(QUOTES), protected))
    if apostrophe in APOSTROPHE_FORM:
        step("apostrophe", outside(text, lambda t: _IN_WORD_APOSTROPHE.sub(APOSTROPHE_FORM[apostrophe], t), protected))
    if params.dashes == "hyphen":
        if _HAS_DASH.search(text):
            step("dashes", outside(text, lambda t: t.translate(DASHES), protected))
    if params.digits == "ascii":
        step("digits", outside(text, digits, protected))
    if params.letter_variants:
        step("letter-variants", text.translate(LETTER_VARIANTS[params.letter_variants]))
    step("whitespace", whitespace(text))
    return text, steps


_WHITESPACE_TO_CHANGE = regex.compile(r"[[\p{Zs}\t]--\x20]", regex.V1)   # a space of any other kind, a tab


@lru_cache(maxsize=16)
def _attention_table(params: Params, apostrophe: str) -> CodePointTable:
    """Per code point, 1 if a step after ``mojibake`` could change a text holding it (a
    character ``invisible`` removes, one NFKC folds, one the quote, apostrophe, dash, digit and
    letter-variant tables map, a space other than U+0020), else 0; decided by the steps' own
    patterns and tables."""
    mapped = set()
    if params.quotes == "ascii":
        mapped.update(map(chr, QUOTES))
    if apostrophe in APOSTROPHE_FORM:
        mapped.update(APOSTROPHES)
    if params.dashes == "hyphen":
        mapped.update(map(chr, DASHES))
    if params.letter_variants:
        mapped.update(map(chr, LETTER_VARIANTS[params.letter_variants]))

    def attention(ch: str) -> int:
        return int(ch in mapped or bool(_INVISIBLE_OR_CONTROL.match(ch)) or bool(_WHITESPACE_TO_CHANGE.match(ch))
                   or (params.digits == "ascii" and bool(_OTHER_DIGIT.match(ch)))
                   or (params.form == "NFKC" and unicodedata.normalize("NFKC", ch) != unicodedata.normalize("NFC", ch)))

    return CodePointTable(attention, np.int8)


def untouched(texts: list[str], params: Params, apostrophe: str = "keep") -> list[bool]:
    """Per text, whether every step after ``mojibake`` leaves it as it is: it holds no character
    any of them changes (see ``_attention_table``), is already in the normalisation form, and has
    no space at either end or two in a row.  Found for all the texts at once (numpy)."""
    points, starts = code_points(texts)
    flagged = any_per_text(_attention_table(params, apostrophe)(points) != 0, starts).tolist()
    form = params.form
    return [not flag and unicodedata.is_normalized(form, t) and t[:1] != " " and t[-1:] != " " and "  " not in t
            for t, flag in zip(texts, flagged)]


def apply(docs: list[dict], params: Params, ctx: dict | None):
    ctx = ctx or {"apostrophe": "keep", "protected": []}
    apostrophe, protected = ctx["apostrophe"], tuple(ctx["protected"])
    rows: list[LedgerRow] = []
    figures = NormaliseFigures()
    quiet = iter(untouched([seg for doc in docs for seg in doc["segments"]], params, apostrophe))
    for doc in docs:
        keep = []
        for i, seg in enumerate(doc["segments"]):
            if next(quiet) and (not params.repair_mojibake or mojibake(seg)[0] == seg):
                new, steps = seg, []          # most text: no step would change it
            else:
                new, steps = normalise_text(seg, params, apostrophe, protected, figures.nfkc_folds)
            if steps and steps != ["whitespace"]:
                rows.append(LedgerRow("normalise", "segment", "rewritten", doc["id"], doc["seg_index"][i], 0,
                                      "normalised", ",".join(steps), None, None))
            doc["segments"][i] = new
            keep.append(bool(new))
        if not all(keep):
            keep_segments("normalise", doc, keep, ["empty-after-normalisation"] * len(keep), [""] * len(keep), rows)
    return Applied(drop_empty("normalise", docs, rows), rows, figures)
