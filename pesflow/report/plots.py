"""The report's figures (matplotlib, Agg canvas, no pyplot state), returned as PNG bytes.

Every level keeps one style in every figure: a colour from the Okabe-Ito palette (safe for the
common forms of colour blindness; Okabe & Ito, "Color Universal Design", 2008) plus its own
marker and line style, so that the curves stay apart in greyscale print.  The reference level
is always black, solid, with round markers.  Energies are relative to each level's own
minimum; the smooth lines are the same interpolant the analysis used
(:func:`pesflow.analysis.curves.interpolant`), the markers the computed points.
"""

from __future__ import annotations

import functools
import io
import re
from dataclasses import dataclass

import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.ticker import NullFormatter
from matplotlib.transforms import blended_transform_factory

from pesflow.analysis.curves import covers_full_circle, interpolant, prepare_curve, wrap_degrees
from pesflow.coordinates.kinds import KINDS
from pesflow.units import HARTREE_TO_CM1, HARTREE_TO_KCAL_MOL

#: Okabe-Ito colours in the order levels get them (yellow left out: too pale on white).
PALETTE = ("#0072B2", "#D55E00", "#009E73", "#CC79A7", "#E69F00", "#56B4E9", "#7F7F7F")
MARKERS = ("s", "^", "D", "v", "P", "X", "<", ">", "h")
LINESTYLES = (
    "--",
    "-.",
    ":",
    (0, (5, 1.5, 1, 1.5, 1, 1.5)),
    (0, (8, 2)),
    (0, (1, 1)),
    (0, (4, 1, 1, 1)),
)
REFERENCE_STYLE = {"color": "#000000", "marker": "o", "linestyle": "-"}
DPI = 120
#: The relative energy on the axes, written as the tables write symbols (mathtext subscript).
_E_REL = r"E − E$_{\mathregular{min}}$"
_KCAL_TO_CM1 = HARTREE_TO_CM1 / HARTREE_TO_KCAL_MOL
_RC = {
    "font.size": 9.5,
    "axes.titlesize": 10.5,
    "axes.labelsize": 9.5,
    "axes.spines.top": False,
    "legend.fontsize": 8.5,
    "legend.frameon": False,
    "axes.grid": True,
    "grid.color": "#dddddd",
    "grid.linewidth": 0.6,
    "savefig.facecolor": "white",
}


@dataclass(frozen=True)
class LevelStyle:
    """How one level is drawn."""

    color: str
    marker: str
    linestyle: object
    linewidth: float = 1.6


def level_styles(levels, reference_level=None) -> dict[str, LevelStyle]:
    """One fixed style per level label (the reference level black and solid)."""
    out, k = {}, 0
    for level in levels:
        if level == reference_level:
            out[level] = LevelStyle(**REFERENCE_STYLE, linewidth=2.0)
            continue
        out[level] = LevelStyle(
            PALETTE[k % len(PALETTE)], MARKERS[k % len(MARKERS)], LINESTYLES[k % len(LINESTYLES)]
        )
        k += 1
    return out


def quantity_label(q, prefix="") -> str:
    """The axis label of a quantity of :mod:`pesflow.analysis.quantities`: its symbol as the
    tables write it (subscripts from its HTML name, as matplotlib mathtext) and its unit.

    >>> from pesflow.analysis.quantities import QUANTITY
    >>> print(quantity_label(QUANTITY["omega_e_x_e_cm-1"], "MAD of "))
    MAD of ω$_{\\mathregular{e}}$x$_{\\mathregular{e}}$ (cm⁻¹)
    """
    name = re.sub(r"<sub>(.*?)</sub>", r"$_{\\mathregular{\1}}$", q.html)
    return f"{prefix}{name} ({q.unit})"


def plain(text) -> str:
    """User text made safe for matplotlib: ``$`` would start mathtext."""
    return str(text).replace("$", r"\$")


def _png(fig) -> bytes:
    FigureCanvasAgg(fig)
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=DPI, metadata={"Software": None})
    return buf.getvalue()


def _figure(width, height):
    return Figure(figsize=(width, height), layout="constrained")


def _styled(func):
    """Run a figure function under the report's rc settings (read when artists are made)."""

    @functools.wraps(func)
    def wrapper(*args, **kwargs):
        from matplotlib import rc_context

        with rc_context(_RC):
            return func(*args, **kwargs)

    return wrapper


