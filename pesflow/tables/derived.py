"""Rows of derived levels (complete-basis-set extrapolation) in the points table.

A derived level (:class:`~pesflow.campaign.resolved.Level` with ``members``) has no points
of its own: at each walk point its energy is made from the stored energies of its member
levels at the same geometry (:mod:`pesflow.analysis.cbs`), so it costs nothing beyond the
members.  Its rows carry the member rows' geometry and coordinates, a key hashed from the
member keys (``cbs-`` + 30 hex digits, never an engine key), ``wall_s`` the members' sum,
and in ``extra_json`` the HF and correlation parts, the schemes and the member keys.
Status: done when every member is done, failed when one failed (or the formula is
undefined there), pending otherwise.
"""

from __future__ import annotations

import hashlib
import json
import math

import numpy as np
import pandas as pd

from pesflow.analysis.cbs import SCHEMES, cbs_energy, parse_cc_basis, schemes_used

#: Columns a derived row needs from its members' stored records.
NEEDED_COLUMNS = ("energy_hartree", "converged", "error", "wall_s", "reference")


def derived_levels(plan) -> list[tuple[int, object]]:
    """(set_id, level) of every derived level of every geometry set of ``plan``."""
    return [(gs.set_id, lvl) for gs in plan.geometry_sets for lvl in gs.levels if lvl.members]


def derived_key(member_keys) -> str:
    """The key of a derived point: a hash of its members' keys (never an engine key)."""
    digest = hashlib.blake2b("|".join(member_keys).encode(), digest_size=15).hexdigest()
    return f"cbs-{digest}"


def add_derived_rows(plan, frame: pd.DataFrame) -> pd.DataFrame:
    """``frame`` (plan joined with the store, before ``status``) with the derived rows."""
    wanted = derived_levels(plan)
    if not wanted:
        return frame
    new = []
    for set_id, level in wanted:
        in_set = frame[frame["set_id"] == set_id]
        new.append(_level_rows(level, in_set))
    new = [n for n in new if not n.empty]
    if not new:
        return frame
    return pd.concat([frame, *new], ignore_index=True)


def _level_rows(level, in_set: pd.DataFrame) -> pd.DataFrame:
    members = list(level.members)
    bases = list(dict.fromkeys(m.basis for m in members))
    cardinals = [parse_cc_basis(b)[1] for b in bases]
    subs = {}
    for m in members:
        sub = in_set[in_set["level"] == m.label].set_index("walk")
        if sub.empty:
            return pd.DataFrame()
        subs[(m.method, m.basis)] = sub
    top = (level.method, bases[int(np.argmax(cardinals))])
    out = subs[top].copy()
    walks = out.index.to_numpy()
    schemes = schemes_used(level.method, len(bases))
    energies, converged, errors, parts = [], [], [], []
    for walk in walks:
        rows = {mb: sub.loc[walk] for mb, sub in subs.items()}
        state = [r["converged"] for r in rows.values()]
        failed = [mb for mb, r in rows.items() if _is_false(r["converged"])]
        if failed:
            method, basis = failed[0]
            energies.append(math.nan)
            converged.append(False)
            errors.append(f"CBS member {method}/{basis} failed")
            parts.append(None)
            continue
        if any(_is_missing(c) for c in state):
            energies.append(math.nan)
            converged.append(pd.NA)
            errors.append(None)
            parts.append(None)
            continue
        hf = [float(rows[("hf", b)]["energy_hartree"]) for b in bases]
        total = None
        if level.method != "hf":
            total = [float(rows[(level.method, b)]["energy_hartree"]) for b in bases]
        result = cbs_energy(level.method, cardinals, hf, total)
        ok = math.isfinite(result["energy_hartree"])
        energies.append(result["energy_hartree"])
        converged.append(ok)
        errors.append(
            None
            if ok
            else "CBS: Feller's three-point HF formula is undefined here "
            "(the HF energies do not converge geometrically)"
        )
        parts.append(result)
    member_keys = [sub["key"].reindex(walks).to_numpy() for sub in subs.values()]
    wall = sum(
        pd.to_numeric(sub["wall_s"].reindex(walks), errors="coerce") for sub in subs.values()
    )
    out["level"] = level.label
    out["method"] = level.method
    out["basis"] = level.basis
    out["family"] = "cbs"
    out["key"] = [derived_key(keys) for keys in zip(*member_keys)]
    out["energy_hartree"] = energies
    out["converged"] = pd.Series(converged, index=out.index, dtype="object")
    out["error"] = errors
    out["wall_s"] = wall.to_numpy() if hasattr(wall, "to_numpy") else np.nan
    for col in ("scf_cycles", "step_wall_s", "s2", "attempts_json"):
        if col in out.columns:
            out[col] = np.nan if col != "attempts_json" else None
    out["extra_json"] = [
        json.dumps(
            {
                "cbs": {
                    "members": [m.label for m in members],
                    "schemes": {s: SCHEMES[s] for s in schemes},
                    **(
                        {k: p[k] for k in ("hf_cbs_hartree", "correlation_cbs_hartree")}
                        if p
                        else {}
                    ),
                    "member_keys": list(keys),
                }
            },
            sort_keys=True,
        )
        for p, keys in zip(parts, zip(*member_keys))
    ]
    return out.reset_index()


