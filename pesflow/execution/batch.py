"""Run one batch: an ordered walk of single points, each made durable at once.

This is what one Snakemake job executes (``python -m pesflow.execution.batch TASK DONE``).
A batch reads its task file (written by :func:`pesflow.execution.driver.write_tasks`,
with every point's keys made by the plan), skips every point already in the store,
computes the rest in walk order through an engine walk
(:class:`pesflow.engine.base.EngineWalk`, which starts each point from its
neighbour's solution), and writes one store record per point as soon as it is
finished.  A killed batch therefore loses
only the point in flight; the rerun computes only what is missing.  A point
that fails is recorded with its error text; the batch goes on.

Continuity: after the forward walk, points whose energy jumps against their
neighbours (or whose <S^2> changes abruptly, or whose active space changed
character, as the engine says in ``extra["character_change"]``) are computed again
walking the other way, each from its right-hand neighbour's density, and the lower of the
two solutions is kept (the record's ``attempts`` says so).

The done marker written at the end lists the batch's points and their status;
Snakemake uses it as the job's output.

A Snakemake job usually holds several walks (a *job* file, :data:`JOB_FORMAT`, packed by
:mod:`pesflow.plan.batches`): :func:`run_job` runs :func:`run_batch` on each of them in
turn in this one process, so the interpreter and PySCF start once per job, and writes
one done marker for the job.  Durability is that of each walk: every point is stored
the moment it is finished.
"""

from __future__ import annotations

import argparse
import json
import logging
import os
import sys
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from pesflow.formats.atomic import atomic_write

log = logging.getLogger("pesflow.execution.batch")

TASK_FORMAT = "pesflow-batch"
TASK_VERSION = 1
#: A job file: several walk tasks (each of :data:`TASK_FORMAT`) run one after the other.
JOB_FORMAT = "pesflow-job"
JOB_VERSION = 1

#: A solution found walking backwards must be lower by this much to replace the first.
LOWER_BY_HARTREE = 1e-7


def read_task(path) -> dict:
    """Read a batch task file (or check a task already read, a dict; e.g. one walk of a
    job file) written by :func:`pesflow.execution.driver.write_tasks`."""
    task = path if isinstance(path, dict) else json.loads(Path(path).read_text())
    if task.get("format") != TASK_FORMAT or task.get("version") != TASK_VERSION:
        raise ValueError(f"{path}: not a pesflow batch task of version {TASK_VERSION}")
    return task


def _failure(method, exc):
    from pesflow.engine import PointResult
    from pesflow.engine.base import error_line

    return PointResult.failed(method, error_line(exc))


@dataclass
class _Computed:
    """One point computed in this batch."""

    index: int  # position in the task's point list
    methods: list[str]  # the methods computed here
    results: dict  # method -> PointResult

    def lead(self):
        """The result used to judge continuity: the first requested method's."""
        return self.results.get(self.methods[0])


