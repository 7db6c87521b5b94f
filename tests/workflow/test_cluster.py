"""The cluster path: ``pesflow run --profile`` through a Snakemake executor plugin.

A real batch system is not available in the tests, so the cluster is a stand-in:
Snakemake's generic cluster executor with the three scripts of
``configs/profiles/local-cluster`` (submit detached with setsid, status from a recorded
exit code, cancel by process group).  The same campaign computed through it and through
the local executor must give the same store: same point keys, same energies.

External reference for one point: a plain PySCF RHF calculation at the stored geometry.
"""

import os
import signal
import subprocess
import sys
import time
import uuid
from pathlib import Path

import numpy as np
import pytest

from pesflow.store.point_store import PointStore
from tests.workflow.helpers import SMALL_CAMPAIGN, pesflow

REPO = Path(__file__).resolve().parents[2]
LOCAL_CLUSTER = REPO / "configs" / "profiles" / "local-cluster"
SLURM = REPO / "configs" / "profiles" / "slurm"

SPEC = SMALL_CAMPAIGN.format(name="cluster-check")
N_POINTS = 20  # 2 molecules x 5 geometries x 2 methods


def stored_energies(root) -> dict[str, float]:
    table = PointStore(root).load(columns=["energy_hartree", "converged"]).to_pandas()
    assert table["converged"].all()
    return dict(zip(table["key"], table["energy_hartree"], strict=True))


def alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    # a zombie has ended; only its exit status is left
    stat = Path(f"/proc/{pid}/stat")
    return not (stat.exists() and stat.read_text().rsplit(")", 1)[1].split()[0] == "Z")


@pytest.mark.workflow
@pytest.mark.integration
def test_cluster_profile_and_local_run_give_the_same_store(tmp_path):
    for name in ("cluster", "local"):
        (tmp_path / name).mkdir()
        (tmp_path / name / "campaign.yaml").write_text(SPEC)

    cluster = pesflow(
        "run",
        "campaign.yaml",
        "--cores",
        "2",
        "--profile",
        str(LOCAL_CLUSTER),
        cwd=tmp_path / "cluster",
    )
    assert cluster.returncode == 0, cluster.stdout + cluster.stderr
    assert f"{N_POINTS} done, 0 failed, 0 pending" in cluster.stdout
    local = pesflow("run", "campaign.yaml", "--cores", "2", cwd=tmp_path / "local")
    assert local.returncode == 0, local.stdout + local.stderr

    # The batches really went through the stand-in cluster: one job folder per batch,
    # each ended with exit code 0, and Snakemake logged the job ids submit.sh printed.
    wd = tmp_path / "cluster" / "results" / "cluster-check" / ".pesflow" / "workflow"
    jobs = sorted((wd / ".local-cluster").iterdir())
    n_batches = len(list((wd / "tasks").glob("*.json")))
    assert len(jobs) == n_batches >= 2
    assert all((job / "exit_code").read_text().strip() == "0" for job in jobs)
    log = "\n".join(p.read_text() for p in (wd / "logs").glob("snakemake-*.log"))
    for job in jobs:
        assert f"with external jobid '{job.name}'" in log
    assert not any(alive(int((job / "pid").read_text())) for job in jobs)

    on_cluster = stored_energies(tmp_path / "cluster" / "store")
    on_local = stored_energies(tmp_path / "local" / "store")
    assert len(on_local) == N_POINTS
    assert on_cluster.keys() == on_local.keys()
    keys = sorted(on_local)
    # Same code, same geometries, one thread: the numbers agree to round-off.
    np.testing.assert_allclose(
        [on_cluster[k] for k in keys], [on_local[k] for k in keys], rtol=0, atol=1e-10
    )

    # One point against plain PySCF (the reference outside pesflow).
    from pyscf import gto, scf

    row = (
        PointStore(tmp_path / "cluster" / "store")
        .load()
        .to_pandas()
        .query("method == 'hf' and symbols == 'H H'")
        .iloc[0]
    )
    xyz = np.asarray(row["positions_angstrom"]).reshape(-1, 3)
    mol = gto.M(atom=[("H", xyz[0]), ("H", xyz[1])], basis="sto-3g", unit="Angstrom", verbose=0)
    mf = scf.RHF(mol)
    mf.conv_tol = 1e-10
    assert row["energy_hartree"] == pytest.approx(mf.kernel(), abs=1e-8)


