"""Content-addressed artefacts under ``OUT/.cache``, written atomically.

A partition artefact is three files named by its key: the documents
(``KEY.parquet``), its ledger rows (``KEY.ledger.parquet``) and a small JSON
marker with its counts (``KEY.json``).  The marker is written last, so a
partition counts as done only when all three are complete.
"""
from __future__ import annotations

import contextlib
import gzip
import hashlib
import io
import json
import os
import tempfile
from pathlib import Path
from typing import Any, BinaryIO, Iterable, Iterator

import pyarrow as pa
import pyarrow.parquet as pq

from .errors import DataError
from .ledger import LEDGER_SCHEMA, LedgerRow
from .records import SCHEMA

__all__ = ["stable_hash", "digest64", "file_sha256", "atomic_write_bytes", "atomic_write_text", "Cache",
           "write_gzip_lines"]

FORMAT_VERSION = "1"


def stable_hash(*parts: Any) -> str:
    """SHA-256 of a JSON rendering of ``parts`` (sorted keys), shortened to 32 hex digits."""
    blob = json.dumps(parts, sort_keys=True, ensure_ascii=False, default=_default).encode("utf-8")
    return hashlib.sha256(blob).hexdigest()[:32]


def digest64(text: str) -> int:
    """A 64-bit BLAKE2b digest of ``text`` as an integer: for counting or matching many strings
    (lines, words, ids) as small numbers."""
    return int.from_bytes(hashlib.blake2b(text.encode("utf-8"), digest_size=8).digest(), "little")


def _default(obj: Any) -> Any:
    if hasattr(obj, "__dataclass_fields__"):
        import dataclasses
        return dataclasses.asdict(obj)
    if isinstance(obj, (set, frozenset)):
        return sorted(obj)
    if isinstance(obj, Path):
        return str(obj)
    raise TypeError(f"cannot hash {type(obj).__name__}")


def file_sha256(path: Path, chunk: int = 1 << 20) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as f:
        while block := f.read(chunk):
            h.update(block)
    return h.hexdigest()


def _file_mode() -> int:
    umask = os.umask(0)
    os.umask(umask)
    return 0o666 & ~umask


FILE_MODE = _file_mode()


@contextlib.contextmanager
def atomic_open(path: Path) -> Iterator[BinaryIO]:
    """A binary file that appears under ``path`` only when the block ends without error
    (temporary name, fsync, rename); on any error the temporary file is removed."""
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        with os.fdopen(fd, "wb") as f:
            yield f
            f.flush()
            os.fchmod(f.fileno(), FILE_MODE)  # mkstemp makes owner-only files; use the usual mode
            os.fsync(f.fileno())
        os.replace(tmp, path)
    except OSError as exc:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        raise DataError(f"{path}: could not write ({exc.strerror or exc}); free disk space or "
                        "choose another --out folder, then run again (finished work is kept).") from None
    except BaseException:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        raise


def _atomic(path: Path, write) -> None:
    with atomic_open(path) as f:
        write(f)


@contextlib.contextmanager
def atomic_gzip_text(path: Path) -> Iterator[io.TextIOWrapper]:
    """A UTF-8 text stream into a gzip file with no timestamp or name inside (equal content,
    equal bytes), published atomically like ``atomic_open``."""
    with atomic_open(path) as f:
        with gzip.GzipFile(filename="", mode="wb", fileobj=f, mtime=0, compresslevel=6) as gz:
            with io.TextIOWrapper(gz, encoding="utf-8", newline="\n") as t:
                yield t


def atomic_write_bytes(path: Path, data: bytes) -> None:
    _atomic(path, lambda f: f.write(data))


def atomic_write_text(path: Path, text: str) -> None:
    atomic_write_bytes(path, text.encode("utf-8"))


def write_gzip_lines(path: Path, lines: Iterable[str]) -> None:
    """Gzip with no timestamp or file name inside, so equal content gives equal bytes."""
    with atomic_gzip_text(path) as t:
        for line in lines:
            t.write(line)
            t.write("\n")


def _parquet_bytes(table: pa.Table) -> bytes:
    sink = io.BytesIO()
    pq.write_table(table, sink, compression="zstd")
    return sink.getvalue()


def table_of(records: list[dict], schema: pa.Schema) -> pa.Table:
    """Records as a table of ``schema``, built column by column (as ``Table.from_pylist`` would:
    a missing field is null, a field not in the schema is left out; about twice as fast)."""
    return pa.Table.from_pydict({name: [r.get(name) for r in records] for name in schema.names}, schema=schema)


def read_parquet(path: Path, schema: pa.Schema) -> pa.Table:
    """One Parquet file as a table of ``schema``.  Read as a single file, not through pyarrow's
    dataset layer (which imports pandas: 0.6 s and tens of MB in every fresh worker)."""
    with pq.ParquetFile(path) as f:
        table = f.read()
    return table if table.schema.equals(schema) else table.cast(schema)


