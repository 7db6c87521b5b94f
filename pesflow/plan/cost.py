"""Cost estimates of what is left to compute (pure functions on tables).

The model predicts the wall seconds of one stored record (one thread), as the
record's ``wall_s`` counts them: the SCF, plus for a correlated method its own step
(``step_wall_s``).  Each method family has its size terms (:data:`FAMILY_COST`), in
the number of basis functions ``N``, occupied orbitals ``o``, virtual orbitals ``v``
and atoms:

* every SCF: ``(N / 50)^2.5`` (below the formal N^4: integral screening and set-up
  dominate at this size);
* ``dft``: that SCF plus the exchange-correlation integration grid,
  ``atoms * N / 50`` at grid level 3 (the grid is built for each geometry and
  evaluated in each cycle: B3LYP costs 5-15 HF points on small molecules);
* ``mp2``: the integral transformation, ``o N^4``;
* ``ccsd``: ``o^2 v^2``, and ``ccsd(t)`` that plus the triples, ``o^2 v^3.5``: the
  exponents fitted on small molecules (the formal ones, ``o^2 v^4`` and ``o^3 v^4``,
  over-estimate a cc-pVTZ diatomic ~4x when scaled from a cc-pVDZ point).

The prefactors were measured on this project's 2-core development VM (PySCF 2.14,
one thread, CPU time of ten g2 molecules at 6-31G*, cc-pVDZ, def2-SVP and cc-pVTZ;
a walk's SCF taken as the mean of a cold start and a start from the converged
density).  Calibration, best first: stored timings of the same molecule at the same
level (their median); else each family's terms scaled by the median ratio of measured
to modelled time over the stored records of that family (at that basis set when the
store has some, else at any; records of at least :data:`MIN_CALIBRATION_NBF`
functions only); else the defaults.  ``benchmarks/bench_cost.py`` checks the model
against real runs of the shipped configs.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from pesflow.engine import TIGHT_BINDING_METHODS, method_info

#: Fixed cost of one small single point (integral set-up, Python), seconds.
OVERHEAD_S = 0.01
#: Only timings of points at least this large calibrate the model.
MIN_CALIBRATION_NBF = 15

# ---------------------------------------------------------------------------
# Per-family cost table (one place; meant to move into the engine's method registry).
# Each term: seconds = prefactor * size term; sizes are scaled so that a prefactor is
# the time of a typical small point (N = 50 functions, o = 5, v = 45, one atom / 3
# atoms for the grid).  Measured on the development VM with PySCF 2.14, one thread
# (benchmarks/bench_cost.py checks the model against real runs).
# ---------------------------------------------------------------------------


@dataclass(frozen=True)
class FamilyCost:
    """How one method family's step scales: ``prefactor_s * (o/5)^o_power (v/45)^v_power
    (N/50)^n_power atoms^atom_power`` seconds."""

    prefactor_s: float
    n_power: float = 0.0
    o_power: float = 0.0
    v_power: float = 0.0
    atom_power: float = 0.0


#: The SCF of every wavefunction method, and of a functional without its grid: the cost
#: law the engine declares for HF (its :class:`~pesflow.engine.MethodInfo`).
SCF_COST = FamilyCost(
    prefactor_s=method_info("hf").cost_prefactor_s, n_power=method_info("hf").cost_exponent
)
#: What each family adds on top of the SCF, seconds per point.
FAMILY_COST: dict[str, tuple[FamilyCost, ...]] = {
    "hf": (),
    "dft": (FamilyCost(prefactor_s=0.19, n_power=1.0, atom_power=1.0),),
    "mp2": (FamilyCost(prefactor_s=0.0106, n_power=4.0, o_power=1.0),),
    "ccsd": (FamilyCost(prefactor_s=0.50, o_power=2.0, v_power=2.0),),
    "ccsd(t)": (
        FamilyCost(prefactor_s=0.50, o_power=2.0, v_power=2.0),
        FamilyCost(prefactor_s=0.23, o_power=2.0, v_power=3.5),
    ),
}
#: A DFT grid's size relative to PySCF's grid level 3 (the default), per level up or
#: down (common practice, from memory: each level adds radial and angular points).
GRID_LEVEL_FACTOR = 1.6


@dataclass(frozen=True)
class Size:
    """What the cost of a point depends on: basis functions, occupied orbitals, atoms."""

    nbf: int
    nocc: int = 5
    natm: int = 3

    @property
    def nvir(self) -> int:
        return max(1, self.nbf - self.nocc)


def method_class(method: str) -> str:
    """The cost class the engine declares for a method (its
    :attr:`~pesflow.engine.MethodInfo.cost_class`): ``hf``, ``mp2``, ``ccsd``, ``ccsd(t)``,
    ``dft`` for any functional, or a class of another backend (tight binding), which has
    no entry in :data:`FAMILY_COST` and uses the engine's own scaling law instead."""
    return method_info(method).cost_class


