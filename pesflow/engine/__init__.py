"""Quantum-chemistry backends behind one small interface.

An engine (:class:`~pesflow.engine.base.Engine`) declares its methods through
:class:`~pesflow.engine.base.MethodInfo` and computes walks: a walk keeps the state
of one scan (the previous point's solution, the previous relaxed geometry) and
returns one :class:`PointResult` per method and point (the scanner idea)::

    engine = get_engine("pyscf")
    walk = engine.start_walk(EngineSettings(), "cc-pvdz", ["hf", "mp2"])
    records = walk.compute(geometry)      # {"hf": PointResult, "mp2": PointResult}

The helpers here (method names and information, SCF families, basis checks) are
cheap to import: PySCF and tblite are imported only inside the functions that need
them, so that planning a campaign never pays for an import it does not use.

Method names: the wavefunction methods :data:`WAVEFUNCTION_METHODS` or any DFT
functional that PySCF's libxc accepts (``b3lyp``, ``pbe0``, ``wb97x``, ...), computed
by PySCF, and the tight-binding levels :data:`TIGHT_BINDING_METHODS`
(``gfn2-xtb``, ``gfn1-xtb``, no basis set), computed by tblite.  The reference
determinant (restricted, unrestricted, restricted-open) is a setting, never part of
a method's name.
"""

from __future__ import annotations

import functools
import importlib
import json
import math
from dataclasses import dataclass, field

import numpy as np

from pesflow.engine.base import Engine, EngineWalk, MethodInfo
from pesflow.errors import EngineSetupError

__all__ = [
    "ENGINES",
    "Engine",
    "EngineSettings",
    "EngineWalk",
    "Geometry",
    "MethodInfo",
    "PointResult",
    "canonical_method",
    "check_basis",
    "level_method",
    "split_state",
    "state_record",
    "get_engine",
    "method_info",
    "scf_family",
]

#: Methods built on a Hartree-Fock reference; they all share one SCF at one basis.
WAVEFUNCTION_METHODS = ("hf", "mp2", "ccsd", "ccsd(t)")

#: Excited-state methods (PySCF): prefixes of a DFT functional (``tda-b3lyp``,
#: ``tddft-pbe0``), and CIS/TDHF on HF and EOM-EE-CCSD on CCSD.  Each computes several
#: electronic states per point, one record each (:func:`state_record`).
EXCITED_METHODS = ("tda-<functional>", "tddft-<functional>", "cis", "tdhf", "eom-ccsd")

#: Multireference methods (PySCF); each needs an active space as a level option.
MULTIREFERENCE_METHODS = ("casscf", "nevpt2")

#: Level options: spec keys of a level beside method and basis.  An engine folds the
#: ones a method takes (:attr:`MethodInfo.options`) into its canonical name
#: (:func:`level_method`), so that the name keys and labels the level everywhere.
#: ``states`` means two things by method: the number of averaged roots of a
#: multireference level (casscf/nevpt2, with ``weights``) and the number of excited
#: states above the ground state of an excited-state level (with ``spin``, ``follow``).
#: ``dispersion`` and ``solvent`` apply to hf and DFT levels (b3lyp-d3bj(pcm:water),
#: see :mod:`pesflow.engine.pyscf.corrections`).
LEVEL_OPTIONS = ("active", "states", "weights", "spin", "follow", "dispersion", "solvent")

#: Joins a multi-state method's name and a state index in the name of that state's
#: record (``tda-b3lyp(singlets=3)#2``); state 0 is the ground state.
STATE_SEPARATOR = "#"

#: Tight-binding levels (tblite); each has its own built-in basis, so no basis set.
TIGHT_BINDING_METHODS = ("gfn2-xtb", "gfn1-xtb")

#: Allowed values of :attr:`EngineSettings.reference`.
REFERENCES = ("auto", "restricted", "unrestricted", "restricted-open")

#: SCF convergence strategies, in the order a ladder usually tries them.
SCF_RUNGS = ("default", "damped", "level-shift", "second-order")

