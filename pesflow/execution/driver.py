"""Drive a campaign through Snakemake: write batch tasks, run, watch, recover.

``pesflow run`` plans what is missing, writes one task file per batch, and runs
the workflow in ``workflows/`` with Snakemake's command line (local ``--cores N``
by default, or any executor through ``--profile``).  While it runs, the store is
watched for finished points to drive the progress display.

Recovery: a run lock (``fcntl.flock`` on a file in the campaign's results
folder, inherited by the Snakemake process) tells whether another run of the
campaign is alive.  If none is, Snakemake's own stale locks and incomplete
markers (left by a kill) are cleared before the run; if one is, the run is
refused.  Signals: SIGINT, SIGTERM and SIGHUP to the driver are passed to
Snakemake as SIGINT (which stops its jobs cleanly); if Snakemake has not ended
after a grace period it is killed.  Every finished point is already durable.

A stuck status query: when every batch of the run has written its done marker (so
all its points are stored) and Snakemake still has not ended ``stall_grace_s``
seconds later, the executor is not learning that its jobs ended (e.g. the SLURM
plugin asking ``sacct`` on a cluster without accounting storage).  Snakemake is then
stopped as on SIGINT and the outcome says ``stalled``; nothing is lost, since the
points are in the store before the markers are written.
"""

from __future__ import annotations

import fcntl
import json
import os
import shutil
import signal
import subprocess
import sys
import time
from dataclasses import dataclass, field
from pathlib import Path

from pesflow.errors import RunError
from pesflow.formats.atomic import atomic_write

GRACE_S = 20.0
#: How often the done markers are listed while an ``on_ended`` callback waits (seconds).
ENDED_LOOK_S = 0.05
#: Seconds Snakemake may go on after every batch has ended before the run is stopped as
#: stuck: longer than the SLURM executor plugin's longest pause between status checks
#: (180 s).  ``PESFLOW_STALL_GRACE_S`` overrides it.
STALL_GRACE_S = 240.0


def stall_grace_s() -> float:
    """The stuck-run grace period: ``PESFLOW_STALL_GRACE_S`` if set, else STALL_GRACE_S."""
    text = os.environ.get("PESFLOW_STALL_GRACE_S", "").strip()
    if not text:
        return STALL_GRACE_S
    try:
        value = float(text)
    except ValueError:
        value = float("nan")
    if not value > 0 or value == float("inf"):
        raise RunError(
            f"environment variable PESFLOW_STALL_GRACE_S: {text!r} is not allowed; "
            "give a number of seconds greater than 0"
        )
    return value


def workflow_dir() -> Path:
    """Folder of the Snakefile (the repository's ``workflows/``, or the installed copy)."""
    package = Path(__file__).resolve().parents[1]  # pesflow/
    for candidate in (package.parent / "workflows", package / "workflows"):
        if (candidate / "Snakefile").exists():
            return candidate
    raise RunError("cannot find the pesflow workflow (workflows/Snakefile); reinstall pesflow")


@dataclass
class RunOptions:
    """Execution settings (never science settings: those live in the spec)."""

    cores: int | None = None
    profile: str | None = None
    threads_per_batch: int = 1
    mem_mb_per_batch: int = 4000
    runtime_min_per_batch: int = 600
    #: estimated seconds of work per Snakemake job (None: a local or a cluster default,
    #: see :mod:`pesflow.plan.batches`)
    target_job_s: float | None = None
    extra_args: list[str] = field(default_factory=list)
    stall_grace_s: float = field(default_factory=stall_grace_s)


def workdir(campaign) -> Path:
    """Snakemake's working folder of a campaign (tasks, done markers, logs, .snakemake)."""
    return campaign.results_path / ".pesflow" / "workflow"


