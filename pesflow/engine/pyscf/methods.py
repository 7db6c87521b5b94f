"""The PySCF engine's methods: names, information for plan and cost, basis checks.

Cheap to import; PySCF's libxc parser and basis library are imported only when a
functional name or a basis set has to be checked.
"""

from __future__ import annotations

import functools
import importlib.util
import warnings
from dataclasses import replace

from pesflow.engine import MethodInfo
from pesflow.engine.pyscf import corrections
from pesflow.errors import EngineSetupError

#: Every setting (by its key name) that can change an SCF-based number.
_ALL_SETTINGS = ("conv_tol", "max_cycle", "reference", "frozen_core", "grid_level",
                 "scf_ladder", "broken_symmetry", "stability")  # fmt: skip

#: Per wavefunction method: order in its SCF family, cost weight relative to the SCF
#: (for batching; common practice: correlated steps cost several SCFs on small
#: molecules), scaling exponent and default prefactor of a whole point (wall s at
#: 50 basis functions, one thread; measured here on small molecules with PySCF
#: 2.14), analytic gradients used for relaxed scans, byproducts.  HF's law is the
#: SCF term of the cost model (:data:`pesflow.plan.cost.SCF_COST`: N^2.5, 0.085 s at 50
#: functions, CPU time of ten g2 molecules at four basis sets); the correlated steps have
#: finer size terms there (:data:`pesflow.plan.cost.FAMILY_COST`).
_WAVEFUNCTION = {
    "hf": (0, 1.0, 2.5, 0.085, True, ()),
    "mp2": (1, 1.5, 4, 0.15, True, ()),
    "ccsd": (2, 6.0, 6, 1.5, True, ()),
    "ccsd(t)": (3, 9.0, 7, 3.0, False, ("ccsd",)),
}
#: Every DFT functional: one SCF each, cost class ``dft`` (exponent 3, 0.4 s at 50
#: basis functions, measured as above), analytic gradients.
_DFT = (0, 1.0, 3, 0.4, True, ())


#: Excited-state methods (see :mod:`pesflow.engine.pyscf.excited`): order in their SCF
#: family (after the ground-state methods), cost weight relative to the SCF, cost
#: exponent and default prefactor (wall s at 50 basis functions, one thread; measured
#: here with PySCF 2.14 on LiH/6-31G and H2O/cc-pVDZ, 3 states: TDA about 1-2 SCFs,
#: EOM-CCSD about 3 CCSDs).
_EXCITED = {
    "tda": (1, 2.0, 4, 0.8),
    "tddft": (1, 3.0, 4, 1.2),
    "cis": (1, 2.0, 4, 0.3),
    "tdhf": (1, 3.0, 4, 0.4),
    "eom-ccsd": (4, 20.0, 6, 5.0),
}
#: Multireference methods: order in their CASSCF family, cost weight relative to an
#: SCF, cost exponent and default prefactor (wall s at 50 basis functions, one thread;
#: measured here with PySCF 2.14 on N2 CAS(6,6)/6-31G, 18 functions: CASSCF about
#: 0.4 s a point from the neighbour's orbitals, NEVPT2 0.4 s more).  For small
#: molecules the active space (the CI) sets the cost more than the basis, hence the
#: low exponents; the CI grows factorially with the active space.  The settings that
#: change their numbers: the SCF's (its solution is the first point's start) and the
#: CASSCF's tolerance; the reference is always restricted (RHF, ROHF).
_MULTIREFERENCE = {
    "casscf": (0, 8.0, 2, 3.0),
    "nevpt2": (1, 15.0, 3, 8.0),
}
_MULTIREFERENCE_SETTINGS = ("conv_tol", "max_cycle", "scf_ladder")
#: Cost exponent and the prefactor (wall s at 50 basis functions) a continuum solvent
#: adds to its SCF's (see :func:`_solvent_cost`).
_SOLVENT_COST = (2.5, 1.0)


