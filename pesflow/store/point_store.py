"""Durable Parquet point store: one record per computed point, keyed by its content hash.

A point is one geometry at one level of theory.  Its record (:data:`POINT_SCHEMA`) is made
durable the moment it is computed, so a batch killed halfway loses only the point in flight.

Layout under the store root::

    ROOT/STORE.json                       {"format": "pesflow-store", "schema_version": 1}
    ROOT/fragments/<key>.parquet          one point per file, written atomically
    ROOT/parts/part-<utc>-<uuid>.parquet  compacted files, many records each
    ROOT/quarantine/                      corrupt files, each with a ``<name>.txt`` reason beside it
    ROOT/locks/compact.lock               fcntl lock held during compaction

Safety rules the code keeps:

- Every file is written to a dot-named temp file in its final folder, flushed, fsynced,
  renamed with :func:`os.replace` and the folder fsynced.  Listings skip dot-names, so a
  reader never sees a half-written file under a real name.
- Writing the same key again is allowed (an orphaned cluster job may finish late); the rename
  is atomic and the last writer wins.  Records under one key are identical by contract.
- Compaction writes the new part first and deletes the compacted fragments after, so a kill at
  any moment loses nothing: at worst a key is both in a part and a fragment, and reads keep one
  (fragments win over parts, newer parts over older ones).
- A file that cannot be read, or has the wrong schema, is moved to ``quarantine/`` with its
  reason and logged on the ``pesflow.store`` logger; it is never read as data and never makes a
  read fail.  Its points are simply missing, so the next run recomputes them.
- Readers list fragments *before* parts and retry when a file vanishes under them, so a
  concurrent compaction can never hide a record from :meth:`PointStore.load` or
  :meth:`PointStore.keys`.

Example::

    >>> store = PointStore("cache")            # nothing created yet
    >>> store.write(make_record(key="0" * 32, method="hf", basis="sto-3g", charge=0,
    ...     multiplicity=1, symbols="H H", positions_angstrom=[0, 0, 0, 0, 0, 0.74],
    ...     energy_hartree=-1.117, converged=True, scf_cycles=5, wall_s=0.1,
    ...     step_wall_s=0.1, s2=0.0, reference="rhf", engine="pyscf",
    ...     engine_version="2.14", settings_json="{}"))   # doctest: +SKIP
    >>> "0" * 32 in store.keys()                # doctest: +SKIP
    True
"""

from __future__ import annotations

import contextlib
import fcntl
import json
import logging
import math
import numbers
import os
import re
import socket
import time
import uuid
from collections.abc import Iterable, Sequence
from datetime import UTC, datetime
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from pesflow.errors import StoreError
from pesflow.formats.atomic import TMP_PREFIX, atomic_path, atomic_write, fsync_dir

__all__ = [
    "POINT_SCHEMA",
    "SCHEMA_VERSION",
    "STORE_FORMAT",
    "PointStore",
    "is_point_key",
    "make_record",
]

log = logging.getLogger("pesflow.store")

#: Version of :data:`POINT_SCHEMA`; a store written with another version is refused.
SCHEMA_VERSION = 1
#: The ``format`` value in ``STORE.json``.
STORE_FORMAT = "pesflow-store"

_VERSION_META = b"pesflow.schema_version"

#: One row per computed point.  Every column is required except the three marked nullable.
POINT_SCHEMA = pa.schema(
    [
        pa.field("key", pa.string(), nullable=False),
        pa.field("method", pa.string(), nullable=False),
        pa.field("basis", pa.string(), nullable=False),
        pa.field("charge", pa.int32(), nullable=False),
        pa.field("multiplicity", pa.int32(), nullable=False),
        pa.field("symbols", pa.string(), nullable=False),
        pa.field("positions_angstrom", pa.list_(pa.float64()), nullable=False),
        pa.field("energy_hartree", pa.float64(), nullable=False),
        pa.field("converged", pa.bool_(), nullable=False),
        pa.field("scf_cycles", pa.int32(), nullable=False),
        pa.field("wall_s", pa.float64(), nullable=False),
        pa.field("step_wall_s", pa.float64(), nullable=False),
        pa.field("s2", pa.float64(), nullable=False),
        pa.field("reference", pa.string(), nullable=False),
        pa.field("engine", pa.string(), nullable=False),
        pa.field("engine_version", pa.string(), nullable=False),
        pa.field("settings_json", pa.string(), nullable=False),
        pa.field("attempts_json", pa.string(), nullable=True),
        pa.field("extra_json", pa.string(), nullable=True),
        pa.field("error", pa.string(), nullable=True),
        pa.field("created_unix", pa.float64(), nullable=False),
    ],
    metadata={_VERSION_META: str(SCHEMA_VERSION).encode()},
)

