"""Subword tokenizer (SentencePiece) trained on the train split, with a per-dialect report.

The vocabulary shrinks automatically when the corpus is too small for the
requested size (one retry with the size the library reports as possible);
normalisation is ``identity`` because the pipeline has already normalised the
text; character coverage is 1.0 with the orthography's letters required.
"""
from __future__ import annotations

import io
import re
from collections import defaultdict

__all__ = ["train_tokenizer", "dialect_report"]

_LIMIT = re.compile(r"value <= (\d+)")


def train_tokenizer(lines: list[str], vocab_size: int, model_type: str, letters: str) -> tuple[bytes, int]:
    """The model bytes and the vocabulary size actually used."""
    import sentencepiece as spm

    lines = [x for x in lines if x.strip()]
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
            m = _LIMIT.search(str(exc))
            if not m or int(m.group(1)) >= size:
                raise
            size = int(m.group(1))  # the largest size this text supports, as sentencepiece reports it
    return attempt(size), size  # pragma: no cover


def dialect_report(model: bytes, docs_by_dialect: dict[str, list[str]]) -> list[dict]:
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
            words += len(line.split())
            chars += len(line)
        rows.append({"dialect": dialect, "lines": len(lines), "words": words, "pieces": pieces,
                     "fertility": round(pieces / words, 4) if words else None,
                     "unknown_rate": round(unknown / pieces, 6) if pieces else None})
    fert = [r["fertility"] for r in rows if r["fertility"]]
    for r in rows:
        r["gap_to_best"] = round(r["fertility"] - min(fert), 4) if r["fertility"] else None
    return rows


def group_lines(docs, key="dialect") -> dict[str, list[str]]:
    out = defaultdict(list)
    for d in docs:
        out[d.get(key) or "unknown"].extend(d["segments"])
    return out
