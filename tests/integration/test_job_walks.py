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


def _walk_tasks(tmp_path, walks, prefix=""):
    """One HF walk task per list of distances, ids ``<prefix>walk-<i>``, one store."""
    tasks = []
    for i, distances in enumerate(walks):
        folder = tmp_path / f"{prefix}w{i}"
        folder.mkdir()
        _, task = _task(folder, distances)
        task["batch_id"] = f"{prefix}walk-{i}"
        task["store"] = str(tmp_path / "store")
        tasks.append(task)
    return tasks


def _write_job(path, job_id, tasks, **extra):
    """A job file of ``tasks`` (``extra``: e.g. the run's ``share``)."""
    path.parent.mkdir(exist_ok=True)
    job = {"format": batch.JOB_FORMAT, "version": batch.JOB_VERSION, "job_id": job_id}
    path.write_text(json.dumps({**job, "walks": tasks, **extra}))
    return path


def _job(tmp_path, walks):
    tasks = _walk_tasks(tmp_path, walks)
    for task in tasks:
        task["molecule"] = "hydrogen_fluoride"
    return _write_job(tmp_path / "tasks" / "job001-t.json", "job001-t", tasks), tasks


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


def _shared_jobs(tmp_path, walks_of):
    """Job files of one local run whose walks are shared (as write_tasks makes them)."""
    share = {"claims": str(tmp_path / "claims"), "jobs": sorted(walks_of)}
    paths, tasks = {}, {}
    for job_id, walks in sorted(walks_of.items()):
        tasks[job_id] = _walk_tasks(tmp_path, walks, prefix=f"{job_id}-")
        path = tmp_path / "tasks" / f"{job_id}.json"
        paths[job_id] = _write_job(path, job_id, tasks[job_id], share=share)
    return paths, tasks


def test_a_job_takes_over_the_walks_other_started_jobs_have_not_begun(tmp_path):
    """Two jobs of one run: the first to finish runs the other's remaining walks, the
    last walk first; each point is computed once, by one of them, and stored once."""
    paths, tasks = _shared_jobs(
        tmp_path,
        {
            "job001-a": [np.linspace(0.85, 0.95, 3)],
            "job002-b": [np.linspace(1.0, 1.1, 3), np.linspace(1.2, 1.3, 3)],
        },
    )
    # job002 has started (e.g. it is computing its first walk on the other core)
    (tmp_path / "claims").mkdir()
    (tmp_path / "claims" / "job002-b.started").touch()
    first = batch.run_job(paths["job001-a"], tmp_path / "done" / "job001-a.json")
    assert first["computed"] == 9 and first["taken_over"] == 2
    assert [w["batch_id"] for w in first["walks"]] == [
        "job001-a-walk-0",
        "job002-b-walk-1",  # the other job's last (shortest) walk first
        "job002-b-walk-0",
    ]
    second = batch.run_job(paths["job002-b"], tmp_path / "done" / "job002-b.json")
    assert second["computed"] == 0 and second["walks"] == [] and second["taken_over"] == 0
    store = PointStore(tmp_path / "store")
    table = store.load().to_pandas()
    assert len(table) == 9 and table["key"].is_unique
    for job_tasks in tasks.values():
        for task in job_tasks:
            for point in task["points"]:
                r = float(np.linalg.norm(np.subtract(*point["positions"])))
                record = store.get(point["keys"]["hf"])
                assert record["energy_hartree"] == pytest.approx(_rhf(r), abs=1e-8)


def test_a_job_not_yet_started_keeps_its_walks(tmp_path):
    """While another job of the run has not started, Snakemake will start it on the core
    a finished job frees: nothing is taken from it."""
    paths, _ = _shared_jobs(
        tmp_path,
        {"job001-a": [np.linspace(0.85, 0.95, 2)], "job002-b": [np.linspace(1.0, 1.1, 2)]},
    )
    first = batch.run_job(paths["job001-a"], tmp_path / "done" / "job001-a.json")
    assert first["computed"] == 2 and first["taken_over"] == 0
    second = batch.run_job(paths["job002-b"], tmp_path / "done" / "job002-b.json")
    assert second["computed"] == 2 and second["taken_over"] == 0


def test_a_job_run_again_takes_back_its_own_claims(tmp_path):
    """A job that failed after claiming a walk (here: the claim is there, no point is
    stored) runs it when Snakemake runs the job again; another job's claim it leaves."""
    paths, _ = _shared_jobs(
        tmp_path,
        {
            "job001-a": [np.linspace(0.85, 0.95, 2), np.linspace(1.0, 1.1, 2)],
            "job002-b": [np.linspace(1.2, 1.3, 2)],
        },
    )
    claims = tmp_path / "claims"
    claims.mkdir()
    (claims / "job001-a-walk-0.claim").write_text("job001-a")
    (claims / "job001-a-walk-1.claim").write_text("job002-b")
    marker = batch.run_job(paths["job001-a"], tmp_path / "done" / "job001-a.json")
    assert [w["batch_id"] for w in marker["walks"]] == ["job001-a-walk-0"]
    assert marker["computed"] == 2
