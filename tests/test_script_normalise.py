"""The normalise and script stages on constructed cases: each mapping, the reports, idempotence."""
import unicodedata

import pytest
from hypothesis import given, settings, strategies as st

from corpuskit import transliterate as translit
from corpuskit.errors import RecipeError
from corpuskit.stages.normalise import Params, invisible, normalise_text
from corpuskit.stages.script import apply as script_apply, repair_token, token_scripts

CYR_A, CYR_KA = "\N{CYRILLIC SMALL LETTER A}", "\N{CYRILLIC SMALL LETTER KA}"


def test_nfkc_on_request_reports_each_folded_character():
    text, steps = normalise_text("\N{LATIN SMALL LIGATURE FI}na \N{FULLWIDTH DIGIT TWO}", Params(form="NFKC"))
    assert text == "fina 2"
    assert "nfkc-folded:U+FB01x1 U+FF12x1" in steps


def test_nfc_is_the_default_and_keeps_compatibility_characters():
    text, _ = normalise_text("\N{LATIN SMALL LIGATURE FI}na ka\u0301", Params())
    assert text == "\N{LATIN SMALL LIGATURE FI}na k\N{LATIN SMALL LETTER A WITH ACUTE}"


@pytest.mark.parametrize("raw,expected", [
    ("ŋɔ\u200bbɛ", "ŋɔbɛ"),                        # zero-width space
    ("ka\u00adma", "kama"),                         # soft hyphen
    ("\ufeffkama", "kama"),                         # stray byte-order mark
    ("\u202bkama\u202c", "kama"),                   # bidi embedding and pop
    ("ka\x85ma\x07", "kama"),                       # C1 and C0 controls
    ("ka\u200dma", "kama"),                         # a joiner between Latin letters does nothing
    ("\u0915\u094d\u200d\u0937", "\u0915\u094d\u200d\u0937"),  # ... but is kept in Deva (ISO 15924)
    ("\U0001F469\u200d\U0001F33E", "\U0001F469\u200d\U0001F33E"),  # and inside an emoji sequence
])
def test_invisible_and_control_characters(raw, expected):
    assert invisible(raw) == expected


@pytest.mark.parametrize("choice,expected", [
    ("modifier", "ŋa\N{MODIFIER LETTER APOSTROPHE}ɔ"), ("ascii", "ŋa'ɔ"), ("keep", "ŋa\N{RIGHT SINGLE QUOTATION MARK}ɔ"),
])
def test_apostrophe_is_a_per_language_choice(choice, expected):
    assert normalise_text("ŋa\N{RIGHT SINGLE QUOTATION MARK}ɔ", Params(), choice)[0] == expected


def test_quotes_dashes_digits_and_spaces():
    text, _ = normalise_text("\u201cKama\u201d \u2010 \u0663\u0664  tabu\u00a0nɔ", Params(digits="ascii"))
    assert text == '"Kama" - 34 tabu nɔ'
    # native digits are kept by default
    assert normalise_text("\u0663\u0664 \u06f4\u06f5 \u0e54 \u09ea", Params())[0] == "\u0663\u0664 \u06f4\u06f5 \u0e54 \u09ea"


def test_persian_letter_variants():
    # Arabic yeh and kaf inside Persian text become the Persian letters when the recipe asks
    text, steps = normalise_text("\u0643\u062a\u0627\u0628 \u0639\u0644\u064a", Params(letter_variants="persian"))
    assert text == "\u06a9\u062a\u0627\u0628 \u0639\u0644\u06cc" and "letter-variants" in steps


def test_mojibake_is_repaired_and_named():
    # UTF-8 read as Windows-1252: the usual wrong code page (ftfy's own documentation example kind).
    text, steps = normalise_text("bɛlɛ kamɛ".encode("utf-8").decode("windows-1252"), Params())
    assert text == "bɛlɛ kamɛ" and any(s.startswith("mojibake") for s in steps)


def test_plausible_text_is_left_alone():
    assert normalise_text("Ŋɔ́ bɛlɛ, kamɛ tabu.", Params()) == ("Ŋɔ́ bɛlɛ, kamɛ tabu.", [])


@settings(max_examples=200, deadline=None)
@given(st.text(alphabet=st.characters(codec="utf-8"), max_size=40), st.sampled_from(["NFC", "NFKC"]))
def test_normalise_is_idempotent_in_both_forms(text, form):
    once, _ = normalise_text(text, Params(form=form), "modifier")
    assert normalise_text(once, Params(form=form), "modifier")[0] == once


# -- confusables -------------------------------------------------------------------------------