class Cache:
    """The artefact store of one output folder.

    Every entry the object is asked about is remembered by its stem (stage folder and file
    name up to the first dot), so that after a complete run the runner can record which
    entries the current recipe uses (``save_in_use``) and ``prune`` can delete the rest:
    results of earlier recipes, replaced partitions, old pieces."""

    IN_USE = "in-use.json"

    def __init__(self, out: Path):
        self.root = Path(out) / ".cache"
        self.used: set[tuple[str, str]] = set()
        self.contexts: set[tuple[str, str]] = set()

    def _dir(self, stage: str) -> Path:
        return self.root / stage

    def use(self, stage: str, name: str) -> None:
        """Remember that this run needs the entry ``name`` of ``stage`` (see ``prune``)."""
        if name:
            self.used.add((stage, name.split(".", 1)[0]))

    def use_context(self, stage: str, key: str) -> None:
        """Remember that entries of ``stage`` named with this context key (a model, its report)
        are needed, even in a run that did not open them because every partition was cached."""
        if key:
            self.contexts.add((stage, key))

    def done(self, stage: str, key: str) -> bool:
        self.use(stage, key)
        return (self._dir(stage) / f"{key}.json").exists()

    def marker(self, stage: str, key: str) -> dict[str, Any]:
        self.use(stage, key)
        return json.loads((self._dir(stage) / f"{key}.json").read_text("utf-8"))

    def write_partition(self, stage: str, key: str, docs: list[dict], rows: list[LedgerRow],
                        marker: dict[str, Any]) -> pa.Table:
        """Write a stage's output partition, its ledger rows and its marker; the documents' table
        (``read_docs`` gives back ``table.to_pylist()``)."""
        self.use(stage, key)
        d = self._dir(stage)
        table = table_of(docs, SCHEMA)
        atomic_write_bytes(d / f"{key}.parquet", _parquet_bytes(table))
        ledger = pa.Table.from_pydict({name: [getattr(r, name) for r in rows] for name in LEDGER_SCHEMA.names},
                                      schema=LEDGER_SCHEMA)
        atomic_write_bytes(d / f"{key}.ledger.parquet", _parquet_bytes(ledger))
        atomic_write_text(d / f"{key}.json", json.dumps({"format": FORMAT_VERSION, **marker}, sort_keys=True))
        return table

    def read_docs(self, stage: str, key: str) -> list[dict]:
        self.use(stage, key)
        return read_parquet(self._dir(stage) / f"{key}.parquet", SCHEMA).to_pylist()

    def read_ledger(self, stage: str, key: str) -> pa.Table:
        self.use(stage, key)
        return read_parquet(self._dir(stage) / f"{key}.ledger.parquet", LEDGER_SCHEMA)

    # Side artefacts (models, signatures, surveys): any bytes under a key.
    def blob_path(self, stage: str, name: str) -> Path:
        self.use(stage, name)
        return self._dir(stage) / name

    def has_blob(self, stage: str, name: str) -> bool:
        return self.blob_path(stage, name).exists()

    def put_blob(self, stage: str, name: str, data: bytes) -> Path:
        path = self.blob_path(stage, name)
        atomic_write_bytes(path, data)
        return path

    def put_json(self, stage: str, name: str, obj: Any) -> None:
        self.put_blob(stage, name, json.dumps(obj, sort_keys=True, ensure_ascii=False).encode("utf-8"))

    def get_json(self, stage: str, name: str) -> Any:
        return json.loads(self.blob_path(stage, name).read_text("utf-8"))

    # What the last complete run used, and removing the rest.
    def save_in_use(self) -> None:
        record = {"entries": sorted(f"{s}/{n}" for s, n in self.used),
                  "contexts": sorted(f"{s}/{k}" for s, k in self.contexts)}
        atomic_write_text(self.root / self.IN_USE, json.dumps(record, indent=0) + "\n")

    def prune(self) -> tuple[int, int]:
        """Delete cache files the last complete run did not use; (files, bytes) removed."""
        record = self.root / self.IN_USE
        if not record.exists():
            from .errors import RecipeError
            raise RecipeError(f"{self.root.parent}: no complete run recorded here yet; run the recipe to the end "
                              "first, then prune.")
        recorded = json.loads(record.read_text("utf-8"))
        keep = set(recorded["entries"])
        contexts = [tuple(c.split("/", 1)) for c in recorded["contexts"]]
        files = removed = 0
        for path in sorted(self.root.glob("*/*")):
            stage, stem = path.parent.name, path.name.split(".", 1)[0]
            if path.is_file() and f"{stage}/{stem}" not in keep and \
                    not any(stage == s and key in stem for s, key in contexts):
                removed += path.stat().st_size
                path.unlink()
                files += 1
        return files, removed