#: Engines by name, asked in this order who computes a method; a module is imported
#: only when its engine is asked for.  PySCF comes last: its functional names are open.
ENGINES = {
    "tblite": "pesflow.engine.tblite:TBLiteEngine",
    "pyscf": "pesflow.engine.pyscf:PySCFEngine",
}

#: The names under which :meth:`EngineSettings.key_dict` writes each field (the
#: names point keys were first made with; changing one would re-key every point).
_KEY_NAMES = {
    "scf_energy_tolerance_hartree": "conv_tol",
    "scf_max_iterations": "max_cycle",
    "reference": "reference",
    "frozen_core": "frozen_core",
    "dft_grid_level": "grid_level",
    "scf_ladder": "scf_ladder",
    "broken_symmetry": "broken_symmetry",
    "stability": "stability",
}

_METHOD_HINT = (
    f"use one of {', '.join(WAVEFUNCTION_METHODS)} "
    "or a DFT functional known to PySCF's libxc (e.g. b3lyp, pbe0), "
    f"or a tight-binding level ({', '.join(TIGHT_BINDING_METHODS)}), "
    f"or an excited-state method ({', '.join(EXCITED_METHODS)}), "
    f"or a multireference level ({', '.join(MULTIREFERENCE_METHODS)}, with an active space)"
)


