"""pesflow from Python: the stages of the ``pesflow`` command, for scripts and notebooks.

A second door into the same program: :func:`load` reads a campaign spec and returns a
:class:`Campaign` whose methods are the command's verbs.  Tables are pandas DataFrames with
the same columns as ``pesflow export``; errors are the typed exceptions of
:mod:`pesflow.errors` (a bad spec raises :class:`~pesflow.errors.SpecError`, a second run of a
campaign that is running raises :class:`~pesflow.errors.RunError`).  The command line
(:mod:`pesflow.cli`) calls the functions of this module and only prints what they return.

>>> import pesflow
>>> c = pesflow.load("configs/demo-hydrides.yaml")      # doctest: +SKIP
>>> c.plan()[["level", "to_compute", "estimate_core_s"]]  # doctest: +SKIP
>>> c.run(cores=2).failed                               # doctest: +SKIP
0
>>> c.summary()[["molecule", "level", "r_e_angstrom"]]  # doctest: +SKIP
>>> fig = c.plot("hydrogen_fluoride", "stretch")        # doctest: +SKIP
"""

from __future__ import annotations

import sys
import time
from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd

#: During a run, fragments are compacted into a part after this many new points.
COMPACT_EVERY_POINTS = 2000
#: Seconds into a run after which the end's analysis modules are imported on a thread.
PREWARM_AFTER_S = 3.0

#: Meaning of the ``source`` column of :func:`plan_levels` (and the ``from`` column of
#: ``pesflow plan``).
ESTIMATE_SOURCES = {
    "stored timings": "the median time of this molecule's points already computed at this level",
    "scaling model": "a model of how the method's cost grows with the molecule's size "
    "(basis functions, occupied orbitals, atoms), with default factors",
    "scaling model, calibrated": "the same model with its factors calibrated on the "
    "timings already in the store",
}


# ---------------------------------------------------------------------------
# stage functions (the command line calls these)
# ---------------------------------------------------------------------------


def molecules_table(campaign) -> pd.DataFrame:
    """One row per molecule: ``molecule, formula, charge, multiplicity, scans``."""
    rows = []
    for name, mol in campaign.molecules.items():
        scans = [s.name for s in campaign.scans.values() if name in s.molecules]
        rows.append(
            {
                "molecule": name,
                "formula": mol.atoms.get_chemical_formula(),
                "charge": int(mol.charge),
                "multiplicity": int(mol.multiplicity),
                "scans": ", ".join(scans),
            }
        )
    return pd.DataFrame(rows, columns=["molecule", "formula", "charge", "multiplicity", "scans"])


def scans_table(campaign) -> pd.DataFrame:
    """One row per scan: ``scan, coordinates`` (readable ranges), ``points_per_molecule``."""
    rows = []
    for scan in campaign.scans.values():
        coords = "; ".join(
            f"{c.label} {c.values[0]:g}..{c.values[-1]:g} {c.unit} ({len(c.values)})"
            for c in scan.coordinates
        )
        rows.append(
            {"scan": scan.name, "coordinates": coords, "points_per_molecule": len(scan.grid())}
        )
    return pd.DataFrame(rows, columns=["scan", "coordinates", "points_per_molecule"])


def stored_keys(store) -> set[str]:
    """Keys of every stored point (done or failed); empty for a store not written yet."""
    return store.keys() if store.exists() else set()


def failed_keys(store) -> set[str]:
    """Keys of the points stored as failed."""
    if not store.exists():
        return set()
    table = store.status_table(columns=("key", "converged"))
    return {
        k
        for k, c in zip(table.column("key").to_pylist(), table.column("converged").to_pylist())
        if not c
    }


def _timed_points(plan, store, done, sample_per_curve=20):
    """Points with their status and, for a sample of the stored ones, their timing.

    Planning must stay cheap on a large store: it reads the timings of at most
    ``sample_per_curve`` stored points per molecule and level, not every record.
    """
    import numpy as np

    pts = plan.points[["key", "molecule", "level", "method", "basis"]].copy()
    is_done = pts["key"].isin(done)
    pts["status"] = np.where(is_done, "done", "pending")
    sample = pts[is_done].groupby(["molecule", "level"], sort=False).head(sample_per_curve)
    if sample.empty:
        pts["wall_s"] = np.nan
        pts["step_wall_s"] = np.nan
        return pts
    timing = store.load(
        keys=set(sample["key"]), columns=("wall_s", "step_wall_s", "converged")
    ).to_pandas()
    timing = timing.loc[timing["converged"].astype(bool), ["key", "wall_s", "step_wall_s"]]
    return pts.merge(timing, on="key", how="left")


