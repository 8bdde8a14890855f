"""Hostile input: every case gives a clear message or ledger rows, never a crash, never a lost line.

The inputs are made here, in temporary folders (nothing large is committed): byte-level cases
through the shared decoder and the readers, the same files through a whole run, then recipes,
review sheets, a full disk and reader fuzzing.
"""
import codecs
import errno
import gzip
import json
import os
import tracemalloc
import types
import zlib

import pytest
from hypothesis import given, settings, strategies as st

from corpuskit import storage
from corpuskit.api import load_ledger, run
from corpuskit.errors import CorpusError, DataError, RecipeError
from corpuskit.readers import READERS
from corpuskit.readers import decode as _decode
from corpuskit.readers.decode import TextFile, split_lines
from corpuskit.recipe import SourceSpec, build, load_recipe
from corpuskit.stages import ingest
from corpuskit.variants_table import neutralise_cell

from .conftest import ROOT

NARE = "Kema yɔgí bé yɔŋé ti bavusɛ gonó."


def lines_of(tmp_path, name: str, data: bytes, encoding: str = "utf-8"):
    p = tmp_path / name
    p.write_bytes(data)
    tf = TextFile(p, name, "s", encoding)
    return list(tf.lines()), tf


# -- byte-level cases, read through the shared decoder ----------------------------------------

def test_invalid_utf8_names_line_and_byte_offset(tmp_path):
    lines, tf = lines_of(tmp_path, "a.txt", b"good line\nbad \xff\xfe here\nlast\n")
    assert [t for _, t in lines] == ["good line", "bad \ufffd\ufffd here", "last"]
    assert [(r.reason, r.seg_index) for r in tf.issues] == [("undecodable-bytes", 2)]
    assert "line 2 byte offset 14" in tf.issues[0].detail


def test_mixed_encodings_in_one_file_keep_every_line(tmp_path):
    data = NARE.encode("utf-8") + b"\n" + "caf\u00e9 cr\u00e8me".encode("cp1252") + b"\n" + NARE.encode("utf-8") + b"\n"
    lines, tf = lines_of(tmp_path, "a.txt", data)
    assert len(lines) == 3 and lines[0][1] == NARE == lines[2][1]
    assert [r.seg_index for r in tf.issues] == [2]


@pytest.mark.parametrize("bom", [True, False])
@pytest.mark.parametrize("codec", ["utf-16-le", "utf-16-be"])
def test_utf16_with_and_without_bom(tmp_path, codec, bom):
    data = (codecs.BOM_UTF16_LE if codec.endswith("le") else codecs.BOM_UTF16_BE) if bom else b""
    data += f"{NARE}\r\nsecond line\r\n".encode(codec)
    lines, tf = lines_of(tmp_path, "a.txt", data)
    assert [t for _, t in lines if t] == [NARE, "second line"] and not tf.issues


def test_nul_bytes_are_removed_with_a_row(tmp_path):
    lines, tf = lines_of(tmp_path, "a.txt", b"ke\x00ma tabu\nfine\n")
    assert [t for _, t in lines] == ["kema tabu", "fine"] and tf.issues[0].reason == "nul-bytes"


def test_binary_file_with_a_text_extension_is_skipped_with_a_row(tmp_path):
    lines, tf = lines_of(tmp_path, "photo.txt", bytes(range(256)) * 64)
    assert lines == [] and tf.issues[0].reason == "binary-file" and tf.warnings


def test_empty_file(tmp_path):
    lines, tf = lines_of(tmp_path, "empty.txt", b"")
    assert lines == [] and not tf.issues


