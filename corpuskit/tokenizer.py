"""Subword tokenizer (SentencePiece) trained on the train split, with a per-dialect report.

The vocabulary shrinks automatically when the corpus is too small for the
requested size (one retry with the size the library reports as possible);
normalisation is ``identity`` because the pipeline has already normalised the
text; character coverage is 1.0 with the orthography's letters required.
"""
from __future__ import annotations

import io
import re

from .words import words as split_words

__all__ = ["train_tokenizer", "dialect_report"]

_LIMIT = re.compile(r"value <= (\d+)")
_TOO_SMALL = re.compile(r"Vocabulary size is smaller than required_chars\. (\d+) vs (\d+)")


def train_tokenizer(lines: list[str], vocab_size: int, model_type: str, letters: str) -> tuple[bytes, int]:
    """The model bytes and the vocabulary size actually used."""
    import sentencepiece as spm

    lines = [piece for x in lines if x.strip() for piece in _sentence_sized(x)]
    if not lines:
        raise ValueError("no text to train the tokenizer on")
    present = set("".join(lines))
    required = "".join(sorted(c for c in set(letters) if c in present and not c.isspace()))

    def attempt(size: int) -> bytes:
        buf = io.BytesIO()
        spm.SentencePieceTrainer.train(sentence_iterator=iter(lines), model_writer=buf, model_type=model_type,
                                       vocab_size=size, hard_vocab_limit=True, character_coverage=1.0,
                                       required_chars=required, byte_fallback=False,
                                       normalization_rule_name="identity", num_threads=1, minloglevel=2,
                                       max_sentence_length=1 << 16, split_digits=True)
        return buf.getvalue()

    size = vocab_size
    for _ in range(4):
        try:
            return attempt(size), size
        except RuntimeError as exc:
            small = _TOO_SMALL.search(str(exc))
            if small:   # every character is a piece of its own: the vocabulary must hold them all
                size = int(small.group(2)) + 1
                continue
            m = _LIMIT.search(str(exc))
            if not m or int(m.group(1)) >= size:
                raise
            size = int(m.group(1))  # the largest size this text supports, as sentencepiece reports it
    return attempt(size), size  # pragma: no cover


SENTENCE_CHARS = 2000   # longer lines are trained on in pieces of about this size


def _sentence_sized(line: str) -> list[str]:
    """A line as pieces of at most about SENTENCE_CHARS characters, cut at spaces: sentencepiece's
    training is slow on very long sentences and learns nothing more from them."""
    if len(line) <= 2 * SENTENCE_CHARS:
        return [line]
    pieces, start = [], 0
    while start < len(line):
        end = min(len(line), start + SENTENCE_CHARS)
        cut = line.rfind(" ", start, end) if end < len(line) else end
        end = cut if cut > start else end
        pieces.append(line[start:end].strip())
        start = end
    return [p for p in pieces if p]


def dialect_report(model: bytes, docs_by_dialect: dict[str, list[str]], language: str = "") -> list[dict]:
    """Fertility (pieces per word) and unknown-piece rate per dialect."""
    import sentencepiece as spm

    sp = spm.SentencePieceProcessor(model_proto=model)
    unk = sp.unk_id()
    rows = []
    for dialect, lines in sorted(docs_by_dialect.items()):
        words = pieces = unknown = chars = 0
        for ids in sp.encode(lines) if lines else []:
            pieces += len(ids)
            unknown += sum(1 for i in ids if i == unk)
        for line in lines:
            words += len(split_words(line, language))
            chars += len(line)
        rows.append({"dialect": dialect, "lines": len(lines), "words": words, "pieces": pieces,
                     "fertility": round(pieces / words, 4) if words else None,
                     "unknown_rate": round(unknown / pieces, 6) if pieces else None})
    fert = [r["fertility"] for r in rows if r["fertility"]]
    for r in rows:
        r["gap_to_best"] = round(r["fertility"] - min(fert), 4) if r["fertility"] else None
    return rows