def _is_missing(value) -> bool:
    return value is None or value is pd.NA or (isinstance(value, float) and math.isnan(value))


def _is_false(value) -> bool:
    return not _is_missing(value) and not bool(value)


#: Columns of the points table on a counterpoise scan's complex rows (hartree): the
#: uncorrected and the counterpoise-corrected interaction energy, and the BSSE (corrected
#: minus uncorrected, positive as a rule).
INTERACTION_TABLE_COLUMNS = ("interaction_hartree", "interaction_cp_hartree", "bsse_hartree")


def add_interaction_columns(plan, frame: pd.DataFrame) -> pd.DataFrame:
    """Interaction energies on the complex rows of counterpoise scans (NaN elsewhere).

    ``frame`` has ``status``.  Uncorrected: the complex minus the molecule's fragments
    (role ``fragment``, own basis) at the same level; corrected: the complex minus each
    fragment in the complex's basis at the same point (role ``counterpoise``).  NaN where
    any of them is not done.  (See :mod:`pesflow.analysis.interaction`.)
    """
    cp_sets = [gs for gs in plan.geometry_sets if gs.role == "counterpoise"]
    if not cp_sets:
        return frame
    frame = frame.copy()
    for col in INTERACTION_TABLE_COLUMNS:
        frame[col] = np.nan
    energy = np.where(frame["status"] == "done", frame["energy_hartree"], np.nan).astype(float)
    frame["_e"] = energy
    for (molecule, scan), parts in _group_cp(cp_sets).items():
        own = frame[(frame["role"] == "fragment") & (frame["molecule"] == molecule)]
        for level in frame.loc[frame["scan"] == scan, "level"].unique():
            mask = (frame["scan"] == scan) & (frame["molecule"] == molecule)
            mask &= (frame["level"] == level) & (frame["role"] == "scan")
            ab = frame.loc[mask].set_index("walk")["_e"]
            cp = sum(
                frame[(frame["scan"] == name) & (frame["molecule"] == molecule)
                      & (frame["level"] == level)].set_index("walk")["_e"].reindex(ab.index)
                for name in parts
            )  # fmt: skip
            frag = own[own["level"] == level]
            e_own = frag.groupby("scan")["_e"].first()
            monomers = float(e_own.to_numpy().sum()) if len(e_own) == 2 else np.nan
            idx = frame.index[mask]
            frame.loc[idx, "interaction_hartree"] = (ab - monomers).to_numpy()
            frame.loc[idx, "interaction_cp_hartree"] = (ab - cp).to_numpy()
            frame.loc[idx, "bsse_hartree"] = (monomers - cp).to_numpy()
    return frame.drop(columns="_e")


def _group_cp(cp_sets):
    """{(molecule, scan): [names of its counterpoise sets]}."""
    out = {}
    for gs in cp_sets:
        out.setdefault((gs.molecule, gs.of_scan), []).append(gs.scan)
    return out
