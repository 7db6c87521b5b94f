"""The report sections about the run itself: the adaptive refinement
(:mod:`pesflow.report.refinement`), the compute cost per level, the missing (failed and
pending) points, and the files the report wrote."""

from __future__ import annotations

from pesflow.report.formatting import fmt_ratio, fmt_seconds
from pesflow.report.markup import Markup, data_number, join, table, tag, td, th
from pesflow.report.sections.common import Omitted, _banner, _level_head
from pesflow.report.tables import ReportData

#: Longest list of pending points written out in the page (pending.csv lists all of them).
_MAX_LISTED = 500


def _cost_section(d: ReportData) -> Markup:
    head = [
        [th(h) for h in ("level", "method", "basis")]
        + [
            th(h, cls="num")
            for h in (
                "core-s",
                "core-s per point",
                "vs reference",
                "done",
                "failed",
                "pending",
                "planned",
            )
        ]
    ]
    rows = []
    for _, c in d.cost.iterrows():
        ratio = c["cost_vs_reference"]
        rows.append(
            [
                td(_level_head(c["level"], d.reference_level)),
                td(c["method"]),
                td(c["basis"]),
                td(
                    fmt_seconds(c["core_s"]),
                    cls="num",
                    data_level=c["level"],
                    data_core_s=data_number(c["core_s"]),
                ),
                td(fmt_seconds(c["core_s_per_point"]), cls="num"),
                td(fmt_ratio(ratio), cls="num"),
                td(str(int(c["points_done"])), cls="num"),
                td(str(int(c["points_failed"])), cls="num"),
                td(str(int(c["points_pending"])), cls="num"),
                td(str(int(c["points_total"])), cls="num"),
            ]
        )
    return join(
        [
            table(head, rows),
            tag(
                "p",
                "Core-seconds: the sum of the stored points' wall times (batches run one thread "
                "each by default), failed points included. A correlated method's points include "
                "the SCF they are built on, so each level's cost is what it would cost alone.",
                class_="explain",
            ),
        ]
    )


def _missing_section(d: ReportData) -> Markup:
    head = [[th("molecule")] + [th(lvl, cls="num") for lvl in d.levels]]
    rows = []
    status = d.status.set_index(["molecule", "level"])
    for molecule in dict.fromkeys(d.status["molecule"]):
        cells = [td(molecule)]
        for lvl in d.levels:
            if (molecule, lvl) not in status.index:
                cells.append(td(tag("span", "not planned", class_="muted"), cls="num"))
                continue
            r = status.loc[(molecule, lvl)]
            done, failed, pending = (int(r[c]) for c in ("done", "failed", "pending"))
            if failed or pending:
                text = tag(
                    "span",
                    ", ".join(
                        [f"{done} done"]
                        + ([f"{failed} failed"] if failed else [])
                        + ([f"{pending} pending"] if pending else [])
                    ),
                    class_="missing",
                )
            else:
                text = f"{done} done"
            cells.append(
                td(
                    text,
                    cls="num",
                    data_molecule=molecule,
                    data_level=lvl,
                    data_done=str(done),
                    data_failed=str(failed),
                    data_pending=str(pending),
                )
            )
        rows.append(cells)
    parts = [
        tag("p", "Points per molecule and level (scan points and fragment points)."),
        table(head, rows),
    ]
    if len(d.failed):
        parts.append(tag("h3", f"Failed points ({len(d.failed)})"))
        parts.append(
            table(
                [[th("molecule"), th("scan"), th("level"), th("point"), th("error")]],
                [
                    [
                        td(r["molecule"]),
                        td(r["scan"]),
                        td(r["level"]),
                        td(r["where"]),
                        td(r["error"]),
                    ]
                    for _, r in d.failed.iterrows()
                ],
            )
        )
    if len(d.pending):
        shown = d.pending.head(_MAX_LISTED)
        items = [
            tag("li", f"{r['molecule']}, {r['scan']}, {r['level']}: {r['where']}")
            for _, r in shown.iterrows()
        ]
        if len(d.pending) > len(shown):
            items.append(
                tag(
                    "li",
                    f"and {len(d.pending) - len(shown)} more: pending.csv "
                    "lists every pending point",
                )
            )
        parts.append(
            tag(
                "details",
                join(
                    [
                        tag("summary", f"All {len(d.pending)} pending points"),
                        tag("ul", join(items), class_="flags"),
                    ]
                ),
            )
        )
    if not len(d.failed) and not len(d.pending):
        parts.append(tag("p", "Nothing is missing.", class_="muted"))
    return join(parts)


def _files_section(d: ReportData, figures, files) -> Markup:
    return tag(
        "ul",
        join(tag("li", join([tag("code", name), f": {label}"])) for label, name in files.items()),
    )


def _missing_points(d: ReportData, figures, files) -> Markup:
    return join([_banner(d), _missing_section(d)])


def _refinement_section(d):
    from pesflow.report.refinement import refinement_section

    if d.refinement.empty:
        return Omitted("no scan refines its grid")
    return refinement_section(d)