def _has_own_law(cls: str) -> bool:
    """Whether a cost class has no :data:`FAMILY_COST` terms and uses its engine's law."""
    return cls not in FAMILY_COST and cls != "dft"


def _engine_seconds(method: str, size: Size, scale: float = 1.0) -> float:
    """The engine's own cost law for a class without :data:`FAMILY_COST` terms:
    ``a * (n / 50)^p`` (:attr:`~pesflow.engine.MethodInfo.cost_prefactor_s`,
    ``cost_exponent``; ``n`` the basis functions, or the atoms without a basis set)."""
    info = method_info(method)
    return OVERHEAD_S + scale * info.cost_prefactor_s * (size.nbf / 50.0) ** info.cost_exponent


def _term(cost: FamilyCost, size: Size, grid_level: int = 3) -> float:
    value = (
        cost.prefactor_s
        * (size.nbf / 50.0) ** cost.n_power
        * (size.nocc / 5.0) ** cost.o_power
        * (size.nvir / 45.0) ** cost.v_power
        * size.natm**cost.atom_power
    )
    if cost.atom_power:  # a grid term: grids grow with the grid level
        value *= GRID_LEVEL_FACTOR ** (grid_level - 3)
    return value


def scf_seconds(size: Size, scale: float = 1.0) -> float:
    """Model seconds of one SCF point (no grid)."""
    return OVERHEAD_S + scale * _term(SCF_COST, size)


def step_seconds(cls: str, size: Size, scale: float = 1.0, grid_level: int = 3) -> float:
    """Model seconds a family adds to its SCF at one point."""
    # A class without terms here (excited states) adds nothing: its walks are kept whole.
    return scale * sum(_term(c, size, grid_level) for c in FAMILY_COST.get(cls, ()))


def point_seconds(method: str, size: Size, scales=None, grid_level: int = 3) -> float:
    """Model seconds of one stored record of ``method`` (its ``wall_s``).

    ``scales`` maps ``"scf"`` and family names to calibration factors (default 1).
    """
    scales = scales or {}
    cls = method_class(method)
    if _has_own_law(cls):
        return _engine_seconds(method, size, scales.get(cls, 1.0))
    return scf_seconds(size, scales.get("scf", 1.0)) + step_seconds(
        cls, size, scales.get(cls, 1.0), grid_level
    )


# ---------------------------------------------------------------------------
# sizes of a campaign's molecules
# ---------------------------------------------------------------------------


def used_pairs(campaign) -> list[tuple[str, str]]:
    """The (molecule, basis) pairs a campaign computes (scan levels can differ per scan)."""
    pairs = []
    for scan in campaign.scans.values():
        for molecule in scan.molecules:
            for level in scan.levels:
                if not level.members and (molecule, level.basis) not in pairs:
                    pairs.append((molecule, level.basis))
    return pairs


def molecule_sizes(campaign, pairs=None) -> dict[tuple[str, str], Size]:
    """Basis functions (PySCF's count), occupied orbitals and atoms of each (molecule,
    basis) pair; ``pairs`` defaults to those the campaign computes.  A pair PySCF cannot
    build is left out (an estimate then falls back to a typical size)."""
    from pyscf import gto

    out = {}
    for molecule, basis in used_pairs(campaign) if pairs is None else pairs:
        mol = campaign.molecules[molecule]
        if not basis:  # a level without basis set (tight binding) scales with the atoms
            n = len(mol.symbols)
            out[(molecule, basis)] = Size(nbf=n, nocc=max(1, n), natm=n)
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
        out[(molecule, basis)] = Size(nbf=int(m.nao), nocc=int(max(m.nelec)), natm=int(m.natm))
    return out


