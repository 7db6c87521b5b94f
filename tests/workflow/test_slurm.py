"""The cluster path on a real SLURM scheduler, through the shipped profile.

Needs a SLURM cluster that answers on this machine, with the test's temporary folder
seen by its nodes under the same path: CI starts a one-node cluster with
``.ci/slurm-up.sh`` (Debian's slurm-wlm and munge, no accounting storage).  Without
one, the tests skip with the reason.  The profile used is a copy of
``configs/profiles/slurm`` with only its EDIT placeholders filled in (partition,
account, runtime, memory), as a user would.

References: the same campaign computed by a local ``pesflow run`` (point for point, to
1e-10 Eh: same code, same geometries, one thread), plain PySCF for two of the points
(``helpers.direct_energy``, 1e-7 Eh as in test_run.py), and SLURM's own
``squeue``/``scancel`` for the jobs.  A run waits for the plugin's status checks
(10 s after submitting, then 20 s later, ...): the first test takes about 30 s; the
cancel-and-rerun test (about 90 s) and the sacct test (about 35 s) are marked slow.
"""

import os
import shutil
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

from pesflow.store.point_store import PointStore
from tests.workflow.helpers import SMALL_CAMPAIGN, direct_energy, pesflow

REPO = Path(__file__).resolve().parents[2]
SLURM_PROFILE = REPO / "configs" / "profiles" / "slurm"

SPEC = SMALL_CAMPAIGN.format(name="slurm-check")
N_POINTS = 20  # 2 molecules x 5 geometries x hf and mp2 (see helpers.SMALL_CAMPAIGN)

#: Two walks of 40 points at hf/cc-pvtz on water, ~0.2 s a point: batch jobs that run
#: long enough (several seconds) to be cancelled while they are storing points.
KILL_CAMPAIGN = """\
campaign: slurm-kill
molecules:
  water: {builtin: H2O}
scans:
  stretch:
    molecules: [water]
    coordinates:
      - {type: distance, atoms: [1, 2], from: 0.8, to: 1.6, points: 40}
  bend:
    molecules: [water]
    coordinates:
      - {type: angle, atoms: [2, 1, 3], from: 90, to: 130, points: 40}
levels:
  - {method: hf, basis: cc-pvtz}
store: store
"""
N_KILL_POINTS = 80


def _slurm(*args, timeout=30) -> str | None:
    """Output of a SLURM client command, or None when it does not answer."""
    if shutil.which(args[0]) is None:
        return None
    try:
        out = subprocess.run(args, capture_output=True, text=True, timeout=timeout)
    except subprocess.TimeoutExpired:
        return None
    return out.stdout if out.returncode == 0 else None


def _usable_partition() -> tuple[str | None, str]:
    """(partition with an idle node, its smallest node memory in MB) or (None, why)."""
    for tool in ("sbatch", "squeue", "scancel"):
        if shutil.which(tool) is None:
            return None, f"{tool} is not installed"
    out = _slurm("sinfo", "-h", "-N", "-o", "%P|%t|%m", timeout=10)
    if out is None:
        return None, "sinfo does not answer (no SLURM cluster here; .ci/slurm-up.sh starts one)"
    for line in out.splitlines():
        partition, state, memory = line.split("|")
        if state in ("idle", "mix"):
            return partition.rstrip("*"), memory
    return None, f"no SLURM node is idle (sinfo: {out.strip()!r})"


PARTITION, MEMORY_OR_REASON = _usable_partition()
pytestmark = [
    pytest.mark.workflow,
    pytest.mark.integration,
    pytest.mark.skipif(PARTITION is None, reason=MEMORY_OR_REASON),
]


def filled_profile(dest: Path, drop: str = "") -> Path:
    """A copy of the shipped SLURM profile with its EDIT placeholders filled in (and
    the line ``drop`` deleted, if given)."""
    text = (SLURM_PROFILE / "config.yaml").read_text()
    if drop:
        assert drop + "\n" in text
        text = text.replace(drop + "\n", "")
    memory = int(float(MEMORY_OR_REASON.rstrip("+")))
    account = os.environ.get("PESFLOW_SLURM_ACCOUNT", "pesflow-test")
    edits = {
        "slurm_partition: EDIT-partition": f"slurm_partition: {PARTITION}",
        "slurm_account: EDIT-account": f"slurm_account: {account}",
        "runtime: 120": "runtime: 15",
        "mem_mb: 4000": f"mem_mb: {min(2000, memory // 2)}",
    }
    for old, new in edits.items():
        assert old in text, f"the shipped profile no longer has {old!r}"
        text = text.replace(old, new)
    assert "EDIT-" not in text
    dest.mkdir(parents=True)
    (dest / "config.yaml").write_text(text)
    return dest