class _Walk:
    """Binds a task to its engine walks and its store.

    Single points go through one engine walk of the batch's methods; a relaxed scan
    has one engine walk per method (each relaxed from its own neighbour).  The
    engine walks keep the state (density, relaxed geometry); :meth:`restart` forgets it.
    """

    def __init__(self, task, threads, max_memory_mb=None, writer=None):
        from pesflow.engine import EngineSettings, get_engine
        from pesflow.store.point_store import PointStore
        from pesflow.store.writer import PointWriter

        self.task = task
        self._settings_json = {}
        self.engine = get_engine(task["engine"])
        if self.engine.version != task["engine_version"]:
            raise RuntimeError(
                f"this batch was planned for {task['engine']} {task['engine_version']} but "
                f"{self.engine.version} is installed here; use the same environment everywhere"
            )
        self.settings = EngineSettings.from_key_dict(
            task["settings"],
            threads=threads,
            max_memory_mb=int(max_memory_mb or task.get("max_memory_mb", 4000)),
        )
        self.store = PointStore(task["store"])
        if writer is None or writer.store.root != self.store.root:
            writer = PointWriter(self.store)
        else:  # the job's store object: its listing caches serve every walk
            self.store = writer.store
        self.writer = writer  # durable writes overlapping the next point's computation
        self.symbols = tuple(task["symbols"])
        self.relax = task.get("relax")
        methods = list(dict.fromkeys(m for p in task["points"] for m in p["keys"]))
        self.walks = {}  # one engine walk for all methods, or one per method when relaxed
        for group in [[m] for m in methods] if self.relax else [methods]:
            try:
                walk = self.engine.start_walk(self.settings, task["basis"], group)
            except Exception as exc:  # recorded on every point, never allowed to stop
                walk = exc
            self.walks[group[0] if self.relax else None] = walk
        # The store columns every record of this batch shares.
        self.shared = {
            "basis": task["basis"],
            "charge": task["charge"],
            "multiplicity": task["multiplicity"],
            "symbols": " ".join(task["symbols"]),
            "engine": self.engine.name,
            "engine_version": self.engine.version,
        }

    def restart(self):
        """Forget every engine walk's state (the next point is not a neighbour)."""
        for walk in self.walks.values():
            if not isinstance(walk, Exception):
                walk.restart()

    def geometry(self, point):
        from pesflow.engine import Geometry

        return Geometry(
            symbols=self.symbols,
            positions_angstrom=np.asarray(point["positions"], dtype=float),
            charge=self.task["charge"],
            multiplicity=self.task["multiplicity"],
            ghosts=tuple(self.task.get("ghosts", ())),
        )

    def settings_key(self, method):
        key = self.settings.key_dict(method)
        if self.relax:
            key = {**key, "relax": self.relax["key"]}
        if self.task.get("ghosts"):
            key = {**key, "ghosts": list(self.task["ghosts"])}
        return key

    def settings_json(self, method) -> str:
        """The stored ``settings_json`` of ``method``'s records (the same at every point)."""
        if method not in self._settings_json:
            self._settings_json[method] = json.dumps(self.settings_key(method), sort_keys=True)
        return self._settings_json[method]

    def relax_point(self, point, method):
        """The relaxed record of ``method`` at ``point``'s scan values, from the
        neighbour's relaxed geometry (the planned rigid geometry at a walk's start)."""
        coords = self.relax["coordinates"]
        constraints = [
            (c["kind"], tuple(c["atoms"]), float(v)) for c, v in zip(coords, point["values"])
        ]
        moving = [c["moving"] for c in coords]
        walk = self.walks[method]
        try:
            if isinstance(walk, Exception):
                raise walk
            return walk.relax(self.geometry(point), constraints, moving)
        except Exception as exc:  # recorded, never allowed to stop the batch
            if not isinstance(walk, Exception):
                walk.restart()
            return _failure(method, exc)

    def compute(self, point, methods):
        """Results of ``methods`` at ``point``, started from the previous point's solution."""
        walk = self.walks[None]
        try:
            if isinstance(walk, Exception):
                raise walk
            return walk.compute(self.geometry(point), methods)
        except Exception as exc:  # recorded, never allowed to stop the batch
            if not isinstance(walk, Exception):
                walk.restart()
            return {m: _failure(m, exc) for m in methods}

    @staticmethod
    def key(point, method):
        """The key the plan made for ``method`` at ``point`` (None if it made none)."""
        if method in point["keys"]:
            return point["keys"][method]
        # e.g. the CCSD part of a CCSD(T) calculation: kept, it is free
        return point.get("byproduct_keys", {}).get(method)

    def write(self, point, *results):
        """Store the ``results`` of one point (each at its relaxed geometry when it has
        one), durable before the next point's are taken (:class:`PointWriter`)."""
        records = []
        for result in results:
            key = self.key(point, result.method)
            if key is None:
                log.warning(
                    "no key planned for %s at walk %d; not stored", result.method, point["walk"]
                )
                continue
            at = (
                point["positions"]
                if result.geometry is None
                else result.geometry.positions_angstrom
            )
            records.append(
                dict(
                    key=key,
                    positions_angstrom=np.asarray(at, dtype=float).ravel().tolist(),
                    settings_json=self.settings_json(result.method),
                    created_unix=time.time(),
                    **self.shared,
                    **result.columns(),
                )
            )
        self.writer.write(*records)


def _contiguous_runs(computed: list[_Computed], points) -> list[list[_Computed]]:
    runs, current = [], []
    for c in computed:
        if current and points[c.index]["walk"] - points[current[-1].index]["walk"] != 1:
            runs.append(current)
            current = []
        current.append(c)
    if current:
        runs.append(current)
    return runs


