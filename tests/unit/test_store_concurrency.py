"""Parallel writers, a compaction loop and a reader on one point store.

Four writer processes each write 100 keys of their own and 20 keys shared by all (same
content, as when an orphaned cluster job finishes a point late), while a fifth process
compacts in a loop and this process keeps reading.  Nothing may be lost, duplicated or
quarantined, and what comes back must be what was written.
"""

import multiprocessing as mp
import random
import signal
import subprocess
import sys
import time
from pathlib import Path

import pyarrow as pa

from pesflow.store.point_store import PointStore
from tests.unit.test_store import assert_tables_equal, point_record, records_table

N_WRITERS = 4
N_OWN = 100
N_SHARED = 20


def own_indices(writer: int) -> list[int]:
    start = 1000 + writer * N_OWN
    return list(range(start, start + N_OWN))


SHARED = list(range(N_SHARED))


def _writer(root, writer, go):
    """Write this writer's keys and the shared ones, interleaved, in a writer-specific order."""
    store = PointStore(root)
    indices = own_indices(writer) + SHARED
    random.Random(writer).shuffle(indices)
    go.wait(timeout=60)
    for i in indices:
        store.write(point_record(i))
        time.sleep(random.Random(i).random() * 2e-3)  # spread the writes over the compactions


def _compactor(root, stop, results):
    store = PointStore(root)
    compacted = merged = runs = 0
    while not stop.is_set():
        stats = store.compact(min_small_parts=3)
        if stats["skipped"] is None:
            runs += 1
            compacted += stats["fragments_compacted"]
            merged += stats["parts_merged"]
        assert stats["quarantined"] == []
        time.sleep(0.02)
    results.put({"runs": runs, "compacted": compacted, "merged": merged})


def test_parallel_writers_with_compaction_lose_nothing(tmp_path):
    root = tmp_path / "store"
    ctx = mp.get_context("spawn")
    go, stop = ctx.Event(), ctx.Event()
    results = ctx.Queue()
    writers = [ctx.Process(target=_writer, args=(root, w, go)) for w in range(N_WRITERS)]
    compactor = ctx.Process(target=_compactor, args=(root, stop, results))
    for proc in writers:
        proc.start()
    go.set()
    compactor.start()

    # Meanwhile: a key once seen must stay visible, whatever compaction does.
    reader = PointStore(root)
    seen: set[str] = set()
    reads = 0
    try:
        while any(p.is_alive() for p in writers):
            keys = reader.keys()
            assert seen <= keys, f"{len(seen - keys)} keys vanished during compaction"
            seen = keys
            loaded = reader.load(columns=["key"]).column("key").to_pylist()
            assert len(loaded) == len(set(loaded))
            assert seen <= set(loaded)
            assert reader.last_quarantined == []
            reads += 1
    finally:
        for proc in writers:
            proc.join(timeout=120)
        stop.set()
        stats = results.get(timeout=120)
        compactor.join(timeout=120)
    assert [p.exitcode for p in writers] == [0] * N_WRITERS
    assert compactor.exitcode == 0
    assert stats["runs"] > 0 and stats["compacted"] > 0 and reads > 0

    written = [point_record(i) for w in range(N_WRITERS) for i in own_indices(w)]
    written += [point_record(i) for i in SHARED]
    want = records_table(written)
    store = PointStore(root)
    table = store.load()
    assert table.num_rows == N_WRITERS * N_OWN + N_SHARED
    assert len(set(table.column("key").to_pylist())) == table.num_rows
    assert_tables_equal(table, want)
    assert store.last_quarantined == [] and store.quarantined() == []
    assert store.verify() == []

    # A last compaction folds whatever is left; the records are unchanged.
    store.compact()
    assert list(store.fragments_dir.iterdir()) == []
    assert_tables_equal(store.load(), want)
    assert isinstance(store.status_table(), pa.Table)


KILLED_CHILD = """
import sys
from pesflow.store.point_store import PointStore
from tests.unit.test_store import point_record
store = PointStore(sys.argv[1])
if sys.argv[2] == "write":
    first, stop = int(sys.argv[3]), int(sys.argv[4])
    store.write(point_record(first))
    print("ready", flush=True)  # one point is durable; the kill comes during the others
    for i in range(first + 1, stop):
        store.write(point_record(i))
else:
    print("ready", flush=True)
    stats = store.compact()
print("done", flush=True)
"""


def _run_and_kill(root, args, delay_s):
    """Start a store process and SIGKILL it ``delay_s`` after it says it is ready."""
    proc = subprocess.Popen(
        [sys.executable, "-c", KILLED_CHILD, str(root), *args],
        stdout=subprocess.PIPE,
        text=True,
        cwd=Path(__file__).parents[2],  # so the child can import tests.unit.test_store
    )
    try:
        assert proc.stdout.readline().strip() == "ready"
        time.sleep(delay_s)
        proc.send_signal(signal.SIGKILL)
        proc.wait(timeout=60)
    finally:
        proc.stdout.close()


def test_sigkilled_writer_and_compactor_lose_nothing_but_the_point_in_flight(tmp_path):
    root = tmp_path / "store"
    store = PointStore(root)
    written = 0
    for round_, delay_s in enumerate((0.02, 0.2, 0.4)):
        # A writer killed mid-loop: the store holds exactly a prefix of its points.
        _run_and_kill(root, ["write", str(written), str(written + 400)], delay_s)
        n = len(store.keys())
        assert written < n <= written + 400
        written = n
        assert_tables_equal(store.load(), records_table([point_record(i) for i in range(n)]))
        # A compactor killed at some moment: every record is still there, exactly once.
        _run_and_kill(root, ["compact"], delay_s)
        fresh = PointStore(root)
        assert_tables_equal(fresh.load(), records_table([point_record(i) for i in range(n)]))
        assert fresh.last_quarantined == [] and fresh.quarantined() == [], round_
    store.compact(stale_tmp_s=0.0)  # the next compaction also clears the killed temp files
    assert [p.name for p in store.fragments_dir.iterdir()] == []
    assert not any(p.name.startswith(".") for p in store.parts_dir.iterdir())
    assert_tables_equal(store.load(), records_table([point_record(i) for i in range(written)]))
