"""How much two processes get out of this machine's two cores, without corpuskit's engine.

The same fixed piece of work (the normalise and script stages over demo text, and a plain
Python loop) is timed in one process alone, then in two processes at once.  The printed
ceiling, 2 x (time alone) / (time of each of the pair), is the most any 2-worker run can
gain here: shared caches, memory bandwidth and the hypervisor's scheduling all count.

    python benchmarks/cores.py
"""
from __future__ import annotations

import multiprocessing as mp
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent


def python_loop() -> None:
    total = 0
    for i in range(12_000_000):
        total += i * i % 7


def stage_work() -> None:
    from corpuskit.recipe import load_recipe
    from corpuskit.records import new_document
    from corpuskit.stages import normalise, script
    recipe = load_recipe(ROOT / "recipes" / "demo.toml")
    lines = (ROOT / "sample_texts" / "messages" / "river-group.txt").read_text("utf-8").splitlines()
    docs = [new_document(id=f"b:{i}", source="b", segments=[line]) for i, line in enumerate(lines * 40)]
    for name, stage in (("normalise", normalise), ("script", script)):
        params = recipe.stages[name]
        ctx = stage.build_context(recipe, params, None, stage.context_key(recipe, params)) \
            if hasattr(stage, "build_context") else None
        docs, _ = stage.apply(docs, params, ctx)


def timed(work) -> float:
    started = time.perf_counter()
    work()
    return time.perf_counter() - started


def main() -> None:
    ctx = mp.get_context("forkserver")
    for name, work in (("plain Python loop", python_loop), ("normalise + script stages", stage_work)):
        with ctx.Pool(1) as pool:
            alone = pool.apply(timed, (work,))
        with ctx.Pool(2) as pool:
            pair = pool.map(timed, [work, work])
        print(f"{name:27s} alone {alone:6.2f} s, two at once {max(pair):6.2f} s each: "
              f"ceiling for 2 workers {2 * alone / max(pair):.2f}")


if __name__ == "__main__":
    main()