def basis_function_counts(campaign, pairs=None) -> dict[tuple[str, str], int]:
    """Number of basis functions of each (molecule, basis) pair (see :func:`molecule_sizes`)."""
    return {pair: size.nbf for pair, size in molecule_sizes(campaign, pairs).items()}


def _as_size(value) -> Size:
    return value if isinstance(value, Size) else Size(nbf=int(value))


def size_weights(sizes) -> dict[tuple[str, str], float]:
    """Model seconds of one SCF point per (molecule, basis), for cutting batches evenly.

    ``sizes`` maps pairs to :class:`Size` (or to a basis-function count)."""
    tight_binding = TIGHT_BINDING_METHODS[0]
    return {
        pair: scf_seconds(_as_size(s)) if pair[1] else _engine_seconds(tight_binding, _as_size(s))
        for pair, s in sizes.items()
    }


# ---------------------------------------------------------------------------
# calibration and estimate
# ---------------------------------------------------------------------------


def calibrate(timed: pd.DataFrame) -> dict:
    """Calibration factors from stored records: ``{"scf": f, family: f, (family, basis): f}``.

    ``timed`` has columns molecule, method, basis, wall_s, step_wall_s (optional) and
    nbf, nocc, natm.  The SCF factor comes from hf records (their ``wall_s``); a
    family's factor from its ``step_wall_s`` (a functional's from its ``wall_s`` minus
    the modelled SCF).  Each factor is the median ratio of measured to modelled time.
    """
    timed = timed[(timed["nbf"] >= MIN_CALIBRATION_NBF) & timed["wall_s"].notna()]
    scales: dict = {}
    if timed.empty:
        return scales
    sizes = [
        Size(int(n), int(o), int(a)) for n, o, a in zip(timed["nbf"], timed["nocc"], timed["natm"])
    ]
    cls = timed["method"].map(method_class).to_numpy()
    wall = timed["wall_s"].to_numpy(dtype=float)
    step = (
        timed["step_wall_s"].to_numpy(dtype=float)
        if "step_wall_s" in timed
        else np.full(len(timed), np.nan)
    )
    scf_model = np.array([_term(SCF_COST, s) for s in sizes])
    ratios: dict = {}
    for i, c in enumerate(cls):
        basis = timed["basis"].iat[i]
        if _has_own_law(c):
            method = timed["method"].iat[i]
            value = wall[i] - OVERHEAD_S
            model, group = _engine_seconds(method, sizes[i]) - OVERHEAD_S, c
        elif c == "hf":
            value, model = wall[i] - OVERHEAD_S, scf_model[i]
            group = "scf"
        elif c == "dft":
            value = wall[i] - OVERHEAD_S - scf_model[i] * scales.get("scf", 1.0)
            model = step_seconds("dft", sizes[i])
            group = "dft"
        else:
            value, model, group = step[i], step_seconds(c, sizes[i]), c
        if not np.isfinite(value) or model <= 0:
            continue
        ratio = max(value, 0.0) / model
        ratios.setdefault(group, []).append(ratio)
        ratios.setdefault((group, basis), []).append(ratio)
    for group, values in ratios.items():
        scales[group] = float(np.median(values))
    return scales


def _scales_for(scales: dict, cls: str, basis: str) -> dict:
    return {
        "scf": scales.get(("scf", basis), scales.get("scf", 1.0)),
        cls: scales.get((cls, basis), scales.get(cls, 1.0)),
    }


