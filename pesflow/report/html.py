"""The self-contained HTML page of a report: tables, embedded PNG figures, our own CSS.

The page loads nothing: figures are ``data:`` URIs, the style sheet is inline, and there is no
script at all.  A Content-Security-Policy meta tag forbids scripts and any network access, as
a second line of defence.  Every text that comes from the spec or the store (names, sources,
flags, error messages) passes through :func:`esc` (:func:`html.escape`); only our own fixed
markup is marked trusted with :class:`Markup`.
"""

from __future__ import annotations

from datetime import UTC, datetime
from importlib import resources

import numpy as np

from pesflow.report.formatting import (
    fmt_dev,
    fmt_ratio,
    fmt_seconds,
    fmt_value,
    fmt_value_u,
    scan_label,
)
from pesflow.report.markup import (
    Markup,
    data_number,
    esc,
    figure,
    join,
    table,
    tag,
    td,
    th,
)
from pesflow.report.section_tables import STATIONARY_EXPLAIN, stationary_tables
from pesflow.report.stats import closest_levels
from pesflow.report.tables import QUANTITY, ReportData

#: Longest lists of points written out in the page (the CSV files always list all of them).
_MAX_LISTED_PER_CURVE = 40
_MAX_LISTED = 500


#: The analysis sees only energies: a point not computed yet is a missing energy to it, and its
#: warnings call such points "failed".  Said once on a page that has pending points.
_PENDING_NOTE = (
    'While points are pending, the analysis counts them among the "failed" points in its '
    "warnings; the true counts are under Missing points."
)


#: The page's style sheet (pesflow/report/style.css), inlined into the page.
CSS = resources.files("pesflow.report").joinpath("style.css").read_text(encoding="utf-8")


def _level_head(level, reference_level) -> Markup:
    if level == reference_level:
        return tag("span", join([level, tag("span", "reference", class_="tag")]), class_="nowrap")
    return esc(level)


class Omitted(str):
    """What a section builder returns instead of markup when the section has nothing to show:
    the reason, said in one line of the contents (``"each method has one basis set"``)."""


def note_marks(d: ReportData, flags) -> Markup:
    """Links ``[n]`` to the notes section for ``flags`` (the warnings that concern one number
    or one curve), numbered once per distinct warning of the page (``ReportData.notes``)."""
    out = []
    for message in dict.fromkeys(str(f) for f in flags):
        note = d.notes.get(message)
        if note is None:
            continue
        n = note["n"]
        out.append(tag("a", f"[{n}]", class_="flag", href=f"#note-{n}", title=note["title"]))
    return join(out)


def _cell_text(row, q) -> Markup:
    state = row["state"]
    if state == "value":
        return esc(fmt_value_u(row["value"], row.get("uncertainty"), q.decimals))
    if state == "not determined" and row["n_pending"]:
        return tag("span", f"not determined ({row['n_pending']} pending)", class_="missing")
    return tag("span", state, class_="missing")


def _quantity_table(d: ReportData, q) -> Markup:
    sub = d.values[d.values["quantity"] == q.column]
    head = [
        [th("molecule"), th("scan")]
        + [
            th(
                _level_head(lvl, d.reference_level),
                cls="num ref" if lvl == d.reference_level else "num",
            )
            for lvl in d.levels
        ]
    ]
    rows = []
    for (molecule, scan), curve in sub.groupby(["molecule", "scan"], sort=False):
        by_level = curve.set_index("level")
        cells = [td(molecule), td(scan_label(d.curves, molecule, scan, q.column))]
        for lvl in d.levels:
            cls = "num ref" if lvl == d.reference_level else "num"
            if lvl not in by_level.index:
                cells.append(td(tag("span", "not planned", class_="muted"), cls=cls))
                continue
            row = by_level.loc[lvl]
            content = [_cell_text(row, q), note_marks(d, row["flags"])]
            dev = fmt_dev(row["dev_reference_level"], q.decimals)
            if lvl != d.reference_level and dev:
                content.append(tag("span", f"Δ {dev}", class_="dev"))
            cells.append(
                td(
                    join(content),
                    cls=cls,
                    data_quantity=q.column,
                    data_molecule=molecule,
                    data_scan=scan,
                    data_level=lvl,
                    data_value=data_number(row["value"]),
                    data_dev=data_number(row["dev_reference_level"]),
                )
            )
        rows.append(cells)
    return table(head, rows)