@dataclass
class CurveLine:
    """One level's data on a curve plot.

    Attributes:
        level: level label.
        q: coordinate of every planned point, walk order (unit of the axis).
        energy_hartree: energy of every point, NaN where not done.
        status: status string of every point.
        q_min: position of the interpolated minimum, or NaN (not bracketed / not known).
        e_min_hartree: energy of that minimum, or NaN (then the lowest done point is zero).
        periodic: dihedral over the full circle.
    """

    level: str
    q: np.ndarray
    energy_hartree: np.ndarray
    status: np.ndarray
    q_min: float = float("nan")
    e_min_hartree: float = float("nan")
    periodic: bool = False


def relative_kcal(energy_hartree, e_min_hartree=float("nan")):
    """Energies in kcal/mol above ``e_min_hartree`` (or above the lowest finite energy)."""
    e = np.asarray(energy_hartree, dtype=float)
    zero = (
        e_min_hartree
        if np.isfinite(e_min_hartree)
        else (np.nanmin(e) if np.isfinite(e).any() else 0.0)
    )
    return (e - zero) * HARTREE_TO_KCAL_MOL


def _smooth(q, e, unit, periodic):
    ok = np.isfinite(e)
    if ok.sum() < 3:
        return None
    try:
        curve = prepare_curve(q[ok], e[ok], periodic=periodic, unit=unit)
        spline = interpolant(curve)
    except ValueError:
        return None
    lo, hi = (0.0, curve.period) if periodic else (curve.q[0], curve.q[-1])
    x = np.linspace(lo, hi, 300)
    return x, spline(x)


def curve_figure(lines, styles, **kwargs) -> bytes:
    """:func:`curve_plot` as PNG bytes."""
    return _png(curve_plot(lines, styles, **kwargs))


@_styled
def curve_plot(lines, styles, *, xlabel, unit, title, reference_level=None) -> Figure:
    """Overlay of one scan's curves at every level (relative energies, kcal/mol and cm-1).

    Failed points are drawn as crosses on the bottom axis and pending points as open circles
    on the top axis, in the level's colour, so that nothing missing is silently dropped; the
    interpolated minimum of each level is marked with a white-filled triangle at zero.
    """
    fig = _figure(7.6, 4.6)
    ax = fig.add_subplot()
    bottom = blended_transform_factory(ax.transData, ax.transAxes)
    any_failed = any_pending = any_min = False
    for line in lines:
        st = styles[line.level]
        label = line.level + (" (reference)" if line.level == reference_level else "")
        rel = relative_kcal(line.energy_hartree, line.e_min_hartree)
        done = line.status == "done"
        q = wrap_degrees(line.q) if line.periodic else line.q
        smooth = _smooth(q, line.energy_hartree, unit, line.periodic)
        if smooth is not None:
            zero = (
                line.e_min_hartree
                if np.isfinite(line.e_min_hartree)
                else np.nanmin(line.energy_hartree)
            )
            ax.plot(
                smooth[0],
                (smooth[1] - zero) * HARTREE_TO_KCAL_MOL,
                color=st.color,
                linestyle=st.linestyle,
                linewidth=st.linewidth,
                zorder=2,
            )
        ax.plot(
            q[done],
            rel[done],
            linestyle="none",
            marker=st.marker,
            color=st.color,
            markersize=5.5,
            markeredgecolor="white",
            markeredgewidth=0.6,
            zorder=3,
        )
        ax.plot(
            [],
            [],
            color=st.color,
            linestyle=st.linestyle,
            marker=st.marker,
            linewidth=st.linewidth,
            label=plain(label),
        )
        failed = line.status == "failed"
        if failed.any():
            any_failed = True
            ax.plot(
                q[failed],
                np.full(failed.sum(), 0.03),
                transform=bottom,
                linestyle="none",
                marker="x",
                markersize=8,
                markeredgewidth=2.0,
                color=st.color,
                zorder=4,
                clip_on=False,
            )
        pending = line.status == "pending"
        if pending.any():
            any_pending = True
            ax.plot(
                q[pending],
                np.full(pending.sum(), 0.97),
                transform=bottom,
                linestyle="none",
                marker="o",
                markersize=5.5,
                markerfacecolor="none",
                markeredgewidth=1.3,
                color=st.color,
                zorder=4,
                clip_on=False,
            )
        if np.isfinite(line.q_min):
            any_min = True
            ax.plot(
                [line.q_min],
                [0.0],
                marker="v",
                markersize=9,
                markerfacecolor="white",
                markeredgecolor=st.color,
                markeredgewidth=1.8,
                linestyle="none",
                zorder=5,
            )
    if any_min:
        ax.plot(
            [],
            [],
            marker="v",
            markersize=8,
            markerfacecolor="white",
            markeredgecolor="#333333",
            linestyle="none",
            label="minimum (interpolated)",
        )
    if any_failed:
        ax.plot(
            [],
            [],
            marker="x",
            markersize=8,
            markeredgewidth=2.0,
            color="#333333",
            linestyle="none",
            label="failed point (at the axis)",
        )
    if any_pending:
        ax.plot(
            [],
            [],
            marker="o",
            markerfacecolor="none",
            color="#333333",
            linestyle="none",
            label="pending point (top of the plot)",
        )
    ax.set_xlabel(plain(xlabel))
    ax.set_ylabel(f"{_E_REL} (kcal/mol)")
    sec = ax.secondary_yaxis(
        "right", functions=(lambda x: x * _KCAL_TO_CM1, lambda x: x / _KCAL_TO_CM1)
    )
    sec.set_ylabel(f"{_E_REL} (cm⁻¹)")
    ax.set_title(plain(title), loc="left")
    ax.legend(loc="upper center", ncol=3, bbox_to_anchor=(0.5, -0.14))
    return fig