COLUMNS = tuple(POINT_SCHEMA.names)

_KEY_RE = re.compile(r"[0-9a-f]{32}")
_PARQUET_MAGIC = b"PAR1"
_MIN_PARQUET_BYTES = 12  # head magic + 4-byte footer length + tail magic
_FRAGMENT_SUFFIX = ".parquet"
_PART_PREFIX = "part-"
_INT32_MIN, _INT32_MAX = -(2**31), 2**31 - 1
_STR_FIELDS = ("method", "basis", "symbols", "reference", "engine", "engine_version")
_INT_FIELDS = ("charge", "multiplicity", "scf_cycles")
_FLOAT_FIELDS = ("energy_hartree", "wall_s", "step_wall_s", "s2", "created_unix")
_JSON_FIELDS = ("settings_json", "attempts_json", "extra_json")
_NULLABLE = ("attempts_json", "extra_json", "error")
# Vanished-file retries in a read; each retry only happens when a concurrent compaction
# deleted a file between our listing and our read, so a handful is plenty.
_MAX_READ_PASSES = 20


def is_point_key(key) -> bool:
    """True when ``key`` is a point key: a string of exactly 32 lowercase hex digits."""
    return isinstance(key, str) and _KEY_RE.fullmatch(key) is not None


def _check_key(key) -> str:
    if not is_point_key(key):
        raise ValueError(f"point key must be 32 lowercase hex digits [0-9a-f]{{32}}, got {key!r}")
    return key


def _json_field(name, value, nullable):
    if value is None:
        if nullable:
            return None
        raise ValueError(f"record field {name!r} must not be None")
    if isinstance(value, dict | list):
        # Sorted keys: the same settings always serialise to the same text.
        return json.dumps(value, sort_keys=True, separators=(",", ":"))
    if not isinstance(value, str):
        raise TypeError(f"record field {name!r} must be JSON text, a dict or a list, got {value!r}")
    try:
        json.loads(value)
    except json.JSONDecodeError as exc:
        raise ValueError(f"record field {name!r} is not valid JSON: {exc}") from None
    return value


