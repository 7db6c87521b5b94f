"""Tests of the Parquet point store: round trip, atomicity, quarantine, compaction, schema.

The reference for every check is the record that was written and pyarrow's own Parquet
reader: a record must come back exactly as written, and a damaged file must never come back.
"""

import hashlib
import json
import logging
import math
import os
import shutil
import subprocess
import sys
import textwrap
import time

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from pesflow.errors import StoreError
from pesflow.store.point_store import POINT_SCHEMA, SCHEMA_VERSION, PointStore, make_record
from pesflow.store.records import MAX_FRAGMENT_KEYS, fragment_keys, fragment_name


def point_key(label) -> str:
    """A 32-hex-digit key; the store treats keys as opaque, so any digest of the right form."""
    return hashlib.md5(str(label).encode()).hexdigest()


def point_record(i: int, **overrides) -> dict:
    """A complete, varied record: an H-F stretch point, every third one a failed point."""
    failed = i % 3 == 2
    r_angstrom = 0.7 + 0.01 * i
    fields = dict(
        key=point_key(f"hf-stretch-{i}"),
        method="ccsd(t)" if i % 2 else "hf",
        basis="cc-pvdz",
        charge=0,
        multiplicity=1,
        symbols="F H",
        positions_angstrom=[0.0, 0.0, 0.0, 0.0, 0.0, r_angstrom],
        energy_hartree=math.nan if failed else -100.0 - 1e-3 * i,
        converged=not failed,
        scf_cycles=50 if failed else 8 + i % 5,
        wall_s=0.25 + i * 1e-3,
        step_wall_s=0.125,
        s2=0.0,
        reference="rhf",
        engine="pyscf",
        engine_version="2.14.0",
        settings_json=json.dumps({"conv_tol": 1e-10, "max_cycle": 50}, sort_keys=True),
        attempts_json=json.dumps([{"level_shift": 0.0}, {"level_shift": 0.5}]) if failed else None,
        extra_json=json.dumps({"scan": "stretch", "index": i}) if i % 4 == 0 else None,
        error="ConvergenceError: SCF not converged after 2 attempts" if failed else None,
        created_unix=1_700_000_000.0 + i,
    )
    fields.update(overrides)
    return make_record(**fields)


def records_table(records) -> pa.Table:
    """What load() must return for these records: one row per key, sorted by key."""
    return pa.Table.from_pylist(sorted(records, key=lambda r: r["key"]), schema=POINT_SCHEMA)


def assert_records_equal(got: dict, want: dict):
    assert got.keys() == want.keys()
    for name, value in want.items():
        if isinstance(value, float) and math.isnan(value):
            assert math.isnan(got[name]), name
        else:
            assert got[name] == value, name


def assert_tables_equal(got: pa.Table, want: pa.Table):
    """Same columns, types and rows; NaN equals NaN (failed points), unlike Table.equals."""
    assert got.schema.equals(want.schema, check_metadata=False), (got.schema, want.schema)
    assert got.num_rows == want.num_rows
    for got_row, want_row in zip(got.to_pylist(), want.to_pylist(), strict=True):
        assert_records_equal(got_row, want_row)


def fragment_files(store):
    return sorted(p.name for p in store.fragments_dir.iterdir())


def quarantine_notes(store):
    """{quarantined file name: reason text} from the files in quarantine/."""
    out = {}
    for path in store.quarantine_dir.iterdir():
        if path.name.endswith(".txt"):
            out[path.name[:-4]] = path.read_text()
    return out


# ------------------------------------------------------------------ records


def test_make_record_fills_nullable_defaults_and_normalises_types():
    rec = point_record(0, positions_angstrom=np.array([[0, 0, 0], [0, 0, 0.9168]]))
    assert list(rec) == POINT_SCHEMA.names
    assert rec["attempts_json"] is None and rec["error"] is None
    assert rec["positions_angstrom"] == [0.0, 0.0, 0.0, 0.0, 0.0, 0.9168]
    # A dict is serialised deterministically (sorted keys) so equal settings give equal text.
    rec = point_record(0, settings_json={"max_cycle": 50, "conv_tol": 1e-10})
    assert rec["settings_json"] == '{"conv_tol":1e-10,"max_cycle":50}'
    bare = {k: v for k, v in point_record(1).items() if k not in ("attempts_json", "created_unix")}
    before = time.time()
    rec = make_record(**bare)
    assert rec["attempts_json"] is None
    assert before <= rec["created_unix"] <= time.time()


