"""Compaction of a point store: fragments merged into part files, small parts merged, stale
temporary files removed, under a lock, without ever losing a record (the new part is durable
before anything it replaces is deleted)."""

from __future__ import annotations

import contextlib
import fcntl
import os
import time
import uuid
from pathlib import Path

import pyarrow as pa

from pesflow.formats.atomic import TMP_PREFIX, fsync_dir
from pesflow.store.files import _dedupe_keep_last, _same_inode, _utc_stamp, _write_parquet_atomic
from pesflow.store.records import (
    _PART_PREFIX,
    COLUMNS,
    POINT_SCHEMA,
    fragment_keys,
)

#: How long a job's end-of-job compaction waits for another holder of the lock (seconds):
#: two jobs of a run ending together each write their part in a fraction of a second;
#: skipping would leave a job's fragments for the run's end to read back one by one.
WRITTEN_LOCK_WAIT_S = 30.0


@contextlib.contextmanager
def _compaction_lock(store, wait_s: float = 0.0):
    """Yield True while holding ``locks/compact.lock``, False when another holder has it
    (after waiting up to ``wait_s`` seconds for it)."""
    fd = os.open(store.locks_dir / "compact.lock", os.O_RDWR | os.O_CREAT, 0o644)
    try:
        deadline = time.monotonic() + wait_s
        while True:
            try:
                fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
                break
            except BlockingIOError:
                if time.monotonic() >= deadline:
                    yield False
                    return
                time.sleep(0.02)
        try:
            yield True
        finally:
            fcntl.flock(fd, fcntl.LOCK_UN)
    finally:
        os.close(fd)


def _new_part_path(store, stamp: str | None = None) -> Path:
    return store.parts_dir / f"{_PART_PREFIX}{stamp or _utc_stamp()}-{uuid.uuid4().hex}.parquet"


def _write_part(store, table: pa.Table, path: Path) -> None:
    # cast() also restores the schema metadata (schema_version) dropped on reading.
    _write_parquet_atomic(table.sort_by("key").cast(POINT_SCHEMA), path, fsync=store.fsync)


def compact(
    store,
    min_fragments: int = 1,
    *,
    merge_parts: bool = True,
    small_part_bytes: int = 32 * 2**20,
    min_small_parts: int = 4,
    stale_tmp_s: float = 3600.0,
) -> dict:
    """Merge the current fragments into one new part file, then delete them.

    Inputs:
        min_fragments: do nothing unless at least this many fragments exist (default 1).
        merge_parts: also merge runs of small consecutive parts into one (default True).
        small_part_bytes: a part smaller than this is "small" (default 32 MiB).
        min_small_parts: merge a run only when it has at least this many parts (default 4).
        stale_tmp_s: remove dot-named temp files older than this many seconds, left by
            killed writers (default 3600 s; a live write takes milliseconds).

    Runs under ``locks/compact.lock``; when another process holds it, returns at once with
    ``stats["skipped"]`` saying so.  The new part is durable before any fragment is
    deleted, and a fragment rewritten meanwhile is kept.  Returns stats: ``skipped``
    (None or reason), ``fragments_compacted``, ``part`` (path or None),
    ``parts_merged``, ``merged_part``, ``temp_files_removed``, ``quarantined``.
    """
    store.last_quarantined = []
    stats = {
        "skipped": None,
        "fragments_compacted": 0,
        "part": None,
        "parts_merged": 0,
        "merged_part": None,
        "temp_files_removed": 0,
        "quarantined": [],
    }
    if not store._check_root():
        stats["skipped"] = "no store yet"
        return stats
    store._ensure_root()
    with _compaction_lock(store) as locked:
        if not locked:
            stats["skipped"] = "another process holds the compaction lock"
            return stats
        stats["temp_files_removed"] = _remove_stale_temp(store, stale_tmp_s)
        names = store._fragment_names()
        if len(names) >= max(min_fragments, 1):
            _compact_fragments(store, names, stats)
        if merge_parts:
            _merge_small_parts(store, small_part_bytes, max(min_small_parts, 2), stats)
    stats["quarantined"] = list(store.last_quarantined)
    return stats


