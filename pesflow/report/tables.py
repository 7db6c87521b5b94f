"""The report's tables, built from the points table and the summary table (no computation).

Everything the HTML page, the Markdown summary and the CSV files show is assembled here into
one :class:`ReportData`: the derived quantities per curve and level with their deviations
(from the summary's ``dev_<column>`` columns, never recomputed), the comparison with the
user's reference values, error statistics per level, the cost per level, what is missing,
and the summary's flags split into single warnings and attached to the quantities they
concern.  The tables of single sections (cost, basis-set convergence, molecule sets,
stationary points) are built in :mod:`~pesflow.report.section_tables`, the numbers are
formatted by :mod:`~pesflow.report.formatting`.
"""

from __future__ import annotations

import functools
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from pesflow.analysis.flags import FLAG_KINDS, Flag, flags_from_records
from pesflow.analysis.quantities import QUANTITIES as ALL_QUANTITIES
from pesflow.analysis.quantities import Quantity, deviation, uncertainty_column
from pesflow.analysis.symmetry import Symmetry
from pesflow.coordinates.kinds import KINDS, UNIT_TEXT
from pesflow.report.section_tables import _convergence, _cost_table, set_statistics
from pesflow.report.stats import common_curve_statistics, level_statistics
from pesflow.tables.points import status_counts
from pesflow.tables.states import states_as_levels
from pesflow.tables.summary import ENVELOPE

#: The quantities the report can show, in the order it shows them (from the registry).
QUANTITIES = tuple(q for q in ALL_QUANTITIES if q.shown)
#: The quantities the report can show, by column.
QUANTITY = {q.column: q for q in QUANTITIES}


def split_flags(text) -> list[Flag]:
    """The flags of a summary row's ``flag_records`` cell (see
    :func:`pesflow.analysis.flags.flags_from_records`); NaN or empty text gives ``[]``."""
    return flags_from_records(text)


@dataclass
class ReportData:
    """Everything the report shows, as plain tables (one place, so every output agrees).

    Attributes:
        campaign: campaign name.
        spec_path: the spec file.
        reference_level: label of ``compare.reference_level`` (lower case) or None.
        levels: level labels in the spec's order.
        level_method, level_basis: method and basis of each level.
        quantities: the quantities shown, in order.
        values: one row per curve x level x quantity: ``molecule, scan, kind, level, method,
            basis, quantity, value, uncertainty, dev_reference_level, state, n_done,
            n_failed, n_pending, flags`` (``uncertainty``: the summary's standard
            uncertainty ``u_<column>``, NaN when not known; ``state``: ``value`` /
            ``pending`` / ``failed`` / ``not determined``; ``flags``: the warnings that
            concern this number, joined by ``" | "``).
        reference_values: one row per user reference value x level: ``molecule, scan,
            quantity, source, reference_value, level, value, deviation``.
        statistics: :func:`~pesflow.report.stats.level_statistics` rows against the
            reference level and against the reference values.
        cost: one row per level: ``level, method, basis, core_s, points_done, points_failed,
            points_pending, points_total, core_s_per_point, cost_vs_reference``.
        status: done / failed / pending per molecule and level.
        failed: the failed points (``molecule, scan, level, where, error``).
        pending: the pending points (``molecule, scan, level, where``).
        curves: one row per curve and level of the summary (the summary's own columns).
        curve_flags: one row per warning: ``molecule, scan, level, flag``.
        convergence: ``molecule, scan, quantity, method, basis, nbf, cardinal, value`` for
            every method computed with two or more basis sets.
        totals: ``done``, ``failed``, ``pending`` point counts.
        ranking: :func:`~pesflow.report.stats.common_curve_statistics` rows (against the
            reference level and the reference values): the statistics the "closest level"
            verdict ranks on, over the curves every compared level has.
        stationary: the stationary-point table (:mod:`pesflow.tables.stationary`), one row
            per minimum, maximum and saddle per curve and level; empty when not given.
        refinement, refinement_points: the adaptive-refinement log as tables (one row per
            curve and round; one row per added point: :func:`pesflow.execution.refinement.
            refinement_table`); empty when no scan refines.
    """

    campaign: str
    spec_path: Path
    reference_level: str | None
    levels: list[str]
    level_method: dict[str, str]
    level_basis: dict[str, str]
    quantities: list[Quantity]
    values: pd.DataFrame
    reference_values: pd.DataFrame
    statistics: pd.DataFrame
    cost: pd.DataFrame
    status: pd.DataFrame
    failed: pd.DataFrame
    pending: pd.DataFrame
    curves: pd.DataFrame
    curve_flags: pd.DataFrame
    convergence: pd.DataFrame
    totals: dict = field(default_factory=dict)
    ranking: pd.DataFrame | None = None
    #: per set, rule, level and quantity: statistics over the set's molecules
    #: (:func:`~pesflow.report.section_tables.set_statistics`); empty when the campaign has
    #: no molecule sets
    sets: pd.DataFrame = field(default_factory=pd.DataFrame)
    #: the set members' summary rows behind :attr:`sets` (per-molecule detail)
    set_members: pd.DataFrame = field(default_factory=pd.DataFrame)
    stationary: pd.DataFrame = field(default_factory=pd.DataFrame)
    refinement: pd.DataFrame = field(default_factory=pd.DataFrame)
    refinement_points: pd.DataFrame = field(default_factory=pd.DataFrame)

    @property
    def complete(self) -> bool:
        return self.totals.get("failed", 0) == 0 and self.totals.get("pending", 0) == 0

    @functools.cached_property
    def notes(self) -> dict[str, dict]:
        """Every distinct warning of the page once, numbered in the order the page first
        shows it: ``{message: {"n", "code", "severity", "title", "where": [...]}}`` (the
        number starts at 1; ``where``: ``"level, molecule scan"`` it applies to)."""
        out: dict[str, dict] = {}

        def add(message, code, where):
            kind = FLAG_KINDS[code]
            entry = out.setdefault(
                str(message),
                {
                    "n": len(out) + 1,
                    "code": code,
                    "severity": kind.severity,
                    "title": kind.title,
                    "where": [],
                },
            )
            if where not in entry["where"]:
                entry["where"].append(where)

        for q in self.quantities:
            sub = self.values[self.values["quantity"] == q.column]
            for _, row in sub.iterrows():
                for flag in row["flags"]:
                    add(flag, flag.code, f"{row['level']}, {row['molecule']} {row['scan']}")
        for _, r in self.curve_flags.iterrows():
            add(r["flag"], r["code"], f"{r['level']}, {r['molecule']} {r['scan']}")
        return out


