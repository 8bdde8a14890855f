"""The langid stage next to a bare fastText predict over the same lines.

A model is trained from the demo seed sets; the demo sources' lines (repeated to
the requested count) are labelled once by the whole stage (undetermined-segment
rule, script shortcut, document decision, ledger rows) and once by calling
fastText's own predict on each line.  Prints segments/s of each and the share of
the bare speed the stage keeps (target: at least 0.7).

    python benchmarks/langid.py [--segments 60000]
"""
from __future__ import annotations

import argparse
import random
import tempfile
import time
from pathlib import Path

from corpuskit.stages import langid

ROOT = Path(__file__).resolve().parent.parent
SEEDS = ROOT / "sample_texts" / "seeds"


def seed_examples() -> list[tuple[str, str]]:
    examples = []
    for path in sorted(SEEDS.glob("*.txt")):
        label = path.stem
        examples += [(label, langid.prepare_line(x)) for x in path.read_text(encoding="utf-8").splitlines() if x.strip()]
    return examples


def demo_lines(n: int, seed: int = 5) -> list[str]:
    rng = random.Random(seed)
    base = [line for p in sorted((ROOT / "sample_texts").rglob("*.txt")) if "seeds" not in p.parts
            for line in p.read_text(encoding="utf-8").splitlines() if line.strip()]
    return [rng.choice(base) for _ in range(n)]


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--segments", type=int, default=60000)
    ap.add_argument("--per-document", type=int, default=4, help="segments per document")
    args = ap.parse_args()
    params = langid.Params(seeds={"unused": "unused"})
    lines = demo_lines(args.segments)
    with tempfile.TemporaryDirectory() as tmp:
        model_path = Path(tmp) / "model.bin"
        langid.train(seed_examples(), params, model_path)
        model = langid.load_model(str(model_path))
        ctx = {"model": str(model_path), "threshold": 0.5, "language": "qnv", "scripts": ["Latn"]}
        k = args.per_document
        docs = [{"id": f"bench:{i}", "source": "bench", "segments": lines[i:i + k], "seg_index": list(range(len(lines[i:i + k]))),
                 "seg_script": None, "meta": "{}"} for i in range(0, len(lines), k)]

        # The stage needs every label's probability (P(target) sums the target labels), so the
        # bare run asks for all of them too; the top label alone is printed for reference.
        bare = {}
        for k_labels in (len(model.get_labels()), 1):
            t0 = time.perf_counter()
            for line in lines:
                model.f.predict(line + "\n", k_labels, 0.0, "strict")
            bare[k_labels] = time.perf_counter() - t0

        t0 = time.perf_counter()
        kept, rows = langid.apply(docs, params, ctx)
        stage = time.perf_counter() - t0
    n = len(lines)
    print(f"{n} segments in {len(docs)} documents; {len(kept)} documents kept, {len(rows)} ledger rows")
    (k_all, t_all), (_, t_top) = bare.items()
    print(f"bare fastText predict, top label only   {t_top:6.2f} s  {n / t_top:9.0f} segments/s")
    print(f"bare fastText predict, all {k_all} labels     {t_all:6.2f} s  {n / t_all:9.0f} segments/s")
    print(f"langid stage (whole)                    {stage:6.2f} s  {n / stage:9.0f} segments/s")
    print(f"share of the bare speed kept (same labels asked): {t_all / stage:.2f}  (against top label only: {t_top / stage:.2f})")


if __name__ == "__main__":
    main()
