"""Real-world bytes and recipes: each case found from outside goes through a whole run (or through
``check``, for recipe mistakes) and ends with the right text, ledger rows and a message, never a crash."""
import csv
import gzip
import json
import os
import tracemalloc

import numpy as np
import pytest
from typer.testing import CliRunner

from corpuskit import minhash
from corpuskit.api import load_corpus, load_ledger, run
from corpuskit.cli import app
from corpuskit.errors import RecipeError
from corpuskit.readers.decode import TextFile
from corpuskit.recipe import load_recipe
from corpuskit.stages import dedup

from .conftest import ROOT

SEEDS = ROOT / "sample_texts" / "seeds"
# Distinct lines of the invented demo language (long enough to pass the filter, unlike one another).
LINES = [line for line in (SEEDS / "qnv-hill.txt").read_text("utf-8").splitlines() if len(line) > 30][:8]


def make_recipe(tmp_path, files: dict, fmt="text", options=None, source_extra="", corpus_extra="", stages="",
                path="in/*"):
    """A one-source recipe over ``files`` (name -> bytes or str) with the demo's seeds."""
    for name, data in files.items():
        p = tmp_path / "in" / name
        p.parent.mkdir(parents=True, exist_ok=True)
        p.write_bytes(data if isinstance(data, bytes) else data.encode("utf-8"))
    opts = "".join(f"\n{k} = {json.dumps(v)}" for k, v in (options or {}).items())
    recipe = tmp_path / "r.toml"
    recipe.write_text(f"""
[corpus]
name = "real-input"
language = "qnv"
allow_outside_paths = true
{corpus_extra}

[[sources]]
id = "src"
path = "{path}"
format = "{fmt}"
medium = "web"
licence = "CC0-1.0"
consent = "redistribution"
{source_extra}
[sources.options]{opts}

[stages.langid]
seeds = {{ qnv = "{SEEDS / 'qnv-hill.txt'}", qtm = "{SEEDS / 'qtm.txt'}", other = "{SEEDS / 'other.txt'}" }}
folds = 2
{stages}
""", "utf-8")
    return recipe


def whole_run(tmp_path, *args, **kw):
    result = run(make_recipe(tmp_path, *args, **kw), tmp_path / "out", workers=1)
    assert result.conservation["documents"]["holds"] and result.conservation["segments"]["holds"]
    return result


def reasons(result) -> set:
    ledger = load_ledger(result.out)
    return set(ledger.reason) if len(ledger) else set()


def texts(result):
    return [seg for segs in load_corpus(result.out)["segments"] for seg in segs]


# -- line breaks (the Unicode Standard, section 5.8: CR, LF, CRLF and NEL end a line) ---------------

def test_lone_cr_crlf_lf_and_nel_each_end_a_line(tmp_path):
    data = (LINES[0] + "\r\n" + LINES[1] + "\r" + LINES[2] + "\n" + LINES[3] + "\x85" + LINES[4] + "\r").encode()
    result = whole_run(tmp_path, {"mixed.txt": data}, options={"unit": "line"})
    assert sorted(texts(result)) == sorted(LINES[:5])
    assert result.stage("ingest").counts.docs_in == 5


def test_crlf_split_between_read_chunks_is_one_break(tmp_path, monkeypatch):
    from corpuskit.readers import decode as _decode
    monkeypatch.setattr(_decode, "CHUNK_BYTES", 7)
    p = tmp_path / "a.txt"
    p.write_bytes("\r\n".join(LINES[:3]).encode())
    assert [t for _, t in TextFile(p, "a.txt", "s").lines()] == LINES[:3]


def test_line_and_paragraph_separators_stay_in_the_text(tmp_path):
    result = whole_run(tmp_path, {"ls.txt": f"{LINES[0]}\u2028{LINES[1]}\n{LINES[2]}\u2029{LINES[3]}\n"},
                       options={"unit": "line"})
    got = texts(result)
    assert f"{LINES[0]}\u2028{LINES[1]}" in got and len(got) == 2
    with gzip.open(result.out / "corpus" / "corpus-00000.jsonl.gz", "rb") as f:
        assert len(f.read().split(b"\n")) == 3   # two records, one JSON line each


# -- bytes ---------------------------------------------------------------------------------------

def test_lone_surrogate_escapes_in_json_lines(tmp_path):
    data = json.dumps({"id": "a", "text": LINES[0]}) + "\n" + '{"id": "b", "text": "' + LINES[1][:-1] + ' \\ud800."}\n'
    result = whole_run(tmp_path, {"s.jsonl": data}, fmt="jsonl")
    assert f"{LINES[1][:-1]} \ufffd." in texts(result)
    assert "lone-surrogates" in set(load_ledger(result.out).reason)


