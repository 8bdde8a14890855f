"""The balance page renders, the datasheet has every section, the tokenizer copes with tiny
corpora, and restricted sources stay out of the public files."""
import gzip
import json
import re
import shutil
import subprocess

import pytest
from hypothesis import given, strategies as st

from corpuskit.recipe import CONSENT_SCOPES, SourceSpec, build
from corpuskit.stages.export import destination
from corpuskit.tokenizer import train_tokenizer

CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")


@pytest.mark.skipif(CHROMIUM is None, reason="Debian's chromium is not installed (tests/system-setup.sh installs it)")
def test_balance_page_renders_in_headless_chromium(demo_run, tmp_path):
    import matplotlib.image as mpimg
    shot = tmp_path / "balance.png"
    proc = subprocess.run([CHROMIUM, "--headless=new", "--no-sandbox", "--disable-gpu", "--hide-scrollbars",
                           "--window-size=1280,4800", f"--screenshot={shot}", (demo_run.out / "reports" / "balance.html").as_uri()],
                          capture_output=True, timeout=120)
    assert shot.exists(), proc.stderr.decode()[-500:]
    pixels = mpimg.imread(shot)
    assert pixels.shape[:2] == (4800, 1280)
    ink = (pixels[..., :3].mean(axis=2) < 0.9).mean(axis=1)   # share of non-white pixels per row
    assert (ink > 0.01).mean() > 0.3          # text and tables over much of the page
    coloured = (abs(pixels[..., 0] - pixels[..., 2]) > 0.2).sum()
    assert coloured > 5000                    # the plots' coloured bars and lines were drawn


def test_balance_page_is_self_contained(demo_run):
    page = (demo_run.out / "reports" / "balance.html").read_text("utf-8")
    assert not re.search(r"""(?:src|href)\s*=\s*["']?(?:https?:)?//""", page)
    images = re.findall(r"""<img[^>]+src=["']([^"']+)""", page)
    assert len(images) >= 4 and all(src.startswith("data:image/png;base64,") for src in images)
    for heading in ("entropy", "effective", "Heaps", "Jaccard", "Temperature sampling"):
        assert heading.lower() in page.lower(), heading


# Datasheets for Datasets (Gebru et al., 2021, CACM 64(12)) section titles, and the data-statement
# schema of Bender and Friedman (2018, TACL 6) fields this project asks for.
DATASHEET_SECTIONS = ["Motivation", "Composition", "Collection process", "Preprocessing / cleaning / labelling", "Uses",
                      "Distribution", "Maintenance"]
DATA_STATEMENT_FIELDS = ["Language variety", "Speakers", "Speech situation", "Text characteristics", "Transcription"]


def test_datasheet_has_every_section_and_measured_fact(demo_run):
    text = (demo_run.out / "datasheet.md").read_text("utf-8")
    for title in DATASHEET_SECTIONS:
        assert f"\n## {title}\n" in text, title
    for field in DATA_STATEMENT_FIELDS:
        assert f"**{field}.**" in text, field
    assert "qnv" in text and "Conservation check" in text and "Tokenizer: SentencePiece" in text
    assert "restricted" in text and "consent" in text.lower() and "privacy" in text.lower()
    assert "Not answered yet" not in text     # the demo answers every question


def test_check_lists_unanswered_questions(tmp_path):
    from corpuskit.reports.datasheet import unanswered
    open_questions = unanswered({"motivation": {"purpose": "x", "creators": ""}})
    assert "motivation.creators" in open_questions and "motivation.purpose" not in open_questions


@pytest.mark.parametrize("lines", [["ŋa bɛ"], ["kema tabu sɛli"] * 3, ["a"]])
def test_tokenizer_trains_on_a_tiny_corpus(lines):
    model, used = train_tokenizer(lines, 8000, "unigram", "abdegiklmnostuwyɛɔŋ")
    assert model and 0 < used < 8000
    import sentencepiece as spm
    sp = spm.SentencePieceProcessor(model_proto=model)
    assert "".join(sp.encode(lines[0], out_type=str)).replace("\u2581", " ").strip() == lines[0]


def test_tokenizer_bpe_on_request():
    model, used = train_tokenizer(["kema tabu sɛli ŋa bɛ"] * 20, 60, "bpe", "")
    assert model and used <= 60


def test_dialect_fertility_report(demo_run):
    rows = (demo_run.out / "tokenizer" / "dialects.csv").read_text("utf-8").splitlines()
    assert rows[0].split(",")[:6] == ["dialect", "lines", "words", "pieces", "fertility", "unknown_rate"]
    assert {r.split(",")[0] for r in rows[1:]} == {"hill", "river", "coast"}


# -- restricted sources ------------------------------------------------------------------------

@given(st.lists(st.tuples(st.sampled_from(sorted(CONSENT_SCOPES)),
                          st.sampled_from(["CC0-1.0", "CC-BY-4.0", "LicenseRef-restricted-elders", "LicenseRef-x"])),
                min_size=1, max_size=12),
       st.sampled_from(["separate", "exclude"]))
def test_restricted_sources_never_reach_public_files(sources, policy):
    for i, (consent, licence) in enumerate(sources):
        spec = build(SourceSpec, {"id": f"s{i}", "path": "x.txt", "format": "text", "medium": "web",
                                  "licence": licence, "consent": consent}, "[[sources]]", "r.toml")
        doc = {"redistributable": bool(spec.redistributable)}
        where = destination(doc, policy)
        allowed = consent == "redistribution" and not licence.startswith("LicenseRef-restricted")
        assert (where == "public") == allowed
        assert where != "restricted" or policy == "separate"


def test_demo_restricted_source_only_in_restricted_folder(demo_run):
    public_text = "".join(gzip.decompress(p.read_bytes()).decode() for p in (demo_run.out / "corpus").glob("*.gz"))
    public_text += "".join(gzip.decompress(p.read_bytes()).decode() for p in (demo_run.out / "splits").glob("*.gz"))
    restricted = [json.loads(line) for p in (demo_run.out / "restricted").glob("*.gz")
                  for line in gzip.decompress(p.read_bytes()).decode().splitlines()]
    assert restricted and {d["source"] for d in restricted} == {"group-chat"}
    assert '"group-chat"' not in public_text
    assert not any(d["segments"][0] in public_text for d in restricted if len(d["segments"][0]) > 30)
