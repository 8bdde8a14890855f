"""Spelling variants: discovery scored on the demo's planted variants and on a published list of
British and American English spellings; the review loop; what an accepted table changes."""
import csv
import json
import unicodedata

import pytest

from corpuskit.errors import DataError
from typer.testing import CliRunner

from corpuskit import discovery as D
from corpuskit.api import load_corpus, run
from corpuskit.cli import app
from corpuskit.storage import Cache
from corpuskit.variants_table import TABLE_HEADER, type_counts

from .conftest import ROOT, copy_demo

NFC = lambda s: unicodedata.normalize("NFC", s)  # noqa: E731


def filter_stage_docs(out):
    cache = Cache(out)
    keys = [p.stem for p in (out / ".cache" / "filter").glob("*.json") if "counts" in json.loads(p.read_text("utf-8"))]
    return [d for k in sorted(keys) for d in cache.read_docs("filter", k)]


def planted_pairs(truth):
    pairs = {(NFC(v["variant"]), NFC(v["canonical"])) for v in truth["variant"]}
    return pairs | {(NFC(v["error"]), NFC(v["word"])) for v in truth["ocr_confusion"]}


def test_discovery_finds_the_planted_variants(demo_run, truth):
    stats, contexts = D.collect(filter_stage_docs(demo_run.out))
    costs = D.load_costs(ROOT / "recipes" / "tables" / "demo-costs.tsv")
    candidates = D.propose(stats, contexts, costs, "abdegiklmnostuwyɛɔŋ", top=400)
    planted = {p for p in planted_pairs(truth) if p[0] in stats}
    k = 20
    spelling = [(c.variant, c.canonical) for c in candidates[:k] if c.kind == "spelling"]
    hits = len(set(spelling) & planted)
    recall, precision = hits / len(planted), hits / len(spelling)
    print(f"variant discovery, top {k}: {len(planted)} planted pairs present, recall {recall:.3f}, precision {precision:.3f}")
    assert recall >= 0.9 and precision >= 0.8


def test_weighted_distance_uses_the_cost_table():
    costs = D.CostTable([("ŋ", "ng", 0.3), ("ɛ", "e", 0.3), ("m", "rn", 0.4)])
    assert D.weighted_distance("ngɛ", "ŋɛ", costs) == (0.3, ["ng/ŋ"])
    assert D.weighted_distance("bé", "be", costs) == (0.2, ["diacritic"])
    assert D.weighted_distance("kama", "kamma", costs) == (0.3, ["doubling"])
    assert D.weighted_distance("rnɛ", "mɛ", costs) == (0.4, ["rn/m"])
    assert D.weighted_distance("kati", "taki", costs)[0] == 2.0          # two full substitutions
    assert D.weighted_distance("kiat", "kait", costs) == (0.8, ["transposition"])


def test_a_form_confined_to_one_dialect_is_a_dialect_difference():
    stats = {"hemi": D.TypeStats(6, {"river": 6}), "semi": D.TypeStats(9, {"hill": 5, "coast": 4})}
    [c] = D.propose(stats, {}, D.CostTable(), top=5)
    assert c.kind == "dialect" and c.scope == "dialect:river" and "not an error" in c.why


def test_keyboard_stand_in_is_recognised():
    costs = D.CostTable([("ŋ", "ng", 0.3), ("ɔ", "o", 0.3)])
    assert D.is_stand_in("ngo", "ŋɔ́", costs) and not D.is_stand_in("ŋo", "ŋɔ́", costs)


def test_review_round_trip_through_the_cli(tmp_path):
    recipe = copy_demo(tmp_path)
    out, sheet = tmp_path / "out", tmp_path / "review.csv"
    runner = CliRunner()
    r = runner.invoke(app, ["variants", "propose", str(recipe), "--out", str(out), "--sheet", str(sheet), "--top", "12"])
    assert r.exit_code == 0, r.output
    with open(sheet, encoding="utf-8", newline="") as f:
        rows = list(csv.DictReader(f))
    assert len(rows) == 12 and rows[0]["variant_examples"] and rows[0]["why"]
    for i, row in enumerate(rows):
        row["decision"] = "accept" if i < 3 else "reject" if i < 5 else ""
    rows[0]["why"] = "=cmd|' /C calc'!A0"     # a reviewer's formula-looking note must not break anything
    with open(sheet, "w", encoding="utf-8", newline="") as f:
        w = csv.DictWriter(f, fieldnames=list(rows[0]))
        w.writeheader()
        w.writerows(rows)
    table = recipe.parent / "tables" / "demo-variants.tsv"
    r = runner.invoke(app, ["variants", "accept", str(sheet), "--table", str(table)])
    assert r.exit_code == 0, r.output
    lines = table.read_text("utf-8").splitlines()
    assert lines[0] == TABLE_HEADER and len([x for x in lines[2:] if x and not x.startswith("#")]) == 3
    rejected = D.load_rejected(D.rejected_path(table))
    assert rejected == {(rows[3]["variant"], rows[3]["canonical"]), (rows[4]["variant"], rows[4]["canonical"])}
    # Accepting the same sheet again adds nothing; proposing again skips every decided pair.
    r = runner.invoke(app, ["variants", "accept", str(sheet), "--table", str(table)])
    assert "0 pairs added" in r.stdout
    r = runner.invoke(app, ["variants", "propose", str(recipe), "--out", str(out), "--sheet", str(sheet), "--top", "40"])
    with open(sheet, encoding="utf-8", newline="") as f:
        again = {(x["variant"], x["canonical"]) for x in csv.DictReader(f)}
    assert not again & {(x["variant"], x["canonical"]) for x in rows[:5]}


