"""PySCF backend: HF and DFT (R/U/RO references), MP2, CCSD and CCSD(T).

One call of :meth:`PySCFEngine.compute` is one point: the SCF of one scf family is
converged once (through a ladder of strategies) and serves every method built on
it; each method gets its own :class:`~pesflow.engine.PointResult`.  The steps are
plain functions (:func:`converge_scf` strings the SCF ones together):

* :func:`build_mole` - geometry and basis to a PySCF ``Mole`` (angstrom, no symmetry,
  silent, no output file);
* :func:`build_scf` - the SCF object of a family and reference;
* :func:`prepare_guess` - a neighbour's density made to fit this SCF, or None;
* :func:`run_scf_ladder` - the convergence strategies, in order, until one converges;
* :func:`follow_instabilities` - stability analysis, and a restart from every
  instability it finds; for a broken-symmetry singlet, the restart along the
  RHF -> UHF instability that breaks the spin symmetry;
* :func:`run_mp2`, :func:`run_ccsd` - the correlated steps on a converged SCF.

:meth:`PySCFEngine.relax` optimises every degree of freedom but the constrained
ones (a relaxed scan point) with geomeTRIC through PySCF's driver.

PySCF itself is imported inside the functions, so importing this module (and asking
for the engine's name and version) stays cheap.
"""

from __future__ import annotations

import contextlib
import importlib.metadata
import logging
import math
import os
import tempfile
import time
import warnings
from dataclasses import dataclass, field

import numpy as np

from pesflow.engine import (
    EngineSettings,
    Geometry,
    PointResult,
    canonical_method,
    check_basis,
    scf_family,
)
from pesflow.errors import EngineSetupError
from pesflow.units import BOHR_ANGSTROM

#: Damping factor and iteration budget factor of the "damped" rung.
DAMP_FACTOR = 0.5
DAMPED_CYCLE_FACTOR = 2
#: Damping is applied in the first cycles of the "damped" rung, DIIS from this cycle on.
DAMPED_DIIS_START_CYCLE = 10
#: Virtual-orbital shift (hartree) of the "level-shift" rung before its unshifted polish.
LEVEL_SHIFT_HARTREE = 0.5
#: Iteration limit of the CCSD amplitude equations (PySCF's default is 50).
CCSD_MAX_CYCLE = 100
#: Largest |D_alpha - D_beta| element below which a singlet density counts as
#: spin-restricted (PySCF applies the same test before breaking its own guesses).
SPIN_SYMMETRIC_TOLERANCE = 1e-2
#: Instabilities followed per point before the stability analysis gives up.
STABILITY_MAX_CYCLE = 3
#: Geometry steps of one relaxation before it counts as not converged.
RELAX_MAX_STEPS = 100
#: geomeTRIC's ``enforce`` threshold: once every constraint is within it (bohr or
#: radian), the constraints are met exactly on every further step.
RELAX_ENFORCE = 0.1
#: Methods with analytic nuclear gradients in PySCF that :meth:`PySCFEngine.relax` uses.
GRADIENT_WAVEFUNCTION_METHODS = ("hf", "mp2", "ccsd")
#: Constraint kinds of a relaxed point and the number of atoms each takes.
CONSTRAINT_ATOMS = {"distance": 2, "angle": 3, "dihedral": 4}

_SCF_LABELS = {
    ("hf", "restricted"): "RHF",
    ("hf", "unrestricted"): "UHF",
    ("hf", "restricted-open"): "ROHF",
    ("dft", "restricted"): "RKS",
    ("dft", "unrestricted"): "UKS",
    ("dft", "restricted-open"): "ROKS",
}


@dataclass
class LadderOutcome:
    """What :func:`run_scf_ladder` returns.

    Fields:
        mf: the SCF object of the last rung run (a second-order wrapper if that rung ran).
        converged: True when some rung converged.
        attempts: one dict per rung tried (rung, converged, cycles, energy_hartree).
        cycles: SCF iterations summed over the rungs.
        wall_s: wall time of the whole ladder in s.
        last_error: one-line text of the last exception a rung raised, if any.
    """

    mf: object
    converged: bool
    attempts: list[dict] = field(default_factory=list)
    cycles: int = 0
    wall_s: float = 0.0
    last_error: str | None = None


def resolve_reference(reference: str, multiplicity: int, broken_symmetry: bool = False) -> str:
    """The reference kind for a setting and a multiplicity.

    ``auto`` gives ``restricted`` for a singlet and ``unrestricted`` for an open
    shell, or for every multiplicity when ``broken_symmetry`` is set;
    ``restricted`` on an open shell means restricted-open (as PySCF's RHF does).

    >>> resolve_reference("auto", 2), resolve_reference("restricted", 3)
    ('unrestricted', 'restricted-open')
    >>> resolve_reference("auto", 1, broken_symmetry=True)
    'unrestricted'
    """
    if reference == "auto":
        if broken_symmetry:
            return "unrestricted"
        return "restricted" if multiplicity == 1 else "unrestricted"
    if reference == "restricted" and multiplicity != 1:
        return "restricted-open"
    return reference


def count_electrons(geometry: Geometry) -> int:
    """Number of electrons of a geometry (nuclear charges minus the total charge).

    Raises EngineSetupError for a symbol that is not an element or an impossible spin.
    """
    from pyscf.data import elements

    total = 0
    for symbol in geometry.symbols:
        z = elements.charge(symbol)
        if z <= 0:
            raise EngineSetupError(f"unknown element symbol {symbol!r}")
        total += z
    n_electrons = total - geometry.charge
    spin = geometry.spin
    if n_electrons <= 0 or spin > n_electrons or (n_electrons - spin) % 2:
        raise EngineSetupError(
            f"{n_electrons} electrons (charge {geometry.charge}) cannot have "
            f"multiplicity {geometry.multiplicity}"
        )
    return n_electrons


