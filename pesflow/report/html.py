"""The self-contained HTML page of a report: tables, embedded PNG figures, our own CSS.

The page loads nothing: figures are ``data:`` URIs, the style sheet is inline, and there is no
script at all.  A Content-Security-Policy meta tag forbids scripts and any network access, as
a second line of defence.  Every text that comes from the spec or the store (names, sources,
flags, error messages) passes through :func:`esc` (:func:`html.escape`); only our own fixed
markup is marked trusted with :class:`Markup`.
"""

from __future__ import annotations

import base64
import html
from datetime import UTC, datetime

import numpy as np

from pesflow.report.stats import closest_levels
from pesflow.report.tables import (
    QUANTITY,
    ReportData,
    fmt_dev,
    fmt_seconds,
    fmt_value,
    scan_label,
)

#: Longest lists of points written out in the page (the CSV files always list all of them).
_MAX_LISTED_PER_CURVE = 40
_MAX_LISTED = 500


#: The analysis sees only energies: a point not computed yet is a missing energy to it, and its
#: warnings call such points "failed".  Said once on a page that has pending points.
_PENDING_NOTE = (
    'While points are pending, the analysis counts them among the "failed" points in its '
    "warnings; the true counts are under Missing points."
)


class Markup(str):
    """Text that is already HTML (our own markup only; never built from unescaped user text)."""


def esc(value) -> Markup:
    """``value`` as HTML text: escaped unless it is already :class:`Markup`."""
    if isinstance(value, Markup):
        return value
    return Markup(html.escape(str(value), quote=True))


def join(parts, sep="") -> Markup:
    return Markup(esc(sep).join(esc(p) for p in parts))


def tag(name: str, content="", **attrs) -> Markup:
    """``<name attrs>content</name>``; attribute names use ``_`` for ``-``, values escaped."""
    rendered = "".join(
        f' {k.rstrip("_").replace("_", "-")}="{esc(v)}"' for k, v in attrs.items() if v is not None
    )
    return Markup(f"<{name}{rendered}>{esc(content)}</{name}>")


