"""OCR'd booklets: a folder of page text files is one document (the booklet).

Pages are ordered by file name; each line is a segment and ``meta.pages``
records where each page starts, so the clean-up stage can find running
headers, footers and page numbers by repetition across pages.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Iterator

from ..config import Checked, param
from .decode import TextFile


@dataclass(frozen=True)
class Options(Checked):
    booklet: str = param("folder", choices=("folder", "file"),
                         help="what one document is: the pages of a folder, or each page file")


def read(tf: TextFile, opts: Options) -> Iterator[dict]:
    # Pages are grouped into booklets by the ingest step (see stages/ingest.py);
    # here each page yields its lines.
    lines = [(n, t) for n, t in tf.lines()]
    segments = [t for _, t in lines if t.strip()]
    if segments:
        yield {"key": "1", "segments": segments,
               "meta": {"file": tf.rel, "lines": [n for n, t in lines if t.strip()]}}
