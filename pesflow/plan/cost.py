"""Cost estimates of what is left to compute (pure functions on tables).

Where the store already holds timings of the same molecule at the same level, the median
of those is used. Otherwise a scaling model t = a * (nbf / 50)^p plus a fixed per-point
overhead, with the scaling exponent p and default prefactor a that the engine declares for
each method (:attr:`~pesflow.engine.MethodInfo.cost_exponent`, ``cost_prefactor_s``: for
PySCF, HF and DFT 3, MP2 4, CCSD 6, CCSD(T) 7, below the formal N^4 / N^5 of HF and MP2
because integral screening and set-up dominate at this size), is calibrated on whatever
timings of that method's cost class exist (points of 30 or more basis functions, where the
scaling term dominates), and falls back to the default prefactors (measured on a 2-core
laptop-class CPU, one thread) when there are none.  For a level without basis set (tight
binding) the size n is the number of atoms.  Estimates are rough by nature: they say which
level will dominate the night, not when it ends.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from pesflow.engine import TIGHT_BINDING_METHODS, method_info

#: Fixed cost of one small single point (integrals set-up, Python), seconds (common practice
#: on small molecules; measured here on PySCF 2.14).
OVERHEAD_S = 0.01
#: Only timings of points at least this large calibrate the model.
MIN_CALIBRATION_NBF = 30


def method_class(method: str) -> str:
    """The cost class of a method (its :attr:`~pesflow.engine.MethodInfo.cost_class`):
    ``hf``, ``mp2``, ``ccsd``, ``ccsd(t)``, ``dft`` for any functional, or the
    tight-binding level."""
    return method_info(method).cost_class


def used_pairs(campaign) -> list[tuple[str, str]]:
    """The (molecule, basis) pairs a campaign computes (scan levels can differ per scan)."""
    pairs = []
    for scan in campaign.scans.values():
        for molecule in scan.molecules:
            for level in scan.levels:
                if (molecule, level.basis) not in pairs:
                    pairs.append((molecule, level.basis))
    return pairs


def basis_function_counts(campaign, pairs=None) -> dict[tuple[str, str], int]:
    """Number of basis functions (PySCF's count) of each (molecule, basis) pair.

    ``pairs`` defaults to the pairs the campaign computes; a pair PySCF cannot build
    is left out (an estimate then falls back to a typical size).  For a level without
    basis set (basis ``""``) the count is the number of atoms, the size its cost model
    scales with.
    """
    from pyscf import gto

    out = {}
    for molecule, basis in used_pairs(campaign) if pairs is None else pairs:
        mol = campaign.molecules[molecule]
        if not basis:
            out[(molecule, basis)] = len(mol.symbols)
            continue
        atoms = list(zip(mol.symbols, mol.atoms.get_positions().tolist()))
        try:
            m = gto.M(
                atom=atoms,
                basis=basis,
                charge=mol.charge,
                spin=mol.multiplicity - 1,
                unit="Angstrom",
                verbose=0,
            )
        except Exception:  # counting is advisory; never fail a plan or a report on it
            continue
        out[(molecule, basis)] = int(m.nao)
    return out


def size_weights(nbf: dict[tuple[str, str], int]) -> dict[tuple[str, str], float]:
    """Relative cost of one SCF point per (molecule, basis), for cutting batches evenly
    (HF's cost model; tight binding's for a pair without basis set)."""
    scf, tight_binding = method_info("hf"), method_info(TIGHT_BINDING_METHODS[0])
    weights = {}
    for (molecule, basis), n in nbf.items():
        info = scf if basis else tight_binding
        weights[(molecule, basis)] = OVERHEAD_S + model_seconds(info.cost_prefactor_s, info, n)
    return weights


def model_seconds(prefactor_s: float, info, n) -> float:
    """The scaling term a * (n / 50)^p of the cost model for a method's info."""
    return prefactor_s * (n / 50.0) ** info.cost_exponent


def estimate(points: pd.DataFrame, nbf: dict[tuple[str, str], int]) -> pd.DataFrame:
    """Estimated wall seconds of the pending points, per level.

    ``points`` is the points table (columns molecule, level, method, basis, status,
    wall_s).  Returns one row per level: ``pending``, ``estimate_core_h``, ``share``,
    ``source`` (how the estimate was made).
    """
    pts = points.copy()
    pts["nbf"] = [nbf.get((m, b), 50) for m, b in zip(pts["molecule"], pts["basis"])]
    infos = {m: method_info(m) for m in pts["method"].unique()}
    pts["cls"] = pts["method"].map(lambda m: infos[m].cost_class)
    info_of = {info.cost_class: info for info in infos.values()}
    timed = pts[(pts["status"] == "done") & pts["wall_s"].notna()]
    prefactor = {cls: info.cost_prefactor_s for cls, info in info_of.items()}
    for cls, sub in timed[timed["nbf"] >= MIN_CALIBRATION_NBF].groupby("cls"):
        scaled = (sub["wall_s"] - OVERHEAD_S).clip(lower=0) / model_seconds(
            1.0, info_of[cls], sub["nbf"]
        )
        prefactor[cls] = float(np.median(scaled))
    medians = timed.groupby(["molecule", "level"])["wall_s"].median().to_dict()
    pending = pts[pts["status"] == "pending"]
    if "state" in pending:  # the states of a multi-state level come from one calculation
        pending = pending[pending["state"] == 0]
    rows = []
    for level, sub in pending.groupby("level", sort=False):
        seconds, sources = 0.0, set()
        for (mol, nb, cls), grp in sub.groupby(["molecule", "nbf", "cls"]):
            if (mol, level) in medians:
                seconds += len(grp) * medians[(mol, level)]
                sources.add("stored timings")
            else:
                seconds += len(grp) * (OVERHEAD_S + model_seconds(prefactor[cls], info_of[cls], nb))
                sources.add("scaling model")
        rows.append(
            {
                "level": level,
                "pending": len(sub),
                "estimate_core_h": seconds / 3600.0,
                "source": " + ".join(sorted(sources)),
            }
        )
    table = pd.DataFrame(rows, columns=["level", "pending", "estimate_core_h", "source"])
    total = table["estimate_core_h"].sum()
    table["share"] = table["estimate_core_h"] / total if total > 0 else 0.0
    return table


def dominant_levels(table: pd.DataFrame, threshold: float = 0.5) -> list[str]:
    """Levels whose estimated cost is more than ``threshold`` of the whole."""
    if len(table) < 2:
        return []
    return list(table.loc[table["share"] > threshold, "level"])
