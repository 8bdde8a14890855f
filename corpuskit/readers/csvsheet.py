"""CSV / TSV sheets: one document per row, columns mapped in the recipe."""
from __future__ import annotations

import csv
from collections import deque
from dataclasses import dataclass
from typing import Iterator

from ..ledger import LedgerRow
from ..config import Checked, param
from .decode import TextFile

csv.field_size_limit(64 << 20)


@dataclass(frozen=True)
class Options(Checked):
    text_column: str = param("text", help="the column holding the text")
    id_column: str = param("", help="a column with a stable row id")
    dialect_column: str = param("", help="a column naming the row's dialect")
    contributor_column: str = param("", help="a column naming the (pseudonymous) contributor")
    date_column: str = param("", help="a column with the row's date")
    delimiter: str = param(",", help="the field separator; use '\\t' for TSV")


DELIMITERS = (",", ";", "\t", "|")


def sniff_delimiter(header_line: str, text_column: str) -> str | None:
    """The common delimiter under which the header has ``text_column``, if one does."""
    for d in DELIMITERS:
        if text_column in next(csv.reader([header_line], delimiter=d), []):
            return d
    return None


def read(tf: TextFile, opts: Options) -> Iterator[dict]:
    source = tf.lines()
    ahead: deque[tuple[int, str]] = deque()   # lines taken for a quoted field and given back

    def next_line() -> tuple[int, str] | None:
        return ahead.popleft() if ahead else next(source, None)

    first_line = next_line()
    if first_line is None:
        return
    delim = "\t" if opts.delimiter in ("\\t", "tab") else opts.delimiter
    header_n, header_line = first_line
    header = next(csv.reader([header_line], delimiter=delim))
    if opts.text_column not in header and (other := sniff_delimiter(header_line, opts.text_column)):
        tf.warnings.append(f"{tf.rel}: the header is separated by {other!r}, not {delim!r}; read with {other!r} "
                           "(set options.delimiter to silence this)")
        delim = other
        header = next(csv.reader([header_line], delimiter=delim))
    if opts.text_column not in header:
        from ..errors import DataError
        raise DataError(f"{tf.rel} line {header_n}: no column '{opts.text_column}' in the header "
                        f"({', '.join(header)}); set options.text_column in the recipe.")
    col = {name: i for i, name in enumerate(header)}
    while (item := next_line()) is not None:
        first, line = item
        if not line.strip():
            continue
        record_text, taken = line, []
        # A quoted field may span lines; take lines until the quotes balance (bounded).
        while record_text.count('"') % 2 and len(taken) < 50 and (more := next_line()) is not None:
            taken.append(more)
            record_text += "\n" + more[1]
        try:
            row = next(csv.reader([record_text], delimiter=delim, strict=True))
        except csv.Error as exc:
            if taken:  # an unbalanced quote swallowed later rows: skip only this line, read on
                ahead.extendleft(reversed(taken))
                record_text = line
            tf.issues.append(LedgerRow("ingest", "segment", "removed", f"{tf.file_id}:{first}", first, 1,
                                       "malformed-csv", f"{tf.rel} line {first}: {exc}; row skipped", None,
                                       record_text[:500]))
            continue
        if len(row) != len(header):
            tf.issues.append(LedgerRow("ingest", "segment", "removed", f"{tf.file_id}:{first}", first, 1,
                                       "malformed-csv", f"{tf.rel} line {first}: {len(row)} fields, header has {len(header)}; row skipped",
                                       None, record_text[:500]))
            continue
        get = lambda name: row[col[name]].strip() if name and name in col else ""  # noqa: E731
        text = get(opts.text_column)
        if not text:
            continue
        for blank in (t for t in text.split("\n") if t and not t.strip()):
            tf.whitespace_only(first, blank)
        doc = {"key": get(opts.id_column) or f"{first}", "segments": [t for t in text.split("\n") if t.strip()],
               "meta": {"file": tf.rel, "lines": [first]}}
        for field_name, column in (("dialect", opts.dialect_column), ("contributor", opts.contributor_column),
                                   ("date", opts.date_column)):
            if get(column):
                doc[field_name] = get(column)
        yield doc
