"""The job's background point writer and the end-of-job compaction from memory.

The checks are against the store's own reading path (PointStore.load / keys / verify) and
pyarrow reading the files back: what the writer reports as written is what is on disk.
"""

from __future__ import annotations

import signal
import subprocess
import sys
import textwrap
from pathlib import Path

import pyarrow.parquet as pq
import pytest

from pesflow.errors import StoreError
from pesflow.store.point_store import PointStore
from pesflow.store.writer import PointWriter
from tests.unit.test_store import assert_records_equal, fragment_files, point_record

REPO = Path(__file__).resolve().parents[2]


def test_every_point_handed_over_is_durable_after_close(tmp_path):
    store = PointStore(tmp_path / "store")
    records = [point_record(i) for i in range(12)]
    with PointWriter(store) as writer:
        for i in range(0, 12, 2):  # two records (two levels) per point
            writer.write(records[i], records[i + 1])
    # one fragment per point, named by its records' keys in row order
    pairs = [[records[i]["key"], records[i + 1]["key"]] for i in range(0, 12, 2)]
    assert [[r["key"] for r in recs] for recs, _, _ in writer.written] == pairs
    assert fragment_files(store) == sorted("+".join(pair) + ".parquet" for pair in pairs)
    for pair in pairs:
        rows = pq.read_table(store.fragments_dir / ("+".join(pair) + ".parquet"))
        assert rows.column("key").to_pylist() == pair
    got = {row["key"]: row for row in store.load().to_pylist()}
    for record in records:
        assert_records_equal(got[record["key"]], record)
    assert store.verify() == []


def test_compact_moves_the_fragments_into_one_part_without_reading_them(tmp_path):
    store = PointStore(tmp_path / "store")
    records = [point_record(i) for i in range(8)]
    writer = PointWriter(store)
    for record in records:
        writer.write(record)
    stats = writer.compact()
    assert stats["fragments_compacted"] == 8 and stats["part"] is not None
    assert fragment_files(store) == []
    assert len(store._part_names()) == 1
    got = {row["key"]: row for row in store.load().to_pylist()}
    for record in records:
        assert_records_equal(got[record["key"]], record)


def test_compact_waits_for_another_job_compacting_at_the_same_moment(tmp_path):
    """Two jobs of a run that end together: the second waits for the first's lock instead
    of leaving its fragments for the run's end to read back one by one."""
    store = PointStore(tmp_path / "store")
    writer = PointWriter(store)
    for i in range(4):
        writer.write(point_record(i))
    holder = textwrap.dedent(
        f"""
        import fcntl, sys, time
        fh = open({str(store.locks_dir / "compact.lock")!r}, "a")
        fcntl.flock(fh, fcntl.LOCK_EX)
        print("locked", flush=True)
        time.sleep(0.5)
        """
    )
    store._ensure_root()
    proc = subprocess.Popen([sys.executable, "-c", holder], stdout=subprocess.PIPE, text=True)
    try:
        assert proc.stdout.readline().strip() == "locked"
        stats = writer.compact()
    finally:
        proc.wait(timeout=30)
        proc.stdout.close()
    assert stats["skipped"] is None and stats["fragments_compacted"] == 4
    assert fragment_files(store) == [] and len(store._part_names()) == 1


def test_a_fragment_rewritten_by_another_writer_is_kept(tmp_path):
    store = PointStore(tmp_path / "store")
    first, other = point_record(1), point_record(1, energy_hartree=-2.5)
    writer = PointWriter(store)
    writer.write(first)
    writer.flush()
    PointStore(store.root).write(other)  # e.g. an orphaned cluster job finishing late
    stats = writer.compact()
    assert stats["fragments_compacted"] == 0
    assert len(fragment_files(store)) == 1
    # fragments win over parts: the later write is what a reader sees
    assert store.get(first["key"])["energy_hartree"] == -2.5


def test_a_failed_write_is_raised_in_the_caller_at_its_next_call(tmp_path):
    root = tmp_path / "store"
    root.write_text("not a folder")  # the store cannot be created here
    writer = PointWriter(PointStore(root))
    writer.write(point_record(0))  # handed over; the background write fails
    with pytest.raises(StoreError):
        writer.write(point_record(1))
    writer.close()


def test_a_bad_record_is_refused_in_the_caller_before_anything_is_queued(tmp_path):
    store = PointStore(tmp_path / "store")
    with PointWriter(store) as writer, pytest.raises(ValueError):
        writer.write(point_record(0, multiplicity=0))
    assert not store.exists() or fragment_files(store) == []


def test_interrupt_writes_what_was_handed_over(tmp_path):
    """SIGINT (Snakemake stopping a job) while the writer is busy: every point handed over
    before the interrupt is on disk when the process has ended."""
    script = textwrap.dedent(
        f"""
        import os, signal, sys, time
        sys.path.insert(0, {str(REPO)!r})
        from pesflow.store.point_store import PointStore
        from pesflow.store.writer import PointWriter
        from tests.unit.test_store import point_record
        store = PointStore({str(tmp_path / "store")!r})
        with PointWriter(store) as writer:
            for i in range(20):
                writer.write(point_record(i))
            print("handed", flush=True)
            time.sleep(30)
        """
    )
    with subprocess.Popen(
        [sys.executable, "-c", script], stdout=subprocess.PIPE, text=True
    ) as proc:
        assert proc.stdout.readline().strip() == "handed"
        proc.send_signal(signal.SIGINT)
        proc.wait(timeout=30)
    store = PointStore(tmp_path / "store")
    assert store.keys() == {point_record(i)["key"] for i in range(20)}
