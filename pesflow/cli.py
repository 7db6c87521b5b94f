"""The ``pesflow`` command.

Verbs: ``check``, ``plan``, ``run``, ``status``, ``export``.  Exit codes: 0 success,
1 the computation finished with failed points (or a batch job failed), 2 invalid
input or a refused run (nothing computed or written), 130 interrupted.
"""

from __future__ import annotations

import argparse
import sys
import threading
import time
from pathlib import Path

from rich.console import Console
from rich.markup import escape
from rich.progress import BarColumn, Progress, TextColumn, TimeElapsedColumn
from rich.table import Table

from pesflow import __version__
from pesflow.errors import PesflowError, RunError, SpecError

EXIT_OK, EXIT_FAILED, EXIT_INVALID, EXIT_INTERRUPTED = 0, 1, 2, 130

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


def _report_quarantined(store, quarantined=None) -> None:
    for path, reason in store.last_quarantined if quarantined is None else quarantined:
        err_console.print(
            f"warning: corrupt store file {path} set aside ({reason}); its points "
            "will be computed again",
            markup=False,
            soft_wrap=True,
        )


def table(*columns, title=None, numeric=()):
    """A rich table that fits the terminal: text columns fold (never cut), number columns
    keep their digits together (``numeric``: the names of those)."""
    out = Table(title=title, title_justify="left")
    for name in columns:
        if name in numeric:
            out.add_column(name, justify="right", no_wrap=True)
        else:
            out.add_column(name, overflow="fold")
    return out


# ---------------------------------------------------------------------------
# verbs
# ---------------------------------------------------------------------------


def cmd_check(args) -> int:
    from pesflow import api

    campaign = _load(args.spec)
    plan = _plan(campaign)
    out = table(
        "molecule",
        "atoms",
        "charge",
        "multiplicity",
        "scans",
        title=f"campaign {campaign.name}: spec is valid",
        numeric=("charge", "multiplicity"),
    )
    for r in api.molecules_table(campaign).itertuples(index=False):
        out.add_row(r.molecule, r.formula, str(r.charge), str(r.multiplicity), r.scans or "-")
    console.print(out)
    scans = table("scan", "coordinates", "points per molecule", numeric=("points per molecule",))
    for r in api.scans_table(campaign).itertuples(index=False):
        scans.add_row(r.scan, r.coordinates, str(r.points_per_molecule))
    console.print(scans)
    _print_sets_and_rules(campaign)
    console.print(
        "levels: " + ", ".join(lvl.label for lvl in campaign.levels), markup=False, soft_wrap=True
    )
    console.print(f"{len(plan.points)} points in all; nothing was computed.")
    return EXIT_OK


#: Short words of the plan's ``from`` column for the sources of an estimate.
_SOURCE_WORDS = {
    "stored timings": "stored",
    "scaling model": "model",
    "scaling model, calibrated": "model (calibrated)",
}


#: How ``pesflow check`` words each kind of note about sets and rules.
_NOTE_WORDS = {
    "member": "built",
    "refused": "refused",
    "rule": "",
    "no-match": "",
    "left-out": "left out",
}


def _print_sets_and_rules(campaign) -> None:
    """What each set member was built from (or why it was refused), what each rule found
    in each molecule (or that it found nothing), and which molecules a scan left out."""
    if not campaign.notes:
        return
    out = Table(title="sets and rules", title_justify="left")
    for col in ("molecule", "scan", "what"):
        out.add_column(col)
    for note in campaign.notes:
        out.add_row(
            escape(note["molecule"]),
            escape(note["scan"] or "-"),
            f"{_NOTE_WORDS[note['what']]}: " * bool(_NOTE_WORDS[note["what"]])
            + escape(note["text"]),
        )
    console.print(out)