@dataclass(frozen=True)
class Geometry:
    """Nuclear positions, total charge and spin multiplicity of one point.

    Inputs:
        symbols: element symbols in atom order, e.g. ``("O", "H", "H")``.
        positions_angstrom: ``(n, 3)`` Cartesian coordinates in angstrom.
        charge: total charge in units of e; default 0.
        multiplicity: 2S+1; default 1 (singlet).
        ghosts: 0-based atoms that are ghosts: their basis functions stay, their nuclei
            and electrons do not (counterpoise correction, Boys & Bernardi, Mol. Phys.
            19, 553 (1970)); charge and multiplicity are those of the real atoms.

    >>> g = Geometry(("H", "H"), [[0, 0, 0], [0, 0, 0.74]])
    >>> g.positions_angstrom.shape, g.spin
    ((2, 3), 0)
    """

    symbols: tuple[str, ...]
    positions_angstrom: np.ndarray
    charge: int = 0
    multiplicity: int = 1
    ghosts: tuple[int, ...] = ()

    def __post_init__(self):
        symbols = tuple(str(s) for s in self.symbols)
        ghosts = tuple(sorted({int(a) for a in self.ghosts}))
        in_range = not ghosts or (ghosts[0] >= 0 and ghosts[-1] < len(symbols))
        if not in_range or len(ghosts) >= len(symbols) > 0:
            raise EngineSetupError(
                f"ghosts {list(ghosts)} must be atoms 0-{len(symbols) - 1}, not all of them"
            )
        object.__setattr__(self, "ghosts", ghosts)
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
        scf_energy_tolerance_hartree: SCF energy convergence in hartree [1e-10]; also
            the energy convergence of the CCSD amplitude equations, and of the
            tight-binding SCC (tblite's ``accuracy`` = this / 1e-6, at least 1e-4).
        scf_max_iterations: SCF (or SCC) iterations per ladder rung [100].
        reference: ``auto`` (restricted for closed-shell singlets, unrestricted for
            open shells), ``restricted`` (RHF/RKS; ROHF/ROKS for an open shell),
            ``unrestricted`` or ``restricted-open`` ["auto"].
        frozen_core: freeze the chemical core orbitals in mp2/ccsd/ccsd(t) [False].
        dft_grid_level: DFT integration grid level, 0-9 [3].
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

    A setting that does not apply to a method (the grid to a wavefunction method,
    the SCF ladder to tight binding) is ignored there and left out of its keys.
    """

    scf_energy_tolerance_hartree: float = 1e-10
    scf_max_iterations: int = 100
    reference: str = "auto"
    frozen_core: bool = False
    dft_grid_level: int = 3
    scf_ladder: tuple[str, ...] = SCF_RUNGS
    broken_symmetry: bool = False
    stability: bool = False
    threads: int = field(default=1, compare=False)
    max_memory_mb: int = field(default=4000, compare=False)

    def __post_init__(self):
        tolerance = self.scf_energy_tolerance_hartree
        if not (math.isfinite(tolerance) and tolerance > 0):
            raise EngineSetupError(
                f"scf_energy_tolerance_hartree must be a positive number, got {tolerance}"
            )
        if int(self.scf_max_iterations) < 1:
            raise EngineSetupError(
                f"scf_max_iterations must be 1 or more, got {self.scf_max_iterations}"
            )
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
        if not 0 <= int(self.dft_grid_level) <= 9:
            raise EngineSetupError(f"dft_grid_level must be 0-9, got {self.dft_grid_level}")
        if int(self.threads) < 1 or int(self.max_memory_mb) < 1:
            raise EngineSetupError("threads and max_memory_mb must be 1 or more")
        object.__setattr__(self, "scf_energy_tolerance_hartree", float(tolerance))
        object.__setattr__(self, "scf_max_iterations", int(self.scf_max_iterations))
        object.__setattr__(self, "frozen_core", bool(self.frozen_core))
        object.__setattr__(self, "dft_grid_level", int(self.dft_grid_level))
        object.__setattr__(self, "scf_ladder", ladder)
        object.__setattr__(self, "broken_symmetry", bool(self.broken_symmetry))
        object.__setattr__(self, "stability", bool(self.stability))
        object.__setattr__(self, "threads", int(self.threads))
        object.__setattr__(self, "max_memory_mb", int(self.max_memory_mb))

    def key_dict(self, method: str | None = None) -> dict:
        """The result-changing settings as a JSON-serialisable dict in a fixed order.

        The dict's names are the settings' key names (``conv_tol``, ``max_cycle``,
        ``grid_level`` for the three fields named otherwise here), so that every
        point keeps the key it was first stored under.  ``threads`` and
        ``max_memory_mb`` never appear.  With ``method`` given, only the settings of
        its :attr:`MethodInfo.settings` are kept (``grid_level`` is left out for the
        wavefunction methods, ``frozen_core`` for hf and DFT, everything but the
        tolerance and the iteration limit for tight binding), so that points
        differing only elsewhere share one cache entry.

        >>> list(EngineSettings().key_dict("hf"))
        ['conv_tol', 'max_cycle', 'reference', 'scf_ladder', 'broken_symmetry', 'stability']
        """
        key = {}
        for name, key_name in _KEY_NAMES.items():
            value = getattr(self, name)
            key[key_name] = list(value) if isinstance(value, tuple) else value
        if method is not None:
            info = method_info(method)
            key = {name: value for name, value in key.items() if name in info.settings}
            if info.libraries:  # only such methods: every other key stays as it was
                key["libraries"] = dict(info.libraries)
        return key

    @classmethod
    def from_key_dict(cls, key: dict, **resources) -> EngineSettings:
        """The settings back from a full :meth:`key_dict` (plus threads, max_memory_mb).

        >>> s = EngineSettings(dft_grid_level=5)
        >>> EngineSettings.from_key_dict(s.key_dict()) == s
        True
        """
        fields = {name: key[key_name] for name, key_name in _KEY_NAMES.items() if key_name in key}
        return cls(**fields, **resources)


@dataclass
class PointResult:
    """One method's record at one point, its properties by name.

    Fields:
        method: canonical method name.
        energy_hartree: total energy in hartree; nan when failed.
        converged: True when the SCF and this method's own step converged.
        scf_cycles: SCF iterations that served this record, summed over ladder rungs.
        wall_s: wall time in s of this number alone: SCF plus its own correlated step.
        step_wall_s: wall time in s of its own step only (the SCF for hf and DFT).
        s2: <S^2> of the reference determinant; nan for a restricted closed shell
            and for tight binding.
        reference: ``RHF``, ``UHF``, ``ROHF``, ``RKS``, ``UKS``, ``ROKS``, or the
            tight-binding Hamiltonian (``GFN2-xTB``).
        attempts: ladder rungs tried, each ``{"rung", "converged", "cycles",
            "energy_hartree"}``; with stability analysis a last entry of rung
            ``stability`` (or ``broken-symmetry``) adds what the analysis found
            (see :func:`pesflow.engine.pyscf.follow_instabilities`).
        error: one-line reason when failed, else None.
        extra: JSON-serialisable details beyond the columns, empty when there are
            none; a relaxed point has ``relaxation`` (see
            :meth:`pesflow.engine.base.EngineWalk.relax`).
        geometry: the :class:`Geometry` this record belongs to when it is not the one
            asked for (a relaxed point: the relaxed geometry), else None.
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
    geometry: Geometry | None = None

    @classmethod
    def failed(cls, method, error, reference="none", attempts=(), scf_cycles=0, wall_s=0.0):
        """The record of a point that could not be computed (energy nan)."""
        return cls(
            method=method,
            energy_hartree=math.nan,
            converged=False,
            scf_cycles=int(scf_cycles),
            wall_s=float(wall_s),
            step_wall_s=0.0,
            s2=math.nan,
            reference=reference,
            attempts=[dict(a) for a in attempts],
            error=error,
        )

    def columns(self) -> dict:
        """The record's part of a store row (:data:`pesflow.store.point_store.POINT_SCHEMA`)."""
        return {
            "method": self.method,
            "energy_hartree": float(self.energy_hartree),
            "converged": bool(self.converged),
            "scf_cycles": int(self.scf_cycles),
            "wall_s": float(self.wall_s),
            "step_wall_s": float(self.step_wall_s),
            "s2": float(self.s2),
            "reference": self.reference,
            "attempts_json": json.dumps(self.attempts) if self.attempts else None,
            "extra_json": json.dumps(self.extra, sort_keys=True, default=float)
            if self.extra
            else None,
            "error": self.error,
        }


def method_info(method: str) -> MethodInfo:
    """The :class:`MethodInfo` of a method, from the engine that computes it.

    Raises EngineSetupError (one line) for a name no engine knows.

    >>> info = method_info("CCSD(T)")
    >>> info.engine, info.family, info.needs_basis, info.byproducts
    ('pyscf', 'hf', True, ('ccsd',))
    >>> method_info("gfn2-xtb").needs_basis
    False
    """
    if not isinstance(method, str):
        raise EngineSetupError(f"method must be a string, got {method!r}; {_METHOD_HINT}")
    return _method_info(split_state(method)[0])


def state_record(method: str, state: int | None) -> str:
    """The record name of one electronic state of a multi-state method (``method#k``,
    k = 0 the ground state), or ``method`` itself for a single-state level (None).

    >>> state_record("tda-b3lyp(singlets=3)", 2), state_record("hf", None)
    ('tda-b3lyp(singlets=3)#2', 'hf')
    """
    return method if state is None else f"{method}{STATE_SEPARATOR}{int(state)}"


def split_state(name: str) -> tuple[str, int | None]:
    """The method and state index of a record name (:func:`state_record`'s inverse).

    >>> split_state("cis(singlets=2)#1"), split_state("b3lyp")
    (('cis(singlets=2)', 1), ('b3lyp', None))
    """
    head, sep, tail = name.rpartition(STATE_SEPARATOR)
    if sep and tail.isdigit():
        return head, int(tail)
    return name, None


@functools.lru_cache(maxsize=512)
def _method_info(method: str) -> MethodInfo:
    for name in ENGINES:
        info = get_engine(name).method_info(method)
        if info is not None:
            return info
    hint = _METHOD_HINT
    lowered = method.strip().lower()
    if _names_a_reference(lowered):
        hint += "; the reference (restricted, unrestricted, restricted-open) is a setting"
    raise EngineSetupError(f"unknown method {method!r}: {hint}")


def canonical_method(name: str) -> str:
    """Canonical (lower-case, stripped) name of a method; EngineSetupError if unknown.

    Accepts the wavefunction methods in any case (``CCSD(T)`` -> ``ccsd(t)``), any DFT
    functional PySCF's libxc can parse, kept as given in lower case, and the
    tight-binding levels.  A functional with a dispersion suffix (``b3lyp-d3bj``) is
    accepted only when the ``pyscf-dispersion`` package is installed.

    >>> canonical_method(" CCSD(T) ")
    'ccsd(t)'
    """
    return method_info(name).name


def level_method(method: str, options: dict | None = None) -> str:
    """The canonical name of a level's method with its level options folded in.

    ``options`` maps names of :data:`LEVEL_OPTIONS` to the spec's values (absent ones
    left out).  The method's engine makes the name; raises EngineSetupError (one line)
    for an unknown method, options it does not take, wrong values, or a method that
    needs options and got none.

    >>> level_method("TDA-B3LYP", {"states": 4}), level_method("hf")
    ('tda-b3lyp(singlets=4)', 'hf')
    >>> level_method("CASSCF", {"active": [6, 6]})
    'casscf(6,6)'
    """
    info = method_info(method)
    options = {k: v for k, v in (options or {}).items() if v is not None}
    name = get_engine(info.engine).method_with_options(info.name, options)
    return method_info(name).name


def _names_a_reference(lowered: str) -> bool:
    # "rhf", "uks", "ump2", "rccsd(t)", ...: a reference glued onto a method name.
    for prefix in ("ro", "r", "u"):
        rest = lowered[len(prefix) :]
        if lowered.startswith(prefix) and (rest in WAVEFUNCTION_METHODS or rest == "ks"):
            return True
    return False


def scf_family(method: str) -> str:
    """The shared-work group of a method (:attr:`MethodInfo.family`): ``hf`` for the
    wavefunction methods, else the functional (or the tight-binding level).

    Points of methods with the same family at one geometry and basis share one SCF.

    >>> scf_family("CCSD(T)"), scf_family("B3LYP")
    ('hf', 'b3lyp')
    """
    return method_info(method).family


def check_basis(basis: str, elements) -> None:
    """Raise EngineSetupError naming the basis and the first element it lacks (PySCF's
    basis library).

    Inputs:
        basis: a basis-set name PySCF knows (``cc-pvdz``, ``def2-svp``, ``6-31g*``).
        elements: element symbols, in the order to check (duplicates are fine).

    >>> check_basis("sto-3g", ["O", "H", "H"])
    """
    get_engine("pyscf").check_basis(basis, elements)


def check_level(method: str, basis: str | None, elements) -> tuple[MethodInfo, str]:
    """Check one level (method, basis or None) for the elements it is computed on.

    Returns the method's :class:`MethodInfo` and the canonical basis name (``""`` for
    a level without basis set).  Raises EngineSetupError naming what is wrong: an
    unknown method, a basis missing for a method that needs one, a basis given to a
    level that has its own, a basis or a tight-binding level lacking an element.
    """
    info = method_info(method)
    engine = get_engine(info.engine)
    if not info.needs_basis:
        if basis is not None and str(basis).strip():
            raise EngineSetupError(
                f"{info.name} has its own built-in basis; give no basis with it (got {basis!r})"
            )
        engine.check_basis("", elements)
        return info, ""
    if basis is None or not str(basis).strip():
        raise EngineSetupError(f"{info.name} needs a basis set (e.g. sto-3g, cc-pvdz)")
    canonical = str(basis).strip().lower()
    engine.check_basis(canonical, elements)
    return info, canonical


@functools.cache
def get_engine(name: str = "pyscf") -> Engine:
    """The engine object of that name (a key of :data:`ENGINES`).

    >>> get_engine().name
    'pyscf'
    """
    try:
        target = ENGINES[name]
    except (KeyError, TypeError):
        raise EngineSetupError(f"unknown engine {name!r}; allowed: {', '.join(ENGINES)}") from None
    module_name, class_name = target.split(":")
    module = importlib.import_module(module_name)
    return getattr(module, class_name)()
