"""Web archives (WARC, ISO 28500): one document per HTML or text response record."""
from __future__ import annotations

import html
import re
from dataclasses import dataclass
from html.parser import HTMLParser
from typing import Iterator

from ..ledger import LedgerRow, rewrite
from ..config import Checked, param
from .decode import TextFile

BLOCK_TAGS = {"p", "div", "br", "li", "h1", "h2", "h3", "h4", "h5", "h6", "tr", "td", "th",
              "section", "article", "header", "footer", "nav", "title", "pre", "blockquote"}
SKIP_TAGS = {"script", "style", "noscript", "template", "svg"}


@dataclass(frozen=True)
class Options(Checked):
    max_record_bytes: int = param(5_000_000, low=1, high=1 << 31, help="skip larger records")


class _Text(HTMLParser):
    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.parts: list[str] = []
        self.skip = 0

    def handle_starttag(self, tag, attrs):
        if tag in SKIP_TAGS:
            self.skip += 1
        elif tag in BLOCK_TAGS:
            self.parts.append("\n")

    def handle_endtag(self, tag):
        if tag in SKIP_TAGS and self.skip:
            self.skip -= 1
        elif tag in BLOCK_TAGS:
            self.parts.append("\n")

    def handle_data(self, data):
        if not self.skip:
            self.parts.append(data)


def html_lines(markup: str) -> list[str]:
    p = _Text()
    p.feed(markup)
    p.close()
    text = html.unescape("".join(p.parts))
    return [" ".join(line.split()) for line in text.split("\n") if line.strip()]


def read(tf: TextFile, opts: Options) -> Iterator[dict]:
    from warcio.archiveiterator import ArchiveIterator
    from warcio.exceptions import ArchiveLoadFailed

    with open(tf.path, "rb") as stream:
        try:
            for i, record in enumerate(ArchiveIterator(stream)):
                if record.rec_type not in ("response", "resource", "conversion"):
                    continue
                ctype = (record.http_headers.get_header("Content-Type") if record.http_headers
                         else record.rec_headers.get_header("Content-Type")) or ""
                if "html" not in ctype and "text" not in ctype:
                    continue
                body = record.content_stream().read(opts.max_record_bytes + 1)
                uri = record.rec_headers.get_header("WARC-Target-URI") or ""
                if len(body) > opts.max_record_bytes:
                    tf.issues.append(LedgerRow("ingest", "file", "removed", tf.file_id, i, 0, "record-too-large",
                                               f"{tf.rel} record {i} ({uri}): larger than max_record_bytes; skipped"))
                    continue
                charset = re.search(r"charset=([\w-]+)", ctype)
                try:
                    text = body.decode(charset.group(1) if charset else "utf-8", errors="replace")
                except LookupError:  # a charset Python does not know: read it as UTF-8, with a row
                    text = body.decode("utf-8", errors="replace")
                    tf.issues.append(rewrite("ingest", tf.file_id, i, "unknown-charset",
                                             f"{tf.rel} record {i} ({uri}): charset '{charset.group(1)}' unknown; read as UTF-8"))
                lines = html_lines(text) if "html" in ctype else [ln for ln in text.splitlines() if ln.strip()]
                if lines:
                    yield {"key": f"{i}", "segments": lines, "meta": {"file": tf.rel, "record": i, "uri": uri}}
        except ArchiveLoadFailed as exc:
            tf.issues.append(LedgerRow("ingest", "file", "removed", tf.file_id, -1, 0, "malformed-warc",
                                       f"{tf.rel}: {str(exc)[:200]}; rest of file skipped"))
