"""The Markdown summary of a report: the same verdicts and tables as the HTML page, figures
referenced as PNG files next to it.

User text stays plain text (``Huber & Herzberg``, ``6-31g*``), readable in the file itself, and
is made inert only where Markdown would read it as markup, with CommonMark backslash escapes:
``|`` (it would split a table cell), ``<`` that would open an HTML tag, ``&`` that would form
an entity reference, and a backslash before punctuation; line breaks become spaces.  (The HTML
page escapes the same text with :func:`html.escape`.)
"""

from __future__ import annotations

import re

import numpy as np

from pesflow.report.formatting import fmt_dev, fmt_seconds, fmt_value, fmt_value_u, scan_label
from pesflow.report.refinement import refinement_markdown
from pesflow.report.section_tables import STATIONARY_EXPLAIN, stationary_tables
from pesflow.report.stats import closest_levels
from pesflow.report.tables import QUANTITY, ReportData

#: Characters Markdown would read as markup in user text: a backslash before ASCII punctuation,
#: ``|``, ``<`` opening a tag (``<b``, ``</``, ``<!``, ``<?``), ``&`` opening an entity.
_MARKUP = re.compile(r"\\(?=[!-/:-@\[-`{-~])|\||<(?=[A-Za-z/!?])|&(?=#?\w+;)")


def md(text) -> str:
    """User text as plain text inside Markdown (and inside a table cell).

    >>> md("Huber & Herzberg (1979)")
    'Huber & Herzberg (1979)'
    >>> md("<b>x</b> | &amp;")
    '\\\\<b>x\\\\</b> \\\\| \\\\&amp;'
    """
    text = _MARKUP.sub(lambda m: "\\" + m.group(0), str(text))
    return text.replace("\r", " ").replace("\n", " ")


def _table(head, rows) -> list[str]:
    out = ["| " + " | ".join(head) + " |", "|" + "|".join("---" for _ in head) + "|"]
    out += ["| " + " | ".join(r) + " |" for r in rows]
    return out + [""]


def _cell(row, q) -> str:
    if row["state"] == "value":
        text = fmt_value_u(row["value"], row.get("uncertainty"), q.decimals)
    elif row["state"] == "not determined" and row["n_pending"]:
        text = f"*not determined ({row['n_pending']} pending)*"
    else:
        text = f"*{row['state']}*"
    return text


def _quantity(d: ReportData, q) -> list[str]:
    lines = [f"### {q.name} ({q.unit})", ""]
    sub = d.values[d.values["quantity"] == q.column]
    rows = []
    for (molecule, scan), curve in sub.groupby(["molecule", "scan"], sort=False):
        by_level = curve.set_index("level")
        cells = [md(molecule), md(scan_label(d.curves, molecule, scan, q.column))]
        for lvl in d.levels:
            if lvl not in by_level.index:
                cells.append("not planned")
                continue
            row = by_level.loc[lvl]
            text = _cell(row, q)
            for flag in dict.fromkeys(str(f) for f in row["flags"]):
                text += f" [{d.notes[flag]['n']}]"
            dev = fmt_dev(row["dev_reference_level"], q.decimals)
            if lvl != d.reference_level and dev:
                text += f" (Δ {dev})"
            cells.append(text)
        rows.append(cells)
    head = ["molecule", "scan"] + [
        md(lvl) + (" (reference)" if lvl == d.reference_level else "") for lvl in d.levels
    ]
    lines += _table(head, rows)
    refs = d.reference_values[d.reference_values["quantity"] == q.column]
    if len(refs):
        lines += ["Deviation from the reference values (level minus value):", ""]
        rows = []
        for (molecule, scan, source, value), ref in refs.groupby(
            ["molecule", "scan", "source", "reference_value"], sort=False
        ):
            by_level = ref.set_index("level")
            rows.append(
                [md(molecule), md(scan), fmt_value(value, q.decimals), md(source)]
                + [
                    fmt_dev(by_level.loc[lvl, "deviation"], q.decimals) or "*no value*"
                    if lvl in by_level.index
                    else ""
                    for lvl in d.levels
                ]
            )
        lines += _table(
            ["molecule", "scan", "reference value", "source"] + [md(lvl) for lvl in d.levels], rows
        )
    stats = d.statistics[(d.statistics["quantity"] == q.column) & (d.statistics["n"] > 0)]
    if len(stats):
        lines += [
            f"Error statistics ({md(q.unit)}; MSD mean signed, MAD mean absolute deviation):",
            "",
        ]
        lines += _table(
            ["level", "against", "n", "MSD", "MAD", "max abs", "max at"],
            [
                [
                    md(r["level"]),
                    md(r["against"]),
                    str(int(r["n"])),
                    fmt_dev(r["mean_signed"], q.decimals),
                    fmt_value(r["mean_absolute"], q.decimals),
                    fmt_value(r["max_absolute"], q.decimals),
                    md(r["max_absolute_at"]),
                ]
                for _, r in stats.iterrows()
            ],
        )
    return lines