def test_a_bad_decision_names_the_line(tmp_path):
    sheet = tmp_path / "s.csv"
    sheet.write_text("decision,variant,canonical\naccept,ngo,ŋɔ\nmaybe,ke,kɛ\n", "utf-8")
    with pytest.raises(DataError, match=r"s\.csv line 3: decision 'maybe'"):
        D.accept_sheet(sheet, tmp_path / "t.tsv", tmp_path / "r.tsv")


def test_accepted_table_reduces_the_types_as_the_ground_truth_predicts(tmp_path, demo_run, truth):
    recipe = copy_demo(tmp_path)
    table = recipe.parent / "tables" / "demo-variants.tsv"
    pairs = sorted(planted_pairs(truth))
    table.write_text(TABLE_HEADER + "\nvariant\tcanonical\tscope\tnote\n" + "".join(f"{v}\t{c}\tall\tplanted\n" for v, c in pairs),
                     "utf-8")
    result = run(recipe, tmp_path / "out", workers=1)

    def types(out):
        segs = [s for restricted in (False, True) for ss in load_corpus(out, restricted=restricted).segments for s in ss]
        return set(type_counts(segs))

    before, after = types(demo_run.out), types(result.out)
    expected_gone = {v for v, c in pairs if v in before}
    print(f"types: {len(before)} before, {len(after)} after; {len(expected_gone)} planted variant forms present")
    assert before - after == expected_gone
    assert after - before <= {c for _, c in pairs}
    report = (result.out / "reports" / "variants.csv").read_text("utf-8")
    assert "table:" in report and "(all)" in report


# -- external check: a published list of British and American English spellings ---------------

def test_discovery_on_british_and_american_spellings():
    """Real English word types with real frequencies from wordfreq (registry package), scored against
    the British/American spelling pairs published with the breame package (registry package, its
    BRITISH_ENGLISH_SPELLINGS table).  The cost table holds the textbook alternations (s/z, our/or,
    re/er, ae/e, oe/e, ogue/og, c/s, l/ll), written from memory.  A pair counts as found when one
    form's best-ranked partner is the other.  Measured: 0.87 of 99 pairs on the top 20,000 words;
    here the top 10,000 words keep the test fast."""
    from breame.data.spelling_constants import BRITISH_ENGLISH_SPELLINGS
    from wordfreq import top_n_list, word_frequency

    words = [w for w in top_n_list("en", 10000) if w.isalpha()]
    vocab = set(words)
    gold = {(b, a) for b, a in BRITISH_ENGLISH_SPELLINGS.items() if b in vocab and a in vocab and b != a}
    stats = {w: D.TypeStats(count=max(1, int(word_frequency(w, "en") * 1e8))) for w in words}
    costs = D.CostTable([("s", "z", 0.3), ("our", "or", 0.3), ("re", "er", 0.3), ("ae", "e", 0.3),
                         ("oe", "e", 0.3), ("ogue", "og", 0.3), ("c", "s", 0.5), ("l", "ll", 0.3)])
    best: dict[str, str] = {}
    for c in D.propose(stats, {}, costs, "", top=100000):
        best.setdefault(c.variant, c.canonical)
        best.setdefault(c.canonical, c.variant)
    found = sum(1 for b, a in gold if best.get(b) == a or best.get(a) == b)
    recall = found / len(gold)
    print(f"British/American spellings: {len(gold)} pairs in the 10,000 most frequent words, recall {recall:.3f}")
    assert len(gold) >= 30 and recall >= 0.75


# -- real vocabularies: stand-ins found, real words left alone ---------------------------------------

