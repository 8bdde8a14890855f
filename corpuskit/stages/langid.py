"""Language identification at segment level, trained from the team's own seed text.

A fastText supervised classifier (character n-grams, small dimensions, one
thread and a fixed seed, so training is deterministic) learns the target
language (optionally per dialect), each contact language and an ``other``
class.  k-fold cross-validation gives an honest error estimate; the decision
threshold on the target-language probability is calibrated on the held-out
folds to reach the recipe's precision.  Segments without enough letters are
undetermined and follow their neighbours.
"""
from __future__ import annotations

import csv
import os
import random
import tempfile
from collections import Counter
from dataclasses import dataclass
from functools import lru_cache
from pathlib import Path
from typing import Any

import numpy as np
import regex

from ..errors import RecipeError
from ..ledger import LedgerRow, remove_document
from ..config import Checked, param
from ..storage import file_sha256, stable_hash
from ..variants_table import restore_cell
from ._base import keep_segments

VERSION = "2"
UND = "und"
LETTER = regex.compile(r"\p{L}")
URL = regex.compile(r"https?://\S+|www\.\S+|\S+@\S+\.\w+")


@dataclass(frozen=True)
class Params(Checked):
    seeds: dict = param({}, help="seed files by label, e.g. {qxk = 'seeds/qxk.txt', contact = 'seeds/contact.txt'}")
    model: str = param("", help="a fastText model file to use instead of training")
    target_precision: float = param(0.98, low=0.5, high=1.0, help="precision the threshold is calibrated to reach")
    folds: int = param(5, low=2, high=20, help="cross-validation folds")
    min_letters: int = param(4, low=0, high=200, help="segments with fewer letters are undetermined")
    min_share: float = param(0.3, low=0, high=1, help="documents with a smaller target share are dropped")
    target_scripts: list[str] = param([], help="scripts the target language is written in (default: the target script)")
    review_file: str = param("", help="a reviewed sheet (CSV: text,label) merged into the seeds")
    review_size: int = param(100, low=0, high=100_000, help="uncertain segments written to the review sheet")
    epoch: int = param(25, low=1, high=1000, help="training epochs")
    dim: int = param(16, low=2, high=1024, help="embedding dimension")


def _seed_paths(recipe, params) -> dict[str, Path]:
    return {label: recipe.resolve(path, f"[stages.langid] seeds.{label}") for label, path in sorted(params.seeds.items())}


def context_key(recipe, params) -> str:
    files = {k: file_sha256(p) for k, p in _seed_paths(recipe, params).items() if p.exists()}
    extra = [file_sha256(recipe.resolve(x, "[stages.langid]")) for x in (params.model, params.review_file)
             if x and recipe.resolve(x, "[stages.langid]").exists()]
    return stable_hash(VERSION, recipe.corpus.language, recipe.corpus.target_script, files, extra)


def is_target(label: str, language: str) -> bool:
    return label == language or label.startswith(language + "-")


def prepare_line(text: str) -> str:
    """The same preprocessing for training and prediction: one line, case-folded, single spaces."""
    return " ".join(text.casefold().split())


def read_seeds(recipe, params) -> list[tuple[str, str]]:
    examples = []
    for label, path in _seed_paths(recipe, params).items():
        if not path.exists():
            raise RecipeError(f"{recipe.path}: [stages.langid] seeds.{label} = '{path.name}' does not exist; check the path.")
        for line in path.read_text(encoding="utf-8").splitlines():
            line = prepare_line(line)
            if line and not line.startswith("#"):
                examples.append((label, line))
    if params.review_file:
        path = recipe.resolve(params.review_file, "[stages.langid] review_file")
        if path.exists():
            with open(path, encoding="utf-8", newline="") as f:
                for row in csv.DictReader(f):
                    label = (row.get("label") or "").strip()
                    if label and label in params.seeds:
                        examples.append((label, prepare_line(restore_cell(row.get("text", "")))))
    return examples


