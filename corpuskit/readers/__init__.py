"""Readers, one module per input format.  ``READERS`` maps a recipe's ``format`` to its module."""
from . import csvsheet, jsonl, messages, ocr, plaintext, srt, warc, webvtt

READERS = {
    "text": plaintext,
    "csv": csvsheet,
    "jsonl": jsonl,
    "webvtt": webvtt,
    "srt": srt,
    "ocr-pages": ocr,
    "messages": messages,
    "warc": warc,
}

__all__ = ["READERS"]
