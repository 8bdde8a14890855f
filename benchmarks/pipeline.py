"""End to end: corpuskit against a plain hand-written script, side by side on the same input.

The input is generated: documents in two synthetic languages (the demo's invented target
language and its invented contact language), a tenth of the target documents planted again as
near-copies (one word in about forty changed), one JSON line per document.  The truth is known:
keep one document of each target-language original and its planted copies (either one: the
baseline keeps the first it sees, corpuskit the longer), and no contact-language document.

The baseline is what a user would write in an afternoon (one process): NFC, a fastText model
trained on the same seed lines and asked per line, datasketch's MinHash updated shingle by
shingle and its MinHashLSH index queried before each insert, the kept documents written as
gzipped JSON lines.  corpuskit runs its whole recipe (every stage, reports, tokenizer, datasheet)
with 2 workers into a fresh folder.

Runs are interleaved A B A B; each run's CPU is counted over the whole process tree: this
process becomes a child subreaper (prctl PR_SET_CHILD_SUBREAPER), so pool workers that outlive
their parent are re-parented here and reaped, and RUSAGE_CHILDREN then holds all of them.
Prints wall s, CPU s, MB/s and CPU s/MB of each side, the ratios, both sides' precision and
recall against the planted truth, and a table of corpuskit's per-stage time (with 2 workers, and
in a run with one worker, which is about the stage's CPU) against the bare library operation of
that stage on the same text.

    python benchmarks/pipeline.py [--mb 10] [--pairs 2] [--work .bench/pipeline]
"""
from __future__ import annotations

import argparse
import ctypes
import errno
import gzip
import json
import os
import random
import resource
import shutil
import subprocess
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from corpuskit.demo.generate import Lexicon, contact_sentence  # noqa: E402

PR_SET_CHILD_SUBREAPER = 36
TARGET, CONTACT = "qnv", "qtm"

RECIPE = """[corpus]
name = "pipeline-benchmark"
language = "qnv"
target_script = "Latn"
partition_docs = 5000

[[sources]]
id = "docs"
path = "input/docs.jsonl"
format = "jsonl"
medium = "typed-message"
licence = "CC-BY-4.0"
consent = "redistribution"

[stages.langid]
seeds = { qnv = "input/seeds-qnv.txt", qtm = "input/seeds-qtm.txt" }

[stages.dedup]
threshold = 0.7
"""


# -- input and truth ---------------------------------------------------------------------------

