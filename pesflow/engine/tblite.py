"""Tight-binding backend: GFN2-xTB and GFN1-xTB through the ``tblite`` package.

Extended tight binding (GFN-xTB, Grimme and co-workers) is a semiempirical,
self-consistent-charge (SCC) tight-binding method in a built-in minimal valence
basis, parametrised for elements up to radon.  A point costs milliseconds where a
DFT point costs seconds, so it serves for pre-screening many molecules, torsion
profiles of larger molecules and starting geometries; its energies are those of a
parametrisation, not of a systematically improvable method, and need validation
against a higher level (see the README).

Levels: ``gfn2-xtb`` and ``gfn1-xtb``, with no basis set (the level label is the
method alone).  The engine version (tblite's) enters every point key.  Of the
engine settings, only ``scf_energy_tolerance_hartree`` (tblite's ``accuracy`` is
this / 1e-6, at least 1e-4: tblite converges the energy to 1e-6 * accuracy) and
``scf_max_iterations`` (tblite's ``max-iter``) apply; the SCF ladder, references,
grids, broken symmetry and stability analysis are PySCF's and are ignored here.
The electronic temperature is tblite's default (300 K Fermi smearing).

A walk keeps one tblite ``Calculator`` (its geometry is updated point by point)
and the previous point's ``Result``, which restarts the next SCC.  An SCC that does
not converge becomes a failed record, never an exception.  Relaxed scans use
tblite's analytic gradients through geomeTRIC (:mod:`pesflow.engine.relax`, the
same driver, constraints and criteria as the PySCF engine), by way of
:func:`gradient_scanner`.

tblite is imported inside the functions.
"""

from __future__ import annotations

import functools
import importlib.metadata
import math
import time

import numpy as np

from pesflow.engine import TIGHT_BINDING_METHODS, Geometry, MethodInfo, PointResult
from pesflow.engine import relax as relaxation
from pesflow.engine.base import Engine, EngineWalk, error_line
from pesflow.errors import EngineSetupError
from pesflow.units import BOHR_ANGSTROM

#: tblite's name of each level.
TBLITE_NAMES = {"gfn2-xtb": "GFN2-xTB", "gfn1-xtb": "GFN1-xTB"}
#: Largest atomic number the GFN1/GFN2-xTB parametrisations cover (radon).
MAX_ATOMIC_NUMBER = 86
#: tblite converges the SCC energy to this many hartree times its ``accuracy``.
ENERGY_TOLERANCE_PER_ACCURACY_HARTREE = 1e-6
#: The smallest ``accuracy`` tblite accepts.
MIN_ACCURACY = 1e-4
#: Cost model: wall s of one point of 50 atoms (measured here: a few ms for water,
#: tblite 0.8, one thread) and the scaling exponent with the number of atoms
#: (common practice: dense diagonalisation, N^3).
COST_PREFACTOR_S = 0.05
COST_EXPONENT = 3


class TBLiteEngine(Engine):
    """The tblite backend (see the module docstring).

    >>> engine = TBLiteEngine()
    >>> from pesflow.engine import EngineSettings
    >>> walk = engine.start_walk(EngineSettings(), "", ["gfn2-xtb"])
    >>> water = Geometry(("O", "H", "H"), [[0, 0, 0], [0, -0.757, 0.587], [0, 0.757, 0.587]])
    >>> round(walk.compute(water)["gfn2-xtb"].energy_hartree, 4)
    -5.0704
    """

    name = "tblite"

    @property
    def version(self) -> str:
        """tblite's version (from the installed package metadata)."""
        return importlib.metadata.version("tblite")

    def method_info(self, method):
        name = "".join(method.strip().lower().split())
        if name not in TIGHT_BINDING_METHODS:
            return None
        return MethodInfo(
            name=name, engine="tblite", family=name, order=0, weight=1.0,
            cost_class=name, cost_exponent=COST_EXPONENT, cost_prefactor_s=COST_PREFACTOR_S,
            needs_basis=False, has_gradients=True, settings=("conv_tol", "max_cycle"),
        )  # fmt: skip

    def check_basis(self, basis, elements):
        """Raise EngineSetupError for a basis given (tight binding has its own) or an
        element outside the parametrisation (Z > 86)."""
        if basis:
            raise EngineSetupError(f"tight binding has a built-in basis; got basis {basis!r}")
        for element in dict.fromkeys(elements):
            if not 1 <= _atomic_number(element) <= MAX_ATOMIC_NUMBER:
                raise EngineSetupError(
                    f"GFN-xTB is parametrised for H-Rn (Z <= {MAX_ATOMIC_NUMBER}), not {element}"
                )

    def start_walk(self, settings, basis, methods):
        """A :class:`TBLiteWalk` of one tight-binding level (``methods`` = ``[level]``)."""
        return TBLiteWalk(settings, basis, methods)


