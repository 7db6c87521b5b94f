"""The PySCF engine and its walk: one SCF per point, every method of its family on it.

One :meth:`PySCFWalk.compute` is one point: the SCF of one scf family is converged
once (through the ladder of :mod:`pesflow.engine.pyscf.scf`, from the previous
point's density) and serves every method built on it; each method gets its own
:class:`~pesflow.engine.PointResult`.  :meth:`PySCFWalk.relax` optimises every
degree of freedom but the constrained ones with geomeTRIC
(:mod:`pesflow.engine.relax`) on PySCF's analytic gradients.
"""

from __future__ import annotations

import importlib.metadata
import math
import time

import numpy as np

from pesflow.engine import (
    MULTIREFERENCE_METHODS,
    EngineSettings,
    Geometry,
    PointResult,
    method_info,
    split_state,
    state_record,
)
from pesflow.engine import relax as relaxation
from pesflow.engine.base import Engine, EngineWalk, error_line
from pesflow.engine.pyscf import corrections, correlated, excited, methods
from pesflow.engine.pyscf.scf import (
    SCF_LABELS,
    build_mole,
    build_scf,
    converge_scf,
    count_electrons,
    family_kind,
    resolve_reference,
)
from pesflow.errors import ConvergenceError, EngineSetupError
from pesflow.units import HARTREE_TO_EV


