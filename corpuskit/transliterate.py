"""Transliteration tables: a TSV format of our own, applied longest match first.

Format (UTF-8)::

    # corpuskit transliteration table 1
    # name: demo Cyrillic to Latin
    # from: Cyrl
    # to: Latn
    # class V = аеиоуɛɔ          (a letter class usable in contexts)
    # columns: from <TAB> to [<TAB> context]
    нг	ŋ
    е	ɛ	^            (only at word start)
    е	e	after:V      (only after a letter of class V; 'before:V' likewise)

Rules are written in lower case and apply to every casing: a capitalised
source gives a capitalised result, an all-capitals word an all-capitals one.
At equal position the longest source wins; among equals, the first listed.
"""
from __future__ import annotations

import unicodedata
from dataclasses import dataclass, field
from pathlib import Path

import regex

from .errors import RecipeError

__all__ = ["Table", "Rule", "load_table", "parse_table", "apply_table", "irreversible_rules", "inverse_table",
           "round_trips", "rule_report"]

HEADER = "# corpuskit transliteration table 1"
_LETTER = regex.compile(r"[\p{L}\p{M}]")


@dataclass(frozen=True)
class Rule:
    src: str
    dst: str
    start: bool = False
    end: bool = False
    after: str = ""       # letters that must precede
    before: str = ""      # letters that must follow
    line: int = 0


@dataclass
class Table:
    name: str
    source: str
    target: str
    rules: list[Rule] = field(default_factory=list)
    by_first: dict[str, list[Rule]] = field(default_factory=dict)


def parse_table(text: str, where: str = "table") -> Table:
    lines = text.splitlines()
    if not lines or lines[0].strip() != HEADER:
        raise RecipeError(f"{where} line 1: a transliteration table starts with '{HEADER}'; add that header.")
    meta, classes, rules = {}, {}, []
    for n, line in enumerate(lines[1:], 2):
        if line.startswith("#"):
            body = line[1:].strip()
            if body.startswith("class ") and "=" in body:
                k, v = body[6:].split("=", 1)
                classes[k.strip()] = v.strip()
            elif ":" in body:
                k, v = body.split(":", 1)
                meta[k.strip()] = v.strip()
            continue
        if not line.strip():
            continue
        cols = line.split("\t")
        if len(cols) < 2 or not cols[0]:
            raise RecipeError(f"{where} line {n}: expected 'from<TAB>to[<TAB>context]'; separate columns with a tab.")
        ctx = cols[2].strip() if len(cols) > 2 else ""
        kw = {}
        for part in ctx.split():
            if part == "^":
                kw["start"] = True
            elif part == "$":
                kw["end"] = True
            elif part.startswith(("after:", "before:")):
                k, cls = part.split(":", 1)
                if cls not in classes:
                    raise RecipeError(f"{where} line {n}: letter class '{cls}' is not defined; add '# class {cls} = ...'.")
                kw[k] = classes[cls]
            else:
                raise RecipeError(f"{where} line {n}: unknown context '{part}'; use ^, $, after:CLASS or before:CLASS.")
        rules.append(Rule(cols[0].lower(), cols[1], line=n, **kw))
    for key in ("from", "to"):
        if key not in meta:
            raise RecipeError(f"{where}: missing '# {key}: SCRIPT' header line; add it (ISO 15924 code).")
    table = Table(meta.get("name", where), meta["from"], meta["to"], rules)
    for r in sorted(rules, key=lambda r: -len(r.src)):
        table.by_first.setdefault(r.src[0], []).append(r)
    return table


def load_table(path: Path) -> Table:
    try:
        return parse_table(Path(path).read_text(encoding="utf-8"), str(path))
    except FileNotFoundError:
        raise RecipeError(f"{path}: transliteration table not found; check the path in the recipe.") from None


def _case(src: str, dst: str, word_upper: bool) -> str:
    if not dst:
        return dst
    if word_upper and len(src) >= 1 and src.isupper() and (len(src) > 1 or word_upper):
        return dst.upper()
    if src[:1].isupper():
        return dst[:1].upper() + dst[1:]
    return dst