def _num(row, column) -> float:
    value = row.get(column, np.nan)
    try:
        return float(value)
    except (TypeError, ValueError):
        return float("nan")


def _curve_kinds(campaign) -> dict[str, tuple[str, ...]]:
    return {name: tuple(c.kind for c in scan.coordinates) for name, scan in campaign.scans.items()}


def _state(value, row) -> str:
    if np.isfinite(value):
        return "value"
    if int(row.get("n_done", 0)) == 0:
        return "pending" if int(row.get("n_pending", 0)) > 0 else "failed"
    return "not determined"


def _partial_flag(row) -> Flag | None:
    pending, failed = int(row.get("n_pending", 0)), int(row.get("n_failed", 0))
    if not pending and not failed:
        return None
    total = int(row.get("n_done", 0)) + pending + failed
    parts = []
    if pending:
        parts.append(f"{pending} of {total} points pending")
    if failed:
        parts.append(f"{failed} of {total} points failed")
    return Flag("incomplete-curve", "from an incomplete curve: " + ", ".join(parts))


def _applicable(summary, kinds, reference_specs) -> tuple[list[Quantity], dict]:
    """The quantities to show, and per (molecule, scan) the set of quantity columns that apply."""
    per_curve: dict[tuple[str, str], set[str]] = {}
    position = {k.name: k.minimum_column for k in KINDS.values()}
    for (molecule, scan), sub in summary.groupby(["molecule", "scan"], sort=False):
        cols = set()
        for q in QUANTITIES:
            if (
                q.headline
                and q.column in sub
                and np.isfinite(pd.to_numeric(sub[q.column], errors="coerce")).any()
            ):
                cols.add(q.column)
        k = kinds.get(scan, ())
        if len(k) == 1:
            cols.add(position[k[0]])
        elif len(k) == 2:
            cols.update({f"q1_e_{KINDS[k[0]].unit}", f"q2_e_{KINDS[k[1]].unit}"})
        per_curve[(molecule, scan)] = cols
    for ref in reference_specs:
        per_curve.setdefault((ref.molecule, ref.scan), set()).add(ref.quantity)
    used = set().union(*per_curve.values()) if per_curve else set()
    return [q for q in QUANTITIES if q.column in used], per_curve