def _submit(script_text: str, state: Path) -> str:
    script = state.parent / f"script-{uuid.uuid4().hex}.sh"
    script.write_text(script_text)
    env = dict(os.environ, PESFLOW_LOCAL_CLUSTER_DIR=str(state))
    out = subprocess.run(
        [str(LOCAL_CLUSTER / "submit.sh"), str(script)],
        capture_output=True,
        text=True,
        env=env,
        timeout=10,
        check=True,
    )
    lines = out.stdout.splitlines()
    assert len(lines) == 1 and lines[0], out.stdout  # the executor reads the first line
    script.unlink()  # Snakemake deletes its job scripts; the job must not need it
    return lines[0]


def _status(job_id: str, state: Path) -> str:
    env = dict(os.environ, PESFLOW_LOCAL_CLUSTER_DIR=str(state))
    out = subprocess.run(
        [str(LOCAL_CLUSTER / "status.sh"), job_id],
        capture_output=True,
        text=True,
        env=env,
        timeout=10,
        check=True,
    )
    return out.stdout.strip()


def _wait_for(predicate, timeout_s=10.0):
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        if predicate():
            return True
        time.sleep(0.05)
    return False


@pytest.mark.workflow
def test_stand_in_scripts_submit_status_cancel(tmp_path):
    """The stand-in behaves as the generic executor expects of a batch system."""
    state = tmp_path / "state"
    ok = _submit("exit 0\n", state)
    bad = _submit("exit 3\n", state)
    # a job with a child process, as a Snakemake job has (its batch's shell)
    child_file = tmp_path / "child.pid"
    slow = _submit(f"sleep 300 &\necho $! > {child_file}\nwait\n", state)
    assert len({ok, bad, slow}) == 3
    assert _wait_for(lambda: _status(ok, state) == "success")
    assert _wait_for(lambda: _status(bad, state) == "failed")
    assert _status(slow, state) == "running"
    assert _wait_for(
        lambda: (
            (state / slow / "pid").exists()
            and child_file.exists()
            and child_file.read_text().strip() != ""
        )
    )
    pid = int((state / slow / "pid").read_text())
    assert os.getpgid(pid) == pid, "the job must lead its own process group (setsid)"
    child = int(child_file.read_text())
    assert alive(child)

    env = dict(os.environ, PESFLOW_LOCAL_CLUSTER_DIR=str(state))
    subprocess.run([str(LOCAL_CLUSTER / "cancel.sh"), slow], env=env, timeout=10, check=True)
    assert _wait_for(lambda: not alive(pid) and not alive(child))
    assert _status(slow, state) == "failed"
    assert _status("no-such-job", state) == "failed"


@pytest.mark.workflow
@pytest.mark.integration
def test_interrupt_cancels_cluster_jobs(tmp_path):
    """SIGINT to ``pesflow run`` makes Snakemake cancel its jobs through cancel.sh."""
    (tmp_path / "campaign.yaml").write_text(SPEC.replace("points: 5", "points: 40"))
    env = dict(os.environ, OMP_NUM_THREADS="1")
    proc = subprocess.Popen(
        [
            sys.executable,
            "-m",
            "pesflow",
            "run",
            "campaign.yaml",
            "--cores",
            "2",
            "--profile",
            str(LOCAL_CLUSTER),
        ],
        cwd=tmp_path,
        env=env,
        stdout=subprocess.DEVNULL,
        stderr=subprocess.DEVNULL,
    )
    state = tmp_path / "results" / "cluster-check" / ".pesflow" / "workflow" / ".local-cluster"
    fragments = tmp_path / "store" / "fragments"
    try:
        # stored points only: a writer's dot-named temporary file is not one yet
        assert _wait_for(
            lambda: (
                fragments.exists()
                and sum(not p.name.startswith(".") for p in fragments.iterdir()) >= 4
            ),
            timeout_s=120,
        )
        pids = [int((job / "pid").read_text()) for job in state.iterdir() if (job / "pid").exists()]
        assert pids and all(alive(p) for p in pids)
        proc.send_signal(signal.SIGINT)
        assert proc.wait(timeout=60) == 130
    finally:
        if proc.poll() is None:
            proc.kill()
    assert _wait_for(lambda: not any(alive(p) for p in pids), timeout_s=10)
    # cancelled mid-walk: killed jobs record no exit code, and points are missing
    assert any(not (job / "exit_code").exists() for job in state.iterdir())
    stored = PointStore(tmp_path / "store").keys()
    assert 4 <= len(stored) < 160


