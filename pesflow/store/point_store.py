"""Durable Parquet point store: one record per computed point, keyed by its content hash.

A point is one geometry at one level of theory.  Its record (:data:`POINT_SCHEMA`) is made
durable the moment it is computed, so a batch killed halfway loses only the point in flight
(a job writes through :class:`~pesflow.store.writer.PointWriter`, one point ahead of its
computation: the point being computed and the one being written).

Layout under the store root::

    ROOT/STORE.json                       {"format": "pesflow-store", "schema_version": 1}
    ROOT/fragments/<key>[+<key>...].parquet
                                          the records of one point (one geometry: a
                                          method or state each) per file, named by
                                          their keys in row order, written atomically
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
import json
import logging
import os
import socket
import uuid
from collections.abc import Iterable, Sequence
from pathlib import Path

import pyarrow as pa
import pyarrow.compute as pc

from pesflow.errors import StoreError
from pesflow.formats.atomic import atomic_write
from pesflow.store.files import (
    FRAGMENT_WRITE,
    _BadFile,
    _content_problem,
    _dedupe_keep_last,
    _empty_table,
    _magic_problem,
    _read_parquet,
    _same_inode,
    _utc_stamp,
    _Vanished,
    _write_parquet_atomic,
)
from pesflow.store.records import (
    _FRAGMENT_SUFFIX,
    _MAX_READ_PASSES,
    _PART_PREFIX,
    COLUMNS,
    MAX_FRAGMENT_KEYS,
    POINT_SCHEMA,
    SCHEMA_VERSION,
    STORE_FORMAT,
    _check_key,
    fragment_keys,
    fragment_name,
    is_point_key,
    make_record,
)

__all__ = [
    "POINT_SCHEMA",
    "SCHEMA_VERSION",
    "STORE_FORMAT",
    "PointStore",
    "is_point_key",
    "make_record",
]

log = logging.getLogger("pesflow.store")

_VANISHED = object()


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
        # fragment name -> (inode, keys) of the file that passed the cheap check
        self._fragment_ok: dict[str, tuple[int, list[str]]] = {}
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

    def write(self, record: dict) -> int:
        """Make one point record durable as ``fragments/<key>.parquet``.

        ``record`` is validated with :func:`make_record` (so defaults are filled).  The file
        is written to a dot-named temp file, fsynced, renamed atomically over any earlier
        fragment of the same key and the folder fsynced: a reader sees the old file or the new
        one, never a partial one.  Returns the fragment's inode.  Raises
        :class:`StoreError` when the write fails.
        """
        return self.write_checked(make_record(**record))

    def write_checked(self, record: dict) -> int:
        """:meth:`write` of a record that :func:`make_record` made already."""
        return self.write_point([record])[0][1]

    def write_point(self, records: Sequence[dict]) -> list[tuple[Path, int]]:
        """Make the records of one point (made by :func:`make_record`, distinct keys)
        durable in one fragment, ``fragments/<key>+<key>....parquet`` (up to
        :data:`~pesflow.store.records.MAX_FRAGMENT_KEYS` keys a file; more take more
        files), written as :meth:`write` writes one.  One file instead of one per record
        halves a cheap point's store cost.  Returns ``(path, inode)`` of each file."""
        self._ensure_root()
        out = []
        for start in range(0, len(records), MAX_FRAGMENT_KEYS):
            chunk = records[start : start + MAX_FRAGMENT_KEYS]
            path = self.fragments_dir / fragment_name(r["key"] for r in chunk)
            table = pa.Table.from_pylist(chunk, schema=POINT_SCHEMA)
            try:
                inode = _write_parquet_atomic(table, path, fsync=self.fsync, options=FRAGMENT_WRITE)
            except OSError as exc:
                raise StoreError(f"cannot write point {chunk[0]['key']} to {path}: {exc}") from exc
            out.append((path, inode))
        return out

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
                    cached = checked.get(name)
                    if cached is not None and cached[0] == inode:
                        names_keys = cached[1]
                    else:
                        names_keys = fragment_keys(name)
                        if names_keys is None:
                            bad.append((name, inode, "fragment file name is not a point key"))
                            continue
                        problem, inode = _magic_problem(name, dir_fd)
                        if inode is None:
                            continue  # compacted or quarantined meanwhile
                        if problem:
                            bad.append((name, inode, problem))
                            continue
                    ok[name] = (inode, names_keys)
                    keys.update(names_keys)
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
        if key in self._valid_fragment_keys():  # in a fragment of a whole point
            return True
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
                n
                for n in self._fragment_names()
                if wanted is None or not wanted.isdisjoint(fragment_keys(n) or ())
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
                    if wanted is not None and table.num_rows > 1:  # a point's other records
                        table = table.filter(pc.is_in(table.column("key"), pa.array(wanted)))
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
        keys = fragment_keys(path.name)
        if keys is None:
            return "fragment file name is not a point key"
        if table.num_rows != len(keys):
            return f"fragment holds {table.num_rows} rows, expected {len(keys)}"
        held = table.column("key").to_pylist()
        if held != keys:
            return (
                f"fragment holds key {held[0]!r}, not its file name"
                if len(held) == 1
                else (f"fragment holds keys {held}, not those of its file name")
            )
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

    def compact(self, min_fragments: int = 1, **options) -> dict:
        """Merge the fragments into a new part file; see :func:`pesflow.store.compaction.compact`
        for the options and the returned stats."""
        from pesflow.store.compaction import compact

        return compact(self, min_fragments, **options)

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