def _reference_values_table(d: ReportData, q) -> Markup:
    sub = d.reference_values[d.reference_values["quantity"] == q.column]
    if sub.empty:
        return Markup("")
    head = [
        [th("molecule"), th("scan"), th("reference value", cls="num"), th("source")]
        + [th(_level_head(lvl, d.reference_level), cls="num") for lvl in d.levels]
    ]
    rows = []
    keys = ["molecule", "scan", "source", "reference_value"]
    for (molecule, scan, source, value), ref in sub.groupby(keys, sort=False):
        by_level = ref.set_index("level")
        cells = [
            td(molecule),
            td(scan),
            td(fmt_value(value, q.decimals), cls="num"),
            td(source),
        ]
        for lvl in d.levels:
            dev = by_level.loc[lvl, "deviation"] if lvl in by_level.index else np.nan
            text = fmt_dev(dev, q.decimals)
            cells.append(
                td(
                    text or tag("span", "no value", class_="missing"),
                    cls="num",
                    data_quantity=q.column,
                    data_molecule=molecule,
                    data_scan=scan,
                    data_level=lvl,
                    data_ref_dev=data_number(dev),
                )
            )
        rows.append(cells)
    return join(
        [tag("h4", "Deviation from the reference values (level minus value)"), table(head, rows)]
    )


def _stats_table(d: ReportData, q) -> Markup:
    stats = d.statistics[d.statistics["quantity"] == q.column]
    if stats.empty:
        return Markup("")
    groups = list(dict.fromkeys(stats["against"]))
    head = [
        [th("level", rowspan=2)]
        + [
            th(
                f"against {g}"
                if g == "reference values"
                else join(["against ", g, " (reference level)"]),
                colspan=4,
                cls="num",
            )
            for g in groups
        ],
        [th(t, cls="num sub") for _ in groups for t in ("n", "MSD", "MAD", "max |dev|")],
    ]
    rows = []
    for lvl in d.levels:
        cells = [td(lvl)]
        have = False
        for g in groups:
            r = stats[(stats["against"] == g) & (stats["level"] == lvl)]
            if r.empty:
                cells += [td("", cls="num")] * 4
                continue
            have = True
            r = r.iloc[0]
            at = r["max_absolute_at"]
            cells += [
                td(str(int(r["n"])), cls="num"),
                td(fmt_dev(r["mean_signed"], q.decimals), cls="num"),
                td(
                    fmt_value(r["mean_absolute"], q.decimals),
                    cls="num",
                    data_quantity=q.column,
                    data_level=lvl,
                    data_against=g,
                    data_mad=data_number(r["mean_absolute"]),
                ),
                td(
                    join(
                        [
                            fmt_value(r["max_absolute"], q.decimals),
                            tag("span", at, class_="dev") if at else "",
                        ]
                    ),
                    cls="num",
                ),
            ]
        if have:
            rows.append(cells)
    return join(
        [
            tag("h4", f"Error statistics over the molecule set ({q.unit})"),
            table(head, rows),
            tag(
                "p",
                "MSD: mean signed deviation; MAD: mean absolute deviation; "
                "n: number of curves with a value at both this level and the "
                "reference.",
                class_="explain",
            ),
        ]
    )


def _anchor(*parts) -> str:
    return "-".join(str(p) for p in parts).replace("/", "_").replace("(", "").replace(")", "")


def _curves_text(n, n_most) -> str:
    """``"3"``, or ``"3 of 4"`` when some level has more curves than the common ones."""
    return f"{n} of {n_most}" if n_most > n else str(n)


