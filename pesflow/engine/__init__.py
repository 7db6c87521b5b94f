"""Quantum-chemistry backends behind one small interface.

An engine takes a geometry, a basis, a list of methods that share one SCF and the
engine settings, and returns one :class:`PointResult` per method, plus the
converged density to start the next point of a walk from (the scanner idea)::

    engine = get_engine("pyscf")
    records, density = engine.compute(geometry, "cc-pvdz", ["hf", "mp2"], EngineSettings())

The helpers here (method names, SCF families, basis checks) are pure and cheap to
import: PySCF is imported only inside the functions that need it, so that planning a
campaign never pays for a PySCF import it does not use.

Method names: the wavefunction methods :data:`WAVEFUNCTION_METHODS` or any DFT
functional that PySCF's libxc accepts (``b3lyp``, ``pbe0``, ``wb97x``, ...).  The
reference determinant (restricted, unrestricted, restricted-open) is a setting,
never part of a method's name.
"""

from __future__ import annotations

import functools
import importlib.util
import math
import warnings
from dataclasses import dataclass, field

import numpy as np

from pesflow.errors import EngineSetupError

#: Methods built on a Hartree-Fock reference; they all share one SCF at one basis.
WAVEFUNCTION_METHODS = ("hf", "mp2", "ccsd", "ccsd(t)")

#: Allowed values of :attr:`EngineSettings.reference`.
REFERENCES = ("auto", "restricted", "unrestricted", "restricted-open")

#: SCF convergence strategies, in the order a ladder usually tries them.
SCF_RUNGS = ("default", "damped", "level-shift", "second-order")

#: Engines by name; the module is imported only when the engine is asked for.
ENGINES = {"pyscf": "pesflow.engine.pyscf:PySCFEngine"}

_METHOD_HINT = (
    f"use one of {', '.join(WAVEFUNCTION_METHODS)} "
    "or a DFT functional known to PySCF's libxc (e.g. b3lyp, pbe0)"
)


@dataclass(frozen=True)
class Geometry:
    """Nuclear positions, total charge and spin multiplicity of one point.

    Inputs:
        symbols: element symbols in atom order, e.g. ``("O", "H", "H")``.
        positions_angstrom: ``(n, 3)`` Cartesian coordinates in angstrom.
        charge: total charge in units of e; default 0.
        multiplicity: 2S+1; default 1 (singlet).

    >>> g = Geometry(("H", "H"), [[0, 0, 0], [0, 0, 0.74]])
    >>> g.positions_angstrom.shape, g.spin
    ((2, 3), 0)
    """

    symbols: tuple[str, ...]
    positions_angstrom: np.ndarray
    charge: int = 0
    multiplicity: int = 1

    def __post_init__(self):
        symbols = tuple(str(s) for s in self.symbols)
        positions = np.array(self.positions_angstrom, dtype=float)
        if positions.shape != (len(symbols), 3):
            raise EngineSetupError(
                f"positions_angstrom has shape {positions.shape}; "
                f"expected ({len(symbols)}, 3) for {len(symbols)} atoms"
            )
        if not np.all(np.isfinite(positions)):
            raise EngineSetupError("positions_angstrom contains a non-finite coordinate")
        _check_distinct_positions(positions)
        if int(self.multiplicity) < 1:
            raise EngineSetupError(f"multiplicity must be 1 or more, got {self.multiplicity}")
        positions.flags.writeable = False
        object.__setattr__(self, "symbols", symbols)
        object.__setattr__(self, "positions_angstrom", positions)
        object.__setattr__(self, "charge", int(self.charge))
        object.__setattr__(self, "multiplicity", int(self.multiplicity))

    @property
    def spin(self) -> int:
        """Number of unpaired electrons, 2S = multiplicity - 1 (PySCF's ``spin``)."""
        return self.multiplicity - 1


def _check_distinct_positions(positions, tolerance_angstrom=1e-5):
    # Two nuclei at one point have infinite repulsion; PySCF would fail in every SCF.
    # (numpy broadcasting, not scipy.spatial: that import costs a batch ~0.09 s.)
    if len(positions) < 2:
        return
    distances = np.linalg.norm(positions[:, None, :] - positions[None, :, :], axis=-1)
    np.fill_diagonal(distances, np.inf)
    i, j = np.unravel_index(np.argmin(distances), distances.shape)
    if distances[i, j] < tolerance_angstrom:
        raise EngineSetupError(f"atoms {min(i, j) + 1} and {max(i, j) + 1} have the same position")