@dataclass
class SurfaceGrid:
    """One level's 2-D scan on its grid (see :func:`pesflow.report.curve_points.surface_grid`)."""

    level: str
    q1: np.ndarray
    q2: np.ndarray
    energy_hartree: np.ndarray
    status: np.ndarray
    q_min: tuple = (float("nan"), float("nan"))
    e_min_hartree: float = float("nan")


def _grid_axes(n):
    ncols = min(n, 3)
    nrows = -(-n // ncols)
    return nrows, ncols


def _mark_points(ax, g):
    Q1, Q2 = np.meshgrid(g.q1, g.q2, indexing="ij")
    failed, pending = g.status == "failed", g.status == "pending"
    if failed.any():
        ax.plot(Q1[failed], Q2[failed], "x", color="#D55E00", markersize=8, markeredgewidth=2)
    if pending.any():
        ax.plot(
            Q1[pending], Q2[pending], "o", markerfacecolor="white", color="#333333", markersize=5
        )
    done = g.status == "done"
    ax.plot(Q1[done], Q2[done], ".", color="#222222", markersize=2.5, alpha=0.6)


def _contour_panel(ax, q1, q2, values, levels, *, cmap, extend, fmt, linewidth, empty_text):
    """Filled contours with labelled lines of ``values`` on the (q1, q2) grid, or a note
    when too few points are finite.  Returns the filled contour set (or None)."""
    if np.isfinite(values).sum() < 4 or min(values.shape) < 2:
        ax.text(
            0.5, 0.5, empty_text, ha="center", va="center", transform=ax.transAxes, color="#555555"
        )
        return None
    Q1, Q2 = np.meshgrid(q1, q2, indexing="ij")
    masked = np.ma.masked_invalid(values)
    filled = ax.contourf(Q1, Q2, masked, levels=levels, cmap=cmap, extend=extend)
    lines = ax.contour(Q1, Q2, masked, levels=levels[::2], colors="black", linewidths=linewidth)
    ax.clabel(lines, fmt=fmt, fontsize=7)
    return filled


def surface_figure(grids, **kwargs) -> bytes:
    """:func:`surface_plot` as PNG bytes."""
    return _png(surface_plot(grids, **kwargs))


@_styled
def surface_plot(grids, *, xlabel, ylabel, title, reference_level=None) -> Figure:
    """Contour maps of a 2-D scan, one panel per level, on one energy scale (kcal/mol).

    Grid points: small dots (done), red crosses (failed), open circles (pending); the
    minimum of each level (from the summary) is a white star.
    """
    nrows, ncols = _grid_axes(len(grids))
    fig = _figure(3.3 * ncols + 1.0, 3.0 * nrows + 0.6)
    axes = fig.subplots(nrows, ncols, squeeze=False)
    rels = [relative_kcal(g.energy_hartree, g.e_min_hartree) for g in grids]
    finite = [r[np.isfinite(r)] for r in rels]
    top = max((float(np.max(f)) for f in finite if f.size), default=1.0) or 1.0
    levels = np.linspace(0.0, top, 13)
    mappable = None
    for ax, g, rel in zip(axes.flat, grids, rels):
        label = g.level + (" (reference)" if g.level == reference_level else "")
        ax.set_title(plain(label), loc="left")
        panel = _contour_panel(
            ax,
            g.q1,
            g.q2,
            rel,
            levels,
            cmap="cividis",
            extend="max",
            fmt="%.3g",
            linewidth=0.6,
            empty_text="not enough points\ncomputed yet",
        )
        if panel is not None:
            mappable = panel
        _mark_points(ax, g)
        if all(np.isfinite(g.q_min)):
            ax.plot(
                *g.q_min,
                marker="*",
                markersize=14,
                markerfacecolor="white",
                markeredgecolor="black",
            )
        ax.set_xlabel(plain(xlabel))
        ax.set_ylabel(plain(ylabel))
        ax.grid(False)
    for ax in list(axes.flat)[len(grids) :]:
        ax.set_visible(False)
    if mappable is not None:
        fig.colorbar(mappable, ax=axes, label=f"{_E_REL} (kcal/mol)", shrink=0.9)
    fig.suptitle(plain(title), x=0.02, ha="left")
    return fig


@_styled
def difference_figure(grids, reference: SurfaceGrid, *, xlabel, ylabel, title) -> bytes:
    """Maps of (level - reference level) of the relative energies, kcal/mol, one per level."""
    others = [g for g in grids if g.level != reference.level]
    nrows, ncols = _grid_axes(len(others))
    fig = _figure(3.3 * ncols + 1.0, 3.0 * nrows + 0.6)
    axes = fig.subplots(nrows, ncols, squeeze=False)
    ref_rel = relative_kcal(reference.energy_hartree, reference.e_min_hartree)
    diffs = [relative_kcal(g.energy_hartree, g.e_min_hartree) - ref_rel for g in others]
    span = (
        max((float(np.nanmax(np.abs(d))) for d in diffs if np.isfinite(d).any()), default=1.0)
        or 1.0
    )
    levels = np.linspace(-span, span, 13)
    mappable = None
    for ax, g, d in zip(axes.flat, others, diffs):
        ax.set_title(plain(f"{g.level} minus {reference.level}"), loc="left")
        panel = _contour_panel(
            ax,
            g.q1,
            g.q2,
            d,
            levels,
            cmap="PuOr_r",
            extend="neither",
            fmt="%.2g",
            linewidth=0.5,
            empty_text="not enough points\nat both levels",
        )
        if panel is not None:
            mappable = panel
        merged = np.where(reference.status == "done", g.status, reference.status)
        _mark_points(ax, SurfaceGrid(g.level, g.q1, g.q2, d, merged))
        ax.set_xlabel(plain(xlabel))
        ax.set_ylabel(plain(ylabel))
        ax.grid(False)
    for ax in list(axes.flat)[len(others) :]:
        ax.set_visible(False)
    if mappable is not None:
        fig.colorbar(mappable, ax=axes, label="Δ relative energy (kcal/mol)", shrink=0.9)
    fig.suptitle(plain(title), x=0.02, ha="left")
    return _png(fig)


@dataclass
class ConvergencePanel:
    """One curve's quantity against basis-set size.

    Attributes:
        title: panel title (molecule and scan).
        series: ``{method: [(nbf, basis, value), ...]}`` sorted by nbf.
        reference_level_value: value at the reference level (NaN if none).
        reference_values: ``[(value, label)]`` user reference values.
    """

    title: str
    series: dict
    reference_level_value: float = float("nan")
    reference_values: tuple = ()


@_styled
def convergence_figure(panels, *, ylabel, title, method_styles) -> bytes:
    """Quantity against the number of basis functions, one line per method, one panel per curve.

    ``ylabel`` and ``title`` are our own labels (:func:`quantity_label`, mathtext allowed);
    panel titles and method names are user text."""
    nrows, ncols = _grid_axes(len(panels))
    # Never narrower than its title (a single panel would clip a long quantity name).
    fig = _figure(max(3.5 * ncols + 0.4, 6.4), 2.9 * nrows + 0.7)
    axes = fig.subplots(nrows, ncols, squeeze=False)
    for ax, panel in zip(axes.flat, panels):
        ticks = {}
        for method, pts in panel.series.items():
            st = method_styles[method]
            nbf = [p[0] for p in pts]
            ax.plot(
                nbf,
                [p[2] for p in pts],
                color=st.color,
                marker=st.marker,
                linestyle=st.linestyle,
                linewidth=st.linewidth,
                label=plain(method),
            )
            for n, basis, _ in pts:
                ticks.setdefault(n, basis)
        if np.isfinite(panel.reference_level_value):
            ax.axhline(
                panel.reference_level_value,
                color="black",
                linestyle=":",
                linewidth=1.2,
                label="reference level",
            )
        for k, (value, _) in enumerate(panel.reference_values):
            ax.axhline(
                value,
                color="#555555",
                linestyle="--",
                linewidth=1.2,
                label="reference value" if k == 0 else None,
            )
        ax.set_xscale("log")
        # minor-tick labels of a log axis crowd each other over a short range
        ax.xaxis.set_minor_formatter(NullFormatter())
        xs = sorted(ticks)
        ax.set_xticks(xs, [plain(f"{ticks[n]}\n{int(n)}") for n in xs])
        ax.minorticks_off()
        ax.set_xlabel("basis set (number of basis functions)")
        ax.set_ylabel(ylabel)
        ax.set_title(plain(panel.title), loc="left")
        ax.legend(loc="best")
    for ax in list(axes.flat)[len(panels) :]:
        ax.set_visible(False)
    fig.suptitle(title, x=0.02, ha="left")  # our own mathtext label
    return _png(fig)


@_styled
def accuracy_cost_figure(
    panels, styles, *, title, reference_level=None, reference_cost=float("nan")
) -> bytes:
    """Mean absolute deviation from the reference against cost per point, one panel per quantity.

    ``panels`` is a list of ``(ylabel, [(level, core_s_per_point, mad, n)])``; ``ylabel`` is
    our own label (:func:`quantity_label`, mathtext allowed).
    """
    nrows, ncols = _grid_axes(len(panels))
    fig = _figure(3.1 * ncols + 0.4, 2.4 * nrows + 0.9)
    axes = fig.subplots(nrows, ncols, squeeze=False)
    shown = {}
    for ax, (ylabel, points) in zip(axes.flat, panels):
        top = 0.0
        for level, cost, mad, n in points:
            st = styles[level]
            shown[level] = ax.plot(
                [cost], [mad], marker=st.marker, color=st.color, markersize=8, linestyle="none"
            )[0]
            # Above the marker, on white: clear of the marker and of the reference line.
            ax.annotate(
                f"n={n}",
                (cost, mad),
                textcoords="offset points",
                xytext=(0, 7),
                ha="center",
                va="bottom",
                fontsize=7,
                color="#333333",
                bbox={"boxstyle": "round,pad=0.15", "fc": "white", "ec": "none", "alpha": 0.9},
                zorder=6,
            )
            top = max(top, mad)
        if np.isfinite(reference_cost) and reference_cost > 0:
            ax.axvline(reference_cost, color="black", linestyle=":", linewidth=1.2)
        ax.set_xscale("log")
        # minor-tick labels of a log axis crowd each other over a short range
        ax.xaxis.set_minor_formatter(NullFormatter())
        ax.set_ylim(0, 1.35 * top if top > 0 else 1.0)
        ax.margins(x=0.35)
        ax.set_xlabel("core-seconds per point")
        ax.set_ylabel(ylabel)
    for ax in list(axes.flat)[len(panels) :]:
        ax.set_visible(False)
    handles = list(shown.values())
    labels = [plain(lvl) for lvl in shown]
    if np.isfinite(reference_cost) and reference_cost > 0:
        handles.append(axes.flat[0].plot([], [], color="black", linestyle=":")[0])
        labels.append(plain(f"cost of {reference_level} (reference)"))
    fig.legend(handles, labels, loc="outside lower center", ncol=min(4, len(handles)))
    fig.suptitle(plain(title), x=0.02, ha="left")
    return _png(fig)


def periodic_curve(kind, q) -> bool:
    """Whether a curve is drawn (and interpolated) as periodic: a dihedral over the full circle."""
    q = np.asarray(q, dtype=float)
    return KINDS[kind].period is not None and covers_full_circle(q[np.isfinite(q)])


@dataclass(frozen=True)
class ReportFigure:
    """A rendered figure: ``name`` (file name), ``png`` (bytes), ``alt`` (text alternative)."""

    name: str
    png: bytes
    alt: str


def _axis_label(kind, label):
    return f"{label} ({KINDS[kind].unit_text})"


def _summary_row(summary, molecule, scan, level):
    sub = summary[
        (summary["molecule"] == molecule) & (summary["scan"] == scan) & (summary["level"] == level)
    ]
    return sub.iloc[0].to_dict() if len(sub) else {}


def _float(row, key):
    try:
        return float(row.get(key, np.nan))
    except (TypeError, ValueError):
        return float("nan")


def _scan_levels(data, molecule, scan) -> list[str]:
    summary = data.curves
    present = set(
        summary.loc[(summary["molecule"] == molecule) & (summary["scan"] == scan), "level"]
    )
    return [lvl for lvl in data.levels if lvl in present]


def _curve_lines(campaign, points, data, molecule, scan) -> list[CurveLine]:
    from pesflow.report.curve_points import curve_arrays

    kind = campaign.scans[scan].coordinates[0].kind
    lines = []
    # The reference level is drawn first, so that it never hides a level on top of it.
    levels = _scan_levels(data, molecule, scan)
    for lvl in sorted(levels, key=lambda lvl: lvl != data.reference_level):
        q, e, status = curve_arrays(campaign, points, molecule, scan, lvl)
        row = _summary_row(data.curves, molecule, scan, lvl)
        lines.append(
            CurveLine(
                lvl,
                q[:, 0],
                e,
                status,
                q_min=_float(row, KINDS[kind].minimum_column),
                e_min_hartree=_float(row, "e_min_hartree"),
                periodic=periodic_curve(kind, q[:, 0]),
            )
        )
    return lines


def _surface_grids(campaign, points, data, molecule, scan) -> list[SurfaceGrid]:
    from pesflow.report.curve_points import surface_grid

    units = [KINDS[c.kind].unit for c in campaign.scans[scan].coordinates]
    grids = []
    for lvl in _scan_levels(data, molecule, scan):
        q1, q2, e, status = surface_grid(campaign, points, molecule, scan, lvl)
        row = _summary_row(data.curves, molecule, scan, lvl)
        grids.append(
            SurfaceGrid(
                lvl,
                q1,
                q2,
                e,
                status,
                q_min=(_float(row, f"q1_e_{units[0]}"), _float(row, f"q2_e_{units[1]}")),
                e_min_hartree=_float(row, "e_min_hartree"),
            )
        )
    return grids


def scan_figure(campaign, points, data, molecule, scan) -> Figure:
    """The figure of one scan of one molecule at every level, as a matplotlib Figure: the
    curves of a 1-D scan (:func:`curve_plot`), the contour maps of a 2-D grid
    (:func:`surface_plot`).  ``data``: the :class:`~pesflow.report.tables.ReportData`."""
    coords = campaign.scans[scan].coordinates
    labels = [_axis_label(c.kind, c.label) for c in coords]
    if len(coords) == 1:
        return curve_plot(
            _curve_lines(campaign, points, data, molecule, scan),
            level_styles(data.levels, data.reference_level),
            xlabel=labels[0],
            unit=KINDS[coords[0].kind].unit,
            title=f"{molecule}, {scan}",
            reference_level=data.reference_level,
        )
    return surface_plot(
        _surface_grids(campaign, points, data, molecule, scan),
        xlabel=labels[0],
        ylabel=labels[1],
        title=f"{molecule}, {scan}",
        reference_level=data.reference_level,
    )


def _file_name(kind, molecule, scan) -> str:
    """A figure's file name; set members and rule scans carry ``/`` in their names."""
    return f"{kind}-{molecule}-{scan}.png".replace("/", "_")


def make_figures(campaign, points, data) -> dict[str, ReportFigure]:
    """Every figure of the report, keyed ``curve:<molecule>:<scan>``,
    ``surface:<molecule>:<scan>``, ``difference:<molecule>:<scan>``,
    ``convergence:<quantity column>`` and ``accuracy``.

    ``data`` is the :class:`~pesflow.report.tables.ReportData` of the same campaign.
    """
    from pesflow.report.tables import QUANTITY

    styles = level_styles(data.levels, data.reference_level)
    figures = {}
    for (molecule, scan), _ in data.curves.groupby(["molecule", "scan"], sort=False):
        fig = _png(scan_figure(campaign, points, data, molecule, scan))
        if len(campaign.scans[scan].coordinates) == 1:
            figures[f"curve:{molecule}:{scan}"] = ReportFigure(
                _file_name("curve", molecule, scan),
                fig,
                f"energy curves of {molecule} along {scan} at every level",
            )
            continue
        figures[f"surface:{molecule}:{scan}"] = ReportFigure(
            _file_name("surface", molecule, scan),
            fig,
            f"contour maps of {molecule} over {scan} at every level",
        )
        grids = _surface_grids(campaign, points, data, molecule, scan)
        ref = [g for g in grids if g.level == data.reference_level]
        if ref and len(grids) > 1:
            xlabel, ylabel = (
                _axis_label(c.kind, c.label) for c in campaign.scans[scan].coordinates
            )
            figures[f"difference:{molecule}:{scan}"] = ReportFigure(
                _file_name("difference", molecule, scan),
                difference_figure(
                    grids,
                    ref[0],
                    xlabel=xlabel,
                    ylabel=ylabel,
                    title=f"{molecule}, {scan}: difference from {data.reference_level}",
                ),
                f"difference maps of {molecule} over {scan} from the reference level",
            )
    methods = list(dict.fromkeys(data.level_method[lvl] for lvl in data.levels))
    method_styles = level_styles(methods)
    conv = data.convergence
    for column in dict.fromkeys(conv["quantity"]):
        q = QUANTITY[column]
        panels = []
        sub = conv[conv["quantity"] == column]
        for (molecule, scan), part in sub.groupby(["molecule", "scan"], sort=False):
            series = {
                m: [
                    (float(r["nbf"]), r["basis"], float(r["value"]))
                    for _, r in g.sort_values("nbf").iterrows()
                ]
                for m, g in part.groupby("method", sort=False)
            }
            ref_value = float("nan")
            if data.reference_level:
                v = data.values[
                    (data.values["molecule"] == molecule)
                    & (data.values["scan"] == scan)
                    & (data.values["quantity"] == column)
                    & (data.values["level"] == data.reference_level)
                ]
                if len(v):
                    ref_value = float(v["value"].iloc[0])
            rv = data.reference_values[
                (data.reference_values["molecule"] == molecule)
                & (data.reference_values["scan"] == scan)
                & (data.reference_values["quantity"] == column)
            ]
            refs = tuple(dict.fromkeys(zip(rv["reference_value"], rv["source"])))
            panels.append(ConvergencePanel(f"{molecule}, {scan}", series, ref_value, refs))
        figures[f"convergence:{column}"] = ReportFigure(
            f"convergence-{column}.png",
            convergence_figure(
                panels,
                ylabel=quantity_label(q),
                title=quantity_label(q).rsplit(" (", 1)[0] + ": basis-set convergence",
                method_styles=method_styles,
            ),
            f"{q.name} against basis-set size",
        )
    from pesflow.report.interaction import interaction_figures

    figures.update(interaction_figures(campaign, points, data, styles))
    if data.reference_level:
        stats = data.statistics[
            (data.statistics["against"] == data.reference_level) & (data.statistics["n"] > 0)
        ]
        cost = data.cost.set_index("level")["core_s_per_point"]
        panels = []
        for column in dict.fromkeys(stats["quantity"]):
            q = QUANTITY[column]
            pts = [
                (
                    r["level"],
                    float(cost.get(r["level"], np.nan)),
                    float(r["mean_absolute"]),
                    int(r["n"]),
                )
                for _, r in stats[stats["quantity"] == column].iterrows()
            ]
            pts = [p for p in pts if np.isfinite(p[1]) and p[1] > 0]
            if pts:
                panels.append((quantity_label(q, "MAD of "), pts))
        if panels:
            figures["accuracy"] = ReportFigure(
                "accuracy-cost.png",
                accuracy_cost_figure(
                    panels,
                    styles,
                    title=f"Deviation from {data.reference_level} against cost",
                    reference_level=data.reference_level,
                    reference_cost=float(cost.get(data.reference_level, np.nan)),
                ),
                "mean absolute deviation from the reference level against cost per point",
            )
    return figures