def _print_rule_scans(campaign, plan, shown=12) -> None:
    """Per scan chosen by rule: the coordinates it expanded to (by name), its molecules and
    its points (the first ``shown`` names; the rest counted)."""
    rule_scans = [s for s in campaign.scans.values() if s.rule]
    if not rule_scans:
        return
    counts = plan.points.groupby("scan").size()
    out = Table(title="scans chosen by rule", title_justify="left")
    for col in ("scan", "rule", "coordinates", "molecules", "points"):
        out.add_column(col, justify="right" if col in ("molecules", "points") else "left")
    for source in dict.fromkeys(s.source for s in rule_scans):
        mine = [s for s in rule_scans if s.source == source]
        names = [s.coordinates[0].name for s in mine]
        listed = ", ".join(names[:shown]) + (
            f" and {len(names) - shown} more" * (len(names) > shown)
        )
        out.add_row(
            escape(source),
            mine[0].rule,
            f"{len(names)}: {escape(listed)}",
            str(len({m for s in mine for m in s.molecules})),
            str(int(sum(counts.get(s.name, 0) for s in mine))),
        )
    console.print(out)


def cmd_plan(args) -> int:
    from pesflow import api
    from pesflow.units import format_duration as fmt_duration

    campaign = _load(args.spec)
    plan = _plan(campaign)
    store = _store(campaign)
    summary = api.plan_levels(campaign, plan, store, args.cores or _cpu_count())
    _report_quarantined(store)
    out = table(
        "level",
        "points",
        "cached",
        "to compute",
        "estimate",
        "from",
        title=f"campaign {campaign.name}: plan",
        numeric=("points", "cached", "to compute", "estimate"),
    )
    sources = set()
    for r in summary.levels.itertuples(index=False):
        words = [_SOURCE_WORDS.get(x, x) for x in r.source.split(" + ") if x]
        sources.update(x for x in r.source.split(" + ") if x)
        out.add_row(
            r.level,
            str(r.points),
            str(r.cached),
            str(r.to_compute),
            fmt_duration(r.estimate_core_s) or "-",
            "+".join(words) or "-",
        )
    console.print(out)
    _print_rule_scans(campaign, plan)
    _print_refine_note(campaign)
    if sources:
        console.print(
            "estimate: core time of the points still to compute; from: "
            + "; ".join(f"{_SOURCE_WORDS[x]} = {api.ESTIMATE_SOURCES[x]}" for x in sorted(sources))
            + ".",
            markup=False,
        )
    left = summary.total_core_s
    console.print(
        f"{summary.points} points, {summary.cached} cached, "
        f"{summary.points - summary.cached} to compute in {summary.jobs} jobs "
        f"({summary.walks} walks)"
        + (
            f"; about {fmt_duration(left)} of core time left (an SCF shared by several "
            "levels counted once)."
            if left > 0
            else "."
        ),
        markup=False,
    )
    console.print(f"store: {summary.store_path}", markup=False, soft_wrap=True)
    levels = summary.levels
    if len(levels.dropna(subset=["estimate_core_s"])) > 1:
        top = levels.loc[levels["share"].idxmax()]
        if top["share"] > 0.5:
            console.print(
                f"most of the remaining cost is {top['level']} (about {top['share']:.0%}).",
                markup=False,
            )
    return EXIT_OK


def _cpu_count():
    import os

    return os.cpu_count() or 1


#: Above this many molecule x level rows, the end of a run prints per-level totals and only
#: the rows that need attention; ``pesflow status`` prints them all.
MAX_STATUS_ROWS = 12


def _where(row, columns) -> str:
    return ", ".join(
        f"{c}={getattr(row, c):g}"
        for c in columns
        if c.endswith(("_angstrom", "_degree"))
        and c != "positions_angstrom"
        and c in row._fields
        and getattr(row, c) == getattr(row, c)
    )