def method_info(name: str) -> MethodInfo | None:
    """The :class:`~pesflow.engine.MethodInfo` of a PySCF method, or None when PySCF
    cannot compute ``name``.  Raises EngineSetupError for a functional whose
    dispersion correction needs the missing ``pyscf-dispersion`` package, for an
    excited-state method on something that is not a functional, and for a malformed
    multireference name (``casscf(6,6)``, see :mod:`pesflow.engine.pyscf.multireference`)."""
    lowered = name.strip().lower()
    compact = "".join(lowered.split())
    if lowered.split("(")[0].strip() in _MULTIREFERENCE:
        return _multireference_info(lowered)
    excited = _excited_info(compact, name)
    if excited is not None:
        return excited
    corrected = corrections.parse(compact)
    if corrected is not None and corrected.base == "hf":  # hf-d3bj, hf(pcm:water)
        _check_dispersion_package(corrected.dispersion, name)
        info = replace(
            method_info("hf"),
            name=corrected.name,
            family=corrected.name,
            libraries=_dispersion_libraries(corrected),
        )
        return _solvent_cost(info, corrected)
    if compact in _WAVEFUNCTION:
        order, weight, exponent, prefactor, gradients, byproducts = _WAVEFUNCTION[compact]
        dropped = ("grid_level",) if compact != "hf" else ("grid_level", "frozen_core")
        return MethodInfo(
            name=compact, engine="pyscf", family="hf", order=order, weight=weight,
            cost_class=compact, cost_exponent=exponent, cost_prefactor_s=prefactor,
            needs_basis=True, has_gradients=gradients, byproducts=byproducts,
            settings=tuple(s for s in _ALL_SETTINGS if s not in dropped),
            options=corrections.LEVEL_OPTIONS if compact == "hf" else (),
        )  # fmt: skip
    core = corrected.core if corrected is not None else lowered
    functional = _canonical_functional(core, name)
    if functional is None:
        return None
    functional = corrected.name if corrected is not None else functional
    order, weight, exponent, prefactor, gradients, byproducts = _DFT
    info = MethodInfo(
        name=functional, engine="pyscf", family=functional, order=order, weight=weight,
        cost_class="dft", cost_exponent=exponent, cost_prefactor_s=prefactor,
        needs_basis=True, has_gradients=gradients, byproducts=byproducts,
        settings=tuple(s for s in _ALL_SETTINGS if s != "frozen_core"),
        options=corrections.LEVEL_OPTIONS,
    )  # fmt: skip
    if corrected is None:
        return info
    return _solvent_cost(replace(info, libraries=_dispersion_libraries(corrected)), corrected)


def _dispersion_libraries(level) -> tuple[tuple[str, str], ...]:
    # The D3/D4 parameters and code come with pyscf-dispersion, not with PySCF: its
    # version keys the points of a dispersion-corrected level.
    if not level.dispersion:
        return ()
    import importlib.metadata

    return (("pyscf-dispersion", importlib.metadata.version("pyscf-dispersion")),)


def _solvent_cost(info: MethodInfo, level) -> MethodInfo:
    # A continuum solvent is its own cost class (its timings calibrate it apart from the
    # gas-phase SCFs), with the engine's law: the solvent adds about 0.3 s a point at 24
    # basis functions and 1.2 s at 58 (water, cc-pVDZ and cc-pVTZ, PCM and ddCOSMO,
    # measured here with PySCF 2.14), so 1 s at 50 functions, exponent 2.5.
    if level.model is None:
        return info
    return replace(info, cost_class="solvent", cost_exponent=_SOLVENT_COST[0],
                   cost_prefactor_s=info.cost_prefactor_s + _SOLVENT_COST[1])  # fmt: skip


def _excited_info(compact: str, given: str) -> MethodInfo | None:
    from pesflow.engine.pyscf import excited

    level = excited.parse(compact)
    if level is None:
        return None
    if level.prefix in ("tda", "tddft"):
        functional = _canonical_functional(level.ground, given)
        if functional is None or functional in _WAVEFUNCTION:
            raise EngineSetupError(
                f"{level.prefix}- must be followed by a DFT functional (e.g. "
                f"{level.prefix}-b3lyp); got {level.ground!r} (on HF use cis or tdhf)"
            )
    order, weight, exponent, prefactor = _EXCITED[level.prefix]
    base = method_info(level.ground)
    return MethodInfo(
        name=level.name, engine="pyscf", family=base.family, order=order,
        weight=weight * (1 + 0.2 * level.states), cost_class=level.prefix,
        cost_exponent=exponent, cost_prefactor_s=prefactor, needs_basis=True,
        has_gradients=False, byproducts=("ccsd",) if level.prefix == "eom-ccsd" else (),
        settings=base.settings, n_states=level.states + 1, options=excited.LEVEL_OPTIONS,
        follow_states=level.follow,
    )  # fmt: skip


