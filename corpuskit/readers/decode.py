"""Turning a file's bytes into numbered lines of text, with nothing lost silently.

UTF-8 is the default.  Byte-order marks select UTF-8/16/32; UTF-16 without a
BOM is recognised by its NUL pattern; a legacy encoding can be declared per
source, or ``detect`` lets charset-normalizer choose among the source's
candidate code pages (the choice and its measures go to the ledger, a weak
choice to the terminal).  A file declared UTF-8 whose first lines are mostly
not UTF-8 is detected the same way, with a warning.  Undecodable bytes become
U+FFFD and a ledger row naming file, line and byte offset.  Lines end at CR,
LF, CRLF and NEL (the Unicode Standard, section 5.8); LS and PS stay in the
text.  ``.gz`` files are read through a decompressor with an expansion limit
(a file named .gz that is not gzip is read as it is, with a row).
"""
from __future__ import annotations

import codecs
import itertools
import os
import zlib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Iterable, Iterator

import regex

from ..errors import DataError
from ..ledger import LedgerRow, rewrite

__all__ = ["TextFile", "MAX_EXPANSION", "MAX_LINE_BYTES"]

MAX_EXPANSION = 200          # decompressed / compressed bytes allowed for .gz input
MAX_GZIP_FLOOR = 64 << 20    # always allow this much decompressed output
MAX_LINE_BYTES = 4 << 20     # a longer line is cut into pieces of this size (readers may allow more)
CHUNK_BYTES = 1 << 20        # files are read in pieces of this size
HEAD_BYTES = 8192            # what the encoding and binary checks look at
# The code pages ``detect`` chooses among unless a source lists its own (``encodings``): the
# common legacy encodings of the regions corpuskit is used in (common practice; rarely used
# ISO 8859 parts, which the detector confuses with these, are left out).
DETECT_CANDIDATES = ("utf_8", "cp1250", "cp1251", "cp1252", "cp1253", "cp1254", "cp1255", "cp1256", "cp1257",
                     "koi8_r", "koi8_u", "iso8859_2", "iso8859_5", "iso8859_7", "iso8859_9", "iso8859_15", "latin_1",
                     "mac_roman", "shift_jis", "cp932", "euc_jp", "gb18030", "big5", "euc_kr")
# Single-byte code pages that decode most text alike: after detection, the sibling whose text
# has the fewest symbols inside words wins ("c½ur" in cp1252 is "cœur" in ISO 8859-15).
SIBLINGS = (("cp1252", "iso8859_15", "latin_1"), ("cp1250", "iso8859_2"), ("cp1254", "iso8859_9"),
            ("cp1253", "iso8859_7"), ("cp1251", "iso8859_5"))
DETECT_BYTES = 256 << 10     # what the detector reads
WEAK_CHAOS = 5.0             # a detected encoding whose text is this % "chaotic" or more is doubtful
REPLACED_WARN = 0.01         # warn when more than this share of lines had undecodable bytes

_BOMS = [(codecs.BOM_UTF32_LE, "utf-32-le"), (codecs.BOM_UTF32_BE, "utf-32-be"),
         (codecs.BOM_UTF8, "utf-8"), (codecs.BOM_UTF16_LE, "utf-16-le"), (codecs.BOM_UTF16_BE, "utf-16-be")]