def test_symlink_loops_and_dangling_links(tmp_path):
    files = {"a/one.txt": LINES[0] + "\n", "a/b/two.txt": LINES[1] + "\n"}
    recipe = make_recipe(tmp_path, files, path="in/**/*.txt")
    os.symlink("..", tmp_path / "in" / "a" / "b" / "loop")
    os.symlink("nowhere.txt", tmp_path / "in" / "a" / "dangling.txt")
    os.symlink("self.txt", tmp_path / "in" / "a" / "self.txt")
    result = run(recipe, tmp_path / "out", workers=1)
    assert sorted(texts(result)) == sorted(LINES[:2])            # each real file once
    assert result.stage("ingest").counts.docs_in == 2
    assert sum("leads to no file" in w for w in result.warnings) == 2


def test_a_long_line_is_cut_with_a_row_and_a_long_document_hashed_in_windows(tmp_path, monkeypatch):
    from corpuskit.readers import decode as _decode
    monkeypatch.setattr(_decode, "MAX_LINE_BYTES", 1 << 16)
    monkeypatch.setattr(minhash, "LONG_TEXT", 1 << 14)
    line = " ".join(LINES * 2000)                              # about 580 KB on one line
    result = whole_run(tmp_path, {"long.txt": line + "\n" + LINES[5] + "\n"}, options={"unit": "file"},
                       stages="[stages.filter]\nmax_chars = 10000000\nmax_repeated_lines = 1.0")
    ledger = load_ledger(result.out)
    assert "long-line-cut" in set(ledger.reason)
    assert "".join(texts(result)).count(LINES[0]) >= 1998   # every piece kept (a cut may split one)


def test_memory_of_signatures_for_one_huge_document_is_bounded():
    text = " ".join(LINES) * 40000                             # about 11 MB of text
    tracemalloc.start()
    hashes = minhash.shingles_of_texts([text], 5, "char")
    a, b = minhash.permutations(128)
    sig = minhash.batch_signatures(hashes, a, b)
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    assert peak < 400 << 20, peak          # the whole-text way needed several GB for 50 MB
    assert np.array_equal(sig[0], minhash.signature(np.unique(hashes[0]), a, b))


# -- readers ---------------------------------------------------------------------------------------

def test_srt_cues_with_text_ids_or_none(tmp_path):
    srt = ("cueid-intro\n00:00:01,000 --> 00:00:02,000\n" + LINES[0] + "\n\n"
           "00:00:03,000 --> 00:00:04,000\n" + LINES[1] + "\n\n"
           "7\n00:00:05,000 --> 00:00:06,000\n" + LINES[2] + "\n")
    result = whole_run(tmp_path, {"t.srt": srt}, fmt="srt", stages="[stages.clean]\njoin_lines = false")
    assert len(texts(result)) == 3 and "broken-cue-timing" not in reasons(result)


def test_semicolon_separated_sheet_is_read_with_a_warning(tmp_path):
    sheet = "id;text\n" + "".join(f"r{i};{line}\n" for i, line in enumerate(LINES))
    result = whole_run(tmp_path, {"s.csv": sheet}, fmt="csv", options={"text_column": "text", "id_column": "id"})
    assert sorted(texts(result)) == sorted(LINES)
    assert any("separated by ';'" in w for w in result.warnings)


def test_whitespace_only_lines_get_rows(tmp_path):
    data = f"{LINES[0]}\n   \n\u00a0\t\n{LINES[1]}\n\n".encode()
    result = whole_run(tmp_path, {"w.txt": data}, options={"unit": "line"})
    rows = load_ledger(result.out)
    assert (rows.reason == "whitespace-only").sum() == 2            # the empty line is no line of text
    assert sorted(texts(result)) == sorted(LINES[:2])


def test_a_space_carrying_a_combining_mark_is_kept():
    from corpuskit.stages.normalise import Params, normalise_text
    text, _ = normalise_text("ba \u00a0\u0301 kɛ", Params())
    assert text == "ba \u00a0\u0301 kɛ" and normalise_text(text, Params())[0] == text


# -- encodings: real words from wordfreq written in legacy code pages ------------------------------

CODE_PAGES = {"cp1250": "cs", "cp1251": "ru", "cp1252": "fr", "cp1253": "el", "cp1254": "tr", "cp1255": "he",
              "cp1256": "ar", "koi8_r": "ru", "koi8_u": "uk", "iso8859_2": "pl", "iso8859_5": "ru", "iso8859_7": "el",
              "iso8859_9": "tr", "iso8859_15": "fr", "mac_roman": "de", "shift_jis": "ja", "gb18030": "zh",
              "utf_16_le": "ru", "utf_16_be": "de"}


