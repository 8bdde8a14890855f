"""The leak audit: the last step of export, before the manifest.

Every public file (``corpus/``, ``splits/``, ``tokenizer/``, ``reports/``, ``datasheet.md``)
is read back and scanned for

(a) personal data the detectors still find (phone numbers, e-mail addresses, profile
    URLs, the recipe's ID patterns);
(b) text of a source that may not be redistributed: a corpus record whose source is
    restricted, or a report cell that is (the beginning of) a restricted segment not also
    found in a public document;
(c) a real name from the pseudonym mapping, anywhere but in segment text.

A hit fails the run naming the file and line; the manifest is not written.
"""
from __future__ import annotations

import bisect
import csv
import gzip
import html
import io
import json
from dataclasses import dataclass, field
from pathlib import Path
from typing import Iterable, Iterator

import regex

from .casing import comparison_key
from .pii import may_hold_personal_data, scrub

__all__ = ["LEAK_MIN_CHARS", "leak_key", "Hit", "LeakAudit", "PUBLIC_PARTS", "public_files", "scan_files", "scan_piece"]

LEAK_MIN_CHARS = 20          # shorter restricted segments ("ok", "thank you") are not tracked
LEAK_PREFIX_CHARS = 40       # a report cell shorter than a restricted segment is a leak from this length on
                             # (quoted beginnings); public segments starting the same way are not leaks
PUBLIC_PARTS = ("corpus", "splits", "tokenizer", "reports")
PUBLIC_FILES = ("datasheet.md",)
TEXT_COLUMNS = {"text", "example", "examples", "variant_examples", "canonical_examples"}
SEGMENT_FIELDS = {"segments", "original"}
_DATA_URI = regex.compile(r"data:[\w/+.-]+;base64,[A-Za-z0-9+/=]+")
_TAG = regex.compile(r"<[^>]*>")
MEMO_CHARS = 200             # strings up to this long are judged once per audit ...
MEMO_SIZE = 200_000          # ... remembering at most this many at a time
CLEAN_LINES_SIZE = 500_000   # hashes of lines without a hit remembered per kind of line (about 30 MB)
FIELD_STRING_MIN_CHARS = 3  # shorter strings hold no name (LeakAudit keeps names of 3 or more characters)
                            # and no restricted text (LEAK_MIN_CHARS)
_NUMBER = regex.compile(r"^-?\d+(?:\.\d+)?(?:e-?\d+)?$")


def leak_key(text: str) -> str:
    """Text compared for restricted material: case-folded, spaces collapsed."""
    return comparison_key(text)


def public_files(out: Path) -> list[Path]:
    files = [p for part in PUBLIC_PARTS if (out / part).is_dir() for p in sorted((out / part).rglob("*")) if p.is_file()]
    return files + [out / name for name in PUBLIC_FILES if (out / name).is_file()]


@dataclass(frozen=True)
class Hit:
    file: str
    line: int
    kind: str          # personal-data:<kind> | restricted-source | restricted-text | real-name
    where: str = ""    # field or column

    def describe(self) -> str:
        place = f" ({self.where})" if self.where else ""
        what = {"restricted-source": "a document of a source that may not be redistributed",
                "restricted-text": "text of a source that may not be redistributed",
                "real-name": "a real name from the pseudonym mapping"}.get(self.kind, self.kind.replace(":", ": "))
        return f"{self.file} line {self.line}{place}: {what}"


