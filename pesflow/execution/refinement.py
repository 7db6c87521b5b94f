"""Rounds of adaptive refinement over the store, and their durable log.

``pesflow run`` computes what is missing, then, for every scan with ``refine`` (README
"Adaptive grids"), calls :func:`refine_round`: it analyses each refined curve from its stored
points exactly as the summary does, decides with :mod:`pesflow.analysis.refine` which targets
are met and which points to add, and writes the decision to the campaign's refinement log
(``<results>/<campaign>/refinement.json``, written atomically and durably) *before* anything is
computed.  The next plan (:func:`pesflow.plan.expand.expand`) adds the logged points to their
walks (``Campaign.added_points``, read from the log by ``load_campaign``), so each round is an
ordinary incremental run over the store: a killed run resumed later finds the logged points
in its plan, computes the ones not stored and goes on deciding from there; stored points are
never computed again.  Decisions depend only on stored energies, so they are deterministic.

Refinement is decided per walk (molecule x scan): a point added for one level's curve is
computed at every level of the walk (the levels share the walk's SCF and starting guesses,
and their stationary points lie close), and ``max_points`` bounds the walk's points.  A walk
with pending points (a run cut short) is not refined until they are stored.

The log (JSON): ``{"version": 1, "points": [...], "rounds": [...]}``; a point is
``{round, molecule, scan, value, reason, level}`` (the coordinate value in the coordinate's
unit; the round that added it, 1, 2, ...; the level whose curve asked for it); a round entry is
the evaluation of one curve on the grid of round ``round`` (0: the coarse grid):
``{round, molecule, scan, level, n_points, max_points, targets: [TargetState.as_dict()],
outcome}`` with ``outcome`` one of :data:`OUTCOMES`; a changed ``refine`` (targets or budget)
is evaluated again on the present grid (a later entry of the same round wins).
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from pesflow.analysis import refine as rules
from pesflow.coordinates.kinds import KINDS, column_names
from pesflow.formats.atomic import atomic_write

LOG_NAME = "refinement.json"
LOG_VERSION = 1

#: What a curve's evaluation concluded.
OUTCOMES = {
    "met": "every target met",
    "refining": "points added",
    "budget spent": "the point budget is spent before the targets are met",
    "no new point": "no new point could be placed (the stationary point is missing, or "
    "outside the scanned range)",
}


def log_path(campaign) -> Path:
    return Path(campaign.results_path) / LOG_NAME


def read_log(campaign) -> dict:
    """The refinement log of ``campaign`` (an empty one when there is none yet)."""
    path = log_path(campaign)
    if not path.exists():
        return {"version": LOG_VERSION, "points": [], "rounds": []}
    return json.loads(path.read_text())


def write_log(campaign, log: dict) -> None:
    path = log_path(campaign)
    path.parent.mkdir(parents=True, exist_ok=True)
    atomic_write(path, json.dumps(log, indent=1, allow_nan=False) + "\n", fsync=True)


def added_points(campaign, log: dict | None = None) -> dict[tuple[str, str], tuple[float, ...]]:
    """``(scan, molecule) -> coordinate values`` the log added to each refined walk (scans
    that no longer refine, or no longer list the molecule, are left out)."""
    log = read_log(campaign) if log is None else log
    out: dict[tuple[str, str], list[float]] = {}
    for p in log["points"]:
        scan = campaign.scans.get(p["scan"])
        if scan is None or not scan.refine or p["molecule"] not in scan.molecules:
            continue
        out.setdefault((p["scan"], p["molecule"]), []).append(float(p["value"]))
    return {k: tuple(v) for k, v in out.items()}


@dataclass
class RoundResult:
    """What one :func:`refine_round` decided: ``added`` points over all walks, and the
    evaluation entries it wrote."""

    added: int
    evaluations: list


def _walk_round(log, molecule, scan) -> int:
    rounds = [p["round"] for p in log["points"] if (p["molecule"], p["scan"]) == (molecule, scan)]
    return max(rounds, default=0)


def _evaluation(log, molecule, scan, level, round_number):
    """The last evaluation of a curve on the grid of ``round_number``, or None."""
    found = None
    for entry in log["rounds"]:
        if (entry["molecule"], entry["scan"], entry["level"], entry["round"]) == (
            molecule,
            scan,
            level,
            round_number,
        ):
            found = entry
    return found


def _same_request(entry, scan) -> bool:
    """An evaluation still holds when the spec asks for the same targets and budget (a
    changed ``refine`` is evaluated again on the same grid)."""
    asked = {t["column"]: t["target"] for t in entry["targets"]}
    return asked == scan.refine and entry.get("max_points") == scan.max_points


def _curve(sub, column):
    sub = sub.sort_values("walk")
    values = sub[column].to_numpy(float)
    energies = np.where(sub["status"] == "done", sub["energy_hartree"], np.nan).astype(float)
    return values, energies


def _analysis(kind, values, energies):
    from pesflow.analysis.curves import analyze_curve, covers_full_circle

    finite = np.isfinite(energies)
    period = KINDS[kind].period
    periodic = bool(period is not None and covers_full_circle(values[finite]))
    try:
        a = analyze_curve(
            values[finite], energies[finite], periodic=periodic, unit=KINDS[kind].unit
        )
    except ValueError:
        return None, None
    return a, (period if periodic else None)


def refine_round(campaign, plan, store) -> RoundResult:
    """Evaluate every refined curve on its stored points; log the targets' state and the new
    points of each walk that needs them (atomically, before they are computed).  Returns how
    many points were added (0: nothing more to do)."""
    from pesflow.tables.points import points_table
    from pesflow.tables.summary import summary_table

    refined = {name for name, scan in campaign.scans.items() if scan.refine}
    if not refined:
        return RoundResult(0, [])
    table = points_table(plan, store)
    table = table[table["scan"].isin(refined) | (table["role"] == "fragment")]
    summary = summary_table(campaign, plan, table)
    if summary.empty:
        return RoundResult(0, [])
    log = read_log(campaign)
    new_points, evaluations = [], []
    for gs in plan.geometry_sets:
        if gs.role != "scan" or gs.scan not in refined:
            continue
        scan = campaign.scans[gs.scan]
        walk = table[
            (table["molecule"] == gs.molecule)
            & (table["scan"] == gs.scan)
            & (table["role"] == "scan")
        ]
        if "state" in walk:
            walk = walk[walk["state"] == 0]
        if walk.empty or (walk["status"] == "pending").any():
            continue
        round_number = _walk_round(log, gs.molecule, gs.scan)
        kind = gs.coordinate_kinds[0]
        column = column_names(gs.coordinate_kinds)[0]
        values_now = np.unique(gs.values[:, 0])
        coarse = scan.coordinates[0].values
        lo, hi = float(np.min(coarse)), float(np.max(coarse))
        spacing = rules.coarse_spacing(coarse)
        left = scan.max_points - len(values_now)
        walk_new: list[tuple[float, str, str]] = []
        rows = summary[
            (summary["molecule"] == gs.molecule)
            & (summary["scan"] == gs.scan)
            & (summary["state"] == 0)
            & (summary["conformer"] != "lower envelope")
        ]
        for _, row in rows.iterrows():
            level = row["level"]
            done = _evaluation(log, gs.molecule, gs.scan, level, round_number)
            if done is not None and _same_request(done, scan):
                continue  # already decided on this grid (a resumed run)
            before = _evaluation(log, gs.molecule, gs.scan, level, round_number - 1)
            previous = (
                None
                if before is None
                else {t["column"]: (t["value"], t["u"]) for t in before["targets"]}
            )
            states = rules.target_states(scan.refine, row.to_dict(), previous)
            unmet = [s.column for s in states if not s.met]
            outcome = "met"
            if unmet:
                values, energies = _curve(walk[walk["level"] == level], column)
                analysis, period = _analysis(kind, values, energies)
                proposed = []
                if analysis is not None:
                    taken = [*values_now, *(v for v, *_ in walk_new)]
                    proposed = rules.propose_points(
                        analysis, unmet, round_number + 1, spacing, taken, lo, hi, period
                    )
                room = left - len(walk_new)
                if room <= 0:
                    outcome = "budget spent"
                elif not proposed:  # its points may already come from another level
                    outcome = "refining" if walk_new else "no new point"
                else:
                    walk_new += [(v, why, level) for v, why in proposed[:room]]
                    outcome = "refining"
            evaluations.append(
                {
                    "round": round_number,
                    "molecule": gs.molecule,
                    "scan": gs.scan,
                    "level": level,
                    "n_points": int(len(values_now)),
                    "max_points": scan.max_points,
                    "targets": [s.as_dict() for s in states],
                    "outcome": outcome,
                }
            )
        new_points += [
            {
                "round": round_number + 1,
                "molecule": gs.molecule,
                "scan": gs.scan,
                "value": value,
                "reason": reason,
                "level": level,
            }
            for value, reason, level in walk_new
        ]
    if evaluations or new_points:
        log["rounds"] += evaluations
        log["points"] += new_points
        write_log(campaign, log)
        campaign.added_points = added_points(campaign, log)
    return RoundResult(len(new_points), evaluations)


def report_tables(campaign):
    """``(rounds, points)`` of :func:`refinement_table` for ``build_report``, or None when no
    scan of ``campaign`` refines."""
    if not any(scan.refine for scan in campaign.scans.values()):
        return None
    return refinement_table(campaign)


def plan_note(campaign) -> str | None:
    """What ``pesflow plan`` and ``status`` say about refined scans, or None."""
    refined = [s for s in campaign.scans.values() if s.refine]
    if not refined:
        return None
    budgets = ", ".join(f"{s.name} up to {s.max_points}" for s in refined)
    return (
        f"adaptive refinement: pesflow run may add points per walk after the coarse grid "
        f"({budgets} points per walk, at every level of the walk)"
    )


def refinement_table(campaign):
    """The log as two DataFrames for the report: ``(rounds, points)``; ``rounds`` has one
    row per curve and round (``molecule, scan, level, round, n_points, outcome`` and per
    target ``<column>``, ``u_<column>``, ``met_<column>``), ``points`` one row per added
    point (``molecule, scan, round, value, level, reason``).  Empty frames without a log."""
    import pandas as pd

    log = read_log(campaign)
    rows = []
    for entry in log["rounds"]:
        row = {k: entry[k] for k in ("molecule", "scan", "level", "round", "n_points", "outcome")}
        for t in entry["targets"]:
            row[t["column"]] = t["value"]
            row[f"u_{t['column']}"] = t["u"]
            row[f"target_{t['column']}"] = t["target"]
            row[f"met_{t['column']}"] = t["met"]
        rows.append(row)
    rounds = pd.DataFrame(rows)
    if len(rounds):  # a curve evaluated again (refine changed): its last evaluation counts
        rounds = rounds.drop_duplicates(["molecule", "scan", "level", "round"], keep="last")
    points = pd.DataFrame(
        log["points"], columns=["molecule", "scan", "round", "value", "level", "reason"]
    )
    return rounds, points