def _multireference_info(lowered: str) -> MethodInfo:
    from pesflow.engine.pyscf import multireference

    if lowered in _MULTIREFERENCE:  # the bare name: known, but needs its level options
        level, name, family, byproducts = None, lowered, lowered, ()
    else:
        level = multireference.parse(lowered)
        if level is None:
            raise EngineSetupError(
                f"malformed multireference method {lowered!r}; e.g. casscf(6,6), nevpt2(avas:n 2p)"
            )
        name, family = level.name, level.casscf_name
        byproducts = (family,) if level.method == "nevpt2" else ()
    method = lowered.split("(")[0].strip()
    order, weight, exponent, prefactor = _MULTIREFERENCE[method]
    return MethodInfo(
        name=name, engine="pyscf", family=family, order=order, weight=weight,
        cost_class=method, cost_exponent=exponent, cost_prefactor_s=prefactor,
        needs_basis=True, has_gradients=False, byproducts=byproducts,
        settings=_MULTIREFERENCE_SETTINGS, options=multireference.LEVEL_OPTIONS,
        fragments="separate" if level is None or level.ao_labels else "asymptote",
    )  # fmt: skip


def method_with_options(method: str, options: dict) -> str:
    """The canonical name of a PySCF method with level options: a multireference one
    (``casscf`` with ``{"active": [6, 6]}`` -> ``casscf(6,6)``), an excited-state one
    (``tda-b3lyp`` with ``{"states": 4}`` -> ``tda-b3lyp(singlets=4)``) or an SCF level
    with dispersion and solvent (``b3lyp`` with ``{"dispersion": "d3bj"}`` ->
    ``b3lyp-d3bj``, see :mod:`~pesflow.engine.pyscf.corrections`); EngineSetupError
    when the method takes none or an option is wrong."""
    if method in _MULTIREFERENCE:
        from pesflow.engine.pyscf import multireference

        return multireference.level_name(method, options)
    from pesflow.engine.pyscf import excited

    level = excited.parse(method)
    if level is not None:
        return excited.level_with_options(level.prefix, level.ground, options).name
    if options and method_info(method).options == corrections.LEVEL_OPTIONS:
        return corrections.with_options(method, options).name
    scf_only = [k for k in options if k in corrections.LEVEL_OPTIONS]
    if scf_only:
        raise EngineSetupError(
            f"{scf_only[0]} applies to hf and DFT functionals (the SCF itself), not {method}"
        )
    if options:
        raise EngineSetupError(f"{method} takes no level options (got {', '.join(options)})")
    return method


@functools.lru_cache(maxsize=256)
def _canonical_functional(lowered: str, given: str) -> str | None:
    from pyscf.dft import libxc
    from pyscf.scf import dispersion

    try:
        hybrid, components = libxc.parse_xc(lowered)
    except (KeyError, ValueError, IndexError, TypeError):
        hybrid, components = (0, 0, 0), ()
    if not components and not any(hybrid):
        return None
    _check_dispersion_package(dispersion.parse_dft(lowered)[2], given)
    return lowered


def _check_dispersion_package(correction, given):
    if correction and importlib.util.find_spec("pyscf.dispersion") is None:
        raise EngineSetupError(
            f"method {given!r} asks for the dispersion correction {correction!r}, "
            "which needs the pyscf-dispersion package (not installed)"
        )


def check_basis(basis: str, elements) -> None:
    """Raise EngineSetupError naming the basis and the first element it lacks.

    Inputs:
        basis: a basis-set name PySCF knows (``cc-pvdz``, ``def2-svp``, ``6-31g*``).
        elements: element symbols, in the order to check (duplicates are fine).

    >>> check_basis("sto-3g", ["O", "H", "H"])
    """
    if not isinstance(basis, str) or not basis.strip():
        raise EngineSetupError(f"basis must be a non-empty name, got {basis!r}")
    for element in dict.fromkeys(elements):
        _check_element_basis(basis, element)


@functools.lru_cache(maxsize=1024)
def _check_element_basis(basis: str, element: str) -> None:
    # Cached (a walk checks the same pairs at every point; a load costs ~1 ms); a failure
    # raises and is not cached.
    from pyscf.gto import basis as pyscf_basis

    try:
        with warnings.catch_warnings():
            # PySCF suggests installing basis-set-exchange for unknown names.
            warnings.simplefilter("ignore")
            shells = pyscf_basis.load(basis, element)
    except pyscf_basis.BasisNotFoundError as exc:
        if "not found for" not in str(exc):
            raise EngineSetupError(f"unknown basis {basis!r} (not in PySCF's library)") from None
        shells = []
    except (KeyError, ValueError, RuntimeError) as exc:
        raise EngineSetupError(f"basis {basis!r} for {element}: {exc}") from exc
    if not shells:
        raise EngineSetupError(f"basis {basis!r} has no functions for element {element}")