def train(examples: list[tuple[str, str]], params: Params, path: Path) -> None:
    import fasttext

    fasttext.FastText.eprint = lambda *a, **k: None
    with tempfile.NamedTemporaryFile("w", suffix=".txt", delete=False, encoding="utf-8") as f:
        for label, text in examples:
            f.write(f"__label__{label} {text}\n")
        name = f.name
    try:
        model = fasttext.train_supervised(input=name, minn=2, maxn=5, dim=params.dim, bucket=100_000,
                                          epoch=params.epoch, lr=0.5, wordNgrams=1, loss="softmax",
                                          thread=1, seed=1234, verbose=0, minCount=1)
        model.save_model(str(path))
    finally:
        os.unlink(name)


_MODELS: dict[str, Any] = {}


def load_model(path: str):
    if path not in _MODELS:
        import fasttext
        fasttext.FastText.eprint = lambda *a, **k: None
        _MODELS[path] = fasttext.load_model(path)
    return _MODELS[path]


def predict(model, lines: list[str]) -> list[dict[str, float]]:
    """Label probabilities per line through fastText's low-level API (safe under numpy 2)."""
    if not lines:
        return []
    # One call per line: multilinePredict in fasttext-wheel 0.9.2 repeats the first
    # probability for every label (measured here), and predict() fails under numpy 2.
    n = _label_count(model)
    f = model.f
    return [{lab[9:]: min(float(p), 1.0) for p, lab in f.predict(prepare_line(x) + "\n", n, 0.0, "strict")}
            for x in lines]


_LABELS: dict[tuple[int, str], tuple[int, frozenset[str]]] = {}


def _labels(model, language: str) -> tuple[int, frozenset[str]]:
    """The model's number of labels and its target-language labels, looked up once per model."""
    key = (id(model), language)
    if key not in _LABELS:
        labels = model.get_labels()
        _LABELS[key] = (len(labels), frozenset(lab for lab in labels if is_target(lab[9:], language)))
    return _LABELS[key]


def _label_count(model) -> int:
    return _labels(model, "")[0]


def target_scores(model, lines: list[str], language: str) -> tuple[np.ndarray, list[str]]:
    """P(target language) per line and the most probable label."""
    n, targets = _labels(model, language)
    fasttext_predict = model.f.predict
    out, best = [], []
    for x in lines:
        ranked = fasttext_predict(" ".join(x.casefold().split()) + "\n", n, 0.0, "strict")  # prepare_line, inlined
        out.append(sum([p for p, lab in ranked if lab in targets]))
        best.append(ranked[0][1][9:] if ranked else UND)
    return np.minimum(np.array(out, dtype=float), 1.0), best


def cross_validate(examples: list[tuple[str, str]], params: Params, language: str, workdir: Path) -> dict:
    """k-fold cross-validation: accuracy, per-class P/R/F1, confusion, out-of-fold target scores."""
    rng = random.Random(20261201)
    order = list(range(len(examples)))
    rng.shuffle(order)
    folds = [order[i::params.folds] for i in range(params.folds)]
    gold, pred, scores, is_tgt = [], [], [], []
    for k, test in enumerate(folds):
        test_set = set(test)
        train_ex = [examples[i] for i in order if i not in test_set]
        path = workdir / f"fold{k}.bin"
        train(train_ex, params, path)
        model = load_model(str(path))
        s, best = target_scores(model, [examples[i][1] for i in test], language)
        for i, sc, b in zip(test, s, best):
            gold.append(examples[i][0])
            pred.append(b)
            scores.append(float(sc))
            is_tgt.append(is_target(examples[i][0], language))
        _MODELS.pop(str(path), None)
        path.unlink()
    report = classification_report(gold, pred)
    report["threshold"] = calibrate(np.array(scores), np.array(is_tgt), params.target_precision)
    report["examples"] = len(examples)
    report["folds"] = params.folds
    return report