@dataclass
class PlanSummary:
    """What ``pesflow plan`` shows.

    Attributes:
        levels: one row per level: ``level, points, cached, to_compute, estimate_core_s``
            (core-seconds of the points still to compute, NaN when nothing is left),
            ``source`` (how the estimate was made: keys of :data:`ESTIMATE_SOURCES`, joined
            by ``" + "``) and ``share`` (fraction of the whole estimate).
        jobs: number of Snakemake jobs a run would start; ``walks``: the walks they hold.
        store_path: the store.
    """

    levels: pd.DataFrame
    jobs: int
    walks: int
    store_path: Path
    #: The whole remaining work in core-seconds, each SCF shared by several levels counted
    #: once (the per-level estimates each include it).
    total_core_s: float = float("nan")

    @property
    def points(self) -> int:
        return int(self.levels["points"].sum())

    @property
    def cached(self) -> int:
        return int(self.levels["cached"].sum())

    @property
    def estimate_core_s(self) -> float:
        return float(self.levels["estimate_core_s"].fillna(0).sum())


def plan_levels(campaign, plan, store, cores: int) -> PlanSummary:
    """Points, cached points and the cost estimate of what is left, per level."""
    from pesflow.plan import cost
    from pesflow.plan.batches import plan_jobs

    done = stored_keys(store)
    sizes = cost.molecule_sizes(campaign)
    grid_level = campaign.engine_settings().dft_grid_level
    jobs = plan_jobs(
        plan,
        done,
        cores=cores,
        size_weight=cost.size_weights(sizes),
        walk_seconds=cost.walk_seconds(plan, sizes),
    )
    table = _timed_points(plan, store, done)
    estimate = cost.estimate(table, sizes, grid_level=grid_level).set_index("level")
    rows = []
    for level, sub in table.groupby("level", sort=False):
        cached = int((sub["status"] != "pending").sum())
        est = estimate.loc[level] if level in estimate.index else None
        rows.append(
            {
                "level": level,
                "points": len(sub),
                "cached": cached,
                "to_compute": len(sub) - cached,
                "estimate_core_s": float("nan") if est is None else float(est["estimate_s"]),
                "source": "" if est is None else est["source"],
                "share": float("nan") if est is None else float(est["share"]),
            }
        )
    levels = pd.DataFrame(
        rows,
        columns=["level", "points", "cached", "to_compute", "estimate_core_s", "source", "share"],
    )
    total = (
        cost.total_seconds(estimate.reset_index(), table, sizes, grid_level)
        if len(estimate)
        else 0.0
    )
    return PlanSummary(
        levels, len(jobs), sum(len(j.batches) for j in jobs), Path(campaign.store_path), total
    )


@dataclass
class RunResult:
    """What a run did.

    Attributes:
        to_compute: points that were missing when the run started; ``cached``: the others.
        jobs: Snakemake jobs started (0 when nothing was missing).
        interrupted: stopped by Ctrl-C or a signal (every finished point is stored).
        stalled: stopped because the scheduler kept reporting jobs after every batch ended.
        returncode: Snakemake's exit code (0 when nothing ran).
        log_path: Snakemake's log, or None.
        status: done / failed / pending points per molecule and level after the run
            (:func:`pesflow.tables.points.status_counts`).
        quarantined: ``(path, reason)`` of store files set aside as damaged.
    """

    to_compute: int
    cached: int
    jobs: int
    interrupted: bool = False
    stalled: bool = False
    returncode: int = 0
    log_path: Path | None = None
    status: pd.DataFrame = field(default_factory=pd.DataFrame)
    failed_points: pd.DataFrame = field(default_factory=pd.DataFrame)
    quarantined: list = field(default_factory=list)
    #: the plan after the run (with the points adaptive refinement added), or None
    plan: object = None

    def _total(self, column) -> int:
        return int(self.status[column].sum()) if len(self.status) else 0

    @property
    def done(self) -> int:
        return self._total("done")

    @property
    def failed(self) -> int:
        return self._total("failed")

    @property
    def pending(self) -> int:
        return self._total("pending")