@dataclass
class LeakAudit:
    restricted_texts: list[str]               # leak keys, sorted, of segments not also public
    names: list[str]                          # real names that were pseudonymised
    restricted_sources: set[str]
    public_digests: object = None             # sorted uint64 digests of public segments and their beginnings
    id_patterns: tuple = ()
    regions: tuple = ()
    scrub_pii: bool = True
    _memo: dict = field(default_factory=dict, init=False, repr=False, compare=False)
    _clean_lines: dict = field(default_factory=dict, init=False, repr=False, compare=False)
    field_strings: set | None = field(default=None, init=False, repr=False, compare=False)  # collected when a set
    hits: list[Hit] = field(default_factory=list)

    def __post_init__(self):
        names = sorted({n.strip() for n in self.names if len(n.strip()) >= 3}, key=lambda n: (-len(n), n))
        self._names = regex.compile(r"(?<!\w)(?:%s)(?!\w)" % "|".join(regex.escape(n) for n in names),
                                    regex.I) if names else None

    # -- checks on one string ---------------------------------------------------------------
    def _personal(self, text: str) -> list[str]:
        if not self.scrub_pii or not text or (not self.id_patterns and not may_hold_personal_data(text)):
            return []
        return sorted(scrub(text, self.id_patterns, self.regions)[1])

    def _restricted(self, text: str) -> bool:
        """A whole restricted segment, or the first LEAK_PREFIX_CHARS or more characters of one, that
        is not also (the beginning of) a public segment."""
        for piece in text.split(" | "):
            key = leak_key(piece)
            if len(key) < LEAK_MIN_CHARS:
                continue
            i = bisect.bisect_left(self.restricted_texts, key)
            if i >= len(self.restricted_texts) or not self.restricted_texts[i].startswith(key):
                continue
            if self.restricted_texts[i] != key and len(key) < LEAK_PREFIX_CHARS:
                continue
            if not self._public(key):
                return True
        return False

    def _public(self, key: str) -> bool:
        import numpy as np
        from .storage import digest64
        public = self.public_digests
        if public is None or not len(public):
            return False
        probes = [digest64(key)] + ([digest64(key[:LEAK_PREFIX_CHARS])] if len(key) >= LEAK_PREFIX_CHARS else [])
        at = np.searchsorted(public, np.array(probes, dtype=np.uint64))
        return any(a < len(public) and public[a] == p for a, p in zip(at.tolist(), probes))

    def check(self, text: str, file: str, line: int, where: str = "", segment: bool = False,
              example: bool = False) -> None:
        """Every check on one string: personal data; restricted text (report cells and lines that
        may quote segments); real names (anywhere but segment text and quoted examples)."""
        for kind in self._verdict(text, segment, example):
            self.hits.append(Hit(file, line, kind, where))

    def _verdict(self, text: str, segment: bool, example: bool) -> tuple[str, ...]:
        """What ``check`` finds in a string; short strings (field values such as language tags,
        sources and licences repeat in every record) are judged once."""
        remember = len(text) <= MEMO_CHARS
        if remember:
            known = self._memo.get((text, segment, example))
            if known is not None:
                return known
        kinds = [f"personal-data:{kind}" for kind in self._personal(text)]
        if not segment and self.restricted_texts and self._restricted(text):
            kinds.append("restricted-text")
        if not segment and not example and self._names is not None and self._names.search(text):
            kinds.append("real-name")
        found = tuple(kinds)
        if remember:
            if len(self._memo) >= MEMO_SIZE:
                self._memo.clear()
            self._memo[(text, segment, example)] = found
        return found

    def _clean(self, kind: str) -> set[int]:
        """Hashes of the lines of this ``kind`` scanned so far without a hit: a line with the same
        text is not judged again (the split files repeat the corpus files' records and lines).
        Python's own string hash: SipHash with a key drawn per process, 64 bits, which no text can
        be made to collide with on purpose; the memo lives as long as this audit."""
        return self._clean_lines.setdefault(kind, set())

    def _remember_clean(self, clean: set[int], key: int, hits_before: int) -> None:
        if len(self.hits) == hits_before:
            if len(clean) >= CLEAN_LINES_SIZE:
                clean.clear()
            clean.add(key)

    # -- files ---------------------------------------------------------------------------------
    def scan(self, out: Path, files: Iterable[Path] | None = None) -> list[Hit]:
        """Scan ``files`` of the output folder ``out`` (default: every public file); all hits so far."""
        for path in public_files(out) if files is None else files:
            rel = str(path.relative_to(out))
            name = path.name
            if name.endswith(".jsonl.gz"):
                self._scan_records(path, rel)
            elif name.endswith(".csv"):
                self._scan_csv(path, rel)
            elif name.endswith(".json"):
                self._scan_json(path, rel)
            elif name.endswith(".html"):
                self._scan_lines(path, rel, html_text=True)
            elif name.endswith((".txt", ".md")):
                self._scan_lines(path, rel, segments=rel.startswith(("corpus/", "splits/")))
            # binary files (the tokenizer model) hold pieces of public text only
        return self.hits

    def _scan_records(self, path: Path, rel: str) -> None:
        with gzip.open(path, "rt", encoding="utf-8", newline="\n") as f:
            self.scan_record_lines(f, rel)

    def scan_record_lines(self, lines: Iterable[str], rel: str) -> None:
        """Scan JSON Lines records (the lines of ``rel``, numbered from 1)."""
        clean = self._clean("record")
        for n, line in enumerate(lines, 1):
            key = hash(line)
            if key in clean:
                continue
            before = len(self.hits)
            self._scan_record(json.loads(line), rel, n)
            self._remember_clean(clean, key, before)

    def _scan_record(self, record: dict, rel: str, n: int) -> None:
        """The checks on one corpus record (line ``n`` of ``rel``)."""
        if record.get("source") in self.restricted_sources:
            self.hits.append(Hit(rel, n, "restricted-source", "source"))
        for key, value in record.items():
            if key in SEGMENT_FIELDS:
                texts = list(_strings(value))
                # One quick test over all of a document's segments: most hold nothing any
                # personal-data detector could match, and then no segment needs one.
                if self.id_patterns or may_hold_personal_data("\n".join(texts)):
                    for text in texts:
                        self.check(text, rel, n, key, segment=True)
                continue
            if value is None or isinstance(value, (bool, int, float)):
                continue                                     # no text (most fields: one string)
            texts = (value,) if isinstance(value, str) else dict.fromkeys(_strings(value))
            for text in texts:                               # a field's repeated values once
                for kind in self._verdict(text, False, False):
                    self.hits.append(Hit(rel, n, kind, key))
                if self.field_strings is not None and len(text) >= FIELD_STRING_MIN_CHARS:
                    self.field_strings.add(text)

    def _scan_csv(self, path: Path, rel: str) -> None:
        with open(path, encoding="utf-8", newline="") as f:
            reader = csv.reader(f)
            header = next(reader, [])
            for n, row in enumerate(reader, 2):
                for column, cell in zip(header, row):
                    if cell and not _NUMBER.match(cell):
                        self.check(cell, rel, n, column, example=column in TEXT_COLUMNS)

    def _scan_json(self, path: Path, rel: str) -> None:
        data = json.loads(path.read_text(encoding="utf-8"))
        for text in _strings(data):
            self.check(text, rel, 1)

    def _scan_lines(self, path: Path, rel: str, segments: bool = False, html_text: bool = False) -> None:
        with open(path, encoding="utf-8", newline="\n") as f:
            self.scan_text_lines(f, rel, segments, html_text)

    def scan_text_lines(self, lines: Iterable[str], rel: str, segments: bool = False, html_text: bool = False) -> None:
        """Scan lines of text (of ``rel``, numbered from 1); ``segments``: each line is segment text."""
        clean = self._clean(f"lines:{segments}:{html_text}")
        for n, line in enumerate(lines, 1):
            if html_text:
                line = html.unescape(_TAG.sub(" ", _DATA_URI.sub(" ", line)))
            if not line.strip():
                continue
            key = hash(line)
            if key not in clean:
                before = len(self.hits)
                self.check(line.rstrip("\n"), rel, n, segment=segments)
                self._remember_clean(clean, key, before)

    # -- in two steps: what one piece of the corpus holds, then what depends on the whole run ---
    def field_verdicts(self, strings: Iterable[str]) -> list[str]:
        """Of the strings of records' fields (not segment text), those holding restricted text or
        a real name: the checks that depend on the whole run (``scan`` makes them on every field
        value as it reads it)."""
        return [text for text in strings
                if (self.restricted_texts and self._restricted(text))
                or (self._names is not None and self._names.search(text))]