def test_cyrillic_letter_in_a_latin_word_prefers_the_orthographys_letter():
    # UTS #39 lists small ka only as LATIN SMALL LETTER KRA; its capital is listed as K.
    assert repair_token(f"{CYR_KA}ɛbo", "Latn", "abdegiklmnostuwyɛɔŋ") == ("kɛbo", False)
    assert repair_token(f"k{CYR_A}ma", "Latn") == ("kama", False)


def test_latin_letter_in_a_cyrillic_word_goes_the_other_way():
    word = "\N{CYRILLIC SMALL LETTER KA}a\N{CYRILLIC SMALL LETTER EM}\N{CYRILLIC SMALL LETTER A}"
    fixed, mixed = repair_token(word, "Latn")
    assert fixed == "\N{CYRILLIC SMALL LETTER KA}\N{CYRILLIC SMALL LETTER A}\N{CYRILLIC SMALL LETTER EM}\N{CYRILLIC SMALL LETTER A}"
    assert not mixed and set(token_scripts(fixed)) == {"Cyrl"}


def test_genuinely_mixed_token_is_reported_not_changed():
    word = "kam\N{CYRILLIC SMALL LETTER ZHE}a"  # zhe has no Latin look-alike
    assert repair_token(word, "Latn") == (word, True)
    doc = {"id": "s:1", "source": "s", "segments": [f"{word} tabu"], "seg_index": [0], "meta": "{}"}
    out, rows, _ = script_apply([doc], type("P", (), {"repair_confusables": True, "tables": {}})(), None)
    assert out[0]["segments"] == [f"{word} tabu"] and "mixed_script_tokens" in out[0]["meta"] and not rows


# -- transliteration tables --------------------------------------------------------------------

TABLE = """# corpuskit transliteration table 1
# name: test
# from: Cyrl
# to: Latn
# class V = аеиоу
нг	ŋ
е	je	^
е	je	after:V
е	e
и	i
а	a
н	n
г	g
к	k
ә	a
"""


def test_table_contexts_longest_match_and_case():
    t = translit.parse_table(TABLE)
    assert translit.apply_table(t, "ен ие не") == "jen ije ne"
    assert translit.apply_table(t, "нга Нга НГА") == "ŋa Ŋa ŊA"


def test_round_trip_flags_rules_that_cannot_be_read_back():
    t = translit.parse_table(TABLE)
    report = {(r["from"], r["to"]): r for r in translit.rule_report(t)}
    assert report[("ә", "a")]["reversible"] == "no"    # 'а' also gives 'a'
    assert report[("а", "a")]["reversible"] == "no"
    assert report[("нг", "ŋ")]["reversible"] == "yes"
    inverse = translit.inverse_table(t)
    assert translit.round_trips(inverse, "кина", translit.apply_table(t, "кина"))
    assert not translit.round_trips(inverse, "кәна", translit.apply_table(t, "кәна"))


def test_bad_table_line_names_the_line():
    with pytest.raises(RecipeError, match="line 5: expected 'from<TAB>to"):
        translit.parse_table("# corpuskit transliteration table 1\n# from: Cyrl\n# to: Latn\nа\ta\nб")


def test_transliteration_keeps_nfc():
    # The table maps letters, so a combining accent is left after a new base letter; the output must
    # be recomposed (a + U+0301 is the precomposed á in NFC: UnicodeData.txt decomposition of U+00E1).
    t = translit.parse_table(TABLE)
    out = translit.apply_table(t, "ка\u0301")
    assert unicodedata.is_normalized("NFC", out) and out == "k\u00e1"


def test_confusable_repair_only_into_words_of_the_orthography():
    from corpuskit.stages.script import repair_token
    letters = "abdeghiklmnostuwyɛɔŋ"
    # UTS #39: Cyrillic а (U+0430) looks like Latin a; 'kama' is written with the orthography's letters
    assert repair_token("k\u0430ma", "Latn", letters) == ("kama", False)
    # 'xap' would need x and p, which the orthography does not have: reported as mixed, not rewritten
    assert repair_token("x\u0430p", "Latn", letters) == ("x\u0430p", True)
    # no orthography given: the look-alike is written
    assert repair_token("x\u0430p", "Latn", "") == ("xap", False)


@settings(max_examples=2000, deadline=None)
@given(st.text(alphabet=st.characters(max_codepoint=127), max_size=40))
def test_ascii_text_is_never_mojibake_for_ftfy(text):
    # normalise skips ftfy on ASCII text; ftfy's own badness test (ftfy.badness.is_bad, the
    # reference) must agree that such text never looks like mojibake.
    from ftfy.badness import is_bad
    from corpuskit.stages.normalise import mojibake
    assert not is_bad(text) and mojibake(text) == (text, "")


