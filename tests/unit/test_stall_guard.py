"""The stuck-run guard of ``pesflow run``: it fires only when every batch of the run has
written its done marker and the grace period has passed since then (driver logic; the
end-to-end check is in tests/workflow/test_cluster.py)."""

import time

import pytest

from pesflow.errors import RunError
from pesflow.execution.driver import STALL_GRACE_S, RunOptions, _AllBatchesEnded


def test_guard_waits_for_every_marker_and_then_for_the_grace_period(tmp_path):
    done = tmp_path / "done"
    guard = _AllBatchesEnded(done, ["a", "b"], grace_s=0.2, look_every_s=0.0)
    assert not guard.overdue()  # no done folder yet
    done.mkdir()
    (done / "a.json").write_text("{}")
    (done / "other.json").write_text("{}")  # a marker of no batch of this run
    time.sleep(0.3)
    assert not guard.overdue()  # batch b has not ended
    (done / "b.json").write_text("{}")
    assert not guard.overdue()  # every batch ended just now: grace period starts
    time.sleep(0.3)
    assert guard.overdue()
    (done / "b.json").unlink()  # a marker cleared again: not ended any more
    assert not guard.overdue()


def test_guard_looks_at_the_folder_at_most_once_per_interval(tmp_path):
    done = tmp_path / "done"
    done.mkdir()
    guard = _AllBatchesEnded(done, ["a"], grace_s=0.0, look_every_s=60.0)
    assert not guard.overdue()  # looked: nothing yet
    (done / "a.json").write_text("{}")
    time.sleep(0.05)
    assert not guard.overdue()  # not looked again within the interval


def test_grace_period_from_the_environment(monkeypatch):
    monkeypatch.delenv("PESFLOW_STALL_GRACE_S", raising=False)
    assert RunOptions().stall_grace_s == STALL_GRACE_S
    monkeypatch.setenv("PESFLOW_STALL_GRACE_S", "15")
    assert RunOptions().stall_grace_s == 15.0
    for bad in ("soon", "0", "-3", "nan", "inf"):
        monkeypatch.setenv("PESFLOW_STALL_GRACE_S", bad)
        with pytest.raises(RunError, match="PESFLOW_STALL_GRACE_S: .* greater than 0"):
            RunOptions()