def task_dict(plan, batch, store_root, recompute=()) -> dict:
    """The task file content of one batch (everything the worker needs)."""
    from pesflow.execution.batch import TASK_FORMAT, TASK_VERSION
    from pesflow.plan.expand import relax_key

    gs = plan.geometry_sets[batch.set_id]
    keys = {k for _, methods in batch.entries for k in methods.values()}
    engine, engine_version = plan.batch_engine(batch)
    return {
        "format": TASK_FORMAT,
        "version": TASK_VERSION,
        "batch_id": batch.batch_id,
        "campaign": plan.campaign,
        "molecule": gs.molecule,
        "scan": gs.scan,
        "store": str(store_root),
        "engine": engine,
        "engine_version": engine_version,
        "settings": gs.settings_key,
        "basis": batch.basis,
        "family": batch.family,
        "symbols": list(gs.symbols),
        "charge": gs.charge,
        "multiplicity": gs.multiplicity,
        "ghosts": list(gs.ghosts),
        "recompute": sorted(keys & set(recompute)),
        "relax": None
        if not gs.relax
        else {
            "coordinates": [
                {"kind": kind, "atoms": list(atoms), "moving": list(moving)}
                for kind, atoms, moving in zip(gs.coordinate_kinds, gs.coordinate_atoms, gs.moving)
            ],
            "key": relax_key(gs),
        },
        "points": [
            {
                "walk": walk,
                "positions": gs.positions[walk].tolist(),
                "keys": methods,
                "byproduct_keys": plan.byproduct_keys(batch, walk),
                "values": gs.values[walk].tolist(),
            }
            for walk, methods in batch.entries
        ],
    }


def job_dict(plan, job, store_root, recompute=(), share=None) -> dict:
    """The task file content of one job: the task of each of its walks, run in order.

    ``share`` (a local run): the job's walks are shared with the run's other jobs
    (:class:`pesflow.execution.batch.WorkSharing`); they are then ordered by estimated
    work, the longest first, so that the last ones, which an idle job takes over, are
    the shortest.
    """
    from pesflow.execution.batch import JOB_FORMAT, JOB_VERSION

    batches = job.batches
    if share is not None:
        batches = sorted(batches, key=lambda b: -b.weight)
    content = {
        "format": JOB_FORMAT,
        "version": JOB_VERSION,
        "job_id": job.job_id,
        "walks": [task_dict(plan, batch, store_root, recompute) for batch in batches],
    }
    if share is not None:
        content["share"] = share
    return content


def write_tasks(plan, jobs, store_root, wd: Path, options: RunOptions, recompute=(), starter=None):
    """Write one task file per job and the Snakemake config; clear stale done markers.

    ``jobs`` are :class:`pesflow.plan.batches.Job` objects; a plain
    :class:`~pesflow.plan.expand.Batch` is taken as a job of one walk.  ``starter``: the
    address of the run's :class:`~pesflow.execution.starter.JobStarter` (local runs).
    """
    from pesflow.plan.batches import Job

    jobs = [
        j if isinstance(j, Job) else Job(job_id=j.batch_id, batches=[j], weight=j.weight)
        for j in jobs
    ]
    (wd / "tasks").mkdir(parents=True, exist_ok=True)
    (wd / "done").mkdir(parents=True, exist_ok=True)
    for stale in (wd / "progress").glob("*.json"):  # the display of an earlier run
        stale.unlink(missing_ok=True)
    # Claims of an earlier run (one run at a time: the run lock is held).
    shutil.rmtree(wd / "claims", ignore_errors=True)
    share = None
    if not options.profile and len(jobs) > 1:  # local jobs share their walks
        share = {"claims": str(wd / "claims"), "jobs": [j.job_id for j in jobs]}
    for job in jobs:
        atomic_write(
            wd / "tasks" / f"{job.job_id}.json",
            json.dumps(job_dict(plan, job, store_root, recompute, share)),
        )
        marker = wd / "done" / f"{job.job_id}.json"
        if marker.exists():
            marker.unlink()
    config = {
        "campaign": plan.campaign,
        "python": sys.executable,
        "batches": [j.job_id for j in jobs],
        "threads_per_batch": options.threads_per_batch,
        "mem_mb_per_batch": options.mem_mb_per_batch,
        "runtime_min_per_batch": options.runtime_min_per_batch,
        "job_starter": starter or "",
    }
    path = wd / "config.json"
    atomic_write(path, json.dumps(config, indent=1))
    return path