def classification_report(gold: list[str], pred: list[str]) -> dict:
    """Accuracy, per-class precision/recall/F1 and the confusion matrix (rows gold, columns predicted)."""
    labels = sorted(set(gold) | set(pred))
    conf = {g: {p: 0 for p in labels} for g in labels}
    for g, p in zip(gold, pred):
        conf[g][p] += 1
    per = {}
    for lab in labels:
        tp = conf[lab][lab]
        fp = sum(conf[g][lab] for g in labels) - tp
        fn = sum(conf[lab].values()) - tp
        prec = tp / (tp + fp) if tp + fp else 0.0
        rec = tp / (tp + fn) if tp + fn else 0.0
        per[lab] = {"precision": prec, "recall": rec, "f1": 2 * prec * rec / (prec + rec) if prec + rec else 0.0,
                    "support": tp + fn}
    acc = sum(conf[lab][lab] for lab in labels) / len(gold) if gold else 0.0
    return {"accuracy": acc, "per_class": per, "confusion": conf, "labels": labels,
            "macro_f1": float(np.mean([v["f1"] for v in per.values()])) if per else 0.0}


def calibrate(scores: np.ndarray, truth: np.ndarray, target_precision: float) -> dict:
    """The lowest threshold on P(target) whose precision reaches the target, and the recall it keeps."""
    best = {"value": 0.5, "precision": None, "recall": None, "reached": False}
    for t in np.round(np.arange(0.05, 1.0, 0.01), 2):
        sel = scores >= t
        if not sel.any():
            break
        prec = float(truth[sel].mean())
        rec = float(sel[truth].mean()) if truth.any() else 0.0
        if prec >= target_precision:
            return {"value": float(t), "precision": prec, "recall": rec, "reached": True}
        best = {"value": float(t), "precision": prec, "recall": rec, "reached": False}
    return best


def build_context(recipe, params, cache, key):
    stage_dir = cache.blob_path("langid", "")
    stage_dir.mkdir(parents=True, exist_ok=True)
    model_path = cache.blob_path("langid", f"model-{key}.bin")
    report_name = f"report-{key}.json"
    if params.model:
        model_path = recipe.resolve(params.model, "[stages.langid] model")
    if not cache.has_blob("langid", report_name):
        if not params.seeds and not params.model:
            raise RecipeError(f"{recipe.path}: [stages.langid] needs seeds (files of hand-checked lines per label) or a model; "
                              "add seeds = {<language> = 'seeds/...txt', contact = '...'}.")
        report: dict = {"source": "user-supplied model" if params.model else "trained from seeds"}
        if params.seeds:
            examples = read_seeds(recipe, params)
            labels = Counter(lab for lab, _ in examples)
            if not any(is_target(lab, recipe.corpus.language) for lab in labels):
                raise RecipeError(f"{recipe.path}: [stages.langid] seeds has no label for the target language "
                                  f"'{recipe.corpus.language}'; name one seed set '{recipe.corpus.language}' or "
                                  f"'{recipe.corpus.language}-<dialect>'.")
            with tempfile.TemporaryDirectory(dir=stage_dir) as tmp:
                report.update(cross_validate(examples, params, recipe.corpus.language, Path(tmp)))
            report["seed_counts"] = dict(sorted(labels.items()))
            if not params.model:
                train(examples, params, model_path)
        else:
            report["threshold"] = {"value": 0.5, "precision": None, "recall": None, "reached": False}
        cache.put_json("langid", report_name, report)
    report = cache.get_json("langid", report_name)
    scripts = list(params.target_scripts) or [recipe.corpus.target_script]
    scripts += [k for k in recipe.stages["script"].tables]
    return {"model": str(model_path), "threshold": report["threshold"]["value"], "language": recipe.corpus.language,
            "scripts": sorted(set(scripts)), "report": report_name}


@lru_cache(maxsize=32)
def _enough_letters(n: int):
    return regex.compile(r"(?:\P{L}*?\p{L}){%d}" % n)


def undetermined(text: str, min_letters: int) -> bool:
    """Too few letters (outside URLs and e-mail addresses) for the classifier to judge."""
    if "://" in text or "www." in text or "@" in text:
        text = URL.sub("", text)
    return min_letters > 0 and not _enough_letters(min_letters).match(text)