def make_record(**fields) -> dict:
    """Validate the fields of one point record and return it as a dict in schema order.

    Inputs (all keyword; see :data:`POINT_SCHEMA`):
        key: 32 lowercase hex digits (the point's content hash, computed elsewhere).
        method, basis, reference, engine, engine_version: non-empty text (basis ``""``
            for a level with a built-in basis set).
        charge, multiplicity, scf_cycles: integers (multiplicity >= 1, scf_cycles >= 0).
        symbols: element symbols separated by single spaces, e.g. ``"O H H"``.
        positions_angstrom: n_atoms*3 (or n_atoms x 3) Cartesian coordinates in Å, finite.
        energy_hartree: total energy in hartree; NaN for a failed point.
        converged: bool.
        wall_s, step_wall_s: wall time in seconds (>= 0 or NaN).
        s2: <S^2> of the reference (NaN when not defined).
        settings_json: engine settings as JSON text (a dict is serialised with sorted keys).
        attempts_json, extra_json: JSON text or None (default None).
        error: error text for a failed point, or None (default None).
        created_unix: seconds since the epoch (default: now).

    Returns a new dict with every column of :data:`POINT_SCHEMA`, values as plain Python
    types.  Raises ``TypeError``/``ValueError`` naming the offending field.
    """
    unknown = set(fields) - set(COLUMNS)
    if unknown:
        raise ValueError(f"unknown record field(s): {', '.join(sorted(unknown))}")
    fields = dict(fields)
    for name in _NULLABLE:
        fields.setdefault(name, None)
    fields.setdefault("created_unix", time.time())
    missing = [name for name in COLUMNS if name not in fields]
    if missing:
        raise ValueError(f"record is missing field(s): {', '.join(missing)}")

    out = {"key": _check_key(fields["key"])}
    for name in _STR_FIELDS:
        value = fields[name]
        # (basis is "" for a level with a built-in basis, e.g. tight binding)
        if not isinstance(value, str) or not (value.strip() or (name == "basis" and not value)):
            raise TypeError(f"record field {name!r} must be non-empty text, got {value!r}")
        out[name] = value
    for name in _INT_FIELDS:
        value = fields[name]
        if isinstance(value, bool | np.bool_) or not isinstance(value, numbers.Integral):
            raise TypeError(f"record field {name!r} must be an integer, got {value!r}")
        value = int(value)
        if not _INT32_MIN <= value <= _INT32_MAX:
            raise ValueError(f"record field {name!r} does not fit in int32: {value}")
        out[name] = value
    if out["multiplicity"] < 1:
        raise ValueError(f"multiplicity must be >= 1, got {out['multiplicity']}")
    if out["scf_cycles"] < 0:
        raise ValueError(f"scf_cycles must be >= 0, got {out['scf_cycles']}")
    for name in _FLOAT_FIELDS:
        value = fields[name]
        if isinstance(value, bool | np.bool_) or not isinstance(value, numbers.Real):
            raise TypeError(f"record field {name!r} must be a real number, got {value!r}")
        out[name] = float(value)
    for name in ("wall_s", "step_wall_s"):
        if out[name] < 0:
            raise ValueError(f"record field {name!r} must be >= 0 seconds, got {out[name]}")
    if not math.isfinite(out["created_unix"]):
        raise ValueError("record field 'created_unix' must be finite")
    converged = fields["converged"]
    if not isinstance(converged, bool | np.bool_):
        raise TypeError(f"record field 'converged' must be a bool, got {converged!r}")
    out["converged"] = bool(converged)

    symbols = out["symbols"].split(" ")
    if symbols != out["symbols"].split():
        raise ValueError(f"symbols must be separated by single spaces, got {out['symbols']!r}")
    try:
        positions = np.asarray(fields["positions_angstrom"], dtype=np.float64).ravel()
    except (TypeError, ValueError) as exc:
        raise TypeError(f"record field 'positions_angstrom' must be numbers: {exc}") from None
    if positions.size != 3 * len(symbols):
        raise ValueError(
            f"positions_angstrom has {positions.size} values; "
            f"{len(symbols)} atoms need {3 * len(symbols)}"
        )
    if not np.all(np.isfinite(positions)):
        raise ValueError("positions_angstrom must be finite")
    out["positions_angstrom"] = positions.tolist()

    for name in _JSON_FIELDS:
        out[name] = _json_field(name, fields[name], nullable=name in _NULLABLE)
    error = fields["error"]
    if error is not None and not isinstance(error, str):
        raise TypeError(f"record field 'error' must be text or None, got {error!r}")
    out["error"] = error
    return {name: out[name] for name in COLUMNS}


# ---------------------------------------------------------------- low-level file helpers


def _utc_stamp() -> str:
    return datetime.now(UTC).strftime("%Y%m%dT%H%M%S%fZ")


def _write_parquet_atomic(table: pa.Table, path: Path, *, fsync: bool) -> None:
    """Write ``table`` to ``path`` through a dot-named temp file in the same folder."""
    with atomic_path(path, fsync=fsync) as tmp:
        pq.write_table(table, tmp, compression="zstd")


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


# ---------------------------------------------------------------- the store