CSS = """
:root { --ink:#1c2330; --muted:#5a6472; --line:#dde2e8; --head:#eef1f5; --accent:#0072B2;
  --warn:#B24A00; --ok:#00785A; --bg:#f5f6f8; }
* { box-sizing: border-box; }
body { margin:0; color:var(--ink); background:var(--bg);
  font: 15px/1.5 system-ui, -apple-system, "Segoe UI", Roboto, "Helvetica Neue", Arial,
  sans-serif; }
.wrap { max-width: 1160px; margin: 0 auto; padding: 0 22px; }
header { background: var(--ink); color: #fff; padding: 26px 0 20px; }
header h1 { margin: 0 0 4px; font-size: 27px; letter-spacing: .2px; }
header p { margin: 2px 0; color: #c9d1dc; font-size: 14px; }
header code { color: #fff; }
section { background:#fff; border:1px solid var(--line); border-radius:8px;
  padding: 16px 24px 18px; margin: 18px 0; }
h2 { font-size: 20px; margin: 4px 0 10px; padding-bottom: 5px;
  border-bottom: 2px solid var(--accent); }
h3 { font-size: 16.5px; margin: 22px 0 6px; }
h4 { font-size: 14.5px; margin: 14px 0 4px; color: var(--muted); }
p.lead { margin-top: 0; }
.muted, .explain { color: var(--muted); font-size: 13.5px; }
.scroll { overflow-x: auto; }
table { border-collapse: collapse; margin: 6px 0 10px; font-size: 13.5px; }
th, td { padding: 5px 10px; border-bottom: 1px solid var(--line); text-align: left;
  vertical-align: top; }
thead th { background: var(--head); font-weight: 600; border-bottom: 2px solid #b8c0cb; }
th.sub { font-weight: 500; color: var(--muted); font-size: 12.5px; }
td.num, th.num { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
td.ref, th.ref { background: #f2f6fb; }
.nowrap { white-space: nowrap; }
tbody tr:hover td { background: #fafbfc; }
.dev { display: block; color: var(--muted); font-size: 12px; }
.tag { display: inline-block; font-size: 11px; padding: 0 6px; border-radius: 9px;
  background: #e3ebf5; color: #244a72; margin-left: 4px; }
a.flag { color: var(--warn); font-weight: 700; font-size: 11px; text-decoration: none;
  margin-left: 2px; }
.missing { color: var(--warn); font-style: italic; }
.best { font-weight: 700; }
.banner { border-left: 6px solid; padding: 10px 14px; border-radius: 4px; margin: 10px 0; }
.banner.ok { border-color: var(--ok); background: #e9f5f0; }
.banner.partial { border-color: #E69F00; background: #fdf4e3; }
ol.notes, ul.flags { font-size: 13px; margin: 4px 0 10px; padding-left: 22px; }
ol.notes li, ul.flags li { margin: 2px 0; }
nav ol { columns: 2; margin: 4px 0; padding-left: 20px; }
figure { margin: 12px 0; }
figure img { max-width: 100%; height: auto; border: 1px solid var(--line); border-radius: 4px; }
figcaption { color: var(--muted); font-size: 13px; margin-top: 4px; }
ul.verdict { padding-left: 20px; }
ul.verdict li { margin: 4px 0; }
details { margin: 6px 0; }
summary { cursor: pointer; color: var(--accent); }
footer { color: var(--muted); font-size: 12.5px; padding: 8px 0 30px; }
@media print {
  body { background: #fff; font-size: 12px; }
  header { background: #fff; color: #000; border-bottom: 2px solid #000; }
  header p { color: #333; }
  header code { color: #000; }
  section { border: none; padding: 0; break-inside: avoid-page; }
  figure { break-inside: avoid; }
}
"""


def _img(png: bytes, alt: str) -> Markup:
    data = base64.b64encode(png).decode("ascii")
    return Markup(f'<img alt="{esc(alt)}" src="data:image/png;base64,{data}">')


def _figure(fig, caption) -> Markup:
    if fig is None:
        return Markup("")
    return tag("figure", join([_img(fig.png, fig.alt), tag("figcaption", caption)]))


def _table(head, rows, cls=None) -> Markup:
    """``head``: list of header rows (each a list of Markup ``<th>``); ``rows``: list of
    lists of Markup ``<td>``."""
    thead = tag("thead", join(tag("tr", join(r)) for r in head))
    tbody = tag("tbody", join(tag("tr", join(r)) for r in rows))
    return tag("div", tag("table", join([thead, tbody]), class_=cls), class_="scroll")


def _th(text, cls=None, **attrs) -> Markup:
    return tag("th", text, class_=cls, **attrs)


def _td(text, cls=None, **attrs) -> Markup:
    return tag("td", text, class_=cls, **attrs)


def _r(x) -> str:
    """A float for a data attribute: full precision, empty for NaN."""
    try:
        v = float(x)
    except (TypeError, ValueError):
        return ""
    return repr(v) if np.isfinite(v) else ""


def _level_head(level, reference_level) -> Markup:
    if level == reference_level:
        return tag("span", join([level, tag("span", "reference", class_="tag")]), class_="nowrap")
    return esc(level)