def build_mole(geometry: Geometry, basis: str, settings: EngineSettings):
    """A built PySCF ``Mole``: angstrom, no symmetry, silent, no output file.

    >>> mol = build_mole(Geometry(("H", "H"), [[0, 0, 0], [0, 0, 0.74]]), "sto-3g",
    ...                  EngineSettings())
    >>> mol.nao_nr()
    2
    """
    from pyscf import gto

    mol = gto.Mole()
    positions = geometry.positions_angstrom
    mol.atom = [(s, tuple(xyz)) for s, xyz in zip(geometry.symbols, positions, strict=True)]
    mol.unit = "Angstrom"
    mol.basis = basis
    mol.charge = geometry.charge
    mol.spin = geometry.spin
    mol.symmetry = False
    mol.verbose = 0
    mol.output = None
    mol.max_memory = settings.max_memory_mb
    mol.build()
    return mol


def build_scf(mol, family: str, kind: str, settings: EngineSettings):
    """The (not yet run) SCF object of an scf family ("hf" or a functional) and a
    reference kind (restricted, unrestricted, restricted-open)."""
    from pyscf import dft, scf

    classes = {
        ("hf", "restricted"): scf.hf.RHF,
        ("hf", "unrestricted"): scf.uhf.UHF,
        ("hf", "restricted-open"): scf.rohf.ROHF,
        ("dft", "restricted"): dft.rks.RKS,
        ("dft", "unrestricted"): dft.uks.UKS,
        ("dft", "restricted-open"): dft.roks.ROKS,
    }
    mf = classes[_family_kind(family), kind](mol)
    if family != "hf":
        mf.xc = family
        mf.grids.level = settings.grid_level
    mf.conv_tol = settings.conv_tol
    mf.max_cycle = settings.max_cycle
    mf.max_memory = settings.max_memory_mb
    mf.verbose = 0
    # No checkpoint file: PySCF would otherwise write one per SCF into its TMPDIR.
    # It has already opened a temporary one; close it now rather than leave it to the
    # garbage collector, which warns about the open file when the SCF object sits
    # in a reference cycle (as it does under a gradient scanner).
    handle = vars(mf).pop("_chkfile", None)
    if handle is not None:
        handle.close()
    mf.chkfile = None
    return mf


def prepare_guess(guess, mf):
    """A neighbour's density matrix made to fit ``mf``, or None to use PySCF's guess.

    A restricted density ``(nao, nao)`` is split in halves for an unrestricted or
    restricted-open SCF; a spin density pair ``(2, nao, nao)`` is summed for a
    restricted one.  A guess of another size (another basis) or with non-finite
    entries is ignored.
    """
    if guess is None:
        return None
    dm = np.asarray(guess)
    if np.iscomplexobj(dm) or not np.all(np.isfinite(dm)):
        return None
    nao = mf.mol.nao_nr()
    wants_pair = _is_spin_pair_scf(mf)
    if dm.shape == (nao, nao):
        dm = np.array(dm, dtype=float)
        return np.array((dm / 2, dm / 2)) if wants_pair else dm
    if dm.shape == (2, nao, nao):
        dm = np.array(dm, dtype=float)
        return dm if wants_pair else dm[0] + dm[1]
    return None


def is_spin_symmetric(dm) -> bool:
    """True for a restricted density ``(nao, nao)`` or an alpha/beta pair whose two
    halves agree to :data:`SPIN_SYMMETRIC_TOLERANCE` in every element."""
    dm = np.asarray(dm)
    if dm.ndim == 2:
        return True
    return bool(np.max(np.abs(dm[0] - dm[1])) < SPIN_SYMMETRIC_TOLERANCE)


@dataclass
class StabilityCheck:
    """What :func:`analyse_stability` found at one converged SCF.

    Fields:
        direction: None when stable, else the instability to follow: ``internal``
            (a lower solution of the same kind) or ``rhf->uhf`` (an unrestricted
            singlet sitting on the restricted solution, below which a spin-broken
            one lies).
        dm: the density of the rotated orbitals to restart the SCF from, or None.
        rhf_to_uhf_stable: for a restricted closed shell, whether it is also stable
            towards an unrestricted solution (reported, not followed: the
            reference is a setting); None for other references.
    """

    direction: str | None
    dm: object = None
    rhf_to_uhf_stable: bool | None = None


def analyse_stability(mf, internal: bool = True) -> StabilityCheck:
    """PySCF's stability analysis of a converged SCF, as appropriate to its reference.

    * RHF/RKS: internal (RHF -> RHF) instabilities, to follow; the external
      RHF -> UHF test is run and reported only.
    * UHF/UKS: when the solution is a singlet with equal alpha and beta densities
      (the restricted solution, reached from a spin-symmetric start), first the
      RHF -> UHF test of the same orbitals, then internal instabilities.  (In the
      other order, a spin-symmetric internal instability of stretched N2 was
      followed first and led to an excited branch, UHF/6-31G.)  PySCF's
      UHF test alone can miss that case (its trial vectors start spin-symmetric
      and the Hessian never mixes in the spin-broken part).  The RHF -> UHF
      eigenvector ``K`` is followed as the rotation ``exp(+K)`` of the alpha and
      ``exp(-K)`` of the beta orbitals; PySCF's own restart rotates the alpha
      orbitals alone, half of it a spin-symmetric rotation, and fell back to the
      restricted solution for N2 at 1.5-4 angstrom (UHF/6-31G, measured).
    * ROHF/ROKS: internal instabilities.

    With ``internal=False`` only the RHF -> UHF test of a spin-symmetric UHF/UKS
    singlet runs (what a broken-symmetry calculation needs); every other solution
    counts as stable.
    """
    from pyscf import scf

    if isinstance(mf, scf.uhf.UHF):
        if mf.mol.spin == 0 and is_spin_symmetric(mf.make_rdm1()):
            restricted = mf.to_rhf()
            _, mo_e, _, stable_e = restricted.stability(
                internal=False, external=True, return_status=True
            )
            if not stable_e:
                coeff = restricted.mo_coeff
                rotation = coeff.T @ mf.get_ovlp() @ mo_e[0]  # exp(K), orthogonal
                pair = (coeff @ rotation, coeff @ rotation.T)
                return StabilityCheck("rhf->uhf", mf.make_rdm1(pair, mf.mo_occ))
        if internal:
            mo_i, _, stable_i, _ = mf.stability(internal=True, external=False, return_status=True)
            if not stable_i:
                return StabilityCheck("internal", mf.make_rdm1(mo_i, mf.mo_occ))
        return StabilityCheck(None)
    if not internal:
        return StabilityCheck(None)
    if isinstance(mf, scf.rohf.ROHF):
        mo_i, _, stable_i, _ = mf.stability(internal=True, external=False, return_status=True)
        dm = None if stable_i else mf.make_rdm1(mo_i, mf.mo_occ)
        return StabilityCheck(None if stable_i else "internal", dm)
    mo_i, _, stable_i, stable_e = mf.stability(internal=True, external=True, return_status=True)
    dm = None if stable_i else mf.make_rdm1(mo_i, mf.mo_occ)
    return StabilityCheck(None if stable_i else "internal", dm, bool(stable_e))


