"""The report's "Adaptive refinement" section: per refined curve, the rounds, the points each
round added and why, and whether the targets were met or the point budget ran out.

Its data are the refinement log's two tables (:func:`pesflow.execution.refinement.
refinement_table`, read by the caller and passed to ``build_report``): ``ReportData.
refinement`` (one row per curve and round) and ``ReportData.refinement_points`` (one row per
added point).  The page (:func:`refinement_section`), the Markdown (:func:`refinement_markdown`)
and the terminal summary (:func:`refinement_verdicts`) share :func:`refinement_tables`.
"""

from __future__ import annotations

import pandas as pd

from pesflow.analysis.quantities import QUANTITY
from pesflow.report.formatting import fmt_value_u
from pesflow.report.markup import Markup, join, table, tag, td, th

EXPLAIN = (
    "Scans with refine start from their coarse grid; after each round the curve is analysed "
    "as in the summary and a target counts as met when its standard uncertainty is within the "
    "target and the value moved no more than the target (or twice the previous round's "
    "uncertainty) since the previous round. Otherwise a pair of points is added around each "
    "stationary point the target depends on, closer each round, until the targets are met or "
    "the budget (max_points per walk) is spent. A point added for one level is computed at "
    "every level of the walk."
)

NO_POINTS = pd.DataFrame(columns=["molecule", "scan", "round", "value", "level", "reason"])

HEADER = ("round", "points", "targets (value ± uncertainty; target)", "points added next")

VERDICT = {
    "met": "targets met with {n} points",
    "budget spent": "point budget spent at {n} points before the targets were met",
    "refining": "refinement under way at {n} points (run again to continue)",
    "no new point": "stopped at {n} points: no new point could be placed (is the stationary "
    "point inside the coarse grid?)",
}


def _target_text(row, column) -> str:
    q = QUANTITY[column]
    target = row.get(f"target_{column}")
    met = "met" if bool(row.get(f"met_{column}")) else "not met"
    value = fmt_value_u(row.get(column), row.get(f"u_{column}"), q.decimals) or "-"
    return f"{q.name} {value} {q.unit} (target {target:g}; {met})"


def refinement_tables(rounds: pd.DataFrame, points: pd.DataFrame):
    """Per refined curve ``(molecule, scan, level, verdict, rows)``: ``rows`` of text cells
    under :data:`HEADER`, one per round; ``verdict`` the last round's outcome in words."""
    if rounds is None or rounds.empty:
        return []
    out = []
    targets = [c[len("target_") :] for c in rounds.columns if c.startswith("target_")]
    for (molecule, scan, level), sub in rounds.groupby(["molecule", "scan", "level"], sort=False):
        sub = sub.sort_values("round")
        rows = []
        for _, r in sub.iterrows():
            wanted = [c for c in targets if pd.notna(r.get(f"target_{c}"))]
            added = points[
                (points["molecule"] == molecule)
                & (points["scan"] == scan)
                & (points["round"] == r["round"] + 1)
                & (points["level"] == level)
            ]
            added_text = "; ".join(f"{p['value']:.6g}: {p['reason']}" for _, p in added.iterrows())
            rows.append(
                [
                    str(int(r["round"])),
                    str(int(r["n_points"])),
                    "; ".join(_target_text(r, c) for c in wanted),
                    added_text or ("-" if r["outcome"] != "refining" else "(by another level)"),
                ]
            )
        last = sub.iloc[-1]
        verdict = VERDICT.get(last["outcome"], last["outcome"]).format(n=int(last["n_points"]))
        out.append((molecule, scan, level, verdict, rows))
    return out


def refinement_verdicts(rounds: pd.DataFrame) -> list[str]:
    """One line per refined curve, for the terminal: ``molecule scan level: verdict``."""
    return [
        f"{molecule} {scan} {level}: {verdict}"
        for molecule, scan, level, verdict, _ in refinement_tables(rounds, NO_POINTS)
    ]


def refinement_section(d) -> Markup:
    parts = [tag("p", EXPLAIN, class_="explain")]
    for molecule, scan, level, verdict, rows in refinement_tables(
        d.refinement, d.refinement_points
    ):
        parts.append(tag("h3", f"{molecule}: {scan}, {level}"))
        parts.append(tag("p", tag("strong", verdict)))
        head = [[th(h, cls="num" if i < 2 else None) for i, h in enumerate(HEADER)]]
        body = [[td(c, cls="num" if i < 2 else None) for i, c in enumerate(r)] for r in rows]
        parts.append(table(head, body))
    return join(parts)


def refinement_markdown(d, md, markdown_table) -> list[str]:
    """The section as Markdown lines (``md``: the Markdown escaper, ``markdown_table``:
    ``(head, rows) -> lines``); none without a log."""
    tables = refinement_tables(d.refinement, d.refinement_points)
    if not tables:
        return []
    lines = ["## Adaptive refinement", "", EXPLAIN, ""]
    for molecule, scan, level, verdict, rows in tables:
        lines += [f"### {md(molecule)}: {md(scan)}, {md(level)}", "", f"**{md(verdict)}**", ""]
        lines += markdown_table([md(h) for h in HEADER], [[md(c) for c in r] for r in rows])
    return lines
