"""The computed points of one curve or one 2-D scan at one level as arrays (in walk order,
or on the scan's grid), for the figures of :mod:`pesflow.report.plots`."""

from __future__ import annotations

import numpy as np
import pandas as pd

from pesflow.coordinates.kinds import column_names


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
