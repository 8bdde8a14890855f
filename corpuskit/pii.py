"""Personal data in text: phone numbers, e-mail addresses, profile URLs and ID patterns.

Phone numbers are found in two steps.  A candidate pattern takes any run of
digits with the separators people write between groups (spaces, dots, hyphens,
slashes, brackets, a trunk zero in brackets, an extension).  A candidate is
*not* a phone number when it reads as something else that people write with
digits: a date in any common order, a time or time range, a year range, a page
range, a decimal or grouped amount with a currency or unit beside it, an ISBN,
a verse or page reference.  What is left is judged with ``phonenumbers`` (the
Python port of libphonenumber): a number in international form (leading ``+``
or ``00``) in any region; a national number that is possible in one of the
regions the recipe declares (``[corpus] regions``); and, when no region is
declared, a fallback for digit runs grouped the way phone numbers are.

Nothing here stores the text it finds; callers count by kind.
"""
from __future__ import annotations

from collections import Counter
from functools import lru_cache
from typing import Iterable, Sequence

import regex

__all__ = ["scrub", "may_hold_personal_data", "find_phones", "is_region", "PLACEHOLDER", "PII_KINDS"]

PII_KINDS = ("email", "url", "phone", "id")
PLACEHOLDER = regex.compile(r"<(?:PHONE|EMAIL|URL|ID)>")

EMAIL = regex.compile(r"[\w.+-]+@[\w-]+(?:\.[\w-]+)+")
PROFILE_URL = regex.compile(r"""(?:https?://|www\.)\S*?
    (?:[?&](?:user|uid|id|phone|email|name|profile)=      # a query naming a person
      | /(?:u|user|users|profile|people)/)\S*             # or a profile path
    """, regex.I | regex.X)

# A run of digit groups as people write phone numbers.  Groups are separated by one
# space, dot, hyphen or slash (spaces allowed around a hyphen or slash), and may sit in
# brackets: "(079)-4298241", "+49 (0) 3051 221564", "61/918 0364", "(725)796-4563x8390".
_SEP = r"(?:\s?[-/]\s?|[ \t\u00a0.\u2010\u2011\u2012\u2013])"
_BRACKET = r"\(\s?\+?\d{1,5}(?:[-/ ]\d{1,5})?\s?\)"     # (079), (0), (+44), (3-2385), (06/1)
PHONE_CANDIDATE = regex.compile(rf"""
    (?<![\w+#@/.:,])                       # not inside a word, an amount or a path
    (?P<intl>\+|00(?=[1-9]))?              # international prefix
    (?:\s?{_BRACKET}\s?{_SEP}?)?            # a bracketed first group
    \d{{1,15}}
    (?:
        {_SEP}?{_BRACKET}{_SEP}?\d{{1,15}}   # a bracketed group inside: "+46 (0)8 967"
      | {_SEP}\d{{1,15}}
    ){{0,7}}
    (?P<ext>\s?(?:x|ext\.?|extn\.?|extension|\#)\s?\d{{1,6}})?   # an extension
    (?![\w@])(?![.,:]\d)
    """, regex.X | regex.I)

_DIGIT = regex.compile(r"\d")
# A date: ISO 8601, and day-month-year or month-day-year with 2- or 4-digit years, with one
# consistent separator; also a range of two dates.  Day and month must be in range.
_DATE = regex.compile(r"(\d{4})([-./])(\d{1,2})\2(\d{1,2})|(\d{1,2})([-./])(\d{1,2})\6(\d{4}|\d{2})")


def _is_date(text: str) -> bool:
    m = _DATE.fullmatch(text)
    if not m:
        return False
    if m.group(1):
        month, day = int(m.group(3)), int(m.group(4))
        return 1 <= month <= 12 and 1 <= day <= 31
    a, b = int(m.group(5)), int(m.group(7))
    return (1 <= a <= 31 and 1 <= b <= 12) or (1 <= a <= 12 and 1 <= b <= 31)


def _is_date_or_range(text: str) -> bool:
    if _is_date(text):
        return True
    parts = regex.split(r"\s?[-–/]\s?(?=\d)", text)
    for cut in range(1, len(parts)):
        left = "-".join(parts[:cut])
        right = "-".join(parts[cut:])
        if _is_date(left.replace("-", text[len(parts[0])])) and _is_date(right):
            return True
    return False


