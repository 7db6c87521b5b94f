"""Join a campaign's plan with the store: the points table and status counts.

Pure table work on what the store returns; used by ``status``, ``export``,
``report`` and by the end of ``run``.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd

from pesflow.plan.expand import Plan, points_frame
from pesflow.tables.derived import (
    NEEDED_COLUMNS,
    add_derived_rows,
    add_interaction_columns,
    derived_levels,
)
from pesflow.tables.states import add_state_columns

#: Columns of the exported points table, in order (coordinate columns follow ``scan``).
LEADING = ["campaign", "molecule", "scan", "role", "level", "method", "basis", "state", "walk"]
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
    derived = derived_levels(plan)
    if columns is not None:
        wanted = sorted(
            set(columns) | {"key", "converged"} | set(NEEDED_COLUMNS if derived else ())
        )
    records = store.load(keys=set(frame["key"]), columns=wanted) if store.exists() else None
    if records is not None and records.num_rows:
        rec = records.to_pandas()
        rec = rec.drop(columns=[c for c in ("method", "basis") if c in rec.columns])
        frame = frame.merge(rec, on="key", how="left")
    else:
        frame["converged"] = pd.Series([pd.NA] * len(frame), dtype="object")
    # An empty (or not yet created) store still gives every column, so that a report or
    # a summary before the first run shows pending points instead of failing.
    for col in wanted if wanted is not None else [c for c in TRAILING if c != "status"]:
        if col not in frame.columns:
            frame[col] = np.nan
    if derived:  # CBS levels: rows made from their members' stored energies
        frame = add_derived_rows(plan, frame)
    frame["status"] = _status_of(frame["converged"])
    frame = add_state_columns(frame, plan)
    if "extra_json" in frame.columns:
        occupations = natural_occupations(frame["extra_json"])
        if occupations.notna().any():
            frame["natural_occupations"] = occupations
    if "energy_hartree" in frame.columns:  # counterpoise scans: interaction energies per point
        frame = add_interaction_columns(plan, frame)
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


def natural_occupations(extra_json: pd.Series) -> pd.Series:
    """The natural occupations of each point's active orbitals (multireference levels),
    as text, largest first, separated by spaces (``"1.991 1.964 0.035"``); None for
    points without an active space."""

    def one(text):
        if not isinstance(text, str) or "natural_occupations" not in text:
            return None
        occ = json.loads(text).get("active_space", {}).get("natural_occupations")
        return None if occ is None else " ".join(f"{n:.6f}" for n in occ)

    return extra_json.map(one)


def status_counts(table: pd.DataFrame, molecules=None, levels=None) -> pd.DataFrame:
    """Counts of done / failed / pending points per molecule and level.

    Rows follow ``molecules`` and ``levels`` (the spec's order, as ``plan`` shows them);
    names not listed, or all when none are given, follow in the table's own order.
    """
    counts = (
        table.groupby(["molecule", "level", "status"], sort=False)
        .size()
        .unstack("status", fill_value=0)
    )
    for col in ("done", "failed", "pending"):
        if col not in counts.columns:
            counts[col] = 0
    counts = counts[["done", "failed", "pending"]].reset_index()
    rank_m = {m: i for i, m in enumerate(molecules or ())}
    rank_l = {lvl: i for i, lvl in enumerate(levels or ())}
    first_m = {m: i for i, m in enumerate(dict.fromkeys(counts["molecule"]))}
    first_l = {lvl: i for i, lvl in enumerate(dict.fromkeys(counts["level"]))}
    order = sorted(
        range(len(counts)),
        key=lambda i: (
            rank_m.get(
                counts["molecule"].iloc[i], len(rank_m) + first_m[counts["molecule"].iloc[i]]
            ),
            rank_l.get(counts["level"].iloc[i], len(rank_l) + first_l[counts["level"].iloc[i]]),
        ),
    )
    return counts.iloc[order].reset_index(drop=True)


def failed_points(table: pd.DataFrame) -> pd.DataFrame:
    """The failed points with their error text."""
    return table[table["status"] == "failed"]