@pytest.mark.external
def test_encoding_detection_per_code_page(tmp_path):
    """Source: the word lists of wordfreq (real word frequencies of each language), 20 files of about
    2-5 KB per code page, each decoded by detection and compared with the original text."""
    import random
    from wordfreq import top_n_list
    rng = random.Random(1)
    scores = {}
    for enc, lang in CODE_PAGES.items():
        words, ok = top_n_list(lang, 2000), 0
        for trial in range(20):
            text = "\n".join(" ".join(rng.choices(words, k=rng.randint(5, 12))) for _ in range(45))
            data = text.encode(enc, errors="ignore")
            p = tmp_path / f"{enc}.txt"
            p.write_bytes(data)
            got = "\n".join(t for _, t in TextFile(p, p.name, "s", "detect").lines())
            ok += got == data.decode(enc).rstrip("\n")
        scores[enc] = ok / 20
    print("encoding detection accuracy per code page:", scores)
    assert min(scores.values()) >= 0.95, scores


def test_cp1251_detected_and_latin1_declared_utf8_warned(tmp_path):
    cyr = "Кема табу гоно бавусе нолу кема табу\n" * 40
    from wordfreq import top_n_list
    french = "\n".join(" ".join(top_n_list("fr", 400)[i:i + 9]) for i in range(0, 400, 9))
    result = whole_run(tmp_path, {"cyr.txt": cyr.encode("cp1251"), "lat.txt": french.encode("latin-1")},
                       source_extra='encoding = "detect"', options={"unit": "line"})
    detected = load_ledger(result.out).query("reason == 'encoding-detected'").detail.tolist()
    assert any("cyr.txt: encoding cp1251" in d for d in detected)
    assert not any("\ufffd" in r for r in load_ledger(result.out).text.dropna())
    p = tmp_path / "in" / "lat.txt"
    tf = TextFile(p, "lat.txt", "s")                 # declared UTF-8 (the default), really Latin-1
    lines = [t for _, t in tf.lines()]
    assert "\ufffd" not in "".join(lines) and "\n".join(lines) == french
    assert any("mostly not UTF-8" in w for w in tf.warnings)


# -- spreadsheet cells in every CSV the run writes ----------------------------------------------------

def test_every_report_cell_is_safe_to_open(tmp_path):
    lines = LINES + ["=HYPERLINK(\"http://x\") ok", "+1+2+3 kema", "-kema tabu nolu", "@SUM(A1) x"]
    result = whole_run(tmp_path, {"p.txt": "\n".join(lines) + "\n"}, options={"unit": "line"})
    cells = 0
    for path in list((result.out / "reports").glob("*.csv")) + list((result.out / "private").glob("*.csv")):
        with open(path, encoding="utf-8", newline="") as f:
            for row in csv.reader(f):
                for cell in row:
                    cells += 1
                    assert not (cell[:1] in "=+@\t\r" and cell) and not (cell.startswith("-") and not _number(cell)), (path.name, cell)
    assert cells > 100


def _number(cell: str) -> bool:
    try:
        float(cell)
        return True
    except ValueError:
        return False


# -- recipe values check accepts and a run would fail on ------------------------------------------------

def test_min_chars_zero_and_a_segment_of_placeholders_only(tmp_path):
    result = whole_run(tmp_path, {"p.txt": f"{LINES[0]}\n+254 712 345 678\n"}, options={"unit": "line"},
                       stages="[stages.filter]\nmin_chars = 0")
    assert texts(result) == [LINES[0]]
    assert "no-text" in set(load_ledger(result.out).reason)


@pytest.mark.parametrize("table, key", [("[stages.filter]\nmax_char_repeat = 100000000", "max_char_repeat"),
                                        ("[stages.langid]\nmin_letters = 100000", "min_letters"),
                                        ("[stages.export]\nvocab_size = 100000000", "vocab_size")])
def test_sizes_counts_and_repeats_are_bounded(tmp_path, table, key):
    recipe = make_recipe(tmp_path, {"a.txt": LINES[0]})
    text = recipe.read_text().replace("[stages.langid]", table + "\n\n[stages.langid]", 1) if "langid" not in table \
        else recipe.read_text().replace("folds = 2", "folds = 2\n" + table.split("\n")[1])
    recipe.write_text(text)
    with pytest.raises(RecipeError, match=f"key '{key}' = .* is out of range"):
        load_recipe(recipe)


def test_parameter_objects_built_in_python_are_checked():
    from corpuskit.stages.export import Params as ExportParams
    from corpuskit.stages.qualityfilter import Params as FilterParams
    with pytest.raises(ValueError, match="key 'threshold' = 5 is out of range"):
        dedup.Params(threshold=5)
    with pytest.raises(ValueError, match="key 'max_char_repeat'"):
        FilterParams(max_char_repeat=10**8)
    with pytest.raises(ValueError, match="key 'model_type' = 'word' is not allowed"):
        ExportParams(model_type="word")


