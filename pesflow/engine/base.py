"""The engine protocol: what a backend declares and what a walk does.

In the spirit of ASE's calculator, a backend is small: it names its methods and
describes each with a :class:`MethodInfo` (which work its methods share, how their
cost scales, whether they need a basis set, whether they have gradients), and it
starts walks.  A walk (:class:`EngineWalk`) is PySCF's scanner idea: it computes
the points of one scan in order at one level, each from the previous point's
solution, and keeps that state itself::

    walk = engine.start_walk(settings, basis, ["hf", "mp2"])
    records = walk.compute(geometry)          # {method: PointResult}
    record = walk.relax(geometry, constraints)  # one method, a relaxed point
    walk.restart()                            # forget the state (a distant point)

Nothing here imports a quantum-chemistry package.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from pesflow.errors import EngineSetupError


@dataclass(frozen=True)
class MethodInfo:
    """What plan, cost model and spec checks need to know about one method.

    Fields:
        name: canonical method name (``hf``, ``b3lyp``, ``gfn2-xtb``).
        engine: name of the engine that computes it (a key of ``ENGINES``).
        family: the shared-work group: methods of one family at one geometry (and
            basis set) are computed together from one SCF (``hf`` for the
            wavefunction methods, the functional for DFT, the level for tight binding).
        order: position within its family's computation (the SCF first).
        weight: cost of its points relative to its family's SCF, for cutting batches
            (common practice: correlated steps cost several SCFs on small molecules).
        cost_class: the group whose stored timings calibrate the cost model together
            (every DFT functional is ``dft``).
        cost_exponent: p in the cost model t = a * (n / 50)^p, n the number of basis
            functions (of atoms for a level without basis set).
        cost_prefactor_s: a, the default wall seconds of one point at n = 50 on one
            thread, used until stored timings calibrate it.
        needs_basis: the level is method/basis; False for levels with a built-in
            basis (tight binding), whose label is the method alone.
        has_gradients: analytic nuclear gradients exist, so relaxed scans work.
        byproducts: methods computed for free on the way (``ccsd`` for ``ccsd(t)``).
        settings: the names (as in :meth:`EngineSettings.key_dict`) of the settings
            that can change this method's number; only these enter its points' keys.
        n_states: electronic states per point (1: the ground state); a multi-state
            method stores one record per state (the ground state and ``n_states - 1``
            excited states), named by :func:`pesflow.engine.state_record`.
        options: the level options the method takes (spec keys beside method and
            basis: ``active``, ``states``, ``weights`` for casscf/nevpt2, where
            ``states`` is the averaged roots; ``states``, ``spin``, ``follow`` for the
            excited-state methods, where ``states`` is the excited states); the engine
            folds them into the canonical name (:meth:`Engine.method_with_options`).
        follow_states: a multi-state method whose states are numbered by character
            along a walk (followed by overlaps between neighbours), not by energy.
        fragments: how the dissociation energy of its curves is referenced:
            ``separate`` (each fragment computed on its own at this level) or
            ``asymptote`` (no fragment has a consistent counterpart of this level, e.g.
            an active space given by counts: D_e from the curve's last point).
        libraries: ``(package, version)`` of further libraries its energies depend on
            beyond the engine itself (the dispersion package of a ``-d3bj`` level); part
            of every key of its points (:meth:`EngineSettings.key_dict`), so that a new
            release with other parameters never reuses a point computed by the old one.
    """

    name: str
    engine: str
    family: str
    order: int
    weight: float
    cost_class: str
    cost_exponent: float
    cost_prefactor_s: float
    needs_basis: bool
    has_gradients: bool
    byproducts: tuple[str, ...] = ()
    settings: tuple[str, ...] = ()
    n_states: int = 1
    options: tuple[str, ...] = ()
    follow_states: bool = False
    fragments: str = "separate"
    libraries: tuple[tuple[str, str], ...] = ()


class Engine:
    """A backend.  Subclasses set ``name`` and implement the methods below.

    ``method_info`` and ``check_basis`` must stay cheap (no import of the
    quantum-chemistry package unless a name has to be parsed by it).
    """

    name: str = ""

    @property
    def version(self) -> str:
        """Version of the backend's package; part of every point key."""
        raise NotImplementedError

    def method_info(self, method: str) -> MethodInfo | None:
        """The :class:`MethodInfo` of ``method`` (any case), or None when the name is not
        one of this engine's methods.  Raises EngineSetupError for a name that is this
        engine's but cannot be used here (e.g. a missing optional package)."""
        raise NotImplementedError

    def check_basis(self, basis: str, elements) -> None:
        """Raise EngineSetupError when ``basis`` lacks an element (engines with basis sets)."""
        raise NotImplementedError

    def method_with_options(self, method: str, options: dict) -> str:
        """The canonical name of ``method`` (canonical already) with level options folded
        in (e.g. ``casscf(6,6)``, ``tda-b3lyp(singlets=4)``); this name is what plan, keys
        and walks use.
        Raises EngineSetupError for options the method does not take or wrong values.
        By default a method takes none."""
        if options:
            raise EngineSetupError(f"{method} takes no level options (got {', '.join(options)})")
        return method

    def start_walk(self, settings, basis: str, methods) -> EngineWalk:
        """A new :class:`EngineWalk` of ``methods`` (one family) at ``basis``.

        Raises EngineSetupError for the user's own mistakes (unknown method, methods
        of different families, a basis given to a level without one).
        """
        raise NotImplementedError

    def compute(self, geometry, basis, methods, settings):
        """One point from scratch: ``start_walk(...).compute(geometry)``."""
        return self.start_walk(settings, basis, methods).compute(geometry)


class EngineWalk:
    """The points of one walk, each started from the previous one's solution.

    State: ``state`` (the previous point's converged solution, e.g. its density; None
    at the start) and, for relaxed scans, the previous relaxed geometry.  Subclasses
    implement :meth:`compute` and :meth:`relax_from`.
    """

    def __init__(self):
        self.state = None
        self.relaxed = None  # the previous point's relaxed Geometry, or None

    def restart(self, state=None) -> None:
        """Forget the walk: the next point starts from ``state`` (None: from scratch)."""
        self.state = state
        self.relaxed = None

    def compute(self, geometry, methods=None) -> dict:
        """``{method: PointResult}`` at ``geometry`` for ``methods`` (default: the walk's).

        Failures during the calculation are records with ``converged`` False and the
        reason in ``error``, never exceptions; the next point then starts from scratch.
        """
        raise NotImplementedError

    def relax(self, geometry, constraints, moving=None):
        """A relaxed point: every degree of freedom optimised but the constrained ones.

        Inputs:
            geometry: the point's planned geometry (the scan values already set).
            constraints: ``[(kind, atoms, value)]``, 0-based atoms, angstrom or degrees.
            moving: per constraint, the 0-based atoms that move rigidly to set it; with
                it the optimisation starts from the previous relaxed geometry with the
                constraints set to this point's values (``geometry`` when there is none
                or the displacement fails).

        Returns the :class:`~pesflow.engine.PointResult` of the walk's method, whose
        ``geometry`` is the relaxed geometry and ``extra["relaxation"]`` the
        optimisation info.  A failure is recorded, and the next point starts afresh.
        """
        start = self._relax_start(geometry, constraints, moving)
        record = self.relax_from(start, constraints)
        self.relaxed = record.geometry if record.converged else None
        if not record.converged:
            self.state = None
        return record

    def relax_from(self, start, constraints):
        """Relax from ``start`` (a Geometry); see :meth:`relax`."""
        raise NotImplementedError

    def _relax_start(self, geometry, constraints, moving):
        from pesflow.coordinates import geometry as coordinates
        from pesflow.engine import Geometry

        if self.relaxed is None or moving is None:
            return geometry
        spec = [(kind, tuple(atoms), np.asarray(mv, dtype=int))
                for (kind, atoms, _), mv in zip(constraints, moving)]  # fmt: skip
        values = np.asarray([[float(value) for _, _, value in constraints]])
        try:
            positions = coordinates.apply_grid(self.relaxed.positions_angstrom, spec, values)[0]
        except ValueError:
            return geometry
        return Geometry(geometry.symbols, positions, geometry.charge, geometry.multiplicity)


def error_line(exc: BaseException) -> str:
    """One line naming an exception's type and message."""
    message = " ".join(str(exc).split())
    return f"{type(exc).__name__}: {message}" if message else type(exc).__name__