def run_scf_ladder(mf, dm0, settings: EngineSettings) -> LadderOutcome:
    """Try the rungs of ``settings.scf_ladder`` in order until one converges.

    Each rung starts from the density the previous one ended with (the first from
    ``dm0``, or PySCF's atomic guess when None).  A rung that raises counts as not
    converged and the next one starts from the last good density.
    """
    start = time.perf_counter()
    outcome = LadderOutcome(mf=mf, converged=False)
    dm = dm0
    for rung in settings.scf_ladder:
        try:
            used, converged, cycles = _RUNGS[rung](mf, dm, settings)
            energy = float(used.e_tot)
        except Exception as exc:  # a numerical failure of one strategy; try the next
            used, converged, cycles, energy = mf, False, 0, math.nan
            outcome.last_error = error_line(exc)
        outcome.attempts.append(
            {"rung": rung, "converged": bool(converged), "cycles": int(cycles),
             "energy_hartree": energy}
        )  # fmt: skip
        outcome.cycles += int(cycles)
        outcome.mf = used
        if converged:
            outcome.converged = True
            break
        dm = _last_density(used, dm)
    outcome.wall_s = time.perf_counter() - start
    return outcome


def follow_instabilities(
    mf, ladder: LadderOutcome, settings: EngineSettings, internal: bool = True
) -> None:
    """Stability analysis of a converged ladder, restarting from each instability found.

    Up to :data:`STABILITY_MAX_CYCLE` times: :func:`analyse_stability` of the current
    solution (``internal`` passed on); when unstable, the whole SCF ladder is run
    again (on a copy of ``mf``, which shares its integrals) from the rotated
    orbitals, and its solution is kept when it converged lower in energy.
    ``ladder`` is updated in place: ``mf``, ``cycles``, ``wall_s`` and one more
    attempt, of rung ``stability`` (``broken-symmetry`` with ``internal=False``),
    with the keys

    * ``converged``: every restart that was kept converged (True when none was needed);
    * ``cycles``: SCF iterations of the restarts; ``energy_hartree``: the final energy;
    * ``stable``: the final solution passed the analysis (False when the cycle
      limit was reached or a restart did not go lower; None if the analysis raised);
    * ``instabilities``: the directions found, in order (``internal``, ``rhf->uhf``);
    * ``energy_lowered_hartree``: how far the restarts lowered the energy (>= 0);
    * ``rhf_to_uhf_stable``: for a restricted closed shell, the external test
      (None otherwise);
    * ``error``: the analysis's exception, only if it raised.
    """
    start = time.perf_counter()
    current = ladder.mf
    e_start = float(current.e_tot)
    entry = {"rung": "stability" if internal else "broken-symmetry", "converged": True,
             "cycles": 0, "energy_hartree": e_start, "stable": None, "instabilities": [],
             "energy_lowered_hartree": 0.0, "rhf_to_uhf_stable": None}  # fmt: skip
    # A restart must lower the energy by more than the SCF noise to count as progress.
    threshold_hartree = 10 * settings.conv_tol
    try:
        for _ in range(STABILITY_MAX_CYCLE + 1):
            check = analyse_stability(current, internal=internal)
            if check.rhf_to_uhf_stable is not None:
                entry["rhf_to_uhf_stable"] = check.rhf_to_uhf_stable
            if check.direction is None:
                entry["stable"] = True
                break
            entry["instabilities"].append(check.direction)
            entry["stable"] = False
            if len(entry["instabilities"]) > STABILITY_MAX_CYCLE:
                break
            restart = run_scf_ladder(mf.copy(), check.dm, settings)
            entry["cycles"] += restart.cycles
            if not restart.converged or restart.mf.e_tot > current.e_tot - threshold_hartree:
                entry["converged"] = restart.converged
                break
            current = restart.mf
    except Exception as exc:  # a failed analysis leaves the converged SCF as it was
        entry["stable"] = None
        entry["error"] = error_line(exc)
    entry["energy_hartree"] = float(current.e_tot)
    entry["energy_lowered_hartree"] = e_start - float(current.e_tot)
    ladder.mf = current
    ladder.cycles += entry["cycles"]
    ladder.attempts.append(entry)
    ladder.wall_s += time.perf_counter() - start


