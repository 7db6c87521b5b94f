"""Low-level store files: atomic Parquet writes, truncation and schema checks, reads that
tell a vanished file from a damaged one, and content checks."""

from __future__ import annotations

import os
from collections.abc import Sequence
from datetime import UTC, datetime
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from pesflow.formats.atomic import atomic_path, atomic_write
from pesflow.store.records import _VERSION_META, POINT_SCHEMA, SCHEMA_VERSION

_PARQUET_MAGIC = b"PAR1"
_MIN_PARQUET_BYTES = 12  # head magic + 4-byte footer length + tail magic


def _utc_stamp() -> str:
    return datetime.now(UTC).strftime("%Y%m%dT%H%M%S%fZ")


#: How a one-record fragment is written: plain, without dictionaries or statistics.  Its
#: few kilobytes gain nothing from them, and zstd's set-up per column made the write four
#: times slower (1.3 ms against 0.3 ms a point); parts, read many times, keep zstd.
FRAGMENT_WRITE = {"compression": "none", "use_dictionary": False, "write_statistics": False}
PART_WRITE = {"compression": "zstd"}


def _write_parquet_atomic(
    table: pa.Table, path: Path, *, fsync: bool, options: dict = PART_WRITE
) -> int:
    """Write ``table`` to ``path`` through a dot-named temp file in the same folder; returns
    the file's inode (kept by the rename), which tells later whether it was replaced.

    A fragment (``options`` is :data:`FRAGMENT_WRITE`: a few rows) is encoded in memory and
    written with one system call; Parquet written to a file takes about 75 small writes
    and seeks (a column chunk, its page header, the footer's pieces)."""
    if options is FRAGMENT_WRITE:
        sink = pa.BufferOutputStream()
        pq.write_table(table, sink, **options)
        return atomic_write(path, sink.getvalue(), fsync=fsync)
    with atomic_path(path, fsync=fsync) as tmp:
        pq.write_table(table, tmp, **options)
        inode = os.stat(tmp).st_ino
    return inode


def _magic_problem(name, dir_fd: int | None = None) -> tuple[str | None, int | None]:
    """Cheap truncation check: size and the 4-byte Parquet magic at both ends.

    ``name`` is a path, or a file name in the folder open as ``dir_fd``.  Returns
    ``(problem, inode)``: ``problem`` is None when the file looks whole, else a reason;
    ``inode`` is that of the file checked, or None when it vanished.
    """
    try:
        fd = os.open(name, os.O_RDONLY, dir_fd=dir_fd)
    except FileNotFoundError:
        return None, None
    try:
        st = os.fstat(fd)
        if st.st_size < _MIN_PARQUET_BYTES:
            return f"truncated: {st.st_size} bytes, a Parquet file has at least 12", st.st_ino
        head = os.pread(fd, 4, 0)
        tail = os.pread(fd, 4, st.st_size - 4)
    finally:
        os.close(fd)
    if head != _PARQUET_MAGIC or tail != _PARQUET_MAGIC:
        return f"truncated or not Parquet: ends {head!r}...{tail!r}, not b'PAR1'", st.st_ino
    return None, st.st_ino


def _schema_problem(schema: pa.Schema) -> str | None:
    """Why a file's schema is not :data:`POINT_SCHEMA`, or None when it is."""
    version = (schema.metadata or {}).get(_VERSION_META)
    if version is not None and version != str(SCHEMA_VERSION).encode():
        return f"wrong schema: file has schema_version {version.decode(errors='replace')}"
    # Schema.equals ignores the name of a list's child field (Parquet renames it).
    if not schema.equals(POINT_SCHEMA, check_metadata=False):
        got = ", ".join(f"{f.name}: {f.type}" for f in schema)
        return f"wrong schema: columns are ({got})"
    return None


class _Vanished(Exception):
    """A file disappeared between listing and reading: not corruption."""


class _BadFile(Exception):
    """A store file that must be quarantined; ``reason`` says why, ``inode`` which file."""

    def __init__(self, reason: str, inode: int | None = None):
        super().__init__(reason)
        self.reason = reason
        self.inode = inode


def _read_parquet(path: Path, columns: Sequence[str] | None) -> tuple[pa.Table, int]:
    """Read ``columns`` of one store file after checking its schema.

    Returns ``(table, inode)``.  Raises :class:`_Vanished` when the file is gone and
    :class:`_BadFile` (with the inode that was read) when it is unreadable.
    """
    try:
        fh = open(path, "rb")  # the open file pins the inode we read, see _quarantine_if_same
    except FileNotFoundError:
        raise _Vanished(path) from None
    with fh:
        inode = os.fstat(fh.fileno()).st_ino
        try:
            with pq.ParquetFile(fh) as pf:
                problem = _schema_problem(pf.schema_arrow)
                if problem:
                    raise _BadFile(problem, inode)
                table = pf.read(columns=list(columns) if columns else None, use_threads=False)
        except (_BadFile, MemoryError):
            raise
        except Exception as exc:
            raise _BadFile(f"unreadable: {type(exc).__name__}: {exc}", inode) from exc
    return table.replace_schema_metadata(None), inode


def _same_inode(path: Path, inode: int) -> bool:
    try:
        return os.stat(path).st_ino == inode
    except FileNotFoundError:
        return False


def _dedupe_keep_last(table: pa.Table) -> pa.Table:
    """One row per key (the last one in table order), sorted by key."""
    if table.num_rows == 0:
        return table
    order = pa.array(np.arange(table.num_rows, dtype=np.int64))
    last = (
        pa.table({"key": table.column("key"), "_row": order})
        .group_by("key", use_threads=False)
        .aggregate([("_row", "max")])
    )
    keep = last.sort_by("key").column("_row_max")
    return table.take(keep)


def _empty_table(columns: Sequence[str]) -> pa.Table:
    schema = pa.schema([POINT_SCHEMA.field(c) for c in columns])
    return schema.empty_table()


def _content_problem(table: pa.Table) -> str | None:
    keys = table.column("key")
    if keys.null_count or not pc.all(pc.match_substring_regex(keys, r"^[0-9a-f]{32}$")).as_py():
        return "holds a malformed point key"
    if pc.count_distinct(keys).as_py() != table.num_rows:
        return "holds a point key more than once"
    n_atoms = pc.add(pc.count_substring(table.column("symbols"), " "), 1)
    n_coords = pc.list_value_length(table.column("positions_angstrom"))
    if not pc.all(pc.equal(pc.multiply(n_atoms, 3), n_coords)).as_py():
        return "holds a point whose positions do not have 3 coordinates per atom"
    return None