@pytest.mark.external
@pytest.mark.parametrize("language", ["cs", "pl", "tr", "de"])
def test_stand_ins_found_and_minimal_pairs_kept_below_them(language):
    """Source: wordfreq's word frequencies (Czech, Polish, Turkish; German for the two-letter stand-ins
    ae, oe, ue, ss), lines drawn from the 5,000 most frequent words, a fifth typed without the special
    letters; minimal pairs decided by Debian's Hunspell dictionaries (hunspell-cs, -pl, -tr, -de-de),
    read with spylls.  See benchmarks/variants_real.py for the protocol."""
    import os
    import sys
    if not os.path.exists("/usr/share/hunspell/cs_CZ.dic"):
        pytest.skip("Debian's Hunspell dictionaries are not installed (tests/system-setup.sh installs them as root)")
    sys.path.insert(0, str(ROOT / "benchmarks"))
    import variants_real
    r = variants_real.evaluate(language)
    print(r)
    recall = next(v for k, v in r.items() if k.startswith("recall_top_"))
    assert recall >= 0.9 and r["precision_top_k"] >= 0.8 and r["minimal_pairs_in_top_k"] <= 0.2


def _stats(**counts):
    """TypeStats from name=(count, uses in full-orthography lines)."""
    return {w: D.TypeStats(count=c, full=f) for w, (c, f) in counts.items()}


def test_a_plain_form_written_beside_special_letters_is_a_minimal_pair():
    # 'ne' is used in lines that type special letters: a word of its own, shown below stand-ins
    stats = _stats(ne=(120, 90), né=(40, 40), protoze=(30, 0), protože=(90, 90), ty=(50, 40), tý=(20, 20))
    ranked = D.propose(stats, {}, D.CostTable(), top=10)
    kinds = {(c.variant, c.canonical): c.kind for c in ranked}
    assert kinds[("protoze", "protože")] == "spelling" and "keyboard stand-in" in ranked[0].why
    assert ranked[0].variant == "protoze"
    assert {c.kind for c in ranked if c.variant in ("ne", "ty", "né", "tý")} == {"minimal-pair"}
    assert "likely a minimal pair" in next(c.why for c in ranked if c.kind == "minimal-pair")


def test_the_canonical_form_is_the_one_written_in_full_orthography_then_the_frequent_one():
    stats = _stats(nez=(300, 0), než=(1100, 1100), něž=(40, 40))
    best = {c.variant: c.canonical for c in D.propose(stats, {}, D.CostTable(), top=10)}
    assert best["nez"] == "než"


def test_protected_words_and_rejected_forms_are_not_proposed():
    stats = _stats(ne=(120, 0), né=(40, 40), ně=(30, 30), tabu=(5, 0), tabú=(50, 50))
    assert not [c for c in D.propose(stats, {}, D.CostTable(), top=10, protected={"tabu"}) if "tabu" in (c.variant, c.canonical)]
    again = D.propose(stats, {}, D.CostTable(), top=10, exclude={("ne", "né")}, rejected_forms={"ne": 120})
    assert not [c for c in again if c.variant == "ne"]                  # not back with 'ně'
    later = D.propose({**stats, "ne": D.TypeStats(count=300, full=0)}, {}, D.CostTable(), top=10,
                      exclude={("ne", "né")}, rejected_forms={"ne": 120})
    assert [c.canonical for c in later if c.variant == "ne"] == ["ně"]    # the evidence changed: its count doubled


def test_turkish_capitals_fold_to_turkish_letters():
    docs = [{"source": "s", "dialect": None, "segments": ["İlk IŞIK ilk ışık"]}]
    stats, _ = D.collect(docs, language="tr")
    assert set(stats) == {"ilk", "ışık"}
    assert "i\u0307lk" in D.collect(docs)[0]      # language-blind lower case: i with a combining dot


def test_two_letter_stand_ins_both_directions():
    costs = D.CostTable([("ä", "ae", 0.2), ("ö", "oe", 0.2), ("ü", "ue", 0.2), ("ß", "ss", 0.2)])
    assert D.is_stand_in("natuerlich", "natürlich", costs) and D.is_stand_in("strasse", "straße", costs)
    assert not D.is_stand_in("laenge", "lange", costs) and not D.is_stand_in("natürlich", "natuerlich", costs)


def test_a_word_list_marks_pairs_of_two_words(tmp_path):
    words = tmp_path / "words.txt"
    words.write_text("byt\nbýt\nprotože\n", "utf-8")
    stats = _stats(byt=(10, 0), být=(90, 90), protoze=(30, 0), protože=(90, 90))
    ranked = D.propose(stats, {}, D.CostTable(), top=10, wordlist=D.WordList(words))
    assert [c.variant for c in ranked] == ["protoze", "byt"] and ranked[1].kind == "minimal-pair"
    assert "word list" in ranked[1].why