def scan_piece(records: dict[str, list[str]], texts: dict[str, str], restricted_sources: Iterable[str],
               id_patterns: tuple = (), regions: tuple = (), scrub_pii: bool = True) -> tuple[list[Hit], list[str]]:
    """The checks on one piece of the public record and text files that depend on the piece
    alone: personal data anywhere and records of restricted sources (``records``: the JSON lines
    per file label; ``texts``: the text per file label).  Returns the hits and, sorted, the
    distinct strings of the records' other fields (``FIELD_STRING_MIN_CHARS`` or longer), which
    ``LeakAudit.field_verdicts`` checks against the whole run's restricted text and names."""
    checker = LeakAudit([], [], set(restricted_sources), None, tuple(id_patterns), tuple(regions), scrub_pii)
    checker.field_strings = set()
    for label, lines in records.items():
        checker.scan_record_lines(lines, label)
    for label, text in texts.items():
        checker.scan_text_lines(io.StringIO(text, newline="\n"), label, segments=True)
    return checker.hits, sorted(checker.field_strings)


def scan_files(checker: LeakAudit, out: Path, files: list[Path]) -> list[Hit]:
    """The hits ``checker`` finds in ``files`` alone (a task a worker can run)."""
    before = len(checker.hits)
    checker.scan(out, files)
    return checker.hits[before:]


def _strings(value) -> Iterator[str]:
    if isinstance(value, str):
        yield value
    elif isinstance(value, (dict, list)):
        for v in (value.values() if isinstance(value, dict) else value):
            if isinstance(v, str):
                yield v
            elif isinstance(v, (dict, list)):
                yield from _strings(v)


def restricted_keys(candidates: Iterable[str], public_digests) -> list[str]:
    """The restricted segment keys that no public document also holds, sorted."""
    import numpy as np
    from .storage import digest64
    keys = sorted(set(candidates))
    if not keys:
        return []
    digests = np.array([digest64(k) for k in keys], dtype=np.uint64)
    public = np.asarray(public_digests, dtype=np.uint64)
    also_public = np.isin(digests, public) if len(public) else np.zeros(len(keys), bool)
    return [k for k, p in zip(keys, also_public.tolist()) if not p]


def write_report(path: Path, hits: list[Hit]) -> None:
    from .storage import atomic_write_text
    buf = io.StringIO()
    json.dump({"passed": not hits, "hits": [h.__dict__ for h in hits]}, buf, indent=1, sort_keys=True)
    atomic_write_text(path, buf.getvalue() + "\n")
