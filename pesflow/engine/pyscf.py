"""PySCF backend: HF and DFT (R/U/RO references), MP2, CCSD and CCSD(T).

One call of :meth:`PySCFEngine.compute` is one point: the SCF of one scf family is
converged once (through a ladder of strategies) and serves every method built on
it; each method gets its own :class:`~pesflow.engine.PointResult`.  The steps are
plain functions, so that a later change (stability analysis, broken-symmetry
guesses) has one place to go:

* :func:`build_mole` - geometry and basis to a PySCF ``Mole`` (angstrom, no symmetry,
  silent, no output file);
* :func:`build_scf` - the SCF object of a family and reference;
* :func:`prepare_guess` - a neighbour's density made to fit this SCF, or None;
* :func:`run_scf_ladder` - the convergence strategies, in order, until one converges;
* :func:`run_mp2`, :func:`run_ccsd` - the correlated steps on a converged SCF.

PySCF itself is imported inside the functions, so importing this module (and asking
for the engine's name and version) stays cheap.
"""

from __future__ import annotations

import importlib.metadata
import math
import time
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

#: Damping factor and iteration budget factor of the "damped" rung.
DAMP_FACTOR = 0.5
DAMPED_CYCLE_FACTOR = 2
#: Damping is applied in the first cycles of the "damped" rung, DIIS from this cycle on.
DAMPED_DIIS_START_CYCLE = 10
#: Virtual-orbital shift (hartree) of the "level-shift" rung before its unshifted polish.
LEVEL_SHIFT_HARTREE = 0.5
#: Iteration limit of the CCSD amplitude equations (PySCF's default is 50).
CCSD_MAX_CYCLE = 100

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


def resolve_reference(reference: str, multiplicity: int) -> str:
    """The reference kind for a setting and a multiplicity.

    ``auto`` gives ``restricted`` for a singlet and ``unrestricted`` for an open
    shell; ``restricted`` on an open shell means restricted-open (as PySCF's RHF does).

    >>> resolve_reference("auto", 2), resolve_reference("restricted", 3)
    ('unrestricted', 'restricted-open')
    """
    if reference == "auto":
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
        if not isinstance(geometry, Geometry):
            raise EngineSetupError(f"geometry must be a Geometry, got {type(geometry).__name__}")
        if not isinstance(settings, EngineSettings):
            raise EngineSetupError("settings must be an EngineSettings")
        check_basis(basis, geometry.symbols)
        count_electrons(geometry)
        kind = resolve_reference(settings.reference, geometry.multiplicity)
        label = _SCF_LABELS[_family_kind(family), kind]

        start = time.perf_counter()
        try:
            lib.num_threads(settings.threads)
            mf = build_scf(build_mole(geometry, basis, settings), family, kind, settings)
            ladder = run_scf_ladder(mf, prepare_guess(guess, mf), settings)
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
