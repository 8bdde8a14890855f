"""Protected spans: text that no rewriting step may change.

Normalisation's mapping passes, confusable repair, transliteration and spelling variants all work
only outside these spans: placeholders of message catalogues (printf ``%s``, ``%(name)d``,
``%1$s``; Python format ``{name}``, ``{0:>5}``; ICU ``{count, plural, ...}``), markup tags, URLs,
e-mail addresses, and numbers with units (``5 μA``, ``10 μg``, ``3.5 kg``), plus the recipe's own
patterns (``[corpus] protected_patterns``).
"""
from __future__ import annotations

from functools import lru_cache
from typing import Callable, Iterable

import regex

__all__ = ["PROTECTED", "spans", "outside", "pieces"]

UNITS = r"""(?:[kMGTmμµnpcd]?(?:m|g|s|A|V|W|Hz|Pa|J|N|Ω|Ohm|L|l|B|b|bit|mol|K|°C|°F)(?:[²³]|/s|/h)?
              |km/h|%|‰|°)"""
PROTECTED = regex.compile(rf"""
      %(?:\(\w+\))?[-+ #0]*(?:\d+\$)?(?:\*|\d+)?(?:\.(?:\*|\d+))?[hlLqjzt]*[diouxXeEfFgGcrsaAp%]   # printf
    | \{{\w+,\s*(?:number|date|time|spellout|ordinal|duration)\b[^{{}}]*\}}                         # ICU simple argument
    | \{{\w+,\s*(?:plural|select|selectordinal)\s*,(?:\s*offset:\d+)?                                # ICU head ...
    | (?<![\w])(?:=\d+|zero|one|two|few|many|other)\s*\{{ | \}} | (?<=\{{[^{{}}]*)\#                    # ... cases, ends, #
    | \{{[\w.\[\]]*(?:![rsa])?(?::[^{{}}]*)?\}}                                                  # Python format
    | <\/?[A-Za-z][\w:-]*(?:\s[^<>]*)?\/?>                                                     # markup tags
    | (?:https?|ftp)://\S+ | www\.\S+                                                           # URLs
    | [\w.+-]+@[\w-]+(?:\.[\w-]+)+                                                               # e-mail
    | (?<![\w.])\d+(?:[.,]\d+)?\s?{UNITS}(?![\w])                                                # number + unit
    """, regex.X | regex.V1)


@lru_cache(maxsize=16)
def _pattern(extra: tuple[str, ...]) -> regex.Pattern:
    if not extra:
        return PROTECTED
    return regex.compile("|".join([f"(?:{PROTECTED.pattern})"] + [f"(?:{p})" for p in extra]), regex.X | regex.V1)


def spans(text: str, extra: Iterable[str] = ()) -> list[tuple[int, int]]:
    """(start, end) of every protected span.

    >>> t = "%(num)d сат, 5 μA <b>x</b>"
    >>> [t[a:b] for a, b in spans(t)]
    ['%(num)d', '5 μA', '<b>', '</b>']
    """
    if not any(c in text for c in "%{<:@w0123456789") and not extra:
        return []
    return [m.span() for m in _pattern(tuple(extra)).finditer(text)]


def pieces(text: str, extra: Iterable[str] = ()) -> list[tuple[bool, str]]:
    """The text as (protected, piece) pairs in order; joined they give the text back."""
    out, last = [], 0
    for a, b in spans(text, extra):
        if a > last:
            out.append((False, text[last:a]))
        out.append((True, text[a:b]))
        last = b
    if last < len(text) or not out:
        out.append((False, text[last:]))
    return out


def outside(text: str, change: Callable[[str], str], extra: Iterable[str] = ()) -> str:
    """``change`` applied to the text outside protected spans; the spans are copied.

    >>> outside("say “%s” twice", str.upper)
    'SAY “%s” TWICE'
    """
    parts = pieces(text, extra)
    if len(parts) == 1 and not parts[0][0]:
        return change(text)
    return "".join(p if protected else change(p) for protected, p in parts)