def _backward_sweep(walk: _Walk, run: list[_Computed], points, status) -> int:
    """Redo the suspect segment of a contiguous run walking backwards; keep lower energies.

    Returns how many points got a lower solution.
    """
    from pesflow.analysis.continuity import segment, suspect_points

    leads = [c.lead() for c in run]
    energies = np.array([r.energy_hartree if r is not None else np.nan for r in leads])
    s2 = np.array([r.s2 if r is not None else np.nan for r in leads])
    # The engine's own judgement of a change of character (a multireference walk's
    # active space), measured against the point before in walk order.
    changes = [bool(r is not None and r.extra.get("character_change")) for r in leads]
    changes[0] = False  # measured against a point outside this run
    span = segment(suspect_points(energies, s2, changes=changes), len(run))
    if span is None:
        return 0
    lo, hi = span
    log.info(
        "discontinuity along the walk at points %d-%d: walking back over them",
        points[run[lo].index]["walk"],
        points[run[hi].index]["walk"],
    )
    walk.restart()
    if hi + 1 < len(run):  # start from the solution of the point past the segment
        walk.compute(points[run[hi + 1].index], run[hi + 1].methods)
    improved = 0
    for c in reversed(run[lo : hi + 1]):
        point = points[c.index]
        results = walk.compute(point, c.methods)
        new, old = results.get(c.methods[0]), c.lead()
        better = (
            new is not None
            and new.converged
            and (
                old is None
                or not old.converged
                or new.energy_hartree < old.energy_hartree - LOWER_BY_HARTREE
            )
        )
        if not better:
            continue
        improved += 1
        for method, result in results.items():
            result.attempts = list(result.attempts) + [
                {
                    "rung": "backward-walk",
                    "converged": bool(result.converged),
                    "cycles": int(result.scf_cycles),
                    "energy_hartree": float(result.energy_hartree),
                    "replaced_energy_hartree": float(c.results[method].energy_hartree)
                    if method in c.results
                    else float("nan"),
                }
            ]
            if method in point["keys"]:
                status[point["keys"][method]] = "done" if result.converged else "failed"
        walk.write(point, *results.values())
        c.results = results
    return improved


def _relax_point(walk, point, methods, counts, status):
    """Relax ``point`` for each method, each from its own neighbour's relaxed geometry
    (kept by that method's engine walk)."""
    for method in methods:
        result = walk.relax_point(point, method)
        walk.write(point, result)
        counts["computed"] += 1
        status[point["keys"][method]] = "done" if result.converged else "failed"
        if not result.converged:
            log.warning(
                "relaxed point %s (%s, walk %d) failed: %s",
                point["keys"][method],
                method,
                point["walk"],
                result.error,
            )


def _seed_states(walk, points, index):
    """Excited states are followed by their overlaps with the previous point's: when that
    point is stored already (a resumed walk), compute it again, unstored, so that this
    point's overlaps are not lost."""
    from pesflow.engine import method_info

    point = points[index]
    if walk.relax or index == 0 or abs(points[index - 1]["walk"] - point["walk"]) != 1:
        return
    multi = [m for m in point["keys"] if method_info(m).n_states > 1]
    if multi:
        walk.compute(points[index - 1], multi)


def run_batch(
    task_path,
    done_path,
    threads: int = 1,
    continuity: bool = True,
    max_memory_mb: int | None = None,
    writer=None,
) -> dict:
    """Compute every missing point of one batch and write its done marker.

    Parameters
    ----------
    task_path : path of the batch's task JSON.
    done_path : path of the done marker (JSON) written at the end.
    threads : PySCF threads for this batch (Snakemake's ``threads``).
    max_memory_mb : memory of the job (Snakemake's ``mem_mb``); PySCF gets 80 % of it.
    continuity : redo suspect segments walking backwards (default True).
    writer : the job's :class:`~pesflow.store.writer.PointWriter` (its caller closes it);
        by default the batch has its own, closed and compacted before the marker.

    Returns the marker's content: counts of points computed, skipped, failed, improved.
    """
    task = read_task(task_path)
    memory = None if max_memory_mb is None else int(0.8 * max_memory_mb)
    walk = _Walk(task, threads, memory, writer)
    if walk.writer is writer:
        return _run_walk(task, walk, continuity, done_path)
    with walk.writer:
        marker = _run_walk(task, walk, continuity, None)
    walk.writer.compact()
    _write_marker(done_path, marker)
    return marker


def _write_marker(done_path, marker) -> None:
    if done_path is not None:  # None: one walk of a job, whose marker run_job writes
        done_path = Path(done_path)
        done_path.parent.mkdir(parents=True, exist_ok=True)
        atomic_write(done_path, json.dumps(marker, indent=1), fsync=False)