@dataclass
class TextFile:
    """Lines of one input file.  ``issues`` collects ledger rows; ``warnings`` plain messages."""

    path: Path
    rel: str                      # the path as shown to people: relative to the recipe
    source_id: str
    encoding: str = "utf-8"
    issues: list[LedgerRow] = field(default_factory=list)
    warnings: list[str] = field(default_factory=list)
    candidates: tuple = ()        # code pages ``detect`` may choose (default DETECT_CANDIDATES)
    max_line_bytes: int | None = None   # default MAX_LINE_BYTES

    @property
    def file_id(self) -> str:
        return f"{self.source_id}:{self.rel}"

    # -- bytes in chunks: a file is never held whole ------------------------------------------
    def _chunks(self, record: bool = True) -> Iterator[bytes]:
        """The file's bytes (decompressed for ``.gz``) in chunks of about CHUNK_BYTES."""
        with open(self.path, "rb") as f:
            if self.path.suffix != ".gz" or f.read(2) != b"\x1f\x8b":
                f.seek(0)
                if self.path.suffix == ".gz" and record:
                    self.issues.append(rewrite("ingest", self.file_id, -1, "not-gzip",
                                               f"{self.rel}: named .gz but not gzip data; read as it is"))
                while chunk := f.read(CHUNK_BYTES):
                    yield chunk
                return
            f.seek(0)
            yield from self._gunzip(f, record)

    def _gunzip(self, f, record: bool) -> Iterator[bytes]:
        """Decompress every member of a gzip file (RFC 1952 section 2.2: a file may hold several).
        With ``record``, a truncated or corrupt stream gets a ledger row after what was readable."""
        d = zlib.decompressobj(16 + zlib.MAX_WBITS)
        produced, pending = 0, b""
        try:
            while True:
                data = d.unconsumed_tail or pending or f.read(CHUNK_BYTES)
                pending = b""
                if not data:
                    if tail := d.flush():
                        produced += len(tail)
                        yield tail
                    break
                out = d.decompress(data, CHUNK_BYTES)
                produced += len(out)
                if out:
                    yield out
                if d.eof:
                    pending = d.unused_data
                    if not pending and not (pending := f.read(CHUNK_BYTES)):
                        return
                    d = zlib.decompressobj(16 + zlib.MAX_WBITS)
        except zlib.error as exc:
            if record:
                self.issues.append(rewrite("ingest", self.file_id, -1, "corrupt-gzip",
                                           f"{self.rel}: gzip data is corrupt ({exc}) after {produced} bytes; kept what was readable"))
            return
        if record and not d.eof:
            self.issues.append(rewrite("ingest", self.file_id, -1, "truncated-gzip",
                                       f"{self.rel}: gzip stream ends early after {produced} bytes; kept what was readable"))

    def _within_expansion_limit(self) -> bool:
        """A first pass over a ``.gz`` file counting its decompressed size (nothing kept), so that
        a file expanding beyond MAX_EXPANSION times its size is refused before any line is read."""
        if self.path.suffix != ".gz":
            return True
        with open(self.path, "rb") as f:
            if f.read(2) != b"\x1f\x8b":
                return True
        limit = max(MAX_GZIP_FLOOR, MAX_EXPANSION * os.path.getsize(self.path))
        size = 0
        for chunk in self._chunks(record=False):
            size += len(chunk)
            if size > limit:
                message = (f"{self.rel}: gzip expands beyond {MAX_EXPANSION}x its size ({limit} bytes); "
                           "skipped; unpack it yourself if it is genuine")
                self.issues.append(LedgerRow("ingest", "file", "removed", self.file_id, -1, 0,
                                             "gzip-expansion-limit", message))
                self.warnings.append(message)
                return False
        return True

    def _head_and_chunks(self) -> tuple[bytes, Iterator[bytes]]:
        """The first HEAD_BYTES (or the whole file, if shorter) and the chunks that follow."""
        chunks = self._chunks()
        head = b""
        for chunk in chunks:
            head += chunk
            if len(head) >= HEAD_BYTES:
                break
        return head, chunks

    def _choose_encoding(self, head: bytes) -> tuple[str, int]:
        for bom, name in _BOMS:
            if head.startswith(bom):
                return name, len(bom)
        sample = head[:4096]
        if len(sample) >= 4 and sample.count(0) > len(sample) // 4:
            even, odd = sample[0::2].count(0), sample[1::2].count(0)
            if odd > 3 * max(even, 1):
                return "utf-16-le", 0
            if even > 3 * max(odd, 1):
                return "utf-16-be", 0
        wide = _utf16_without_bom(sample)
        if wide:
            return wide, 0
        enc = self.encoding.lower()
        if enc in ("utf-8", "utf8", "detect") and self.is_binary(head):
            return "utf-8", 0          # the caller skips it as binary
        if enc in ("utf-8", "utf8") and _mostly_not_utf8(head):
            self.warnings.append(f"{self.rel}: declared UTF-8 but its first lines are mostly not UTF-8; detecting "
                                 "the encoding (set the source's encoding to silence this)")
            enc = "detect"
        if enc != "detect":
            return enc, 0
        return self._detect(), 0

    def _detect(self) -> str:
        """charset-normalizer's choice among the candidates (siblings re-ranked), recorded."""
        import charset_normalizer

        sample = b""
        for chunk in self._chunks(record=False):
            sample += chunk
            if len(sample) >= DETECT_BYTES:
                break
        sample = _cut_at_line(sample, DETECT_BYTES)
        candidates = list(self.candidates or DETECT_CANDIDATES)
        matches = list(charset_normalizer.from_bytes(sample, cp_isolation=candidates))
        if not matches:
            self.warnings.append(f"{self.rel}: no candidate encoding ({', '.join(candidates)}) decodes this file; "
                                 "read as UTF-8 with replacement characters; set the source's encoding")
            self.issues.append(rewrite("ingest", self.file_id, -1, "encoding-detected",
                                       f"{self.rel}: none of {', '.join(candidates)} fits; read as utf_8"))
            return "utf-8"
        best = _prefer_coherent(matches)
        choice = _prefer_sibling(best.encoding, sample, candidates)
        chaos, coherence = best.percent_chaos, best.percent_coherence
        detail = (f"{self.rel}: encoding {choice} detected (charset-normalizer: {chaos:.1f}% chaos, "
                  f"{coherence:.1f}% coherence{', language ' + best.language if best.language != 'Unknown' else ''})")
        self.issues.append(rewrite("ingest", self.file_id, -1, "encoding-detected", detail))
        if chaos >= WEAK_CHAOS or len(sample) < 512:
            self.warnings.append(f"{detail}; a weak choice: check the text, or declare the encoding")
        return choice

    def is_binary(self, data: bytes) -> bool:
        head = data[:8192]
        if not head:
            return False
        # Text has almost no control characters; a stray NUL or two is kept (with a ledger row).
        controls = sum(1 for b in head if b < 9 or 13 < b < 32)
        return controls > len(head) * 0.1 or head.count(0) > max(2, len(head) // 100)

    def lines(self) -> Iterator[tuple[int, str]]:
        """(1-based line number, text without the line break) for every line, read in chunks:
        memory holds one chunk and one line, whatever the file's size."""
        if not self._within_expansion_limit():
            return
        head, rest = self._head_and_chunks()
        encoding, skip = self._choose_encoding(head)
        if encoding.startswith("utf-8") and self.is_binary(head):
            self.issues.append(LedgerRow("ingest", "file", "removed", self.file_id, -1, 0, "binary-file",
                                         f"{self.rel}: looks like binary data, not text; skipped"))
            self.warnings.append(f"{self.rel}: looks like binary data, not text; skipped")
            return
        chunks = itertools.chain([head[skip:]], rest)
        if encoding.startswith(("utf-16", "utf-32")):
            yield from self._wide_lines(chunks, encoding)
            return
        try:
            codecs.lookup(encoding)
        except LookupError:
            raise DataError(f"{self.rel}: unknown encoding '{encoding}'; set the source's encoding to a "
                            "Python codec name such as 'cp1251', or 'detect'.") from None
        n = replaced = 0
        for start, raw, continued in split_lines(unify_byte_newlines(chunks), b"\n", self.max_line_bytes or MAX_LINE_BYTES):
            if continued == 1:
                self._note_cut(n)
            try:
                line = raw.decode(encoding)
            except UnicodeDecodeError as exc:
                line = raw.decode(encoding, errors="replace")
                replaced += 1
                at = n + (0 if continued else 1)
                self.issues.append(rewrite("ingest", self.file_id, at, "undecodable-bytes",
                                           f"{self.rel} line {at} byte offset {skip + start + exc.start}: "
                                           f"bytes not valid {encoding} replaced by U+FFFD"))
            for k, piece in enumerate(line.split("\x85") if "\x85" in line else (line,)):
                if not continued or k:
                    n += 1
                yield n, self._clean(piece, n, skip + start)
        if replaced and replaced > REPLACED_WARN * max(n, 1):
            self.warnings.append(f"{self.rel}: {replaced} of {n} lines had bytes that are not valid {encoding} "
                                 "(replaced by U+FFFD); declare the file's encoding, or encoding = 'detect'")

    def _wide_lines(self, chunks: Iterator[bytes], encoding: str) -> Iterator[tuple[int, str]]:
        """UTF-16 and UTF-32: decoded incrementally, then split; every piece after the last
        line break is a line too (as ``str.split`` gives)."""
        decoder = codecs.getincrementaldecoder(encoding)(errors="replace")
        replaced = False

        def text_chunks():
            nonlocal replaced
            for chunk in itertools.chain(chunks, [None]):
                text = decoder.decode(b"", final=True) if chunk is None else decoder.decode(chunk)
                replaced = replaced or "\ufffd" in text
                yield text

        n = 0
        for _, line, continued in split_lines(unify_text_newlines(text_chunks()), "\n", self.max_line_bytes or MAX_LINE_BYTES,
                                              keep_last=True):
            if not continued:
                n += 1
            elif continued == 1:
                self._note_cut(n)
            yield n, self._clean(line, n, -1)
        if replaced:
            self.issues.append(rewrite("ingest", self.file_id, -1, "undecodable-bytes",
                                       f"{self.rel}: {encoding} data with invalid code units replaced by U+FFFD"))

    def whitespace_only(self, n: int, line: str) -> None:
        """A line of spaces only (not empty) is no segment: a ledger row says it was left out."""
        if line:
            names = sorted({f"U+{ord(c):04X}" for c in line})
            self.issues.append(LedgerRow("ingest", "segment", "removed", f"{self.file_id}:{n}", n, 1, "whitespace-only",
                                         f"{self.rel} line {n}: only white space ({', '.join(names[:5])}); left out",
                                         None, None))

    def _note_cut(self, n: int) -> None:
        self.issues.append(rewrite("ingest", self.file_id, n, "long-line-cut",
                                   f"{self.rel} line {n}: longer than {self.max_line_bytes or MAX_LINE_BYTES} bytes; "
                                   "read in pieces of that size"))

    def _clean(self, line: str, n: int, start: int) -> str:
        if "\x00" in line:
            self.issues.append(rewrite("ingest", self.file_id, n, "nul-bytes",
                                       f"{self.rel} line {n}: {line.count(chr(0))} NUL characters removed"))
            line = line.replace("\x00", "")
        return line


def unify_byte_newlines(chunks: Iterable[bytes]) -> Iterator[bytes]:
    """CRLF and a lone CR become LF, also when a CRLF is split between two chunks.  (In the
    ASCII-compatible encodings read this way, byte 0x0D is never part of a multi-byte character.)"""
    pending_cr = False
    for chunk in chunks:
        if pending_cr and chunk[:1] == b"\n":
            chunk = chunk[1:]
        pending_cr = chunk[-1:] == b"\r"
        if b"\r" in chunk:
            chunk = chunk.replace(b"\r\n", b"\n").replace(b"\r", b"\n")
        yield chunk


def unify_text_newlines(chunks: Iterable[str]) -> Iterator[str]:
    """The same for decoded text, where NEL (U+0085) also ends a line."""
    pending_cr = False
    for chunk in chunks:
        if pending_cr and chunk[:1] == "\n":
            chunk = chunk[1:]
        pending_cr = chunk[-1:] == "\r"
        if "\r" in chunk or "\x85" in chunk:
            chunk = chunk.replace("\r\n", "\n").replace("\r", "\n").replace("\x85", "\n")
        yield chunk


def _utf16_without_bom(sample: bytes) -> str | None:
    """UTF-16 without a BOM in a script other than Latin: the high bytes of the code units are
    nearly all one value (0x04 for Cyrillic), and the text decodes to letters, not controls."""
    if len(sample) < 64:
        return None
    sample = sample[:len(sample) // 2 * 2]
    for name, high in (("utf-16-le", sample[1::2]), ("utf-16-be", sample[0::2])):
        top = max(set(high), key=high.count)
        if high.count(top) < 0.5 * len(high):
            continue
        try:
            text = sample.decode(name)
        except UnicodeDecodeError:
            continue
        letters = len(regex.findall(r"\p{L}", text))
        controls = len(regex.findall(r"[\p{Cc}--[\t\n\r]]", text, flags=regex.V1))
        if letters > 0.5 * len(text.replace(" ", "")) and controls <= 0.01 * len(text):
            return name
    return None


def _mostly_not_utf8(head: bytes) -> bool:
    """At least three lines with non-ASCII bytes, and most of them not valid UTF-8."""
    lines = [ln for ln in _cut_at_line(head, len(head)).split(b"\n") if not ln.isascii()]
    bad = 0
    for ln in lines:
        try:
            ln.decode("utf-8")
        except UnicodeDecodeError:
            bad += 1
    return len(lines) >= 3 and bad > len(lines) / 2


def _cut_at_line(data: bytes, limit: int) -> bytes:
    """``data`` up to ``limit`` bytes, cut after its last line break (if it has one)."""
    if len(data) <= limit and len(data) < DETECT_BYTES:
        return data
    data = data[:limit]
    at = data.rfind(b"\n")
    return data[:at + 1] if at > 0 else data


# A symbol, private-use, control or unassigned character touching a letter: "c½ur" read in the wrong
# sibling code page.
_IN_WORD_SYMBOL = regex.compile(r"(?<=\p{L})[\p{S}\p{Co}\p{Cc}\p{Cn}\p{No}]|[\p{S}\p{Co}\p{Cc}\p{Cn}\p{No}](?=\p{L})")
# Latin-script single-byte code pages decode one another's bytes into other letters (è or č):
# among those the detector finds about as orderly, the one whose letters fit a language best.
LATIN_PAGES = {"cp1250", "cp1252", "cp1254", "cp1257", "iso8859_2", "iso8859_9", "iso8859_15", "latin_1", "mac_roman"}


def _prefer_coherent(matches):
    best = matches[0]
    if best.encoding not in LATIN_PAGES:
        return best
    close = [m for m in matches if m.encoding in LATIN_PAGES and m.percent_chaos <= best.percent_chaos + 0.5]
    return max(close, key=lambda m: (m.percent_coherence, -matches.index(m)))


def _prefer_sibling(chosen: str, sample: bytes, candidates: list[str]) -> str:
    """Among the chosen code page and its siblings in the candidate list, the one whose text has
    the fewest symbols between letters; the detector's choice on a tie."""
    norm = codecs.lookup(chosen).name
    family = next((f for f in SIBLINGS if norm in {codecs.lookup(x).name for x in f}), None)
    if family is None:
        return chosen
    allowed = {codecs.lookup(c).name for c in candidates}
    scored = []
    for rank, name in enumerate([chosen] + [f for f in family if codecs.lookup(f).name != norm]):
        if codecs.lookup(name).name not in allowed:
            continue
        try:
            text = sample.decode(name)
        except UnicodeDecodeError:
            continue
        scored.append((len(_IN_WORD_SYMBOL.findall(text)) + 10 * text.count("\ufffd"), rank, name))
    return min(scored)[2] if scored else chosen


def split_lines(chunks: Iterable, sep, limit: int, keep_last: bool = False) -> Iterator[tuple[int, Any, int]]:
    """(offset of the piece, piece, continuation count) for every line in a stream of chunks
    (bytes or str) split at ``sep``.

    A line longer than ``limit`` comes in pieces (cut before a UTF-8 continuation byte); the
    second and later pieces carry a continuation count of 1, 2, ...  After the last separator,
    the rest is a line if it is not empty (or always, with ``keep_last``).
    """
    pending: list = []
    size = start = continued = 0
    join = sep[:0].join
    for chunk in chunks:
        parts = chunk.split(sep)
        for i, part in enumerate(parts):
            pending.append(part)
            size += len(part)
            while size > limit:
                blob = join(pending)
                at = _cut_point(blob, limit)
                yield start, blob[:at], continued
                start, continued = start + at, continued + 1
                pending, size = [blob[at:]], len(blob) - at
            if i < len(parts) - 1:
                line = join(pending)
                yield start, line, continued
                start += len(line) + 1
                pending, size, continued = [], 0, 0
    line = join(pending)
    if line or keep_last or continued:
        yield start, line, continued


def _cut_point(blob, limit: int) -> int:
    at = limit
    if isinstance(blob, bytes):  # not inside a UTF-8 sequence
        while at > limit - 3 and blob[at] & 0xC0 == 0x80:
            at -= 1
    return at