def _verdicts(d: ReportData) -> Markup:
    best = closest_levels(d.ranking)
    if best.empty:
        return tag(
            "p",
            "Nothing to rank yet: set compare.reference_level (or compare.reference_values) "
            "in the spec, and compute curves at two or more levels. The values and the cost "
            "of every level are below."
            if not d.reference_level and d.reference_values.empty
            else "Nothing to rank yet: no level has a value to compare with the reference "
            "on a curve every level has (see Missing points).",
            class_="muted",
        )
    cost = d.cost.set_index("level")
    head = [
        [
            th("quantity"),
            th("closest level"),
            th("MAD", cls="num"),
            th("curves", cls="num"),
            th("max |dev| (curve)", cls="num"),
            th("core-s per point (vs reference)", cls="num"),
        ]
    ]
    rows = []
    for against, group in best.groupby("against", sort=False):
        label = (
            "against the reference values"
            if against == "reference values"
            else join(["against ", tag("strong", against), " (reference level)"])
        )
        rows.append([tag("td", label, colspan="6", class_="group")])
        for _, b in group.iterrows():
            q = QUANTITY[b["quantity"]]
            lvl = b["level"]
            per_point = cost.loc[lvl, "core_s_per_point"] if lvl in cost.index else np.nan
            ratio = cost.loc[lvl, "cost_vs_reference"] if lvl in cost.index else np.nan
            ranked = d.ranking[
                (d.ranking["quantity"] == b["quantity"]) & (d.ranking["against"] == against)
            ]
            n_most = int(ranked["n_curves"].max())
            rows.append(
                [
                    td(join([Markup(q.html), f" ({q.unit})"])),
                    td(tag("strong", lvl)),
                    td(
                        fmt_value(b["mean_absolute"], q.decimals),
                        cls="num",
                        data_quantity=q.column,
                        data_against=against,
                        data_best=lvl,
                        data_n=str(int(b["n"])),
                    ),
                    td(_curves_text(int(b["n"]), n_most), cls="num"),
                    td(
                        join(
                            [
                                fmt_value(b["max_absolute"], q.decimals),
                                tag("span", b["max_absolute_at"], class_="dev"),
                            ]
                        ),
                        cls="num",
                    ),
                    td(
                        join(
                            [
                                fmt_seconds(per_point),
                                f" ({fmt_ratio(ratio)})" if np.isfinite(ratio) else "",
                            ]
                        ),
                        cls="num",
                    ),
                ]
            )
    parts = [
        table(head, rows),
        tag(
            "p",
            "Closest: the smallest mean absolute deviation (MAD) over the curves that every "
            'ranked level has a value for (curves; "3 of 4": some level has a value '
            "on 4 curves, but only 3 are common to all, and only those are compared). Cost: "
            "mean core-seconds of one point at that level"
            + (", and its ratio to the reference level's." if d.reference_level else "."),
            class_="explain",
        ),
    ]
    return join(parts)