class _Notes:
    """Numbered footnotes of one table: one number per distinct warning text."""

    def __init__(self, prefix):
        self.prefix = prefix
        self.items: dict[str, list[str]] = {}

    def mark(self, flags, where: str) -> Markup:
        """Footnote marks for ``flags`` (the :class:`~pesflow.analysis.flags.Flag` objects that
        concern one cell), each numbered once per distinct message."""
        out = []
        for flag in dict.fromkeys(str(f) for f in flags):
            self.items.setdefault(flag, [])
            if where not in self.items[flag]:
                self.items[flag].append(where)
            n = list(self.items).index(flag) + 1
            out.append(tag("a", f"[{n}]", class_="flag", href=f"#{self.prefix}-{n}", title=flag))
        return join(out)

    def render(self) -> Markup:
        if not self.items:
            return Markup("")
        lis = []
        for n, (flag, where) in enumerate(self.items.items(), start=1):
            lis.append(
                tag(
                    "li",
                    join([flag, tag("span", f" ({'; '.join(where)})", class_="muted")]),
                    id=f"{self.prefix}-{n}",
                )
            )
        return tag("ol", join(lis), class_="notes")


def _cell_text(row, q) -> Markup:
    state = row["state"]
    if state == "value":
        return esc(fmt_value(row["value"], q.decimals))
    if state == "not determined" and row["n_pending"]:
        return tag("span", f"not determined ({row['n_pending']} pending)", class_="missing")
    return tag("span", state, class_="missing")


def _quantity_table(d: ReportData, q, notes: _Notes) -> Markup:
    sub = d.values[d.values["quantity"] == q.column]
    head = [
        [_th("molecule"), _th("scan")]
        + [
            _th(
                _level_head(lvl, d.reference_level),
                cls="num ref" if lvl == d.reference_level else "num",
            )
            for lvl in d.levels
        ]
    ]
    rows = []
    for (molecule, scan), curve in sub.groupby(["molecule", "scan"], sort=False):
        by_level = curve.set_index("level")
        cells = [_td(molecule), _td(scan_label(d.curves, molecule, scan, q.column))]
        for lvl in d.levels:
            cls = "num ref" if lvl == d.reference_level else "num"
            if lvl not in by_level.index:
                cells.append(_td(tag("span", "not planned", class_="muted"), cls=cls))
                continue
            row = by_level.loc[lvl]
            content = [_cell_text(row, q), notes.mark(row["flags"], f"{lvl}, {molecule} {scan}")]
            dev = fmt_dev(row["dev_reference_level"], q.decimals)
            if lvl != d.reference_level and dev:
                content.append(tag("span", f"Δ {dev}", class_="dev"))
            cells.append(
                _td(
                    join(content),
                    cls=cls,
                    data_quantity=q.column,
                    data_molecule=molecule,
                    data_scan=scan,
                    data_level=lvl,
                    data_value=_r(row["value"]),
                    data_dev=_r(row["dev_reference_level"]),
                )
            )
        rows.append(cells)
    return _table(head, rows)


def _reference_values_table(d: ReportData, q) -> Markup:
    sub = d.reference_values[d.reference_values["quantity"] == q.column]
    if sub.empty:
        return Markup("")
    head = [
        [_th("molecule"), _th("scan"), _th("reference value", cls="num"), _th("source")]
        + [_th(_level_head(lvl, d.reference_level), cls="num") for lvl in d.levels]
    ]
    rows = []
    keys = ["molecule", "scan", "source", "reference_value"]
    for (molecule, scan, source, value), ref in sub.groupby(keys, sort=False):
        by_level = ref.set_index("level")
        cells = [
            _td(molecule),
            _td(scan),
            _td(fmt_value(value, q.decimals), cls="num"),
            _td(source),
        ]
        for lvl in d.levels:
            dev = by_level.loc[lvl, "deviation"] if lvl in by_level.index else np.nan
            text = fmt_dev(dev, q.decimals)
            cells.append(
                _td(
                    text or tag("span", "no value", class_="missing"),
                    cls="num",
                    data_quantity=q.column,
                    data_molecule=molecule,
                    data_scan=scan,
                    data_level=lvl,
                    data_ref_dev=_r(dev),
                )
            )
        rows.append(cells)
    return join(
        [tag("h4", "Deviation from the reference values (level minus value)"), _table(head, rows)]
    )