class TBLiteWalk(EngineWalk):
    """The points of one walk at one tight-binding level.

    ``state`` is the previous point's tblite ``Result`` (the SCC restart); the
    ``Calculator`` is kept while the atoms, charge and spin stay the same.
    """

    def __init__(self, settings, basis, methods):
        from pesflow.engine import EngineSettings, method_info

        super().__init__()
        if not isinstance(settings, EngineSettings):
            raise EngineSetupError("settings must be an EngineSettings")
        if isinstance(methods, str) or not methods:
            raise EngineSetupError(f"methods must be a non-empty list of names, got {methods!r}")
        names = list(dict.fromkeys(method_info(m).name for m in methods))
        if len(names) != 1 or names[0] not in TIGHT_BINDING_METHODS:
            raise EngineSetupError(f"a tblite walk computes one tight-binding level, got {names}")
        if basis:
            raise EngineSetupError(f"{names[0]} has a built-in basis; got basis {basis!r}")
        self.method = names[0]
        self.methods = names
        self.settings = settings
        self._calculator = None
        self._system = None

    def compute(self, geometry, methods=None):
        """``{level: PointResult}`` at ``geometry``; a failed SCC is a failed record."""
        if methods is not None and [m.strip().lower() for m in methods] != [self.method]:
            raise EngineSetupError(f"this walk computes {self.method}, not {methods}")
        record, _ = self._point(geometry, gradient=False)
        return {self.method: record}

    def _point(self, geometry, gradient):
        # One SCC at geometry: the record and (when asked) the gradient in hartree/bohr.
        _check_geometry(geometry)
        start = time.perf_counter()
        restart, self.state = self.state, None
        try:
            calculator, fresh = self._calculator_for(geometry)
            if fresh:  # a result of other atoms cannot restart a new calculator
                restart = None
            result = calculator.singlepoint(restart, copy=True)
            energy = float(result.get("energy"))
            grad = np.array(result.get("gradient"), dtype=float) if gradient else None
        except Exception as exc:  # tblite raises TBLiteRuntimeError for a failed SCC
            self._calculator = None
            wall_s = time.perf_counter() - start
            return PointResult.failed(self.method, error_line(exc), self.label, wall_s=wall_s), None
        self.state = result
        wall_s = time.perf_counter() - start
        record = PointResult(
            method=self.method,
            energy_hartree=energy,
            converged=bool(np.isfinite(energy)),
            scf_cycles=0,  # tblite's interface does not report the SCC iterations
            wall_s=wall_s,
            step_wall_s=wall_s,
            s2=math.nan,
            reference=self.label,
            attempts=[],
            error=None if np.isfinite(energy) else "non-finite energy",
        )
        return record, grad

    @property
    def label(self) -> str:
        return TBLITE_NAMES[self.method]

    def _calculator_for(self, geometry):
        from tblite.interface import Calculator

        positions = geometry.positions_angstrom / BOHR_ANGSTROM
        system = (geometry.symbols, geometry.charge, geometry.multiplicity)
        if self._calculator is not None and self._system == system:
            self._calculator.update(positions=positions)
            return self._calculator, False
        numbers = np.array([_atomic_number(s) for s in geometry.symbols])
        calculator = Calculator(
            TBLITE_NAMES[self.method],
            numbers,
            positions,
            charge=float(geometry.charge),
            uhf=geometry.multiplicity - 1,
        )
        calculator.set("verbosity", 0)
        accuracy = max(
            MIN_ACCURACY,
            self.settings.scf_energy_tolerance_hartree / ENERGY_TOLERANCE_PER_ACCURACY_HARTREE,
        )
        calculator.set("accuracy", accuracy)
        calculator.set("max-iter", self.settings.scf_max_iterations)
        self._calculator, self._system = calculator, system
        return calculator, True

    def relax_from(self, start_geometry, constraints):
        """Relax one point from ``start_geometry`` with geomeTRIC on tblite's analytic
        gradients; see :meth:`~pesflow.engine.base.EngineWalk.relax`.  The record is
        the SCC at the relaxed geometry; a failure (SCC or optimiser) is recorded."""
        start = time.perf_counter()
        _check_geometry(start_geometry)
        constraints = relaxation.check_constraints(constraints, len(start_geometry.symbols))
        info = relaxation.new_info(start)
        trace = relaxation.OptimisationTrace()
        scanner = gradient_scanner(self, start_geometry)
        try:
            converged, mol, _ = relaxation.optimise_geometry(
                scanner, constraints, relaxation.RELAX_MAX_STEPS, trace
            )
            reached = Geometry(start_geometry.symbols, mol.atom_coords(unit="Angstrom"),
                               start_geometry.charge, start_geometry.multiplicity)  # fmt: skip
        except Exception as exc:
            at = relaxation.last_geometry(trace, start_geometry)
            relaxation.summarise(info, trace, constraints)
            reason = scanner.error or f"geometry optimisation failed: {error_line(exc)}"
            relaxation.finish_info(info, constraints, at, error=reason)
            record = PointResult.failed(self.method, reason, self.label, wall_s=info["wall_s"])
            record.extra, record.geometry = {"relaxation": info}, at
            self.state = None
            return record
        relaxation.summarise(info, trace, constraints)
        info["converged"] = converged
        record = self.compute(reached)[self.method]
        relaxation.finish_info(info, constraints, reached)
        record.wall_s = info["wall_s"]
        record.extra, record.geometry = {"relaxation": info}, reached
        if not converged:
            reason = f"geometry optimisation did not converge in {relaxation.RELAX_MAX_STEPS} steps"
            info["error"] = record.error = reason
            record.converged, record.energy_hartree = False, math.nan
            self.state = None
        elif record.error:
            info["error"] = record.error
        return record