class RunLock:
    """An exclusive lock on a campaign's results folder, alive while any process holds it."""

    def __init__(self, path: Path):
        self.path = path
        self.fd = None

    def acquire(self):
        self.path.parent.mkdir(parents=True, exist_ok=True)
        fd = os.open(self.path, os.O_RDWR | os.O_CREAT, 0o644)
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            try:
                holder = os.read(fd, 64).decode().strip() or "unknown"
            finally:
                os.close(fd)
            raise RunError(
                f"another pesflow run of this campaign is alive (pid {holder}); nothing was "
                f"started. Wait for it, or stop it, then run again ({self.path})"
            ) from None
        os.ftruncate(fd, 0)
        os.write(fd, str(os.getpid()).encode())
        self.fd = fd
        return self

    def release(self):
        if self.fd is not None:
            os.close(self.fd)
            self.fd = None


def snakemake_env(threads_per_batch: int = 1) -> dict:
    """Snakemake's environment (and so its jobs'): this one, with ``OMP_NUM_THREADS`` set to
    the threads of a batch unless the user set it."""
    env = dict(os.environ)
    env.setdefault("OMP_NUM_THREADS", str(threads_per_batch))
    return env


def snakemake_command(wd: Path, config_path: Path, options: RunOptions) -> list[str]:
    """The Snakemake command line for a run: ``python -m snakemake`` and its arguments."""
    wf = workflow_dir()
    cmd = [
        sys.executable,
        "-m",
        "snakemake",
        "--snakefile",
        str(wf / "Snakefile"),
        "--directory",
        str(wd),
        "--configfile",
        str(config_path),
        "--rerun-incomplete",
        "--rerun-triggers",
        "mtime",
        "--keep-going",
        "--scheduler",
        "greedy",
        "--show-failed-logs",
        # pesflow's run lock already excludes a second run; mtime triggers need no metadata
        "--nolock",
        "--drop-metadata",
    ]
    if options.profile:
        cmd += ["--profile", str(Path(options.profile).resolve())]
    if options.cores is not None or not options.profile:
        cmd += ["--cores", str(options.cores or os.cpu_count() or 1)]
    return cmd + list(options.extra_args)


def _clear_stale_snakemake_locks(wd: Path, config_path: Path, log) -> None:
    locks = wd / ".snakemake" / "locks"
    if locks.exists() and any(locks.iterdir()):
        cmd = [
            sys.executable,
            "-m",
            "snakemake",
            "--snakefile",
            str(workflow_dir() / "Snakefile"),
            "--directory",
            str(wd),
            "--configfile",
            str(config_path),
            "--unlock",
            "--cores",
            "1",
        ]
        subprocess.run(cmd, stdout=log, stderr=subprocess.STDOUT, check=False)


def _descendants(pid: int) -> list[int]:
    """Process ids below ``pid`` (from /proc; empty where /proc is absent)."""
    children: dict[int, list[int]] = {}
    proc = Path("/proc")
    if not proc.exists():
        return []
    for entry in proc.iterdir():
        if not entry.name.isdigit():
            continue
        try:
            stat = (entry / "stat").read_text()
        except OSError:
            continue
        ppid = int(stat.rsplit(")", 1)[1].split()[1])
        children.setdefault(ppid, []).append(int(entry.name))
    out, todo = [], [pid]
    while todo:
        for child in children.get(todo.pop(), []):
            out.append(child)
            todo.append(child)
    return out


def kill_tree(pid: int) -> None:
    """SIGKILL a process and everything it started (a last resort after the grace period)."""
    for p in [pid, *_descendants(pid)]:
        try:
            os.kill(p, signal.SIGKILL)
        except ProcessLookupError:
            pass


@dataclass
class RunOutcome:
    returncode: int  # Snakemake's exit code
    interrupted: bool
    log_path: Path
    stalled: bool = False  # stopped: every batch had ended, yet Snakemake kept waiting


