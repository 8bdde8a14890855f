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
import zlib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Iterator

from ..errors import DataError
from ..ledger import LedgerRow, rewrite

__all__ = ["TextFile", "MAX_EXPANSION", "MAX_LINE_BYTES"]

MAX_EXPANSION = 200          # decompressed / compressed bytes allowed for .gz input
MAX_GZIP_FLOOR = 64 << 20    # always allow this much decompressed output
MAX_LINE_BYTES = 64 << 20    # a longer line is cut into pieces of this size
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

    def _raw(self) -> bytes:
        data = self.path.read_bytes()
        if self.path.suffix == ".gz":
            data = self._gunzip(data)
        return data

    def _gunzip(self, data: bytes) -> bytes:
        limit = max(MAX_GZIP_FLOOR, MAX_EXPANSION * len(data))
        d = zlib.decompressobj(16 + zlib.MAX_WBITS)
        out = bytearray()
        try:
            pos = data
            while pos:
                out += d.decompress(pos, limit + 1 - len(out))
                if len(out) > limit:
                    message = (f"{self.rel}: gzip expands beyond {MAX_EXPANSION}x its size ({limit} bytes); "
                               "skipped; unpack it yourself if it is genuine")
                    self.issues.append(LedgerRow("ingest", "file", "removed", self.file_id, -1, 0,
                                                 "gzip-expansion-limit", message))
                    self.warnings.append(message)
                    return b""
                pos = d.unconsumed_tail
                if d.eof:
                    break
            if not d.eof:
                self.issues.append(rewrite("ingest", self.file_id, -1, "truncated-gzip",
                                           f"{self.rel}: gzip stream ends early after {len(out)} bytes; kept what was readable"))
        except zlib.error as exc:
            self.issues.append(rewrite("ingest", self.file_id, -1, "corrupt-gzip",
                                       f"{self.rel}: gzip data is corrupt ({exc}) after {len(out)} bytes; kept what was readable"))
        return bytes(out)

    def _choose_encoding(self, data: bytes) -> tuple[str, int]:
        for bom, name in _BOMS:
            if data.startswith(bom):
                return name, len(bom)
        head = data[:4096]
        if len(head) >= 4 and head.count(0) > len(head) // 4:
            even, odd = head[0::2].count(0), head[1::2].count(0)
            if odd > 3 * max(even, 1):
                return "utf-16-le", 0
            if even > 3 * max(odd, 1):
                return "utf-16-be", 0
        enc = self.encoding.lower()
        if enc != "detect":
            return enc, 0
        for candidate in DETECT_ORDER:
            try:
                data.decode(candidate)
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
        """(1-based line number, text without the line break) for every line."""
        data = self._raw()
        encoding, skip = self._choose_encoding(data)
        if encoding.startswith("utf-8") and self.is_binary(data):
            self.issues.append(LedgerRow("ingest", "file", "removed", self.file_id, -1, 0, "binary-file",
                                         f"{self.rel}: looks like binary data, not text; skipped"))
            self.warnings.append(f"{self.rel}: looks like binary data, not text; skipped")
            return
        if encoding.startswith(("utf-16", "utf-32")):
            text = data[skip:].decode(encoding, errors="replace")
            if "\ufffd" in text:
                self.issues.append(rewrite("ingest", self.file_id, -1, "undecodable-bytes",
                                           f"{self.rel}: {encoding} data with invalid code units replaced by U+FFFD"))
            for n, line in enumerate(text.split("\n"), 1):
                yield n, self._clean(line.rstrip("\r"), n, -1)
            return
        offset = skip
        raw_lines = data[skip:].split(b"\n")
        if raw_lines and raw_lines[-1] == b"":
            raw_lines.pop()
        for n, raw in enumerate(raw_lines, 1):
            start = offset
            offset += len(raw) + 1
            raw = raw[:-1] if raw.endswith(b"\r") else raw
            try:
                line = raw.decode(encoding)
            except UnicodeDecodeError as exc:
                line = raw.decode(encoding, errors="replace")
                self.issues.append(rewrite("ingest", self.file_id, n, "undecodable-bytes",
                                           f"{self.rel} line {n} byte offset {start + exc.start}: "
                                           f"bytes not valid {encoding} replaced by U+FFFD"))
            except LookupError:
                raise DataError(f"{self.rel}: unknown encoding '{encoding}'; set the source's encoding to a "
                                "Python codec name such as 'cp1251', or 'detect'.") from None
            yield n, self._clean(line, n, start)

    def _clean(self, line: str, n: int, start: int) -> str:
        if "\x00" in line:
            self.issues.append(rewrite("ingest", self.file_id, n, "nul-bytes",
                                       f"{self.rel} line {n}: {line.count(chr(0))} NUL characters removed"))
            line = line.replace("\x00", "")
        return line


def open_text(path: Path, rel: str, source_id: str, encoding: str) -> TextFile:
    return TextFile(path=path, rel=rel, source_id=source_id, encoding=encoding)


def gzip_open(path: Path):  # pragma: no cover - convenience for callers outside readers
    return gzip.open(path, "rt", encoding="utf-8")
