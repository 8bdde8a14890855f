"""Script codes: ISO 15924 (through pycountry's copy of the registry) and the Unicode Script
values (UAX #24) whose characters write each code.

Variant codes name a style of an encoded script (ISO 15924 lists them; Unicode encodes no separate
characters for them): Aran (Nastaliq) is written with Arabic characters, Latf and Latg with Latin,
Syre, Syrj and Syrn with Syriac, Cyrs with Cyrillic, Geok with Georgian; Hans and Hant with Han;
Jpan with Han, Hiragana and Katakana; Kore with Hangul and Han; Hrkt with Hiragana and Katakana.
"""
from __future__ import annotations

from functools import lru_cache

__all__ = ["canonical_script", "unicode_scripts", "char_script", "char_extensions", "VARIANTS"]

VARIANTS: dict[str, tuple[str, ...]] = {
    "Aran": ("Arab",), "Latf": ("Latn",), "Latg": ("Latn",), "Syre": ("Syrc",), "Syrj": ("Syrc",),
    "Syrn": ("Syrc",), "Cyrs": ("Cyrl",), "Geok": ("Geor",), "Hans": ("Hani",), "Hant": ("Hani",),
    "Jpan": ("Hani", "Hira", "Kana"), "Kore": ("Hang", "Hani"), "Hrkt": ("Hira", "Kana"),
    "Hanb": ("Hani", "Bopo"), "Jamo": ("Hang",),
}


@lru_cache(maxsize=1)
def _iso15924() -> dict[str, str]:
    """Lower-case code -> the code as ISO 15924 writes it (first letter capital)."""
    import pycountry
    return {s.alpha_4.lower(): s.alpha_4 for s in pycountry.scripts}


def canonical_script(code: str) -> str | None:
    """The ISO 15924 code as the standard writes it, or None if ``code`` is not one.

    >>> canonical_script("arab"), canonical_script("ARAN"), canonical_script("Xxxx")
    ('Arab', 'Aran', None)
    """
    return _iso15924().get(code.strip().lower()) if len(code.strip()) == 4 else None


@lru_cache(maxsize=None)
def unicode_scripts(code: str) -> tuple[str, ...]:
    """The Unicode Script values whose characters write ``code`` (empty: Unicode encodes none).

    >>> unicode_scripts("Aran"), unicode_scripts("Latn"), unicode_scripts("Blis")
    (('Arab',), ('Latn',), ())
    """
    if code in VARIANTS:
        return VARIANTS[code]
    from fontTools.unicodedata import script_name
    try:
        script_name(code)
    except KeyError:
        return ()
    return (code,)


@lru_cache(maxsize=65536)
def char_script(ch: str) -> str:
    """The Unicode Script property (ISO 15924 code) of one character (UAX #24), from fontTools' data."""
    from fontTools import unicodedata as ucd
    return ucd.script(ch)


@lru_cache(maxsize=65536)
def char_extensions(ch: str) -> frozenset[str]:
    """The Script_Extensions of one character: the scripts a Common or Inherited mark is used with."""
    from fontTools import unicodedata as ucd
    return frozenset(ucd.script_extension(ch))