@pytest.mark.workflow
def test_shipped_profiles_parse_with_snakemakes_own_parser():
    """Every key of both profiles is a Snakemake option (a typo would be refused)."""
    from snakemake.cli import get_argument_parser

    slurm = get_argument_parser(profiles=[str(SLURM)]).parse_args([])
    assert slurm.executor == "slurm"
    # squeue answers on a cluster without accounting storage; sacct does not
    assert slurm.slurm_status_command == "squeue"
    assert slurm.jobs >= 1 and slurm.latency_wait >= 30
    assert {"slurm_partition", "slurm_account"} <= set(slurm.default_resources)
    # the batch rule declares runtime and mem_mb itself, so only set-resources reaches them
    assert {"runtime", "mem_mb"} <= set(slurm.set_resources["batch"])

    local = get_argument_parser(profiles=[str(LOCAL_CLUSTER)]).parse_args([])
    assert local.executor == "cluster-generic"
    # Snakemake resolves the script names against the profile folder
    for option, script in (
        ("submit", "submit.sh"),
        ("status", "status.sh"),
        ("cancel", "cancel.sh"),
    ):
        assert getattr(local, f"cluster_generic_{option}_cmd") == str(LOCAL_CLUSTER / script)
        assert os.access(LOCAL_CLUSTER / script, os.X_OK)
    assert "slurm" in (SLURM / "README.md").read_text().lower()


@pytest.mark.workflow
@pytest.mark.integration
def test_run_stops_when_every_batch_ended_but_jobs_are_still_reported_running(tmp_path):
    """A status query that never sees jobs end (sacct without accounting storage) must
    not keep ``pesflow run`` waiting forever: once every batch has ended and the grace
    period is over, Snakemake is stopped, the run says why, and it exits 0 with every
    point stored; a rerun has nothing left to compute."""
    (tmp_path / "campaign.yaml").write_text(SPEC)
    env = dict(
        os.environ,
        OMP_NUM_THREADS="1",
        PESFLOW_LOCAL_CLUSTER_STUCK="1",  # status.sh answers "running" for every job
        PESFLOW_STALL_GRACE_S="3",
    )
    cmd = [sys.executable, "-m", "pesflow", "run", "campaign.yaml", "--cores", "2"]
    run = subprocess.run(
        [*cmd, "--profile", str(LOCAL_CLUSTER)],
        cwd=tmp_path,
        env=env,
        capture_output=True,
        text=True,
        timeout=300,  # the stand-in would answer "running" for ever
    )
    out = run.stdout + run.stderr
    assert run.returncode == 0, out
    assert f"all {N_POINTS} points are stored but the scheduler still reported jobs" in out
    assert "configs/profiles/slurm/README.md" in out
    assert f"{N_POINTS} done, 0 failed, 0 pending" in run.stdout

    wd = tmp_path / "results" / "cluster-check" / ".pesflow" / "workflow"
    jobs = list((wd / ".local-cluster").iterdir())
    assert jobs and all((job / "exit_code").read_text().strip() == "0" for job in jobs)
    assert len(stored_energies(tmp_path / "store")) == N_POINTS

    rerun = subprocess.run(
        cmd, cwd=tmp_path, env=env, capture_output=True, text=True, timeout=300, check=False
    )
    assert rerun.returncode == 0, rerun.stdout + rerun.stderr
    assert "nothing to compute: every point is in the store" in rerun.stdout
