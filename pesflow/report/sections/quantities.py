"""The report sections that compare levels by their numbers: the overview (which level is
closest, at what cost), the derived quantities (values, deviations from the reference level
and the reference values, error statistics) and the notes (every warning once)."""

from __future__ import annotations

import numpy as np

from pesflow.report.formatting import (
    fmt_dev,
    fmt_ratio,
    fmt_seconds,
    fmt_value,
    fmt_value_u,
    scan_label,
)
from pesflow.report.markup import Markup, data_number, esc, figure, join, table, tag, td, th
from pesflow.report.sections.common import Omitted, _anchor, _banner, _fold, _level_head, note_marks
from pesflow.report.stats import closest_levels
from pesflow.report.tables import QUANTITY, ReportData

#: The analysis sees only energies: a point not computed yet is a missing energy to it, and its
#: warnings call such points "failed".  Said once on a page that has pending points.
_PENDING_NOTE = (
    'While points are pending, the analysis counts them among the "failed" points in its '
    "warnings; the true counts are under Missing points."
)


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


def _mad_cell(mad, q, **data) -> Markup:
    """A mean absolute deviation of quantity ``q`` as a table cell, with its ``data-*``
    attributes (the quantity's column, and ``data``)."""
    return td(fmt_value(mad, q.decimals), cls="num", data_quantity=q.column, **data)


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
                _mad_cell(
                    r["mean_absolute"],
                    q,
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
        [th(h) for h in ("quantity", "closest level")]
        + [
            th(h, cls="num")
            for h in ("MAD", "curves", "max |dev| (curve)", "core-s per point (vs reference)")
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
                    _mad_cell(
                        b["mean_absolute"],
                        q,
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
