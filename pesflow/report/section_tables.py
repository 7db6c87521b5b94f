"""Tables of single report sections, built from the points table, the summary table or
:class:`~pesflow.report.tables.ReportData`: the cost per level, the basis-set convergence
(with :func:`cardinal_number`), the statistics of each molecule set, and the stationary
points as text rows."""

from __future__ import annotations

import re
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

from pesflow.analysis.quantities import QUANTITIES as ALL_QUANTITIES
from pesflow.coordinates.kinds import KINDS
from pesflow.report.formatting import _decimals, _position_head, fmt_dev, fmt_value
from pesflow.tables.summary import ENVELOPE

if TYPE_CHECKING:
    from pesflow.report.tables import ReportData


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