def _print_status(
    campaign, counts, failed, columns, *, spec=None, warnings=None, show_failed=10
) -> None:
    """The status table (all rows; or, with ``spec`` and a large campaign, per-level totals
    and only the rows that need attention: failed or pending points, or curves with warnings
    when ``warnings`` (a callable returning :func:`pesflow.api.warning_counts`) is given),
    then the first failed points."""
    rows = counts
    flagged = None
    if spec is not None and len(counts) > MAX_STATUS_ROWS:
        totals = counts.groupby("level", sort=False)[["done", "failed", "pending"]].sum()
        out = table(
            "level",
            "done",
            "failed",
            "pending",
            title=f"campaign {campaign.name}: points per level",
            numeric=("done", "failed", "pending"),
        )
        for level, r in totals.iterrows():
            out.add_row(
                escape(level),
                str(r["done"]),
                f"[red]{r['failed']}[/red]" if r["failed"] else "0",
                str(r["pending"]),
            )
        console.print(out)
        attention = (counts["failed"] > 0) | (counts["pending"] > 0)
        if warnings is not None:
            flagged = counts.merge(warnings(), on=["molecule", "level"], how="left")
            flagged = flagged["warnings"].fillna(0).astype(int).to_numpy()
            attention = attention | (flagged > 0)
            flagged = flagged[attention.to_numpy()]
        rows = counts[attention]
    if len(rows):
        names = ["molecule", "level", "done", "failed", "pending"]
        if flagged is not None:
            names.append("warnings")
        out = table(
            *names,
            title=f"campaign {campaign.name}: "
            + ("status" if rows is counts else "rows that need attention"),
            numeric=("done", "failed", "pending", "warnings"),
        )
        for k, row in enumerate(rows.itertuples(index=False)):
            cells = [
                escape(row.molecule),
                escape(row.level),
                str(row.done),
                f"[red]{row.failed}[/red]" if row.failed else "0",
                str(row.pending),
            ]
            if flagged is not None:
                cells.append(str(flagged[k]))
            out.add_row(*cells)
        console.print(out)
    if rows is not counts:
        console.print(
            f"{len(counts)} molecule x level rows; every one: pesflow status {spec}",
            markup=False,
            soft_wrap=True,
        )
        if flagged is not None:
            console.print(
                f"what the warnings say: pesflow report {spec}", markup=False, soft_wrap=True
            )
    for row in failed.head(show_failed).itertuples(index=False):
        console.print(
            f"[red]failed[/red] {escape(row.molecule)} {escape(row.scan)} "
            f"{escape(row.level)} {_where(row, columns)}: {escape(str(row.error))}"
        )
    if len(failed) > show_failed:
        console.print(
            f"... and {len(failed) - show_failed} more failed points "
            "(pesflow export lists them all)"
        )


def _print_refinement(campaign) -> None:
    """One verdict line per refined curve (targets met, budget spent, ...)."""
    from pesflow.execution.refinement import report_tables

    tables = report_tables(campaign)
    if tables is None:  # no refined scan: nothing to say, and no report modules to import
        return
    from pesflow.report.refinement import refinement_verdicts

    for line in refinement_verdicts(tables[0]):
        console.print(f"adaptive refinement: {line}", markup=False, soft_wrap=True)


def _print_refine_note(campaign) -> None:
    from pesflow.execution.refinement import plan_note

    note = plan_note(campaign)
    if note:
        console.print(note, markup=False, soft_wrap=True)


def _totals(counts) -> tuple[int, int, int]:
    return tuple(int(counts[c].sum()) if len(counts) else 0 for c in ("done", "failed", "pending"))


def cmd_status(args) -> int:
    from pesflow import api

    campaign = _load(args.spec)
    plan = _plan(campaign)
    store = _store(campaign)
    counts, failed, points = api.status_of(campaign, plan, store)
    _report_quarantined(store)
    _print_status(campaign, counts, failed, points.columns)
    _print_refine_note(campaign)
    done, n_failed, pending = _totals(counts)
    console.print(f"{done} done, {n_failed} failed, {pending} pending")
    return EXIT_FAILED if n_failed else EXIT_OK


#: Width of the progress bar on a terminal of 100 columns or more (a quarter below).
_BAR_WIDTH = 40


def _room(counts: str, eta: str) -> int:
    """Columns left for the running walks after the rest of the progress line (the word,
    the bar, the counts, the elapsed time, the ETA and the spaces between them)."""
    bar = _BAR_WIDTH if console.width >= 100 else _BAR_WIDTH // 4
    used = len("points") + bar + len(counts) + len("0:00:00") + len(f"ETA {eta}") + 5
    return console.width - used - 1