def converge_scf(geometry, basis, family, kind, settings: EngineSettings, guess=None):
    """Build the SCF of one point and converge it: guess, ladder, stability analysis.

    Inputs are those of :meth:`PySCFEngine.compute` plus the scf ``family`` and the
    reference ``kind`` already resolved.  Returns the :class:`LadderOutcome`, with
    one more attempt from :func:`follow_instabilities` when the ladder converged and

    * ``settings.stability`` is set (rung ``stability``: every instability), or
    * ``settings.broken_symmetry`` is set on an unrestricted singlet (rung
      ``broken-symmetry``: the RHF -> UHF instability only).

    How the spin symmetry is broken: the SCF first converges from the neighbour's
    density (or PySCF's atomic guess, kept spin-symmetric); a neighbour's
    spin-broken pair carries the broken symmetry along a walk.  When the solution
    comes out spin-symmetric, the stability analysis gives the orbital rotation
    that lowers the energy most steeply, and the SCF restarts from it; short of the
    Coulson-Fischer point, where the restricted solution is the only one, nothing
    is found and the restricted solution stands.  Rotating the HOMO into the LUMO
    (alpha and beta with opposite angles) is the cheaper textbook guess, but the
    frontier pair is not always the breaking bond's pair: for F2 it is the occupied
    pi* and the empty sigma*, and that SCF lands 0.34 hartree above two F atoms at
    4 angstrom; for N2 it breaks one of the three bonds (UHF/6-31G, measured).

    Measured with UHF/6-31G from a cold start (no guess): H2 and F2 reach the sum
    of the atoms from 2 to 8 angstrom, N2 from 2 to 6 angstrom; at 8 angstrom N2
    lands on an excited branch (0.29 hartree high).  A walk that starts at a bonded
    geometry (or anywhere the cold start is right) carries the right branch along.
    """
    mf = build_scf(build_mole(geometry, basis, settings), family, kind, settings)
    breaks_symmetry = settings.broken_symmetry and kind == "unrestricted" and geometry.spin == 0
    if breaks_symmetry:
        # Start spin-symmetric and let the instability choose the direction: PySCF's
        # own symmetry breaking of its atomic guess (the beta density cut to the
        # atoms' diagonal blocks) landed on excited branches (N2 at 6 angstrom,
        # F2 at 5 angstrom, UHF/6-31G, 0.2-0.35 hartree above two atoms).
        mf.init_guess_breaksym = 0
    ladder = run_scf_ladder(mf, prepare_guess(guess, mf), settings)
    if ladder.converged and (settings.stability or breaks_symmetry):
        follow_instabilities(mf, ladder, settings, internal=settings.stability)
    return ladder


def run_mp2(mf, frozen):
    """Total MP2 energy (hartree) on a converged SCF; UMP2 on an open-shell reference."""
    from pyscf import mp

    pt = mp.MP2(mf, frozen=frozen)
    pt.kernel()
    return float(pt.e_tot)


def run_ccsd(mf, frozen, settings: EngineSettings):
    """Converged CCSD object on a converged SCF (UCCSD on an open-shell reference).

    The amplitude equations are converged to ``settings.conv_tol`` in the energy.
    Raises ConvergenceError when they do not converge in :data:`CCSD_MAX_CYCLE` steps.
    """
    from pyscf import cc

    from pesflow.errors import ConvergenceError

    mycc = cc.CCSD(mf, frozen=frozen)
    mycc.conv_tol = settings.conv_tol
    mycc.max_cycle = CCSD_MAX_CYCLE
    mycc.kernel()
    if not mycc.converged:
        raise ConvergenceError(f"CCSD did not converge in {mycc.max_cycle} iterations")
    return mycc


def run_triples(mycc):
    """Total CCSD(T) energy (hartree) from a converged CCSD object."""
    return float(mycc.e_tot + mycc.ccsd_t())


def check_constraints(constraints, n_atoms: int) -> list[tuple[str, tuple[int, ...], float]]:
    """Validated constraints of a relaxed point, as ``(kind, atoms, value)`` tuples.

    Inputs:
        constraints: a list of ``(kind, atoms, value)``: ``kind`` one of
            :data:`CONSTRAINT_ATOMS` (distance, angle, dihedral), ``atoms`` the
            0-based atom indices (2, 3 or 4; the angle's vertex in the middle),
            ``value`` in angstrom for a distance and degrees for an angle or a
            dihedral.  An empty list relaxes everything.
        n_atoms: number of atoms of the geometry.

    Raises EngineSetupError naming the first bad constraint.

    >>> check_constraints([("dihedral", [0, 1, 2, 3], 190)], 4)
    [('dihedral', (0, 1, 2, 3), -170.0)]
    """
    checked = []
    for number, constraint in enumerate(constraints, start=1):
        try:
            kind, atoms, value = constraint
            atoms = tuple(int(i) for i in atoms)
            value = float(value)
        except (TypeError, ValueError):
            raise EngineSetupError(
                f"constraint {number} must be (kind, atoms, value), got {constraint!r}"
            ) from None
        where = f"constraint {number} ({kind} {list(atoms)})"
        if kind not in CONSTRAINT_ATOMS:
            raise EngineSetupError(f"{where}: kind must be one of {', '.join(CONSTRAINT_ATOMS)}")
        if len(atoms) != CONSTRAINT_ATOMS[kind]:
            raise EngineSetupError(f"{where}: {kind} takes {CONSTRAINT_ATOMS[kind]} atoms")
        if len(set(atoms)) != len(atoms) or not all(0 <= i < n_atoms for i in atoms):
            raise EngineSetupError(
                f"{where}: atoms must be distinct 0-based indices below {n_atoms}"
            )
        if not math.isfinite(value):
            raise EngineSetupError(f"{where}: value must be finite, got {value}")
        if kind == "distance" and value <= 0:
            raise EngineSetupError(f"{where}: distance must be positive, got {value} angstrom")
        if kind == "angle" and not 0 < value < 180:
            raise EngineSetupError(f"{where}: angle must lie in (0, 180) degrees, got {value}")
        if kind == "dihedral":
            value = _wrap_degree(value)
        checked.append((kind, atoms, value))
    return checked


