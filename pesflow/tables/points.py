"""Join a campaign's plan with the store: the points table and status counts.

Pure table work on what the store returns; used by ``status``, ``export``,
``report`` and by the end of ``run``.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from pesflow.plan.expand import Plan, points_frame

#: Columns of the exported points table, in order (coordinate columns follow ``scan``).
LEADING = ["campaign", "molecule", "scan", "role", "level", "method", "basis", "walk"]
TRAILING = [
    "status",
    "energy_hartree",
    "converged",
    "scf_cycles",
    "wall_s",
    "step_wall_s",
    "s2",
    "reference",
    "symbols",
    "positions_angstrom",
    "charge",
    "multiplicity",
    "key",
    "engine",
    "engine_version",
    "attempts_json",
    "extra_json",
    "error",
]
STATUS_COLUMNS = ["key", "converged", "error", "wall_s", "energy_hartree"]


def _status_of(converged) -> np.ndarray:
    out = np.where(converged.isna(), "pending", "failed").astype(object)
    out[converged.fillna(False).astype(bool).to_numpy()] = "done"
    return out


def points_table(plan: Plan, store, columns=None) -> pd.DataFrame:
    """Every point of the plan with its stored result (``status``: done / failed / pending).

    ``columns`` limits what is read from the store (``key`` and ``converged`` are
    always read).
    """
    frame = points_frame(plan)
    wanted = None
    if columns is not None:
        wanted = sorted(set(columns) | {"key", "converged"})
    records = store.load(keys=set(frame["key"]), columns=wanted) if store.exists() else None
    if records is not None and records.num_rows:
        rec = records.to_pandas()
        rec = rec.drop(columns=[c for c in ("method", "basis") if c in rec.columns])
        frame = frame.merge(rec, on="key", how="left")
    else:
        frame["converged"] = pd.Series([pd.NA] * len(frame), dtype="object")
    for col in wanted or ():
        if col not in frame.columns:
            frame[col] = np.nan
    frame["status"] = _status_of(frame["converged"])
    frame.insert(0, "campaign", plan.campaign)
    coord = [
        c
        for c in frame.columns
        if c.endswith(("_angstrom", "_degree")) and c != "positions_angstrom"
    ]
    order = [c for c in LEADING if c in frame.columns] + coord
    order += [c for c in TRAILING if c in frame.columns]
    order += [c for c in frame.columns if c not in order and c not in ("set_id", "family")]
    return frame[order]


def status_counts(table: pd.DataFrame) -> pd.DataFrame:
    """Counts of done / failed / pending points per molecule and level."""
    counts = table.groupby(["molecule", "level", "status"]).size().unstack("status", fill_value=0)
    for col in ("done", "failed", "pending"):
        if col not in counts.columns:
            counts[col] = 0
    counts = counts[["done", "failed", "pending"]].reset_index()
    return counts


def failed_points(table: pd.DataFrame) -> pd.DataFrame:
    """The failed points with their error text."""
    return table[table["status"] == "failed"]
