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

import json

import numpy as np
import pandas as pd

from pesflow.analysis.continuity import MAX_OCCUPATION_STEP, occupation_jumps
from pesflow.analysis.curves import covers_full_circle, leave_one_out_residuals, prepare_curve
from pesflow.analysis.derived import summarize_curve, summarize_surface
from pesflow.analysis.diagnosis import SOLUTION_JUMP_HARTREE, diagnose_noisy
from pesflow.analysis.flags import Flag, flag_records, flag_text, flags_from_records
from pesflow.analysis.quantities import COMPARED, QUANTITY, deviation, uncertainty_column
from pesflow.analysis.symmetry import Symmetry, pair_deviation
from pesflow.analysis.vibration import few_levels_flag
from pesflow.coordinates.kinds import KINDS, column_names
from pesflow.engine import method_info
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


def _curve_row(campaign, gs, sub, table, uncertainties=True):
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
    noise = campaign.engine_settings(gs.scan).scf_energy_tolerance_hartree
    row = summarize_curve(
        kind,
        sub[column].to_numpy(float),
        energies,
        energy_noise_hartree=noise,
        uncertainties=uncertainties,
        **options,
    )
    _diagnose(row, sub, column, kind)
    more = _active_space_flags(sub, column)
    info = method_info(sub["method"].iloc[0])
    if "states" in info.options and np.isfinite(row.get("d_e_ev", np.nan)):
        fragment_energies = options.get("fragment_energies_hartree")
        more.append(_dissociation_note(info, fragment_energies))
        if fragment_energies is not None:
            more += _fragment_active_space_flags(table, sub)
    if more:
        flags = flags_from_records(row["flag_records"]) + more
        row["flags"], row["flag_records"] = flag_text(flags), flag_records(flags)
    return row


def _replaced(attempts_json) -> bool:
    """Whether a point's stored solution replaced another one (by 1e-5 hartree or more)."""
    if not isinstance(attempts_json, str) or not attempts_json:
        return False
    for a in json.loads(attempts_json):
        lowered = a.get("energy_lowered_hartree") or 0.0
        if a.get("rung") == "backward-walk":
            lowered = a.get("replaced_energy_hartree", np.nan) - a.get("energy_hartree", np.nan)
        if np.isfinite(lowered) and lowered >= SOLUTION_JUMP_HARTREE:
            return True
    return False


def _diagnose(row, sub, column, kind):
    """Name the cause of a ``noisy-points`` flag from what the points know beside the energy
    (<S^2>, SCF attempts, DFT grid): :func:`pesflow.analysis.diagnosis.diagnose_noisy`."""
    flags = flags_from_records(row["flag_records"])
    if not any(f.code == "noisy-points" for f in flags):
        return
    done = sub[sub["status"] == "done"]
    values = done[column].to_numpy(float)
    periodic = KINDS[kind].period is not None and covers_full_circle(values)
    curve = prepare_curve(
        values, done["energy_hartree"].to_numpy(float), periodic=periodic, unit=KINDS[kind].unit
    )
    q = KINDS[kind].fold if curve.periodic else (lambda x: x)
    order = np.argsort([q(float(x)) for x in done[column]], kind="stable")
    done = done.iloc[order]
    s2 = pd.to_numeric(done["s2"], errors="coerce").to_numpy(float) if "s2" in done else None
    replaced = (
        done["attempts_json"].map(_replaced).to_numpy(bool) if "attempts_json" in done else None
    )
    info = method_info(str(done["method"].iloc[0])) if len(done) else None
    dft = info is not None and "grid_level" in info.settings
    residuals = leave_one_out_residuals(curve)
    same = len(residuals) == len(done)
    new = [
        diagnose_noisy(
            f,
            curve.q,
            energies_hartree=curve.energy_hartree if same else None,
            s2=s2 if same else None,
            replaced=replaced if same else None,
            residuals_hartree=residuals,
            dft=dft,
            unit=KINDS[kind].unit,
        )
        for f in flags
    ]
    row["flags"], row["flag_records"] = flag_text(new), flag_records(new)


def _harmonise_level_advice(summary: pd.DataFrame) -> pd.DataFrame:
    """One range advice per curve: a scan too short for two vibrational levels gets, at
    every level it concerns, the same advice (the widest range any level needs), so that the
    direction never changes between levels."""
    if "flag_records" not in summary:
        return summary
    out = summary.copy()
    for _, sub in out.groupby(["molecule", "scan"], sort=False):
        needed = [
            f.positions
            for text in sub["flag_records"]
            for f in flags_from_records(text)
            if f.code == "few-vibrational-levels" and len(f.positions) == 4
        ]
        if len(needed) < 2:
            continue
        lo, hi = min(p[0] for p in needed), max(p[1] for p in needed)
        for i in sub.index:
            flags = flags_from_records(out.at[i, "flag_records"])
            if not any(f.code == "few-vibrational-levels" for f in flags):
                continue
            trusted = out.at[i, "n_levels_trusted"]
            trusted = int(trusted) if np.isfinite(trusted) else 0
            new = [
                few_levels_flag(trusted, f.positions[2], f.positions[3], lo, hi)
                if f.code == "few-vibrational-levels" and len(f.positions) == 4
                else f
                for f in flags
            ]
            out.at[i, "flags"], out.at[i, "flag_records"] = flag_text(new), flag_records(new)
    return out