def _run_walk(task, walk, continuity, done_path) -> dict:
    points = task["points"]
    counts = {"computed": 0, "skipped": 0, "failed": 0, "improved": 0}
    status = {}
    recompute = set(task.get("recompute", ()))
    computed: list[_Computed] = []
    previous_walk = None
    t0 = time.time()
    walk.writer.flush()  # the job's earlier walks are listed too
    stored = walk.store.keys()  # one listing, not a look-up per point
    for index, point in enumerate(points):
        wanted = point["keys"]
        missing = [m for m, k in wanted.items() if k in recompute or k not in stored]
        counts["skipped"] += len(wanted) - len(missing)
        status.update({k: "cached" for m, k in wanted.items() if m not in missing})
        if not missing:
            continue
        if previous_walk is None or abs(point["walk"] - previous_walk) > 1:
            walk.restart()  # a neighbour's solution is a good guess; a distant one is not
            _seed_states(walk, points, index)
        if walk.relax:
            _relax_point(walk, point, missing, counts, status)
            previous_walk = point["walk"]
            continue
        results = walk.compute(point, missing)
        previous_walk = point["walk"]
        fresh = {m: r for m, r in results.items() if m not in wanted or m in missing}
        walk.write(point, *fresh.values())
        for method, result in fresh.items():
            if method in wanted:
                counts["computed"] += 1
                status[wanted[method]] = "done" if result.converged else "failed"
                if not result.converged:
                    log.warning(
                        "point %s (%s, walk %d) failed: %s",
                        wanted[method],
                        method,
                        point["walk"],
                        result.error,
                    )
        computed.append(_Computed(index=index, methods=missing, results=results))
    if continuity and not walk.relax:
        for run in _contiguous_runs(computed, points):
            counts["improved"] += _backward_sweep(walk, run, points, status)
    counts["failed"] = sum(1 for v in status.values() if v == "failed")
    marker = {"batch_id": task["batch_id"], "wall_s": time.time() - t0, **counts, "points": status}
    walk.writer.flush()  # every point durable before a marker says so
    _write_marker(done_path, marker)
    return marker


def _report_progress(path: Path, job, task, walks, status) -> None:
    """What this job is doing, for the driver's progress display (never fsynced;
    advisory only: the store is the record of what is done)."""
    running = None
    if task is not None:
        methods = sorted({m for p in task["points"] for m in p["keys"]})
        running = {
            "molecule": task.get("molecule"),
            "scan": task.get("scan"),
            "levels": [f"{m}/{task['basis']}" for m in methods],
        }
    content = {
        "job_id": job["job_id"],
        "walks": len(job["walks"]),
        "walks_done": len(walks),
        "running": running,
        "failed": sorted(k for k, v in status.items() if v == "failed"),
    }
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        atomic_write(path, json.dumps(content), fsync=False)
    except OSError:  # the display is advisory; never fail a job on it
        pass


class WorkSharing:
    """The walks of one local run's jobs, shared so that no core idles at the run's end.

    Static packing balances the jobs by *estimated* work; the estimate is off by tens
    of per cent on small molecules, so one job would end seconds before the other.
    Instead, a job claims each walk before it starts it, and when its own walks are
    all claimed it takes over walks the other jobs have not started, their shortest
    first (a job's walks are in order of estimated work, longest first).  It does so
    only while every other job has started: a job not started yet keeps its walks, and
    Snakemake starts it on the core this one frees.

    A claim is a file created with ``O_EXCL`` in the run's ``claims`` folder (cleared
    when the run's tasks are written) holding the claiming job's id, so each walk is run
    by one job; a job run again after a failure takes back the claims it holds.  Claims
    only divide the work: what is done is what is in the store, so a killed job's walk
    is computed by the next run like any missing point.
    """

    def __init__(self, share: dict, job_id: str, tasks_dir: Path):
        self.folder = Path(share["claims"])
        self.job_id = job_id
        self.peers = [j for j in share["jobs"] if j != job_id]
        self.tasks_dir = Path(tasks_dir)
        self.taken: set[str] = set()  # claims this process holds (run or running)
        self.taken_over = 0
        self._walks: dict[str, list] = {}
        self.folder.mkdir(parents=True, exist_ok=True)
        (self.folder / f"{job_id}.started").touch()

    def take(self, batch_id: str) -> bool:
        """Claim one walk; True when this job is to run it."""
        if batch_id in self.taken:
            return False
        path = self.folder / f"{batch_id}.claim"
        try:
            fd = os.open(path, os.O_CREAT | os.O_EXCL | os.O_WRONLY, 0o644)
        except FileExistsError:
            try:  # this job's own claim from an earlier attempt
                mine = path.read_text() == self.job_id
            except OSError:
                mine = False
            if mine:
                self.taken.add(batch_id)
            return mine
        try:
            os.write(fd, self.job_id.encode())
        finally:
            os.close(fd)
        self.taken.add(batch_id)
        return True

    def walks(self, own: list):
        """This job's walks that no other job took, then the ones it takes over."""
        for task in own:
            if self.take(task["batch_id"]):
                yield task
        while self.peers and all((self.folder / f"{p}.started").exists() for p in self.peers):
            task = next(
                (
                    t
                    for p in self.peers
                    for t in reversed(self._walks_of(p))
                    if self.take(t["batch_id"])
                ),
                None,
            )
            if task is None:
                return
            self.taken_over += 1
            yield task

    def _walks_of(self, job_id: str) -> list:
        if job_id not in self._walks:
            try:
                job = json.loads((self.tasks_dir / f"{job_id}.json").read_text())
                self._walks[job_id] = list(job.get("walks", ()))
            except (OSError, ValueError):  # gone or unreadable: nothing to take over
                self._walks[job_id] = []
        return self._walks[job_id]