def status_of(campaign, plan, store):
    """``(status counts per molecule and level, failed points)`` of a campaign."""
    from pesflow.tables.points import STATUS_COLUMNS, failed_points, points_table, status_counts

    table = points_table(plan, store, columns=STATUS_COLUMNS)
    counts = status_counts(table, list(campaign.molecules), [lvl.label for lvl in campaign.levels])
    return counts, failed_points(table), table


def warning_counts(campaign, plan, store) -> pd.DataFrame:
    """Warnings of the analysis (severity ``warning``, not notes) per molecule and level:
    ``molecule, level, warnings`` (reads the store and analyses every curve)."""
    from pesflow.analysis.flags import flags_from_records
    from pesflow.tables.points import points_table
    from pesflow.tables.summary import summary_table

    # Warnings do not depend on the uncertainties; their re-analyses are skipped.
    summary = summary_table(campaign, plan, points_table(plan, store), uncertainties=False)
    if summary.empty:
        return pd.DataFrame(columns=["molecule", "level", "warnings"])
    n = [
        sum(f.severity == "warning" for f in flags_from_records(text))
        for text in summary["flag_records"]
    ]
    frame = summary[["molecule", "level"]].assign(warnings=n)
    return frame.groupby(["molecule", "level"], sort=False, as_index=False)["warnings"].sum()


def run_campaign(campaign, plan, store, *, on_refine=None, **options) -> RunResult:
    """Compute what is missing of ``campaign`` (the work of ``pesflow run``); with refined
    scans (README "Adaptive grids"), then round after round: decide and log the new points
    (:func:`pesflow.execution.refinement.refine_round`), plan again and compute them, until
    every target is met or its budget spent.  ``options``: those of :func:`_run_round`;
    ``on_refine(round_result)`` is called after each round that added points.  The result
    counts every round; ``result.plan`` is the last plan."""
    result = _run_round(campaign, plan, store, **options)
    refined = any(scan.refine for scan in campaign.scans.values())
    while refined and not result.interrupted and result.returncode == 0:
        from pesflow.execution.driver import RunLock
        from pesflow.execution.refinement import refine_round
        from pesflow.plan.expand import expand

        # The decision reads and rewrites the log: under the run lock, like a run.
        lock = RunLock(campaign.results_path / ".pesflow" / "run.lock").acquire()
        try:
            decided = refine_round(campaign, plan, store)
        finally:
            lock.release()
        if not decided.added:
            break
        if on_refine is not None:
            on_refine(decided)
        plan = expand(campaign)
        more = _run_round(
            campaign,
            plan,
            store,
            **{**options, "retry_failed": False, "warm": None, "on_ended": None},
        )
        more.to_compute += result.to_compute
        more.jobs += result.jobs
        more.quarantined = result.quarantined + more.quarantined
        result = more
    result.plan = plan
    return result