def estimate(points: pd.DataFrame, sizes, grid_level: int = 3) -> pd.DataFrame:
    """Estimated seconds of the pending points, per level.

    ``points`` is the points table (columns molecule, level, method, basis, status,
    wall_s, and optionally step_wall_s); ``sizes`` maps (molecule, basis) to
    :class:`Size` (or to a basis-function count).  Returns one row per level:
    ``pending``, ``estimate_s``, ``estimate_core_h``, ``share``, ``source`` (how the
    estimate was made).  A correlated level's seconds include its SCF, which its hf
    level shares: :func:`total_seconds` counts each SCF once.
    """
    sizes = {pair: _as_size(s) for pair, s in sizes.items()}
    typical = Size(50)
    pts = points.copy()
    size_col = [sizes.get((m, b), typical) for m, b in zip(pts["molecule"], pts["basis"])]
    pts["nbf"] = [s.nbf for s in size_col]
    pts["nocc"] = [s.nocc for s in size_col]
    pts["natm"] = [s.natm for s in size_col]
    timed = pts[(pts["status"] == "done") & pts["wall_s"].notna()]
    scales = calibrate(timed)
    medians = timed.groupby(["molecule", "level"])["wall_s"].median().to_dict()
    pending = pts[pts["status"] == "pending"]
    if "state" in pending:  # the states of a multi-state level come from one calculation
        pending = pending[pending["state"] == 0]
    rows = []
    for level, sub in pending.groupby("level", sort=False):
        seconds, sources = 0.0, set()
        for (mol, method, basis), grp in sub.groupby(["molecule", "method", "basis"]):
            if (mol, level) in medians:
                seconds += len(grp) * medians[(mol, level)]
                sources.add("stored timings")
                continue
            size = sizes.get((mol, basis), typical)
            cls = method_class(method)
            s = _scales_for(scales, cls, basis)
            seconds += len(grp) * point_seconds(method, size, s, grid_level)
            calibrated = "scf" in scales or cls in scales
            sources.add("scaling model, calibrated" if calibrated else "scaling model")
        rows.append(
            {
                "level": level,
                "pending": len(sub),
                "estimate_s": seconds,
                "estimate_core_h": seconds / 3600.0,
                "source": " + ".join(sorted(sources)),
            }
        )
    table = pd.DataFrame(
        rows, columns=["level", "pending", "estimate_s", "estimate_core_h", "source"]
    )
    total = table["estimate_s"].sum()
    table["share"] = table["estimate_s"] / total if total > 0 else 0.0
    return table


def total_seconds(table: pd.DataFrame, points: pd.DataFrame, sizes, grid_level: int = 3) -> float:
    """The whole pending work in core-seconds, each shared SCF counted once.

    ``table`` is :func:`estimate`'s result for ``points``; from each correlated level's
    estimate the SCF part is taken away where the hf level of the same basis is pending
    too (they share one SCF per geometry).
    """
    sizes = {pair: _as_size(s) for pair, s in sizes.items()}
    total = float(table["estimate_s"].sum())
    pending = points[points["status"] == "pending"]
    hf_levels = set(pending.loc[pending["method"] == "hf", "level"])
    for (mol, method, basis), grp in pending.groupby(["molecule", "method", "basis"]):
        shares_hf = method_info(method).family == "hf"  # not hf(pcm:water), casscf(6,6)
        if method_class(method) in ("hf", "dft") or not shares_hf or f"hf/{basis}" not in hf_levels:
            continue
        total -= len(grp) * scf_seconds(sizes.get((mol, basis), Size(50)))
    return max(total, 0.0)


def walk_seconds(plan, sizes, scales=None):
    """A function giving a walk's (a :class:`~pesflow.plan.expand.Batch`'s) model seconds:
    per geometry one SCF (with its grid, for a functional) plus each method's step.
    A relaxed walk costs :data:`pesflow.plan.expand.RELAX_WEIGHT` times as much per
    method (one constrained optimisation each)."""
    from pesflow.plan.expand import RELAX_WEIGHT

    sizes = {pair: _as_size(s) for pair, s in sizes.items()}
    scales = scales or {}

    def seconds(batch) -> float:
        gs = plan.geometry_sets[batch.set_id]
        size = sizes.get((gs.molecule, batch.basis), Size(50))
        grid = int(gs.settings_key.get("grid_level", 3)) if gs.settings_key else 3
        total = 0.0
        for _, methods in batch.entries:
            # Methods of another backend's cost law (tight binding) cost a point each; the
            # PySCF ones share one SCF plus each family's step.
            own = [m for m in methods if _has_own_law(method_class(m))]
            s = sum(_engine_seconds(m, size, scales.get(method_class(m), 1.0)) for m in own)
            classes = {method_class(m) for m in methods if m not in own}
            if classes:
                s += scf_seconds(size, scales.get("scf", 1.0))
                s += sum(step_seconds(c, size, scales.get(c, 1.0), grid) for c in classes)
            if gs.relax:
                s *= RELAX_WEIGHT * len(methods)
            total += s
        return total

    return seconds


def dominant_levels(table: pd.DataFrame, threshold: float = 0.5) -> list[str]:
    """Levels whose estimated cost is more than ``threshold`` of the whole."""
    if len(table) < 2:
        return []
    return list(table.loc[table["share"] > threshold, "level"])