def _stats_table(d: ReportData, q) -> Markup:
    stats = d.statistics[d.statistics["quantity"] == q.column]
    if stats.empty:
        return Markup("")
    groups = list(dict.fromkeys(stats["against"]))
    head = [
        [_th("level", rowspan=2)]
        + [
            _th(
                f"against {g}"
                if g == "reference values"
                else join(["against ", g, " (reference level)"]),
                colspan=4,
                cls="num",
            )
            for g in groups
        ],
        [_th(t, cls="num sub") for _ in groups for t in ("n", "MSD", "MAD", "max |dev|")],
    ]
    rows = []
    for lvl in d.levels:
        cells = [_td(lvl)]
        have = False
        for g in groups:
            r = stats[(stats["against"] == g) & (stats["level"] == lvl)]
            if r.empty:
                cells += [_td("", cls="num")] * 4
                continue
            have = True
            r = r.iloc[0]
            at = r["max_absolute_at"]
            cells += [
                _td(str(int(r["n"])), cls="num"),
                _td(fmt_dev(r["mean_signed"], q.decimals), cls="num"),
                _td(
                    fmt_value(r["mean_absolute"], q.decimals),
                    cls="num",
                    data_quantity=q.column,
                    data_level=lvl,
                    data_against=g,
                    data_mad=_r(r["mean_absolute"]),
                ),
                _td(
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
            _table(head, rows),
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


def _verdicts(d: ReportData) -> Markup:
    best = closest_levels(d.statistics)
    if best.empty:
        return tag(
            "p",
            "Nothing to rank yet: set compare.reference_level (or compare.reference_values) "
            "in the spec, and compute curves at two or more levels. The values and the cost "
            "of every level are below."
            if not d.reference_level and d.reference_values.empty
            else "Nothing to rank yet: no level has a value to compare with the reference "
            "(see Missing points).",
            class_="muted",
        )
    cost = d.cost.set_index("level")
    head = [
        [
            _th("quantity"),
            _th("compared with"),
            _th("closest level"),
            _th("MAD", cls="num"),
            _th("n", cls="num"),
            _th("max |dev| (curve)", cls="num"),
            _th("core-s per point", cls="num"),
            _th("cost vs reference", cls="num"),
        ]
    ]
    rows, uneven = [], False
    for _, b in best.iterrows():
        q = QUANTITY[b["quantity"]]
        lvl = b["level"]
        per_point = cost.loc[lvl, "core_s_per_point"] if lvl in cost.index else np.nan
        ratio = cost.loc[lvl, "cost_vs_reference"] if lvl in cost.index else np.nan
        against = (
            "reference values" if b["against"] == "reference values" else f"{b['against']} (level)"
        )
        star = "" if b["same_n"] else " *"
        uneven = uneven or not b["same_n"]
        rows.append(
            [
                _td(join([Markup(q.html), f" ({q.unit})"]), cls="nowrap"),
                _td(against, cls="nowrap"),
                _td(tag("strong", lvl), cls="nowrap"),
                _td(
                    fmt_value(b["mean_absolute"], q.decimals),
                    cls="num",
                    data_quantity=q.column,
                    data_against=b["against"],
                    data_best=lvl,
                ),
                _td(f"{int(b['n'])}{star}", cls="num"),
                _td(
                    join(
                        [
                            fmt_value(b["max_absolute"], q.decimals),
                            tag("span", b["max_absolute_at"], class_="dev"),
                        ]
                    ),
                    cls="num",
                ),
                _td(fmt_seconds(per_point), cls="num"),
                _td(f"{ratio:.2g}x" if np.isfinite(ratio) else "", cls="num"),
            ]
        )
    parts = [
        _table(head, rows),
        tag(
            "p",
            "Closest: the smallest mean absolute deviation (MAD) over the molecule set; n "
            "curves entered. Cost: mean core-seconds of one point at that level"
            + (", and its ratio to the reference level's." if d.reference_level else "."),
            class_="explain",
        ),
    ]
    if uneven:
        parts.append(
            tag(
                "p",
                "* the ranked levels were compared over different numbers of "
                "curves (some values are missing).",
                class_="explain",
            )
        )
    return join(parts)


def _overview_table(d: ReportData) -> Markup:
    """Quantities down, levels across: MAD from the reference level (n), then the cost."""
    against = d.reference_level
    stats = d.statistics[d.statistics["against"] == against]
    head = [
        [_th("")]
        + [
            _th(_level_head(lvl, against), cls="num ref" if lvl == against else "num")
            for lvl in d.levels
        ]
    ]
    rows = []
    for column in dict.fromkeys(stats["quantity"]):
        q = QUANTITY[column]
        s = stats[stats["quantity"] == column]
        ranked = s[s["n"] > 0]
        best = ranked.loc[ranked["mean_absolute"].idxmin(), "level"] if len(ranked) else None
        cells = [_td(join([Markup(q.html), f" MAD ({q.unit})"]), cls="nowrap")]
        for lvl in d.levels:
            r = s[s["level"] == lvl]
            if lvl == against:
                cells.append(_td("reference", cls="num ref muted"))
            elif r.empty or int(r["n"].iloc[0]) == 0:
                cells.append(_td(tag("span", "no value", class_="missing"), cls="num"))
            else:
                text = (
                    f"{fmt_value(r['mean_absolute'].iloc[0], q.decimals)} (n={int(r['n'].iloc[0])})"
                )
                cells.append(_td(text, cls="num best" if lvl == best else "num"))
        rows.append(cells)
    cost = d.cost.set_index("level")
    extra = [
        ("core-s per point", lambda c: fmt_seconds(c["core_s_per_point"])),
        (
            "cost vs reference",
            lambda c: (
                f"{c['cost_vs_reference']:.2g}x" if np.isfinite(c["cost_vs_reference"]) else ""
            ),
        ),
    ]
    if not d.complete:
        extra += [
            ("points failed", lambda c: str(int(c["points_failed"]))),
            ("points pending", lambda c: str(int(c["points_pending"]))),
        ]
    for label, get in extra:
        rows.append(
            [_td(label, cls="nowrap")]
            + [
                _td(get(cost.loc[lvl]), cls="num ref" if lvl == against else "num")
                for lvl in d.levels
            ]
        )
    return join(
        [
            _table(head, rows),
            tag(
                "p",
                "Bold: the smallest mean absolute deviation of each quantity.",
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
        parts = [tag("h3", f"{molecule}: {scan}", id=_anchor("curve", molecule, scan))]
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
                parts.append(_figure(figures[key], caption))
        flags = d.curve_flags[
            (d.curve_flags["molecule"] == molecule) & (d.curve_flags["scan"] == scan)
        ]
        if len(flags):
            grouped: dict[str, list[str]] = {}
            for _, r in flags.iterrows():
                grouped.setdefault(r["flag"], []).append(r["level"])
            parts.append(tag("h4", "Warnings of the analysis"))
            if len(d.pending[(d.pending["molecule"] == molecule) & (d.pending["scan"] == scan)]):
                parts.append(tag("p", _PENDING_NOTE, class_="explain"))
            parts.append(
                tag(
                    "ul",
                    join(
                        tag("li", join([tag("strong", ", ".join(lvls)), ": ", flag]))
                        for flag, lvls in grouped.items()
                    ),
                    class_="flags",
                )
            )
        failed = d.failed[(d.failed["molecule"] == molecule) & (d.failed["scan"] == scan)]
        if len(failed):
            parts.append(tag("h4", f"Failed points ({len(failed)})"))
            parts.append(
                _table(
                    [[_th("level"), _th("point"), _th("error")]],
                    [
                        [_td(r["level"]), _td(r["where"]), _td(r["error"])]
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
        out.append(join(parts))
    return join(out)


def _convergence_section(d: ReportData, figures) -> Markup:
    if d.convergence.empty:
        return tag(
            "p",
            "No method was computed with two or more basis sets, so there is no "
            "basis-set convergence to show.",
            class_="muted",
        )
    parts = []
    for column in dict.fromkeys(d.convergence["quantity"]):
        q = QUANTITY[column]
        parts.append(tag("h3", join([Markup(q.html), f" ({q.unit})"])))
        fig = figures.get(f"convergence:{column}")
        parts.append(
            _figure(
                fig,
                f"{q.name} against the number of basis functions of each "
                "molecule, one line per method; dotted: the reference level; "
                "dashed: the user's reference value.",
            )
        )
        sub = d.convergence[d.convergence["quantity"] == column]
        parts.append(
            _table(
                [
                    [
                        _th("molecule"),
                        _th("scan"),
                        _th("method"),
                        _th("basis"),
                        _th("basis functions", cls="num"),
                        _th("cardinal number", cls="num"),
                        _th(f"value ({q.unit})", cls="num"),
                    ]
                ],
                [
                    [
                        _td(r["molecule"]),
                        _td(r["scan"]),
                        _td(r["method"]),
                        _td(r["basis"]),
                        _td("" if not np.isfinite(r["nbf"]) else str(int(r["nbf"])), cls="num"),
                        _td(
                            ""
                            if r["cardinal"] is None or not np.isfinite(r["cardinal"])
                            else str(int(r["cardinal"])),
                            cls="num",
                        ),
                        _td(fmt_value(r["value"], q.decimals), cls="num"),
                    ]
                    for _, r in sub.iterrows()
                ],
            )
        )
    return join(parts)


def _cost_section(d: ReportData) -> Markup:
    head = [
        [
            _th("level"),
            _th("method"),
            _th("basis"),
            _th("core-s", cls="num"),
            _th("core-s per point", cls="num"),
            _th("vs reference", cls="num"),
            _th("done", cls="num"),
            _th("failed", cls="num"),
            _th("pending", cls="num"),
            _th("planned", cls="num"),
        ]
    ]
    rows = []
    for _, c in d.cost.iterrows():
        ratio = c["cost_vs_reference"]
        rows.append(
            [
                _td(_level_head(c["level"], d.reference_level)),
                _td(c["method"]),
                _td(c["basis"]),
                _td(
                    fmt_seconds(c["core_s"]),
                    cls="num",
                    data_level=c["level"],
                    data_core_s=_r(c["core_s"]),
                ),
                _td(fmt_seconds(c["core_s_per_point"]), cls="num"),
                _td(f"{ratio:.2g}x" if np.isfinite(ratio) else "", cls="num"),
                _td(str(int(c["points_done"])), cls="num"),
                _td(str(int(c["points_failed"])), cls="num"),
                _td(str(int(c["points_pending"])), cls="num"),
                _td(str(int(c["points_total"])), cls="num"),
            ]
        )
    return join(
        [
            _table(head, rows),
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
    head = [[_th("molecule")] + [_th(lvl, cls="num") for lvl in d.levels]]
    rows = []
    status = d.status.set_index(["molecule", "level"])
    for molecule in dict.fromkeys(d.status["molecule"]):
        cells = [_td(molecule)]
        for lvl in d.levels:
            if (molecule, lvl) not in status.index:
                cells.append(_td(tag("span", "not planned", class_="muted"), cls="num"))
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
                _td(
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
        _table(head, rows),
    ]
    if len(d.failed):
        parts.append(tag("h3", f"Failed points ({len(d.failed)})"))
        parts.append(
            _table(
                [[_th("molecule"), _th("scan"), _th("level"), _th("point"), _th("error")]],
                [
                    [
                        _td(r["molecule"]),
                        _td(r["scan"]),
                        _td(r["level"]),
                        _td(r["where"]),
                        _td(r["error"]),
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


def render(d: ReportData, figures: dict, files: dict) -> str:
    """The HTML page (a str).  ``figures``: ``{key: object with .png and .alt}``;
    ``files``: ``{label: file name}`` of the report's other outputs."""
    title = f"pesflow report: {d.campaign}"
    toc = [
        ("overview", "Which level is closest"),
        ("quantities", "Derived quantities"),
        ("convergence", "Basis-set convergence"),
        ("curves", "Curves and surfaces"),
        ("cost", "Compute cost"),
        ("missing", "Missing points"),
        ("files", "Files"),
    ]
    ref = d.reference_level
    quantity_parts = []
    for q in d.quantities:
        notes = _Notes(_anchor("note", q.column))
        table = _quantity_table(d, q, notes)
        quantity_parts.append(
            join(
                [
                    tag("h3", join([Markup(q.html), f" ({q.unit})"]), id=_anchor("q", q.column)),
                    table,
                    notes.render(),
                    _reference_values_table(d, q),
                    _stats_table(d, q),
                ]
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
    header = tag(
        "header",
        tag(
            "div",
            join(
                [
                    tag("h1", title),
                    tag("p", join(["Spec: ", tag("code", str(d.spec_path))])),
                    tag("p", f"Reference level: {ref}" if ref else "No reference level set."),
                    tag(
                        "p",
                        "Generated "
                        + datetime.now(UTC).strftime("%Y-%m-%d %H:%M UTC")
                        + " from the point store; nothing was computed.",
                    ),
                ]
            ),
            class_="wrap",
        ),
    )
    overview = [
        tag(
            "h2",
            "Which level is closest to the reference, by how much, at what cost",
            id="overview",
        ),
        _banner(d),
        _verdicts(d),
    ]
    if ref:
        overview += [tag("h3", f"Mean absolute deviation from {ref}, and cost"), _overview_table(d)]
    overview.append(
        _figure(
            figures.get("accuracy"),
            "Mean absolute deviation from the "
            "reference level against the mean cost of one point; the dotted "
            "line marks the reference level's cost.",
        )
    )
    sections = [
        tag(
            "nav",
            join(
                [
                    tag("strong", "Contents"),
                    tag("ol", join(tag("li", tag("a", t, href=f"#{a}")) for a, t in toc)),
                ]
            ),
        ),
        tag("section", join(overview)),
        tag(
            "section",
            join(
                [
                    tag("h2", "Derived quantities", id="quantities"),
                    tag(
                        "p",
                        join(
                            [
                                explain_dev,
                                "Bracketed numbers link to the "
                                "warnings of the analysis that concern the "
                                "number. ",
                                _PENDING_NOTE if not d.complete else "",
                            ]
                        ),
                        class_="explain",
                    ),
                    join(quantity_parts) or tag("p", "No quantities yet.", class_="muted"),
                ]
            ),
        ),
        tag(
            "section",
            join(
                [
                    tag("h2", "Basis-set convergence", id="convergence"),
                    _convergence_section(d, figures),
                ]
            ),
        ),
        tag(
            "section",
            join([tag("h2", "Curves and surfaces", id="curves"), _curve_sections(d, figures)]),
        ),
        tag("section", join([tag("h2", "Compute cost per level", id="cost"), _cost_section(d)])),
        tag(
            "section",
            join([tag("h2", "Missing points", id="missing"), _banner(d), _missing_section(d)]),
        ),
        tag(
            "section",
            join(
                [
                    tag("h2", "Files", id="files"),
                    tag(
                        "ul",
                        join(
                            tag("li", join([tag("code", name), f": {label}"]))
                            for label, name in files.items()
                        ),
                    ),
                ]
            ),
        ),
    ]
    body = join(
        [
            header,
            tag("main", join(sections), class_="wrap"),
            tag(
                "footer",
                tag("div", "pesflow report; tables as CSV next to this page.", class_="wrap"),
            ),
        ]
    )
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
