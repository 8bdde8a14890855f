"""WebVTT transcripts (W3C WebVTT: The Web Video Text Tracks Format).

One document per file; one segment per cue, with timings, cue identifier and
voice (``<v Speaker>``) kept in ``meta.cues``.  NOTE, STYLE and REGION blocks
are skipped as the specification says; a cue block without a valid timing
line is not a cue, and its text goes to the ledger.
"""
from __future__ import annotations

import re
from dataclasses import dataclass
from typing import Iterator

from ..ledger import LedgerRow
from ..config import Checked, param
from .decode import TextFile

# hh:mm:ss.ttt or mm:ss.ttt, per the WebVTT timestamp grammar.
TIMESTAMP = r"(?:\d{2,}:)?[0-5]\d:[0-5]\d\.\d{3}"
TIMING = re.compile(rf"^\s*({TIMESTAMP})[ \t]+-->[ \t]+({TIMESTAMP})(?:[ \t]+.*)?$")
VOICE = re.compile(r"<v(?:\.[^ \t>]+)*[ \t]+([^>]+)>")
TAG = re.compile(r"</?[a-z0-9.]+(?:[ \t][^>]*)?>|<\d{2}:[^>]*>", re.I)


@dataclass(frozen=True)
class Options(Checked):
    keep_tags: bool = param(False, help="keep cue markup tags in the text")
    minutes: float = param(0.0, low=0, high=1440, help="one document per this many minutes of cues (0: one per file), "
                                                      "so that train, dev and test can each draw from a recording")


def documents(segments: list[str], cues: list[dict], rel: str, minutes: float):
    """The cues of one file as documents: the whole file, or windows of ``minutes`` by cue start."""
    if not segments:
        return
    if not minutes:
        yield {"key": "1", "segments": segments, "meta": {"file": rel, "cues": cues}}
        return
    window = minutes * 60
    groups: dict[int, list[int]] = {}
    for i, cue in enumerate(cues):
        groups.setdefault(int(cue["start"] // window), []).append(i)
    for w, idx in sorted(groups.items()):
        yield {"key": f"1@{w}", "segments": [segments[i] for i in idx],
               "meta": {"file": rel, "cues": [cues[i] for i in idx], "window_minutes": [w * minutes, (w + 1) * minutes]}}


def _seconds(ts: str) -> float:
    parts = [float(p) for p in ts.split(":")]
    return sum(p * 60 ** i for i, p in enumerate(reversed(parts)))


def _unescape(text: str) -> str:
    return (text.replace("&lt;", "<").replace("&gt;", ">").replace("&nbsp;", "\u00a0")
            .replace("&lrm;", "\u200e").replace("&rlm;", "\u200f").replace("&amp;", "&"))


def blocks(lines: list[tuple[int, str]]) -> Iterator[list[tuple[int, str]]]:
    block: list[tuple[int, str]] = []
    for n, line in lines:
        if line.strip():
            block.append((n, line))
        elif block:
            yield block
            block = []
    if block:
        yield block


def cue_text(payload: list[str], keep_tags: bool) -> tuple[str, str | None]:
    text = "\n".join(payload)
    voice = VOICE.search(text)
    speaker = voice.group(1).strip() if voice else None
    if not keep_tags:
        text = TAG.sub("", text)
    return " ".join(_unescape(text).split()), speaker


def read(tf: TextFile, opts: Options) -> Iterator[dict]:
    lines = list(tf.lines())
    if not lines or not lines[0][1].lstrip("\ufeff").startswith("WEBVTT"):
        first = lines[0] if lines else (1, "")
        tf.issues.append(LedgerRow("ingest", "file", "removed", tf.file_id, first[0], 0, "not-webvtt",
                                   f"{tf.rel} line {first[0]}: a WebVTT file starts with 'WEBVTT'; file skipped"))
        return
    segments, cues = [], []
    for i, block in enumerate(blocks(lines)):
        head = block[0][1]
        if i == 0 or head.startswith(("NOTE", "STYLE", "REGION")) and "-->" not in head:
            continue
        timing_at = 0 if "-->" in head else 1
        cue_id = head.strip() if timing_at == 1 else None
        m = TIMING.match(block[timing_at][1]) if len(block) > timing_at else None
        if not m:
            n = block[0][0]
            tf.issues.append(LedgerRow("ingest", "segment", "removed", tf.file_id, n, 1, "broken-cue-timing",
                                       f"{tf.rel} line {block[min(timing_at, len(block) - 1)][0]}: no valid cue timing; block skipped",
                                       None, " ".join(t for _, t in block)[:500]))
            continue
        text, speaker = cue_text([t for _, t in block[timing_at + 1:]], opts.keep_tags)
        if not text:
            continue
        segments.append(text)
        cues.append({"line": block[0][0], "id": cue_id, "start": _seconds(m.group(1)),
                     "end": _seconds(m.group(2)), "speaker": speaker})
    yield from documents(segments, cues, tf.rel, opts.minutes)