def _characters_without_mojibake_marks() -> list[str]:
    from corpuskit.stages.normalise import mojibake_marks
    marks = mojibake_marks()
    # Where mojibake lives: Latin-1 and Latin Extended, Greek, Cyrillic, Arabic, general
    # punctuation, currency, letterlike and box-drawing blocks, and ASCII (ftfy's categories).
    return [chr(c) for c in range(0x2600) if not 0xD800 <= c <= 0xDFFF and chr(c) not in marks]


_NO_MARKS = _characters_without_mojibake_marks()


@settings(max_examples=3000, deadline=None)
@given(st.text(alphabet=st.sampled_from(_NO_MARKS), max_size=30))
def test_text_without_a_mojibake_mark_is_never_bad_for_ftfy(text):
    # normalise skips ftfy's badness test on text holding none of the characters each of its
    # patterns needs (worked out from ftfy.badness.BADNESS_RE); ftfy's own test is the reference.
    from ftfy.badness import is_bad
    from corpuskit.stages.normalise import mojibake
    assert not is_bad(text) and mojibake(text) == (text, "")


def test_mojibake_marks_are_the_characters_mojibake_is_made_of():
    # UTF-8 read as Windows-1252 or Latin-1 yields Ã, Â, â, C1 controls (from memory: the usual
    # signs, and what ftfy's pattern lists); letters of the demo orthography are not among them.
    from corpuskit.stages.normalise import mojibake, mojibake_marks
    marks = mojibake_marks()
    assert marks is not None and {"Ã", "Â", "\x80", "\x9f"} <= marks and not {"ɛ", "ɔ", "ŋ", "a"} & marks
    assert mojibake("bÃ©lÃ© kamÃ©")[0] == "bélé kamé"


# Letters of several scripts, Common and Inherited characters (one of them, U+0342 and U+0363,
# used by one script alone per Script_Extensions in the Unicode Character Database), an unassigned
# code point, a lone surrogate and the modifier letter apostrophe.
_SCRIPT_MIX = "aé ŋɛкаαΜ\u0301\u0342\u03631,ب،\u200d\u0378ʼ中\ud800.-"


@settings(max_examples=500, deadline=None)
@given(st.lists(st.text(alphabet=st.sampled_from(_SCRIPT_MIX), max_size=10), max_size=8))
def test_scripts_worked_out_column_wise_are_the_per_token_rules_answer(texts):
    from corpuskit.stages.script import _scripts_in, plain_scripts, text_script
    for text, found in zip(texts, plain_scripts(texts), strict=True):
        if found is not None:
            assert _scripts_in(text) <= 1 and found == text_script(text), text


def test_plain_text_of_one_script_is_decided_column_wise():
    from corpuskit.stages.script import plain_scripts
    assert plain_scripts(["ŋɔ kamɛ́!", "123 ...", "кама", "", "kaкa", "a\u0363b"]) == \
        ["Latn", "Zyyy", "Cyrl", None, None, None]


# Characters each later step of normalisation changes, some it keeps, and the combining acute that
# NFC composes with e (UAX #15) and keeps after ɛ, which has no precomposed form with it.
_NORMALISE_MIX = "aeɛ ŋ\u0301\u00e9\t\u00a0\u200b\u200d\u0007\n“’'ʼ\u2011\u2212۴4ﬁ²يكك中\ud800-"
_NEARLY_PLAIN = "aeɛ ŋ\u0301'’4"    # mostly characters no step changes: the cases that decide


@settings(max_examples=400, deadline=None)
@given(st.lists(st.one_of(st.text(alphabet=st.sampled_from(_NORMALISE_MIX), max_size=10),
                          st.text(alphabet=st.sampled_from(_NEARLY_PLAIN), max_size=10)), max_size=6),
       st.sampled_from([Params(), Params(form="NFKC", quotes="keep", dashes="keep", digits="ascii", letter_variants="persian")]),
       st.sampled_from(["keep", "modifier"]))
def test_text_found_untouched_column_wise_is_what_normalising_returns_unchanged(texts, params, apostrophe):
    from corpuskit.stages.normalise import mojibake, untouched
    for text, quiet in zip(texts, untouched(texts, params, apostrophe), strict=True):
        if quiet and mojibake(text)[0] == text:
            assert normalise_text(text, params, apostrophe) == (text, []), text


def test_most_plain_text_is_found_untouched():
    from corpuskit.stages.normalise import untouched
    assert untouched(["ŋɔ kamɛ́ sugagu.", "two  spaces", " lead", "a\u00a0b", "e\u0301", "“q”", ""], Params()) == \
        [True, False, False, False, False, False, True]
