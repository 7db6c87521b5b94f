"""The ``pesflow`` command.

Verbs: ``check``, ``plan``, ``run``, ``status``, ``export``.  Exit codes: 0 success,
1 the computation finished with failed points (or a batch job failed), 2 invalid
input or a refused run (nothing computed or written), 130 interrupted.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

from rich.console import Console
from rich.markup import escape
from rich.progress import BarColumn, Progress, TextColumn, TimeElapsedColumn
from rich.table import Table

from pesflow import __version__
from pesflow.errors import PesflowError, RunError, SpecError

EXIT_OK, EXIT_FAILED, EXIT_INVALID, EXIT_INTERRUPTED = 0, 1, 2, 130
#: During a run, fragments are compacted into a part after this many new points.
COMPACT_EVERY_POINTS = 2000

console = Console(highlight=False)
err_console = Console(stderr=True, highlight=False)


def _load(spec):
    from pesflow.campaign import load_campaign

    return load_campaign(spec)


def _store(campaign):
    from pesflow.store.point_store import PointStore

    return PointStore(campaign.store_path)


def _plan(campaign):
    from pesflow.plan.expand import expand

    return expand(campaign)


def _report_quarantined(store) -> None:
    for path, reason in store.last_quarantined:
        err_console.print(
            f"warning: corrupt store file {path} set aside ({reason}); its points "
            "will be computed again",
            markup=False,
            soft_wrap=True,
        )


def _done_keys(store) -> set[str]:
    """Keys of every stored point (done or failed)."""
    if not store.exists():
        return set()
    keys = store.keys()
    _report_quarantined(store)
    return keys


def _failed_keys(store) -> set[str]:
    """Keys of the points stored as failed."""
    if not store.exists():
        return set()
    table = store.status_table(columns=("key", "converged"))
    return {
        k
        for k, c in zip(table.column("key").to_pylist(), table.column("converged").to_pylist())
        if not c
    }


# ---------------------------------------------------------------------------
# verbs
# ---------------------------------------------------------------------------


def cmd_check(args) -> int:
    campaign = _load(args.spec)
    plan = _plan(campaign)
    table = Table(title=f"campaign {campaign.name}: spec is valid", title_justify="left")
    for col in ("molecule", "atoms", "charge", "multiplicity", "scans"):
        table.add_column(col)
    for name, mol in campaign.molecules.items():
        scans = [s.name for s in campaign.scans.values() if name in s.molecules]
        table.add_row(
            name,
            mol.atoms.get_chemical_formula(),
            str(mol.charge),
            str(mol.multiplicity),
            ", ".join(scans) or "-",
        )
    console.print(table)
    scans = Table(show_header=True)
    for col in ("scan", "coordinates", "points per molecule"):
        scans.add_column(col)
    for scan in campaign.scans.values():
        coords = "; ".join(
            f"{c.label} {c.values[0]:g}..{c.values[-1]:g} {c.unit} ({len(c.values)})"
            for c in scan.coordinates
        )
        scans.add_row(scan.name, coords, str(len(scan.grid())))
    console.print(scans)
    console.print("levels: " + ", ".join(lvl.label for lvl in campaign.levels))
    console.print(f"{len(plan.points)} points in all; nothing was computed.")
    return EXIT_OK


def _plan_table(plan, store, done, sample_per_curve=20):
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
        return pts
    timing = store.load(keys=set(sample["key"]), columns=("wall_s", "converged")).to_pandas()
    timing = timing.loc[timing["converged"].astype(bool), ["key", "wall_s"]]
    return pts.merge(timing, on="key", how="left")


def cmd_plan(args) -> int:
    from pesflow.plan import cost
    from pesflow.plan.batches import plan_jobs

    campaign = _load(args.spec)
    plan = _plan(campaign)
    store = _store(campaign)
    done = _done_keys(store)
    nbf = cost.basis_function_counts(campaign)
    jobs = plan_jobs(
        plan, done, cores=args.cores or _cpu_count(), size_weight=cost.size_weights(nbf)
    )
    table = _plan_table(plan, store, done)
    estimate = cost.estimate(table, nbf).set_index("level")
    out = Table(title=f"campaign {campaign.name}: plan", title_justify="left")
    for col in ("level", "points", "cached", "to compute", "estimate (core-h)", "from"):
        out.add_column(col, justify="left" if col in ("level", "from") else "right")
    for level, sub in table.groupby("level", sort=False):
        cached = int((sub["status"] != "pending").sum())
        est = estimate.loc[level] if level in estimate.index else None
        out.add_row(
            level,
            str(len(sub)),
            str(cached),
            str(len(sub) - cached),
            "-" if est is None else f"{est['estimate_core_h']:.3g}",
            "-" if est is None else est["source"],
        )
    console.print(out)
    n_cached = int((table["status"] != "pending").sum())
    total_h = float(estimate["estimate_core_h"].sum()) if len(estimate) else 0.0
    console.print(
        f"{len(table)} points, {n_cached} cached, {len(table) - n_cached} to compute "
        f"in {len(jobs)} jobs ({sum(len(j.batches) for j in jobs)} walks); "
        f"about {total_h:.3g} core-hours left; store: "
        f"{campaign.store_path}",
        soft_wrap=True,
    )
    for level in cost.dominant_levels(estimate.reset_index()):
        share = estimate.loc[level, "share"]
        console.print(
            f"[yellow]warning[/yellow]: {escape(level)} is about {share:.0%} of the remaining cost",
            soft_wrap=True,
        )
    return EXIT_OK


def _cpu_count():
    import os

    return os.cpu_count() or 1


def _print_status(campaign, plan, store, show_failed=10) -> tuple[int, int, int]:
    from pesflow.tables.points import STATUS_COLUMNS, failed_points, points_table, status_counts

    table = points_table(plan, store, columns=STATUS_COLUMNS)
    counts = status_counts(table, list(campaign.molecules), [lvl.label for lvl in campaign.levels])
    out = Table(title=f"campaign {campaign.name}: status", title_justify="left")
    for col in ("molecule", "level", "done", "failed", "pending"):
        out.add_column(col, justify="left" if col in ("molecule", "level") else "right")
    for row in counts.itertuples(index=False):
        out.add_row(
            row.molecule,
            row.level,
            str(row.done),
            f"[red]{row.failed}[/red]" if row.failed else "0",
            str(row.pending),
        )
    console.print(out)
    failed = failed_points(table)
    for row in failed.head(show_failed).itertuples(index=False):
        where = ", ".join(
            f"{c}={getattr(row, c):g}"
            for c in table.columns
            if c.endswith(("_angstrom", "_degree"))
            and c != "positions_angstrom"
            and c in row._fields
            and getattr(row, c) == getattr(row, c)
        )
        console.print(
            f"[red]failed[/red] {escape(row.molecule)} {escape(row.scan)} "
            f"{escape(row.level)} {where}: {escape(str(row.error))}",
            soft_wrap=True,
        )
    if len(failed) > show_failed:
        console.print(
            f"... and {len(failed) - show_failed} more failed points "
            "(pesflow export lists them all)"
        )
    n = table["status"].value_counts()
    return int(n.get("done", 0)), int(n.get("failed", 0)), int(n.get("pending", 0))


def _size_weights(campaign, plan, done):
    """Per (molecule, basis) cost weights for batching; skipped when nothing is pending."""
    from pesflow.plan import cost

    if plan.points["key"].isin(done).all():
        return None
    return cost.size_weights(cost.basis_function_counts(campaign))


def cmd_status(args) -> int:
    campaign = _load(args.spec)
    plan = _plan(campaign)
    done, failed, pending = _print_status(campaign, plan, _store(campaign))
    console.print(f"{done} done, {failed} failed, {pending} pending")
    return EXIT_FAILED if failed else EXIT_OK


def cmd_run(args) -> int:
    from pesflow.execution import driver as runner
    from pesflow.plan import batches as packing

    campaign = _load(args.spec)
    plan = _plan(campaign)
    store = _store(campaign)
    options = runner.RunOptions(
        cores=args.cores,
        profile=args.profile,
        threads_per_batch=args.threads_per_batch,
    )
    lock = runner.RunLock(campaign.results_path / ".pesflow" / "run.lock").acquire()
    try:
        recompute = _failed_keys(store) if args.retry_failed else set()
        done = _done_keys(store) - recompute
        target_job_s = options.target_job_s or (
            packing.TARGET_JOB_S_CLUSTER if options.profile else packing.TARGET_JOB_S_LOCAL
        )
        batches = packing.plan_jobs(
            plan,
            done,
            cores=args.cores or _cpu_count(),
            size_weight=_size_weights(campaign, plan, done),
            target_job_s=target_job_s,
        )
        pending = set(plan.points["key"]) - done
        if not batches:
            console.print("nothing to compute: every point is in the store")
        else:
            console.print(
                f"{len(pending)} points to compute in {len(batches)} jobs "
                f"({len(plan.points) - len(pending)} cached); store: "
                f"{campaign.store_path}"
            )
            wd = runner.workdir(campaign)
            config = runner.write_tasks(
                plan, batches, campaign.store_path, wd, options, recompute=recompute
            )
            outcome = _run_with_progress(runner, wd, config, options, lock, store, pending)
            if outcome.interrupted:
                console.print(
                    "[yellow]interrupted[/yellow]: every finished point is stored; "
                    "run the same command again to continue"
                )
                return EXIT_INTERRUPTED
            if outcome.stalled:
                err_console.print(
                    f"all {len(pending)} points are stored but the scheduler still reported jobs "
                    f"running {options.stall_grace_s:.0f} s after the last batch ended, so "
                    "Snakemake was stopped; the executor's status query may not work on this "
                    "cluster (see configs/profiles/slurm/README.md)",
                    soft_wrap=True,
                )
            elif outcome.returncode != 0:
                err_console.print(f"some batch jobs failed; Snakemake's log: {outcome.log_path}")
        if store.exists():
            store.compact()
    finally:
        lock.release()
    done_n, failed, pending_n = _print_status(campaign, plan, store)
    console.print(f"{done_n} done, {failed} failed, {pending_n} pending")
    if failed or pending_n:
        return EXIT_FAILED
    return EXIT_OK


def _run_with_progress(runner, wd, config, options, lock, store, pending):
    seen: dict[str, bool] = {}
    total = len(pending)
    start = time.monotonic()
    progress = Progress(
        TextColumn("[bold]points"),
        BarColumn(),
        TextColumn(
            "{task.fields[done]} done, {task.fields[failed]} failed, {task.fields[left]} left"
        ),
        TimeElapsedColumn(),
        console=console,
        transient=False,
    )
    task = progress.add_task("run", total=total, done=0, failed=0, left=total)
    last_print = [start]

    timing = {"next": 0.0, "compacted_at": 0}

    def poll(force=False):
        now = time.monotonic()
        if not force and now < timing["next"]:
            return
        if store.exists():
            keys = store.keys()
            new = (keys & pending) - seen.keys()
            for key in new:
                record = store.get(key)
                seen[key] = bool(record and record.get("converged"))
        failed = sum(1 for ok in seen.values() if not ok)
        progress.update(
            task,
            completed=len(seen),
            done=len(seen) - failed,
            failed=failed,
            left=total - len(seen),
        )
        if not console.is_terminal and time.monotonic() - last_print[0] > 30:
            last_print[0] = time.monotonic()
            console.print(
                f"  {len(seen)}/{total} points, {failed} failed, {time.monotonic() - start:.0f} s"
            )
        # Keep the fragment folder small during long runs so that listing it stays cheap;
        # compaction is safe while batches write (see pesflow.store.point_store).
        if len(seen) - timing["compacted_at"] >= COMPACT_EVERY_POINTS:
            timing["compacted_at"] = len(seen)
            store.compact(merge_parts=False)
        # Watching must stay a small share of one core, however large the store.
        timing["next"] = time.monotonic() + max(0.5, 10 * (time.monotonic() - now))

    with progress:
        outcome = runner.run_snakemake(wd, config, options, lock, on_poll=poll)
        poll(force=True)
    return outcome


def cmd_report(args) -> int:
    from pesflow.report import build_report, terminal_summary
    from pesflow.tables.points import points_table
    from pesflow.tables.summary import summary_table

    campaign = _load(args.spec)
    plan = _plan(campaign)
    store = _store(campaign)
    points = points_table(plan, store)
    _report_quarantined(store)
    summary = summary_table(campaign, plan, points)
    out = Path(args.output) if args.output else campaign.results_path / "report"
    paths = build_report(campaign, plan, points, summary, out)
    terminal_summary(campaign, summary, console, paths=paths)
    return EXIT_OK


def cmd_export(args) -> int:
    from pesflow.formats.atomic import atomic_path
    from pesflow.formats.extxyz import write_extxyz
    from pesflow.tables.points import points_table

    out = Path(args.output)
    fmt = args.format or {".csv": "csv", ".xyz": "extxyz", ".extxyz": "extxyz"}.get(
        out.suffix.lower(), "parquet"
    )
    if args.what == "geometries":
        fmt = "extxyz"
    elif fmt == "extxyz":
        err_console.print(f"error: the {args.what} table has no geometries; use --what geometries")
        return EXIT_INVALID
    campaign = _load(args.spec)
    plan = _plan(campaign)
    store = _store(campaign)
    table = points_table(plan, store)
    _report_quarantined(store)
    if args.what == "summary":
        from pesflow.tables.summary import summary_table

        table = summary_table(campaign, plan, table)
    out.parent.mkdir(parents=True, exist_ok=True)
    with atomic_path(out) as tmp:
        if fmt == "extxyz":
            n = write_extxyz(table[table["status"] != "pending"], tmp)
        elif fmt == "csv":
            if "positions_angstrom" in table.columns:
                table = table.assign(
                    positions_angstrom=table["positions_angstrom"].map(
                        lambda p: (
                            " ".join(f"{x:.8f}" for x in p) if p is not None and len(p) else ""
                        )
                    )
                )
            table.to_csv(tmp, index=False)
        else:
            table.to_parquet(tmp, index=False)
    if fmt == "extxyz":
        console.print(f"wrote {n} geometries (extended XYZ) to {out}")
    else:
        console.print(f"wrote {len(table)} rows ({args.what}) to {out}")
    return EXIT_OK


# ---------------------------------------------------------------------------
# entry point
# ---------------------------------------------------------------------------


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="pesflow",
        description="Potential-energy-surface scans for sets of molecules at several levels "
        "of theory, run through Snakemake and PySCF, cached per point.",
    )
    parser.add_argument("--version", action="version", version=f"pesflow {__version__}")
    sub = parser.add_subparsers(dest="verb", required=True, metavar="VERB")

    def add(name, func, help_):
        p = sub.add_parser(name, help=help_, description=help_)
        p.add_argument("spec", help="campaign spec (YAML)")
        p.set_defaults(func=func)
        return p

    add("check", cmd_check, "validate a campaign spec; nothing is computed")
    p = add("plan", cmd_plan, "show points, batches and what is already cached")
    p.add_argument("--cores", type=int, default=None, help="cores to plan batches for")
    p = add("run", cmd_run, "compute what is missing (resumable)")
    p.add_argument(
        "--cores", type=int, default=None, help="cores for local execution (default: all)"
    )
    p.add_argument(
        "--profile", default=None, help="Snakemake profile folder (e.g. configs/profiles/slurm)"
    )
    p.add_argument(
        "--threads-per-batch",
        type=int,
        default=1,
        help="PySCF threads of each batch job (default 1: parallel batches beat "
        "threads on small molecules)",
    )
    p.add_argument("--retry-failed", action="store_true", help="recompute points stored as failed")
    add("status", cmd_status, "done / failed / pending points per molecule and level")
    p = add(
        "report",
        cmd_report,
        "comparison report (HTML, Markdown, CSV tables) from the store; no computation",
    )
    p.add_argument(
        "-o",
        "--output",
        default=None,
        help="report folder (default: the campaign's results folder / report)",
    )
    p = add("export", cmd_export, "write the points (or per-curve summaries) as Parquet or CSV")
    p.add_argument("-o", "--output", required=True, help="output file (.parquet or .csv)")
    p.add_argument(
        "--what",
        choices=("points", "summary", "geometries"),
        default="points",
        help="points table, per-curve summary, or every point's geometry",
    )
    p.add_argument(
        "--format",
        choices=("parquet", "csv", "extxyz"),
        default=None,
        help="default: from the file suffix (.parquet, .csv, .xyz/.extxyz)",
    )
    return parser


def main(argv=None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    for name in ("cores", "threads_per_batch"):
        value = getattr(args, name, None)
        if value is not None and value < 1:
            err_console.print(f"error: --{name.replace('_', '-')} must be at least 1")
            return EXIT_INVALID
    try:
        return args.func(args)
    except SpecError as exc:
        err_console.print(f"error: {exc}", markup=False, soft_wrap=True)
        return EXIT_INVALID
    except RunError as exc:
        err_console.print(f"error: {exc}", markup=False, soft_wrap=True)
        return EXIT_INVALID
    except PesflowError as exc:
        err_console.print(f"error: {exc}", markup=False, soft_wrap=True)
        return EXIT_FAILED
    except KeyboardInterrupt:
        err_console.print("interrupted")
        return EXIT_INTERRUPTED


if __name__ == "__main__":
    sys.exit(main())