def _overview_table(d: ReportData) -> Markup:
    """Quantities down, levels across: MAD from the reference level over the common curves,
    then the cost."""
    against = d.reference_level
    stats = d.ranking[d.ranking["against"] == against]
    head = [
        [th("quantity (MAD)"), th("curves", cls="num")]
        + [
            th(_level_head(lvl, against), cls="num ref" if lvl == against else "num")
            for lvl in d.levels
        ]
    ]
    rows = []
    for column in dict.fromkeys(stats["quantity"]):
        q = QUANTITY[column]
        s = stats[stats["quantity"] == column]
        ranked = s[s["n"] > 0]
        best = ranked.loc[ranked["mean_absolute"].idxmin(), "level"] if len(ranked) else None
        n = int(ranked["n"].max()) if len(ranked) else 0
        cells = [
            td(join([Markup(q.html), f" ({q.unit})"])),
            td(_curves_text(n, int(s["n_curves"].max())), cls="num"),
        ]
        for lvl in d.levels:
            r = s[s["level"] == lvl]
            if lvl == against:
                cells.append(td("reference", cls="num ref muted"))
            elif r.empty or int(r["n"].iloc[0]) == 0:
                cells.append(td(tag("span", "no value", class_="missing"), cls="num"))
            else:
                text = fmt_value(r["mean_absolute"].iloc[0], q.decimals)
                cells.append(td(text, cls="num best" if lvl == best else "num"))
        rows.append(cells)
    cost = d.cost.set_index("level")
    extra = [
        ("core-s per point", lambda c: fmt_seconds(c["core_s_per_point"])),
        ("cost vs reference", lambda c: fmt_ratio(c["cost_vs_reference"])),
    ]
    if not d.complete:
        extra += [
            ("points failed", lambda c: str(int(c["points_failed"]))),
            ("points pending", lambda c: str(int(c["points_pending"]))),
        ]
    for label, get in extra:
        rows.append(
            [td(label), td("")]
            + [
                td(get(cost.loc[lvl]), cls="num ref" if lvl == against else "num")
                for lvl in d.levels
            ]
        )
    return join(
        [
            table(head, rows),
            tag(
                "p",
                "Bold: the smallest mean absolute deviation of each quantity, over the curves "
                "every level has (curves).",
                class_="explain",
            ),
        ]
    )


def _banner(d: ReportData) -> Markup:
    t = d.totals
    total = t.get("done", 0) + t.get("failed", 0) + t.get("pending", 0)
    if d.complete:
        return tag("div", f"Complete: all {total} points computed.", class_="banner ok")
    return tag(
        "div",
        join(
            [
                tag("strong", "Incomplete campaign. "),
                f"{t.get('done', 0)} of {total} points done, {t.get('failed', 0)} failed, "
                f"{t.get('pending', 0)} pending. Numbers below use only the points that are done; "
                "what is missing is listed under ",
                tag("a", "Missing points", href="#missing"),
                ".",
            ]
        ),
        class_="banner partial",
    )


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