def compact_written(store, written: list[tuple[list[dict], Path, int]]) -> dict:
    """Move the fragments one writer made into one new part, from the records it holds.

    ``written``: (records, path, inode) of each fragment written, as :class:`PointWriter`
    keeps them.  A job calls this at its end so that the run's final :func:`compact` has little
    left to read; nothing is read back from disk.  Same rules as :func:`compact`: under the
    compaction lock (waited for up to :data:`WRITTEN_LOCK_WAIT_S`, then skipped), the part
    is durable before a fragment goes, and a fragment replaced since it was written
    (another inode) stays.
    Returns stats: ``skipped`` (None or reason), ``fragments_compacted``, ``part``.
    """
    stats = {"skipped": None, "fragments_compacted": 0, "part": None}
    if not written:
        stats["skipped"] = "nothing written"
        return stats
    with _compaction_lock(store, WRITTEN_LOCK_WAIT_S) as locked:
        if not locked:
            stats["skipped"] = "another process holds the compaction lock"
            return stats
        latest = {}  # a key written twice: its last record
        for records, _, _ in written:
            latest.update((record["key"], record) for record in records)
        part = _new_part_path(store)
        records = list(latest.values())
        _write_part(store, pa.Table.from_pylist(records, schema=POINT_SCHEMA), part)
        stats["part"] = part
        removed = 0
        for _, path, inode in written:
            if _same_inode(path, inode):
                with contextlib.suppress(FileNotFoundError):
                    os.unlink(path)
                    removed += 1
        if store.fsync:
            fsync_dir(store.fragments_dir)
        stats["fragments_compacted"] = removed
    return stats


def _compact_fragments(store, names: list[str], stats: dict) -> None:
    tables, read = [], []
    for name in names:
        path = store.fragments_dir / name
        if fragment_keys(name) is None:
            store.quarantine(path, "fragment file name is not a point key")
            continue
        table, inode = store._read_or_quarantine(path, COLUMNS)
        if isinstance(table, pa.Table):
            tables.append(table)
            read.append((path, inode))
    if not tables:
        return
    part = _new_part_path(store)
    _write_part(store, pa.concat_tables(tables), part)
    stats["part"] = part
    # Only now that the part is durable may the fragments go.
    removed = 0
    for path, inode in read:
        if _same_inode(path, inode):  # a rewrite since we read it stays for next time
            with contextlib.suppress(FileNotFoundError):
                os.unlink(path)
                removed += 1
    if store.fsync:
        fsync_dir(store.fragments_dir)
    stats["fragments_compacted"] = removed


def _merge_small_parts(store, small_part_bytes: int, min_small_parts: int, stats: dict):
    names = store._part_names()
    sizes = {}
    for name in names:
        with contextlib.suppress(FileNotFoundError):
            sizes[name] = os.stat(store.parts_dir / name).st_size
    # Runs of consecutive small parts; a merged part takes the time stamp of the newest
    # part it replaces, so "newer part wins" still orders it against its neighbours.
    runs, run = [], []
    for name in names:
        if sizes.get(name, small_part_bytes) < small_part_bytes:
            run.append(name)
        else:
            runs.append(run)
            run = []
    runs.append(run)
    for run in runs:
        if len(run) < min_small_parts:
            continue
        tables, inputs = [], []
        for name in run:
            path = store.parts_dir / name
            table, _ = store._read_or_quarantine(path, COLUMNS)
            if isinstance(table, pa.Table):
                tables.append(table)
                inputs.append(path)
        if len(inputs) < 2:
            continue
        stamp = run[-1][len(_PART_PREFIX) :].split("-")[0]
        merged = _new_part_path(store, stamp)
        _write_part(store, _dedupe_keep_last(pa.concat_tables(tables)), merged)
        for path in inputs:
            with contextlib.suppress(FileNotFoundError):
                os.unlink(path)
        if store.fsync:
            fsync_dir(store.parts_dir)
        stats["parts_merged"] += len(inputs)
        stats["merged_part"] = merged


def _remove_stale_temp(store, stale_tmp_s: float) -> int:
    removed = 0
    now = time.time()
    for folder in (store.fragments_dir, store.parts_dir, store.quarantine_dir, store.root):
        try:
            entries = list(os.scandir(folder))
        except FileNotFoundError:
            continue
        for entry in entries:
            if not entry.name.startswith(TMP_PREFIX):
                continue
            with contextlib.suppress(FileNotFoundError):
                if now - entry.stat().st_mtime > stale_tmp_s:
                    os.unlink(entry.path)
                    removed += 1
    return removed
