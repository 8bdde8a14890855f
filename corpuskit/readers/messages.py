"""Message-group exports: one document per message.

A line pattern with named groups (``sender``, ``text``, and optionally
``timestamp``) is set in the recipe; lines that do not match continue the
previous message.  System lines are recognised by the clean-up stage.
"""
from __future__ import annotations

import re
from dataclasses import dataclass
from typing import Iterator

from ..ledger import LedgerRow
from ..config import Checked, param
from .decode import TextFile

DEFAULT_PATTERN = r"^\[(?P<timestamp>[^\]]+)\] (?P<sender>[^:]{1,60}): (?P<text>.*)$"


@dataclass(frozen=True)
class Options(Checked):
    line_pattern: str = param(DEFAULT_PATTERN, help="a regular expression with groups sender and text")

    def __post_init__(self):
        super().__post_init__()
        try:
            pat = re.compile(self.line_pattern)
        except re.error as exc:
            raise ValueError(f"options.line_pattern is not a valid regular expression ({exc})") from None
        if not {"sender", "text"} <= set(pat.groupindex):
            raise ValueError("options.line_pattern needs named groups (?P<sender>...) and (?P<text>...)")


def read(tf: TextFile, opts: Options) -> Iterator[dict]:
    pattern = re.compile(opts.line_pattern)
    current: dict | None = None
    for n, line in tf.lines():
        if not line.strip():
            tf.whitespace_only(n, line)
            continue
        m = pattern.match(line)
        if m:
            if current:
                yield current
            groups = m.groupdict()
            current = {"key": f"{n}", "segments": [groups["text"]] if groups["text"].strip() else [],
                       "contributor": groups["sender"].strip(),
                       "meta": {"file": tf.rel, "lines": [n], "timestamp": groups.get("timestamp")}}
            if groups.get("timestamp"):
                current["date"] = groups["timestamp"].strip()
        elif current is not None:
            current["segments"].append(line)
            current["meta"]["lines"].append(n)
        else:
            tf.issues.append(LedgerRow("ingest", "segment", "removed", tf.file_id, n, 1, "before-first-message",
                                       f"{tf.rel} line {n}: text before the first message line; skipped", None, line[:500]))
    if current:
        yield current