@dataclass(frozen=True)
class EngineSettings:
    """Settings of the engine; every field that changes a number is in :meth:`key_dict`.

    Inputs (defaults in brackets):
        conv_tol: SCF energy convergence in hartree [1e-10]; also the energy
            convergence of the CCSD amplitude equations.
        max_cycle: SCF iterations per ladder rung [100].
        reference: ``auto`` (restricted for closed-shell singlets, unrestricted for
            open shells), ``restricted`` (RHF/RKS; ROHF/ROKS for an open shell),
            ``unrestricted`` or ``restricted-open`` ["auto"].
        frozen_core: freeze the chemical core orbitals in mp2/ccsd/ccsd(t) [False].
        grid_level: DFT integration grid level, 0-9 [3].
        scf_ladder: SCF strategies tried in order until one converges, from
            :data:`SCF_RUNGS` [all four].
        broken_symmetry: for a closed-shell singlet, use an unrestricted reference
            (UHF/UKS) started from a spin-broken guess, so that a stretched bond
            can dissociate into open-shell fragments [False].  Needs ``reference``
            ``auto`` or ``unrestricted``; open shells are unrestricted already.
        stability: after the SCF converges, test the solution for a lower one
            nearby (the orbital Hessian's lowest eigenvalue) and follow any
            instability found [False].
        threads: OpenMP threads for the engine [1]; does not change a number.
        max_memory_mb: memory the engine may use, in MB [4000]; does not change a number.
    """

    conv_tol: float = 1e-10
    max_cycle: int = 100
    reference: str = "auto"
    frozen_core: bool = False
    grid_level: int = 3
    scf_ladder: tuple[str, ...] = SCF_RUNGS
    broken_symmetry: bool = False
    stability: bool = False
    threads: int = field(default=1, compare=False)
    max_memory_mb: int = field(default=4000, compare=False)

    def __post_init__(self):
        if not (math.isfinite(self.conv_tol) and self.conv_tol > 0):
            raise EngineSetupError(f"conv_tol must be a positive number, got {self.conv_tol}")
        if int(self.max_cycle) < 1:
            raise EngineSetupError(f"max_cycle must be 1 or more, got {self.max_cycle}")
        if self.reference not in REFERENCES:
            raise EngineSetupError(
                f"unknown reference {self.reference!r}; allowed: {', '.join(REFERENCES)}"
            )
        ladder = tuple(self.scf_ladder)
        unknown = [rung for rung in ladder if rung not in SCF_RUNGS]
        if not ladder or unknown:
            raise EngineSetupError(
                f"scf_ladder {list(ladder)} must be a non-empty list of: {', '.join(SCF_RUNGS)}"
            )
        if self.broken_symmetry and self.reference in ("restricted", "restricted-open"):
            raise EngineSetupError(
                f"broken_symmetry needs an unrestricted reference; reference is {self.reference!r}"
                " (use auto or unrestricted)"
            )
        if not 0 <= int(self.grid_level) <= 9:
            raise EngineSetupError(f"grid_level must be 0-9, got {self.grid_level}")
        if int(self.threads) < 1 or int(self.max_memory_mb) < 1:
            raise EngineSetupError("threads and max_memory_mb must be 1 or more")
        object.__setattr__(self, "conv_tol", float(self.conv_tol))
        object.__setattr__(self, "max_cycle", int(self.max_cycle))
        object.__setattr__(self, "frozen_core", bool(self.frozen_core))
        object.__setattr__(self, "grid_level", int(self.grid_level))
        object.__setattr__(self, "scf_ladder", ladder)
        object.__setattr__(self, "broken_symmetry", bool(self.broken_symmetry))
        object.__setattr__(self, "stability", bool(self.stability))
        object.__setattr__(self, "threads", int(self.threads))
        object.__setattr__(self, "max_memory_mb", int(self.max_memory_mb))

    def key_dict(self, method: str | None = None) -> dict:
        """The result-changing settings as a JSON-serialisable dict in a fixed order.

        ``threads`` and ``max_memory_mb`` never appear.  With ``method`` given, the
        fields that cannot change that method's number are left out too
        (``grid_level`` for the wavefunction methods, ``frozen_core`` for hf and DFT),
        so that points differing only there share one cache entry.
        ``broken_symmetry`` and ``stability`` are kept for every method: both can
        change the SCF solution that every method is built on.

        >>> list(EngineSettings().key_dict("hf"))
        ['conv_tol', 'max_cycle', 'reference', 'scf_ladder', 'broken_symmetry', 'stability']
        """
        key = {
            "conv_tol": self.conv_tol,
            "max_cycle": self.max_cycle,
            "reference": self.reference,
            "frozen_core": self.frozen_core,
            "grid_level": self.grid_level,
            "scf_ladder": list(self.scf_ladder),
            "broken_symmetry": self.broken_symmetry,
            "stability": self.stability,
        }
        if method is not None:
            method = canonical_method(method)
            if method in WAVEFUNCTION_METHODS:
                del key["grid_level"]
            if method not in ("mp2", "ccsd", "ccsd(t)"):
                del key["frozen_core"]
        return key


