"""Stable pseudonyms for people: speakers, message senders and sheet contributors.

A pseudonym is a keyed hash (HMAC-SHA256, RFC 2104) of the person's name, case-folded
and with spaces collapsed, under a secret kept with the project: one person gets one
pseudonym across runs and sources, and nobody can reverse or recompute it without the
secret.  The name-to-pseudonym mapping is written only to the output's private folder.
"""
from __future__ import annotations

import hashlib
import hmac
import json
import os
import secrets
import unicodedata
from pathlib import Path

from .casing import comparison_key
from .errors import RecipeError

__all__ = ["load_or_create_secret", "pseudonym", "pseudonymise_document", "PREFIX"]

PREFIX = "person-"
# Letters only, no vowels: a pseudonym can never read as a phone number, a date or a word
# (with hex digits, about 1 name in 250 came out as "person-392307945954", which the leak
# audit rightly flags as a phone number).
_ALPHABET = "bcdfghjklmnpqrstvwxz"
_LENGTH = 12                 # 20**12, about 2**52 pseudonyms


def load_or_create_secret(path: Path) -> tuple[bytes, bool]:
    """The secret in ``path`` (64 hex digits), created with owner-only permissions if the
    file does not exist; and whether it was created now."""
    path = Path(path)
    if path.exists():
        text = path.read_text(encoding="ascii", errors="replace").strip()
        try:
            key = bytes.fromhex(text)
        except ValueError:
            key = b""
        if len(key) < 16:
            raise RecipeError(f"{path}: not a pseudonym secret (expected at least 32 hex digits); restore the "
                              "file from your backup, or delete it to start new pseudonyms for everyone.")
        return key, False
    path.parent.mkdir(parents=True, exist_ok=True)
    key = secrets.token_bytes(32)
    fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o600)
    with os.fdopen(fd, "w", encoding="ascii") as f:
        f.write(key.hex() + "\n")
    return key, True


def _normal(name: str) -> str:
    return comparison_key(unicodedata.normalize("NFC", name))


def pseudonym(name: str, key: bytes) -> str:
    """The pseudonym of ``name`` under ``key``: equal for spellings that differ only by case or spacing.

    >>> pseudonym("Ana  Kelo", b"k" * 32) == pseudonym("ana kelo", b"k" * 32)
    True
    """
    value = int.from_bytes(hmac.new(key, _normal(name).encode("utf-8"), hashlib.sha256).digest(), "big")
    letters = []
    for _ in range(_LENGTH):
        value, index = divmod(value, len(_ALPHABET))
        letters.append(_ALPHABET[index])
    return PREFIX + "".join(letters)


def pseudonymise_document(doc: dict, key: bytes, keep: str | None, seen: dict[str, str]) -> None:
    """Replace the people named in ``doc`` (its contributor, the speakers and cue voices in its
    metadata) by pseudonyms, in place.  ``keep`` is a name left as it is (the team pseudonym
    the recipe gives the source); ``seen`` collects name -> pseudonym."""
    def swap(name):
        if not isinstance(name, str) or not name.strip() or name == keep or name.startswith(PREFIX):
            return name
        seen[name] = pseudonym(name, key)
        return seen[name]

    doc["contributor"] = swap(doc.get("contributor"))
    if not doc.get("meta") or ('"speaker' not in doc["meta"] and '"sender' not in doc["meta"]):
        return
    meta = json.loads(doc["meta"])
    if isinstance(meta.get("speakers"), dict):
        meta["speakers"] = {k: swap(v) for k, v in meta["speakers"].items()}
    for cue in meta.get("cues") or []:
        if isinstance(cue, dict) and cue.get("speaker"):
            cue["speaker"] = swap(cue["speaker"])
    if meta.get("sender"):
        meta["sender"] = swap(meta["sender"])
    doc["meta"] = json.dumps(meta, ensure_ascii=False, sort_keys=True)