def _active_space_flags(sub, column) -> list:
    """A warning where the active space changed character between neighbours and the
    walk back did not remove it: the engine's own verdict stored on a point
    (``character_change``), or a jump of the stored natural occupations."""
    if "extra_json" not in sub.columns:
        return []
    done = sub[sub["status"] == "done"]
    extras = [json.loads(t) if isinstance(t, str) else {} for t in done["extra_json"]]
    if not any("active_space" in e for e in extras):
        return []
    q = done[column].to_numpy(float)
    occupations = [e.get("active_space", {}).get("natural_occupations") for e in extras]
    at = set(occupation_jumps(occupations, MAX_OCCUPATION_STEP))
    at |= {i for i, e in enumerate(extras) if i > 0 and e.get("character_change")}
    if not at:
        return []
    positions = sorted(float(q[i]) for i in at)
    where = ", ".join(f"{p:.4g}" for p in positions)
    return [
        Flag(
            "active-space-change",
            f"the active space changes character between neighbours at {where} (an orbital "
            "rotates into or out of it, or the natural occupations jump) and walking back "
            "did not remove it: check the active space there (a larger or differently "
            "chosen one, or state averaging)",
            positions,
        )
    ]


def _active_size(extra_json):
    if not isinstance(extra_json, str):
        return None
    active = json.loads(extra_json).get("active_space")
    return None if active is None else (active["n_electrons"], active["n_orbitals"])


def _fragment_active_space_flags(table, sub) -> list:
    """A warning when the fragments' active spaces do not add up to the molecule's at
    the end of its curve (AVAS chose more or fewer orbitals there than on the atoms):
    D_e then compares unlike wavefunctions."""
    done = sub[sub["status"] == "done"].sort_values("walk")
    fragments = table[
        (table["role"] == "fragment")
        & (table["molecule"] == sub["molecule"].iloc[0])
        & (table["level"] == sub["level"].iloc[0])
    ]
    if done.empty or "extra_json" not in table.columns:
        return []
    molecule = _active_size(done["extra_json"].iloc[-1])
    parts = [_active_size(t) for t in fragments["extra_json"]]
    if molecule is None or None in parts:
        return []
    summed = (sum(p[0] for p in parts), sum(p[1] for p in parts))
    if summed == molecule:
        return []
    listed = " + ".join(f"({e},{o})" for e, o in parts)
    return [
        Flag(
            "inconsistent-active-space",
            f"the fragments' active spaces {listed} do not add up to the molecule's "
            f"({molecule[0]},{molecule[1]}) at the end of the curve: D_e compares unlike "
            "wavefunctions; choose AO labels that give matching spaces (e.g. all valence "
            "shells of the atoms that separate)",
        )
    ]


def _dissociation_note(info, fragment_energies):
    if fragment_energies is not None:
        text = (
            f"D_e against the fragments computed at the same level ({info.name}: the active "
            "space from the same AO labels on each fragment)"
        )
    elif info.fragments == "asymptote":
        text = (
            f"D_e from the curve's last point: an active space given by counts ({info.name}) "
            "has no consistent counterpart on the fragments, so none are computed; the "
            "curve must reach its asymptote (give the active space by AO labels to have "
            "fragments)"
        )
    else:
        text = "D_e from the curve's last point (no fragment energies at this level)"
    return Flag("dissociation-reference", text)


def _interaction_row(gs, sub):
    """Counterpoise scan: the interaction curve's minimum, well depths and BSSE there."""
    from pesflow.analysis.interaction import interaction_summary

    sub = sub.sort_values("walk")
    column = column_names(gs.coordinate_kinds)[0]
    return interaction_summary(
        sub[column].to_numpy(float),
        sub["interaction_hartree"].to_numpy(float),
        sub["interaction_cp_hartree"].to_numpy(float),
    )


def surface_energies(campaign, gs, sub):
    """``(q1, q2, energies)`` of one 2-D scan at one level (NaN where not done)."""
    scan = campaign.scans[gs.scan]
    q1, q2 = (c.values for c in scan.coordinates)
    grid = np.full((len(q1), len(q2)), np.nan)
    idx = gs.grid_indices[sub["walk"].to_numpy(int)]
    done = (sub["status"] == "done").to_numpy()
    grid[idx[done, 0], idx[done, 1]] = sub["energy_hartree"].to_numpy(float)[done]
    return q1, q2, grid


