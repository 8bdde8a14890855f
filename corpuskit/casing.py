"""Case folding as a language writes it."""
from __future__ import annotations

import unicodedata

__all__ = ["fold_case", "comparison_key", "DOTLESS_I_LANGUAGES"]

# Languages whose dotted and dotless i are two letters: I pairs with ı, İ with i (Unicode's
# SpecialCasing.txt, the tr and az conditions; also Crimean Tatar, Tatar and Kazakh in Latin script).
DOTLESS_I_LANGUAGES = ("tr", "az", "crh", "tt", "kk")


def comparison_key(text: str) -> str:
    """Text as the stages compare it (duplicates, repeated lines, restricted text, language-ID
    input): Unicode full case folding, white space runs collapsed to one space, ends trimmed.

    >>> comparison_key("  Straße\tIS  here ")
    'strasse is here'
    """
    return " ".join(text.casefold().split())


def fold_case(word: str, language: str = "") -> str:
    """Lower case as the language writes it: Turkish and Azerbaijani İ -> i and I -> ı (not i plus a
    combining dot, as language-blind folding gives); elsewhere plain lower case (ß stays ß: a form
    written with ss is a variant to find, not the same word).

    >>> fold_case("İlk IŞIK", "tr"), fold_case("Straße", "de"), fold_case("İlk", "en")
    ('ilk ışık', 'straße', 'i̇lk')
    """
    if language.split("-")[0].lower() in DOTLESS_I_LANGUAGES:
        word = word.replace("İ", "i").replace("I", "ı")
    return unicodedata.normalize("NFC", word.lower())