def _undecided(texts: list[str], scripts: list[str] | None, ctx: dict, params: Params):
    """Labels and scores decided without the classifier, and the positions the classifier must see."""
    labels: list[str] = [UND] * len(texts)
    scores: list[float] = [float("nan")] * len(texts)
    ask = []
    for i, t in enumerate(texts):
        if undetermined(t, params.min_letters):
            continue
        sc = scripts[i] if scripts else None
        if sc and sc not in ctx["scripts"] and sc not in ("Zyyy", "Zinh", "Zzzz"):
            labels[i], scores[i] = f"script:{sc}", 0.0
            continue
        ask.append(i)
    return labels, scores, ask


def _follow_neighbours(labels: list[str]) -> list[str]:
    """Undetermined segments take the previous determined label, else the next one."""
    resolved, last = list(labels), None
    for i, lab in enumerate(labels):
        if lab != UND:
            last = lab
        elif last is not None:
            resolved[i] = last
    nxt = None
    for i in range(len(labels) - 1, -1, -1):
        if labels[i] != UND:
            nxt = labels[i]
        elif resolved[i] == UND and nxt is not None:
            resolved[i] = nxt
    return resolved


def label_documents(docs: list[dict], ctx: dict, params: Params, model) -> list[tuple[list[str], list[float]]]:
    """A label (target language tag, another label, 'script:XXXX' or 'und') and P(target) per
    segment of each document; the classifier sees every document's segments in one pass."""
    plans = [_undecided(d["segments"], d.get("seg_script"), ctx, params) for d in docs]
    lines = [d["segments"][i] for d, (_, _, ask) in zip(docs, plans) for i in ask]
    s, best = target_scores(model, lines, ctx["language"])
    k, language, threshold = 0, ctx["language"], ctx["threshold"]
    out = []
    for labels, scores, ask in plans:
        for i in ask:
            scores[i] = float(s[k])
            labels[i] = language if s[k] >= threshold else (best[k] if not is_target(best[k], language) else "other")
            k += 1
        out.append((_follow_neighbours(labels), scores))
    return out


def label_segments(texts: list[str], scripts: list[str] | None, ctx: dict, params: Params, model) -> tuple[list[str], list[float]]:
    """``label_documents`` for one document's segments."""
    return label_documents([{"segments": texts, "seg_script": scripts}], ctx, params, model)[0]


def apply(docs: list[dict], params: Params, ctx: dict):
    rows: list[LedgerRow] = []
    model = load_model(ctx["model"])
    out = []
    language = ctx["language"]
    for doc, (labels, scores) in zip(docs, label_documents(docs, ctx, params, model)):
        target = [lab == language or lab == UND for lab in labels]
        determined = [lab for lab in labels if lab != UND]
        share = sum(1 for lab in determined if lab == language) / len(determined) if determined else 1.0
        doc["seg_lang"] = labels
        doc["seg_score"] = [None if s != s else round(s, 4) for s in scores]
        valid = [s for s, lab in zip(scores, labels) if s == s and lab == language]
        doc["langid_score"] = round(sum(valid) / len(valid), 4) if valid else None
        if share < params.min_share:
            rows.append(remove_document("langid", doc, "not-target-language",
                                        f"target-language share {share:.2f} < {params.min_share}; labels "
                                        + ", ".join(f"{k}={v}" for k, v in sorted(Counter(labels).items())),
                                        keep_text=True))
            continue
        if not all(target):
            reasons = [None if t else f"lang:{lab}" for t, lab in zip(target, labels)]
            details = ["" if t else f"P(target)={s:.2f}" if s == s else "" for t, s in zip(target, scores)]
            keep_segments("langid", doc, target, reasons, details, rows)
        doc["lang"] = language
        out.append(doc)
    return out, rows


def review_rows(docs_scores: list[tuple[str, str, float]], threshold: float, size: int) -> list[dict]:
    """The segments closest to the threshold, most uncertain first."""
    ranked = sorted(docs_scores, key=lambda x: (abs(x[2] - threshold), x[0]))[:size]
    return [{"doc_id": d, "text": t, "p_target": f"{s:.3f}", "label": ""} for d, t, s in ranked]


def report_json(cache, ctx_name: str) -> dict:
    return cache.get_json("langid", ctx_name)