def _surface_row(campaign, gs, sub, uncertainties=True):
    q1, q2, grid = surface_energies(campaign, gs, sub)
    noise = campaign.engine_settings(gs.scan).scf_energy_tolerance_hartree
    return summarize_surface(
        q1,
        q2,
        grid,
        kinds=gs.coordinate_kinds,
        energy_noise_hartree=noise,
        uncertainties=uncertainties,
    )


def summary_table(
    campaign, plan, table: pd.DataFrame, *, uncertainties: bool = True
) -> pd.DataFrame:
    """One row per curve with its derived quantities and deviations from the reference level.

    ``table`` is the campaign's points table (all columns).  ``uncertainties=False`` leaves
    the ``u_`` columns NaN and skips their re-analyses (about two thirds of the time): the
    values and flags are the same.
    """
    rows = []
    scans = table[table["role"] == "scan"]
    scans = scans.assign(set_id=_set_ids(plan, scans))
    if "state" not in scans:
        scans = scans.assign(state=0)
    for (set_id, level, state), sub in scans.groupby(["set_id", "level", "state"], sort=False):
        gs = plan.geometry_sets[int(set_id)]
        if len(gs.coordinate_kinds) == 1:
            row = _curve_row(campaign, gs, sub, table, uncertainties)
            if campaign.scans[gs.scan].counterpoise and "interaction_cp_hartree" in sub:
                row.update(_interaction_row(gs, sub))
        else:
            row = _surface_row(campaign, gs, sub, uncertainties)
        mol, scan = campaign.molecules[gs.molecule], campaign.scans[gs.scan]
        head = {
            "campaign": campaign.name,
            "molecule": gs.molecule,
            "scan": gs.scan,
            "set": mol.set_name,
            "rule": scan.rule,
            "conformer": f"c{mol.conformer}" if mol.conformer else "",
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
    rows += _envelope_rows(campaign, plan, scans, table, uncertainties)
    summary = pd.DataFrame(rows)
    if summary.empty:
        return summary
    summary = add_state_quantities(summary, plan, scans)
    summary = _harmonise_level_advice(summary)
    return add_deviations(summary, campaign.spec.compare.reference_level)


#: The ``conformer`` of a summary row that is the lower envelope of a member's conformers.
ENVELOPE = "lower envelope"


def _envelope_rows(campaign, plan, scans, table, uncertainties=True) -> list[dict]:
    """One row per member, 1-D scan and level whose member has several conformers: the
    lower envelope, at each scan value the lowest energy over the conformers' curves
    (a value no conformer has finished stays missing).  A rigid torsion scan from one
    conformer can miss the true profile; the envelope is the best curve the set gives."""
    by_member: dict[tuple[str, str], list] = {}
    for gs in plan.geometry_sets:
        mol = campaign.molecules[gs.molecule]
        if gs.role == "scan" and mol.conformer and len(gs.coordinate_kinds) == 1:
            by_member.setdefault((mol.member, gs.scan), []).append(gs)
    rows = []
    for (member, scan_name), sets in by_member.items():
        if len(sets) < 2:
            continue
        first = sets[0]
        for level, sub in scans[scans["set_id"] == first.set_id].groupby("level", sort=False):
            sub = sub.sort_values("walk")
            stack = []
            for gs in sets:
                part = scans[(scans["set_id"] == gs.set_id) & (scans["level"] == level)]
                part = part.set_index("walk").reindex(sub["walk"])
                stack.append(np.where(part["status"] == "done", part["energy_hartree"], np.nan))
            stack = np.asarray(stack, dtype=float)
            envelope = np.full(stack.shape[1], np.nan)
            finished = np.isfinite(stack).any(axis=0)
            envelope[finished] = np.nanmin(stack[:, finished], axis=0)
            curve = sub.assign(
                energy_hartree=envelope, status=np.where(finished, "done", "pending")
            )
            row = _curve_row(campaign, first, curve, table, uncertainties)
            scan = campaign.scans[scan_name]
            rows.append(
                {
                    "campaign": campaign.name,
                    "molecule": member,
                    "scan": scan_name,
                    "set": campaign.molecules[first.molecule].set_name,
                    "rule": scan.rule,
                    "conformer": ENVELOPE,
                    "level": level,
                    "method": sub["method"].iloc[0],
                    "basis": sub["basis"].iloc[0],
                    "coordinates": ", ".join(c.label for c in scan.coordinates),
                    **row,
                    "n_done": int(finished.sum()),
                    "n_failed": 0,
                    "n_pending": int((~finished).sum()),
                    "cost_core_s": 0.0,
                }
            )
    return rows


def curve_groups(plan, table: pd.DataFrame):
    """``(geometry set, level, its scan points)`` for every curve or surface of the points
    table, in the table's order."""
    scans = table[table["role"] == "scan"]
    scans = scans.assign(set_id=_set_ids(plan, scans))
    for (set_id, level), sub in scans.groupby(["set_id", "level"], sort=False):
        yield plan.geometry_sets[int(set_id)], level, sub


def _set_ids(plan, frame):
    lookup = {(gs.molecule, gs.scan): gs.set_id for gs in plan.geometry_sets}
    return [lookup[(m, s)] for m, s in zip(frame["molecule"], frame["scan"])]


def add_deviations(summary: pd.DataFrame, reference_level: str | None) -> pd.DataFrame:
    """Add ``dev_<column>`` = value - value at ``reference_level`` (same molecule and scan),
    ``u_dev_<column>`` (both uncertainties in quadrature) and, where a headline deviation is
    smaller than its uncertainty, a ``deviation-within-uncertainty`` note.

    Positions are compared through their nearest equivalent under the symmetry both curves
    have (:func:`pesflow.analysis.quantities.deviation`; the two mirror-image minima of a
    torsion are one minimum), and a 2-D minimum through the q1 <-> q2 swap when both grids
    have it (:func:`pesflow.analysis.symmetry.pair_deviation`).
    """
    if not reference_level:
        return summary
    reference_level = reference_level.strip().lower()
    cols = [c for c in COMPARED if c in summary.columns]
    ucols = [uncertainty_column(c) for c in cols if uncertainty_column(c) in summary.columns]
    # A multi-state level's states are compared state by state with the reference's.
    by_state = "state" in summary.columns
    refs = {
        _reference_key(r, by_state): r
        for _, r in summary[summary["level"] == reference_level].iterrows()
    }
    devs = {c: np.full(len(summary), np.nan) for c in cols}
    u_refs = {u: np.full(len(summary), np.nan) for u in ucols}
    for i, (_, row) in enumerate(summary.iterrows()):
        ref = refs.get(_reference_key(row, by_state))
        if ref is None:
            continue
        symmetry = Symmetry.of_row(row).common(Symmetry.of_row(ref))
        for c in cols:
            devs[c][i] = deviation(c, _float(row.get(c)), _float(ref.get(c)), symmetry)
        for u in ucols:
            u_refs[u][i] = _float(ref.get(u))
        for unit in dict.fromkeys(k.unit for k in KINDS.values()):
            pair = (f"q1_e_{unit}", f"q2_e_{unit}")
            if symmetry.swap and all(p in devs for p in pair):
                d1, d2 = pair_deviation(
                    [_float(row.get(p)) for p in pair], [_float(ref.get(p)) for p in pair], symmetry
                )
                devs[pair[0]][i], devs[pair[1]][i] = d1, d2
    out = summary.copy()
    within = [[] for _ in range(len(out))]
    is_ref = (summary["level"] == reference_level).to_numpy()
    for c in cols:
        dev = devs[c]
        out[f"dev_{c}"] = dev
        u = uncertainty_column(c)
        if u not in ucols:
            continue
        u_dev = np.hypot(summary[u].to_numpy(float), u_refs[u])
        out[f"u_dev_{c}"] = u_dev
        if not QUANTITY[c].headline:
            continue
        with np.errstate(invalid="ignore"):
            small = (np.abs(dev) < u_dev) & ~is_ref
        for i in np.flatnonzero(small):
            q = QUANTITY[c]
            within[i].append(f"{q.name} {dev[i]:+.{q.decimals + 1}g} ± {u_dev[i]:.2g} {q.unit}")
    if "flag_records" in out.columns and any(within):
        texts, records = list(out["flags"]), list(out["flag_records"])
        for i, items in enumerate(within):
            if not items:
                continue
            flags = flags_from_records(records[i])
            flags.append(
                Flag(
                    "deviation-within-uncertainty",
                    f"deviation from {reference_level} smaller than the combined uncertainty "
                    f"(not significant): {', '.join(items)}",
                )
            )
            texts[i], records[i] = flag_text(flags), flag_records(flags)
        out["flags"], out["flag_records"] = texts, records
    out["reference_level"] = reference_level
    return out


def _float(value) -> float:
    try:
        return float(value)
    except (TypeError, ValueError):
        return float("nan")


def _reference_key(row, by_state: bool) -> tuple:
    """The (molecule, scan[, state]) a summary row is compared with the reference on."""
    if not by_state:
        return (row["molecule"], row["scan"])
    state = _float(row.get("state"))
    return (row["molecule"], row["scan"], int(state) if np.isfinite(state) else 0)
