"""Each reader on well-formed input (broken input is in test_hostile.py), and the crawl template."""
import gzip
import io
import json

from corpuskit.readers import READERS
from corpuskit.readers.decode import TextFile
from corpuskit.recipe import build, load_recipe

from .conftest import ROOT


def read(tmp_path, fmt, name, data, **options):
    p = tmp_path / name
    p.write_bytes(data if isinstance(data, bytes) else data.encode("utf-8"))
    tf = TextFile(p, name, "s")
    module = READERS[fmt]
    return list(module.read(tf, build(module.Options, options, "options", "r.toml"))), tf


def test_plain_text_units(tmp_path):
    text = "Kema tabu.\nSɛli ŋa.\n\nBɛ wɔ.\n"
    assert [d["segments"] for d in read(tmp_path, "text", "a.txt", text, unit="line")[0]] == [["Kema tabu."], ["Sɛli ŋa."], ["Bɛ wɔ."]]
    assert [d["segments"] for d in read(tmp_path, "text", "a.txt", text, unit="paragraph")[0]] == [["Kema tabu.", "Sɛli ŋa."], ["Bɛ wɔ."]]
    assert len(read(tmp_path, "text", "a.txt", text, unit="file")[0]) == 1


def test_csv_and_tsv_with_mapped_columns(tmp_path):
    docs, tf = read(tmp_path, "csv", "s.csv", 'id,text,dialect\nr1,"Kema, tabu",hill\nr2,"two\nlines",coast\n',
                    id_column="id", dialect_column="dialect")
    assert [(d["key"], d["segments"], d["dialect"]) for d in docs] == [("r1", ["Kema, tabu"], "hill"),
                                                                       ("r2", ["two", "lines"], "coast")]
    docs, _ = read(tmp_path, "csv", "s.tsv", "text\tid\nKema\tx1\n", id_column="id", delimiter="\\t")
    assert docs[0]["key"] == "x1" and docs[0]["segments"] == ["Kema"]


def test_jsonl_plain_and_gzipped(tmp_path):
    lines = [json.dumps({"id": "a", "text": "Kema tabu\nsɛli"}), "not json", json.dumps({"id": "b", "text": ["x", "y"]})]
    docs, tf = read(tmp_path, "jsonl", "d.jsonl", "\n".join(lines) + "\n")
    assert [d["segments"] for d in docs] == [["Kema tabu", "sɛli"], ["x", "y"]]
    assert [r.reason for r in tf.issues] == ["malformed-json"] and tf.issues[0].seg_index == 2
    gz, _ = read(tmp_path, "jsonl", "d.jsonl.gz", gzip.compress(("\n".join(lines) + "\n").encode()))
    assert [d["segments"] for d in gz] == [d["segments"] for d in docs]


def test_srt(tmp_path):
    docs, tf = read(tmp_path, "srt", "a.srt", "1\n00:00:01,000 --> 00:00:02,500\nTAVI: Kema tabu\n\n"
                                             "2\n00:00:03,000 --> 00:00:04,000\n[music]\n\n")
    assert docs[0]["segments"] == ["TAVI: Kema tabu", "[music]"] and not tf.issues


def test_message_export_with_a_pattern(tmp_path):
    text = "[2025-01-02 08:00] Tavi: Kema tabu\n[2025-01-02 08:05] Moru: Sɛli ŋa\ncontinued line\n"
    docs, tf = read(tmp_path, "messages", "m.txt", text)
    assert [d["segments"] for d in docs] == [["Kema tabu"], ["Sɛli ŋa", "continued line"]]
    assert docs[0]["contributor"] == "Tavi"


def test_ocr_pages(tmp_path):
    docs, _ = read(tmp_path, "ocr-pages", "page-001.txt", "HEADER\nKema tabu\n- 1 -\n")
    assert docs[0]["segments"] == ["HEADER", "Kema tabu", "- 1 -"]


def test_warc_records_through_warcio(tmp_path):
    """A WARC (ISO 28500) written with warcio, the registry library the reader uses."""
    from warcio.statusandheaders import StatusAndHeaders
    from warcio.warcwriter import WARCWriter

    buf = io.BytesIO()
    writer = WARCWriter(buf, gzip=True)
    pages = [("http://radio.example/1", "text/html; charset=utf-8",
              "<html><head><style>p{}</style></head><body><nav>Home</nav><p>Kema tabu sɛli.</p><p>Bɛ wɔ ŋa.</p></body></html>"),
             ("http://radio.example/logo.png", "image/png", "PNG"),
             ("http://radio.example/2", "text/html; charset=x-unknown", "<p>Yɔŋé bé</p>")]
    for uri, ctype, body in pages:
        headers = StatusAndHeaders("200 OK", [("Content-Type", ctype)], protocol="HTTP/1.0")
        writer.write_record(writer.create_warc_record(uri, "response", payload=io.BytesIO(body.encode()),
                                                      http_headers=headers))
    docs, tf = read(tmp_path, "warc", "crawl.warc.gz", buf.getvalue())
    assert [d["meta"]["uri"] for d in docs] == ["http://radio.example/1", "http://radio.example/2"]
    assert "Kema tabu sɛli." in docs[0]["segments"] and not any("p{}" in s for s in docs[0]["segments"])
    assert [r.reason for r in tf.issues] == ["unknown-charset"]


def test_crawl_template_is_a_valid_recipe(tmp_path):
    text = (ROOT / "corpuskit" / "templates" / "crawl-template.toml").read_text("utf-8")
    (tmp_path / "r.toml").write_text(text.replace("@NAME@", "narevi").replace("@LANGUAGE@", "qnv"), "utf-8")
    recipe = load_recipe(tmp_path / "r.toml")
    assert [s.format for s in recipe.sources] == ["warc", "jsonl"]
    assert not any(s.redistributable for s in recipe.sources)
