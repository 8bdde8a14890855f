"""Language identification: deterministic training, the evaluation arithmetic, segment and
document decisions on constructed code-switched documents, the review loop, a supplied model."""
import csv
import hashlib
import json

import numpy as np
import pytest

from corpuskit.api import run
from corpuskit.recipe import load_recipe
from corpuskit.stages import langid

from .conftest import ROOT, copy_demo

SEEDS = ROOT / "sample_texts" / "seeds"


def seed_examples():
    return [(p.stem, langid.prepare_line(x)) for p in sorted(SEEDS.glob("*.txt"))
            for x in p.read_text("utf-8").splitlines() if x.strip()]


@pytest.fixture(scope="module")
def model_path(tmp_path_factory):
    path = tmp_path_factory.mktemp("langid") / "model.bin"
    langid.train(seed_examples(), langid.Params(), path)
    return path


def ctx(model_path, threshold=0.5):
    return {"model": str(model_path), "threshold": threshold, "language": "qnv", "scripts": ["Latn"]}


def test_training_is_deterministic(tmp_path, model_path):
    again = tmp_path / "again.bin"
    langid.train(seed_examples(), langid.Params(), again)
    assert hashlib.sha256(again.read_bytes()).digest() == hashlib.sha256(model_path.read_bytes()).digest()
    lines = ["Kema yɔgí bé yɔŋé ti", "zenfal quarhu xo por", "the bus leaves at noon"]
    a = langid.predict(langid.load_model(str(model_path)), lines)
    b = langid.predict(langid.load_model(str(again)), lines)
    assert a == b


def test_classification_report_on_a_hand_made_case():
    # Worked by hand: 6 items, 4 right.  a: tp 2, fp 1, fn 1 -> P 2/3, R 2/3; b: tp 1, fp 1, fn 0 -> P 1/2, R 1;
    # c: tp 1, fp 0, fn 1 -> P 1, R 1/2.
    gold = ["a", "a", "a", "b", "c", "c"]
    pred = ["a", "a", "b", "b", "c", "a"]
    rep = langid.classification_report(gold, pred)
    assert rep["accuracy"] == pytest.approx(4 / 6)
    assert rep["per_class"]["a"]["precision"] == pytest.approx(2 / 3) and rep["per_class"]["a"]["recall"] == pytest.approx(2 / 3)
    assert rep["per_class"]["b"]["precision"] == pytest.approx(1 / 2) and rep["per_class"]["b"]["recall"] == 1.0
    assert rep["per_class"]["c"]["f1"] == pytest.approx(2 * 1 * 0.5 / 1.5)
    assert rep["confusion"]["a"] == {"a": 2, "b": 1, "c": 0} and rep["confusion"]["c"]["a"] == 1


def test_calibration_picks_the_lowest_threshold_reaching_the_precision():
    scores = np.array([0.95, 0.9, 0.8, 0.7, 0.6, 0.4, 0.3])
    truth = np.array([True, True, True, False, True, False, False])
    # At 0.61..0.70 the selection is {.95,.9,.8,.7}: precision 3/4; above 0.70 it is 3/3.
    t = langid.calibrate(scores, truth, 0.98)
    assert t["reached"] and t["value"] == pytest.approx(0.71) and t["recall"] == pytest.approx(3 / 4)


def doc(segments, scripts=None, i=1):
    return {"id": f"t:{i}", "source": "t", "segments": list(segments), "seg_index": list(range(len(segments))),
            "seg_script": scripts, "meta": "{}", "original": None}


TARGET = "Kema yɔgí bé yɔŋé ti bavusɛ gonó."
TARGET2 = "Wikɛgu ŋiŋa dɔnili sɛdé ketogí yɔŋé."
CONTACT = "Zenfal quarhu xo porjix trivos clequa."


def test_contact_segment_inside_a_target_document_is_removed(model_path):
    kept, rows = langid.apply([doc([TARGET, CONTACT, TARGET2])], langid.Params(), ctx(model_path))
    assert kept[0]["segments"] == [TARGET, TARGET2]
    assert [(r.unit, r.reason, r.seg_index) for r in rows] == [("segment", "lang:qtm", 1)]


def test_document_mostly_in_the_contact_language_is_dropped_whole(model_path):
    kept, rows = langid.apply([doc([CONTACT, CONTACT, CONTACT, TARGET])], langid.Params(min_share=0.3), ctx(model_path))
    assert kept == [] and rows[0].unit == "document" and rows[0].segments == 4


def test_short_segments_follow_their_neighbours(model_path):
    kept, rows = langid.apply([doc([TARGET, "ok 12", "🙂", CONTACT, "www.example.org"])], langid.Params(), ctx(model_path))
    labels = kept[0]["seg_lang"]
    # "ok 12" and the emoji follow the target segment before them; the URL follows the contact one.
    assert kept[0]["segments"] == [TARGET, "ok 12", "🙂"]
    assert {r.seg_index for r in rows} == {3, 4} and labels == ["qnv", "qnv", "qnv"]


def test_a_script_the_language_never_uses_is_decided_without_the_classifier(model_path):
    kept, rows = langid.apply([doc([TARGET, "Ключ к двери лежит"], ["Latn", "Cyrl"])], langid.Params(), ctx(model_path))
    assert kept[0]["segments"] == [TARGET] and rows[0].reason == "lang:script:Cyrl"


def test_reviewed_labels_join_the_seeds(tmp_path):
    recipe = copy_demo(tmp_path)
    sheet = recipe.parent / "reviewed.csv"
    with open(sheet, "w", encoding="utf-8", newline="") as f:
        w = csv.writer(f)
        w.writerow(["doc_id", "text", "p_target", "label"])
        w.writerow(["x:1", "'=kema tabu sɛli", "0.51", "qnv-x-hill"])    # neutralised formula cell
        w.writerow(["x:2", "zenfal xo", "0.49", "qtm"])
        w.writerow(["x:3", "undecided line", "0.50", ""])                 # no label: ignored
    text = recipe.read_text("utf-8").replace("[stages.langid]", "[stages.langid]\nreview_file = 'reviewed.csv'", 1)
    recipe.write_text(text, "utf-8")
    r = load_recipe(recipe)
    examples = langid.read_seeds(r, r.stages["langid"])
    assert ("qnv-x-hill", "=kema tabu sɛli") in examples and ("qtm", "zenfal xo") in examples
    assert not any(t == "undecided line" for _, t in examples)


def test_a_supplied_model_replaces_training(tmp_path, model_path):
    recipe = copy_demo(tmp_path)
    (recipe.parent / "model.bin").write_bytes(model_path.read_bytes())
    text = recipe.read_text("utf-8").replace("[stages.langid]", "[stages.langid]\nmodel = 'model.bin'", 1)
    recipe.write_text(text, "utf-8")
    run(recipe, tmp_path / "out", workers=1, until="langid")
    reports = [json.loads(p.read_text("utf-8")) for p in (tmp_path / "out" / ".cache").rglob("report-*.json")]
    assert [r["source"] for r in reports] == ["user-supplied model"]
    assert not list((tmp_path / "out" / ".cache").rglob("model-*.bin"))  # nothing was trained
