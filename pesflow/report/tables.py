"""The report's tables, built from the points table and the summary table (no computation).

Everything the HTML page, the Markdown summary and the CSV files show is assembled here into
one :class:`ReportData`: the derived quantities per curve and level with their deviations
(from the summary's ``dev_<column>`` columns, never recomputed), the comparison with the
user's reference values, error statistics per level, the cost per level, what is missing,
and the summary's flags split into single warnings and attached to the quantities they
concern.
"""

from __future__ import annotations

import functools
import re
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from pesflow.analysis.flags import FLAG_KINDS, Flag, flags_from_records
from pesflow.analysis.quantities import QUANTITIES as ALL_QUANTITIES
from pesflow.analysis.quantities import Quantity, deviation, uncertainty_column
from pesflow.analysis.symmetry import Symmetry
from pesflow.coordinates.kinds import KINDS, UNIT_TEXT, column_names
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


def cardinal_number(basis: str) -> int | None:
    """Cardinal number X of a correlation-consistent or Karlsruhe basis set, else None.

    cc-pVXZ / aug-cc-pVXZ (X = D, T, Q, 5, 6) and def2-SVP / TZVP / QZVP (2, 3, 4).

    >>> cardinal_number("aug-cc-pvtz"), cardinal_number("def2-svp"), cardinal_number("6-31g")
    (3, 2, None)
    """
    b = basis.strip().lower()
    m = re.search(r"cc-p(?:w?c)?v([dtq56])z", b)
    if m:
        return {"d": 2, "t": 3, "q": 4, "5": 5, "6": 6}[m.group(1)]
    m = re.fullmatch(r"def2-(svp|svpd|tzvpp?d?|qzvpp?d?)", b)
    if m:
        return {"s": 2, "t": 3, "q": 4}[m.group(1)[0]]
    return None


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
    #: (:func:`set_statistics`); empty when the campaign has no molecule sets
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


def _cost_table(points, levels, reference_level):
    rows = []
    for level in levels:
        sub = points[points["level"] == level]
        stored = sub[sub["status"] != "pending"]
        core_s = (
            float(pd.to_numeric(stored.get("wall_s"), errors="coerce").fillna(0).sum())
            if "wall_s" in sub
            else float("nan")
        )
        n = {s: int((sub["status"] == s).sum()) for s in ("done", "failed", "pending")}
        computed = n["done"] + n["failed"]
        rows.append(
            {
                "level": level,
                "method": sub["method"].iloc[0] if len(sub) else level.split("/")[0],
                "basis": sub["basis"].iloc[0] if len(sub) else level.partition("/")[2],
                "core_s": core_s,
                "points_done": n["done"],
                "points_failed": n["failed"],
                "points_pending": n["pending"],
                "points_total": len(sub),
                "core_s_per_point": core_s / computed if computed else float("nan"),
            }
        )
    cost = pd.DataFrame(
        rows,
        columns=[
            "level",
            "method",
            "basis",
            "core_s",
            "points_done",
            "points_failed",
            "points_pending",
            "points_total",
            "core_s_per_point",
        ],
    )
    ref = cost[cost["level"] == reference_level]
    per_point = float(ref["core_s_per_point"].iloc[0]) if len(ref) else float("nan")
    cost["cost_vs_reference"] = (
        cost["core_s_per_point"] / per_point if per_point > 0 else float("nan")
    )
    return cost


def _basis_counts(campaign, pairs) -> dict[tuple[str, str], int]:
    """Number of basis functions of each (molecule, basis) pair (PySCF's count)."""
    from pesflow.plan.cost import basis_function_counts

    return basis_function_counts(campaign, pairs)


def _convergence(values, campaign, basis_counts):
    """Quantity against basis-set size for every method computed with two or more bases."""
    columns = ["molecule", "scan", "quantity", "method", "basis", "nbf", "cardinal", "value"]
    finite = values[values["state"] == "value"]
    # a CBS level has no basis-set size; it is a level of its own in every other table
    finite = finite[~finite["basis"].astype(str).str.startswith("cbs(")]
    bases_per_method = finite.groupby(["molecule", "scan", "quantity", "method"])["basis"].nunique()
    wanted = bases_per_method[bases_per_method >= 2]
    if wanted.empty:
        return pd.DataFrame(columns=columns)
    if basis_counts is None:
        pairs = set(zip(finite["molecule"], finite["basis"]))
        basis_counts = _basis_counts(campaign, pairs)
    rows = []
    for (molecule, scan, quantity, method), _ in wanted.items():
        sub = finite[
            (finite["molecule"] == molecule)
            & (finite["scan"] == scan)
            & (finite["quantity"] == quantity)
            & (finite["method"] == method)
        ]
        for _, row in sub.iterrows():
            rows.append(
                {
                    "molecule": molecule,
                    "scan": scan,
                    "quantity": quantity,
                    "method": method,
                    "basis": row["basis"],
                    "nbf": basis_counts.get((molecule, row["basis"]), np.nan),
                    "cardinal": cardinal_number(row["basis"]),
                    "value": row["value"],
                }
            )
    out = pd.DataFrame(rows, columns=columns)
    return out.sort_values(["quantity", "molecule", "scan", "method", "nbf"], ignore_index=True)


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


