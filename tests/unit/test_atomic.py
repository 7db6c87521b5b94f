"""The one way pesflow writes a file (pesflow/formats/atomic.py).

Checked against the file system itself: what is read back with plain ``open`` and
``os.stat`` after the write, and what a writer that fails midway leaves behind.
"""

from __future__ import annotations

import os

import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from pesflow.formats.atomic import TMP_PREFIX, atomic_path, atomic_write


@pytest.mark.parametrize("fsync", [True, False])
def test_atomic_write_puts_text_bytes_or_a_pyarrow_buffer_whole_under_the_name(tmp_path, fsync):
    sink = pa.BufferOutputStream()
    pq.write_table(pa.table({"x": [1.5, 2.5]}), sink)
    for name, data, want in (
        ("a.txt", "Ångström\n", "Ångström\n".encode()),
        ("b.bin", b"\x00\x01" * 70000, b"\x00\x01" * 70000),  # more than one pipe/page
        ("c.parquet", sink.getvalue(), sink.getvalue().to_pybytes()),
    ):
        inode = atomic_write(tmp_path / name, data, fsync=fsync)
        assert (tmp_path / name).read_bytes() == want
        assert os.stat(tmp_path / name).st_ino == inode
    assert pq.read_table(tmp_path / "c.parquet").column("x").to_pylist() == [1.5, 2.5]
    assert not [p for p in os.listdir(tmp_path) if p.startswith(TMP_PREFIX)]


def test_a_rewrite_replaces_the_file_and_a_failed_write_leaves_the_old_one(tmp_path):
    target = tmp_path / "f.txt"
    first = atomic_write(target, "one")
    second = atomic_write(target, "two")
    assert target.read_text() == "two" and second != first
    with pytest.raises(RuntimeError), atomic_path(target) as tmp:
        tmp.write_text("half")
        raise RuntimeError("killed midway")
    assert target.read_text() == "two"
    assert os.listdir(tmp_path) == ["f.txt"]