def run_job(
    job_path,
    done_path,
    threads: int = 1,
    continuity: bool = True,
    max_memory_mb: int | None = None,
) -> dict:
    """Run every walk of a job file in order (:func:`run_batch` on each); write one marker.

    A plain walk task file (:data:`TASK_FORMAT`) is run as a job of one walk.  Returns
    the marker's content: the job id, summed counts, the status of every point, and
    each walk's id and seconds.
    """
    job = json.loads(Path(job_path).read_text())
    if job.get("format") == TASK_FORMAT:
        return run_batch(job_path, done_path, threads, continuity, max_memory_mb)
    if job.get("format") != JOB_FORMAT or job.get("version") != JOB_VERSION:
        raise ValueError(f"{job_path}: not a pesflow job or batch task of a known version")
    t0 = time.time()
    counts = {"computed": 0, "skipped": 0, "failed": 0, "improved": 0}
    status, walks = {}, []
    from pesflow.store.point_store import PointStore
    from pesflow.store.writer import PointWriter

    progress = Path(done_path).parent.parent / "progress" / f"{job['job_id']}.json"
    writers = {}  # one PointWriter per store (a job's walks share one)
    sharing = None
    if job.get("share"):
        sharing = WorkSharing(job["share"], job["job_id"], Path(job_path).parent)
    try:
        for task in job["walks"] if sharing is None else sharing.walks(job["walks"]):
            _report_progress(progress, job, task, walks, status)
            root = read_task(task)["store"]
            if root not in writers:
                writers[root] = PointWriter(PointStore(root))
            writer = writers[root]
            marker = run_batch(task, None, threads, continuity, max_memory_mb, writer)
            for name in counts:
                counts[name] += marker[name]
            status.update(marker["points"])
            walks.append({"batch_id": marker["batch_id"], "wall_s": marker["wall_s"]})
            log.info(
                "walk %s: %d computed, %d failed, %d cached, %.1f s",
                marker["batch_id"],
                marker["computed"],
                marker["failed"],
                marker["skipped"],
                marker["wall_s"],
            )
    finally:
        for writer in writers.values():
            writer.close()
    waited = sum(writer.waited_s for writer in writers.values())
    for writer in writers.values():
        writer.compact()
    _report_progress(progress, job, None, walks, status)
    marker = {
        "batch_id": job["job_id"],
        "wall_s": time.time() - t0,
        **counts,
        "walks": walks,
        "taken_over": 0 if sharing is None else sharing.taken_over,
        "store_wait_s": waited,
        "points": status,
    }
    done_path = Path(done_path)
    done_path.parent.mkdir(parents=True, exist_ok=True)
    atomic_write(done_path, json.dumps(marker, indent=1), fsync=False)
    return marker


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(
        prog="python -m pesflow.execution.batch",
        description="Run one pesflow job: its walks in order (used by Snakemake).",
    )
    parser.add_argument("task", help="job (or single batch) task JSON")
    parser.add_argument("done", help="done marker to write")
    parser.add_argument("--threads", type=int, default=1)
    parser.add_argument(
        "--max-memory-mb",
        type=int,
        default=None,
        help="memory of this job in MB (PySCF is given 80 %% of it)",
    )
    args = parser.parse_args(argv)
    logging.basicConfig(level=logging.INFO, format="%(asctime)s %(levelname)s %(message)s")
    os.environ.setdefault("OMP_NUM_THREADS", str(args.threads))
    marker = run_job(args.task, args.done, threads=args.threads, max_memory_mb=args.max_memory_mb)
    log.info(
        "batch %s: %d computed, %d failed, %d cached, %d improved walking back, "
        "%d walks taken over from other jobs, %.1f s (%.2f s of it waiting for the store)",
        marker["batch_id"],
        marker["computed"],
        marker["failed"],
        marker["skipped"],
        marker["improved"],
        marker.get("taken_over", 0),
        marker["wall_s"],
        marker.get("store_wait_s", 0.0),
    )
    return 0


if __name__ == "__main__":
    sys.exit(main())
