"""Languages written in other scripts: script codes, native digits, words where there are no spaces,
joiners, letter variants, and documents of subtitle sources."""
import random
import unicodedata

import pytest
from hypothesis import given, settings, strategies as st

from corpuskit.errors import RecipeError
from corpuskit.recipe import load_recipe
from corpuskit.scripts import canonical_script, unicode_scripts
from corpuskit.stages.normalise import Params as NParams, normalise_text
from corpuskit.words import words

from .conftest import copy_demo

ZWNJ = "\N{ZERO WIDTH NON-JOINER}"


# -- script codes (ISO 15924, through pycountry's copy of the registry) ----------------------------

@pytest.mark.external
def test_every_iso_15924_code_is_accepted_and_nothing_else(tmp_path):
    """Source: the ISO 15924 code list shipped with pycountry."""
    import pycountry
    codes = [s.alpha_4 for s in pycountry.scripts]
    assert len(codes) > 200
    assert all(canonical_script(c) == c and canonical_script(c.lower()) == c and canonical_script(c.upper()) == c
               for c in codes)
    assert [canonical_script(c) for c in ("Xxxx", "Latin", "Lat", "", "L4tn")] == [None] * 5
    recipe = copy_demo(tmp_path)
    text = recipe.read_text("utf-8")
    for value, ok in (("arab", "Arab"), ("ARAN", "Aran"), ("Xxxx", None)):
        recipe.write_text(text.replace('target_script = "Latn"', f'target_script = "{value}"'), "utf-8")
        if ok:
            assert load_recipe(recipe).corpus.target_script == ok
        else:
            with pytest.raises(RecipeError, match="'Xxxx' is not an ISO 15924 script code"):
                load_recipe(recipe)


def test_variant_codes_use_the_unicode_script_they_are_written_in():
    from corpuskit.stages.qualityfilter import Params, segment_problem
    assert unicode_scripts("Aran") == ("Arab",) and unicode_scripts("Latf") == ("Latn",)
    assert set(unicode_scripts("Jpan")) == {"Hani", "Hira", "Kana"}
    persian = "کتاب‌های زیادی در این کتابخانه هست"
    assert segment_problem(persian, Params(), "", "Aran") is None
    assert segment_problem(persian, Params(), "", "Latn")[0] == "wrong-script"


def test_a_target_script_that_removes_nearly_everything_stops_the_run(tmp_path):
    from corpuskit.api import run
    recipe = copy_demo(tmp_path)
    recipe.write_text(recipe.read_text("utf-8").replace('target_script = "Latn"', 'target_script = "Thai"'), "utf-8")
    with pytest.raises(RecipeError, match=r"removed \d+% of the text as not written in the target script Thai"):
        run(recipe, tmp_path / "out", workers=1)


# -- native digits, joiners, letter variants -------------------------------------------------------

@pytest.mark.external
@pytest.mark.parametrize("language", ["fa", "bn", "ar", "hi"])
def test_native_digits_and_joiners_come_out_as_they_went_in(language):
    """Source: wordfreq's word lists (real words; Persian ones with zero-width non-joiners), in lines
    with the script's own digits."""
    from wordfreq import top_n_list
    digits = {"fa": "۰۱۲۳۴۵۶۷۸۹", "bn": "০১২৩৪৫৬৭৮৯", "ar": "٠١٢٣٤٥٦٧٨٩", "hi": "०१२३४५६७८९"}[language]
    vocab = [w for w in top_n_list(language, 3000) if any(c.isalpha() for c in w)]   # not a stray joiner
    rng = random.Random(1)
    lines = [" ".join(rng.choices(vocab, k=6)) + " " + "".join(rng.choices(digits, k=3)) for _ in range(300)]
    joiners_in = sum(line.count(ZWNJ) + line.count("\u200d") for line in lines)
    out = [normalise_text(line, NParams())[0] for line in lines]
    assert [sum(c in digits for c in x) for x in out] == [sum(c in digits for c in x) for x in lines]
    assert sum(x.count(ZWNJ) + x.count("\u200d") for x in out) == joiners_in
    if language == "fa":
        assert joiners_in > 10


