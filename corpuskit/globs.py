"""Source globs: ``**`` across folders (walking each real folder once, so a symlink loop ends), and
the fixed part of a pattern before its first wildcard."""
from __future__ import annotations

import glob
import os
import re

__all__ = ["glob_files", "glob_prefix", "glob_regex"]


def glob_regex(pattern: str):
    """A glob as a regular expression over whole paths: ``**/`` any folders (or none), ``*`` and
    ``?`` within one path part, ``[...]`` a character class."""
    out, i = [], 0
    while i < len(pattern):
        c = pattern[i]
        if pattern.startswith("**/", i):
            out.append("(?:[^/]*/)*")
            i += 3
            continue
        if pattern.startswith("**", i):
            out.append(".*")
            i += 2
            continue
        if c == "*":
            out.append("[^/]*")
        elif c == "?":
            out.append("[^/]")
        elif c == "[" and "]" in pattern[i + 2:]:
            end = pattern.index("]", i + 2)
            body = pattern[i + 1:end]
            out.append("[" + ("^" + body[1:] if body.startswith("!") else body).replace("\\", "\\\\") + "]")
            i = end
        else:
            out.append(re.escape(c))
        i += 1
    return re.compile("".join(out) + r"\Z")


def glob_files(pattern: str):
    """Paths matching ``pattern``.  Without ``**`` this is the standard glob; with it, a walk that
    follows symlinked folders but enters each real folder once, so a link loop is walked once."""
    if "**" not in pattern:
        yield from glob.iglob(pattern)
        return
    root = os.path.dirname(glob_prefix(pattern)) or "."
    matcher = glob_regex(pattern)
    visited: set[str] = set()
    for dirpath, dirnames, filenames in os.walk(root, followlinks=True):
        real = os.path.realpath(dirpath)
        if real in visited:
            dirnames[:] = []
            continue
        visited.add(real)
        dirnames[:] = sorted(d for d in dirnames if not d.startswith("."))   # as glob: no hidden files
        for name in sorted(f for f in filenames if not f.startswith(".")) + [d for d in dirnames if os.path.islink(os.path.join(dirpath, d))
                                         and not os.path.isdir(os.path.join(dirpath, d))]:
            full = os.path.join(dirpath, name)
            if matcher.match(full):
                yield full


def glob_prefix(pattern: str) -> str:
    """The part of a glob before its first wildcard."""
    cut = min([i for i in (pattern.find(c) for c in "*?[") if i >= 0], default=len(pattern))
    return pattern[:cut]
