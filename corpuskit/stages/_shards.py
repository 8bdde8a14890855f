"""Writing a set of documents as they stream past: gzip JSON Lines shards and a plain-text file.

Memory holds one document at a time; every file is published atomically when complete
(see ``storage.atomic_open``), so a killed export leaves no file that looks finished.
"""
from __future__ import annotations

import contextlib
import json
from pathlib import Path

from ..records import jsonable
from ..storage import atomic_gzip_text, atomic_open

__all__ = ["DocumentSet"]


class DocumentSet:
    """``<folder>/<name>-NNNNN.jsonl.gz`` shards of ``shard_docs`` documents (or one
    ``<name>.jsonl.gz`` when ``shard_docs`` is None) and ``<folder>/<name>.txt``: segments one
    per line, a blank line after each document."""

    def __init__(self, stack: contextlib.ExitStack, folder: Path, name: str, shard_docs: int | None):
        self.folder, self.name, self.shard_docs = folder, name, shard_docs
        self.count = 0
        self.segments = 0
        self._stack = stack
        self._shard: contextlib.ExitStack | None = None
        self._jsonl = None
        self._text = stack.enter_context(atomic_open(folder / f"{name}.txt"))
        self._first_line = True

    def _shard_path(self, index: int) -> Path:
        if self.shard_docs is None:
            return self.folder / f"{self.name}.jsonl.gz"
        return self.folder / f"{self.name}-{index:05d}.jsonl.gz"

    def _rotate(self) -> None:
        if self._shard is not None:
            self._shard.close()
        self._shard = contextlib.ExitStack()
        self._stack.push(self._shard.__exit__)  # on an error the shard's temporary file is removed
        index = self.count // self.shard_docs if self.shard_docs else 0
        self._jsonl = self._shard.enter_context(atomic_gzip_text(self._shard_path(index)))

    def add(self, doc: dict) -> None:
        if self._jsonl is None or (self.shard_docs and self.count % self.shard_docs == 0 and self.count):
            self._rotate()
        self._jsonl.write(json.dumps(jsonable(doc), ensure_ascii=False, sort_keys=True))
        self._jsonl.write("\n")
        for seg in doc["segments"]:
            self._write_line(seg)
        self._write_line("")
        self.count += 1
        self.segments += len(doc["segments"])

    def _write_line(self, line: str) -> None:
        # Lines are joined by newlines with none after the last, as "\n".join(...) would.
        if not self._first_line:
            self._text.write(b"\n")
        self._text.write(line.encode("utf-8"))
        self._first_line = False

    def finish(self) -> None:
        """Publish the last shard (an empty first shard when there were no documents)."""
        if self._jsonl is None:
            self._rotate()
        self._shard.close()