def constraints_text(constraints) -> str:
    """The constraints in geomeTRIC's input format (``$set`` block, atoms from 1).

    >>> print(constraints_text([("distance", (0, 1), 1.1)]), end="")
    $set
    distance 1 2 1.1
    """
    lines = ["$set"]
    for kind, atoms, value in constraints:
        lines.append(" ".join([kind, *(str(i + 1) for i in atoms), f"{value:.12g}"]))
    return "\n".join(lines) + "\n"


def gradient_scanner(mf, method: str, settings: EngineSettings):
    """PySCF's nuclear-gradient scanner of a method on a converged SCF.

    The scanner is a callable that takes the next geometry, converges the SCF from
    the previous density (so a broken-symmetry solution stays broken) and returns
    ``(energy_hartree, gradient_hartree_bohr)``.  ``method`` is hf, a DFT
    functional, mp2 or ccsd (RMP2/UMP2 and RCCSD/UCCSD analytic gradients).
    """
    from pyscf import cc, mp

    frozen = _frozen_core(mf.mol) if settings.frozen_core else None
    if method == "mp2":
        solver = mp.MP2(mf, frozen=frozen)
    elif method == "ccsd":
        solver = cc.CCSD(mf, frozen=frozen)
        solver.conv_tol = settings.conv_tol
        solver.max_cycle = CCSD_MAX_CYCLE
    else:
        solver = mf
    return solver.nuc_grad_method().as_scanner()


@dataclass
class OptimisationTrace:
    """The geometries geomeTRIC asked for, with energy and gradient at each.

    Fields (one entry per gradient evaluation, in order):
        energies_hartree: energies in hartree.
        gradients_hartree_bohr: ``(n, 3)`` Cartesian gradients in hartree/bohr.
        positions_bohr: ``(n, 3)`` positions in bohr.
    """

    energies_hartree: list[float] = field(default_factory=list)
    gradients_hartree_bohr: list[np.ndarray] = field(default_factory=list)
    positions_bohr: list[np.ndarray] = field(default_factory=list)

    def add(self, env):
        # PySCF's geomeTRIC engine hands its local variables to the callback.
        self.energies_hartree.append(float(env["energy"]))
        self.gradients_hartree_bohr.append(np.array(env["gradients"], dtype=float))
        self.positions_bohr.append(np.array(env["coords"], dtype=float).reshape(-1, 3))


def optimise_geometry(scanner, constraints, max_steps: int = RELAX_MAX_STEPS, trace=None):
    """Run geomeTRIC through PySCF's driver under ``constraints``; nothing is printed.

    Inputs:
        scanner: a gradient scanner (:func:`gradient_scanner`).
        constraints: checked constraints (:func:`check_constraints`); may be empty.
        max_steps: geometry steps before giving up [:data:`RELAX_MAX_STEPS`].
        trace: an :class:`OptimisationTrace` to fill (a new one if None); it keeps
            the steps made when the optimisation raises.

    Returns ``(converged, mol, trace)``: geomeTRIC's own convergence test (GAU
    criteria, the constraints met to :data:`RELAX_ENFORCE` and then exactly), the
    PySCF ``Mole`` at the last geometry and the trace.  Every file (the
    constraints, geomeTRIC's log and trajectory) lives in temporary directories
    that are removed.  Raises what the scanner raises, and RuntimeError when an
    SCF along the way does not converge.
    """
    from pyscf.geomopt import geometric_solver

    trace = OptimisationTrace() if trace is None else trace
    with tempfile.TemporaryDirectory(prefix="pesflow-relax-") as directory:
        path = None
        if constraints:
            path = os.path.join(directory, "constraints.txt")
            with open(path, "w") as handle:
                handle.write(constraints_text(constraints))
        with _silent_geometric_logging(directory) as log_ini, warnings.catch_warnings():
            # geomeTRIC reads the constraints file without closing it.
            warnings.simplefilter("ignore", ResourceWarning)
            converged, mol = geometric_solver.kernel(
                scanner,
                assert_convergence=True,
                constraints=path,
                callback=trace.add,
                maxsteps=max_steps,
                logIni=log_ini,
                enforce=RELAX_ENFORCE,
            )
    return bool(converged), mol, trace


def constraint_report(constraints, positions_bohr) -> list[dict]:
    """Target and reached value of each constraint (angstrom or degrees, atoms from 1)."""
    report = []
    for kind, atoms, target in constraints:
        value = _primitive(kind, atoms).value(positions_bohr)
        if kind == "distance":
            unit, reached = "angstrom", float(value * BOHR_ANGSTROM)
        else:
            unit, reached = "degree", math.degrees(float(value))
        report.append({"kind": kind, "atoms": [i + 1 for i in atoms], "unit": unit,
                       "target": target, "final": reached})  # fmt: skip
    return report


def free_gradient(gradient_hartree_bohr, constraints, positions_bohr) -> np.ndarray:
    """The Cartesian gradient with the constrained directions projected out.

    At a constrained minimum the gradient is a combination of the constraints'
    own gradients (their Lagrange multipliers); what is left after removing that
    least-squares combination is what the optimiser drives to zero.
    """
    gradient = np.asarray(gradient_hartree_bohr, dtype=float).ravel()
    if not constraints:
        return gradient.reshape(-1, 3)
    rows = np.array(
        [
            _primitive(kind, atoms).derivative(positions_bohr).ravel()
            for kind, atoms, _ in constraints
        ]
    )
    multipliers = np.linalg.lstsq(rows.T, gradient, rcond=None)[0]
    return (gradient - rows.T @ multipliers).reshape(-1, 3)


def _primitive(kind, atoms):
    from geometric import internal

    classes = {"distance": internal.Distance, "angle": internal.Angle,
               "dihedral": internal.Dihedral}  # fmt: skip
    return classes[kind](*atoms)


def _wrap_degree(angle):
    # Into (-180, 180], the range geomeTRIC reports dihedrals in.
    wrapped = math.fmod(angle, 360.0)
    if wrapped <= -180.0:
        wrapped += 360.0
    elif wrapped > 180.0:
        wrapped -= 360.0
    return wrapped


