"""The stationary-point table: one row per minimum, maximum and 2-D saddle per curve and level.

Long format, from the points table: each curve's (or surface's) stationary points as
:mod:`pesflow.analysis.stationary` finds them, with

* ``kind`` (``minimum``, ``maximum``, ``saddle``) and the position in the columns of the
  scan's coordinates, named with their unit (``dihedral_degree``, ``r_angstrom``,
  ``r2_angstrom``; :func:`pesflow.coordinates.kinds.column_names`), in the canonical form of
  the curve's symmetry, and ``found_<column>`` where it was found;
* ``energy_hartree`` and the energy above the curve's global minimum in ``relative_kcal_mol``,
  ``relative_kj_mol``, ``relative_cm-1``, ``relative_ev``;
* ``equivalent_copy`` (True for a point equivalent by symmetry to another one of the curve,
  e.g. the second mirror-image minimum of a torsion), ``n_equivalent`` (copies of it on the
  curve, itself included) and the curve's symmetry (``symmetry_mirror``, ``symmetry_fold``,
  ``symmetry_swap``);
* with ``compare.reference_level``: ``dev_<column>`` and ``dev_relative_<unit>`` against the
  reference level's stationary point of the same kind at the nearest equivalent position
  (``reference_level`` names it).

The summary keeps its one ``barrier_*`` per curve; this table has every point.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from pesflow.analysis.barriers import ENERGY_UNITS
from pesflow.analysis.stationary import (
    match_deviation,
    stationary_points_of_curve,
    stationary_points_of_surface,
)
from pesflow.analysis.symmetry import NONE, Symmetry
from pesflow.coordinates.kinds import column_names
from pesflow.tables.summary import curve_groups, surface_energies

HEAD = ["campaign", "molecule", "scan", "level", "method", "basis", "coordinates", "kind"]
ENERGY = [
    "energy_hartree",
    *(f"relative_{u}" for u in ENERGY_UNITS),
    "equivalent_copy",
    "n_equivalent",
    *NONE.columns(),
]


def stationary_table(campaign, plan, table: pd.DataFrame) -> pd.DataFrame:
    """Every stationary point of every curve and level (columns in the module docstring).

    ``table`` is the campaign's points table (all columns).
    """
    rows, position_columns = [], []
    for gs, level, sub in curve_groups(plan, table):
        kinds = tuple(gs.coordinate_kinds)
        columns = column_names(kinds)
        position_columns += [c for c in columns if c not in position_columns]
        if len(kinds) == 1:
            sub = sub.sort_values("walk")
            energies = np.where(sub["status"] == "done", sub["energy_hartree"], np.nan)
            points = stationary_points_of_curve(
                kinds[0], sub[columns[0]].to_numpy(float), energies.astype(float)
            )
        else:
            q1, q2, grid = surface_energies(campaign, gs, sub)
            points = stationary_points_of_surface(q1, q2, grid, kinds)
        head = {
            "campaign": campaign.name,
            "molecule": gs.molecule,
            "scan": gs.scan,
            "level": level,
            "method": sub["method"].iloc[0],
            "basis": sub["basis"].iloc[0],
            "coordinates": ", ".join(c.label for c in campaign.scans[gs.scan].coordinates),
        }
        for p in points:
            row = {**head, "kind": p["kind"]}
            for c, v, f in zip(columns, p["position"], p["found_at"], strict=True):
                row[c], row[f"found_{c}"] = v, f
            row.update({k: p[k] for k in ENERGY})
            row["_kinds"] = kinds
            rows.append(row)
    found = [f"found_{c}" for c in position_columns]
    frame = pd.DataFrame(rows, columns=[*HEAD, *position_columns, *found, *ENERGY, "_kinds"])
    frame = add_stationary_deviations(
        frame, campaign.spec.compare.reference_level, position_columns
    )
    return frame.drop(columns="_kinds")


def add_stationary_deviations(
    frame: pd.DataFrame, reference_level: str | None, position_columns
) -> pd.DataFrame:
    """Add ``dev_<position column>`` and ``dev_relative_<unit>`` against the reference level's
    stationary point of the same kind at the nearest equivalent position (same molecule and
    scan; the symmetry both curves have), and ``reference_level``."""
    if not reference_level or frame.empty:
        return frame
    reference_level = reference_level.strip().lower()
    out = frame.copy()
    dev_cols = [f"dev_{c}" for c in position_columns] + [f"dev_relative_{u}" for u in ENERGY_UNITS]
    devs = {c: np.full(len(out), np.nan) for c in dev_cols}
    refs = {}
    for key, sub in out[out["level"] == reference_level].groupby(["molecule", "scan"], sort=False):
        refs[key] = sub
    for i, (_, row) in enumerate(out.iterrows()):
        ref = refs.get((row["molecule"], row["scan"]))
        if ref is None:
            continue
        kinds = row["_kinds"]
        columns = column_names(kinds)
        symmetry = Symmetry.of_row(row).common(Symmetry.of_row(ref.iloc[0]) if len(ref) else NONE)
        candidates = [
            {"kind": r["kind"], "position": tuple(r[c] for c in columns), "row": r}
            for _, r in ref[~ref["equivalent_copy"].astype(bool)].iterrows()
        ]
        mine = {"kind": row["kind"], "position": tuple(row[c] for c in columns)}
        dev, match = match_deviation(kinds, mine, candidates, symmetry)
        if match is None:
            continue
        for c, d in zip(columns, dev, strict=True):
            devs[f"dev_{c}"][i] = d
        for u in ENERGY_UNITS:
            devs[f"dev_relative_{u}"][i] = row[f"relative_{u}"] - match["row"][f"relative_{u}"]
    for c in dev_cols:
        out[c] = devs[c]
    out["reference_level"] = reference_level
    return out
