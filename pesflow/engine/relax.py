"""Constrained geometry relaxation with geomeTRIC, for every engine.

A relaxed scan point optimises every degree of freedom but the scanned ones.  The
optimiser is geomeTRIC, driven through PySCF's driver
(:func:`pyscf.geomopt.geometric_solver.kernel`), which takes any *gradient scanner*:
a callable that takes the next geometry (a PySCF ``Mole``) and returns
``(energy_hartree, gradient_hartree_bohr)``.  PySCF's own scanners serve the PySCF
engine; :func:`pesflow.engine.tblite.gradient_scanner` serves tight binding.
Every engine therefore relaxes with the same constraints, convergence criteria and
step count, and reports the same optimisation info (:func:`new_info`).

* :func:`check_constraints`, :func:`constraints_text` - constraints in and out;
* :func:`optimise_geometry` - the optimisation, silent, files in temporary folders;
* :func:`constraint_report`, :func:`free_gradient`, :func:`summarise` - what it reached.

geomeTRIC and PySCF are imported inside the functions.
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

from pesflow.coordinates.kinds import KINDS
from pesflow.errors import EngineSetupError
from pesflow.units import BOHR_ANGSTROM

#: Geometry steps of one relaxation before it counts as not converged.
RELAX_MAX_STEPS = 100
#: geomeTRIC's ``enforce`` threshold: once every constraint is within it (bohr or
#: radian), the constraints are met exactly on every further step.
RELAX_ENFORCE = 0.1
#: Constraint kinds of a relaxed point (geomeTRIC's names, from the coordinate-kind
#: registry) and the number of atoms each takes.
CONSTRAINT_ATOMS = {kind.constraint: kind.n_atoms for kind in KINDS.values()}
_KIND_OF_CONSTRAINT = {kind.constraint: kind for kind in KINDS.values()}


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
        registered = _KIND_OF_CONSTRAINT[kind]
        problem = registered.range_problem([value])
        if problem:
            raise EngineSetupError(f"{where}: {problem}")
        if registered.motion == "bend" and value == registered.upper:
            # Not a range rule but a limit of the optimiser: geomeTRIC's angle coordinate is
            # singular at a linear arrangement, so a linear angle cannot be held there.
            raise EngineSetupError(
                f"{where}: a relaxed scan's angle must lie in (0, 180) degrees, got {value:g}: "
                "the optimiser's angle coordinate is undefined at a linear arrangement"
            )
        if registered.period is not None:
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
        scanner: a gradient scanner (PySCF's ``as_scanner()`` of a gradient object, or
            :func:`pesflow.engine.tblite.gradient_scanner`).
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
        unit = _KIND_OF_CONSTRAINT[kind].unit
        # geomeTRIC's primitives are in bohr and radian.
        reached = float(value * BOHR_ANGSTROM) if unit == "angstrom" else math.degrees(float(value))
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


def new_info(start_s: float) -> dict:
    """The optimisation info of a relaxed point, before the optimisation.

    Keys: ``optimizer``, ``optimizer_version``, ``converged`` (geomeTRIC's criteria),
    ``steps`` (gradient evaluations), ``max_gradient_hartree_bohr`` (largest component
    of the last gradient with the constrained directions projected out, see
    :func:`free_gradient`), ``energy_change_hartree`` (last minus first energy),
    ``last_energy_hartree``, ``constraints`` (:func:`constraint_report` at the
    returned geometry), ``wall_s`` and ``error``.  ``start_s`` is the
    :func:`time.perf_counter` reading the wall time counts from (kept under
    ``_start_s`` until :func:`finish_info`).
    """
    return {
        "optimizer": "geomeTRIC",
        "optimizer_version": geometric_version(),
        "converged": False,
        "steps": 0,
        "max_gradient_hartree_bohr": math.nan,
        "energy_change_hartree": math.nan,
        "last_energy_hartree": math.nan,
        "constraints": [],
        "wall_s": 0.0,
        "error": None,
        "_start_s": start_s,
    }


def finish_info(info: dict, constraints, geometry, error=None) -> dict:
    """Close the info at the geometry returned: constraints reached, wall time, error."""
    info["constraints"] = constraint_report(constraints, bohr(geometry))
    info["wall_s"] = time.perf_counter() - info.pop("_start_s", time.perf_counter())
    if error is not None:
        info["error"] = error
    return info


def summarise(info, trace, constraints):
    """Steps, energy change and the last free gradient of an optimisation trace."""
    info["steps"] = len(trace.energies_hartree)
    if not trace.energies_hartree:
        return
    info["last_energy_hartree"] = trace.energies_hartree[-1]
    info["energy_change_hartree"] = trace.energies_hartree[-1] - trace.energies_hartree[0]
    free = free_gradient(trace.gradients_hartree_bohr[-1], constraints, trace.positions_bohr[-1])
    info["max_gradient_hartree_bohr"] = float(np.max(np.abs(free)))


def last_geometry(trace, start):
    """The last geometry an optimisation trace reached (``start`` when it is empty)."""
    from pesflow.engine import Geometry

    if not trace.positions_bohr:
        return start
    return Geometry(start.symbols, trace.positions_bohr[-1] * BOHR_ANGSTROM,
                    start.charge, start.multiplicity)  # fmt: skip


def bohr(geometry):
    """Positions of a Geometry in bohr."""
    return geometry.positions_angstrom / BOHR_ANGSTROM


def geometric_version():
    """geomeTRIC's version, or None when it is not installed."""
    try:
        return importlib.metadata.version("geometric")
    except importlib.metadata.PackageNotFoundError:
        return None