def _fit(text: str, room: int) -> str:
    """``text`` cut to ``room`` characters with an ellipsis (empty when there is none)."""
    if len(text) <= room:
        return text
    return text[: room - 1] + "…" if room > 1 else ""


def cmd_run(args) -> int:
    from pesflow.execution.driver import snakemake_env
    from pesflow.execution.warm import WarmSnakemake

    # Snakemake imports itself in a child while the campaign loads and plans (~0.8 s).
    warm = WarmSnakemake(snakemake_env(args.threads_per_batch), local=not args.profile)
    try:
        return _run(args, warm)
    finally:
        warm.cancel()  # nothing to compute, or an error: the child ends unused


class _EarlyWarnings:
    """:func:`pesflow.api.warning_counts`, started on a thread by :meth:`start` (when every
    job of the run has ended, every point is in the store) and taken by calling it; called
    without a start, or when the thread failed, it computes them then."""

    def __init__(self, compute):
        self.compute = compute
        self.thread = None
        self.value = None

    def start(self) -> None:
        def work():
            try:
                self.value = self.compute()
            except Exception:  # computed again on the main thread, where it reports
                self.value = None

        self.thread = threading.Thread(target=work, name="pesflow-warnings", daemon=True)
        self.thread.start()

    def __call__(self):
        if self.thread is not None:
            self.thread.join()
            if self.value is not None:
                return self.value
        return self.compute()


