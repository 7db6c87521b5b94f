"""Electronic states in the points table: one row per state, each state its own curve.

A multi-state level (TDA, TDDFT, CIS, EOM-CCSD; :attr:`pesflow.engine.MethodInfo.n_states`)
has one point per geometry and state; the plan's ``state`` column is the state's index
by energy at that point (0 the ground state), and each record's ``extra_json["state"]``
holds its label, point-group symmetry, excitation energy, oscillator strength and its
overlaps with the walk's previous point.  Here those become columns, and for a level
whose states are followed by character the ``state`` column is renumbered into curves
(:func:`pesflow.analysis.states.follow_states`); ``adiabatic_state`` keeps the index by
energy.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd

from pesflow.analysis.states import follow_states
from pesflow.engine import method_info

#: Columns added to the points table for the states of multi-state levels.
STATE_COLUMNS = ["adiabatic_state", "state_label", "state_symmetry", "excitation_energy_ev",
                 "oscillator_strength"]  # fmt: skip
#: Largest difference (angstrom) between a stored neighbour's coordinates and the walk's
#: previous point for the overlaps to count as a link between them.
SAME_POSITION_ANGSTROM = 1e-6


def _state_info(text):
    if not isinstance(text, str) or '"state"' not in text:
        return {}
    return json.loads(text).get("state", {})


def add_state_columns(frame: pd.DataFrame, plan) -> pd.DataFrame:
    """The points table with :data:`STATE_COLUMNS` and followed ``state`` numbers (only
    when the plan has a multi-state level; otherwise ``frame`` unchanged)."""
    multi = [m for m in frame["method"].unique() if method_info(m).n_states > 1]
    if not multi:
        return frame
    frame = frame.copy()
    infos = (
        frame["extra_json"].map(_state_info)
        if "extra_json" in frame
        else pd.Series([{}] * len(frame), index=frame.index)
    )
    frame["adiabatic_state"] = frame["state"]
    frame["state_label"] = [i.get("label") for i in infos]
    # point-group label at that geometry (Abelian subgroup), "" where none is reliable
    frame["state_symmetry"] = [i.get("symmetry") for i in infos]
    frame["excitation_energy_ev"] = [i.get("excitation_energy_ev", np.nan) for i in infos]
    frame["oscillator_strength"] = [i.get("oscillator_strength", np.nan) for i in infos]
    for method in multi:
        if not method_info(method).follow_states:
            continue
        rows = frame.index[frame["method"] == method]
        for _, sub in frame.loc[rows].groupby(["set_id", "basis"], sort=False):
            walk = walk_states(sub, plan)
            following = follow_states(walk["overlaps"], walk["n"], walk["energies"])
            curve = {}  # (walk, adiabatic index) -> followed curve
            for i, w in enumerate(walk["walks"]):
                for c, a in enumerate(following.assignment[i]):
                    curve[(w, int(a))] = c + 1
            frame.loc[sub.index, "state"] = [
                curve.get((int(w), int(s)), int(s)) for w, s in zip(sub["walk"], sub["state"])
            ]
    return frame


def walk_states(sub: pd.DataFrame, plan) -> dict:
    """The states of one multi-state level along one walk, from its points-table rows.

    Returns ``walks`` (walk indices in order), ``values`` (the first scan coordinate),
    ``energies`` ((m, n + 1) by energy, NaN where not done), ``overlaps`` (per walk
    point, the (n, n) overlaps with the previous walk point, rows its states, or None
    when neither point stored overlaps against the other) and ``n``.
    """
    set_id = int(sub["set_id"].iloc[0])
    gs = plan.geometry_sets[set_id]
    n = method_info(sub["method"].iloc[0]).n_states - 1
    state_col = "adiabatic_state" if "adiabatic_state" in sub else "state"
    walks = sorted(int(w) for w in sub["walk"].unique())
    index = {w: i for i, w in enumerate(walks)}
    energies = np.full((len(walks), n + 1), np.nan)
    overlaps = [np.full((n, n), np.nan) for _ in walks]
    backward = [np.full((n, n), np.nan) for _ in walks]  # stored against walk + 1
    done = sub["status"] == "done" if "status" in sub else pd.Series(True, index=sub.index)
    texts = sub["extra_json"] if "extra_json" in sub else [None] * len(sub)
    for w, s, e, ok, text in zip(sub["walk"], sub[state_col], sub["energy_hartree"], done, texts):
        i, s = index[int(w)], int(s)
        if ok:
            energies[i, s] = float(e)
        info = _state_info(text)
        if s == 0:
            continue
        # The overlaps are with the point computed before, normally walk - 1; a point
        # redone walking back (a lower SCF solution) has them against walk + 1.
        neighbour = info.get("neighbour_positions_angstrom")
        for target, store in ((int(w) - 1, overlaps), (int(w) + 1, backward)):
            if neighbour is not None and _same_positions(neighbour, gs, target):
                store[i][:, s - 1] = info.get("neighbour_overlaps", [np.nan] * n)
    out_overlaps = [None]
    for i in range(1, len(walks)):
        link = None
        if walks[i - 1] == walks[i] - 1:
            if np.all(np.isfinite(overlaps[i])):
                link = overlaps[i]
            elif np.all(np.isfinite(backward[i - 1])):
                link = backward[i - 1].T  # rows: the states of walk - 1
        out_overlaps.append(link)
    values = gs.values[walks, 0] if gs.values.shape[1] else np.zeros(len(walks))
    return {
        "walks": walks, "values": values, "energies": energies, "overlaps": out_overlaps, "n": n
    }  # fmt: skip


def _same_positions(stored, gs, walk) -> bool:
    if not 0 <= walk < len(gs.positions):
        return False
    expected = gs.positions[walk].ravel()
    stored = np.asarray(stored, dtype=float)
    return (
        stored.size == expected.size and np.max(np.abs(stored - expected)) <= SAME_POSITION_ANGSTROM
    )


def add_state_quantities(summary: pd.DataFrame, plan, scans: pd.DataFrame) -> pd.DataFrame:
    """The summary rows of multi-state levels' curves with their state's label, T_v and
    T_e (:func:`pesflow.analysis.states.excitation_energies`, against the ground state
    of the same level and walk) and the crossings and avoided crossings of their
    states as flags; other rows unchanged.

    ``scans`` is the points table's scan rows with ``set_id`` (as the summary takes them).
    """
    multi = [m for m in summary["method"].unique() if method_info(m).n_states > 1]
    if not multi:
        return summary
    summary = summary.copy()
    summary["state_label"] = None
    summary["state_symmetry"] = None
    ids = {(gs.molecule, gs.scan): gs.set_id for gs in plan.geometry_sets}
    for (molecule, scan, level), rows in summary[summary["method"].isin(multi)].groupby(
        ["molecule", "scan", "level"], sort=False
    ):
        gs = plan.geometry_sets[ids[(molecule, scan)]]
        points = scans[(scans["set_id"] == gs.set_id) & (scans["level"] == level)]
        for i, row in rows.iterrows():
            first = points[points["state"] == row["state"]].sort_values("walk")
            labels = first["state_label"].dropna() if "state_label" in first else []
            summary.at[i, "state_label"] = labels.iloc[0] if len(labels) else None
            symmetry = first["state_symmetry"].dropna() if "state_symmetry" in first else []
            summary.at[i, "state_symmetry"] = symmetry.iloc[0] if len(symmetry) else None
        if len(gs.coordinate_kinds) != 1:
            continue
        _excitations(summary, rows, points, gs)
        _crossing_flags(summary, rows, points, plan)
    return summary


def _excitations(summary, rows, points, gs):
    from pesflow.analysis.quantities import position_column
    from pesflow.analysis.states import excitation_energies

    column = position_column(gs.coordinate_kinds[0])
    ground = rows[rows["state"] == 0]
    if ground.empty or not bool(ground["minimum_bracketed"].iloc[0]):
        return
    g = ground.iloc[0]
    ground_min = (float(g[column]), float(g["e_min_hartree"]))

    def energies(state):
        sub = points[points["state"] == state].sort_values("walk")
        e = np.where(sub["status"] == "done", sub["energy_hartree"], np.nan).astype(float)
        return sub["walk"].to_numpy(int), e

    walks, e0 = energies(0)
    for i, row in rows.iterrows():
        if row["state"] == 0:
            continue
        w, e = energies(row["state"])
        if not np.array_equal(w, walks):
            continue
        own = None
        if row["minimum_bracketed"]:
            own = (float(row[column]), float(row["e_min_hartree"]))
        values = gs.values[walks, 0]
        for name, value in excitation_energies(values, e0, e, ground_min, own).items():
            summary.at[i, name] = value


def _crossing_flags(summary, rows, points, plan):
    from pesflow.analysis.flags import Flag, flag_records, flag_text, flags_from_records
    from pesflow.analysis.states import find_crossings, follow_states

    method = rows["method"].iloc[0]
    followed = method_info(method).follow_states
    walk = walk_states(points, plan)
    following = follow_states(walk["overlaps"], walk["n"], walk["energies"])
    by_state = {int(r["state"]): i for i, r in rows.iterrows()}
    label = {s: summary.at[i, "state_label"] or f"state {s}" for s, i in by_state.items()}
    extra = {i: [] for i in rows.index}
    for c in find_crossings(walk["values"], walk["energies"], following, walk["overlaps"]):
        if followed:
            pair = c.states
        else:  # the energy-ordered rows of the two states just before the crossing
            before = walk["values"].tolist().index(c.between[0])
            pair = tuple(int(following.assignment[before, s - 1]) for s in c.states)
        names = " and ".join(label.get(s, f"state {s}") for s in pair)
        where = f"near {c.position:.4g} (between {c.between[0]:.4g} and {c.between[1]:.4g})"
        if c.kind == "crossing":
            flag = Flag(
                "state-crossing",
                f"{names} cross {where}; their characters pass through unmixed "
                f"(gap at the bracketing points {c.gap_ev:.3f} eV or less)",
                (c.position,),
            )
        else:
            advice = (
                "the followed curves keep their character and change adiabatic surface there"
                if followed
                else "the energy-ordered curves exchange character there (follow: character "
                "keeps each state's character)"
            )
            flag = Flag(
                "avoided-crossing",
                f"avoided crossing of {names} {where}, smallest gap on the grid "
                f"{c.gap_ev:.3f} eV: {advice}",
                (c.position,),
            )
        for s in pair:
            if s in by_state:
                extra[by_state[s]].append(flag)
    if followed and following.gaps:
        at = [float(walk["values"][i]) for i in following.gaps]
        flag = Flag(
            "state-following-gap",
            "states numbered by energy, not followed, across the step(s) to "
            + ", ".join(f"{q:.4g}" for q in at)
            + " (no overlaps with the neighbour stored: a walk cut between jobs or resumed, "
            "or overlaps too small to tell the states apart; refine the grid there)",
            at,
        )
        for i in rows.index:
            if rows.at[i, "state"] > 0:
                extra[i].append(flag)
    for i, flags in extra.items():
        if flags:
            flags = flags_from_records(summary.at[i, "flag_records"]) + flags
            summary.at[i, "flags"] = flag_text(flags)
            summary.at[i, "flag_records"] = flag_records(flags)


def state_level(level: str, label) -> str:
    """The report's name of one state's curves of a multi-state level (``cis/6-31g S1``).

    >>> state_level("cis(singlets=3)/6-31g", "S2")
    'cis(singlets=3)/6-31g S2'
    """
    return f"{level} {label}"


def states_as_levels(points: pd.DataFrame, summary: pd.DataFrame):
    """Points and summary tables in which every excited state of a multi-state level is
    a level of its own (:func:`state_level`; state 0, the ground state, keeps the
    level's name), for the report, which compares curves level by level.  Returns
    ``(points, summary, labels)``, ``labels`` mapping each level to its state levels
    in order; tables without multi-state levels come back unchanged."""
    if summary is None or "state" not in summary or not (summary["state"] > 0).any():
        return points, summary, {}
    summary = summary.copy()
    excited = summary["state"] > 0
    names = [
        state_level(lvl, lab if isinstance(lab, str) else f"state {s}")
        for lvl, lab, s in zip(
            summary.loc[excited, "level"],
            summary.loc[excited].get("state_label", [None] * int(excited.sum())),
            summary.loc[excited, "state"],
        )
    ]
    rename = dict(zip(zip(summary.loc[excited, "level"], summary.loc[excited, "state"]), names))
    labels = {}
    for (lvl, _), name in rename.items():
        labels.setdefault(lvl, []).append(name)
    summary.loc[excited, "level"] = names
    summary = summary.drop(columns=["state"])
    if points is not None and "state" in points and len(points):
        points = points.copy()
        points["level"] = [
            rename.get((lvl, s), lvl) for lvl, s in zip(points["level"], points["state"])
        ]
        points = points.drop(columns=["state"])
    return points, summary, labels