def _values_table(summary, quantities, per_curve, kinds, reference_level):
    rows = []
    for _, row in summary.iterrows():
        molecule, scan = row["molecule"], row["scan"]
        flags = split_flags(row.get("flag_records"))
        partial = _partial_flag(row)
        for q in quantities:
            if q.column not in per_curve.get((molecule, scan), ()):
                continue
            value = _num(row, q.column)
            dev = _num(row, f"dev_{q.column}")
            concern = [f for f in flags if f.concerns is None or q.column in f.concerns]
            if partial and np.isfinite(value):
                concern.append(partial)
            rows.append(
                {
                    "molecule": molecule,
                    "scan": scan,
                    "kind": ", ".join(kinds.get(scan, ())),
                    "level": row["level"],
                    "method": row["method"],
                    "basis": row["basis"],
                    "quantity": q.column,
                    "value": value,
                    "uncertainty": _num(row, uncertainty_column(q.column)),
                    "dev_reference_level": dev,
                    "reference_level": reference_level or "",
                    "state": _state(value, row),
                    "n_done": int(row.get("n_done", 0)),
                    "n_failed": int(row.get("n_failed", 0)),
                    "n_pending": int(row.get("n_pending", 0)),
                    "flags": tuple(concern),
                }
            )
    columns = [
        "molecule",
        "scan",
        "kind",
        "level",
        "method",
        "basis",
        "quantity",
        "value",
        "uncertainty",
        "dev_reference_level",
        "reference_level",
        "state",
        "n_done",
        "n_failed",
        "n_pending",
        "flags",
    ]
    return pd.DataFrame(rows, columns=columns)


def _reference_values_table(values, reference_specs, levels, summary):
    # A position is compared through its nearest equivalent under the curve's own symmetry.
    symmetry = {
        (r["molecule"], r["scan"], r["level"]): Symmetry.of_row(r) for _, r in summary.iterrows()
    }
    rows = []
    for ref in reference_specs:
        sub = values[
            (values["molecule"] == ref.molecule)
            & (values["scan"] == ref.scan)
            & (values["quantity"] == ref.quantity)
        ].set_index("level")
        for level in levels:
            v = float(sub.loc[level, "value"]) if level in sub.index else float("nan")
            rows.append(
                {
                    "molecule": ref.molecule,
                    "scan": ref.scan,
                    "quantity": ref.quantity,
                    "source": ref.source,
                    "reference_value": float(ref.value),
                    "level": level,
                    "value": v,
                    "deviation": deviation(
                        ref.quantity,
                        v,
                        float(ref.value),
                        symmetry.get((ref.molecule, ref.scan, level)),
                    ),
                }
            )
    columns = [
        "molecule",
        "scan",
        "quantity",
        "source",
        "reference_value",
        "level",
        "value",
        "deviation",
    ]
    return pd.DataFrame(rows, columns=columns)


def _statistics(values, reference_values, levels, reference_level, statistic=level_statistics):
    """``statistic`` (:func:`~pesflow.report.stats.level_statistics`, or
    :func:`~pesflow.report.stats.common_curve_statistics` for the ranking) against the reference
    level and against the user's reference values, in one table."""
    frames = []
    if reference_level and len(values):
        frames.append(
            statistic(
                values,
                against=reference_level,
                deviation_column="dev_reference_level",
                levels=levels,
                exclude_level=reference_level,
            )
        )
    if len(reference_values):
        frames.append(statistic(reference_values, against="reference values", levels=levels))
    frames = [f for f in frames if len(f)]
    if not frames:
        return statistic(
            pd.DataFrame(columns=["quantity", "level", "molecule", "scan", "deviation"]),
            against="",
            levels=[],
        )
    return pd.concat(frames, ignore_index=True)


def _where_texts(frame, columns) -> list[str]:
    """``"r = 1.3 Å, angle = 104 degree"`` for every row (the point's scan coordinates)."""
    parts = []
    for c in columns:
        name, unit = c.rsplit("_", 1)
        unit = UNIT_TEXT.get(unit, unit)
        values = pd.to_numeric(frame[c], errors="coerce").to_numpy(dtype=float)
        parts.append([f"{name} = {v:g} {unit}" if np.isfinite(v) else "" for v in values])
    texts = [", ".join(p for p in row if p) for row in zip(*parts)] if parts else []
    scans = frame["scan"].astype(str).tolist()
    if not texts:
        return scans
    return [t or s for t, s in zip(texts, scans)]


def _point_lists(points):
    coord = [
        c
        for c in points.columns
        if c.endswith(("_angstrom", "_degree")) and c != "positions_angstrom"
    ]
    lists = {}
    for state in ("failed", "pending"):
        sub = points[points["status"] == state]
        frame = pd.DataFrame(
            {
                "molecule": sub["molecule"].to_numpy(),
                "scan": sub["scan"].to_numpy(),
                "level": sub["level"].to_numpy(),
                "where": _where_texts(sub, coord),
            },
            columns=["molecule", "scan", "level", "where"],
        )
        if state == "failed":
            errors = sub["error"] if "error" in sub else pd.Series([""] * len(sub))
            frame["error"] = [e if isinstance(e, str) else "" for e in errors]
        lists[state] = frame
    return lists["failed"], lists["pending"]