def _run(args, warm) -> int:
    from pesflow import api
    from pesflow.units import format_duration as fmt_duration

    campaign = _load(args.spec)
    plan = _plan(campaign)
    store = _store(campaign)
    progress = Progress(
        TextColumn("[bold]points"),
        BarColumn(bar_width=_BAR_WIDTH if console.width >= 100 else _BAR_WIDTH // 4),
        TextColumn(
            "{task.fields[done]} done, {task.fields[failed]} failed, {task.fields[left]} left"
        ),
        TimeElapsedColumn(),
        TextColumn("ETA {task.fields[eta]}"),
        TextColumn("{task.fields[running]}"),
        console=console,
        transient=False,
        # the figures change when the store is polled (every 0.5 s): redrawing at rich's
        # default 10 Hz costs the driver CPU that the jobs' cores lose
        refresh_per_second=2,
    )
    state = {"task": None, "start": time.monotonic(), "printed": time.monotonic()}

    def on_start(to_compute, jobs, cached):
        console.print(f"{to_compute} points to compute in {jobs} jobs ({cached} cached)")
        console.print(f"store: {campaign.store_path}", markup=False, soft_wrap=True)
        state["task"] = progress.add_task(
            "run", total=to_compute, done=0, failed=0, left=0, eta="-", running=""
        )
        progress.start()

    def on_progress(p):
        eta = fmt_duration(p.eta_s) if p.finished < p.total else "-"
        shown = "; ".join(p.running[:3]) + (
            f" (+{len(p.running) - 3})" if len(p.running) > 3 else ""
        )
        counts = f"{p.finished - p.failed} done, {p.failed} failed, {p.total - p.finished} left"
        running = _fit(f"running: {shown}" if shown else "", _room(counts, eta or "-"))
        progress.update(
            state["task"],
            completed=p.finished,
            done=p.finished - p.failed,
            failed=p.failed,
            left=p.total - p.finished,
            eta=eta or "-",
            running=escape(running),
        )
        if not console.is_terminal and time.monotonic() - state["printed"] > 30:
            state["printed"] = time.monotonic()
            console.print(
                f"  {p.finished}/{p.total} points, {p.failed} failed, "
                f"{time.monotonic() - state['start']:.0f} s, ETA {eta or '-'}"
                + (f"; running: {shown}" if shown else ""),
                markup=False,
            )

    # (its own store object: the progress display reads ``store`` on this thread)
    warnings = _EarlyWarnings(lambda: api.warning_counts(campaign, plan, _store(campaign)))
    # The warnings of a large campaign's table are found while Snakemake winds down
    # (a refined campaign's plan changes between rounds: found at the end).
    early = len(campaign.molecules) * len(campaign.levels) > MAX_STATUS_ROWS and not any(
        scan.refine for scan in campaign.scans.values()
    )
    try:
        result = api.run_campaign(
            campaign,
            plan,
            store,
            on_ended=warnings.start if early else None,
            cores=args.cores,
            profile=args.profile,
            threads_per_batch=args.threads_per_batch,
            retry_failed=args.retry_failed,
            on_start=on_start,
            on_progress=on_progress,
            warm=warm,
            on_refine=lambda r: console.print(
                f"adaptive refinement: {r.added} points added (pesflow report shows why)"
            ),
        )
    finally:
        progress.stop()
    plan = result.plan or plan
    _report_quarantined(store, result.quarantined)
    if not result.jobs:
        console.print("nothing to compute: every point is in the store")
    if result.interrupted and not result.stalled:
        console.print(
            "[yellow]interrupted[/yellow]: every finished point is stored; "
            "run the same command again to continue"
        )
        return EXIT_INTERRUPTED
    if result.stalled:
        err_console.print(
            f"all {result.to_compute} points are stored but the scheduler still reported jobs "
            f"running {_stall_grace_s():.0f} s after the last batch ended, so "
            "Snakemake was stopped; the executor's status query may not work on this "
            "cluster (see configs/profiles/slurm/README.md)",
            soft_wrap=True,
        )
    elif result.returncode != 0:
        err_console.print(
            f"some batch jobs failed; Snakemake's log: {result.log_path}", soft_wrap=True
        )
    failed = result.failed_points
    _print_status(
        campaign,
        result.status,
        failed,
        failed.columns,
        spec=args.spec,
        warnings=warnings,
    )
    console.print(f"{result.done} done, {result.failed} failed, {result.pending} pending")
    _print_refinement(campaign)
    if result.failed or result.pending:
        return EXIT_FAILED
    return EXIT_OK


def _stall_grace_s() -> float:
    from pesflow.execution.driver import stall_grace_s

    return stall_grace_s()


def cmd_report(args) -> int:
    from pesflow.execution.refinement import report_tables
    from pesflow.report import build_report, terminal_summary
    from pesflow.tables.points import points_table
    from pesflow.tables.stationary import stationary_table
    from pesflow.tables.summary import summary_table

    campaign = _load(args.spec)
    plan = _plan(campaign)
    store = _store(campaign)
    points = points_table(plan, store)
    _report_quarantined(store)
    summary = summary_table(campaign, plan, points)
    stationary = stationary_table(campaign, plan, points)
    out = Path(args.output) if args.output else campaign.results_path / "report"
    refinement = report_tables(campaign)
    paths = build_report(
        campaign, plan, points, summary, out, stationary=stationary, refinement=refinement
    )
    terminal_summary(campaign, summary, console, paths=paths, points=points)
    _print_refinement(campaign)
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
    elif args.what == "stationary":
        from pesflow.tables.stationary import stationary_table

        table = stationary_table(campaign, plan, table)
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
        choices=("points", "summary", "stationary", "geometries"),
        default="points",
        help="points table, per-curve summary, every stationary point of every curve, or "
        "every point's geometry",
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


def console_main() -> None:
    """The ``pesflow`` command (and ``python -m pesflow``): :func:`main`, then the process
    ends without the interpreter's tear-down of every imported module (pandas, SciPy,
    PySCF: about 0.2 s at the end of every command).  Every file pesflow writes is closed
    and durable before :func:`main` returns; the output streams and logging are flushed
    here."""
    import logging
    import os

    code = main()
    code = 0 if code is None else int(code)
    try:
        logging.shutdown()
        sys.stdout.flush()
        sys.stderr.flush()
    except Exception:  # e.g. a closed pipe: end as the interpreter would, with the code
        sys.exit(code)
    os._exit(code)


if __name__ == "__main__":
    console_main()