_WORD_FROM = regex.compile(r"[\p{L}\p{M}]*")
_WORD_UNTIL = regex.compile(r"(?r)[\p{L}\p{M}]*")


def apply_table(table: Table, text: str) -> str:
    """Transliterate ``text``; characters no rule covers are copied; the result is in NFC.

    >>> t = parse_table("# corpuskit transliteration table 1\\n# from: Cyrl\\n# to: Latn\\nљ\\tlj\\nа\\ta\\nу\\tu\\nб\\tb\\nв\\tv")
    >>> apply_table(t, "Љубав"), apply_table(t, "ЉУБАВ")
    ('Ljubav', 'LJUBAV')
    """
    out, i, n = [], 0, len(text)
    lower = text.lower()
    while i < n:
        rule = None
        for r in table.by_first.get(lower[i], ()):
            if not lower.startswith(r.src, i):
                continue
            j = i + len(r.src)
            if r.start and i > 0 and _LETTER.match(text[i - 1]):
                continue
            if r.end and j < n and _LETTER.match(text[j]):
                continue
            if r.after and (i == 0 or lower[i - 1] not in r.after):
                continue
            if r.before and (j >= n or lower[j] not in r.before):
                continue
            rule = r
            break
        if rule is None:
            out.append(text[i])
            i += 1
            continue
        j = i + len(rule.src)
        word = _WORD_FROM.match(text, i).group()
        left = _WORD_UNTIL.match(text, 0, i).group()      # reverse match ending at i: no slice copies
        whole = left + word
        word_upper = len(whole) > 1 and whole.isupper()
        out.append(_case(text[i:j], rule.dst, word_upper))
        i = j
    return unicodedata.normalize("NFC", "".join(out))   # a kept combining mark joins its new base letter


def irreversible_rules(table: Table) -> list[tuple[Rule, str]]:
    """Rules whose output cannot be mapped back unambiguously, with the reason."""
    problems = []
    outputs: dict[str, list[Rule]] = {}
    for r in table.rules:
        outputs.setdefault(r.dst.lower(), []).append(r)
    single = {r.dst.lower() for r in table.rules if r.dst}
    for r in table.rules:
        same = outputs[r.dst.lower()]
        if len({x.src for x in same}) > 1:
            problems.append((r, f"'{r.dst}' is also the output of " + ", ".join(f"'{x.src}'" for x in same if x.src != r.src)))
        elif len(r.dst) > 1 and any(r.dst.lower()[:k] in single and r.dst.lower()[k:] in single for k in range(1, len(r.dst))):
            problems.append((r, f"'{r.dst}' can also be read as two letters"))
    return problems


def inverse_table(table: Table) -> Table:
    """The table read backwards (contexts dropped): each output maps to the first rule's source."""
    inv = Table(f"{table.name} (inverse)", table.target, table.source)
    for r in table.rules:
        if r.dst and not any(x.src == r.dst.lower() for x in inv.rules):
            inv.rules.append(Rule(r.dst.lower(), r.src, line=r.line))
    for r in sorted(inv.rules, key=lambda r: -len(r.src)):
        inv.by_first.setdefault(r.src[0], []).append(r)
    return inv


def round_trips(inverse: Table, source_text: str, output: str) -> bool:
    """Whether the output maps back to the source text (compared after NFC and case folding)."""
    import unicodedata
    back = unicodedata.normalize("NFC", apply_table(inverse, unicodedata.normalize("NFC", output))).casefold()
    return back == unicodedata.normalize("NFC", source_text).casefold()


def rule_report(table: Table) -> list[dict]:
    """One row per rule: whether its output can be read back to its source, and why not."""
    why = {r.line: reason for r, reason in irreversible_rules(table)}
    return [{"table": table.name, "line": r.line, "from": r.src, "to": r.dst,
             "reversible": "no" if r.line in why else "yes", "reason": why.get(r.line, "")} for r in table.rules]