def test_variant_rules_never_drop_a_joiner():
    from corpuskit.variants_table import Mapper, VariantEntry
    m = Mapper([VariantEntry(f"می{ZWNJ}شود", "میشود"), VariantEntry("زمين", "زمین")], [], set())
    text, used = m.apply(f"می{ZWNJ}شود زمين")
    assert text == f"می{ZWNJ}شود زمین" and sum(used.values()) == 1


def test_discovery_prefers_the_form_with_the_joiner():
    from corpuskit import discovery as D
    stats = {f"می{ZWNJ}شود": D.TypeStats(count=20, full=20), "میشود": D.TypeStats(count=30, full=30)}
    [c] = D.propose(stats, {}, D.CostTable(), top=5)
    assert c.canonical == f"می{ZWNJ}شود"


def test_emoji_share_does_not_count_joiners_inside_words():
    from corpuskit.stages.qualityfilter import Params, segment_problem
    bengali = "ক্ষ\u200dমা করবেন আমি র‍্যাব দেখেছি"
    assert segment_problem(bengali, Params(max_emoji_share=0.0), "", "Beng") is None


# -- words where scripts have no spaces -------------------------------------------------------------

@pytest.mark.external
def test_thai_words_per_line_against_a_reference_segmenter():
    """Source: Thai display names of territories, languages, scripts and currencies in CLDR (Babel);
    reference: PyThaiNLP's dictionary segmenter (newmm).  ICU's count is within 10%."""
    pytest.importorskip("pythainlp")
    from babel import Locale
    from pythainlp.tokenize import word_tokenize
    loc = Locale.parse("th")
    names = sorted(set(list(loc.territories.values()) + list(loc.languages.values()) + list(loc.scripts.values())
                       + list(loc.currencies.values())))
    ref = sum(len([w for w in word_tokenize(n, engine="newmm", keep_whitespace=False) if w.strip()]) for n in names)
    ours = sum(len(words(n, "th")) for n in names)
    print(f"Thai, {len(names)} CLDR names: {ours} words (PyThaiNLP newmm {ref}), ratio {ours / ref:.3f}")
    assert abs(ours / ref - 1) <= 0.10


@pytest.mark.external
@pytest.mark.parametrize("language", ["zh", "ja"])
def test_words_of_lines_written_without_spaces(language):
    """Source: wordfreq's Chinese and Japanese word lists; lines of 8 words written without spaces, as
    the languages are: the segmenter finds the number of words the line was made of, within 10%."""
    from wordfreq import top_n_list
    vocab = [w for w in top_n_list(language, 3000) if w.isalpha()]
    rng = random.Random(3)
    lines = ["".join(rng.choices(vocab, k=8)) for _ in range(300)]
    found = sum(len(words(x, language)) for x in lines)
    print(f"{language}: 2400 words written, {found} found")
    assert abs(found / 2400 - 1) <= 0.10


def test_the_quick_test_for_scripts_without_spaces_starts_at_their_first_code_point():
    """Scripts per code point from the Unicode Character Database, as the regex module carries it:
    no character before NO_SPACE_FROM belongs to a script written without spaces, so text whose
    largest character comes before it needs no dictionary."""
    from corpuskit.words import NO_SPACE, NO_SPACE_FROM, needs_dictionary
    first = next(c for c in range(0x110000) if NO_SPACE.match(chr(c)))
    assert chr(first) == NO_SPACE_FROM
    for text in ("kamɛ ŋɔ", "abc", "Σς\u0e00", "ab\u0e01", "ŋ中", "😀 ŋ", ""):
        assert needs_dictionary(text) == bool(NO_SPACE.search(text)), text