#: Columns of :func:`set_statistics`'s statistics table.
SET_COLUMNS = (
    "set", "rule", "level", "quantity", "n_molecules", "n_curves", "n_complete",
    "median", "minimum", "maximum",
)  # fmt: skip


def set_statistics(summary: pd.DataFrame) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Statistics of each molecule set, rule and level over its members, and the member rows.

    Only rows of molecules from a set count; a member with several conformers counts once,
    through its lower envelope.  For every shown curve quantity that some member has, the
    median, minimum and maximum over the set's curves (NaN-free values only); ``n_curves``
    counts every curve of the set and rule at that level, ``n_complete`` those with every
    point done.  A torsion's minimum position has no statistics (its zero is a convention of
    each molecule's four atoms).  ``rule`` is ``"atoms by number"`` for a scan that names its atoms.

    Returns ``(statistics, members)``: the statistics (columns :data:`SET_COLUMNS`) and the
    summary rows they come from, sorted by set, rule, molecule and scan.
    """
    empty = pd.DataFrame(columns=list(SET_COLUMNS))
    if summary is None or summary.empty or "set" not in summary:
        return empty, pd.DataFrame()
    rows = summary[summary["set"].fillna("") != ""]
    if "conformer" in rows:
        conformer = rows["conformer"].astype(str)
        envelope = rows[conformer == ENVELOPE]
        covered = set(zip(envelope["molecule"], envelope["scan"], envelope["level"]))
        member = rows["molecule"].str.replace(r"/c\d+$", "", regex=True)
        is_conformer = conformer.str.match(r"^c\d+$")
        replaced = [
            c and (m, sc, lv) in covered
            for c, m, sc, lv in zip(is_conformer, member, rows["scan"], rows["level"])
        ]
        rows = rows[~np.asarray(replaced, dtype=bool)]
    if rows.empty:
        return empty, pd.DataFrame()
    rows = rows.assign(rule=rows["rule"].fillna("").replace("", "atoms by number"))
    # The position of a periodic coordinate's minimum (a torsion's) differs from molecule to
    # molecule by convention alone (which four atoms, which end of 0..360), so it has no
    # statistics across a set.
    quantities = [
        q
        for q in ALL_QUANTITIES
        if q.curve and q.shown and q.headline and q.column in rows
        and not (q.position_of and KINDS[q.position_of].period)
    ]  # fmt: skip
    out = []
    for (set_name, rule, level), sub in rows.groupby(["set", "rule", "level"], sort=False):
        complete = int(((sub["n_failed"] == 0) & (sub["n_pending"] == 0)).sum())
        for q in quantities:
            values = pd.to_numeric(sub[q.column], errors="coerce").dropna()
            if values.empty:
                continue
            out.append(
                {
                    "set": set_name, "rule": rule, "level": level, "quantity": q.column,
                    "n_molecules": int(sub.loc[values.index, "molecule"].nunique()),
                    "n_curves": len(sub), "n_complete": complete,
                    "median": float(values.median()), "minimum": float(values.min()),
                    "maximum": float(values.max()),
                }
            )  # fmt: skip
    members = rows.sort_values(["set", "rule", "molecule", "scan"], kind="stable")
    return pd.DataFrame(out, columns=list(SET_COLUMNS)), members.reset_index(drop=True)


#: What the stationary-point tables show, said once above them (HTML and Markdown).
STATIONARY_EXPLAIN = (
    "Every minimum and maximum of each curve (minima, saddles and maxima of a surface) at "
    "each level, with its energy above the curve's global minimum. Positions are in the "
    "canonical form of the curve's symmetry, found from the energies: a full-circle torsion "
    "with E(φ) = E(360 − φ) is given in [0, 180] degree, an n-fold rotor in [0, 360/n) "
    "([0, 180/n] with the mirror), a symmetric 2-D grid with q1 ≤ q2. Points equivalent by "
    "that symmetry are one point (copies: how many the curve has). Δ: this level minus the "
    "reference level's point of the same kind at the nearest equivalent position. "
    "stationary.csv has every row, copies included, and the energies in kJ/mol and eV too."
)
#: Headers of the report's stationary-point tables (after level, kind and the position).
STATIONARY_ENERGY_HEAD = ("E − E_min (kcal/mol)", "(cm⁻¹)")


def stationary_tables(d: ReportData) -> list[tuple[str, str, list[str], list[list[str]]]]:
    """The stationary points as the report shows them: per curve ``(molecule, scan, header,
    rows)`` of text cells, one row per stationary point and level (equivalent copies folded
    into their canonical point, counted under "copies")."""
    st = d.stationary
    if st is None or st.empty:
        return []
    out = []
    # The page shows kcal/mol and cm-1 (it must fit an 800-pixel window); the CSV has all four.
    units = ("kcal_mol", "cm-1")
    decimals = (2, 1)
    for (molecule, scan), sub in st.groupby(["molecule", "scan"], sort=False):
        position = [c for c in sub.columns if c.endswith(("_angstrom", "_degree"))]
        position = [
            c for c in position if not c.startswith(("found_", "dev_")) and sub[c].notna().any()
        ]
        header = ["level", "kind"] + [_position_head(c) for c in position]
        header += list(STATIONARY_ENERGY_HEAD) + ["copies"]
        ref = "reference_level" in sub and d.reference_level
        if ref:
            header += [f"Δ {_position_head(c)}" for c in position] + ["Δ E (kcal/mol)"]
        rows = []
        order = {lvl: i for i, lvl in enumerate(d.levels)}
        sub = sub[~sub["equivalent_copy"].astype(bool)]
        kind_order = {k: i for i, k in enumerate(("minimum", "saddle", "maximum"))}
        sub = sub.assign(_o=sub["level"].map(order), _k=sub["kind"].map(kind_order))
        sub = sub.sort_values(["_o", "_k", *position], kind="stable")
        for _, r in sub.iterrows():
            cells = [str(r["level"]), str(r["kind"])]
            cells += [fmt_value(r[c], _decimals(c)) for c in position]
            cells += [fmt_value(r[f"relative_{u}"], k) for u, k in zip(units, decimals)]
            n = int(r.get("n_equivalent", 1))
            cells.append(str(n) if n > 1 else "")
            if ref:
                cells += [fmt_dev(r.get(f"dev_{c}"), _decimals(c)) for c in position]
                cells.append(fmt_dev(r.get("dev_relative_kcal_mol"), 2))
            rows.append(cells)
        out.append((molecule, scan, header, rows))
    return out


def _position_head(column: str) -> str:
    name, unit = column.rsplit("_", 1)
    return f"{name} ({UNIT_TEXT.get(unit, unit)})"


def _decimals(column: str) -> int:
    return max((k.decimals for k in KINDS.values() if column.endswith(k.unit)), default=4)


def curve_arrays(campaign, points: pd.DataFrame, molecule: str, scan: str, level: str):
    """The scanned points of one curve at one level, in walk order.

    Returns ``(q, energy_hartree, status)``: ``q`` of shape (m, k) in the coordinates' units
    (k = 1 or 2), energies NaN where not done, ``status`` the points' status strings.
    """
    kinds = tuple(c.kind for c in campaign.scans[scan].coordinates)
    cols = column_names(kinds)
    sub = points[
        (points["molecule"] == molecule) & (points["scan"] == scan) & (points["level"] == level)
    ]
    if "role" in sub:
        sub = sub[sub["role"] == "scan"]
    sub = sub.sort_values("walk")
    status = sub["status"].to_numpy(dtype=object)
    energy = (
        np.where(
            status == "done", pd.to_numeric(sub["energy_hartree"], errors="coerce"), np.nan
        ).astype(float)
        if len(sub)
        else np.zeros(0)
    )
    q = sub[cols].to_numpy(dtype=float) if len(sub) else np.zeros((0, len(cols)))
    return q, energy, status


def surface_grid(campaign, points: pd.DataFrame, molecule: str, scan: str, level: str):
    """The points of one 2-D scan at one level on their grid.

    Returns ``(q1, q2, energy_hartree, status)``: the axis values in the spec's order and
    units, and arrays of shape (len(q1), len(q2)): energies (NaN where not done) and the
    points' status strings (``"pending"`` where the points table has no row).
    """
    s = campaign.scans[scan]
    q1, q2 = (np.asarray(c.values, dtype=float) for c in s.coordinates)
    energy = np.full((len(q1), len(q2)), np.nan)
    status = np.full((len(q1), len(q2)), "pending", dtype=object)
    sub = points[
        (points["molecule"] == molecule) & (points["scan"] == scan) & (points["level"] == level)
    ]
    if "role" in sub:
        sub = sub[sub["role"] == "scan"]
    index = s.grid_indices()
    walk = sub["walk"].to_numpy(dtype=int)
    i, j = index[walk, 0], index[walk, 1]
    st = sub["status"].to_numpy(dtype=object)
    status[i, j] = st
    e = pd.to_numeric(sub["energy_hartree"], errors="coerce").to_numpy(dtype=float)
    energy[i, j] = np.where(st == "done", e, np.nan)
    return q1, q2, energy, status


def fmt_value(value, decimals: int) -> str:
    """A value as shown in the report's tables (``""`` for NaN).

    >>> fmt_value(0.901489, 4), fmt_value(float("nan"), 2)
    ('0.9015', '')
    """
    try:
        v = float(value)
    except (TypeError, ValueError):
        return ""
    return f"{v:.{decimals}f}" if np.isfinite(v) else ""


def fmt_value_u(value, uncertainty, decimals: int) -> str:
    """A value with its standard uncertainty, compact: ``"4138.3 ± 0.4"``.

    The uncertainty gets one significant figure (two when it starts with 1 or 2) and the
    value as many decimals, at most ``decimals``; an uncertainty below the last shown decimal
    is written with one significant figure.  Without a (finite) uncertainty: the value alone.

    >>> fmt_value_u(4138.3421, 0.43, 1), fmt_value_u(4138.3421, 12.4, 1)
    ('4138.3 ± 0.4', '4138 ± 12')
    >>> fmt_value_u(0.916812, 3e-9, 4), fmt_value_u(1.5, float("nan"), 2)
    ('0.9168 ± 3e-09', '1.50')
    """
    text = fmt_value(value, decimals)
    try:
        u = float(uncertainty)
    except (TypeError, ValueError):
        return text
    if not text or not np.isfinite(u) or u < 0:
        return text
    if u < 0.5 * 10.0 ** (-decimals):
        return f"{text} ± {u:.1g}"
    exponent = int(np.floor(np.log10(u)))
    digits = 2 if f"{u:.1e}"[0] in "12" else 1
    places = min(decimals, max(0, digits - 1 - exponent))
    return f"{float(value):.{places}f} ± {u:.{places}f}"


def fmt_dev(value, decimals: int) -> str:
    """A deviation with its sign, as shown in the report's tables (``""`` for NaN).

    >>> fmt_dev(-0.0178583, 4), fmt_dev(0.0, 1)
    ('-0.0179', '+0.0')
    """
    try:
        v = float(value)
    except (TypeError, ValueError):
        return ""
    return f"{v:+.{decimals}f}" if np.isfinite(v) else ""


def fmt_seconds(value) -> str:
    """Core-seconds with three significant figures (``""`` for NaN).

    >>> fmt_seconds(0.84913), fmt_seconds(59.83)
    ('0.849', '59.8')
    """
    try:
        v = float(value)
    except (TypeError, ValueError):
        return ""
    return f"{v:.3g}" if np.isfinite(v) else ""


def fmt_ratio(value) -> str:
    """A cost ratio as shown in the report (``"17x"``; ``""`` for NaN)."""
    try:
        v = float(value)
    except (TypeError, ValueError):
        return ""
    return f"{v:.2g}x" if np.isfinite(v) else ""


def scan_label(curves: pd.DataFrame, molecule: str, scan: str, column: str) -> str:
    """The scan's name; for ``q1_*`` / ``q2_*`` of a 2-D scan, with the coordinate it is.

    ``curves`` is the summary table (its ``coordinates`` column, e.g. ``"r(1-2), angle(2-1-3)"``).
    """
    if not column.startswith(("q1_", "q2_")) or "coordinates" not in curves:
        return scan
    rows = curves[(curves["molecule"] == molecule) & (curves["scan"] == scan)]
    labels = str(rows["coordinates"].iloc[0]).split(", ") if len(rows) else []
    k = int(column[1]) - 1
    return f"{scan} (q{k + 1} = {labels[k]})" if k < len(labels) else scan