@dataclass
class PointResult:
    """One method's record at one point.

    Fields:
        method: canonical method name.
        energy_hartree: total energy in hartree; nan when failed.
        converged: True when the SCF and this method's own step converged.
        scf_cycles: SCF iterations that served this record, summed over ladder rungs.
        wall_s: wall time in s of this number alone: SCF plus its own correlated step.
        step_wall_s: wall time in s of its own step only (the SCF for hf and DFT).
        s2: <S^2> of the reference determinant; nan for a restricted closed shell.
        reference: ``RHF``, ``UHF``, ``ROHF``, ``RKS``, ``UKS`` or ``ROKS``.
        attempts: ladder rungs tried, each ``{"rung", "converged", "cycles",
            "energy_hartree"}``; with stability analysis a last entry of rung
            ``stability`` (or ``broken-symmetry``) adds what the analysis found
            (see :func:`pesflow.engine.pyscf.follow_instabilities`).
        error: one-line reason when failed, else None.
        extra: JSON-serialisable details beyond the columns, empty when there are
            none; a relaxed point has ``relaxation`` (see
            :meth:`pesflow.engine.pyscf.PySCFEngine.relax`).
    """

    method: str
    energy_hartree: float
    converged: bool
    scf_cycles: int
    wall_s: float
    step_wall_s: float
    s2: float
    reference: str
    attempts: list[dict]
    error: str | None = None
    extra: dict = field(default_factory=dict)


def canonical_method(name: str) -> str:
    """Canonical (lower-case, stripped) name of a method; EngineSetupError if unknown.

    Accepts the wavefunction methods in any case (``CCSD(T)`` -> ``ccsd(t)``) and
    any DFT functional PySCF's libxc can parse, kept as given in lower case.
    A functional with a dispersion suffix (``b3lyp-d3bj``) is accepted only when
    the ``pyscf-dispersion`` package is installed.

    >>> canonical_method(" CCSD(T) ")
    'ccsd(t)'
    """
    if not isinstance(name, str):
        raise EngineSetupError(f"method must be a string, got {name!r}; {_METHOD_HINT}")
    lowered = name.strip().lower()
    compact = "".join(lowered.split())
    if compact in WAVEFUNCTION_METHODS:
        return compact
    return _canonical_functional(lowered, name)


@functools.lru_cache(maxsize=256)
def _canonical_functional(lowered: str, given: str) -> str:
    from pyscf.dft import libxc
    from pyscf.scf import dispersion

    try:
        hybrid, components = libxc.parse_xc(lowered)
    except (KeyError, ValueError, IndexError, TypeError):
        hybrid, components = (0, 0, 0), ()
    if not components and not any(hybrid):
        hint = _METHOD_HINT
        if _names_a_reference(lowered):
            hint += "; the reference (restricted, unrestricted, restricted-open) is a setting"
        raise EngineSetupError(f"unknown method {given!r}: {hint}")
    correction = dispersion.parse_dft(lowered)[2]
    if correction and importlib.util.find_spec("pyscf.dispersion") is None:
        raise EngineSetupError(
            f"method {given!r} asks for the dispersion correction {correction!r}, "
            "which needs the pyscf-dispersion package (not installed)"
        )
    return lowered


def _names_a_reference(lowered: str) -> bool:
    # "rhf", "uks", "ump2", "rccsd(t)", ...: a reference glued onto a method name.
    for prefix in ("ro", "r", "u"):
        rest = lowered[len(prefix) :]
        if lowered.startswith(prefix) and (rest in WAVEFUNCTION_METHODS or rest == "ks"):
            return True
    return False


def scf_family(method: str) -> str:
    """The SCF a method is built on: ``hf`` for the wavefunction methods, else the functional.

    Points of methods with the same family at one geometry and basis share one SCF.

    >>> scf_family("CCSD(T)"), scf_family("B3LYP")
    ('hf', 'b3lyp')
    """
    method = canonical_method(method)
    return "hf" if method in WAVEFUNCTION_METHODS else method


def check_basis(basis: str, elements) -> None:
    """Raise EngineSetupError naming the basis and the first element it lacks.

    Inputs:
        basis: a basis-set name PySCF knows (``cc-pvdz``, ``def2-svp``, ``6-31g*``).
        elements: element symbols, in the order to check (duplicates are fine).

    >>> check_basis("sto-3g", ["O", "H", "H"])
    """
    from pyscf.gto import basis as pyscf_basis

    if not isinstance(basis, str) or not basis.strip():
        raise EngineSetupError(f"basis must be a non-empty name, got {basis!r}")
    for element in dict.fromkeys(elements):
        try:
            with warnings.catch_warnings():
                # PySCF suggests installing basis-set-exchange for unknown names.
                warnings.simplefilter("ignore")
                shells = pyscf_basis.load(basis, element)
        except pyscf_basis.BasisNotFoundError as exc:
            if "not found for" not in str(exc):
                raise EngineSetupError(
                    f"unknown basis {basis!r} (not in PySCF's library)"
                ) from None
            shells = []
        except (KeyError, ValueError, RuntimeError) as exc:
            raise EngineSetupError(f"basis {basis!r} for {element}: {exc}") from exc
        if not shells:
            raise EngineSetupError(f"basis {basis!r} has no functions for element {element}")


def get_engine(name: str = "pyscf"):
    """The engine object of that name (only ``pyscf`` so far).

    >>> get_engine().name
    'pyscf'
    """
    try:
        target = ENGINES[name]
    except KeyError:
        raise EngineSetupError(f"unknown engine {name!r}; allowed: {', '.join(ENGINES)}") from None
    module_name, class_name = target.split(":")
    module = importlib.import_module(module_name)
    return getattr(module, class_name)()