def _run_round(
    campaign,
    plan,
    store,
    *,
    cores=None,
    profile=None,
    threads_per_batch=1,
    retry_failed=False,
    on_start=None,
    on_progress=None,
    warm=None,
    on_ended=None,
) -> RunResult:
    """Compute what is missing of ``plan`` (one round of ``pesflow run``).

    Args:
        cores: cores for local execution (default: all); ``profile``: a Snakemake profile
            folder for a cluster; ``threads_per_batch``: PySCF threads of each batch job.
        retry_failed: compute again the points stored as failed.
        on_start: called as ``on_start(to_compute, jobs, cached)`` before Snakemake starts.
        on_progress: called with a :class:`Progress` while it runs.
        warm: a :class:`~pesflow.execution.warm.WarmSnakemake` to run Snakemake in (it
            has imported Snakemake already); unused when nothing is to be computed.
        on_ended: called once when every job of the round has ended (its points are all
            in the store) while Snakemake may still be winding down
            (:func:`pesflow.execution.driver.run_snakemake`).

    Raises :class:`~pesflow.errors.RunError` when another run of the campaign is alive.
    Every finished point is in the store whatever happens; the result says what is left.
    """
    import os

    from pesflow.execution import driver as runner
    from pesflow.plan import batches as packing
    from pesflow.plan import cost

    options = runner.RunOptions(cores=cores, profile=profile, threads_per_batch=threads_per_batch)
    lock = runner.RunLock(campaign.results_path / ".pesflow" / "run.lock").acquire()
    quarantined: list = []
    try:
        recompute = failed_keys(store) if retry_failed else set()
        done = stored_keys(store) - recompute
        quarantined += list(store.last_quarantined)
        target_job_s = options.target_job_s or (
            packing.TARGET_JOB_S_CLUSTER if options.profile else packing.TARGET_JOB_S_LOCAL
        )
        weights = walk_seconds = sizes = starter = None
        if not plan.points["key"].isin(done).all():  # no PySCF import for a cached run
            starter = _job_starter(options)  # imports PySCF for the jobs from now on
            sizes = cost.molecule_sizes(campaign)
            weights, walk_seconds = cost.size_weights(sizes), cost.walk_seconds(plan, sizes)
        jobs = packing.plan_jobs(
            plan,
            done,
            cores=cores or os.cpu_count() or 1,
            size_weight=weights,
            walk_seconds=walk_seconds,
            target_job_s=target_job_s,
        )
        pending = set(plan.points["key"]) - done
        result = RunResult(len(pending), len(plan.points) - len(pending), len(jobs))
        if warm is not None and not jobs:
            warm.cancel()  # nothing to run in it: stop its import now
        if jobs:
            if on_start is not None:
                on_start(len(pending), len(jobs), result.cached)
            wd = runner.workdir(campaign)
            config = runner.write_tasks(
                plan,
                jobs,
                campaign.store_path,
                wd,
                options,
                recompute=recompute,
                starter=None if starter is None else starter.address,
            )
            costs = _point_costs(plan, pending, sizes or {})
            watch = _watcher(store, pending, on_progress, wd, costs, cores or os.cpu_count() or 1)
            outcome = runner.run_snakemake(
                wd, config, options, lock, on_poll=watch, warm=warm, on_ended=on_ended
            )
            watch(force=True)  # the display's last figures are the run's final ones
            result.interrupted, result.stalled = outcome.interrupted, outcome.stalled
            result.returncode, result.log_path = outcome.returncode, outcome.log_path
        if store.exists():
            store.compact()
    finally:
        if starter is not None:
            starter.stop()
        lock.release()
    result.status, result.failed_points, _ = status_of(campaign, plan, store)
    result.quarantined = quarantined + list(store.last_quarantined)
    return result


def _job_starter(options):
    """The run's :class:`~pesflow.execution.starter.JobStarter`: local runs, unless
    ``PESFLOW_JOB_STARTER=0``; None on a cluster (jobs start on other machines)."""
    from pesflow.execution import driver as runner
    from pesflow.execution import starter

    if options.profile or not starter.enabled() or not sys.platform.startswith("linux"):
        return None
    threads = options.threads_per_batch
    return starter.JobStarter(threads, runner.snakemake_env(threads))


def _import_in_background(module: str) -> None:
    """Import ``module`` on a daemon thread: while Snakemake and the first jobs start, a
    core is idle, and the summary the run ends with (warning counts) then finds its
    analysis modules (scipy's among them, ~0.6 s) imported."""
    import importlib
    import threading

    threading.Thread(target=importlib.import_module, args=(module,), daemon=True).start()


def _point_costs(plan, pending, sizes) -> dict[str, float]:
    """Model seconds of each pending point (an SCF counted once per geometry), for the ETA."""
    from pesflow.plan import cost

    pts = plan.points[plan.points["key"].isin(pending)]
    out = {}
    for (mol, method, basis), sub in pts.groupby(["molecule", "method", "basis"]):
        size = sizes.get((mol, basis), cost.Size(50))
        cls = cost.method_class(method)
        if cls in cost.FAMILY_COST and cls not in ("hf", "dft"):
            seconds = cost.step_seconds(cls, size)  # its SCF is the hf point's
        else:
            seconds = cost.point_seconds(method, size)
        out.update(dict.fromkeys(sub["key"], seconds))
    return out


def _job_progress(wd: Path) -> tuple[set[str], list[str]]:
    """Failed keys and the walks running now, from the jobs' progress files."""
    import json

    failed, running = set(), []
    for path in sorted((wd / "progress").glob("*.json")):
        try:
            content = json.loads(path.read_text())
        except (OSError, ValueError):  # being replaced right now; next poll
            continue
        failed.update(content.get("failed", ()))
        walk = content.get("running")
        if walk:
            running.append(f"{walk['molecule']} {', '.join(walk['levels'])}")
    return failed, running


