"""Language ID on real short text nobody here wrote: CLDR display names through Babel.

For 30 locales with close relatives among them (Bokmål, Nynorsk, Danish, Swedish; Russian,
Ukrainian, Belarusian, Bulgarian; Persian, Urdu, Arabic), the names of territories, languages,
scripts and currencies, and month and day names, are real short lines (median 8 characters).
Per locale, 300 lines are seeds and up to 300 others are the test set.  For each target:

- the stage: cross-validated threshold for the recipe's precision, the fold models averaged as
  the classifier; precision and recall on the test lines, decided alone and in documents of 8
  lines of one locale (context);
- the baseline: a plain fastText with the same hyperparameters trained on the same seeds,
  shuffled, its threshold set on the test lines to reach the stage's precision (an oracle
  advantage for the baseline), and the recall it then keeps.

Run: python benchmarks/langid_real.py [target ...]
"""
from __future__ import annotations

import random
import sys
import tempfile
from pathlib import Path

import numpy as np

from corpuskit.stages import langid

LOCALES = ["nb", "nn", "da", "sv", "is", "de", "nl", "en", "fr", "es", "pt", "it", "ro", "ca", "ru", "uk", "be",
           "bg", "mk", "pl", "cs", "sk", "fa", "ur", "ar", "hi", "tr", "fi", "hu", "lt"]
SEEDS_PER_LABEL, TEST_PER_LABEL, DOC_LINES = 300, 300, 8


def cldr_lines(code: str) -> list[str]:
    """Distinct display names of one locale, from the CLDR data Babel ships."""
    from babel import Locale
    loc = Locale.parse(code)
    names = list(loc.territories.values()) + list(loc.languages.values()) + list(loc.scripts.values())
    names += list(loc.currencies.values())
    for kind in ("months", "days"):
        for ctx in getattr(loc, kind).values():
            for width in ctx.values():
                names += list(width.values())
    return sorted({" ".join(n.split()) for n in names if n and n.strip()})


def split_data(seed: int = 7) -> tuple[list[tuple[str, str]], dict[str, list[str]]]:
    rng = random.Random(seed)
    seeds, tests = [], {}
    for code in LOCALES:
        lines = cldr_lines(code)
        rng.shuffle(lines)
        seeds += [(code, langid.prepare_line(x)) for x in lines[:SEEDS_PER_LABEL]]
        tests[code] = lines[SEEDS_PER_LABEL:SEEDS_PER_LABEL + TEST_PER_LABEL]
    return seeds, tests


def prf(pred: np.ndarray, truth: np.ndarray) -> tuple[float, float]:
    tp = float((pred & truth).sum())
    return (tp / pred.sum() if pred.sum() else 0.0), (tp / truth.sum() if truth.sum() else 0.0)


def evaluate(target: str, precision: float = 0.9, params: langid.Params | None = None) -> dict:
    seeds, tests = split_data()
    params = params or langid.Params(target_precision=precision)
    with tempfile.TemporaryDirectory() as tmp:
        folds = [Path(tmp) / f"fold{k}.bin" for k in range(params.folds)]
        report = langid.cross_validate(seeds, params, target, Path(tmp), keep=folds)
        threshold = report["threshold"]["value"]
        model = langid.load_model([str(p) for p in folds])
        lines = [x for c in LOCALES for x in tests[c]]
        truth = np.array([c == target for c in LOCALES for _ in tests[c]])
        own, _ = langid.target_scores(model, lines, target)
        alone_p, alone_r = prf(own >= threshold, truth)
        # documents of DOC_LINES lines of one locale, scored with context
        ctx_scores = np.empty_like(own)
        at = 0
        for c in LOCALES:
            n = len(tests[c])
            for start in range(0, n, DOC_LINES):
                idx = np.arange(at + start, at + min(n, start + DOC_LINES))
                letters = [langid.letter_count(lines[i]) for i in idx]
                ctx_scores[idx] = langid.with_context(own[idx], letters, params.context_letters)
            at += n
        ctx_p, ctx_r = prf(ctx_scores >= threshold, truth)
        # the plain baseline: same seeds shuffled, same hyperparameters, no calibration
        import fasttext
        fasttext.FastText.eprint = lambda *a, **k: None
        order = list(range(len(seeds)))
        random.Random(1).shuffle(order)
        path = Path(tmp) / "plain.txt"
        path.write_text("".join(f"__label__{seeds[i][0]} {seeds[i][1]}\n" for i in order), "utf-8")
        h = report["hyperparameters"]
        plain = fasttext.train_supervised(input=str(path), minn=h["minn"], maxn=h["maxn"], dim=h["dim"], bucket=100_000,
                                          epoch=h["epoch"], lr=0.5, wordNgrams=h["word_ngrams"], loss="softmax",
                                          thread=1, seed=1234, verbose=0, minCount=1)
        base, _ = langid.target_scores(plain, lines, target)
        best_r = 0.0
        for t in np.unique(base):
            p, r = prf(base >= t, truth)
            if p >= alone_p:
                best_r = max(best_r, r)
    return {"target": target, "target_precision": precision, "threshold": threshold,
            "cv": {"precision": report["threshold"]["precision"], "recall": report["threshold"]["recall"],
                   "reached": report["threshold"]["reached"]},
            "alone": {"precision": round(alone_p, 3), "recall": round(alone_r, 3)},
            "context": {"precision": round(ctx_p, 3), "recall": round(ctx_r, 3)},
            "plain_recall_at_same_precision": round(best_r, 3), "test_lines": int(truth.sum())}


if __name__ == "__main__":
    for target in sys.argv[1:] or ["nb", "nn", "ru", "uk", "fa", "ur"]:
        print(evaluate(target))