class PySCFEngine(Engine):
    """The PySCF backend: HF and DFT (R/U/RO references), MP2, CCSD and CCSD(T).

    >>> engine = PySCFEngine()
    >>> geometry = Geometry(("H", "H"), [[0, 0, 0], [0, 0, 0.74]])
    >>> walk = engine.start_walk(EngineSettings(), "sto-3g", ["hf"])
    >>> round(walk.compute(geometry)["hf"].energy_hartree, 4)
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

    def method_info(self, method):
        return methods.method_info(method)

    def check_basis(self, basis, elements):
        methods.check_basis(basis, elements)

    def method_with_options(self, method, options):
        return methods.method_with_options(method, options)

    def start_walk(self, settings, basis, methods):
        """A :class:`PySCFWalk` of ``methods`` (one scf family) at ``basis``.

        ``ccsd(t)`` also yields a ``ccsd`` record.  Raises EngineSetupError for an
        unknown method, methods of different scf families, a method of another
        engine, or settings that are not :class:`~pesflow.engine.EngineSettings`.
        """
        # casscf/nevpt2 levels walk by neighbour orbitals; excited-state methods (which
        # also take level options) are followed by PySCFWalk itself.
        first = method_info(methods[0]) if not isinstance(methods, str) and methods else None
        if first is not None and first.cost_class in MULTIREFERENCE_METHODS:
            from pesflow.engine.pyscf.multireference import MultireferenceWalk

            return MultireferenceWalk(settings, basis, methods)
        return PySCFWalk(settings, basis, methods)


class PySCFWalk(EngineWalk):
    """The points of one walk at one basis and scf family, each SCF started from the
    previous point's density (``state``).

    >>> walk = PySCFWalk(EngineSettings(), "sto-3g", ["hf"])
    >>> start = Geometry(("H", "H"), [[0, 0, 0], [0, 0, 0.8]])
    >>> record = walk.relax(start, [])
    >>> record.extra["relaxation"]["converged"], round(float(np.linalg.norm(
    ...     record.geometry.positions_angstrom[1] - record.geometry.positions_angstrom[0])), 3)
    (True, 0.712)
    """

    def __init__(self, settings, basis, methods):
        super().__init__()
        if not isinstance(settings, EngineSettings):
            raise EngineSetupError("settings must be an EngineSettings")
        self.settings = settings
        self.basis = basis
        self.methods, self.family = _split_methods(methods)
        self.requested = list(dict.fromkeys(method_info(m).name for m in methods))
        self.excited = {}  # excited-state method -> the previous point's StateSet

    def restart(self, state=None):
        super().restart(state)
        self.excited = {}

    def compute(self, geometry, methods=None):
        """Compute one point for the walk's methods (or ``methods``, of the same family).

        Inputs:
            geometry: a :class:`~pesflow.engine.Geometry` (angstrom).
            methods: a subset of the walk's methods, e.g. the ones still missing.

        Returns a dict of :class:`~pesflow.engine.PointResult` by canonical method
        name; this point's converged density becomes the walk's ``state`` (None if
        the SCF failed), the next point's guess.

        Raises EngineSetupError before computing for the user's own mistakes
        (basis lacking an element, impossible spin).  Everything that goes wrong
        during the calculation is recorded on the records instead.
        """
        from pyscf import lib

        settings = self.settings
        wanted, family = self.methods, self.family
        if methods is not None:
            wanted, family = _split_methods(methods)
            if family != self.family:
                raise EngineSetupError(f"{methods} are not of this walk's family {self.family}")
        _check_inputs(geometry, self.basis)
        kind = resolve_reference(
            settings.reference, geometry.multiplicity, settings.broken_symmetry
        )
        label = SCF_LABELS[family_kind(family), kind]

        start = time.perf_counter()
        guess, self.state = self.state, None
        try:
            lib.num_threads(settings.threads)
            ladder = converge_scf(geometry, self.basis, family, kind, settings, guess)
        except Exception as exc:
            wall_s = time.perf_counter() - start
            return {
                m: PointResult.failed(m, error_line(exc), label, wall_s=wall_s)
                for m in _record_names(wanted)
            }

        if not ladder.converged:
            reason = "SCF did not converge after rungs: " + ", ".join(settings.scf_ladder)
            if ladder.last_error:
                reason += f" (last error: {ladder.last_error})"
            return {
                m: PointResult.failed(
                    m, reason, label, ladder.attempts, ladder.cycles, ladder.wall_s
                )
                for m in _record_names(wanted)
            }

        mf = ladder.mf
        s2 = math.nan if kind == "restricted" else float(mf.spin_square()[0])
        frozen = correlated.frozen_core_orbitals(mf.mol) if settings.frozen_core else None

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
        ccsd = {}  # the one CCSD of this point, shared by ccsd, ccsd(t) and eom-ccsd
        for method in wanted:
            if method in records:
                continue
            level = excited.parse(method)
            if level is not None:
                records.update(self._excited_records(mf, level, record, ccsd, frozen, geometry))
            elif method == family:
                records[method] = record(method, mf.e_tot, ladder.wall_s)
                records[method].extra = corrections.energy_parts(mf)  # dispersion, solvent
            elif method == "mp2":
                step_start = time.perf_counter()
                try:
                    energy, error = correlated.run_mp2(mf, frozen), None
                except Exception as exc:
                    energy, error = math.nan, error_line(exc)
                records[method] = record(method, energy, time.perf_counter() - step_start, error)
            else:  # ccsd and ccsd(t), from one CCSD
                mycc, error, ccsd_wall_s = self._ccsd(mf, frozen, ccsd)
                for name in ("ccsd", "ccsd(t)"):
                    if name in wanted and error:
                        records[name] = record(name, math.nan, ccsd_wall_s, error)
                if error:
                    continue
                records["ccsd"] = record("ccsd", mycc.e_tot, ccsd_wall_s)
                if "ccsd(t)" in wanted:
                    step_start = time.perf_counter()
                    try:
                        energy, error = correlated.run_triples(mycc), None
                    except Exception as exc:
                        energy, error = math.nan, error_line(exc)
                    triples_wall_s = time.perf_counter() - step_start
                    records["ccsd(t)"] = record(
                        "ccsd(t)", energy, ccsd_wall_s + triples_wall_s, error
                    )
        self.state = np.array(mf.make_rdm1(), dtype=float)
        # A multi-state method gives one record per state (method#k).
        return {
            name: result
            for m in wanted
            for name, result in records.items()
            if name == m or split_state(name)[0] == m
        }

    def _ccsd(self, mf, frozen, shared):
        """The point's CCSD (computed once): (object or None, error or None, wall s)."""
        if not shared:
            step_start = time.perf_counter()
            try:
                mycc, error = correlated.run_ccsd(mf, frozen, self.settings), None
            except Exception as exc:
                mycc, error = None, error_line(exc)
            shared.update(mycc=mycc, error=error, wall_s=time.perf_counter() - step_start)
        return shared["mycc"], shared["error"], shared["wall_s"]

    def _plain_scf(self, mf):
        """A plain SCF object holding ``mf``'s converged solution: the ladder's last may
        be a second-order wrapper, whose response functions the excited states must not
        use."""
        kind = resolve_reference(
            self.settings.reference, mf.mol.spin + 1, self.settings.broken_symmetry
        )
        plain = build_scf(mf.mol, self.family, kind, self.settings)
        for name in ("mo_coeff", "mo_occ", "mo_energy", "e_tot", "converged"):
            setattr(plain, name, getattr(mf, name))
        if self.family != "hf":
            plain.grids.build()
        return plain

    def _excited_records(self, mf, level, record, ccsd, frozen, geometry):
        """One record per state of an excited-state level (see
        :mod:`pesflow.engine.pyscf.excited`); the states become the walk's
        ``excited`` state for the next point's overlaps."""
        method = level.name
        names = [state_record(method, k) for k in range(level.states + 1)]
        previous = self.excited.pop(method, None)
        wall_s = 0.0
        try:
            if level.kind == "eom":
                mycc, error, wall_s = self._ccsd(mf, frozen, ccsd)
                if error:
                    raise ConvergenceError(f"CCSD under EOM-CCSD: {error}")
                step_start = time.perf_counter()
                states = excited.run_eom(mycc, level)
            else:
                step_start = time.perf_counter()
                states = excited.run_td(self._plain_scf(mf), level)
        except Exception as exc:
            wall_s += time.perf_counter() - step_start if "step_start" in locals() else 0.0
            return {n: record(n, math.nan, wall_s, error_line(exc)) for n in names}
        wall_s += time.perf_counter() - step_start
        overlaps = None
        if previous is not None and previous.mol.nelectron == states.mol.nelectron:
            overlaps = excited.state_overlaps(previous, states)
        self.excited[method] = states
        closed = mf.mol.spin == 0 and np.asarray(mf.mo_occ).ndim == 1
        symmetries = excited.state_symmetries(states)  # "" where none is reliable
        out = {}
        for k, name in enumerate(names):
            ok = bool(states.converged[k])
            error = None if ok else f"excited state {k} did not converge"
            out[name] = record(name, states.energies_hartree[k], wall_s, error)
            info = {
                "index": k,
                "label": level.label(k, closed),
                "spin": ("singlet" if k == 0 else level.spin) if closed else "",
                "symmetry": symmetries[k],
                "excitation_energy_ev": float(
                    (states.energies_hartree[k] - states.energies_hartree[0]) * HARTREE_TO_EV
                ),
                "oscillator_strength": 0.0 if k == 0 else
                float(states.oscillator_strengths[k - 1]),
            }  # fmt: skip
            if k > 0 and overlaps is not None:
                info["neighbour_overlaps"] = [float(v) for v in overlaps[:, k - 1]]
                info["neighbour_positions_angstrom"] = (
                    previous.mol.atom_coords(unit="Angstrom").ravel().tolist()
                )
            out[name].extra = {"state": info}
        return out

    def relax_from(self, start_geometry, constraints):
        """Relax one point from ``start_geometry``: see
        :meth:`~pesflow.engine.base.EngineWalk.relax`.

        The walk has one method: ``hf``, a DFT functional, ``mp2`` or ``ccsd`` (the
        methods with analytic gradients used here; ``ccsd(t)`` is refused).  Broken
        symmetry and stability analysis apply at the start and at the final
        geometry, and each step starts from the previous step's density.  The record
        of the relaxed geometry is computed afresh by :meth:`compute` (so it carries
        the SCF ladder and stability attempts); its ``wall_s`` is the whole
        relaxation's.

        A failed optimisation is recorded, not raised: an SCF that fails at some
        step, or no convergence within :data:`pesflow.engine.relax.RELAX_MAX_STEPS`,
        gives a record with ``converged`` False, ``energy_hartree`` nan, the reason
        in ``error`` (and in ``extra["relaxation"]["error"]``) and the last geometry
        reached.  Raises EngineSetupError, before computing, for the mistakes
        :meth:`compute` refuses and for bad constraints.
        """
        from pyscf import lib

        start = time.perf_counter()
        if len(self.requested) != 1:
            raise EngineSetupError(f"relax takes one method, got {self.requested}")
        (method,) = self.requested
        family, settings = self.family, self.settings
        if not method_info(method).has_gradients:
            raise EngineSetupError(
                "relax needs analytic gradients: "
                f"{', '.join(correlated.GRADIENT_WAVEFUNCTION_METHODS)} "
                f"or a DFT functional, not {method}"
            )
        _check_inputs(start_geometry, self.basis)
        constraints = relaxation.check_constraints(constraints, len(start_geometry.symbols))
        kind = resolve_reference(
            settings.reference, start_geometry.multiplicity, settings.broken_symmetry
        )
        label = SCF_LABELS[family_kind(family), kind]
        info = relaxation.new_info(start)
        guess, self.state = self.state, None

        def failed(reason, at, attempts=(), cycles=0):
            relaxation.finish_info(info, constraints, at, error=reason)
            record = PointResult.failed(method, reason, label, attempts, cycles, info["wall_s"])
            record.extra = {"relaxation": info}
            record.geometry = at
            return record

        lib.num_threads(settings.threads)
        try:
            ladder = converge_scf(start_geometry, self.basis, family, kind, settings, guess)
        except Exception as exc:
            return failed(error_line(exc), start_geometry)
        if not ladder.converged:
            reason = "SCF did not converge at the starting geometry"
            return failed(reason, start_geometry, ladder.attempts, ladder.cycles)

        trace = relaxation.OptimisationTrace()
        try:
            # A fresh SCF object started from the converged orbitals: the ladder's
            # last one may be a second-order wrapper, which would slow every step.
            mol = build_mole(start_geometry, self.basis, settings)
            mf = build_scf(mol, family, kind, settings)
            mf.mo_coeff, mf.mo_occ = ladder.mf.mo_coeff, ladder.mf.mo_occ
            scanner = correlated.gradient_scanner(mf, method, settings)
            converged, mol, _ = relaxation.optimise_geometry(
                scanner, constraints, relaxation.RELAX_MAX_STEPS, trace
            )
            reached = Geometry(start_geometry.symbols, mol.atom_coords(unit="Angstrom"),
                               start_geometry.charge, start_geometry.multiplicity)  # fmt: skip
            density = np.array(correlated.scf_of(scanner).make_rdm1(), dtype=float)
        except Exception as exc:
            at = relaxation.last_geometry(trace, start_geometry)
            relaxation.summarise(info, trace, constraints)
            if trace.energies_hartree and not scanner.converged:
                # PySCF's message names the object by its address; say it plainly.
                reason = f"SCF did not converge at optimisation step {info['steps']}"
            else:
                reason = f"geometry optimisation failed: {error_line(exc)}"
            return failed(reason, at, ladder.attempts, ladder.cycles)

        relaxation.summarise(info, trace, constraints)
        info["converged"] = converged
        self.state = density
        record = self.compute(reached, [method])[method]
        relaxation.finish_info(info, constraints, reached)
        record.wall_s = info["wall_s"]
        record.extra = {**record.extra, "relaxation": info}
        record.geometry = reached
        if not converged:
            reason = f"geometry optimisation did not converge in {relaxation.RELAX_MAX_STEPS} steps"
            info["error"] = record.error = reason
            record.converged = False
            record.energy_hartree = math.nan
            self.state = None
        elif record.error:
            info["error"] = record.error
        return record