@dataclass
class Progress:
    """What a run's progress callback gets: points ``finished`` (stored) of ``total``,
    ``failed`` among them, ``eta_s`` (model seconds left at the rate measured so far; before
    the first point, the model's seconds over the cores) and the walks ``running`` now."""

    finished: int
    failed: int
    total: int
    eta_s: float
    running: list[str]


def _watcher(store, pending, on_progress, wd, costs, cores):
    """The poll function of a run: counts the stored points from the store's listing (no
    record is read), failures and running walks from the jobs' progress files, and compacts
    now and then."""
    seen: set[str] = set()
    total_work = sum(costs.values()) or float(len(pending))
    start = time.monotonic()
    timing = {"next": 0.0, "compacted_at": 0, "work": 0.0}

    def poll(force=False):
        now = time.monotonic()
        if not force and now < timing["next"]:
            return
        if not timing.get("prewarmed") and now - start > PREWARM_AFTER_S:
            # the end's summary (warning counts) finds its analysis modules (SciPy's among
            # them, ~0.6 s) imported; not at the start, where the jobs' imports need the cores
            timing["prewarmed"] = True
            _import_in_background("pesflow.tables.summary")
        if store.exists():
            new = (store.keys() & pending) - seen
            seen.update(new)
            timing["work"] += sum(costs.get(k, 1.0) for k in new)
        failed_keys, running = _job_progress(wd)
        elapsed = now - start
        left = max(total_work - timing["work"], 0.0)
        if timing["work"] > 0 and elapsed > 5:
            eta = left * elapsed / timing["work"]
        else:
            eta = left / max(1, cores)
        if on_progress is not None:
            on_progress(Progress(len(seen), len(failed_keys & seen), len(pending), eta, running))
        # Keep the fragment folder small during long runs so that listing it stays cheap;
        # compaction is safe while batches write (see pesflow.store.point_store).
        if len(seen) - timing["compacted_at"] >= COMPACT_EVERY_POINTS:
            timing["compacted_at"] = len(seen)
            store.compact(merge_parts=False)
        # Watching must stay a small share of one core, however large the store.
        timing["next"] = time.monotonic() + max(0.5, 10 * (time.monotonic() - now))

    return poll


# ---------------------------------------------------------------------------
# the handle
# ---------------------------------------------------------------------------


