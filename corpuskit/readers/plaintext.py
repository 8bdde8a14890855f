"""Plain text: a document per line, per paragraph (blank-line separated) or per file."""
from __future__ import annotations

from dataclasses import dataclass
from typing import Iterator

from ..config import Checked, param
from .decode import TextFile


@dataclass(frozen=True)
class Options(Checked):
    unit: str = param("paragraph", choices=("line", "paragraph", "file"),
                      help="what one document is: a line, a blank-line separated paragraph, or the file")


def read(tf: TextFile, opts: Options) -> Iterator[dict]:
    block: list[tuple[int, str]] = []

    def flush():
        if block:
            yield {"key": f"{block[0][0]}", "segments": [t for _, t in block],
                   "meta": {"file": tf.rel, "lines": [n for n, _ in block]}}
            block.clear()

    for n, line in tf.lines():
        if opts.unit == "line":
            if line.strip():
                yield {"key": f"{n}", "segments": [line], "meta": {"file": tf.rel, "lines": [n]}}
            else:
                tf.whitespace_only(n, line)
        elif not line.strip():
            if opts.unit == "paragraph":   # a blank line ends a paragraph
                yield from flush()
            else:
                tf.whitespace_only(n, line)
        else:
            block.append((n, line))
    yield from flush()
