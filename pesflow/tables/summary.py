"""The summary table: one row per curve (molecule x scan x level) of derived quantities.

Takes the points table (:func:`pesflow.tables.points.points_table`) and hands each
curve's arrays to the pure functions of :mod:`pesflow.analysis`.  Masses are
the exact masses of the most abundant isotopes, with the spec's per-atom
overrides.  For a bond of a diatomic the reduced mass gives omega_e; for a
stretch inside a polyatomic molecule the reduced mass of the two rigid fragments
gives a 1-D wavenumber along the scan coordinate, labelled as such.  Deviations
from ``compare.reference_level`` are added as ``dev_<column>`` (this level minus
the reference level, same molecule and scan).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from pesflow.analysis.derived import summarize_curve, summarize_surface
from pesflow.analysis.quantities import COMPARED
from pesflow.coordinates.kinds import KINDS, column_names
from pesflow.tables.states import add_state_quantities

_RESTRICTED = {"RHF", "RKS"}


def _fragment_energies(table, molecule, level, n_fragments):
    if n_fragments != 2:
        return None
    sub = table[
        (table["role"] == "fragment") & (table["molecule"] == molecule) & (table["level"] == level)
    ]
    energies = []
    for f in (1, 2):
        row = sub[sub["scan"] == f"fragment-{f}"]
        if len(row) != 1 or row["status"].iloc[0] != "done":
            return None
        energies.append(float(row["energy_hartree"].iloc[0]))
    return tuple(energies)


def _stretch_mass(campaign, molecule, scan):
    mol = campaign.molecules[molecule]
    masses = np.asarray(mol.masses_amu, dtype=float)
    moving = np.asarray(campaign.scans[scan].moving[molecule][0], dtype=int)
    fixed = np.setdiff1d(np.arange(len(masses)), moving)
    m_a, m_b = masses[moving].sum(), masses[fixed].sum()
    return m_a * m_b / (m_a + m_b), len(masses) == 2


def _curve_row(campaign, gs, sub, table):
    kind = gs.coordinate_kinds[0]
    column = column_names(gs.coordinate_kinds)[0]
    sub = sub.sort_values("walk")
    energies = np.where(sub["status"] == "done", sub["energy_hartree"], np.nan).astype(float)
    refs = set(sub.loc[sub["status"] == "done", "reference"].dropna())
    options = {}
    if KINDS[kind].motion == "stretch":
        mu, diatomic = _stretch_mass(campaign, gs.molecule, gs.scan)
        mol = campaign.molecules[gs.molecule]
        options = dict(
            reduced_mass_amu=mu,
            diatomic=diatomic,
            fragment_energies_hartree=_fragment_energies(
                table, gs.molecule, sub["level"].iloc[0], len(mol.fragments)
            ),
            restricted_closed_shell_reference=bool(refs) and refs <= _RESTRICTED,
        )
    return summarize_curve(kind, sub[column].to_numpy(float), energies, **options)


def _surface_row(campaign, gs, sub):
    scan = campaign.scans[gs.scan]
    q1, q2 = (c.values for c in scan.coordinates)
    grid = np.full((len(q1), len(q2)), np.nan)
    idx = gs.grid_indices[sub["walk"].to_numpy(int)]
    done = (sub["status"] == "done").to_numpy()
    grid[idx[done, 0], idx[done, 1]] = sub["energy_hartree"].to_numpy(float)[done]
    return summarize_surface(q1, q2, grid, kinds=gs.coordinate_kinds)


def summary_table(campaign, plan, table: pd.DataFrame) -> pd.DataFrame:
    """One row per curve with its derived quantities and deviations from the reference level.

    ``table`` is the campaign's points table (all columns).
    """
    rows = []
    scans = table[table["role"] == "scan"]
    scans = scans.assign(set_id=_set_ids(plan, scans))
    if "state" not in scans:
        scans = scans.assign(state=0)
    for (set_id, level, state), sub in scans.groupby(["set_id", "level", "state"], sort=False):
        gs = plan.geometry_sets[int(set_id)]
        if len(gs.coordinate_kinds) == 1:
            row = _curve_row(campaign, gs, sub, table)
        else:
            row = _surface_row(campaign, gs, sub)
        head = {
            "campaign": campaign.name,
            "molecule": gs.molecule,
            "scan": gs.scan,
            "level": level,
            "method": sub["method"].iloc[0],
            "basis": sub["basis"].iloc[0],
            "state": int(state),
            "coordinates": ", ".join(c.label for c in campaign.scans[gs.scan].coordinates),
            "n_done": int((sub["status"] == "done").sum()),
            "n_failed": int((sub["status"] == "failed").sum()),
            "n_pending": int((sub["status"] == "pending").sum()),
            "cost_core_s": float(sub["wall_s"].fillna(0).sum()) if "wall_s" in sub else np.nan,
        }
        # The analysis counts pending points as failed too; the status is what counts here.
        rows.append({**head, **row, "n_failed": head["n_failed"]})
    summary = pd.DataFrame(rows)
    if summary.empty:
        return summary
    summary = add_state_quantities(summary, plan, scans)
    return add_deviations(summary, campaign.spec.compare.reference_level)


def _set_ids(plan, frame):
    lookup = {(gs.molecule, gs.scan): gs.set_id for gs in plan.geometry_sets}
    return [lookup[(m, s)] for m, s in zip(frame["molecule"], frame["scan"])]


def add_deviations(summary: pd.DataFrame, reference_level: str | None) -> pd.DataFrame:
    """Add ``dev_<column>`` = value - value at ``reference_level`` (same molecule and scan)."""
    if not reference_level:
        return summary
    reference_level = reference_level.strip().lower()
    cols = [c for c in COMPARED if c in summary.columns]
    on = ["molecule", "scan", "state"] if "state" in summary.columns else ["molecule", "scan"]
    ref = summary.loc[summary["level"] == reference_level, [*on, *cols]]
    joined = summary[on].merge(
        ref.rename(columns={c: f"{c}__ref" for c in cols}), on=on, how="left"
    )
    out = summary.copy()
    for c in cols:
        out[f"dev_{c}"] = summary[c].to_numpy(float) - joined[f"{c}__ref"].to_numpy(float)
    out["reference_level"] = reference_level
    return out
