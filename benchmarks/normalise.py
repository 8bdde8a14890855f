"""The normalise stage's text function next to a bare ``unicodedata.normalize`` pass.

Both read the same lines: the demo sources' text, repeated to the requested size,
with decomposed marks, stray invisible characters and curly quotes as users' files
have them.  Prints MB/s of each and the ratio (how many times slower the whole
normalisation is than NFC alone).

    python benchmarks/normalise.py [--mb 4]
"""
from __future__ import annotations

import argparse
import random
import time
import unicodedata
from pathlib import Path

from corpuskit.stages.normalise import Params, normalise_text

ROOT = Path(__file__).resolve().parent.parent


def sample_lines(mb: float, seed: int = 3) -> list[str]:
    rng = random.Random(seed)
    base = [line for path in sorted((ROOT / "sample_texts").rglob("*.txt")) if "seeds" not in path.parts
            for line in path.read_text(encoding="utf-8").splitlines() if line.strip()]
    lines, size = [], 0
    while size < mb * 2**20:
        line = rng.choice(base)
        r = rng.random()
        if r < 0.2:
            line = unicodedata.normalize("NFD", line)
        elif r < 0.25:
            line = line.replace(" ", " \u200b", 1)
        elif r < 0.3:
            line = f"\u201c{line}\u201d"
        lines.append(line)
        size += len(line.encode("utf-8"))
    return lines


def timed(fn, lines: list[str]) -> float:
    t0 = time.perf_counter()
    for line in lines:
        fn(line)
    return time.perf_counter() - t0


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--mb", type=float, default=4.0)
    args = ap.parse_args()
    lines = sample_lines(args.mb)
    mb = sum(len(line.encode("utf-8")) for line in lines) / 2**20
    params = Params()
    bare = timed(lambda s: unicodedata.normalize("NFC", s), lines)
    stage = timed(lambda s: normalise_text(s, params, "modifier"), lines)
    print(f"{len(lines)} lines, {mb:.2f} MB")
    print(f"bare unicodedata.normalize NFC   {bare:7.3f} s  {mb / bare:8.2f} MB/s")
    print(f"normalise stage (all steps)      {stage:7.3f} s  {mb / stage:8.2f} MB/s")
    print(f"ratio (stage time / bare NFC time): {stage / bare:.1f}")


if __name__ == "__main__":
    main()