def test_balance_counts_thai_words_not_space_separated_chunks():
    from corpuskit.reports.balance import Accumulator
    acc = Accumulator("th")
    acc.add({"segments": ["สวัสดีครับวันนี้อากาศดีมาก"], "source": "s", "dialect": "d", "medium": "web", "script": "Thai"})
    assert acc.rows["dialect"]["d"]["words"] >= 5


# -- the script inventory ----------------------------------------------------------------------------

def test_inventory_skips_placeholders_and_cuts_examples_between_graphemes():
    from corpuskit.reports.balance import ScriptInventory
    inv = ScriptInventory()
    text = "ক্ষ" * 12 + " <PHONE> " + "ক্ষ" * 12
    inv.add({"segments": [text], "source": "s", "dialect": "d"})
    assert not any(ch in "PHONE" for (_, _, _, ch) in inv.chars)
    for example in inv.examples.values():
        assert unicodedata.category(example[0]) != "Mn" and example[0] != "\u09cd"


def _inventory_one_by_one(docs):
    """The inventory as it was counted before, document by document and character by character."""
    from collections import Counter
    from corpuskit.pii import PLACEHOLDER
    from corpuskit.reports.balance import _context
    from corpuskit.scripts import char_script
    chars, examples = Counter(), {}
    for doc, public in docs:
        segments = [PLACEHOLDER.sub(" ", s) if "<" in s else s for s in doc["segments"]]
        for ch, n in Counter("\n".join(segments)).items():
            if ch.isspace():
                continue
            key = (doc["source"], doc.get("dialect") or "unknown", char_script(ch), ch)
            chars[key] += n
            if key not in examples:
                seg = next(s for s in segments if ch in s)
                examples[key] = _context(seg, seg.index(ch)) if public else "(restricted source)"
    return chars, examples


@settings(max_examples=300, deadline=None)
@given(st.lists(st.tuples(st.lists(st.text(alphabet=st.sampled_from("ab ŋɛ\u0301\tক্ষ中😀<PHONE>\u2028\ud800"), max_size=12),
                                   max_size=4),
                          st.sampled_from(["web", "chat"]), st.sampled_from([None, "coast", "hill"]), st.booleans()),
                max_size=8))
def test_inventory_of_many_documents_equals_the_inventory_of_each_in_turn(items):
    from corpuskit.reports.balance import ScriptInventory
    docs = [({"segments": segs, "source": src, "dialect": dia}, public) for segs, src, dia, public in items]
    inv = ScriptInventory()
    inv.add_many(docs)
    assert (inv.chars, inv.examples) == _inventory_one_by_one(docs)


# -- subtitles in documents of a few minutes -----------------------------------------------------------

def test_subtitle_cues_grouped_by_minutes(tmp_path):
    from corpuskit.readers import srt
    from corpuskit.readers.decode import TextFile
    cues = "".join(f"{i + 1}\n00:{i:02d}:00,000 --> 00:{i:02d}:05,000\nLine number {i} of the talk.\n\n" for i in range(6))
    p = tmp_path / "t.srt"
    p.write_text(cues, "utf-8")
    docs = list(srt.read(TextFile(p, "t.srt", "s"), srt.Options(minutes=2)))
    assert [len(d["segments"]) for d in docs] == [2, 2, 2] and len({d["key"] for d in docs}) == 3
    assert len(list(srt.read(TextFile(p, "t.srt", "s"), srt.Options()))) == 1


@settings(max_examples=400, deadline=None)
@given(st.lists(st.text(alphabet=st.sampled_from("ab ŋɛ-'’\u200d\u0301,.\n\tสวัส中Σς1"), max_size=14), max_size=6))
def test_words_of_several_texts_are_the_words_of_each_in_order(texts):
    from corpuskit.words import words_of
    assert words_of(texts, "th") == [w for t in texts for w in words(t, "th")]