# Times and time ranges: 09.00-17.30, 9:00 - 17:00
TIME_RANGE = regex.compile(r"^\d{1,2}[.:]\d{2}(?:\s?[-–]\s?\d{1,2}[.:]\d{2})?$")
# Two numbers of equal length joined by a dash where the second is a little larger: a page,
# verse or year range (1990-2000, 1234-1256), not a phone number.
NUMBER_RANGE = regex.compile(r"^(\d{2,4})\s?[-–]\s?(\d{2,4})$")
# 1-3 digits, then groups of exactly three: 1 250 000, 12.500.000 (thousands)
THOUSANDS = regex.compile(r"^[1-9]\d{0,2}(?P<s>[ \u00a0\u202f.,'])\d{3}(?:(?P=s)\d{3})*(?:[.,]\d{1,2})?$")
DECIMAL = regex.compile(r"^(?:0|[1-9]\d*)[.,]\d+$")
# Words before a number that say what it is: not a phone number.
_NOT_PHONE_BEFORE = regex.compile(r"""(?:
      \p{Sc}                                          # $ € £ ₦ ...
    | \b(?-i:[A-Z]{3})                                # an ISO 4217 code: KES, USD
    | \b(?-i:R|N)                                     # rand, naira
    | \b(?:ksh|kshs|tsh|ush|rs|rp|sh|shs)\.?          # common short currency words
    | \bisbn(?:-1[03])?:?                             # ISBN
    | \b(?:pp?|pg|pgs|page|pages|vol|no|nr|art|para|chap|chapter|ch|verse|vv?|ref|fig|tab|table)\.?
    | [§¶]
    )\s?$""", regex.X | regex.I)
_NOT_PHONE_AFTER = regex.compile(r"""^\s?(?:
      \p{Sc}
    | (?-i:[A-Z]{3})\b
    | /-                                              # 1,500/-  (amount, East African usage)
    | %|‰|°
    | (?:mm|cm|dm|km|m|mg|g|kg|t|ml|cl|dl|l|ha|acres?|m2|m²|km2|km²|kwh|kw|w|v|hz|khz|mhz|ghz|
         mb|gb|tb|kb|bytes?|bits?|px|pt|sec|secs|s|ms|min|mins|h|hrs?|hours?|days?|years?|yrs?|
         people|persons|households|speakers|copies|words|pages|tokens|
         shillings?|dollars?|euros?|pounds?|francs?|cedis?|nairas?|rand|rupees?|yuan|yen)\b
    )""", regex.X | regex.I)


@lru_cache(maxsize=1)
def _regions() -> frozenset[str]:
    import phonenumbers
    return frozenset(phonenumbers.SUPPORTED_REGIONS)


def is_region(code: str) -> bool:
    """Whether ``code`` is an ISO 3166-1 alpha-2 region that libphonenumber has metadata for.

    >>> is_region("KE"), is_region("ke"), is_region("XX")
    (True, False, False)
    """
    return code in _regions()


def _isbn(digits: str, text: str) -> bool:
    """A hyphenated ISBN-13 (978/979, check digit right) or ISBN-10 ending in a one-digit group."""
    if len(digits) == 13 and digits[:3] in ("978", "979"):
        total = sum(int(d) * (1 if i % 2 == 0 else 3) for i, d in enumerate(digits))
        return total % 10 == 0
    if len(digits) == 10 and regex.search(r"[-\s]\d$", text):
        total = sum(int(d) * (10 - i) for i, d in enumerate(digits))
        return total % 11 == 0
    return False


def _context_says_not_phone(span: str, before: str, after: str) -> bool:
    """A currency, unit, ISBN or reference word beside the number, or the shape of a date or time."""
    core = span.strip()
    return bool(_NOT_PHONE_BEFORE.search(before) or _NOT_PHONE_AFTER.match(after)
                or _is_date_or_range(core) or TIME_RANGE.match(core))


def _valid_in_region(span: str, regions: Sequence[str]) -> bool:
    """A national number that a declared region's numbering plan calls valid (strict)."""
    import phonenumbers

    for region in regions:
        try:
            if phonenumbers.is_valid_number(phonenumbers.parse(span, region)):
                return True
        except phonenumbers.NumberParseException:
            continue
    return False


def _reads_as_number(span: str, digits: str, regions: Sequence[str]) -> bool:
    """A decimal, a page or year range, an ISBN, or a grouped amount (unless a declared
    region's numbering plan calls it a valid number: 712 345 in Andorra)."""
    core = span.strip()
    if DECIMAL.match(core):
        # 712.345 is a number in Andorra's plan; 123.801961 is a decimal anywhere
        return not (len(regex.split(r"[.,]", core)[1]) in (3, 4) and _valid_in_region(core, regions))
    m = NUMBER_RANGE.match(core)
    if m and len(m.group(1)) == len(m.group(2)):
        a, b = int(m.group(1)), int(m.group(2))
        if a < b and (b - a < 200 or (len(m.group(1)) == 4 and 1000 <= a and b <= 2199)):
            return True
    if THOUSANDS.match(core) and len(digits) <= 8 and not _valid_in_region(core, regions):
        return True
    return _isbn(digits, core)


def _phone_like_grouping(span: str, digits: str) -> bool:
    """The no-region fallback: groups as phone numbers are grouped, or one long run."""
    groups = regex.findall(r"\d+", span)
    if len(groups) == 1:
        return len(digits) >= 9 or (len(digits) >= 8 and digits[0] == "0")
    return span.lstrip()[:1] in "(0" or len(digits) >= 8 or len(groups) >= 3