def _ordered_status(points, molecules, levels):
    """Done / failed / pending per molecule and level, in the spec's order."""
    if not len(points):
        return pd.DataFrame(columns=["molecule", "level", "done", "failed", "pending"])
    return status_counts(points, molecules, levels)


def collect(
    campaign,
    plan,
    points: pd.DataFrame,
    summary: pd.DataFrame,
    *,
    basis_counts=None,
    stationary: pd.DataFrame | None = None,
    refinement=None,
) -> ReportData:
    """Assemble :class:`ReportData` from the points table and the summary table.

    Args:
        campaign: the :class:`~pesflow.campaign.resolved.Campaign`.
        plan: its :class:`~pesflow.plan.expand.Plan` (checked to be of the same campaign).
        points: :func:`pesflow.tables.points.points_table` of the campaign (all columns).
        summary: :func:`pesflow.tables.summary.summary_table` of the campaign.
        basis_counts: optional ``{(molecule, basis): n_basis_functions}``; default: computed
            with :func:`pesflow.plan.cost.basis_function_counts`, and only when some method was
            run with two or more basis sets.
        stationary: :func:`pesflow.tables.stationary.stationary_table` of the campaign.
        refinement: ``(rounds, points)`` of :func:`pesflow.execution.refinement.
            refinement_table`, or None.

    Nothing is computed except table arithmetic; every deviation from the reference level is
    the summary's own ``dev_<column>`` value.
    """
    ref_raw = campaign.spec.compare.reference_level
    reference_level = ref_raw.strip().lower() if ref_raw else None
    # Each excited state of a multi-state level is compared as a level of its own.
    points, summary, state_levels = states_as_levels(points, summary)
    levels = [s for lvl in campaign.levels for s in [lvl.label, *state_levels.get(lvl.label, [])]]
    level_method = {s: lvl.method for lvl in campaign.levels
                    for s in [lvl.label, *state_levels.get(lvl.label, [])]}  # fmt: skip
    level_basis = {s: lvl.basis for lvl in campaign.levels
                   for s in [lvl.label, *state_levels.get(lvl.label, [])]}  # fmt: skip
    kinds = _curve_kinds(campaign)
    refs = list(campaign.spec.compare.reference_values)
    if summary is None or summary.empty:
        summary = pd.DataFrame(
            columns=[
                "molecule",
                "scan",
                "level",
                "method",
                "basis",
                "n_done",
                "n_failed",
                "n_pending",
                "flags",
            ]
        )
    sets, set_members = set_statistics(summary)
    if "conformer" in summary:  # a lower envelope is a derived curve: sets only
        summary = summary[summary["conformer"] != ENVELOPE].reset_index(drop=True)
    quantities, per_curve = _applicable(summary, kinds, refs)
    values = _values_table(summary, quantities, per_curve, kinds, reference_level)
    reference_values = _reference_values_table(values, refs, levels, summary)
    statistics = _statistics(values, reference_values, levels, reference_level)
    failed, pending = _point_lists(points)
    flag_rows = [
        {
            "molecule": r["molecule"],
            "scan": r["scan"],
            "level": r["level"],
            "code": f.code,
            "severity": f.severity,
            "flag": f,
        }
        for _, r in summary.iterrows()
        for f in split_flags(r.get("flag_records"))
    ]
    counts = points["status"].value_counts()
    if plan is not None and plan.campaign != campaign.name:
        raise ValueError(f"the plan is of campaign {plan.campaign!r}, not {campaign.name!r}")
    return ReportData(
        campaign=campaign.name,
        spec_path=Path(campaign.path),
        reference_level=reference_level,
        levels=levels,
        level_method=level_method,
        level_basis=level_basis,
        quantities=quantities,
        values=values,
        reference_values=reference_values,
        statistics=statistics,
        cost=_cost_table(points, levels, reference_level),
        status=_ordered_status(points, list(campaign.molecules), levels),
        failed=failed,
        pending=pending,
        curves=summary,
        curve_flags=pd.DataFrame(
            flag_rows, columns=["molecule", "scan", "level", "code", "severity", "flag"]
        ),
        convergence=_convergence(values, campaign, basis_counts),
        totals={s: int(counts.get(s, 0)) for s in ("done", "failed", "pending")},
        ranking=_statistics(
            values, reference_values, levels, reference_level, common_curve_statistics
        ),
        sets=sets,
        set_members=set_members,
        stationary=stationary if stationary is not None else pd.DataFrame(),
        **(
            {}
            if refinement is None
            else {"refinement": refinement[0], "refinement_points": refinement[1]}
        ),
    )
