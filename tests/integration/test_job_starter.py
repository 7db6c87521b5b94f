"""Jobs forked from the run's job starter (pesflow/execution/starter.py, jobstart.py).

A job handed to the starter must store the same points as the same job run from scratch
(``python -m pesflow.execution.batch``); the energies are checked against plain PySCF RHF
at each geometry, as in test_batch_walk.  The signal and kill paths check that a job
whose client is stopped or killed stops too, so that no orphan keeps writing after the run.
"""

import json
import os
import signal
import subprocess
import sys
import time

import numpy as np
import pytest

from pesflow.execution import jobstart
from pesflow.execution.starter import JobStarter
from pesflow.store.point_store import PointStore
from tests.integration.test_batch_walk import _rhf, _task

pytestmark = [
    pytest.mark.integration,
    pytest.mark.skipif(not sys.platform.startswith("linux"), reason="abstract Unix sockets"),
]


@pytest.fixture
def starter():
    started = JobStarter(1, dict(os.environ, OMP_NUM_THREADS="1"))
    yield started
    started.stop()


def _client(args, cwd, log):
    env = dict(os.environ, OMP_NUM_THREADS="1")
    with open(log, "w") as out:
        return subprocess.Popen(
            [sys.executable, "-m", "pesflow.execution.jobstart", *args],
            cwd=cwd,
            env=env,
            stdout=out,
            stderr=subprocess.STDOUT,
        )


def _forked_pid(log, timeout_s=60.0):
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        for line in log.read_text().splitlines():
            if "forked from the job starter" in line:
                return int(line.split("process ")[1].split(",")[0])
        time.sleep(0.05)
    raise AssertionError(f"no forked job in {log}:\n{log.read_text()}")


def _alive(pid):
    """Running (a zombie waiting for a parent that does not reap it counts as ended)."""
    try:
        with open(f"/proc/{pid}/stat") as fh:
            return fh.read().rsplit(")", 1)[1].split()[0] != "Z"
    except FileNotFoundError:
        return False


def _wait_gone(pid, timeout_s=30.0):
    deadline = time.monotonic() + timeout_s
    while _alive(pid) and time.monotonic() < deadline:
        time.sleep(0.05)
    return not _alive(pid)


def test_a_handed_over_job_stores_the_points_a_fresh_job_stores(tmp_path, starter):
    distances = np.linspace(0.85, 1.0, 4)
    task, content = _task(tmp_path, distances)
    done = tmp_path / "done.json"
    code = jobstart.hand_over(starter.address, [str(task), str(done), "--threads", "1"])
    assert code == 0  # not None: the starter ran it
    marker = json.loads(done.read_text())
    assert marker["computed"] == 4 and marker["failed"] == 0
    store = PointStore(tmp_path / "store")
    for point, r in zip(content["points"], distances):
        record = store.get(point["keys"]["hf"])
        assert record["energy_hartree"] == pytest.approx(_rhf(r), abs=1e-8)


def test_the_command_runs_the_job_itself_without_a_starter(tmp_path):
    task, content = _task(tmp_path, [0.9, 1.0])
    done = tmp_path / "done.json"
    log = tmp_path / "job.log"
    proc = _client(["--starter", "pesflow-starter-none", str(task), str(done)], tmp_path, log)
    assert proc.wait(timeout=300) == 0, log.read_text()
    assert "forked from the job starter" not in log.read_text()
    assert json.loads(done.read_text())["computed"] == 2
    assert len(PointStore(tmp_path / "store").keys()) == 2


def test_a_starter_of_another_thread_count_leaves_the_job_to_the_command(tmp_path, starter):
    task, _ = _task(tmp_path, [0.9])
    code = jobstart.hand_over(starter.address, [str(task), str(tmp_path / "d"), "--threads", "2"])
    assert code is None and not (tmp_path / "d").exists()


def _long_job_running(tmp_path, starter):
    """A job's command handed to ``starter`` with enough points (400) that its job is
    still computing when it is stopped; returns the command's process and the job's pid."""
    task, _ = _task(tmp_path, np.linspace(0.7, 3.0, 400))
    log = tmp_path / "job.log"
    args = ["--starter", starter.address, str(task), str(tmp_path / "done.json")]
    proc = _client(args, tmp_path, log)
    return proc, _forked_pid(log)


def test_sigterm_to_the_command_stops_the_forked_job(tmp_path, starter):
    proc, pid = _long_job_running(tmp_path, starter)
    proc.send_signal(signal.SIGTERM)
    assert proc.wait(timeout=30) != 0
    assert _wait_gone(pid)
    assert not (tmp_path / "done.json").exists()


def test_a_killed_command_leaves_no_job_running(tmp_path, starter):
    proc, pid = _long_job_running(tmp_path, starter)
    proc.kill()
    proc.wait(timeout=30)
    assert _wait_gone(pid)  # it noticed its client was gone and stopped
    stored = len(PointStore(tmp_path / "store").keys())
    time.sleep(0.5)
    assert len(PointStore(tmp_path / "store").keys()) == stored < 400


def test_the_starter_ends_with_the_run(tmp_path):
    code = (
        "import os, sys\n"
        "from pesflow.execution.starter import JobStarter\n"
        "s = JobStarter(1)\n"
        "print(s.proc.pid, flush=True)\n"
        "os._exit(0)\n"  # pesflow run killed: no stop()
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=60)
    pid = int(out.stdout.split()[0])
    assert _wait_gone(pid, timeout_s=30)


def test_the_jobs_cpu_time_is_counted_in_the_run_that_started_them(tmp_path):
    """Benchmarks (and a user's ``time pesflow run``) read the CPU time of a run's child
    processes: the forked jobs' time must reach it through the starter."""
    import resource

    task, _ = _task(tmp_path, np.linspace(0.8, 1.2, 40))
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    started = JobStarter(1, dict(os.environ, OMP_NUM_THREADS="1"))
    t0 = time.process_time()
    code = jobstart.hand_over(started.address, [str(task), str(tmp_path / "d"), "--threads", "1"])
    assert code == 0 and time.process_time() - t0 < 0.5  # the work was not done here
    started.stop()
    assert started.proc.returncode == 0  # stopped, not killed after its grace time
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    job_cpu = json.loads((tmp_path / "d").read_text())["wall_s"]  # one thread: CPU ~ wall
    counted = (after.ru_utime + after.ru_stime) - (before.ru_utime + before.ru_stime)
    assert counted >= 0.8 * job_cpu


def test_a_forked_job_has_the_threads_its_command_line_asks_for():
    """The job's command sets OMP_NUM_THREADS to its threads (workflows/rules/batch.smk);
    the starter, whose children inherit its OpenMP setting, must have them too, whatever
    the environment of pesflow run says."""
    started = JobStarter(2, dict(os.environ, OMP_NUM_THREADS="1"))
    try:
        deadline, environ = time.monotonic() + 10, b""
        while not environ and time.monotonic() < deadline:  # empty just after the exec
            with open(f"/proc/{started.proc.pid}/environ", "rb") as fh:
                environ = fh.read()
        pairs = [item.split(b"=", 1) for item in environ.split(b"\0") if b"=" in item]
        assert dict(pairs)[b"OMP_NUM_THREADS"] == b"2"
    finally:
        started.stop()