def test_truncated_gzip_keeps_what_was_readable(tmp_path):
    whole = gzip.compress(("\n".join(f"line {i} {NARE}" for i in range(2000)) + "\n").encode())
    lines, tf = lines_of(tmp_path, "a.txt.gz", whole[: len(whole) // 2])
    assert 0 < len(lines) < 2000 and tf.issues[0].reason == "truncated-gzip"
    assert all(t.startswith("line ") for _, t in lines[:-1])


def test_gzip_with_an_absurd_expansion_ratio_is_refused(tmp_path):
    bomb = zlib.compressobj(9, zlib.DEFLATED, 16 + zlib.MAX_WBITS)
    data = bomb.compress(b"\0" * (80 << 20)) + bomb.flush()   # 80 MB of zeros in about 80 KB
    lines, tf = lines_of(tmp_path, "bomb.txt.gz", data)
    assert lines == [] and tf.issues[0].reason == "gzip-expansion-limit" and "200x" in tf.issues[0].detail


def test_a_single_50_mb_line(tmp_path):
    line = ("kema tabu " * (5 << 20)).encode()
    lines, tf = lines_of(tmp_path, "long.txt", line + b"\nafter\n")
    assert [n for n, _ in lines] == [1] * 13 + [2]                # 4 MB pieces of line 1, then line 2
    assert "".join(t for n, t in lines if n == 1) == line.decode() and lines[-1] == (2, "after")
    assert [(r.reason, r.seg_index) for r in tf.issues] == [("long-line-cut", 1)]


@settings(max_examples=200, deadline=None)
@given(st.binary(max_size=300).map(lambda b: b.replace(b"\x00", b"\n")), st.lists(st.integers(1, 40), max_size=20))
def test_split_lines_in_any_chunking_equals_one_split(data, cuts):
    # Reference: Python's bytes.split over the whole data, a final empty piece dropped (as a
    # file ending in a line break has no line after it).
    expected = data.split(b"\n")
    if expected[-1] == b"":
        expected.pop()
    chunks, at = [], 0
    for size in cuts:
        chunks.append(data[at:at + size])
        at += size
    chunks.append(data[at:])
    pieces = [(start, line) for start, line, _ in split_lines(chunks, b"\n", 1 << 20)]
    assert [line for _, line in pieces] == expected
    assert all(data[start:start + len(line)] == line for start, line in pieces)


def test_reading_in_small_chunks_changes_nothing(tmp_path, monkeypatch):
    data = ("Kema yɔgí\r\n".encode() + b"bad \xff here\n" + NARE.encode() * 20 + b"\nlast").replace(b"\n", b"\n" * 2)
    whole, tf_whole = lines_of(tmp_path, "a.txt", data)
    monkeypatch.setattr(_decode, "CHUNK_BYTES", 3)
    small, tf_small = lines_of(tmp_path, "a.txt", data)
    assert small == whole and [r.detail for r in tf_small.issues] == [r.detail for r in tf_whole.issues]
    assert whole[0] == (1, "Kema yɔgí") and whole[-1] == (7, "last")


def test_reading_a_large_file_holds_one_chunk_not_the_file(tmp_path):
    p = tmp_path / "big.txt"
    p.write_bytes((NARE * 250 + "\n").encode() * 1600)          # 16 MB
    tracemalloc.start()
    try:
        n = sum(1 for _ in TextFile(p, "big.txt", "s").lines())
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    assert n == 1600 and peak < 6 << 20   # the file itself is 16 MB


def test_a_gzip_file_of_several_members_is_read_whole(tmp_path):
    # RFC 1952 section 2.2: a gzip file is a series of members; Python's gzip module reads them all.
    data = gzip.compress(f"{NARE}\n".encode()) + gzip.compress(b"second\nthird\n")
    lines, tf = lines_of(tmp_path, "m.txt.gz", data)
    assert [t for _, t in lines] == gzip.decompress(data).decode().splitlines() == [NARE, "second", "third"]
    assert not tf.issues


def test_a_line_longer_than_the_limit_is_read_in_pieces_with_a_row(tmp_path, monkeypatch):
    monkeypatch.setattr(_decode, "MAX_LINE_BYTES", 10)
    monkeypatch.setattr(_decode, "CHUNK_BYTES", 4)
    lines, tf = lines_of(tmp_path, "a.txt", "short\nɔɔɔɔɔɔɔɔɔɔɔɔ\nend\n".encode())
    assert [n for n, _ in lines] == [1, 2, 2, 2, 3]
    assert "".join(t for n, t in lines if n == 2) == "ɔ" * 12   # cut between characters, nothing lost
    assert [(r.reason, r.seg_index) for r in tf.issues] == [("long-line-cut", 2)]


def test_ingest_yields_partitions_as_it_reads_with_their_rows(tmp_path):
    p = tmp_path / "s.jsonl"
    rows = [json.dumps({"id": str(i), "text": f"{NARE} {i}"}) for i in range(5)]
    p.write_text("\n".join(rows[:3] + ["not json"] + rows[3:]) + "\n", "utf-8")
    source = SourceSpec(id="s", path="s.jsonl", format="jsonl", medium="web", licence="CC0-1.0",
                        consent="redistribution")
    warnings: list = []
    parts = ingest.ingest_unit(source, [(str(p), "s.jsonl")], 2, warnings)
    assert isinstance(parts, types.GeneratorType)
    sizes = [(len(docs), [r.reason for r in issues]) for docs, issues in parts]
    # the malformed line 4 is read while the second partition fills
    assert sizes == [(2, []), (2, ["malformed-json"]), (1, [])]


def test_malformed_csv_quoting_skips_the_row_with_a_row(tmp_path):
    p = tmp_path / "s.csv"
    p.write_text('id,text\n1,"fine, quoted"\n2,"unterminated\n3,ok\n4,"a"b"\n', "utf-8")
    tf = TextFile(p, "s.csv", "s")
    docs = list(READERS["csv"].read(tf, build(READERS["csv"].Options, {"id_column": "id"}, "options", "r.toml")))
    kept = [d["segments"][0] for d in docs]
    # Every row is read or in the ledger: the unterminated quote costs only its own line.
    assert kept == ["fine, quoted", "ok"]
    assert [(r.reason, r.seg_index) for r in tf.issues] == [("malformed-csv", 3), ("malformed-csv", 5)]


def test_srt_with_broken_timestamps(tmp_path):
    p = tmp_path / "a.srt"
    p.write_text("1\n00:00:01,000 --> 00:00:02,000\nKema tabu\n\n2\n00:00:xx --> garbage\nYɔgí bé\n\n", "utf-8")
    tf = TextFile(p, "a.srt", "s")
    docs = list(READERS["srt"].read(tf, READERS["srt"].Options()))
    segs = [s for d in docs for s in d["segments"]]
    assert segs == ["Kema tabu"] and [(r.reason, r.seg_index) for r in tf.issues] == [("broken-cue-timing", 5)]


# -- the same files through a whole run: conservation holds -------------------------------------

def test_hostile_files_through_a_whole_run(tmp_path):
    src = tmp_path / "in"
    src.mkdir()
    (src / "good.txt").write_text(f"{NARE}\n\n{NARE} tabu.\n", "utf-8")
    (src / "bad-utf8.txt").write_bytes(b"Kema y\xff\xfe bavus\xc9 gon\xf3.\n")
    (src / "utf16.txt").write_bytes(codecs.BOM_UTF16_LE + f"{NARE} sɛli.\n".encode("utf-16-le"))
    (src / "nul.txt").write_bytes(f"{NARE}\x00 wɛ.\n".encode())
    (src / "binary.txt").write_bytes(bytes(range(256)) * 64)
    (src / "empty.txt").write_bytes(b"")
    whole = gzip.compress((f"{NARE} nɔ.\n" * 3000).encode())
    (src / "cut.txt.gz").write_bytes(whole[: len(whole) // 2])
    seeds = ROOT / "sample_texts" / "seeds"
    recipe = tmp_path / "r.toml"
    recipe.write_text(f"""
[corpus]
name = "hostile"
language = "qnv"

[[sources]]
id = "files"
path = "in/*"
format = "text"
medium = "web"
licence = "CC0-1.0"
consent = "redistribution"

[stages.langid]
seeds = {{ qnv = "{seeds / 'qnv-hill.txt'}", qtm = "{seeds / 'qtm.txt'}", other = "{seeds / 'other.txt'}" }}
folds = 2
""".replace("[corpus]", "[corpus]\nallow_outside_paths = true"), "utf-8")
    result = run(recipe, tmp_path / "out", workers=1)
    cons = result.conservation
    assert cons["documents"]["holds"] and cons["segments"]["holds"]
    ledger = load_ledger(result.out)
    assert {"undecodable-bytes", "nul-bytes", "binary-file", "truncated-gzip"} <= set(ledger.reason)


# -- recipes -------------------------------------------------------------------------------------

def test_a_glob_matching_100000_files_is_refused_clearly(tmp_path):
    folder = tmp_path / "many"
    folder.mkdir()
    for i in range(100_000):
        (folder / f"{i:06d}.txt").touch()
    recipe = tmp_path / "r.toml"
    recipe.write_text('[corpus]\nname = "x"\nlanguage = "qnv"\n\n[[sources]]\nid = "m"\npath = "many/*.txt"\n'
                      'format = "text"\nmedium = "web"\nlicence = "CC0-1.0"\nconsent = "redistribution"\n', "utf-8")
    loaded = load_recipe(recipe)
    with pytest.raises(RecipeError, match="max_files_per_source"):
        loaded.source_files(loaded.sources[0])


# -- review sheets -----------------------------------------------------------------------------

@pytest.mark.parametrize("cell", ["=HYPERLINK(\"http://x\")", "+1+2", "-2+3", "@SUM(A1)", "\t=1", "\r=1"])
def test_cells_a_spreadsheet_would_run_are_neutralised(cell):
    # OWASP "CSV Injection" guidance (from memory): prefix cells starting with = + - @ TAB CR with a quote.
    assert neutralise_cell(cell).startswith("'") and neutralise_cell(cell)[1:] == cell


def test_ordinary_cells_are_left_alone():
    assert neutralise_cell("kema tabu") == "kema tabu" and neutralise_cell("ŋɔ-bɛ") == "ŋɔ-bɛ"


# -- a full disk -----------------------------------------------------------------------------

def test_a_write_error_ends_the_run_clearly_with_nothing_marked_done(tmp_path, monkeypatch):
    from .conftest import copy_demo
    recipe = copy_demo(tmp_path)
    calls = {"n": 0}
    real_fsync = os.fsync

    def failing_fsync(fd):
        calls["n"] += 1
        if calls["n"] > 40:
            raise OSError(errno.ENOSPC, "No space left on device")
        return real_fsync(fd)

    monkeypatch.setattr(storage.os, "fsync", failing_fsync)
    out = tmp_path / "out"
    with pytest.raises(DataError, match="No space left on device"):
        run(recipe, out, workers=1)
    monkeypatch.undo()
    # Every partition marked done has its data and ledger files, and no temporary file is left.
    markers = [m for m in (out / ".cache").rglob("*.json") if "counts" in json.loads(m.read_text("utf-8"))]
    assert markers  # some work was finished before the disk filled
    for marker in markers:
        parts = json.loads(marker.read_text("utf-8")).get("parts") or [marker.stem]  # a unit lists its partitions
        for part in parts:
            assert all((marker.parent / f"{part}{ext}").exists() for ext in (".json", ".parquet", ".ledger.parquet"))
    assert not list(out.rglob("*.tmp"))
    assert not (out / "manifest.json").exists()
    again = run(recipe, out, workers=1)
    assert again.conservation["documents"]["holds"]


# -- bounded fuzzing of every reader -------------------------------------------------------------

@settings(max_examples=25, deadline=None)
@given(st.binary(max_size=600), st.sampled_from(sorted(READERS)))
def test_readers_never_crash_on_arbitrary_bytes(tmp_path_factory, data, fmt):
    folder = tmp_path_factory.mktemp("fuzz")
    p = folder / "input.txt"
    p.write_bytes(data)
    tf = TextFile(p, "input.txt", "s")
    module = READERS[fmt]
    opts = build(module.Options, {}, "options", "r.toml")
    try:
        docs = list(module.read(tf, opts))
    except CorpusError as exc:          # a clear, named refusal is allowed
        assert "input.txt" in str(exc)
        return
    for d in docs:
        assert all(isinstance(s, str) for s in d["segments"])
        json.dumps(d["meta"], ensure_ascii=False)
