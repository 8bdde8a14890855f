"""Words of a text: Unicode word segmentation (UAX #29), with a dictionary where a script does not
separate words by spaces.

Text in scripts written without spaces between words (Thai, Lao, Khmer, Myanmar, Han, Hiragana,
Katakana, Tibetan) is segmented by ICU's word break iterator (PyICU, through the pyicu-wheels
package), which applies UAX #29 and the dictionaries ICU ships for those scripts.  Other text keeps
the pattern the reports always used: runs of letters and marks with in-word apostrophes and
hyphens, so zero-width joiners and non-joiners stay inside their words.
"""
from __future__ import annotations

from functools import lru_cache

import regex

__all__ = ["words", "words_of", "NO_SPACE", "needs_dictionary"]

WORD = regex.compile(r"[\p{L}\p{M}\p{Lm}\N{ZERO WIDTH NON-JOINER}\N{ZERO WIDTH JOINER}ʼ'’-]+")
NO_SPACE = regex.compile(r"[\p{Thai}\p{Lao}\p{Khmer}\p{Myanmar}\p{Han}\p{Hiragana}\p{Katakana}\p{Tibetan}]")
_WORDISH = regex.compile(r"[\p{L}\p{M}\p{N}]")
NO_SPACE_FROM = "\u0e01"   # the first code point NO_SPACE matches (Thai ko kai; a test checks it)


def needs_dictionary(text: str) -> bool:
    """Whether ``text`` holds a character of a script written without spaces between words
    (``NO_SPACE``); text whose largest character comes before all of them is answered without
    the regular expression (about three times faster)."""
    return not text.isascii() and max(text) >= NO_SPACE_FROM and NO_SPACE.search(text) is not None


@lru_cache(maxsize=8)
def _break_iterator(language: str):
    import icu
    return icu.BreakIterator.createWordInstance(icu.Locale(language or "root"))


def _dictionary_words(text: str, language: str) -> list[str]:
    bi = _break_iterator(language)
    bi.setText(text)
    out, start = [], bi.first()
    for end in bi:
        piece = text[start:end]
        if _WORDISH.search(piece) and not piece.isdigit():
            out.append(piece)
        start = end
    return out


def words(text: str, language: str = "") -> list[str]:
    """The words of ``text``.

    >>> words("ba’a ŋɔ-bɛ, kamɛ!"), words("สวัสดีครับ", "th")
    (['ba’a', 'ŋɔ-bɛ', 'kamɛ'], ['สวัสดี', 'ครับ'])
    """
    if needs_dictionary(text):
        return _dictionary_words(text, language)
    return [w for w in WORD.findall(text) if w.strip("-'’ʼ\u200c\u200d")]


def words_of(texts: list[str], language: str = "") -> list[str]:
    """The words of several texts in order: ``words`` of each, concatenated (found in one pass
    over the texts joined by line feeds, which no word holds, unless a text needs the dictionary).

    >>> words_of(["ba’a ŋɔ-bɛ,", "kamɛ!"])
    ['ba’a', 'ŋɔ-bɛ', 'kamɛ']
    """
    joined = "\n".join(texts)
    if needs_dictionary(joined):
        return [w for t in texts for w in words(t, language)]
    return [w for w in WORD.findall(joined) if w.strip("-'’ʼ\u200c\u200d")]
