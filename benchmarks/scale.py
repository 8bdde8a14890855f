"""Whole runs on generated corpora: throughput, memory, workers and incremental re-runs.

Generates demo-scenario corpora of about 20 MB and 200 MB (``corpuskit.demo.generate --mb``)
into a work folder and runs the demo recipe on them as a user would (``corpuskit run``),
sampling the resident memory of the whole process tree.  Prints, each measured in this run:

* end-to-end MB/s at 20 MB and 200 MB and the time ratio (target: at most 11 for 10x the data);
* peak memory of the run at 200 MB, PSS summed over all its processes (target: at most 1 GB);
* speed-up of 2 workers over 1, for the local engine and for the Dask engine, at 20 MB
  (target: at least 1.6 on 2 cores);
* an incremental run after adding one new source to the 200 MB corpus, as a share of the
  full run's time (target: at most 15%).

    python benchmarks/scale.py [--work .bench] [--small 20] [--large 200] [--skip-large]
"""
from __future__ import annotations

import argparse
import shutil
import subprocess
import sys
import threading
import time
from pathlib import Path

import psutil

ROOT = Path(__file__).resolve().parent.parent
CORPUSKIT = [sys.executable, "-m", "corpuskit.cli"]


def corpus(work: Path, mb: float) -> Path:
    """A folder with recipes/ and a generated sample_texts/ of about `mb` MB (made once)."""
    folder = work / f"corpus-{mb:g}mb"
    if not (folder / "sample_texts" / "ground-truth.json").exists():
        shutil.rmtree(folder, ignore_errors=True)
        folder.mkdir(parents=True)
        shutil.copytree(ROOT / "recipes", folder / "recipes")
        # The demo recipe uses tiny partitions so that its few hundred documents exercise
        # several; at benchmark sizes a user would choose partitions of thousands.
        demo = folder / "recipes" / "demo.toml"
        # The generator's lexicon has only a few hundred words, so unrelated documents share far
        # more character 5-grams than real text does; the demo's low thresholds (0.5, leak 0.3)
        # would make LSH compare millions of unrelated pairs. The tool's defaults are used here.
        text = demo.read_text("utf-8").replace("partition_docs = 200", "partition_docs = 5000\nmax_files_per_source = 200000")
        text = text.replace("threshold = 0.5\n", "threshold = 0.7\n").replace("leak_threshold = 0.3", "leak_threshold = 0.5")
        demo.write_text(text, "utf-8")
        subprocess.run(CORPUSKIT[:2] + ["corpuskit.demo.generate", "--out", str(folder / "sample_texts"), "--mb", str(mb)],
                       check=True)
    return folder


def source_bytes(folder: Path) -> int:
    return sum(p.stat().st_size for p in (folder / "sample_texts").rglob("*")
               if p.is_file() and "seeds" not in p.parts and p.name != "ground-truth.json")


def timed_run(recipe: Path, out: Path, *args: str) -> tuple[float, int, int]:
    """Seconds and peak memory of the run: the proportional set size (PSS) of all its processes
    summed, sampled every 0.5 s (reading PSS costs the kernel a walk of each process's pages).
    PSS charges each shared page (libraries, the parent's pages a forked child still shares)
    once in total; summing plain RSS (also returned) counts them once per process."""
    started = time.perf_counter()
    proc = subprocess.Popen(CORPUSKIT + ["run", str(recipe), "--out", str(out), "--no-progress", *args],
                            stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    peak, stop = [0, 0], threading.Event()

    def sample():
        root = psutil.Process(proc.pid)
        while not stop.is_set():
            try:
                procs = [root] + root.children(recursive=True)
                infos = [p.memory_full_info() for p in procs if p.is_running()]
                peak[0] = max(peak[0], sum(m.pss for m in infos))
                peak[1] = max(peak[1], sum(m.rss for m in infos))
            except psutil.Error:
                pass
            time.sleep(0.5)

    t = threading.Thread(target=sample, daemon=True)
    t.start()
    _, err = proc.communicate()
    stop.set()
    t.join()
    if proc.returncode:
        raise SystemExit(f"run failed: {err.decode()[-2000:]}")
    return time.perf_counter() - started, peak[0], peak[1]


def add_source(folder: Path, mb: float = 1.0) -> Path:
    """A copy of the demo recipe with one more source: new web pages generated with another seed."""
    extra = folder / "new-source"
    if not extra.exists():
        subprocess.run(CORPUSKIT[:2] + ["corpuskit.demo.generate", "--out", str(extra), "--mb", str(mb), "--seed", "99"],
                       check=True)
    recipe = folder / "recipes" / "demo-plus-one.toml"
    recipe.write_text((folder / "recipes" / "demo.toml").read_text("utf-8") + """
[[sources]]
id = "new-web"
path = "../new-source/web/*.txt"
format = "text"
medium = "web"
licence = "CC-BY-4.0"
consent = "redistribution"
dialect = "coast"
[sources.options]
unit = "file"
""", "utf-8")
    return recipe


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--work", type=Path, default=ROOT / ".bench")
    ap.add_argument("--small", type=float, default=20)
    ap.add_argument("--large", type=float, default=200)
    ap.add_argument("--skip-large", action="store_true")
    ap.add_argument("--large-only", action="store_true", help="of the small runs, only local with 2 workers (for the ratio)")
    args = ap.parse_args()
    args.work.mkdir(parents=True, exist_ok=True)

    small = corpus(args.work, args.small)
    small_mb = source_bytes(small) / 2**20
    recipe = small / "recipes" / "demo.toml"
    runs = {}
    plan = (("local-1", ["--workers", "1"]), ("local-2", ["--workers", "2"]),
            ("dask-1", ["--engine", "dask", "--workers", "1"]), ("dask-2", ["--engine", "dask", "--workers", "2"]))
    for name, extra in plan:
        if args.large_only and name != "local-2":
            continue
        out = args.work / f"out-small-{name}"
        shutil.rmtree(out, ignore_errors=True)
        runs[name] = timed_run(recipe, out, *extra)
        print(f"{small_mb:7.1f} MB {name:8s} {runs[name][0]:8.1f} s  {small_mb / runs[name][0]:6.3f} MB/s  "
              f"peak memory {runs[name][1] / 2**20:7.0f} MB (RSS summed {runs[name][2] / 2**20:.0f} MB)", flush=True)
    if not args.large_only:
        print(f"speed-up 2 vs 1 workers: local {runs['local-1'][0] / runs['local-2'][0]:.2f}, "
              f"dask {runs['dask-1'][0] / runs['dask-2'][0]:.2f}")
    if args.skip_large:
        return

    large = corpus(args.work, args.large)
    large_mb = source_bytes(large) / 2**20
    out = args.work / "out-large"
    shutil.rmtree(out, ignore_errors=True)
    full, pss, rss = timed_run(large / "recipes" / "demo.toml", out, "--workers", "2")
    print(f"{large_mb:7.1f} MB local-2   {full:8.1f} s  {large_mb / full:6.3f} MB/s  peak memory {pss / 2**20:7.0f} MB "
          f"(RSS summed {rss / 2**20:.0f} MB)", flush=True)
    print(f"time ratio {large_mb / small_mb:.1f}x the data: {full / runs['local-2'][0]:.2f}")
    plus = add_source(large)
    again, pss2, _ = timed_run(plus, out, "--workers", "2")
    print(f"incremental run after adding one source: {again:.1f} s = {again / full:.1%} of the full run "
          f"(peak memory {pss2 / 2**20:.0f} MB)")


if __name__ == "__main__":
    main()