def stored(root) -> dict[str, float]:
    table = PointStore(root).load(columns=["energy_hartree", "converged"]).to_pandas()
    assert table["key"].is_unique and table["converged"].all()
    return dict(zip(table["key"], table["energy_hartree"], strict=True))


def our_jobs(folder: Path, states: str) -> list[str]:
    """SLURM job ids in ``states`` whose working folder is under ``folder``."""
    out = _slurm("squeue", "-h", "-t", states, "-o", "%i|%Z") or ""
    return [
        job
        for job, workdir in (line.split("|", 1) for line in out.splitlines())
        if Path(workdir).is_relative_to(folder)
    ]


# ~30 s on a quiet machine, a minute under load: run by .ci/run's slow call, not the default run.
@pytest.mark.slow
def test_slurm_profile_and_local_run_give_the_same_store(tmp_path):
    for name in ("slurm", "local"):
        (tmp_path / name).mkdir()
        (tmp_path / name / "campaign.yaml").write_text(SPEC)
    profile = filled_profile(tmp_path / "profile")

    run = pesflow(
        "run", "campaign.yaml", "--cores", "2", "--profile", str(profile), cwd=tmp_path / "slurm"
    )
    assert run.returncode == 0, run.stdout + run.stderr
    assert f"{N_POINTS} done, 0 failed, 0 pending" in run.stdout
    # finished by SLURM's own report of the jobs, not by pesflow's stuck-run guard
    assert "Snakemake was stopped" not in run.stderr

    # The batches really ran as SLURM jobs: Snakemake logged a SLURM job id per batch.
    wd = tmp_path / "slurm" / "results" / "slurm-check" / ".pesflow" / "workflow"
    log = "\n".join(p.read_text() for p in (wd / "logs").glob("snakemake-*.log"))
    n_batches = len(list((wd / "tasks").glob("*.json")))
    assert log.count("has been submitted with SLURM jobid") == n_batches >= 2

    local = pesflow("run", "campaign.yaml", "--cores", "2", cwd=tmp_path / "local", check=0)
    assert f"{N_POINTS} done, 0 failed, 0 pending" in local.stdout
    on_slurm, on_local = stored(tmp_path / "slurm" / "store"), stored(tmp_path / "local" / "store")
    assert len(on_local) == N_POINTS and on_slurm.keys() == on_local.keys()
    keys = sorted(on_local)
    np.testing.assert_allclose(
        [on_slurm[k] for k in keys], [on_local[k] for k in keys], rtol=0, atol=1e-10
    )
    # Two points against plain PySCF (the reference outside pesflow): a closed-shell HF
    # and an open-shell MP2 point computed on the SLURM node.
    table = PointStore(tmp_path / "slurm" / "store").load().to_pandas()
    for query in ("method == 'hf' and symbols == 'H H'", "method == 'mp2' and symbols == 'O H'"):
        row = table.query(query).iloc[0]
        assert row["energy_hartree"] == pytest.approx(direct_energy(row), abs=1e-7)


