"""The SCF of one point: build, guess, convergence ladder, stability analysis.

The steps are plain functions; :func:`converge_scf` strings them together:

* :func:`build_mole` - geometry and basis to a PySCF ``Mole`` (angstrom, no symmetry,
  silent, no output file);
* :func:`build_scf` - the SCF object of a family and reference;
* :func:`prepare_guess` - a neighbour's density made to fit this SCF, or None;
* :func:`run_scf_ladder` - the convergence strategies, in order, until one converges;
* :func:`follow_instabilities` - stability analysis, and a restart from every
  instability it finds; for a broken-symmetry singlet, the restart along the
  RHF -> UHF instability that breaks the spin symmetry.

PySCF is imported inside the functions.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, field

import numpy as np

from pesflow.engine import EngineSettings, Geometry
from pesflow.engine.base import error_line
from pesflow.engine.pyscf import corrections
from pesflow.errors import EngineSetupError

#: Damping factor and iteration budget factor of the "damped" rung.
DAMP_FACTOR = 0.5
DAMPED_CYCLE_FACTOR = 2
#: Damping is applied in the first cycles of the "damped" rung, DIIS from this cycle on.
DAMPED_DIIS_START_CYCLE = 10
#: Virtual-orbital shift (hartree) of the "level-shift" rung before its unshifted polish.
LEVEL_SHIFT_HARTREE = 0.5
#: Largest |D_alpha - D_beta| element below which a singlet density counts as
#: spin-restricted (PySCF applies the same test before breaking its own guesses).
SPIN_SYMMETRIC_TOLERANCE = 1e-2
#: Instabilities followed per point before the stability analysis gives up.
STABILITY_MAX_CYCLE = 3

#: Label of the SCF of a family kind ("hf" or "dft") and a reference kind.
SCF_LABELS = {
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
    for i, symbol in enumerate(geometry.symbols):
        z = elements.charge(symbol)
        if z <= 0:
            raise EngineSetupError(f"unknown element symbol {symbol!r}")
        total += 0 if i in geometry.ghosts else z
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
    positions = np.asarray(geometry.positions_angstrom, dtype=float)
    # a ghost atom (counterpoise) is PySCF's "ghost-X": basis functions, no nucleus
    symbols = [f"ghost-{s}" if i in geometry.ghosts else s for i, s in enumerate(geometry.symbols)]
    same = (tuple(symbols), basis, geometry.charge, geometry.spin, settings.max_memory_mb)
    template = _MOLE_TEMPLATES.get(same)
    if template is not None and positions.shape == (len(symbols), 3):
        # PySCF's own way of moving the atoms (its gradient scanners use it): a copy
        # with new coordinates, the parsed and normalised basis kept.  Parsing the
        # basis file again is ~1.5 ms a point for water in cc-pVDZ, as much as a
        # small molecule's whole SCF cycle; the result is the same to the last bit.
        return _own_arrays(template.set_geom_(positions, unit="Angstrom", inplace=False))
    mol = _new_mole(symbols, positions, basis, geometry, settings)
    if len(_MOLE_TEMPLATES) >= _MOLE_TEMPLATES_KEPT:
        _MOLE_TEMPLATES.pop(next(iter(_MOLE_TEMPLATES)))
    _MOLE_TEMPLATES[same] = _own_arrays(mol.copy(deep=False))
    return mol


def _own_arrays(mol):
    """``mol`` with its own integral tables (a shallow copy shares them; a caller that
    edits them in place, e.g. PySCF's ``set_geom_`` or ``set_nuc_mod``, must not reach
    the template or another point's molecule)."""
    for name in ("_atm", "_bas", "_env", "_ecpbas"):
        setattr(mol, name, getattr(mol, name).copy())
    return mol


#: Built molecules by (symbols, basis, charge, spin, memory): a walk's next point is
#: the template moved (:func:`build_mole`).  A few are kept (a job runs walks in turn).
_MOLE_TEMPLATES: dict = {}
_MOLE_TEMPLATES_KEPT = 8


def _new_mole(symbols, positions, basis, geometry, settings):
    from pyscf import gto

    mol = gto.Mole()
    mol.atom = [(s, tuple(xyz)) for s, xyz in zip(symbols, positions.tolist(), strict=True)]
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
    """The (not yet run) SCF object of an scf family ("hf" or a functional, either with
    its dispersion and solvent, :mod:`~pesflow.engine.pyscf.corrections`) and a
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
    level = corrections.parse(family) or corrections.ScfLevel(family)
    mf = classes[family_kind(family), kind](mol)
    if level.base != "hf":
        mf.xc = level.core  # a dispersion suffix is PySCF's own: b3lyp-d3bj
        mf.grids.level = settings.dft_grid_level
    mf.conv_tol = settings.scf_energy_tolerance_hartree
    mf.max_cycle = settings.scf_max_iterations
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
    return corrections.build(mf, level)


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
    threshold_hartree = 10 * settings.scf_energy_tolerance_hartree
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

    Inputs: the geometry, basis and settings of a point, the scf ``family`` and the
    reference ``kind`` already resolved, and the previous point's density (or None).
    Returns the :class:`LadderOutcome`, with one more attempt from
    :func:`follow_instabilities` when the ladder converged and

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


def family_kind(family):
    """``hf`` for a Hartree-Fock family (with or without corrections), else ``dft``."""
    level = corrections.parse(family)
    return "hf" if (level.base if level else family) == "hf" else "dft"


def _is_spin_pair_scf(mf):
    from pyscf import scf

    return isinstance(mf, scf.uhf.UHF | scf.rohf.ROHF)


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
    mf.max_cycle = DAMPED_CYCLE_FACTOR * settings.scf_max_iterations
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
    newton.max_cycle = settings.scf_max_iterations
    newton.conv_tol = settings.scf_energy_tolerance_hartree
    macro = []
    # PySCF's second-order kernel keeps no cycle count; its callback sees the macro index.
    newton.callback = lambda env: macro.append(env.get("imacro", -1) + 1)
    newton.kernel(dm0=dm if dm is not None else mf.get_init_guess())
    return newton, newton.converged, max(macro, default=0)


def _reset_aids(mf, settings):
    mf.max_cycle = settings.scf_max_iterations
    mf.damp = 0.0
    mf.diis_start_cycle = 1
    mf.level_shift = 0.0


_RUNGS = {
    "default": _rung_default,
    "damped": _rung_damped,
    "level-shift": _rung_level_shift,
    "second-order": _rung_second_order,
}