_SILENT_LOG_INI = """\
[loggers]
keys=root

[handlers]
keys=silent

[formatters]
keys=

[logger_root]
level=WARNING
handlers=silent

[handler_silent]
class=NullHandler
args=()
"""


@contextlib.contextmanager
def _silent_geometric_logging(directory):
    # geomeTRIC configures logging from a file at every run (logging.config.fileConfig):
    # the root logger's handlers are replaced, so that without care it would print
    # its whole log and leave the caller's logging rewired.  Hand it a file that
    # sends everything nowhere, and put the root logger back afterwards.
    path = os.path.join(directory, "log.ini")
    with open(path, "w") as handle:
        handle.write(_SILENT_LOG_INI)
    root = logging.getLogger()
    handlers, level = list(root.handlers), root.level
    try:
        yield path
    finally:
        for handler in list(root.handlers):
            root.removeHandler(handler)
        for handler in handlers:
            root.addHandler(handler)
        root.setLevel(level)


def error_line(exc: BaseException) -> str:
    """One line naming an exception's type and message."""
    message = " ".join(str(exc).split())
    return f"{type(exc).__name__}: {message}" if message else type(exc).__name__


class PySCFEngine:
    """The PySCF backend (see the module docstring for the steps).

    >>> engine = PySCFEngine()
    >>> geometry = Geometry(("H", "H"), [[0, 0, 0], [0, 0, 0.74]])
    >>> records, density = engine.compute(geometry, "sto-3g", ["hf"], EngineSettings())
    >>> round(records["hf"].energy_hartree, 4)
    -1.1168
    """

    name = "pyscf"

    @property
    def version(self) -> str:
        """PySCF's version (from the installed package metadata, without importing it)."""
        try:
            return importlib.metadata.version("pyscf")
        except importlib.metadata.PackageNotFoundError:
            import pyscf

            return pyscf.__version__

    def compute(self, geometry, basis, methods, settings, guess=None):
        """Compute one point for every method of one scf family.

        Inputs:
            geometry: a :class:`~pesflow.engine.Geometry` (angstrom).
            basis: basis-set name known to PySCF.
            methods: methods sharing one scf family, e.g. ``["hf", "mp2", "ccsd(t)"]``
                or ``["b3lyp"]``; ``ccsd(t)`` also yields a ``ccsd`` record.
            settings: :class:`~pesflow.engine.EngineSettings`.
            guess: the converged density of the previous point of the walk, or None.

        Returns ``(records, density)``: a dict of :class:`~pesflow.engine.PointResult`
        by canonical method name, and this point's converged density (None if the
        SCF failed) to pass as the next point's ``guess``.

        Raises EngineSetupError before computing for the user's own mistakes
        (unknown method, methods of different scf families, basis lacking an
        element, impossible spin).  Everything that goes wrong during the
        calculation is recorded on the records instead.
        """
        from pyscf import lib

        wanted, family = _split_methods(methods)
        _check_inputs(geometry, basis, settings)
        kind = resolve_reference(
            settings.reference, geometry.multiplicity, settings.broken_symmetry
        )
        label = _SCF_LABELS[_family_kind(family), kind]

        start = time.perf_counter()
        try:
            lib.num_threads(settings.threads)
            ladder = converge_scf(geometry, basis, family, kind, settings, guess)
        except Exception as exc:
            wall_s = time.perf_counter() - start
            failed = _Failure(label, error_line(exc), [], 0, wall_s)
            return {m: failed.record(m) for m in wanted}, None

        if not ladder.converged:
            reason = "SCF did not converge after rungs: " + ", ".join(settings.scf_ladder)
            if ladder.last_error:
                reason += f" (last error: {ladder.last_error})"
            failed = _Failure(label, reason, ladder.attempts, ladder.cycles, ladder.wall_s)
            return {m: failed.record(m) for m in wanted}, None

        mf = ladder.mf
        s2 = math.nan if kind == "restricted" else float(mf.spin_square()[0])
        frozen = _frozen_core(mf.mol) if settings.frozen_core else None

        def record(method, energy_hartree, step_wall_s, error=None):
            scf_part = ladder.wall_s if method != family else 0.0
            return PointResult(
                method=method,
                energy_hartree=math.nan if error else float(energy_hartree),
                converged=error is None,
                scf_cycles=ladder.cycles,
                wall_s=scf_part + step_wall_s,
                step_wall_s=step_wall_s,
                s2=s2,
                reference=label,
                attempts=[dict(a) for a in ladder.attempts],
                error=error,
            )

        records = {}
        for method in wanted:
            if method in records:
                continue
            if method == family:
                records[method] = record(method, mf.e_tot, ladder.wall_s)
            elif method == "mp2":
                step_start = time.perf_counter()
                try:
                    energy, error = run_mp2(mf, frozen), None
                except Exception as exc:
                    energy, error = math.nan, error_line(exc)
                records[method] = record(method, energy, time.perf_counter() - step_start, error)
            else:  # ccsd and ccsd(t), from one CCSD
                step_start = time.perf_counter()
                try:
                    mycc, error = run_ccsd(mf, frozen, settings), None
                except Exception as exc:
                    mycc, error = None, error_line(exc)
                ccsd_wall_s = time.perf_counter() - step_start
                for name in ("ccsd", "ccsd(t)"):
                    if name in wanted and error:
                        records[name] = record(name, math.nan, ccsd_wall_s, error)
                if error:
                    continue
                records["ccsd"] = record("ccsd", mycc.e_tot, ccsd_wall_s)
                if "ccsd(t)" in wanted:
                    step_start = time.perf_counter()
                    try:
                        energy, error = run_triples(mycc), None
                    except Exception as exc:
                        energy, error = math.nan, error_line(exc)
                    triples_wall_s = time.perf_counter() - step_start
                    records["ccsd(t)"] = record(
                        "ccsd(t)", energy, ccsd_wall_s + triples_wall_s, error
                    )
        density = np.array(mf.make_rdm1(), dtype=float)
        return {m: records[m] for m in wanted}, density

    def relax(self, geometry, basis, method, settings, constraints, guess=None):
        """Relax one point: optimise every degree of freedom but the constrained ones.

        Inputs:
            geometry: the starting :class:`~pesflow.engine.Geometry` (angstrom);
                best already at the constrained values, e.g. the neighbour's relaxed
                geometry with the scan coordinate set to this point's value.
            basis: basis-set name known to PySCF.
            method: ``hf``, a DFT functional, ``mp2`` or ``ccsd`` (the methods with
                analytic gradients used here; ``ccsd(t)`` is refused).
            settings: :class:`~pesflow.engine.EngineSettings`; broken symmetry and
                stability analysis apply at the start and at the final geometry, and
                each step starts from the previous step's density.
            constraints: list of ``(kind, atoms, value)`` (see
                :func:`check_constraints`: 0-based atoms, angstrom or degrees).
            guess: the converged density of the previous point of the walk, or None.

        Returns ``(geometry, record, info, density)``: the relaxed geometry, the
        :class:`~pesflow.engine.PointResult` of ``method`` there (computed afresh by
        :meth:`compute`, so it carries the SCF ladder and stability attempts), the
        optimisation info (also in ``record.extra["relaxation"]``), and the density
        for the next point's ``guess``.  The info dict holds ``optimizer``,
        ``optimizer_version``, ``converged`` (geomeTRIC's criteria), ``steps``
        (gradient evaluations), ``max_gradient_hartree_bohr`` (largest component of
        the last gradient with the constrained directions projected out, see
        :func:`free_gradient`), ``energy_change_hartree`` (last minus first
        energy), ``last_energy_hartree``, ``constraints`` (:func:`constraint_report`
        at the returned geometry), ``wall_s`` and ``error``.

        A failed optimisation is recorded, not raised: an SCF that fails at some
        step, or no convergence within :data:`RELAX_MAX_STEPS`, gives a record with
        ``converged`` False, ``energy_hartree`` nan and the reason in ``error``
        (and in ``info["error"]``), the last geometry reached and a None density.
        ``record.wall_s`` is the whole relaxation's wall time.  Raises
        EngineSetupError, before computing, for the mistakes :meth:`compute` refuses
        and for bad constraints.

        >>> engine = PySCFEngine()
        >>> start = Geometry(("H", "H"), [[0, 0, 0], [0, 0, 0.8]])
        >>> relaxed, record, info, _ = engine.relax(start, "sto-3g", "hf", EngineSettings(), [])
        >>> info["converged"], round(float(np.linalg.norm(relaxed.positions_angstrom[1]
        ...     - relaxed.positions_angstrom[0])), 3)
        (True, 0.712)
        """
        from pyscf import lib

        start = time.perf_counter()
        method = canonical_method(method)
        family = scf_family(method)
        if family == "hf" and method not in GRADIENT_WAVEFUNCTION_METHODS:
            raise EngineSetupError(
                f"relax needs analytic gradients: {', '.join(GRADIENT_WAVEFUNCTION_METHODS)} "
                f"or a DFT functional, not {method}"
            )
        _check_inputs(geometry, basis, settings)
        constraints = check_constraints(constraints, len(geometry.symbols))
        kind = resolve_reference(
            settings.reference, geometry.multiplicity, settings.broken_symmetry
        )
        label = _SCF_LABELS[_family_kind(family), kind]
        info = {
            "optimizer": "geomeTRIC",
            "optimizer_version": _geometric_version(),
            "converged": False,
            "steps": 0,
            "max_gradient_hartree_bohr": math.nan,
            "energy_change_hartree": math.nan,
            "last_energy_hartree": math.nan,
            "constraints": [],
            "wall_s": 0.0,
            "error": None,
        }

        def failed(reason, at, attempts=(), cycles=0):
            info["error"] = reason
            info["wall_s"] = time.perf_counter() - start
            info["constraints"] = constraint_report(constraints, _bohr(at))
            record = _Failure(label, reason, list(attempts), cycles, info["wall_s"]).record(method)
            record.extra = {"relaxation": info}
            return at, record, info, None

        lib.num_threads(settings.threads)
        try:
            ladder = converge_scf(geometry, basis, family, kind, settings, guess)
        except Exception as exc:
            return failed(error_line(exc), geometry)
        if not ladder.converged:
            reason = "SCF did not converge at the starting geometry"
            return failed(reason, geometry, ladder.attempts, ladder.cycles)

        trace = OptimisationTrace()
        try:
            # A fresh SCF object started from the converged orbitals: the ladder's
            # last one may be a second-order wrapper, which would slow every step.
            mf = build_scf(build_mole(geometry, basis, settings), family, kind, settings)
            mf.mo_coeff, mf.mo_occ = ladder.mf.mo_coeff, ladder.mf.mo_occ
            scanner = gradient_scanner(mf, method, settings)
            converged, mol, _ = optimise_geometry(scanner, constraints, RELAX_MAX_STEPS, trace)
            reached = Geometry(geometry.symbols, mol.atom_coords(unit="Angstrom"),
                               geometry.charge, geometry.multiplicity)  # fmt: skip
            density = np.array(_scf_of(scanner).make_rdm1(), dtype=float)
        except Exception as exc:
            at = geometry
            if trace.positions_bohr:
                at = Geometry(geometry.symbols, trace.positions_bohr[-1] * BOHR_ANGSTROM,
                              geometry.charge, geometry.multiplicity)  # fmt: skip
            _summarise(info, trace, constraints)
            if trace.energies_hartree and not scanner.converged:
                # PySCF's message names the object by its address; say it plainly.
                reason = f"SCF did not converge at optimisation step {info['steps']}"
            else:
                reason = f"geometry optimisation failed: {error_line(exc)}"
            return failed(reason, at, ladder.attempts, ladder.cycles)

        _summarise(info, trace, constraints)
        info["converged"] = converged
        records, density = self.compute(reached, basis, [method], settings, guess=density)
        record = records[method]
        info["constraints"] = constraint_report(constraints, _bohr(reached))
        info["wall_s"] = time.perf_counter() - start
        record.wall_s = info["wall_s"]
        record.extra = {"relaxation": info}
        if not converged:
            reason = f"geometry optimisation did not converge in {RELAX_MAX_STEPS} steps"
            info["error"] = record.error = reason
            record.converged = False
            record.energy_hartree = math.nan
            density = None
        elif record.error:
            info["error"] = record.error
        return reached, record, info, density