def gradient_scanner(walk, geometry):
    """A gradient scanner of a tblite walk, in the form PySCF's geomeTRIC driver takes.

    Called with a PySCF ``Mole`` (only its coordinates are read), it runs the walk's
    SCC there (restarted from the previous step) and returns ``(energy_hartree,
    gradient_hartree_bohr)``; a failed SCC raises RuntimeError (the driver stops)
    and keeps the reason in ``error``.
    """
    return _scanner_class()(walk, geometry)


@functools.cache
def _scanner_class():
    # A subclass of PySCF's GradScanner (the driver checks for one), made at first use
    # so that importing this module does not import PySCF.
    from pyscf import gto, lib

    class TBLiteGradientScanner(lib.GradScanner):
        converged = True  # shadows GradScanner's read-only property
        verbose = 0

        def __init__(self, walk, geometry):
            self.walk, self.geometry, self.base, self.error = walk, geometry, walk, None
            self.mol = gto.M(
                atom=[(s, tuple(p)) for s, p in zip(geometry.symbols, geometry.positions_angstrom)],
                unit="Angstrom", basis="sto-3g", charge=geometry.charge,
                spin=geometry.multiplicity - 1, verbose=0,
            )  # fmt: skip

        def __call__(self, mol):
            at = Geometry(self.geometry.symbols, mol.atom_coords(unit="Angstrom"),
                          self.geometry.charge, self.geometry.multiplicity)  # fmt: skip
            record, gradient = self.walk._point(at, gradient=True)
            if not record.converged:
                self.converged = False
                self.error = f"SCC failed during the optimisation: {record.error}"
                raise RuntimeError(self.error)
            return record.energy_hartree, gradient

    return TBLiteGradientScanner


def _atomic_number(symbol) -> int:
    from ase.data import atomic_numbers

    return atomic_numbers.get(str(symbol).strip().capitalize(), 0)


def _check_geometry(geometry):
    # The user's own mistakes, raised before anything is computed.
    if not isinstance(geometry, Geometry):
        raise EngineSetupError(f"geometry must be a Geometry, got {type(geometry).__name__}")
    numbers = [_atomic_number(s) for s in geometry.symbols]
    for symbol, z in zip(geometry.symbols, numbers):
        if not 1 <= z <= MAX_ATOMIC_NUMBER:
            raise EngineSetupError(
                f"GFN-xTB is parametrised for H-Rn (Z <= {MAX_ATOMIC_NUMBER}), not {symbol}"
            )
    n_electrons = sum(numbers) - geometry.charge
    spin = geometry.spin
    if n_electrons <= 0 or spin > n_electrons or (n_electrons - spin) % 2:
        raise EngineSetupError(
            f"{n_electrons} electrons (charge {geometry.charge}) cannot have "
            f"multiplicity {geometry.multiplicity}"
        )
