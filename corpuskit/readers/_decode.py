"""Turning a file's bytes into numbered lines of text, with nothing lost silently.

UTF-8 is the default.  Byte-order marks select UTF-8/16/32; UTF-16 without a
BOM is recognised by its NUL pattern; a legacy encoding can be declared per
source, or ``detect`` tries a short list and warns.  Undecodable bytes become
U+FFFD and a ledger row naming file, line and byte offset.  ``.gz`` files are
read through a decompressor with an expansion limit.
"""
from __future__ import annotations

import codecs
import gzip
import itertools
import os
import zlib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Iterable, Iterator

from ..errors import DataError
from ..ledger import LedgerRow, rewrite

__all__ = ["TextFile", "MAX_EXPANSION", "MAX_LINE_BYTES"]

MAX_EXPANSION = 200          # decompressed / compressed bytes allowed for .gz input
MAX_GZIP_FLOOR = 64 << 20    # always allow this much decompressed output
MAX_LINE_BYTES = 64 << 20    # a longer line is cut into pieces of this size
CHUNK_BYTES = 1 << 20        # files are read in pieces of this size
HEAD_BYTES = 8192            # what the encoding and binary checks look at
DETECT_ORDER = ("utf-8", "cp1252", "cp1251", "latin-1")

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

    @property
    def file_id(self) -> str:
        return f"{self.source_id}:{self.rel}"

    # -- bytes in chunks: a file is never held whole ------------------------------------------
    def _chunks(self, record: bool = True) -> Iterator[bytes]:
        """The file's bytes (decompressed for ``.gz``) in chunks of about CHUNK_BYTES."""
        with open(self.path, "rb") as f:
            if self.path.suffix != ".gz":
                while chunk := f.read(CHUNK_BYTES):
                    yield chunk
                return
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
        enc = self.encoding.lower()
        if enc != "detect":
            return enc, 0
        for candidate in DETECT_ORDER:  # a pass over the file per candidate, decoding in chunks
            decoder = codecs.getincrementaldecoder(candidate)()
            try:
                for chunk in self._chunks(record=False):
                    decoder.decode(chunk)
                decoder.decode(b"", final=True)
            except UnicodeDecodeError:
                continue
            if candidate != "utf-8":
                self.warnings.append(f"{self.rel}: not UTF-8; decoded as {candidate} (declare encoding in the recipe to silence this)")
            return candidate, 0
        return "utf-8", 0  # pragma: no cover - latin-1 always decodes

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
        n = 0
        for start, raw, continued in split_lines(chunks, b"\n", MAX_LINE_BYTES):
            if not continued:
                n += 1
            elif continued == 1:
                self._note_cut(n)
            raw = raw[:-1] if raw.endswith(b"\r") else raw
            try:
                line = raw.decode(encoding)
            except UnicodeDecodeError as exc:
                line = raw.decode(encoding, errors="replace")
                self.issues.append(rewrite("ingest", self.file_id, n, "undecodable-bytes",
                                           f"{self.rel} line {n} byte offset {skip + start + exc.start}: "
                                           f"bytes not valid {encoding} replaced by U+FFFD"))
            yield n, self._clean(line, n, skip + start)

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
        for _, line, continued in split_lines(text_chunks(), "\n", MAX_LINE_BYTES, keep_last=True):
            if not continued:
                n += 1
            elif continued == 1:
                self._note_cut(n)
            yield n, self._clean(line.rstrip("\r"), n, -1)
        if replaced:
            self.issues.append(rewrite("ingest", self.file_id, -1, "undecodable-bytes",
                                       f"{self.rel}: {encoding} data with invalid code units replaced by U+FFFD"))

    def _note_cut(self, n: int) -> None:
        self.issues.append(rewrite("ingest", self.file_id, n, "long-line-cut",
                                   f"{self.rel} line {n}: longer than {MAX_LINE_BYTES} bytes; read in pieces of that size"))

    def _clean(self, line: str, n: int, start: int) -> str:
        if "\x00" in line:
            self.issues.append(rewrite("ingest", self.file_id, n, "nul-bytes",
                                       f"{self.rel} line {n}: {line.count(chr(0))} NUL characters removed"))
            line = line.replace("\x00", "")
        return line


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


def open_text(path: Path, rel: str, source_id: str, encoding: str) -> TextFile:
    return TextFile(path=path, rel=rel, source_id=source_id, encoding=encoding)


def gzip_open(path: Path):  # pragma: no cover - convenience for callers outside readers
    return gzip.open(path, "rt", encoding="utf-8")