@dataclass
class _Failure:
    # The shared part of the records of a point whose SCF failed.
    label: str
    error: str
    attempts: list[dict]
    cycles: int
    wall_s: float

    def record(self, method):
        return PointResult(
            method=method,
            energy_hartree=math.nan,
            converged=False,
            scf_cycles=self.cycles,
            wall_s=self.wall_s,
            step_wall_s=0.0,
            s2=math.nan,
            reference=self.label,
            attempts=[dict(a) for a in self.attempts],
            error=self.error,
        )


def _check_inputs(geometry, basis, settings):
    # The user's own mistakes, raised before anything is computed.
    if not isinstance(geometry, Geometry):
        raise EngineSetupError(f"geometry must be a Geometry, got {type(geometry).__name__}")
    if not isinstance(settings, EngineSettings):
        raise EngineSetupError("settings must be an EngineSettings")
    check_basis(basis, geometry.symbols)
    count_electrons(geometry)


def _summarise(info, trace, constraints):
    # Steps, energy change and the last free gradient of an optimisation trace.
    info["steps"] = len(trace.energies_hartree)
    if not trace.energies_hartree:
        return
    info["last_energy_hartree"] = trace.energies_hartree[-1]
    info["energy_change_hartree"] = trace.energies_hartree[-1] - trace.energies_hartree[0]
    free = free_gradient(trace.gradients_hartree_bohr[-1], constraints, trace.positions_bohr[-1])
    info["max_gradient_hartree_bohr"] = float(np.max(np.abs(free)))