class _AllBatchesEnded:
    """Says when every batch of the run has written its done marker, and since when."""

    def __init__(self, done_dir: Path, batches, grace_s: float, look_every_s: float = 2.0):
        self.done_dir, self.grace_s, self.look_every_s = done_dir, grace_s, look_every_s
        self.wanted = {f"{b}.json" for b in batches}
        self.since = None
        self.next_look = 0.0

    def overdue(self, look_now: bool = False) -> bool:
        """True when every batch ended more than ``grace_s`` ago; ``look_now``: list the
        markers now rather than every ``look_every_s``."""
        now = time.monotonic()
        if look_now or now >= self.next_look:  # a directory listing every look_every_s
            self.next_look = now + self.look_every_s
            try:
                ended = self.wanted <= set(os.listdir(self.done_dir))
            except OSError:
                ended = False
            if not ended:
                self.since = None
            elif self.since is None:
                self.since = now
        return self.since is not None and now - self.since > self.grace_s


def run_snakemake(
    wd: Path,
    config_path: Path,
    options: RunOptions,
    lock: RunLock,
    on_poll=None,
    poll_s: float = 0.5,
    warm=None,
    on_ended=None,
) -> RunOutcome:
    """Run Snakemake to the end, calling ``on_poll()`` every ``poll_s`` seconds.

    Signals to this process are forwarded to Snakemake as SIGINT.  ``warm``: a
    :class:`~pesflow.execution.warm.WarmSnakemake` started earlier with
    :func:`snakemake_env`, used when it is still there.  ``on_ended()`` is called once,
    within :data:`ENDED_LOOK_S`, when every batch has written its done marker (every
    point of the run is then in the store) while Snakemake may still be winding down.
    """
    logs = wd / "logs"
    logs.mkdir(parents=True, exist_ok=True)
    log_path = logs / f"snakemake-{time.strftime('%Y%m%dT%H%M%S')}-{os.getpid()}.log"
    interrupted = {"flag": False, "at": None}
    batches = json.loads(Path(config_path).read_text()).get("batches", [])
    ended = _AllBatchesEnded(wd / "done", batches, options.stall_grace_s)
    stalled = False
    with open(log_path, "w") as log:
        _clear_stale_snakemake_locks(wd, config_path, log)
        log.flush()
        cmd = snakemake_command(wd, config_path, options)
        proc = None if warm is None else warm.start(cmd[3:], log.fileno(), lock.fd)
        if proc is None:
            proc = subprocess.Popen(
                cmd,
                stdout=log,
                stderr=subprocess.STDOUT,
                stdin=subprocess.DEVNULL,
                env=snakemake_env(options.threads_per_batch),
                pass_fds=(lock.fd,),
            )

        def forward(signum, frame):
            interrupted["flag"] = True
            if interrupted["at"] is None:
                interrupted["at"] = time.monotonic()
            if proc.poll() is None:
                proc.send_signal(signal.SIGINT)

        previous = {
            s: signal.signal(s, forward) for s in (signal.SIGINT, signal.SIGTERM, signal.SIGHUP)
        }
        next_poll = time.monotonic() + poll_s
        try:
            while True:
                try:
                    rc = proc.wait(timeout=ENDED_LOOK_S if on_ended is not None else poll_s)
                    break
                except subprocess.TimeoutExpired:
                    pass
                if on_ended is not None and batches:
                    ended.overdue(look_now=True)
                    if ended.since is not None:
                        on_ended()
                        on_ended = None
                if on_poll is not None and time.monotonic() >= next_poll:
                    next_poll = time.monotonic() + poll_s
                    on_poll()
                if not stalled and batches and ended.overdue():
                    stalled = True  # stop it as on SIGINT (and kill it after GRACE_S)
                    interrupted["at"] = interrupted["at"] or time.monotonic()
                    proc.send_signal(signal.SIGINT)
                if interrupted["at"] is not None and time.monotonic() - interrupted["at"] > GRACE_S:
                    kill_tree(proc.pid)
        finally:
            for s, handler in previous.items():
                signal.signal(s, handler)
    if on_poll is not None:
        on_poll()
    return RunOutcome(
        returncode=rc, interrupted=interrupted["flag"], log_path=log_path, stalled=stalled
    )