@pytest.mark.slow  # two runs through SLURM with two cancels: about 90 s
def test_scancel_mid_run_then_rerun_computes_only_what_is_missing(tmp_path):
    """A batch job cancelled mid-run keeps the points it stored.  The profile's
    ``retries: 1`` submits the batch once more; that job is cancelled too, so the run
    ends with points missing, and a rerun computes exactly those."""
    (tmp_path / "campaign.yaml").write_text(KILL_CAMPAIGN)
    profile = filled_profile(tmp_path / "profile")
    cmd = [sys.executable, "-m", "pesflow", "run", "campaign.yaml", "--cores", "2"]
    env = dict(os.environ, OMP_NUM_THREADS="1")
    first = subprocess.Popen(
        [*cmd, "--profile", str(profile)],
        cwd=tmp_path,
        env=env,
        stdout=subprocess.PIPE,
        stderr=subprocess.STDOUT,
        text=True,
    )
    fragments = tmp_path / "store" / "fragments"
    cancelled: list[str] = []
    known: set[str] = set()
    try:
        deadline = time.monotonic() + 300
        while len(cancelled) < 2 and time.monotonic() < deadline:
            assert first.poll() is None, f"the run ended before two cancels: {cancelled}"
            if not cancelled:
                n = (  # stored points only, not a writer's dot-named temporary file
                    sum(not p.name.startswith(".") for p in fragments.glob("*.parquet"))
                    if fragments.exists()
                    else 0
                )
                running = our_jobs(tmp_path, "RUNNING")
                if n >= 3 and running:
                    known = set(our_jobs(tmp_path, "all"))
                    cancelled.append(running[0])
                    subprocess.run(["scancel", running[0]], check=True, timeout=30)
            else:  # the retry of the cancelled batch: a job not seen before
                retry = [j for j in our_jobs(tmp_path, "PENDING,RUNNING") if j not in known]
                if retry:
                    cancelled.append(retry[0])
                    subprocess.run(["scancel", retry[0]], check=True, timeout=30)
            time.sleep(0.1)
        assert len(cancelled) == 2, f"cancelled {cancelled}; no retry job was seen"
        out, _ = first.communicate(timeout=300)
    finally:
        if first.poll() is None:
            first.kill()
    # the cancelled batch is reported failed; the points it had stored are kept
    assert first.returncode == 1, out
    assert "some batch jobs failed" in out
    deadline = time.monotonic() + 60  # wait until the jobs' processes are gone
    while our_jobs(tmp_path, "PENDING,RUNNING,COMPLETING") and time.monotonic() < deadline:
        time.sleep(0.5)
    assert not our_jobs(tmp_path, "PENDING,RUNNING,COMPLETING")
    states = dict(
        line.split("|")
        for line in (_slurm("squeue", "-h", "-t", "all", "-o", "%i|%T") or "").split()
    )
    assert [states.get(job) for job in cancelled] == ["CANCELLED", "CANCELLED"]

    before = PointStore(tmp_path / "store").load(columns=["created_unix"]).to_pandas()
    before = dict(zip(before["key"], before["created_unix"], strict=True))
    missing = N_KILL_POINTS - len(before)
    assert 3 <= len(before) and missing > 0, "the cancel should land mid-run"

    rerun_start = time.time()
    rerun = subprocess.run(
        [*cmd, "--profile", str(profile)],
        cwd=tmp_path,
        env=env,
        capture_output=True,
        text=True,
        timeout=600,
    )
    assert rerun.returncode == 0, rerun.stdout + rerun.stderr
    assert f"{missing} points to compute" in rerun.stdout
    assert f"({len(before)} cached)" in rerun.stdout
    assert f"{N_KILL_POINTS} done, 0 failed, 0 pending" in rerun.stdout

    # Every point once: the points stored before the cancel were not computed again
    # (same record, same creation time), and the rerun stored exactly the missing ones.
    after = PointStore(tmp_path / "store").load(columns=["created_unix"]).to_pandas()
    assert after["key"].is_unique and len(after) == N_KILL_POINTS
    after = dict(zip(after["key"], after["created_unix"], strict=True))
    assert all(after[key] == created for key, created in before.items())
    new = [key for key in after if key not in before]
    assert len(new) == missing
    assert all(after[key] >= rerun_start for key in new)
    assert len(stored(tmp_path / "store")) == N_KILL_POINTS


@pytest.mark.slow  # a run that only the stuck-run guard ends: about 40 s
def test_sacct_without_accounting_is_caught_by_the_stuck_run_guard(tmp_path):
    """The issue the profile's ``squeue`` line fixes, reproduced: with the plugin's
    default status command (sacct) on a cluster without accounting storage, the jobs
    end but the plugin never learns it; the guard stops the run, says why, exits 0."""
    config = _slurm("scontrol", "show", "config") or ""
    if "accounting_storage/none" not in config:
        pytest.skip("this cluster has accounting storage: sacct works on it")
    (tmp_path / "campaign.yaml").write_text(SPEC)
    profile = filled_profile(tmp_path / "profile", drop="slurm-status-command: squeue")
    env = dict(os.environ, OMP_NUM_THREADS="1", PESFLOW_STALL_GRACE_S="15")
    run = subprocess.run(
        [sys.executable, "-m", "pesflow", "run", "campaign.yaml", "--cores", "2"]
        + ["--profile", str(profile)],
        cwd=tmp_path,
        env=env,
        capture_output=True,
        text=True,
        timeout=600,
    )
    assert run.returncode == 0, run.stdout + run.stderr
    assert f"all {N_POINTS} points are stored but the scheduler still reported" in run.stderr
    assert f"{N_POINTS} done, 0 failed, 0 pending" in run.stdout
    wd = tmp_path / "results" / "slurm-check" / ".pesflow" / "workflow"
    log = "\n".join(p.read_text() for p in (wd / "logs").glob("snakemake-*.log"))
    assert "Finished jobid" not in log  # Snakemake never saw a batch job end
    assert len(stored(tmp_path / "store")) == N_POINTS