def _scf_of(scanner):
    # The SCF object under a gradient scanner (its base for hf and DFT, or the
    # correlated method's reference).
    base = scanner.base
    return getattr(base, "_scf", base)


def _bohr(geometry):
    return geometry.positions_angstrom / BOHR_ANGSTROM


def _geometric_version():
    try:
        return importlib.metadata.version("geometric")
    except importlib.metadata.PackageNotFoundError:
        return None


def _split_methods(methods):
    # Canonical names (requested order, plus the ccsd that ccsd(t) brings) and their family.
    if isinstance(methods, str) or not methods:
        raise EngineSetupError(f"methods must be a non-empty list of names, got {methods!r}")
    names = [canonical_method(m) for m in methods]
    families = {m: scf_family(m) for m in names}
    if len(set(families.values())) > 1:
        listed = ", ".join(f"{m} ({f})" for m, f in families.items())
        raise EngineSetupError(f"methods of one compute() call must share one SCF: {listed}")
    family = families[names[0]]
    if "ccsd(t)" in names and "ccsd" not in names:
        names.insert(names.index("ccsd(t)"), "ccsd")
    return list(dict.fromkeys(names)), family


def _family_kind(family):
    return "hf" if family == "hf" else "dft"


def _is_spin_pair_scf(mf):
    from pyscf import scf

    return isinstance(mf, scf.uhf.UHF | scf.rohf.ROHF)


def _frozen_core(mol):
    from pyscf.data import elements

    n_core = elements.chemcore(mol)
    return n_core or None


def _last_density(mf, fallback):
    # The density a failed rung ended with, if it has one that is usable.
    if getattr(mf, "mo_coeff", None) is None:
        return fallback
    dm = np.asarray(mf.make_rdm1())
    return dm if np.all(np.isfinite(dm)) else fallback


def _rung_default(mf, dm, settings):
    _reset_aids(mf, settings)
    mf.kernel(dm0=dm)
    return mf, mf.converged, mf.cycles


def _rung_damped(mf, dm, settings):
    _reset_aids(mf, settings)
    mf.damp = DAMP_FACTOR
    mf.diis_start_cycle = DAMPED_DIIS_START_CYCLE
    mf.max_cycle = DAMPED_CYCLE_FACTOR * settings.max_cycle
    mf.kernel(dm0=dm)
    return mf, mf.converged, mf.cycles


def _rung_level_shift(mf, dm, settings):
    _reset_aids(mf, settings)
    mf.level_shift = LEVEL_SHIFT_HARTREE
    mf.kernel(dm0=dm)
    cycles = mf.cycles
    # The shift changes the path, not the solution; polish without it so that the
    # convergence test is the unshifted one.
    mf.level_shift = 0.0
    mf.kernel(dm0=mf.make_rdm1())
    return mf, mf.converged, cycles + mf.cycles


def _rung_second_order(mf, dm, settings):
    _reset_aids(mf, settings)
    newton = mf.newton()
    newton.max_cycle = settings.max_cycle
    newton.conv_tol = settings.conv_tol
    macro = []
    # PySCF's second-order kernel keeps no cycle count; its callback sees the macro index.
    newton.callback = lambda env: macro.append(env.get("imacro", -1) + 1)
    newton.kernel(dm0=dm if dm is not None else mf.get_init_guess())
    return newton, newton.converged, max(macro, default=0)


def _reset_aids(mf, settings):
    mf.max_cycle = settings.max_cycle
    mf.damp = 0.0
    mf.diis_start_cycle = 1
    mf.level_shift = 0.0


_RUNGS = {
    "default": _rung_default,
    "damped": _rung_damped,
    "level-shift": _rung_level_shift,
    "second-order": _rung_second_order,
}