def make_input(folder: Path, mb: float, seed: int = 5) -> dict:
    """Write input/docs.jsonl and the seed files; return the truth (ids to keep) and the size."""
    truth_path = folder / "truth.json"
    if truth_path.exists():
        return json.loads(truth_path.read_text())
    rng = random.Random(seed)
    lex = Lexicon(rng)
    (folder / "input").mkdir(parents=True, exist_ok=True)
    for lang, make in ((TARGET, lambda: lex.sentence(rng, "hill", (3, 12))), (CONTACT, lambda: contact_sentence(rng, (3, 10)))):
        (folder / "input" / f"seeds-{lang}.txt").write_text("\n".join(make() for _ in range(500)) + "\n", "utf-8")
    clusters, target_docs, written, n = {}, [], 0, 0
    with open(folder / "input" / "docs.jsonl", "w", encoding="utf-8") as f:
        while written < mb * 1e6:
            n += 1
            doc_id = f"d{n:07d}"
            r = rng.random()
            if r < 0.08 and target_docs:              # a planted near-copy of an earlier target document
                original, source = rng.choice(target_docs)
                words = source.split(" ")
                for _ in range(max(1, len(words) // 40)):
                    words[rng.randrange(len(words))] = rng.choice(lex.base)
                text = " ".join(words)
                clusters[doc_id] = original
            elif r < 0.75:
                text = "\n".join(lex.sentence(rng, "hill") for _ in range(rng.randint(3, 9)))
                target_docs.append((doc_id, text))
                clusters[doc_id] = doc_id
            else:
                text = "\n".join(contact_sentence(rng) for _ in range(rng.randint(3, 9)))
            line = json.dumps({"id": doc_id, "text": text}, ensure_ascii=False) + "\n"
            f.write(line)
            written += len(line.encode("utf-8"))
    truth = {"clusters": clusters, "bytes": written, "documents": n}
    truth_path.write_text(json.dumps(truth))
    return truth


# -- the plain baseline ---------------------------------------------------------------------------

def baseline(folder: str, out: str) -> None:
    """The hand-written script (runs in its own process)."""
    import unicodedata

    import fasttext
    from datasketch import MinHash, MinHashLSH

    folder, out = Path(folder), Path(out)
    out.mkdir(parents=True, exist_ok=True)
    train = out / "train.txt"
    with open(train, "w", encoding="utf-8") as f:
        for lang in (TARGET, CONTACT):
            for line in (folder / "input" / f"seeds-{lang}.txt").read_text("utf-8").splitlines():
                f.write(f"__label__{lang} {line.lower()}\n")
    model = fasttext.train_supervised(input=str(train), minn=2, maxn=4, dim=16, bucket=50_000, epoch=25,
                                      thread=1, seed=1, verbose=0)
    lsh = MinHashLSH(threshold=0.7, num_perm=128)
    with open(folder / "input" / "docs.jsonl", encoding="utf-8") as f, gzip.open(out / "kept.jsonl.gz", "wt", encoding="utf-8") as w:
        for line in f:
            doc = json.loads(line)
            text = unicodedata.normalize("NFC", doc["text"])
            lines = [x for x in text.split("\n") if x.strip()]
            labels = model.predict([x.lower() for x in lines])[0] if lines else []
            kept = [x for x, lab in zip(lines, labels) if lab[0] == f"__label__{TARGET}"]
            if not kept:
                continue
            joined = " ".join(" ".join(kept).lower().split())
            m = MinHash(num_perm=128)
            for i in range(max(1, len(joined) - 4)):
                m.update(joined[i:i + 5].encode("utf-8"))
            if lsh.query(m):
                continue
            lsh.insert(doc["id"], m)
            w.write(json.dumps({"id": doc["id"], "text": "\n".join(kept)}, ensure_ascii=False) + "\n")


def baseline_kept(out: Path) -> set[str]:
    with gzip.open(out / "kept.jsonl.gz", "rt", encoding="utf-8") as f:
        return {json.loads(line)["id"] for line in f}


def corpuskit_kept(out: Path) -> set[str]:
    from corpuskit.api import load_corpus
    return {i.rsplit(":", 1)[-1] for i in load_corpus(out, restricted="include")["id"]}


# -- timing the whole process tree ------------------------------------------------------------------

def _become_subreaper() -> None:
    libc = ctypes.CDLL(None, use_errno=True)
    if libc.prctl(PR_SET_CHILD_SUBREAPER, 1, 0, 0, 0) != 0:
        raise OSError(ctypes.get_errno(), "prctl(PR_SET_CHILD_SUBREAPER) failed")


def _reap_all(deadline: float = 10.0) -> None:
    """Wait for every descendant re-parented to this process (pool workers, a fork server)."""
    end = time.time() + deadline
    while time.time() < end:
        try:
            pid, _ = os.waitpid(-1, os.WNOHANG)
        except ChildProcessError:
            return
        except OSError as exc:
            if exc.errno == errno.ECHILD:
                return
            raise
        if pid == 0:
            time.sleep(0.05)


def timed(cmd: list[str]) -> tuple[float, float]:
    """Wall seconds and CPU seconds (user + system) of ``cmd`` and all its descendants."""
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    started = time.perf_counter()
    proc = subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    _, err = proc.communicate()
    wall = time.perf_counter() - started
    _reap_all()
    if proc.returncode != 0:
        raise SystemExit(f"{' '.join(cmd)} failed:\n{err.decode()[-3000:]}")
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    return wall, (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)


def accuracy(kept: set[str], clusters: dict[str, str]) -> tuple[float, float]:
    """Precision: the share of kept documents that are the only kept one of a target cluster
    (a contact-language document or a second copy counts against it).  Recall: the share of
    target clusters with a document kept."""
    found = {clusters[d] for d in kept if d in clusters}
    total = len(set(clusters.values()))
    return (len(found) / len(kept) if kept else 0.0), (len(found) / total if total else 0.0)


# -- per stage ----------------------------------------------------------------------------------------

def stage_seconds(out: Path) -> dict[str, float]:
    """Seconds per stage from the run log (wall time of the stage in the main process)."""
    last = (out / "run.log").read_text("utf-8").strip().split("\n\n")[-1]
    result = {}
    for line in last.splitlines():
        if ": " in line and line.rstrip().endswith(" s") and "computed" in line:
            name, rest = line.split(": ", 1)
            result[name.strip().split()[-1]] = float(rest.rsplit(", ", 1)[-1][:-2])
    return result


def bare_operations(folder: Path) -> dict[str, float]:
    """Seconds of each stage's bare library operation on the same text, in this process."""
    import unicodedata

    import fasttext
    import numpy as np
    import regex

    docs = [json.loads(line) for line in (folder / "input" / "docs.jsonl").open(encoding="utf-8")]
    lines = [x for d in docs for x in d["text"].split("\n")]
    texts = [d["text"] for d in docs]
    out = {}
    t = time.process_time()
    [x.strip() for x in lines]
    out["clean"] = time.process_time() - t
    t = time.process_time()
    [unicodedata.normalize("NFC", x) for x in lines]
    out["normalise"] = time.process_time() - t
    script = regex.compile(r"\p{Latin}")
    t = time.process_time()
    [len(script.findall(x)) for x in lines]
    out["script"] = time.process_time() - t
    train = folder / "bare-train.txt"
    train.write_text("".join(f"__label__{lang} {x.lower()}\n" for lang in (TARGET, CONTACT)
                             for x in (folder / "input" / f"seeds-{lang}.txt").read_text("utf-8").splitlines()))
    model = fasttext.train_supervised(input=str(train), minn=2, maxn=4, dim=16, bucket=50_000, epoch=25, thread=1, verbose=0)
    t = time.process_time()
    model.f.multilinePredict([x.lower() + "\n" for x in lines], 1, 0.0, "strict")
    out["langid"] = time.process_time() - t
    letters = regex.compile(r"\p{L}")
    t = time.process_time()
    [(len(x), len(letters.findall(x))) for x in lines]
    out["filter"] = time.process_time() - t
    from datasketch import MinHash
    t = time.process_time()
    MinHash.bulk([[x[i:i + 5].encode() for i in range(max(1, len(x) - 4))] for x in (" ".join(s.lower().split()) for s in texts)],
                 num_perm=128)
    out["dedup"] = time.process_time() - t
    t = time.process_time()
    gzip.compress("".join(json.dumps(d, ensure_ascii=False) + "\n" for d in docs).encode("utf-8"), 6)
    out["export"] = time.process_time() - t
    np.zeros(1)
    return out


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--mb", type=float, default=10.0)
    ap.add_argument("--pairs", type=int, default=2)
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--work", default=str(ROOT / ".bench" / "pipeline"))
    args = ap.parse_args()
    _become_subreaper()
    folder = Path(args.work) / f"{args.mb:g}mb"
    truth = make_input(folder, args.mb)
    (folder / "recipe.toml").write_text(RECIPE, "utf-8")
    mb = truth["bytes"] / 1e6
    print(f"input: {truth['documents']} documents, {mb:.1f} MB, {len(set(truth['clusters'].values()))} to keep")
    runs = {"baseline": [], "corpuskit": []}
    for i in range(args.pairs):
        for side in ("baseline", "corpuskit"):       # interleaved: A B A B
            out = folder / f"out-{side}"
            shutil.rmtree(out, ignore_errors=True)
            if side == "baseline":
                cmd = [sys.executable, "-c", f"import sys; sys.path.insert(0, {str(ROOT / 'benchmarks')!r}); "
                       f"import pipeline; pipeline.baseline({str(folder)!r}, {str(out)!r})"]
            else:
                cmd = [sys.executable, "-m", "corpuskit.cli", "run", str(folder / "recipe.toml"), "--out", str(out),
                       "--no-progress", "--workers", str(args.workers)]
            runs[side].append(timed(cmd))
            print(f"  pair {i + 1} {side:9s} wall {runs[side][-1][0]:7.1f} s  CPU {runs[side][-1][1]:7.1f} s", flush=True)
    result = {}
    for side, kept in (("baseline", baseline_kept(folder / "out-baseline")), ("corpuskit", corpuskit_kept(folder / "out-corpuskit"))):
        wall = min(w for w, _ in runs[side])
        cpu = min(c for _, c in runs[side])
        p, r = accuracy(kept, truth["clusters"])
        result[side] = (wall, cpu)
        print(f"{side:9s}: wall {wall:6.1f} s  CPU {cpu:6.1f} s  {mb / wall:5.2f} MB/s  {cpu / mb:5.2f} CPU s/MB  "
              f"precision {p:.3f} recall {r:.3f}")
    (bw, bc), (cw, cc) = result["baseline"], result["corpuskit"]
    print(f"corpuskit / baseline: {bw / cw:.2f}x the MB/s (goal 10x), {cc / bc:.2f}x the CPU")
    # Per stage: its seconds in a run with one worker (everything in one process, so about its CPU),
    # against the stage's bare library operation on the same text in one process.
    one = folder / "out-corpuskit-1"
    shutil.rmtree(one, ignore_errors=True)
    wall1, cpu1 = timed([sys.executable, "-m", "corpuskit.cli", "run", str(folder / "recipe.toml"), "--out", str(one),
                         "--no-progress", "--workers", "1"])
    print(f"corpuskit, one worker: wall {wall1:6.1f} s  CPU {cpu1:6.1f} s  {cpu1 / mb:5.2f} CPU s/MB")
    bare = bare_operations(folder)
    two, single = stage_seconds(folder / "out-corpuskit"), stage_seconds(one)
    print("stage      2 workers s  1 worker s   bare s   1 worker / bare   (bare: the stage's library operation alone)")
    for name, seconds in single.items():
        b = bare.get(name)
        ratio = f"{seconds / b:10.1f}" if b else "         -"
        print(f"{name:10s} {two.get(name, float('nan')):11.2f} {seconds:11.2f} {b if b is not None else float('nan'):8.2f} {ratio}")


if __name__ == "__main__":
    main()
