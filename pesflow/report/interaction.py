"""The report's counterpoise section: uncorrected and corrected interaction curves side by side.

For every counterpoise scan (README "Counterpoise"), one figure of two panels sharing the
energy axis: left the uncorrected interaction energy E_AB - E_A - E_B (fragments in their
own basis), right the counterpoise-corrected one (fragments in the complex's basis, Boys &
Bernardi, Mol. Phys. 19, 553 (1970)), one line per level, kcal/mol against the separation;
and a table of the summary's interaction quantities.
"""

from __future__ import annotations

import numpy as np

from pesflow.analysis.quantities import QUANTITY
from pesflow.coordinates.kinds import column_names
from pesflow.report.markup import Markup, figure, join, table, tag, td, th
from pesflow.units import HARTREE_TO_KCAL_MOL

#: Summary columns shown in the section's table.
SHOWN = (
    "r_min_cp_angstrom",
    "well_depth_cp_kcal_mol",
    "well_depth_cp_cm-1",
    "well_depth_kcal_mol",
    "bsse_at_min_kcal_mol",
)


def counterpoise_scans(campaign) -> list[str]:
    """Names of the campaign's counterpoise scans."""
    return [name for name, scan in campaign.scans.items() if scan.counterpoise]


def interaction_figures(campaign, points, data, styles) -> dict:
    """``{"interaction:<molecule>:<scan>": ReportFigure}`` for every counterpoise curve."""
    from pesflow.report.plots import ReportFigure

    out = {}
    if "interaction_cp_hartree" not in points.columns:
        return out
    for scan_name in counterpoise_scans(campaign):
        scan = campaign.scans[scan_name]
        column = column_names([c.kind for c in scan.coordinates])[0]
        for molecule in scan.molecules:
            sub = points[
                (points["scan"] == scan_name)
                & (points["molecule"] == molecule)
                & (points["role"] == "scan")
            ]
            lines = []
            for level in [lvl for lvl in data.levels if lvl in set(sub["level"])]:
                rows = sub[sub["level"] == level].sort_values(column)
                lines.append(
                    (
                        level,
                        rows[column].to_numpy(float),
                        rows["interaction_hartree"].to_numpy(float) * HARTREE_TO_KCAL_MOL,
                        rows["interaction_cp_hartree"].to_numpy(float) * HARTREE_TO_KCAL_MOL,
                    )
                )
            if not lines:
                continue
            out[f"interaction:{molecule}:{scan_name}"] = ReportFigure(
                f"interaction-{molecule}-{scan_name}.png",
                _figure(lines, styles, f"{molecule}, {scan_name}", scan.coordinates[0].label),
                f"uncorrected and counterpoise-corrected interaction energy of {molecule} "
                f"along {scan_name} at every level",
            )
    return out


def _figure(lines, styles, title, label) -> bytes:
    from matplotlib import rc_context

    from pesflow.report.plots import _RC, _png, plain
    from pesflow.report.plots import _figure as new_figure

    with rc_context(_RC):
        fig = new_figure(8.0, 3.4)
        axes = fig.subplots(1, 2, sharey=True)
        for ax, which, name in (
            (axes[0], 2, "uncorrected"),
            (axes[1], 3, "counterpoise-corrected"),
        ):
            for line in lines:
                st = styles[line[0]]
                ok = np.isfinite(line[which])
                ax.plot(
                    line[1][ok],
                    line[which][ok],
                    color=st.color,
                    marker=st.marker,
                    linestyle=st.linestyle,
                    linewidth=st.linewidth,
                    label=plain(line[0]),
                )
            ax.axhline(0.0, color="#888888", linewidth=0.8)
            ax.set_title(plain(f"{title}: {name}"), loc="left")
            ax.set_xlabel(plain(f"{label} (Å)"))
        axes[0].set_ylabel("interaction energy (kcal/mol)")
        axes[1].legend(loc="best")
        return _png(fig)


def counterpoise_section(d, figures, files) -> Markup:
    """The report section: a figure per counterpoise curve and the interaction quantities."""
    keys = [k for k in figures if k.startswith("interaction:")]
    if not keys:
        return tag("p", "No counterpoise scan in this campaign.", class_="muted")
    parts = [
        tag(
            "p",
            "Interaction energy E_AB − E_A − E_B of each complex: left with the fragments in "
            "their own basis, right with each fragment in the complex's full basis (ghost "
            "atoms; Boys & Bernardi, Mol. Phys. 19, 553 (1970)). The difference is the "
            "basis-set superposition error (BSSE); the correction can over-correct in small "
            "basis sets.",
        )
    ]
    for key in keys:
        parts.append(figure(figures[key], figures[key].alt))
    curves = d.curves
    have = [c for c in SHOWN if c in curves.columns]
    rows = curves[curves[have].notna().any(axis=1)] if have else curves.iloc[0:0]
    if len(rows):
        head = [[th("molecule"), th("scan"), th("level")]
                + [th(QUANTITY[c].title, cls="num") for c in have]]  # fmt: skip
        body = [
            [td(r["molecule"]), td(r["scan"]), td(r["level"])]
            + [td(_fmt(r[c], QUANTITY[c].decimals), cls="num") for c in have]
            for _, r in rows.iterrows()
        ]
        parts.append(table(head, body))
    return join(parts)


def _fmt(value, decimals) -> str:
    return "–" if not np.isfinite(float(value)) else f"{float(value):.{decimals}f}"