def _cost_section(d: ReportData) -> Markup:
    head = [
        [
            th("level"),
            th("method"),
            th("basis"),
            th("core-s", cls="num"),
            th("core-s per point", cls="num"),
            th("vs reference", cls="num"),
            th("done", cls="num"),
            th("failed", cls="num"),
            th("pending", cls="num"),
            th("planned", cls="num"),
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


def _fold(heading: Markup, body, *, anchor: str, open_: bool) -> Markup:
    """A section part that folds (``<details>``, no script): ``heading`` is always shown."""
    return tag(
        "details",
        join([tag("summary", tag("h3", heading)), body]),
        id=anchor,
        class_="fold",
        open="open" if open_ else None,
    )


def _quantities_section(d: ReportData, figures, files) -> Markup:
    ref = d.reference_level
    parts = []
    for i, q in enumerate(d.quantities):
        parts.append(
            _fold(
                join([Markup(q.html), f" ({q.unit})"]),
                join(
                    [
                        _quantity_table(d, q),
                        _reference_values_table(d, q),
                        _stats_table(d, q),
                    ]
                ),
                anchor=_anchor("q", q.column),
                open_=i == 0,
            )
        )
    explain_dev = (
        join(
            [
                "Each cell: the value at that level and, below it, Δ = value minus "
                "the value at the reference level ",
                tag("strong", ref),
                " for the same molecule and scan. ",
            ]
        )
        if ref
        else "No reference level is set (compare.reference_level), so no deviations "
        "between levels are shown. "
    )
    explain = tag(
        "p",
        join(
            [
                explain_dev,
                "Bracketed numbers link to the ",
                tag("a", "notes", href="#notes"),
                " (warnings of the analysis) that concern the number. Click a quantity to "
                "fold or unfold it. ",
                _PENDING_NOTE if not d.complete else "",
            ]
        ),
        class_="explain",
    )
    return join([explain, join(parts) or tag("p", "No quantities yet.", class_="muted")])


def _notes_section(d: ReportData, figures, files) -> Markup:
    if not d.notes:
        return Omitted("the analysis raised no warning")
    items = []
    for message, note in d.notes.items():
        where = note["where"]
        shown = "; ".join(where[:12]) + (f"; and {len(where) - 12} more" if len(where) > 12 else "")
        items.append(
            tag(
                "li",
                join(
                    [
                        tag("strong", f"{note['title']} ({note['severity']}). "),
                        message,
                        tag("span", f" Applies to: {shown}.", class_="muted"),
                    ]
                ),
                id=f"note-{note['n']}",
            )
        )
    parts = [
        tag(
            "p",
            "Every warning of the analysis once; the numbers in brackets elsewhere on the page "
            "point here. A note puts context beside a number, a warning says a number may be "
            "wrong or missing.",
            class_="explain",
        ),
        tag("ol", join(items), class_="notes"),
    ]
    if not d.complete and len(d.pending):
        parts.append(tag("p", _PENDING_NOTE, class_="explain"))
    return join(parts)


def _overview_section(d: ReportData, figures, files) -> Markup:
    ref = d.reference_level
    parts = [_banner(d), _verdicts(d)]
    if ref:
        parts += [tag("h3", f"Mean absolute deviation from {ref}, and cost"), _overview_table(d)]
    parts.append(
        figure(
            figures.get("accuracy"),
            "Mean absolute deviation from the reference level against the mean cost of one "
            "point; the dotted line marks the reference level's cost.",
        )
    )
    return join(parts)


def _files_section(d: ReportData, figures, files) -> Markup:
    return tag(
        "ul",
        join(tag("li", join([tag("code", name), f": {label}"])) for label, name in files.items()),
    )


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


def _missing_points(d: ReportData, figures, files) -> Markup:
    return join([_banner(d), _missing_section(d)])


def _sets_section(d: ReportData, figures, files) -> Markup:
    """Per set, rule and level: statistics over the members first, then each member's
    numbers folded away (``<details>``), so that a campaign of hundreds stays readable."""
    if d.sets.empty:
        return tag("p", "This campaign has no molecule sets.")
    parts = [
        tag(
            "p",
            "Statistics over each set's molecules, per rule and level (a member with several "
            "conformers counts once, through its lower envelope); each member's numbers "
            "are folded below.",
        )
    ]
    head = [
        [th(h) for h in ("set", "rule", "level", "quantity", "molecules", "complete curves")]
        + [th(h, cls="num") for h in ("median", "minimum", "maximum")]
    ]
    rows = []
    for r in d.sets.itertuples(index=False):
        q = QUANTITY[r.quantity]
        rows.append(
            [
                td(r.set), td(r.rule), td(r.level), td(q.title), td(str(r.n_molecules)),
                td(f"{r.n_complete} of {r.n_curves}"),
                *(td(fmt_value(v, q.decimals), cls="num")
                  for v in (r.median, r.minimum, r.maximum)),
            ]
        )  # fmt: skip
    parts.append(table(head, rows))
    for (set_name, rule), sub in d.set_members.groupby(["set", "rule"], sort=False):
        mine = (d.sets["set"] == set_name) & (d.sets["rule"] == rule)
        columns = list(dict.fromkeys(d.sets.loc[mine, "quantity"]))
        head = [[th(h) for h in ("molecule", "scan", "level", "conformer")]]
        head[0] += [th(QUANTITY[c].title, cls="num") for c in columns]
        body = [
            [td(r["molecule"]), td(r["scan"]), td(r["level"]), td(r.get("conformer") or "")]
            + [td(fmt_value(r.get(c), QUANTITY[c].decimals), cls="num") for c in columns]
            for _, r in sub.iterrows()
        ]
        summary = f"{set_name}, {rule}: {sub['molecule'].nunique()} molecules, {len(sub)} curves"
        parts.append(tag("details", join([tag("summary", summary), table(head, body)])))
    return join(parts)


#: The page's sections in order: (anchor, heading, contents-line text, builder).  A builder
#: takes ``(data, figures, files)`` and returns the section's markup, or an :class:`Omitted`
#: reason when it has nothing to show: the section is then left out of the page and its
#: contents line says why.
def _refinement_section(d):
    from pesflow.report.refinement import refinement_section

    if d.refinement.empty:
        return Omitted("no scan refines its grid")
    return refinement_section(d)


def _counterpoise_section(d, figures, files):
    from pesflow.report.interaction import counterpoise_section

    if not any(k.startswith("interaction:") for k in figures):
        return Omitted("the campaign has no counterpoise scan")
    return counterpoise_section(d, figures, files)


SECTIONS = (
    (
        "overview",
        "Which level is closest to the reference, by how much, at what cost",
        "Which level is closest",
        _overview_section,
    ),
    ("quantities", "Derived quantities", "Derived quantities", _quantities_section),
    ("sets", "Molecule sets and rules", "Sets and rules", _sets_section),
    (
        "convergence",
        "Basis-set convergence",
        "Basis-set convergence",
        lambda d, figures, files: _convergence_section(d, figures),
    ),
    (
        "curves",
        "Curves and surfaces",
        "Curves and surfaces",
        lambda d, figures, files: _curve_sections(d, figures),
    ),
    (
        "counterpoise",
        "Counterpoise-corrected interaction curves",
        "Interaction curves",
        lambda d, figures, files: _counterpoise_section(d, figures, files),
    ),
    ("stationary", "Every stationary point", "Stationary points", _stationary_section),
    (
        "refinement",
        "Adaptive refinement",
        "Adaptive refinement",
        lambda d, figures, files: _refinement_section(d),
    ),
    ("notes", "Notes: warnings of the analysis", "Notes", _notes_section),
    ("cost", "Compute cost per level", "Compute cost", lambda d, f, x: _cost_section(d)),
    ("missing", "Missing points", "Missing points", _missing_points),
    ("files", "Files", "Files", _files_section),
)


def _header(d: ReportData, title: str) -> Markup:
    ref = d.reference_level
    generated = datetime.now(UTC).strftime("%Y-%m-%d %H:%M UTC")
    return tag(
        "header",
        tag(
            "div",
            join(
                [
                    tag("h1", title),
                    tag("p", join(["Spec: ", tag("code", str(d.spec_path))])),
                    tag("p", f"Reference level: {ref}" if ref else "No reference level set."),
                    tag("p", f"Generated {generated} from the point store; nothing was computed."),
                ]
            ),
            class_="wrap",
        ),
    )


def _page(title: str, body: Markup) -> str:
    head = join(
        [
            Markup('<meta charset="utf-8">'),
            Markup('<meta name="viewport" content="width=device-width, initial-scale=1">'),
            Markup(
                '<meta http-equiv="Content-Security-Policy" content="default-src \'none\'; '
                "img-src data:; style-src 'unsafe-inline'\">"
            ),
            tag("title", title),
            tag("style", Markup(CSS)),
        ]
    )
    return (
        "<!DOCTYPE html>\n"
        + tag("html", join([tag("head", head), tag("body", body)]), lang="en")
        + "\n"
    )


def render(d: ReportData, figures: dict, files: dict) -> str:
    """The HTML page (a str).  ``figures``: ``{key: object with .png and .alt}``;
    ``files``: ``{label: file name}`` of the report's other outputs."""
    title = f"pesflow report: {d.campaign}"
    lines, sections = [], []
    for anchor, heading, line, build in SECTIONS:
        content = build(d, figures, files)
        if isinstance(content, Omitted):
            lines.append(tag("li", f"{line}: left out, {content}", class_="omitted"))
            continue
        lines.append(tag("li", tag("a", line, href=f"#{anchor}")))
        sections.append(tag("section", join([tag("h2", heading, id=anchor), content])))
    contents = tag("nav", join([tag("strong", "Contents"), tag("ol", join(lines))]))
    body = join(
        [
            _header(d, title),
            tag("main", join([contents, *sections]), class_="wrap"),
            tag(
                "footer",
                tag("div", "pesflow report; tables as CSV next to this page.", class_="wrap"),
            ),
        ]
    )
    return _page(title, body)