def _record_names(methods):
    # The record names of methods: one per state for a multi-state method (method#k).
    names = []
    for m in methods:
        n_states = method_info(m).n_states
        names += [m] if n_states == 1 else [state_record(m, k) for k in range(n_states)]
    return names


def _check_inputs(geometry, basis):
    # The user's own mistakes, raised before anything is computed.
    if not isinstance(geometry, Geometry):
        raise EngineSetupError(f"geometry must be a Geometry, got {type(geometry).__name__}")
    methods.check_basis(basis, geometry.symbols)
    count_electrons(geometry)


def _split_methods(names):
    # Canonical names (requested order, plus the ccsd that ccsd(t) brings) and their family.
    if isinstance(names, str) or not names:
        raise EngineSetupError(f"methods must be a non-empty list of names, got {names!r}")
    infos = [method_info(m) for m in names]
    foreign = [i.name for i in infos if i.engine != "pyscf"]
    if foreign:
        raise EngineSetupError(f"{', '.join(foreign)} is not a PySCF method")
    families = {i.name: i.family for i in infos}
    if len(set(families.values())) > 1:
        listed = ", ".join(f"{m} ({f})" for m, f in families.items())
        raise EngineSetupError(f"methods of one compute() call must share one SCF: {listed}")
    wanted = [i.name for i in infos]
    for info in infos:
        for extra in info.byproducts:
            if extra not in wanted:
                wanted.insert(wanted.index(info.name), extra)
    return list(dict.fromkeys(wanted)), infos[0].family