@pytest.mark.parametrize(
    ("override", "error", "match"),
    [
        ({"key": "ABCDEF" * 5 + "00"}, ValueError, "32 lowercase hex"),
        ({"key": "0" * 31}, ValueError, "32 lowercase hex"),
        ({"positions_angstrom": [0.0, 0.0, 0.0]}, ValueError, "2 atoms need 6"),
        ({"positions_angstrom": [0, 0, 0, 0, 0, math.inf]}, ValueError, "finite"),
        ({"symbols": "F  H"}, ValueError, "single spaces"),
        ({"charge": 0.0}, TypeError, "charge"),
        ({"multiplicity": True}, TypeError, "multiplicity"),
        ({"multiplicity": 0}, ValueError, "multiplicity"),
        ({"scf_cycles": 2**31}, ValueError, "int32"),
        ({"converged": 1}, TypeError, "converged"),
        ({"energy_hartree": "-100.0"}, TypeError, "energy_hartree"),
        ({"settings_json": "{not json"}, ValueError, "settings_json"),
        ({"settings_json": None}, ValueError, "settings_json"),
        ({"method": ""}, TypeError, "method"),
        ({"error": 3}, TypeError, "error"),
        ({"r_angstrom": 1.0}, ValueError, "unknown record field"),
    ],
)
def test_make_record_rejects_bad_fields(override, error, match):
    with pytest.raises(error, match=match):
        point_record(2, **override)


def test_make_record_names_missing_fields():
    fields = point_record(0)
    del fields["basis"], fields["engine"]
    with pytest.raises(ValueError, match="missing field.*basis, engine"):
        make_record(**fields)


# ------------------------------------------------------------------ round trip


def test_round_trip_all_fields(tmp_path):
    store = PointStore(tmp_path / "store")
    assert not store.exists() and not store.root.exists()  # nothing is created by reading
    assert store.keys() == set() and store.load().num_rows == 0 and store.get(point_key(0)) is None
    assert not store.root.exists()

    records = [point_record(i) for i in range(6)]  # converged, failed, with/without extras
    for rec in records:
        store.write(rec)
    assert store.exists()
    assert json.loads((store.root / "STORE.json").read_text()) == {
        "format": "pesflow-store",
        "schema_version": SCHEMA_VERSION,
    }

    table = store.load()
    assert table.schema.equals(POINT_SCHEMA, check_metadata=False)
    assert_tables_equal(table, records_table(records))
    for rec in records:
        assert store.has(rec["key"])
        assert rec["key"] in store
        assert_records_equal(store.get(rec["key"]), rec)
    assert store.keys() == {r["key"] for r in records}
    assert not store.has(point_key("never written"))
    assert store.get(point_key("never written")) is None

    # Each fragment is a plain Parquet file that pyarrow alone reads back to the record.
    alone = pq.read_table(store.fragment_path(records[2]["key"]))
    assert_records_equal(alone.to_pylist()[0], records[2])

    frame = store.to_pandas()
    assert len(frame) == 6 and list(frame.columns) == POINT_SCHEMA.names


def test_load_selects_keys_and_columns(tmp_path):
    store = PointStore(tmp_path)
    records = [point_record(i) for i in range(10)]
    for rec in records:
        store.write(rec)
    store.compact()
    store.write(point_record(10))  # one record in a fragment, the rest in a part
    wanted = [records[3]["key"], records[7]["key"], point_record(10)["key"], point_key("absent")]
    table = store.load(keys=wanted, columns=["energy_hartree", "converged"])
    assert table.column_names == ["key", "energy_hartree", "converged"]
    want = records_table([records[3], records[7], point_record(10)])
    assert_tables_equal(table, want.select(["key", "energy_hartree", "converged"]))

    status = store.status_table()
    assert status.column_names == ["key", "converged", "error", "wall_s", "method", "basis"]
    assert_tables_equal(
        status, records_table(records + [point_record(10)]).select(status.column_names)
    )
    with pytest.raises(ValueError, match="unknown column"):
        store.load(columns=["r_angstrom"])


