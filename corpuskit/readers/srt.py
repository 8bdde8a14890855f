"""SubRip (.srt) transcripts: numbered cues with ``hh:mm:ss,ttt --> hh:mm:ss,ttt`` timings."""
from __future__ import annotations

import re
from dataclasses import dataclass
from typing import Iterator

from ..ledger import LedgerRow
from ..config import Checked, param
from .decode import TextFile
from .webvtt import blocks, cue_text, documents

TIMING = re.compile(r"^\s*(\d{1,2}:\d{2}:\d{2}[,.]\d{1,3})\s*-->\s*(\d{1,2}:\d{2}:\d{2}[,.]\d{1,3})")


@dataclass(frozen=True)
class Options(Checked):
    keep_tags: bool = param(False, help="keep <i>, <b> and font tags in the text")
    minutes: float = param(0.0, low=0, high=1440, help="one document per this many minutes of cues (0: one per file), "
                                                      "so that train, dev and test can each draw from a recording")


def _seconds(ts: str) -> float:
    h, m, s = ts.replace(",", ".").split(":")
    return int(h) * 3600 + int(m) * 60 + float(s)


def read(tf: TextFile, opts: Options) -> Iterator[dict]:
    segments, cues = [], []
    for block in blocks(list(tf.lines())):
        # A cue is an optional identifier line (a number, or any text), then the timing line.
        timing_at = 0 if "-->" in block[0][1] else 1
        m = TIMING.match(block[timing_at][1]) if len(block) > timing_at else None
        if not m:
            tf.issues.append(LedgerRow("ingest", "segment", "removed", tf.file_id, block[0][0], 1, "broken-cue-timing",
                                       f"{tf.rel} line {block[0][0]}: no valid cue timing; block skipped",
                                       None, " ".join(t for _, t in block)[:500]))
            continue
        text, speaker = cue_text([t for _, t in block[timing_at + 1:]], opts.keep_tags)
        if text:
            segments.append(text)
            cues.append({"line": block[0][0], "id": block[0][1].strip().lstrip("\ufeff") if timing_at else None,
                         "start": _seconds(m.group(1)), "end": _seconds(m.group(2)), "speaker": speaker})
    yield from documents(segments, cues, tf.rel, opts.minutes)
