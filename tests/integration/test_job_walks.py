"""A job of several walks (pesflow.execution.batch.run_job) with real PySCF and the store.

Reference: plain PySCF RHF at each geometry (pyscf.scf.RHF, same basis and
convergence threshold), as in test_batch_walk.
"""

import json

import numpy as np
import pytest

from pesflow.execution import batch
from pesflow.store.point_store import PointStore
from tests.integration.test_batch_walk import _rhf, _task

pytestmark = pytest.mark.integration


def _job(tmp_path, walks):
    tasks = []
    for i, distances in enumerate(walks):
        folder = tmp_path / f"w{i}"
        folder.mkdir()
        _, task = _task(folder, distances)
        task["batch_id"] = f"walk-{i}"
        task["store"] = str(tmp_path / "store")
        task["molecule"] = "hydrogen_fluoride"
        tasks.append(task)
    job = {"format": batch.JOB_FORMAT, "version": batch.JOB_VERSION, "job_id": "job001-t"}
    path = tmp_path / "tasks" / "job001-t.json"
    path.parent.mkdir()
    path.write_text(json.dumps({**job, "walks": tasks}))
    return path, tasks


def test_job_runs_each_walk_and_writes_one_marker(tmp_path):
    walks = [np.linspace(0.8, 0.95, 4), np.linspace(1.0, 1.15, 4)]
    path, tasks = _job(tmp_path, walks)
    done = tmp_path / "done" / "job001-t.json"
    marker = batch.run_job(path, done)
    assert marker["computed"] == 8 and marker["failed"] == 0 and marker["skipped"] == 0
    assert [w["batch_id"] for w in marker["walks"]] == ["walk-0", "walk-1"]
    assert json.loads(done.read_text())["points"] == marker["points"]
    store = PointStore(tmp_path / "store")
    for task, distances in zip(tasks, walks):
        for point, r in zip(task["points"], distances):
            record = store.get(point["keys"]["hf"])
            assert record["energy_hartree"] == pytest.approx(_rhf(r), abs=1e-8)
    # the progress file of the job says it is finished and nothing failed
    progress = json.loads((tmp_path / "progress" / "job001-t.json").read_text())
    assert progress["walks_done"] == 2 and progress["running"] is None
    assert progress["failed"] == []
    # a rerun (e.g. after a kill) computes nothing that is stored
    again = batch.run_job(path, tmp_path / "done" / "again.json")
    assert again["computed"] == 0 and again["skipped"] == 8


def test_a_single_walk_task_file_still_runs(tmp_path):
    path, _ = _task(tmp_path, np.linspace(0.9, 1.0, 3))
    marker = batch.run_job(path, tmp_path / "done.json")
    assert marker["computed"] == 3 and "walks" not in marker