class Campaign:
    """A campaign spec, loaded and checked, with the verbs of the ``pesflow`` command.

    Made by :func:`load`.  Nothing is computed until :meth:`run`; every other method reads
    the spec and the store only.  Attributes: ``spec_path``, ``name``, ``molecules`` and
    ``levels`` (labels, spec order), ``store_path``, ``results_path``, and ``campaign`` (the
    resolved :class:`pesflow.campaign.Campaign`).
    """

    def __init__(self, spec):
        from pesflow.campaign import load_campaign

        self.spec_path = Path(spec)
        self.campaign = load_campaign(self.spec_path)
        self._plan = None

    def __repr__(self) -> str:
        return (
            f"<pesflow campaign {self.name!r}: {len(self.molecules)} molecules, "
            f"{len(self.campaign.scans)} scans, {len(self.levels)} levels; "
            f"store {self.store_path}>"
        )

    @property
    def name(self) -> str:
        return self.campaign.name

    @property
    def molecules(self) -> list[str]:
        return list(self.campaign.molecules)

    @property
    def levels(self) -> list[str]:
        return [lvl.label for lvl in self.campaign.levels]

    @property
    def store_path(self) -> Path:
        return self.campaign.store_path

    @property
    def results_path(self) -> Path:
        return self.campaign.results_path

    def _store(self):
        from pesflow.store.point_store import PointStore

        return PointStore(self.campaign.store_path)

    def _expanded(self):
        """The expanded :class:`~pesflow.plan.expand.Plan` (made once)."""
        if self._plan is None:
            from pesflow.plan.expand import expand

            self._plan = expand(self.campaign)
        return self._plan

    def check(self) -> pd.DataFrame:
        """Read the spec again and check it (raises :class:`~pesflow.errors.SpecError`);
        returns one row per molecule (``molecule, formula, charge, multiplicity, scans``)."""
        from pesflow.campaign import load_campaign
        from pesflow.plan.expand import expand

        self.campaign = load_campaign(self.spec_path)
        self._plan = expand(self.campaign)
        return molecules_table(self.campaign)

    def plan(self, cores: int | None = None) -> pd.DataFrame:
        """Per level: ``level, points, cached, to_compute, estimate_core_s, source, share``
        (``source``: see :data:`ESTIMATE_SOURCES`); ``.attrs`` holds ``jobs`` and ``walks``
        (what a run on ``cores`` cores would start) and ``refinement`` (a sentence when
        adaptive refinement may add points, else None).  Nothing is computed."""
        import os

        from pesflow.execution.refinement import plan_note

        cores = cores or os.cpu_count() or 1
        summary = plan_levels(self.campaign, self._expanded(), self._store(), cores)
        table = summary.levels
        table.attrs.update(
            jobs=summary.jobs, walks=summary.walks, refinement=plan_note(self.campaign)
        )
        return table

    def run(
        self,
        cores: int | None = None,
        *,
        profile=None,
        threads_per_batch: int = 1,
        retry_failed: bool = False,
        on_progress=None,
    ) -> RunResult:
        """Compute what is missing (as ``pesflow run``); returns a :class:`RunResult`.

        ``on_progress(finished, failed, total)`` is called while it runs.  Points that
        fail are stored as failed (``result.failed``), not raised.
        """
        result = run_campaign(
            self.campaign,
            self._expanded(),
            self._store(),
            cores=cores,
            profile=profile,
            threads_per_batch=threads_per_batch,
            retry_failed=retry_failed,
            on_progress=on_progress,
        )
        self._plan = result.plan  # refinement may have added points
        return result

    def status(self) -> pd.DataFrame:
        """Done / failed / pending points per molecule and level (as ``pesflow status``)."""
        return status_of(self.campaign, self._expanded(), self._store())[0]

    def points(self) -> pd.DataFrame:
        """The points table: every planned point with its stored record (``status``: done /
        failed / pending); the columns of ``pesflow export --what points``."""
        from pesflow.tables.points import points_table

        return points_table(self._expanded(), self._store())

    def summary(self, points: pd.DataFrame | None = None) -> pd.DataFrame:
        """One row per curve (molecule x scan x level) of derived quantities, with
        deviations from the reference level; the columns of ``pesflow export --what
        summary``.  ``points``: a points table already read (default: read it)."""
        from pesflow.tables.summary import summary_table

        return summary_table(
            self.campaign, self._expanded(), self.points() if points is None else points
        )

    def stationary(self, points: pd.DataFrame | None = None) -> pd.DataFrame:
        """Every minimum, maximum and saddle per curve and level; the columns of ``pesflow
        export --what stationary``.  ``points``: a points table already read."""
        from pesflow.tables.stationary import stationary_table

        return stationary_table(
            self.campaign, self._expanded(), self.points() if points is None else points
        )

    def report(self, out_dir=None) -> dict[str, Path]:
        """Write the report (as ``pesflow report``) into ``out_dir`` (default: the
        campaign's results folder / report); returns the paths of the files written."""
        from pesflow.execution.refinement import report_tables
        from pesflow.report import build_report

        points = self.points()
        out = Path(out_dir) if out_dir is not None else self.results_path / "report"
        return build_report(
            self.campaign,
            self._expanded(),
            points,
            self.summary(points),
            out,
            stationary=self.stationary(points),
            refinement=report_tables(self.campaign),
        )

    def plot(self, molecule: str, scan: str):
        """The report's figure of one scan of one molecule at every level, as a
        :class:`matplotlib.figure.Figure` (curves for a 1-D scan, contour maps for a 2-D
        grid).  Raises :class:`KeyError` naming what exists for an unknown name."""
        from pesflow.report.plots import scan_figure
        from pesflow.report.tables import collect

        if scan not in self.campaign.scans:
            raise KeyError(f"no scan {scan!r}; scans: {', '.join(self.campaign.scans)}")
        if molecule not in self.campaign.scans[scan].molecules:
            raise KeyError(
                f"scan {scan!r} has no molecule {molecule!r}; it has: "
                + ", ".join(self.campaign.scans[scan].molecules)
            )
        points = self.points()
        data = collect(
            self.campaign, self._expanded(), points, self.summary(points), basis_counts={}
        )
        return scan_figure(self.campaign, points, data, molecule, scan)


def load(spec) -> Campaign:
    """Load and check the campaign spec ``spec`` (a YAML file); raises
    :class:`~pesflow.errors.SpecError` with the file, field and what is allowed."""
    return Campaign(spec)
