"""The report sections per curve: each curve or surface with its figures, notes, failed and
pending points; the basis-set convergence; the counterpoise interaction curves
(:mod:`pesflow.report.interaction`); every stationary point."""

from __future__ import annotations

import numpy as np

from pesflow.report.formatting import fmt_value
from pesflow.report.markup import Markup, esc, figure, join, table, tag, td, th
from pesflow.report.section_tables import STATIONARY_EXPLAIN, stationary_tables
from pesflow.report.sections.common import Omitted, _anchor, _fold, note_marks
from pesflow.report.tables import QUANTITY, ReportData

#: Longest lists of points written out in the page (the CSV files always list all of them).
_MAX_LISTED_PER_CURVE = 40


def _curve_sections(d: ReportData, figures) -> Markup:
    out = []
    for (molecule, scan), curve in d.curves.groupby(["molecule", "scan"], sort=False):
        parts = []
        coords = curve["coordinates"].iloc[0] if "coordinates" in curve else ""
        for key, caption in (
            (
                f"curve:{molecule}:{scan}",
                f"{molecule}, scan {scan} ({coords}): energy relative "
                "to each level's own minimum. Lines: the interpolant used by the analysis; "
                "markers: computed points; triangles: interpolated minima; crosses on the axis: "
                "failed points; open circles at the top: pending points.",
            ),
            (
                f"surface:{molecule}:{scan}",
                f"{molecule}, scan {scan} ({coords}): energy "
                "relative to each level's own minimum (kcal/mol). Star: minimum; crosses: failed "
                "points; open circles: pending points.",
            ),
            (
                f"difference:{molecule}:{scan}",
                "Difference of the relative energies from the "
                "reference level (kcal/mol); positive where the level lies higher.",
            ),
        ):
            if key in figures:
                parts.append(figure(figures[key], caption))
        flags = d.curve_flags[
            (d.curve_flags["molecule"] == molecule) & (d.curve_flags["scan"] == scan)
        ]
        if len(flags):
            grouped: dict[str, list[str]] = {}
            for _, r in flags.iterrows():
                grouped.setdefault(str(r["flag"]), []).append(r["level"])
            items = []
            for message, lvls in grouped.items():
                note = d.notes[message]
                items.append(
                    tag(
                        "li",
                        join(
                            [
                                note_marks(d, [message]),
                                " ",
                                note["title"],
                                ": ",
                                tag("span", ", ".join(dict.fromkeys(lvls)), class_="muted"),
                            ]
                        ),
                    )
                )
            parts.append(tag("h4", "Notes on this curve"))
            parts.append(tag("ul", join(items), class_="flags"))
        failed = d.failed[(d.failed["molecule"] == molecule) & (d.failed["scan"] == scan)]
        if len(failed):
            parts.append(tag("h4", f"Failed points ({len(failed)})"))
            parts.append(
                table(
                    [[th("level"), th("point"), th("error")]],
                    [
                        [td(r["level"]), td(r["where"]), td(r["error"])]
                        for _, r in failed.iterrows()
                    ],
                )
            )
        pending = d.pending[(d.pending["molecule"] == molecule) & (d.pending["scan"] == scan)]
        if len(pending):
            items = []
            for lvl, sub in pending.groupby("level", sort=False):
                where = list(sub["where"])
                more = len(where) - _MAX_LISTED_PER_CURVE
                text = "; ".join(where[:_MAX_LISTED_PER_CURVE])
                if more > 0:
                    text += f"; and {more} more (pending.csv lists all)"
                items.append(tag("li", join([tag("strong", lvl), f" ({len(sub)}): ", text])))
            parts.append(tag("h4", f"Pending points ({len(pending)}), not computed yet"))
            parts.append(tag("ul", join(items), class_="flags"))
        out.append(
            _fold(
                esc(f"{molecule}: {scan}"),
                join(parts),
                anchor=_anchor("curve", molecule, scan),
                open_=not out,
            )
        )
    return join(out)


def _convergence_section(d: ReportData, figures) -> Markup:
    if d.convergence.empty:
        return Omitted("each method was computed with one basis set only")
    out = []
    for column in dict.fromkeys(d.convergence["quantity"]):
        q = QUANTITY[column]
        parts = []
        fig = figures.get(f"convergence:{column}")
        parts.append(
            figure(
                fig,
                join(
                    [
                        Markup(q.html),
                        " against the number of basis functions of each molecule, one line "
                        "per method; dotted: the reference level; dashed: the user's "
                        "reference value.",
                    ]
                ),
            )
        )
        sub = d.convergence[d.convergence["quantity"] == column]
        parts.append(
            table(
                [
                    [
                        th("molecule"),
                        th("scan"),
                        th("method"),
                        th("basis"),
                        th("basis functions", cls="num"),
                        th("cardinal number", cls="num"),
                        th(f"value ({q.unit})", cls="num"),
                    ]
                ],
                [
                    [
                        td(r["molecule"]),
                        td(r["scan"]),
                        td(r["method"]),
                        td(r["basis"]),
                        td("" if not np.isfinite(r["nbf"]) else str(int(r["nbf"])), cls="num"),
                        td(
                            ""
                            if r["cardinal"] is None or not np.isfinite(r["cardinal"])
                            else str(int(r["cardinal"])),
                            cls="num",
                        ),
                        td(fmt_value(r["value"], q.decimals), cls="num"),
                    ]
                    for _, r in sub.iterrows()
                ],
            )
        )
        out.append(
            _fold(
                join([Markup(q.html), f" ({q.unit})"]),
                join(parts),
                anchor=_anchor("convergence", column),
                open_=not out,
            )
        )
    return join(out)


def _stationary_section(d: ReportData, figures, files) -> Markup:
    tables = stationary_tables(d)
    if not tables:
        return tag("p", "No stationary points (no curve analysed yet).", class_="muted")
    parts = [tag("p", STATIONARY_EXPLAIN, class_="explain")]
    for molecule, scan, header, rows in tables:
        parts.append(tag("h3", f"{molecule}: {scan}", id=_anchor("stationary", molecule, scan)))
        head = [[th(h, cls=None if i < 2 else "num") for i, h in enumerate(header)]]
        body = [[td(c, cls=None if i < 2 else "num") for i, c in enumerate(r)] for r in rows]
        parts.append(table(head, body))
    return join(parts)


def _counterpoise_section(d, figures, files):
    from pesflow.report.interaction import counterpoise_section

    if not any(k.startswith("interaction:") for k in figures):
        return Omitted("the campaign has no counterpoise scan")
    return counterpoise_section(d, figures, files)