def test_rewriting_a_key_is_atomic_and_last_writer_wins(tmp_path):
    store = PointStore(tmp_path)
    first = point_record(2)  # a failed point ...
    again = point_record(2, energy_hartree=-100.5, converged=True, error=None)  # ... redone
    store.write(first)
    store.write(first)  # an orphaned cluster job finishing late: same key, same content
    assert fragment_files(store) == [f"{first['key']}.parquet"]
    store.write(again)
    assert fragment_files(store) == [f"{first['key']}.parquet"]  # no temp file left behind
    assert_records_equal(store.get(first["key"]), again)


# ------------------------------------------------------------------ atomicity and damage


def test_temp_files_of_killed_writers_are_ignored(tmp_path):
    store = PointStore(tmp_path)
    good = point_record(0)
    store.write(good)
    key = point_record(1)["key"]
    # A writer killed mid-write leaves its dot-named temp file, possibly half written.
    data = store.fragment_path(good["key"]).read_bytes()
    (store.fragments_dir / f".tmp-{key}-deadbeef.parquet").write_bytes(data[: len(data) // 2])
    (store.parts_dir / ".tmp-part-20240101T000000000000Z-x.parquet").write_bytes(data[:10])
    assert store.keys() == {good["key"]}
    assert_tables_equal(store.load(), records_table([good]))
    assert not store.has(key)
    assert list(store.quarantine_dir.iterdir()) == []
    # A fresh temp file may belong to a live writer; only stale ones are cleaned up.
    assert store.compact()["temp_files_removed"] == 0
    old = time.time() - 7200
    os.utime(store.fragments_dir / f".tmp-{key}-deadbeef.parquet", (old, old))
    assert store.compact()["temp_files_removed"] == 1
    assert_tables_equal(store.load(), records_table([good]))


@pytest.mark.parametrize("detector", ["keys", "load", "has", "get", "compact"])
def test_truncated_fragment_is_quarantined_not_returned(tmp_path, caplog, detector):
    store = PointStore(tmp_path)
    records = [point_record(i) for i in range(4)]
    for rec in records:
        store.write(rec)
    victim = records[1]["key"]
    path = store.fragment_path(victim)
    os.truncate(path, path.stat().st_size // 2)  # what a crash without atomic rename leaves

    with caplog.at_level(logging.WARNING, logger="pesflow.store"):
        if detector == "keys":
            assert store.keys() == {r["key"] for r in records} - {victim}
        elif detector == "load":
            assert_tables_equal(store.load(), records_table(records[:1] + records[2:]))
        elif detector == "has":
            assert not store.has(victim)
        elif detector == "get":
            assert store.get(victim) is None
        else:
            assert store.compact()["fragments_compacted"] == 3
    assert [p for p, _ in store.last_quarantined] == [path]
    assert (
        "truncated" in store.last_quarantined[0][1] or "unreadable" in store.last_quarantined[0][1]
    )
    assert any(victim in rec.getMessage() for rec in caplog.records if rec.name == "pesflow.store")
    assert not path.exists()
    notes = quarantine_notes(store)
    assert len(notes) == 1
    ((moved, reason),) = notes.items()
    assert moved.startswith(victim) and (store.quarantine_dir / moved).exists()
    assert str(path) in reason and store.last_quarantined[0][1] in reason
    assert store.quarantined()[0][1] == store.last_quarantined[0][1]
    # Afterwards the store is simply without that point: it will be recomputed.
    assert_tables_equal(store.load(), records_table(records[:1] + records[2:]))
    assert store.last_quarantined == []


def test_tiny_fragment_is_caught_by_the_cheap_check(tmp_path):
    store = PointStore(tmp_path)
    store.write(point_record(0))
    key = point_record(1)["key"]
    store.fragment_path(key).write_bytes(b"PAR1PAR1")  # right magic, too short for a footer
    assert store.keys() == {point_record(0)["key"]}
    assert "8 bytes" in store.last_quarantined[0][1]


def test_garbage_with_correct_magic_is_caught_by_load(tmp_path):
    store = PointStore(tmp_path)
    good = point_record(0)
    store.write(good)
    key = point_record(1)["key"]
    rng = np.random.default_rng(7)
    store.fragment_path(key).write_bytes(b"PAR1" + rng.bytes(300) + b"PAR1")
    # The cheap check cannot tell (only magic and size); the full read in load() does.
    assert store.keys() == {good["key"], key}
    assert_tables_equal(store.load(), records_table([good]))
    assert store.last_quarantined[0][0] == store.fragment_path(key)
    assert "unreadable" in store.last_quarantined[0][1]
    assert store.keys() == {good["key"]}


def test_wrong_schema_and_wrong_key_fragments_are_quarantined(tmp_path):
    store = PointStore(tmp_path)
    good = point_record(0)
    store.write(good)
    # A Parquet file of another layout under a point's name.
    foreign_key = point_key("foreign")
    pq.write_table(
        pa.table({"key": [foreign_key], "energy": [1.0]}), store.fragment_path(foreign_key)
    )
    # A sound fragment copied under another key's name: its content is not that point.
    copied_key = point_key("copied")
    shutil.copy(store.fragment_path(good["key"]), store.fragment_path(copied_key))
    assert_tables_equal(store.load(), records_table([good]))
    reasons = dict(store.last_quarantined)
    assert "wrong schema" in reasons[store.fragment_path(foreign_key)]
    assert "not its file name" in reasons[store.fragment_path(copied_key)]
    assert fragment_files(store) == [f"{good['key']}.parquet"]


def test_verify_reports_damage_without_moving_by_default(tmp_path):
    store = PointStore(tmp_path)
    for i in range(5):
        store.write(point_record(i))
    store.compact()
    assert store.verify() == []
    # A part whose rows break the contract, written past make_record with pyarrow directly.
    bad_row = dict(point_record(9), positions_angstrom=[0.0, 0.0, 0.0])
    bad_part = store.parts_dir / "part-20240101T000000000000Z-bad.parquet"
    pq.write_table(pa.Table.from_pylist([bad_row], schema=POINT_SCHEMA), bad_part)
    report = store.verify()
    assert report == [
        (bad_part, "holds a point whose positions do not have 3 coordinates per atom")
    ]
    assert bad_part.exists()
    store.verify(quarantine=True)
    assert not bad_part.exists() and len(quarantine_notes(store)) == 1


# ------------------------------------------------------------------ compaction


def test_compaction_of_200_fragments_keeps_every_record(tmp_path):
    store = PointStore(tmp_path)
    records = [point_record(i) for i in range(200)]
    for rec in records:
        store.write(rec)
    before = store.load()
    assert_tables_equal(before, records_table(records))

    stats = store.compact()
    assert stats["skipped"] is None and stats["fragments_compacted"] == 200
    assert fragment_files(store) == []
    parts = sorted(store.parts_dir.iterdir())
    assert parts == [stats["part"]]
    assert pq.read_metadata(parts[0]).num_rows == 200
    assert_tables_equal(store.load(), before)
    assert_tables_equal(PointStore(tmp_path).load(), before)  # a fresh instance, no caches
    assert store.keys() == {r["key"] for r in records}
    assert all(store.has(r["key"]) for r in records[::37])
    assert_records_equal(store.get(records[101]["key"]), records[101])
    assert store.compact()["part"] is None  # nothing left to do


def test_interrupted_compaction_gives_each_key_once(tmp_path):
    store = PointStore(tmp_path)
    records = [point_record(i) for i in range(60)]
    for rec in records:
        store.write(rec)
    saved = tmp_path / "saved"
    shutil.copytree(store.fragments_dir, saved)
    store.compact()
    # Killed after the part was made durable but before the fragments were deleted.
    for path in saved.iterdir():
        shutil.copy(path, store.fragments_dir / path.name)
    # ... and killed while writing a second part: a temp file in parts/.
    part = next(store.parts_dir.iterdir())
    (store.parts_dir / f".tmp-{part.stem}-0.parquet").write_bytes(part.read_bytes()[:100])

    want = records_table(records)
    fresh = PointStore(tmp_path)
    assert len(fresh.keys()) == 60
    assert_tables_equal(fresh.load(), want)
    assert fresh.compact()["fragments_compacted"] == 60  # the rerun finishes the job
    assert fragment_files(fresh) == []
    assert_tables_equal(fresh.load(), want)
    assert fresh.last_quarantined == [] and list(fresh.quarantine_dir.iterdir()) == []


def test_newer_record_wins_through_compaction_and_part_merging(tmp_path):
    store = PointStore(tmp_path)
    failed = point_record(2)
    redone = point_record(2, energy_hartree=-100.002, converged=True, error=None, scf_cycles=12)
    others = [point_record(i) for i in range(3, 12)]
    store.write(failed)
    store.compact(merge_parts=False)
    store.write(redone)  # fragment (newer) and part (older) now hold the key
    assert_records_equal(store.get(redone["key"]), redone)
    for i, rec in enumerate(others):  # several compactions: several small parts
        store.write(rec)
        stats = store.compact(merge_parts=False)
        if i == 0:
            assert stats["fragments_compacted"] == 2
    assert len(list(store.parts_dir.iterdir())) == 10
    assert_records_equal(store.get(redone["key"]), redone)  # the newer part wins

    stats = store.compact(min_small_parts=4)
    assert stats["parts_merged"] == 10
    assert [p.name for p in store.parts_dir.iterdir()] == [stats["merged_part"].name]
    assert_tables_equal(store.load(), records_table([redone, *others]))


def test_compaction_waits_for_nobody_when_another_process_holds_the_lock(tmp_path):
    store = PointStore(tmp_path)
    records = [point_record(i) for i in range(5)]
    for rec in records:
        store.write(rec)
    holder = textwrap.dedent(
        f"""
        import fcntl, sys
        fh = open({str(store.locks_dir / "compact.lock")!r}, "a")
        fcntl.flock(fh, fcntl.LOCK_EX)
        print("locked", flush=True)
        sys.stdin.read()
        """
    )
    proc = subprocess.Popen(
        [sys.executable, "-c", holder], stdin=subprocess.PIPE, stdout=subprocess.PIPE, text=True
    )
    try:
        assert proc.stdout.readline().strip() == "locked"
        start = time.monotonic()
        stats = store.compact()
        assert time.monotonic() - start < 5  # returned instead of waiting for the lock
        assert stats["skipped"] == "another process holds the compaction lock"
        assert stats["part"] is None
        assert len(fragment_files(store)) == 5 and list(store.parts_dir.iterdir()) == []
    finally:
        proc.stdin.close()
        proc.wait(timeout=30)
        proc.stdout.close()
    assert store.compact()["fragments_compacted"] == 5  # released: compaction runs
    assert_tables_equal(store.load(), records_table(records))


# ------------------------------------------------------------------ store folder


@pytest.mark.parametrize(
    ("meta", "match"),
    [
        ({"format": "pesflow-store", "schema_version": 2}, r"schema_version 2.*schema_version 1"),
        ({"format": "pesflow-store"}, r"schema_version None"),
        ({"format": "something-else", "schema_version": 1}, "does not describe"),
    ],
)
def test_store_of_another_schema_version_is_refused(tmp_path, meta, match):
    (tmp_path / "store").mkdir()
    (tmp_path / "store" / "STORE.json").write_text(json.dumps(meta))
    with pytest.raises(StoreError, match=match):
        PointStore(tmp_path / "store")


def test_folder_that_is_not_a_store_is_refused(tmp_path):
    (tmp_path / "results").mkdir()
    (tmp_path / "results" / "notes.txt").write_text("my own files")
    with pytest.raises(StoreError, match="not a pesflow point store"):
        PointStore(tmp_path / "results")
    (tmp_path / "broken").mkdir()
    (tmp_path / "broken" / "STORE.json").write_text("{")
    with pytest.raises(StoreError, match="not valid JSON"):
        PointStore(tmp_path / "broken")


def test_unwritable_store_raises_store_error(tmp_path):
    (tmp_path / "file").write_text("")
    store = PointStore(tmp_path / "file" / "store")  # parent is a file: cannot be created
    with pytest.raises(StoreError, match="cannot create"):
        store.write(point_record(0))


def test_keys_of_20000_fragments_and_a_part(tmp_path):
    """Correctness at planning scale; the timing lives in benchmarks/, not here."""
    store = PointStore(tmp_path, fsync=False)
    in_part = [point_record(i) for i in range(50)]
    for rec in in_part:
        store.write(rec)
    store.compact()
    # Fast path: the bytes of one real fragment under 20,000 names.  keys() reads names and
    # the 8 magic bytes only, so content under the wrong name is invisible to it (load()
    # would quarantine these: see test_wrong_schema_and_wrong_key_fragments_are_quarantined).
    store.write(point_record(50))
    data = store.fragment_path(point_record(50)["key"]).read_bytes()
    many = {point_key(f"many-{i}") for i in range(20_000)}
    for key in many:
        with open(store.fragments_dir / f"{key}.parquet", "wb") as fh:
            fh.write(data)
    want = many | {r["key"] for r in in_part} | {point_record(50)["key"]}
    assert store.keys() == want
    assert store.keys() == want  # second call from the per-instance caches
    # A damaged file appearing later is checked although its neighbours are cached.
    late = point_key("late")
    (store.fragments_dir / f"{late}.parquet").write_bytes(data[: len(data) // 2])
    assert store.keys() == want
    assert [p.name for p, _ in store.last_quarantined] == [f"{late}.parquet"]


# ---------------------------------------------------------------- fragments of a point


def test_fragment_names_round_trip_and_refuse_what_is_not_a_key_list():
    keys = [point_key(f"k{i}") for i in range(3)]
    name = fragment_name(keys)
    assert name == "+".join(keys) + ".parquet"
    assert fragment_keys(name) == keys
    assert fragment_keys(keys[0] + ".parquet") == [keys[0]]  # a one-record fragment
    for bad in (
        "+".join(keys) + ".txt",
        keys[0] + "+" + keys[0] + ".parquet",  # one key twice
        keys[0] + "+XYZ.parquet",
        "+".join(point_key(f"m{i}") for i in range(MAX_FRAGMENT_KEYS + 1)) + ".parquet",
    ):
        assert fragment_keys(bad) is None, bad
    with pytest.raises(ValueError):
        fragment_name([])
    # the longest name fits the 255-byte file-name limit of ext4, XFS and NFS, also as the
    # temporary name it is written under (".tmp-<name stem>-<32 hex digits><suffix>")
    longest = fragment_name([point_key(f"n{i}") for i in range(MAX_FRAGMENT_KEYS)])
    assert len(".tmp-") + len(longest) + 33 <= 255


def test_a_point_of_many_records_is_stored_whole_and_read_by_key(tmp_path):
    store = PointStore(tmp_path / "store")
    records = [make_record(**point_record(i)) for i in range(MAX_FRAGMENT_KEYS + 2)]
    written = store.write_point(records)
    assert [p.name for p, _ in written] == [
        fragment_name(r["key"] for r in records[:MAX_FRAGMENT_KEYS]),
        fragment_name(r["key"] for r in records[MAX_FRAGMENT_KEYS:]),
    ]
    assert store.keys() == {r["key"] for r in records}
    second = records[1]["key"]  # not the first key of its file's name
    assert store.has(second) and second in store
    only = store.load(keys=[second]).to_pylist()
    assert len(only) == 1
    assert_records_equal(only[0], records[1])
    got = {row["key"]: row for row in store.load().to_pylist()}
    for record in records:
        assert_records_equal(got[record["key"]], record)
    assert store.verify() == []
    stats = store.compact()
    assert stats["fragments_compacted"] == 2 and fragment_files(store) == []
    assert store.keys() == {r["key"] for r in records}


def test_a_point_fragment_whose_rows_differ_from_its_name_is_quarantined(tmp_path):
    store = PointStore(tmp_path / "store")
    a, b, c = (make_record(**point_record(i)) for i in range(3))
    store.write_point([a, b])
    real = store.fragments_dir / fragment_name([a["key"], b["key"]])
    wrong = store.fragments_dir / fragment_name([a["key"], c["key"]])  # rows hold a and b
    real.rename(wrong)
    assert store.load().num_rows == 0
    assert [(p.name, r) for p, r in store.last_quarantined] == [
        (wrong.name, f"fragment holds keys {[a['key'], b['key']]}, not those of its file name")
    ]