def _stationary(d: ReportData) -> list[str]:
    lines = ["## Every stationary point", ""]
    tables = stationary_tables(d)
    if not tables:
        return lines + ["*No stationary points (no curve analysed yet).*", ""]
    lines += [STATIONARY_EXPLAIN, ""]
    for molecule, scan, header, rows in tables:
        lines += [f"### {md(molecule)}: {md(scan)}", ""]
        lines += _table([md(h) for h in header], [[md(c) for c in r] for r in rows])
    return lines


def render(d: ReportData, figure_files: dict[str, str], files: dict[str, str]) -> str:
    """The Markdown summary.  ``figure_files``: ``{figure key: relative PNG path}``."""
    t = d.totals
    total = sum(t.values())
    lines = [
        f"# pesflow report: {md(d.campaign)}",
        "",
        f"Spec: `{md(d.spec_path)}`. Reference level: "
        f"{md(d.reference_level) if d.reference_level else 'none set'}.",
        "",
    ]
    if d.complete:
        lines += [f"**Complete**: all {total} points computed.", ""]
    else:
        lines += [
            f"**Incomplete campaign**: {t.get('done', 0)} of {total} points done, "
            f"{t.get('failed', 0)} failed, {t.get('pending', 0)} pending. Numbers use "
            "only the points that are done; see *Missing points*. While points are pending, "
            'the analysis counts them among the "failed" points in its warnings.',
            "",
        ]
    lines += ["## Which level is closest to the reference", ""]
    best = closest_levels(d.ranking)
    cost = d.cost.set_index("level")
    if best.empty:
        lines += ["No deviations to rank yet.", ""]
    for _, b in best.iterrows():
        q = QUANTITY[b["quantity"]]
        per_point = cost.loc[b["level"], "core_s_per_point"] if b["level"] in cost.index else np.nan
        lines.append(
            f"- {q.name} ({md(q.unit)}), closest to {md(b['against'])}: **{md(b['level'])}**, "
            f"MAD {fmt_value(b['mean_absolute'], q.decimals)} over the {int(b['n'])} curve(s) "
            "every ranked level has, "
            f"max {fmt_value(b['max_absolute'], q.decimals)} ({md(b['max_absolute_at'])}); "
            f"{fmt_seconds(per_point)} core-s per point."
        )
    lines.append("")
    if "accuracy" in figure_files:
        lines += [f"![accuracy against cost]({figure_files['accuracy']})", ""]
    lines += ["## Derived quantities", ""]
    if d.reference_level:
        lines += [
            f"Δ: value minus the value at the reference level {md(d.reference_level)} "
            "(same molecule and scan); [n]: the warnings of the analysis under *Notes*.",
            "",
        ]
    for q in d.quantities:
        lines += _quantity(d, q)
    if not d.sets.empty:
        lines += ["## Molecule sets and rules", ""]
        lines += _table(
            ["set", "rule", "level", "quantity", "molecules", "complete", "median", "min", "max"],
            [
                [md(r.set), md(r.rule), md(r.level), md(QUANTITY[r.quantity].title),
                 str(r.n_molecules), f"{r.n_complete} of {r.n_curves}",
                 *(fmt_value(v, QUANTITY[r.quantity].decimals)
                   for v in (r.median, r.minimum, r.maximum))]
                for r in d.sets.itertuples(index=False)
            ],
        )  # fmt: skip
    if d.convergence.empty:
        lines += [
            "(Basis-set convergence: left out, each method was computed with one basis set.)",
            "",
        ]
    else:
        lines += ["## Basis-set convergence", ""]
    for column in dict.fromkeys(d.convergence["quantity"]):
        key = f"convergence:{column}"
        if key in figure_files:
            lines += [
                f"![{md(QUANTITY[column].name)} against basis-set size]({figure_files[key]})",
                "",
            ]
    lines += ["## Curves and surfaces", ""]
    for (molecule, scan), _ in d.curves.groupby(["molecule", "scan"], sort=False):
        lines += [f"### {md(molecule)}: {md(scan)}", ""]
        for kind in ("curve", "surface", "difference"):
            key = f"{kind}:{molecule}:{scan}"
            if key in figure_files:
                lines += [f"![{md(molecule)} {md(scan)} {kind}]({figure_files[key]})", ""]
        flags = d.curve_flags[
            (d.curve_flags["molecule"] == molecule) & (d.curve_flags["scan"] == scan)
        ]
        grouped: dict[str, list[str]] = {}
        for _, r in flags.iterrows():
            grouped.setdefault(str(r["flag"]), []).append(r["level"])
        for message, lvls in grouped.items():
            note = d.notes[message]
            lines.append(f"- [{note['n']}] {md(note['title'])}: {md(', '.join(lvls))}")
        if len(flags):
            lines.append("")
    lines += _stationary(d)
    lines += refinement_markdown(d, md, _table)
    if d.notes:
        lines += [
            "## Notes",
            "",
            "Every warning of the analysis once; [n] elsewhere points here.",
            "",
        ]
        for message, note in d.notes.items():
            lines.append(
                f"{note['n']}. **{md(note['title'])}** ({note['severity']}): {md(message)} "
                f"(applies to: {md('; '.join(note['where']))})"
            )
        lines.append("")
    lines += ["## Compute cost per level", ""]
    lines += _table(
        ["level", "core-s", "core-s per point", "vs reference", "done", "failed", "pending"],
        [
            [
                md(c["level"]),
                fmt_seconds(c["core_s"]),
                fmt_seconds(c["core_s_per_point"]),
                f"{c['cost_vs_reference']:.2g}x" if np.isfinite(c["cost_vs_reference"]) else "",
                str(int(c["points_done"])),
                str(int(c["points_failed"])),
                str(int(c["points_pending"])),
            ]
            for _, c in d.cost.iterrows()
        ],
    )
    lines += ["## Missing points", ""]
    lines += _table(
        ["molecule", "level", "done", "failed", "pending"],
        [
            [
                md(r["molecule"]),
                md(r["level"]),
                str(int(r["done"])),
                str(int(r["failed"])),
                str(int(r["pending"])),
            ]
            for _, r in d.status.iterrows()
        ],
    )
    for _, r in d.failed.iterrows():
        lines.append(
            f"- failed: {md(r['molecule'])}, {md(r['scan'])}, {md(r['level'])}, "
            f"{md(r['where'])}: {md(r['error'])}"
        )
    if len(d.failed):
        lines.append("")
    if len(d.pending):
        lines += [
            f"{len(d.pending)} pending points; `pending.csv` and the HTML page list each of them.",
            "",
        ]
    lines += ["## Files", ""]
    lines += [f"- `{md(name)}`: {md(label)}" for label, name in files.items()]
    return "\n".join(lines) + "\n"
