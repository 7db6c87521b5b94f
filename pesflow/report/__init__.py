"""Comparison reports of a campaign: molecules x methods x basis sets.

:func:`build_report` writes, from the points table and the summary table (nothing is
computed), into one folder:

* ``report.html``: one self-contained page (embedded PNG figures, inline CSS, no script, no
  network) answering "which level is closest to the reference, by how much, at what cost";
* ``report.md``: the same verdicts and tables in Markdown, figures under ``figures/``;
* the tables as CSV: ``quantities.csv`` (one row per curve x level x quantity, with the
  summary's deviation from the reference level), ``reference_values.csv``, ``statistics.csv``
  (mean signed / mean absolute / maximum absolute deviation and n per level), ``cost.csv``,
  ``status.csv`` (done / failed / pending per molecule and level), ``failed.csv``,
  ``pending.csv``, ``convergence.csv``, ``summary.csv`` (the summary table as given) and
  ``stationary.csv`` (every minimum, maximum and saddle per curve and level).

:func:`terminal_summary` prints the verdicts to a :class:`rich.console.Console`.

>>> # points = points_table(plan, store); summary = summary_table(campaign, plan, points)
>>> # paths = build_report(campaign, plan, points, summary, campaign.results_path / "report")
>>> # terminal_summary(campaign, summary, console, paths=paths)
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from pesflow.analysis.flags import Flag, flag_text
from pesflow.formats.atomic import atomic_write
from pesflow.report.stats import (
    ErrorStatistics,
    closest_levels,
    error_statistics,
    level_statistics,
)
from pesflow.report.tables import QUANTITIES, QUANTITY, ReportData, collect
from pesflow.tables.states import states_as_levels

__all__ = [
    "QUANTITIES",
    "ErrorStatistics",
    "ReportData",
    "build_report",
    "closest_levels",
    "collect",
    "error_statistics",
    "level_statistics",
    "terminal_summary",
]

#: CSV files of the report: (key in the returned dict, file name, ReportData attribute).
_CSV = (
    ("quantities_csv", "quantities.csv", "values"),
    ("reference_values_csv", "reference_values.csv", "reference_values"),
    ("statistics_csv", "statistics.csv", "statistics"),
    ("cost_csv", "cost.csv", "cost"),
    ("status_csv", "status.csv", "status"),
    ("failed_csv", "failed.csv", "failed"),
    ("pending_csv", "pending.csv", "pending"),
    ("convergence_csv", "convergence.csv", "convergence"),
    ("summary_csv", "summary.csv", "curves"),
    ("sets_csv", "sets.csv", "sets"),
    ("stationary_csv", "stationary.csv", "stationary"),
    ("refinement_csv", "refinement.csv", "refinement_points"),
)
_LABELS = {
    "quantities.csv": "derived quantities per curve and level, with deviations",
    "reference_values.csv": "deviations from the user's reference values",
    "statistics.csv": "error statistics per level (MSD, MAD, max, n)",
    "cost.csv": "core-seconds and point counts per level",
    "status.csv": "done / failed / pending points per molecule and level",
    "failed.csv": "failed points with their error text",
    "pending.csv": "points not computed yet",
    "convergence.csv": "quantities against basis-set size",
    "summary.csv": "the summary table the report was built from",
    "sets.csv": "statistics per molecule set, rule, level and quantity",
    "stationary.csv": "every minimum, maximum and saddle per curve and level",
    "refinement.csv": "points added by adaptive refinement, with round and reason",
    "report.md": "this report as Markdown",
    "figures/": "the figures as PNG files",
}


def _csv_cell(value):
    if isinstance(value, tuple) and all(isinstance(v, Flag) for v in value):
        return flag_text(value)  # the flags of a value, as the summary's flags column
    if isinstance(value, list | tuple | np.ndarray):
        return " ".join(map(str, value))
    return value


def _csv_text(frame: pd.DataFrame) -> str:
    frame = frame.copy()
    for col in frame.columns:
        if frame[col].dtype == object:
            # Lists (geometries) would be written as Python reprs; the summary has none, but
            # keep the CSV plain text in any case.
            frame[col] = frame[col].map(_csv_cell)
    return frame.to_csv(index=False)


def build_report(
    campaign,
    plan,
    points: pd.DataFrame,
    summary: pd.DataFrame,
    out_dir,
    *,
    stationary=None,
    refinement=None,
) -> dict[str, Path]:
    """Write the comparison report of ``campaign`` into ``out_dir`` (created if needed).

    Args:
        campaign: the loaded :class:`~pesflow.campaign.resolved.Campaign`.
        plan: its :class:`~pesflow.plan.expand.Plan` (:func:`pesflow.plan.expand.expand`).
        points: :func:`pesflow.tables.points.points_table` of the campaign, all columns.
        summary: :func:`pesflow.tables.summary.summary_table` of the same points.
        out_dir: output folder; ``pesflow report`` uses ``campaign.results_path / "report"``.
        stationary: :func:`pesflow.tables.stationary.stationary_table` of the same points
            (default: none; the section then says so).
        refinement: ``(rounds, points)`` of the refinement log
            (:func:`pesflow.execution.refinement.refinement_table`), or None.

    Returns:
        ``{"html": .../report.html, "markdown": .../report.md, "figures": .../figures,
        "quantities_csv": ..., "reference_values_csv": ..., "statistics_csv": ...,
        "cost_csv": ..., "status_csv": ..., "failed_csv": ..., "pending_csv": ...,
        "convergence_csv": ..., "summary_csv": ..., "sets_csv": ..., "stationary_csv": ...,
        "refinement_csv": ...}``.
        Each file is written atomically (temporary file, then rename); figures of an earlier
        report that are no longer produced are removed.  Reads nothing but the arguments (and
        PySCF's basis-function counts when some method was run with two or more basis sets);
        computes no energies.
    """
    from pesflow.report import html as html_page
    from pesflow.report import markdown
    from pesflow.report.plots import make_figures

    out = Path(out_dir)
    fig_dir = out / "figures"
    fig_dir.mkdir(parents=True, exist_ok=True)
    data = collect(campaign, plan, points, summary, stationary=stationary, refinement=refinement)
    points = states_as_levels(points, summary)[0]  # each excited state a level, as in data
    figures = make_figures(campaign, points, data)
    paths: dict[str, Path] = {}
    for key, name, attr in _CSV:
        path = out / name
        atomic_write(path, _csv_text(getattr(data, attr)), fsync=False)
        paths[key] = path
    keep = set()
    for fig in figures.values():
        atomic_write(fig_dir / fig.name, fig.png, fsync=False)
        keep.add(fig.name)
    for old in fig_dir.glob("*.png"):
        if old.name not in keep:
            old.unlink()
    paths["figures"] = fig_dir
    files = {_LABELS[name]: name for _, name, _ in _CSV}
    files[_LABELS["figures/"]] = "figures/"
    md_files = dict(files)
    files[_LABELS["report.md"]] = "report.md"
    figure_files = {key: f"figures/{fig.name}" for key, fig in figures.items()}
    paths["markdown"] = out / "report.md"
    atomic_write(paths["markdown"], markdown.render(data, figure_files, md_files), fsync=False)
    paths["html"] = out / "report.html"
    atomic_write(paths["html"], html_page.render(data, figures, files), fsync=False)
    return paths


#: The closest-level mark of the terminal report (a column of its own, so that it cannot be
#: read as part of a level's name).
CLOSEST_MARK = "← closest"


def terminal_summary(campaign, summary: pd.DataFrame, console, *, paths=None, points=None) -> None:
    """Print the report's verdicts to ``console`` (a :class:`rich.console.Console`).

    Per quantity and reference, the error statistics of each level over the curves every
    compared level has, the closest level marked; then the cost and the points of each
    level, what is missing, and the report files when ``paths`` (the dict
    :func:`build_report` returned) is given.  With ``points`` (the points table the report
    was built from) the numbers are those of the HTML page, fragment points included;
    without it, point counts and core-seconds are those of the summary's scan points.
    Tables fit the console's width (text folds, numbers are never cut); all text is printed
    without markup interpretation.
    """
    from rich.table import Table
    from rich.text import Text

    from pesflow.report.formatting import fmt_dev, fmt_seconds, fmt_value

    if points is None:
        points = pd.DataFrame(
            {"molecule": [], "scan": [], "level": [], "status": [], "role": [], "method": []}
        )
    data = collect(campaign, None, points, summary, basis_counts={})
    summary = states_as_levels(None, summary)[1]
    ref = data.reference_level
    console.print(
        Text(
            f"campaign {campaign.name}: comparison of {len(data.levels)} levels"
            + (f" against {ref}" if ref else " (no reference level set)"),
            style="bold",
        ),
        soft_wrap=True,
    )

    def new_table(title, *columns):
        out = Table(title=Text(title), title_justify="left")
        for name in columns:
            if name in ("level", ""):
                out.add_column(name, overflow="fold")
            else:
                out.add_column(name, justify="right", no_wrap=True)
        return out

    ranking = data.ranking
    best = closest_levels(ranking)
    explained = False
    for (column, against), rows in ranking.groupby(["quantity", "against"], sort=False):
        q = QUANTITY[column]
        rows = rows[rows["n"] > 0]
        if rows.empty:
            continue
        n, n_most = int(rows["n"].max()), int(rows["n_curves"].max())
        curves = f"{n} of {n_most}" if n_most > n else str(n)
        what = "reference values" if against == "reference values" else f"{against}"
        table = new_table(
            f"{q.name} ({q.unit}) against {what}, over {curves} curve"
            + ("" if n_most == 1 else "s"),
            "level",
            "MSD",
            "MAD",
            "max |dev|",
            "",
        )
        winner = best[(best["quantity"] == column) & (best["against"] == against)]
        won = set(winner["level"])
        for _, r in rows.iterrows():
            table.add_row(
                Text(r["level"]),
                fmt_dev(r["mean_signed"], q.decimals),
                fmt_value(r["mean_absolute"], q.decimals),
                fmt_value(r["max_absolute"], q.decimals),
                Text(CLOSEST_MARK if r["level"] in won else ""),
            )
        console.print(table)
        if not explained:
            console.print(
                "MSD, MAD: mean signed and mean absolute deviation (level minus reference), "
                "max |dev|: the largest absolute deviation, over the curves every level has; "
                f"{CLOSEST_MARK}: the smallest MAD.",
                markup=False,
            )
            explained = True
    if best.empty:
        console.print(
            "no deviations to rank yet (needs a reference level or reference values "
            "and computed curves)"
        )
    if len(points):
        cost = data.cost.set_index("level")
        counts = cost.rename(
            columns={"points_done": "done", "points_failed": "failed", "points_pending": "pending"}
        )
        core = counts["core_s"]
        per_point = counts["core_s_per_point"]
    else:
        counts = (
            summary.groupby("level", sort=False)
            .agg(
                core_s=("cost_core_s", "sum"),
                done=("n_done", "sum"),
                failed=("n_failed", "sum"),
                pending=("n_pending", "sum"),
            )
            .reindex([lvl for lvl in data.levels if lvl in set(summary["level"])])
            if len(summary)
            else pd.DataFrame(columns=["core_s", "done", "failed", "pending"])
        )
        core = counts["core_s"]
        computed = counts["done"] + counts["failed"]
        per_point = core / computed.where(computed > 0)
    if len(counts):
        table = new_table(
            "cost and points per level", "level", "core-s", "per point", "done", "failed", "pending"
        )
        for level, r in counts.iterrows():
            table.add_row(
                Text(level + (" (reference)" if level == ref else "")),
                fmt_seconds(core.get(level, np.nan)),
                fmt_seconds(per_point.get(level, np.nan)),
                str(int(r["done"])),
                str(int(r["failed"])),
                str(int(r["pending"])),
            )
        console.print(table)
        console.print(
            "core-s: core-seconds, the sum of the points' wall times"
            + (" (fragment points included)" if len(points) else " (scan points)")
            + "; per point: core-s over the points computed.",
            markup=False,
        )
    missing = counts[(counts["failed"] > 0) | (counts["pending"] > 0)] if len(counts) else counts
    if len(missing):
        text = ", ".join(
            f"{lvl}: {int(r['failed'])} failed, {int(r['pending'])} pending"
            for lvl, r in missing.iterrows()
        )
        console.print(Text(f"incomplete: {text}", style="yellow"))
    if paths:
        for key in ("html", "markdown"):
            if key in paths:
                console.print(Text(f"{key}: {paths[key]}"), soft_wrap=True)