def test_dedup_threshold_near_one_runs(tmp_path):
    result = whole_run(tmp_path, {"a.txt": "\n".join(LINES + LINES[:2]) + "\n"}, options={"unit": "line"},
                       stages="[stages.dedup]\nthreshold = 0.995")
    assert result.stage("dedup").counts.docs_out == len(LINES)


def test_vocabulary_smaller_than_the_alphabet_is_raised_with_a_warning(tmp_path):
    seeds = [(SEEDS / f"qnv-{d}.txt").read_text("utf-8") for d in ("hill", "river", "coast")]
    digits = "".join(f"Late {i} bu {i + 1} yukɛ {i + 2} woŋiní {i + 3} sekɛ {i + 4} lɛ {i + 5} late {i + 6} "
                     f"gedage {i + 7} bu {i + 8} yilɔ {i + 9} kati mɛ {'ŋɔ' * i}.\n" for i in range(40))
    result = whole_run(tmp_path, {"a.txt": "".join(seeds) + digits}, options={"unit": "line"},
                       stages="[stages.export]\nvocab_size = 50")
    summary = json.loads((result.out / "tokenizer" / "summary.json").read_text())
    assert summary["vocab_used"] > 50 and any("tokenizer: vocabulary" in w for w in result.warnings)


RECIPE_MISTAKES = [
    ("misspelt option", lambda t: t.replace("[sources.options]", "[sources.options]\nunti = \"line\""),
     r"options has unknown key 'unti'; did you mean 'unit'"),
    ("missing seed file", lambda t: t.replace("qtm.txt", "qtm-missing.txt"), r"seeds.qtm = .*no such file"),
    ("seed labels without the language", lambda t: t.replace("qnv = ", "qxx = "), r"no label for the target language 'qnv'"),
    ("too few seed lines", lambda t: t, r"seeds.tiny has 3 lines"),
    ("missing transliteration table", lambda t: t + '\n[stages.script]\ntables = { Cyrl = "none.tsv" }\n',
     r"tables.Cyrl = 'none.tsv': no such file"),
    ("missing variant table", lambda t: t + '\n[stages.variants]\ntable = "none.tsv"\n', r"\[stages.variants\] table = 'none.tsv': no such file"),
    ("unknown encoding", lambda t: t.replace('consent = "redistribution"', 'consent = "redistribution"\nencoding = "latin-9x"'),
     r"key 'encoding' = 'latin-9x' is not an encoding"),
]


@pytest.mark.parametrize("name, change, message", RECIPE_MISTAKES, ids=[m[0] for m in RECIPE_MISTAKES])
def test_check_catches_what_run_would_fail_on(tmp_path, name, change, message):
    recipe = make_recipe(tmp_path, {"a.txt": LINES[0]})
    text = change(recipe.read_text())
    if name == "too few seed lines":
        (tmp_path / "tiny.txt").write_text("a\nb\nc\n")
        text = text.replace("qtm = ", f'tiny = "{tmp_path / "tiny.txt"}", qtm = ')
    recipe.write_text(text)
    result = CliRunner().invoke(app, ["check", str(recipe)])
    assert result.exit_code == 2, result.output
    assert "Traceback" not in result.output
    import re
    assert re.search(message, " ".join(result.output.split())), result.output
    with pytest.raises(RecipeError, match=message):     # and a run stops before any stage
        run(recipe, tmp_path / "out", workers=1)
    assert not (tmp_path / "out" / ".cache" / "ingest").exists()


# -- trouble reaches the terminal --------------------------------------------------------------------

def test_trouble_in_files_is_summarised_on_the_terminal(tmp_path):
    whole = gzip.compress((LINES[0] + "\n").encode() * 200)
    files = {"cut.txt.gz": whole[: len(whole) // 2], "plain.txt.gz": (LINES[1] + "\n").encode(),
             "ok.txt": LINES[2] + "\n"}
    result = whole_run(tmp_path, files, options={"unit": "line"})
    joined = "\n".join(result.warnings)
    assert "ingest: truncated-gzip x1 (first: in/cut.txt.gz" in joined
    assert "ingest: not-gzip x1 (first: in/plain.txt.gz" in joined
    assert LINES[1] in texts(result)          # a plain file named .gz is read as it is
    cli = CliRunner().invoke(app, ["run", str(tmp_path / "r.toml"), "--out", str(tmp_path / "out"), "--no-progress"])
    assert cli.exit_code == 0 and "Warnings (" in cli.output and "truncated-gzip" in cli.output
