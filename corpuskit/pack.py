"""One archive of exactly the publishable files, checked against the manifest.

Refused while the leak audit has not passed (no manifest, or a manifest without a
passed audit) and when any listed file no longer matches its checksum.  The archive is
a gzip'd tar with fixed owners, modes and times, so equal files give equal bytes.
"""
from __future__ import annotations

import gzip
import io
import json
import tarfile
from pathlib import Path

from .errors import RecipeError
from .storage import atomic_open, file_sha256

__all__ = ["pack"]


def _manifest(out: Path) -> dict:
    path = out / "manifest.json"
    if not path.exists():
        raise RecipeError(f"{out}: no manifest.json, so the leak audit has not passed here; run the recipe to the end "
                          "(see private/leak-audit.json if the last run stopped at the audit), then pack.")
    manifest = json.loads(path.read_text("utf-8"))
    if not (manifest.get("leak_audit") or {}).get("passed"):
        raise RecipeError(f"{path}: the leak audit has not passed for these files; run the recipe again, then pack.")
    return manifest


def pack(out: Path, archive: Path | None = None) -> tuple[Path, int]:
    """Write the archive (default: OUT/<corpus>-public.tar.gz); returns its path and the number of files."""
    out = Path(out)
    manifest = _manifest(out)
    listed = sorted(rel for rel, info in manifest["files"].items() if info.get("public", True))
    for rel in listed:
        path = out / rel
        if not path.is_file() or file_sha256(path) != manifest["files"][rel]["sha256"]:
            raise RecipeError(f"{path}: changed or missing since the leak audit (checksum differs from manifest.json); "
                              "run the recipe again so the audit sees the files you publish.")
    archive = Path(archive) if archive else out / f"{manifest.get('corpus') or 'corpus'}-public.tar.gz"
    buf = io.BytesIO()
    with tarfile.open(fileobj=buf, mode="w", format=tarfile.PAX_FORMAT) as tar:
        for rel in listed + ["manifest.json"]:
            data = (out / rel).read_bytes()
            info = tarfile.TarInfo(rel)
            info.size, info.mtime, info.mode, info.uid, info.gid = len(data), 0, 0o644, 0, 0
            tar.addfile(info, io.BytesIO(data))
    with atomic_open(archive) as f:
        f.write(gzip.compress(buf.getvalue(), compresslevel=9, mtime=0))
    return archive, len(listed) + 1