def _is_phone(span: str, intl: bool, regions: Sequence[str]) -> bool:
    import phonenumbers

    digits = "".join(_DIGIT.findall(span))
    if not 5 <= len(digits) <= 17:
        return False
    if len(digits) < 7:
        # Short national numbers exist (small territories): only where a declared region's
        # numbering plan says the number is valid, or in international form.
        return _valid_short(span, digits, intl, regions)
    if intl:
        number = "+" + digits[2:] if span.lstrip().startswith("00") else "+" + digits
        try:
            parsed = phonenumbers.parse(number, None)
        except phonenumbers.NumberParseException:
            return 8 <= len(digits) <= 15
        return phonenumbers.is_possible_number(parsed) or 8 <= len(digits) <= 15
    for region in regions:
        try:
            parsed = phonenumbers.parse(span, region)
        except phonenumbers.NumberParseException:
            continue
        if phonenumbers.is_possible_number(parsed):
            return True
    if regions and not span.lstrip().startswith(("0", "(")):
        # Declared regions, and the number is possible in none of them: only a long run of
        # digits grouped as phone numbers are still counts.
        return len(digits) >= 10 and _phone_like_grouping(span, digits)
    return _phone_like_grouping(span, digits)


def _valid_short(span: str, digits: str, intl: bool, regions: Sequence[str]) -> bool:
    import phonenumbers

    for region in [None] if intl else regions:
        try:
            parsed = phonenumbers.parse("+" + digits[2 if span.lstrip().startswith("00") else 0:] if intl else span, region)
        except phonenumbers.NumberParseException:
            continue
        if phonenumbers.is_valid_number(parsed):
            return True
    return False


def find_phones(text: str, regions: Sequence[str] = ()) -> list[tuple[int, int]]:
    """(start, end) of every phone number in ``text``.

    >>> t = "call 0712 345 678 or +49 (0) 3051 221564, not on 17.09.1971 or for KES 1,500"
    >>> [t[a:b] for a, b in find_phones(t, ["KE"])]
    ['0712 345 678', '+49 (0) 3051 221564']
    """
    spans = []
    for m in PHONE_CANDIDATE.finditer(text):
        span = m.group()
        start, end = m.span()
        ext = m.group("ext")
        main = span[:len(span) - len(ext)] if ext else span
        digits = "".join(_DIGIT.findall(main))
        if len(digits) < (5 if regions or m.group("intl") else 7):
            continue
        before, after = text[max(0, start - 12):start], text[end:end + 12]
        if _context_says_not_phone(main, before, after):
            continue
        if _reads_as_number(main, digits, regions):
            continue
        if _is_phone(main, bool(m.group("intl")), regions):
            lead = len(span) - len(span.lstrip())
            spans.append((start + lead, end))
    return spans


def _replace_spans(text: str, spans: list[tuple[int, int]], placeholder: str) -> str:
    out, last = [], 0
    for a, b in spans:
        out.append(text[last:a])
        out.append(placeholder)
        last = b
    out.append(text[last:])
    return "".join(out)


@lru_cache(maxsize=64)
def _compiled(patterns: tuple[str, ...]) -> tuple:
    return tuple(regex.compile(p) for p in patterns)


def may_hold_personal_data(text: str) -> bool:
    """Whether a detector without ID patterns could find anything: an e-mail needs '@', a profile
    URL '://' or 'www.', a phone number digits.  A quick test that most segments fail."""
    return "@" in text or "://" in text or "www." in text or _DIGIT.search(text) is not None


def scrub(text: str, id_patterns: Iterable[str] = (), regions: Sequence[str] = ()) -> tuple[str, Counter]:
    """Replace personal data with typed placeholders; the counts per kind.

    >>> scrub("call +44 20 7946 0958 or mail ana@example.org")
    ('call <PHONE> or mail <EMAIL>', Counter({'email': 1, 'phone': 1}))
    """
    counts: Counter = Counter()
    if not id_patterns and not may_hold_personal_data(text):
        return text, counts               # nothing any detector could find (most segments)
    if "@" in text:
        text, n = EMAIL.subn("<EMAIL>", text)
        counts["email"] += n
    if "://" in text or "www." in text:
        text, n = PROFILE_URL.subn("<URL>", text)
        counts["url"] += n
    if len(_DIGIT.findall(text)) >= (5 if regions or "+" in text or "00" in text else 7):
        spans = find_phones(text, tuple(regions))
        if spans:
            text = _replace_spans(text, spans, "<PHONE>")
            counts["phone"] += len(spans)
    for pat in _compiled(tuple(id_patterns)):
        text, n = pat.subn("<ID>", text)
        counts["id"] += n
    return text, +counts