class PointStore:
    """The durable point store at ``root`` (created on first write, not here).

    Inputs:
        root: folder of the store (str or Path); may not exist yet.
        fsync: flush files and folders to disk on every write (default True).  Turn it off
            only for throw-away stores: without it a power cut can lose finished points.

    Raises :class:`StoreError` if ``root`` holds a store of another schema version or
    something that is not a point store.

    After each :meth:`keys`, :meth:`load`, :meth:`status_table`, :meth:`has`, :meth:`get`,
    :meth:`compact` or :meth:`verify`, ``last_quarantined`` lists the ``(path, reason)`` of
    every file that call moved to quarantine (each is also logged as a warning).
    """

    def __init__(self, root, *, fsync: bool = True):
        self.root = Path(root)
        self.fsync = fsync
        self.fragments_dir = self.root / "fragments"
        self.parts_dir = self.root / "parts"
        self.quarantine_dir = self.root / "quarantine"
        self.locks_dir = self.root / "locks"
        self.last_quarantined: list[tuple[Path, str]] = []
        self._checked = False
        self._ready = False
        # fragment name -> inode of the file that passed the cheap check
        self._fragment_ok: dict[str, int] = {}
        # part name -> ((size, mtime_ns), frozenset of keys)
        self._part_keys: dict[str, tuple[tuple, frozenset]] = {}
        self._check_root()

    def __repr__(self):
        return f"PointStore({str(self.root)!r})"

    # ------------------------------------------------------------ root and layout

    def exists(self) -> bool:
        """True when the store has been created (``ROOT/STORE.json`` exists)."""
        return (self.root / "STORE.json").is_file()

    def _check_root(self) -> bool:
        """Validate ``STORE.json`` if present; return whether the store exists."""
        if self._checked:
            return True
        marker = self.root / "STORE.json"
        try:
            text = marker.read_text(encoding="utf-8")
        except (FileNotFoundError, NotADirectoryError):
            if self.root.is_dir():
                # Dot-names are temp files of a process creating this store right now, and
                # STORE.json may have appeared since we looked: both belong to a store.
                foreign = {p.name for p in self.root.iterdir() if p.name[0] != "."} - {
                    "STORE.json",
                    "fragments",
                    "parts",
                    "quarantine",
                    "locks",
                }
                if foreign:
                    raise StoreError(
                        f"{self.root} is not a pesflow point store: no STORE.json and it holds "
                        f"{', '.join(sorted(foreign)[:5])}; choose an empty or new folder"
                    ) from None
            return False
        except OSError as exc:
            raise StoreError(f"cannot read {marker}: {exc}") from exc
        try:
            meta = json.loads(text)
        except json.JSONDecodeError as exc:
            raise StoreError(
                f"{marker} is not valid JSON ({exc}); is this a point store?"
            ) from None
        if not isinstance(meta, dict) or meta.get("format") != STORE_FORMAT:
            raise StoreError(f"{marker} does not describe a {STORE_FORMAT!r} (got {meta!r})")
        version = meta.get("schema_version")
        if version != SCHEMA_VERSION:
            raise StoreError(
                f"point store {self.root} has schema_version {version!r}, but this pesflow "
                f"reads and writes schema_version {SCHEMA_VERSION}; use a matching pesflow "
                f"or a new store folder"
            )
        self._checked = True
        return True

    def _ensure_root(self) -> None:
        """Create the store layout (idempotent, safe when several processes race)."""
        if self._ready:
            return
        try:
            if not self._check_root():
                self.root.mkdir(parents=True, exist_ok=True)
                meta = {"format": STORE_FORMAT, "schema_version": SCHEMA_VERSION}
                atomic_write(
                    self.root / "STORE.json", json.dumps(meta, indent=2) + "\n", fsync=self.fsync
                )
                self._checked = False
                self._check_root()
            for folder in (
                self.fragments_dir,
                self.parts_dir,
                self.quarantine_dir,
                self.locks_dir,
            ):
                folder.mkdir(exist_ok=True)
        except OSError as exc:
            raise StoreError(f"cannot create the point store at {self.root}: {exc}") from exc
        self._ready = True

    # ------------------------------------------------------------ writing

    def fragment_path(self, key: str) -> Path:
        """Path of the fragment file of ``key`` (whether or not it exists)."""
        return self.fragments_dir / f"{_check_key(key)}{_FRAGMENT_SUFFIX}"

    def write(self, record: dict) -> None:
        """Make one point record durable as ``fragments/<key>.parquet``.

        ``record`` is validated with :func:`make_record` (so defaults are filled).  The file
        is written to a dot-named temp file, fsynced, renamed atomically over any earlier
        fragment of the same key and the folder fsynced: a reader sees the old file or the new
        one, never a partial one.  Raises :class:`StoreError` when the write fails.
        """
        record = make_record(**record)
        self._ensure_root()
        table = pa.Table.from_pylist([record], schema=POINT_SCHEMA)
        path = self.fragment_path(record["key"])
        try:
            _write_parquet_atomic(table, path, fsync=self.fsync)
        except OSError as exc:
            raise StoreError(f"cannot write point {record['key']} to {path}: {exc}") from exc

    # ------------------------------------------------------------ listing

    def _list(self, folder: Path, predicate) -> list[str]:
        try:
            with os.scandir(folder) as it:
                return sorted(
                    e.name for e in it if not e.name.startswith(".") and predicate(e.name)
                )
        except FileNotFoundError:
            return []

    def _fragment_names(self) -> list[str]:
        return self._list(self.fragments_dir, lambda n: n.endswith(_FRAGMENT_SUFFIX))

    def _part_names(self) -> list[str]:
        return self._list(
            self.parts_dir, lambda n: n.startswith(_PART_PREFIX) and n.endswith(".parquet")
        )

    def _valid_fragment_keys(self) -> set[str]:
        """Keys of the fragments that pass the cheap check; quarantines the others.

        The check runs once per (file name, inode) on this instance: an atomic rewrite makes
        a new inode and is checked again, and damage made in place later is caught by the
        full read in :meth:`load` and :meth:`compact`.  This is the hot loop of planning
        (100,000 fragments), hence plain strings and ``dir_fd`` instead of Path objects.
        """
        keys = set()
        checked = self._fragment_ok
        ok = {}
        try:
            dir_fd = os.open(self.fragments_dir, os.O_RDONLY | os.O_DIRECTORY)
        except FileNotFoundError:
            return keys
        bad = []
        try:
            with os.scandir(dir_fd) as it:
                for entry in it:
                    name = entry.name
                    if name[0] == "." or not name.endswith(_FRAGMENT_SUFFIX):
                        continue
                    inode = entry.inode()
                    if checked.get(name) != inode:
                        if not is_point_key(name[:-8]):
                            bad.append((name, inode, "fragment file name is not a point key"))
                            continue
                        problem, inode = _magic_problem(name, dir_fd)
                        if inode is None:
                            continue  # compacted or quarantined meanwhile
                        if problem:
                            bad.append((name, inode, problem))
                            continue
                    ok[name] = inode
                    keys.add(name[:-8])
        finally:
            os.close(dir_fd)
        self._fragment_ok = ok
        for name, inode, problem in bad:
            self._quarantine_if_same(self.fragments_dir / name, inode, problem)
        return keys

    def _load_part_keys(self) -> dict[str, frozenset]:
        """Key set of every current part, reading only the ``key`` column of new parts."""
        for _ in range(_MAX_READ_PASSES):
            names = self._part_names()
            result = {}
            vanished = False
            for name in names:
                path = self.parts_dir / name
                try:
                    st = os.stat(path)
                except FileNotFoundError:
                    vanished = True
                    break
                sig = (st.st_size, st.st_mtime_ns)
                cached = self._part_keys.get(name)
                if cached is not None and cached[0] == sig:
                    result[name] = cached[1]
                    continue
                try:
                    table, inode = _read_parquet(path, ["key"])
                except _Vanished:
                    vanished = True
                    break
                except _BadFile as exc:
                    self._quarantine_if_same(path, exc.inode, exc.reason)
                    continue
                keys = frozenset(table.column("key").to_pylist())
                result[name] = keys
                self._part_keys[name] = (sig, keys)
            if not vanished:
                for stale in set(self._part_keys) - set(result):
                    del self._part_keys[stale]
                return result
        raise StoreError(f"parts in {self.parts_dir} keep changing while being read")

    def keys(self) -> set[str]:
        """Keys of every stored point, cheaply.

        Fragments are counted from their file names (plus an 8-byte truncation check, cached
        per file); parts by reading only their ``key`` column, cached per (name, size, mtime).
        Fragments that fail the truncation check are quarantined and not counted.
        """
        self.last_quarantined = []
        if not self._check_root():
            return set()
        # Fragments first, then parts: a fragment compacted meanwhile is then in a part we list.
        keys = self._valid_fragment_keys()
        for part_keys in self._load_part_keys().values():
            keys |= part_keys
        return keys

    def __contains__(self, key) -> bool:
        return is_point_key(key) and self.has(key)

    def __len__(self) -> int:
        return len(self.keys())

    def has(self, key: str) -> bool:
        """True when point ``key`` is stored (a sound-looking fragment or a row in a part)."""
        path = self.fragment_path(key)
        self.last_quarantined = []
        if not self._check_root():
            return False
        problem, inode = _magic_problem(path)
        if inode is not None:
            if problem is None:
                return True
            self._quarantine_if_same(path, inode, problem)
        return any(key in keys for keys in self._load_part_keys().values())

    # ------------------------------------------------------------ reading

    def load(self, keys: Iterable[str] | None = None, columns: Sequence[str] | None = None):
        """Every stored record (or those with ``keys``) as a :class:`pyarrow.Table`.

        Inputs:
            keys: point keys to return (default None: all).  Unknown keys are ignored.
            columns: column names to read (default None: all of :data:`POINT_SCHEMA`);
                ``key`` is always included, first.

        Returns one row per key, sorted by key.  When a key is in a part and a fragment
        (interrupted compaction, late rewrite) the fragment's row is kept.  Unreadable files
        are quarantined (see ``last_quarantined``), never returned.
        """
        self.last_quarantined = []
        cols = self._columns(columns)
        wanted = None
        if keys is not None:
            wanted = {_check_key(k) for k in ([keys] if isinstance(keys, str) else keys)}
        if not self._check_root():
            return _empty_table(cols)
        return self._load(cols, wanted)

    def _columns(self, columns):
        if columns is None:
            return list(COLUMNS)
        columns = [columns] if isinstance(columns, str) else list(columns)
        unknown = [c for c in columns if c not in COLUMNS]
        if unknown:
            raise ValueError(f"unknown column(s) {unknown}; the point schema has {list(COLUMNS)}")
        return ["key"] + [c for c in dict.fromkeys(columns) if c != "key"]

    def _load(self, cols: list[str], wanted: set[str] | None) -> pa.Table:
        part_tables: dict[str, pa.Table] = {}
        fragment_tables: dict[str, pa.Table] = {}
        for _ in range(_MAX_READ_PASSES):
            vanished = False
            # Fragments are listed before parts: see the module docstring.
            fragment_names = [
                n for n in self._fragment_names() if wanted is None or n[:-8] in wanted
            ]
            part_names = self._part_names()
            if wanted is not None:
                known = self._load_part_keys()
                part_names = [n for n in part_names if n not in known or known[n] & wanted]
            for name in part_names:
                if name in part_tables:
                    continue
                table, _ = self._read_or_quarantine(self.parts_dir / name, cols)
                if table is _VANISHED:
                    vanished = True
                elif table is not None:
                    if wanted is not None:
                        table = table.filter(pc.is_in(table.column("key"), pa.array(wanted)))
                    part_tables[name] = table
            for name in fragment_names:
                if name in fragment_tables:
                    continue
                table, _ = self._read_or_quarantine(self.fragments_dir / name, cols)
                if table is _VANISHED:
                    vanished = True
                elif table is not None:
                    fragment_tables[name] = table
            if not vanished:
                break
        else:
            raise StoreError(f"files in {self.root} keep vanishing while being read")
        tables = [part_tables[n] for n in sorted(part_tables)]
        tables += [fragment_tables[n] for n in sorted(fragment_tables)]
        if not tables:
            return _empty_table(cols)
        return _dedupe_keep_last(pa.concat_tables(tables))

    def _read_or_quarantine(self, path: Path, cols):
        """``(table, inode)`` of one file; table is None when the file was quarantined and
        ``_VANISHED`` when it is gone."""
        try:
            table, inode = _read_parquet(path, cols)
        except _Vanished:
            return _VANISHED, None
        except _BadFile as exc:
            self._quarantine_if_same(path, exc.inode, exc.reason)
            return None, exc.inode
        if path.parent == self.fragments_dir:
            problem = self._fragment_content_problem(path, table)
            if problem:
                self._quarantine_if_same(path, inode, problem)
                return None, inode
        return table, inode

    @staticmethod
    def _fragment_content_problem(path: Path, table: pa.Table) -> str | None:
        key = path.name[: -len(_FRAGMENT_SUFFIX)]
        if table.num_rows != 1:
            return f"fragment holds {table.num_rows} rows, expected 1"
        if table.column("key")[0].as_py() != key:
            return f"fragment holds key {table.column('key')[0].as_py()!r}, not its file name"
        return None

    def status_table(
        self, columns: Sequence[str] = ("key", "converged", "error", "wall_s", "method", "basis")
    ) -> pa.Table:
        """Only ``columns`` of every stored point (one row per key, sorted by key)."""
        return self.load(columns=columns)

    def get(self, key: str) -> dict | None:
        """The record of point ``key`` as a dict, or None when it is not stored."""
        _check_key(key)
        table = self.load(keys=[key])
        if table.num_rows == 0:
            return None
        return table.to_pylist()[0]

    def to_pandas(self, keys: Iterable[str] | None = None, columns: Sequence[str] | None = None):
        """:meth:`load` as a pandas DataFrame."""
        return self.load(keys=keys, columns=columns).to_pandas()

    # ------------------------------------------------------------ quarantine

    def quarantine(self, path, reason: str) -> Path | None:
        """Move ``path`` to ``quarantine/`` with a ``<name>.txt`` holding ``reason``.

        Returns the new path, or None when the file had already gone (another process moved
        or compacted it).  The move is logged as a warning and added to ``last_quarantined``.
        """
        path = Path(path)
        self._ensure_root()
        dest = (
            self.quarantine_dir / f"{path.stem}.{_utc_stamp()}-{uuid.uuid4().hex[:8]}{path.suffix}"
        )
        try:
            os.replace(path, dest)
        except FileNotFoundError:
            return None
        note = (
            f"original: {path}\nreason: {reason}\n"
            f"time_utc: {_utc_stamp()}\nhost: {socket.gethostname()}\npid: {os.getpid()}\n"
        )
        atomic_write(dest.with_name(dest.name + ".txt"), note, fsync=self.fsync)
        if path.parent == self.fragments_dir:
            self._fragment_ok.pop(path.name, None)
        self.last_quarantined.append((path, reason))
        log.warning("quarantined %s -> %s: %s", path, dest, reason)
        return dest

    def _quarantine_if_same(self, path: Path, inode: int, reason: str) -> None:
        # A writer may have atomically replaced a bad fragment with a good one since we read it.
        if _same_inode(path, inode):
            self.quarantine(path, reason)

    def quarantined(self) -> list[tuple[Path, str]]:
        """Every file in ``quarantine/`` with the reason recorded beside it."""
        out = []
        for name in self._list(self.quarantine_dir, lambda n: not n.endswith(".txt")):
            path = self.quarantine_dir / name
            reason = ""
            with contextlib.suppress(OSError):
                text = path.with_name(name + ".txt").read_text(encoding="utf-8")
                reason = next(
                    (
                        ln[len("reason: ") :]
                        for ln in text.splitlines()
                        if ln.startswith("reason: ")
                    ),
                    text.strip(),
                )
            out.append((path, reason))
        return out

    # ------------------------------------------------------------ maintenance

    @contextlib.contextmanager
    def _compaction_lock(self):
        """Yield True while holding ``locks/compact.lock``, False when another holder has it."""
        fd = os.open(self.locks_dir / "compact.lock", os.O_RDWR | os.O_CREAT, 0o644)
        try:
            try:
                fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
            except BlockingIOError:
                yield False
                return
            try:
                yield True
            finally:
                fcntl.flock(fd, fcntl.LOCK_UN)
        finally:
            os.close(fd)

    def _new_part_path(self, stamp: str | None = None) -> Path:
        return self.parts_dir / f"{_PART_PREFIX}{stamp or _utc_stamp()}-{uuid.uuid4().hex}.parquet"

    def _write_part(self, table: pa.Table, path: Path) -> None:
        # cast() also restores the schema metadata (schema_version) dropped on reading.
        _write_parquet_atomic(table.sort_by("key").cast(POINT_SCHEMA), path, fsync=self.fsync)

    def compact(
        self,
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
        self.last_quarantined = []
        stats = {
            "skipped": None,
            "fragments_compacted": 0,
            "part": None,
            "parts_merged": 0,
            "merged_part": None,
            "temp_files_removed": 0,
            "quarantined": [],
        }
        if not self._check_root():
            stats["skipped"] = "no store yet"
            return stats
        self._ensure_root()
        with self._compaction_lock() as locked:
            if not locked:
                stats["skipped"] = "another process holds the compaction lock"
                return stats
            stats["temp_files_removed"] = self._remove_stale_temp(stale_tmp_s)
            names = self._fragment_names()
            if len(names) >= max(min_fragments, 1):
                self._compact_fragments(names, stats)
            if merge_parts:
                self._merge_small_parts(small_part_bytes, max(min_small_parts, 2), stats)
        stats["quarantined"] = list(self.last_quarantined)
        return stats

    def _compact_fragments(self, names: list[str], stats: dict) -> None:
        tables, read = [], []
        for name in names:
            path = self.fragments_dir / name
            if not is_point_key(name[: -len(_FRAGMENT_SUFFIX)]):
                self.quarantine(path, "fragment file name is not a point key")
                continue
            table, inode = self._read_or_quarantine(path, COLUMNS)
            if isinstance(table, pa.Table):
                tables.append(table)
                read.append((path, inode))
        if not tables:
            return
        part = self._new_part_path()
        self._write_part(pa.concat_tables(tables), part)
        stats["part"] = part
        # Only now that the part is durable may the fragments go.
        removed = 0
        for path, inode in read:
            if _same_inode(path, inode):  # a rewrite since we read it stays for next time
                with contextlib.suppress(FileNotFoundError):
                    os.unlink(path)
                    removed += 1
        if self.fsync:
            fsync_dir(self.fragments_dir)
        stats["fragments_compacted"] = removed

    def _merge_small_parts(self, small_part_bytes: int, min_small_parts: int, stats: dict):
        names = self._part_names()
        sizes = {}
        for name in names:
            with contextlib.suppress(FileNotFoundError):
                sizes[name] = os.stat(self.parts_dir / name).st_size
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
                path = self.parts_dir / name
                table, _ = self._read_or_quarantine(path, COLUMNS)
                if isinstance(table, pa.Table):
                    tables.append(table)
                    inputs.append(path)
            if len(inputs) < 2:
                continue
            stamp = run[-1][len(_PART_PREFIX) :].split("-")[0]
            merged = self._new_part_path(stamp)
            self._write_part(_dedupe_keep_last(pa.concat_tables(tables)), merged)
            for path in inputs:
                with contextlib.suppress(FileNotFoundError):
                    os.unlink(path)
            if self.fsync:
                fsync_dir(self.parts_dir)
            stats["parts_merged"] += len(inputs)
            stats["merged_part"] = merged

    def _remove_stale_temp(self, stale_tmp_s: float) -> int:
        removed = 0
        now = time.time()
        for folder in (self.fragments_dir, self.parts_dir, self.quarantine_dir, self.root):
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

    def verify(self, *, quarantine: bool = False) -> list[tuple[Path, str]]:
        """Read every file completely and return ``(path, reason)`` for each bad one.

        Checks beyond :meth:`load`: every key is well formed, a part holds each key once,
        and each point has three coordinates per atom.  With ``quarantine=True`` the bad
        files are also moved to quarantine (default False: only report).
        """
        self.last_quarantined = []
        bad: list[tuple[Path, str]] = []
        if not self._check_root():
            return bad
        files = [self.fragments_dir / n for n in self._fragment_names()]
        files += [self.parts_dir / n for n in self._part_names()]
        for path in files:
            try:
                table, _ = _read_parquet(path, None)
            except _Vanished:
                continue
            except _BadFile as exc:
                bad.append((path, exc.reason))
                continue
            problem = _content_problem(table)
            if problem is None and path.parent == self.fragments_dir:
                problem = self._fragment_content_problem(path, table)
            if problem:
                bad.append((path, problem))
        if quarantine:
            for path, reason in bad:
                self.quarantine(path, reason)
        return bad


_VANISHED = object()


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
