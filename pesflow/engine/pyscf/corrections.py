"""Dispersion corrections and implicit solvent on an SCF level (hf or a DFT functional).

Both are level options (:data:`LEVEL_OPTIONS`) folded into the method's name, so that
the name alone says what was computed and keys it:

* ``dispersion``: an empirical dispersion correction added to the SCF energy, computed
  by the ``pyscf-dispersion`` package through PySCF's own mechanism (``mf.disp``, or
  the functional's suffix): ``d3bj`` (Grimme's D3 with Becke-Johnson damping, two-body
  terms) or ``d4`` (Grimme's D4, with its three-body term).  The name is PySCF's:
  ``b3lyp-d3bj``, ``pbe0-d4``, ``hf-d3bj``.
* ``solvent``: an implicit (continuum) solvent around the molecule, in the SCF: PySCF's
  ``solvent.PCM`` with the IEF-PCM equations (``pcm``) or ``solvent.ddCOSMO``
  (``ddcosmo``), with PySCF's default cavity (scaled van der Waals radii).  The solvent
  is named (its dielectric constant from PySCF's table, :func:`dielectric`) or given by
  its dielectric constant; the name carries it in parentheses: ``hf(pcm:water)``,
  ``b3lyp-d3bj(ddcosmo:eps=78.3553)``.

A level with either is its own SCF family (its solution is not the plain level's), and
only the SCF's own method takes them: hf and DFT functionals, not the correlated,
excited-state or multireference methods (PySCF's post-HF solvent models and dispersion
on them are not offered here).

PySCF is imported inside the functions.
"""

from __future__ import annotations

import difflib
import functools
import math
import re
from dataclasses import dataclass

from pesflow.errors import EngineSetupError

#: The level options of an SCF level.
LEVEL_OPTIONS = ("dispersion", "solvent")
#: Dispersion corrections a level option may ask for (PySCF's suffixes).
DISPERSIONS = ("d3bj", "d4")
#: Solvent models: the option's name and PySCF's model.
SOLVENT_MODELS = {"pcm": "IEF-PCM", "ddcosmo": "ddCOSMO"}

_SOLVENT = re.compile(r"^(?P<core>[^()]+)\((?P<model>pcm|ddcosmo):(?P<solvent>.+)\)$")
_DISPERSION = re.compile(r"^(?P<base>.+?)-(?P<disp>d3\w*|d4\w*)$")


@dataclass(frozen=True)
class ScfLevel:
    """An SCF level with its corrections.

    Fields:
        base: ``hf`` or the functional without a dispersion suffix (``b3lyp``).
        dispersion: PySCF's dispersion suffix (``d3bj``, ``d4``), or None.
        model: ``pcm`` or ``ddcosmo``, or None (gas phase).
        solvent: the solvent's name in PySCF's table (spaces as ``_``), or None when
            given by its dielectric constant.
        eps: the dielectric constant when given as a number, else None.
    """

    base: str
    dispersion: str | None = None
    model: str | None = None
    solvent: str | None = None
    eps: float | None = None

    @property
    def core(self) -> str:
        """The SCF method without solvent: ``b3lyp-d3bj``, ``hf-d3bj``, ``hf``."""
        return f"{self.base}-{self.dispersion}" if self.dispersion else self.base

    @property
    def name(self) -> str:
        """The canonical method name, e.g. ``b3lyp-d3bj(pcm:water)``."""
        if self.model is None:
            return self.core
        medium = self.solvent if self.solvent is not None else f"eps={self.eps!r}"
        return f"{self.core}({self.model}:{medium})"

    @property
    def dielectric(self) -> float | None:
        """The solvent's dielectric constant, None in the gas phase."""
        if self.model is None:
            return None
        return self.eps if self.eps is not None else dielectric(self.solvent)


def parse(name: str) -> ScfLevel | None:
    """The :class:`ScfLevel` of a lower-case name with a dispersion suffix or a solvent,
    None for any other name (a plain ``hf`` or functional among them).  Raises
    EngineSetupError for a malformed solvent part.

    >>> parse("hf-d3bj(pcm:water)")
    ScfLevel(base='hf', dispersion='d3bj', model='pcm', solvent='water', eps=None)
    >>> parse("b3lyp") is None, parse("b3lyp-d4").name
    (True, 'b3lyp-d4')
    """
    text = "".join(name.split()).lower()
    model = solvent = eps = None
    match = _SOLVENT.match(text)
    if match:
        text, model = match["core"], match["model"]
        medium = match["solvent"]
        if medium.startswith("eps="):
            eps = _eps(medium[4:])
        else:
            solvent = _solvent_name(medium)
    disp = _DISPERSION.match(text)
    base, dispersion = (disp["base"], disp["disp"]) if disp else (text, None)
    if model is None and dispersion is None:
        return None
    return ScfLevel(base, dispersion, model, solvent, eps)


def with_options(base: str, options: dict) -> ScfLevel:
    """The level of ``base`` (``hf`` or a functional, with or without a dispersion
    suffix) with the spec's ``dispersion`` and ``solvent`` options; EngineSetupError
    (one line) for an unknown option or value.

    >>> with_options("hf", {"dispersion": "d3bj", "solvent": {"model": "pcm",
    ...                     "name": "Water"}}).name
    'hf-d3bj(pcm:water)'
    """
    unknown = [k for k in options if k not in LEVEL_OPTIONS]
    if unknown:
        raise EngineSetupError(
            f"{base} takes no level options other than {' and '.join(LEVEL_OPTIONS)} "
            f"(got {unknown[0]})"
        )
    level = parse(base) or ScfLevel(base)
    dispersion = options.get("dispersion")
    if dispersion is not None:
        if str(dispersion).lower() not in DISPERSIONS:
            raise EngineSetupError(
                f"unknown dispersion {dispersion!r}; allowed: {', '.join(DISPERSIONS)}"
            )
        if level.dispersion is not None:
            raise EngineSetupError(
                f"{base} has a dispersion correction in its name already; "
                "give the plain method with dispersion:"
            )
        _check_no_nonlocal(level.base)
        level = ScfLevel(level.base, str(dispersion).lower(), level.model, level.solvent)
    solvent = options.get("solvent")
    if solvent is not None:
        level = _with_solvent(level, solvent)
    return level


def dielectric(name: str) -> float:
    """The static dielectric constant of a solvent named in PySCF's solvent table
    (``pyscf.solvent.smd.solvent_db``, the Minnesota Solvent Descriptor Database,
    Marenich et al., comp.chem.umn.edu/solvation; the value at 298 K).

    >>> dielectric("water"), dielectric("Pentyl Ethanoate")
    (78.355, 4.7297)
    """
    table = _solvent_table()
    try:
        return float(table[_normalise(name)][5])
    except KeyError:
        close = difflib.get_close_matches(_normalise(name), list(table), n=3)
        hint = f" (did you mean {', '.join(close)}?)" if close else ""
        raise EngineSetupError(
            f"unknown solvent {name!r}{hint}; use a name from PySCF's solvent table "
            "(pyscf.solvent.smd.solvent_db: water, methanol, acetonitrile, "
            "dimethylsulfoxide, benzene, ...) or give eps"
        ) from None


def build(mf, level: ScfLevel):
    """``mf`` (an HF or DFT object with its ``xc`` set) with the level's corrections:
    ``mf.disp`` for HF (DFT takes it from the functional's suffix), and the solvent
    model wrapped around it.  Returns the SCF object to run."""
    if level.dispersion and level.base == "hf":
        mf.disp = level.dispersion
    if level.model is None:
        return mf
    from pyscf import solvent

    if level.model == "pcm":
        mf = solvent.PCM(mf)
        mf.with_solvent.method = SOLVENT_MODELS["pcm"]
    else:
        mf = solvent.ddCOSMO(mf)
    mf.with_solvent.eps = level.dielectric
    return mf


def energy_parts(mf) -> dict:
    """The dispersion and solvent parts of a converged SCF's total energy, hartree
    (PySCF's ``scf_summary``), as ``dispersion_hartree`` and ``solvent_hartree``; only
    those present."""
    summary = getattr(mf, "scf_summary", {}) or {}
    out = {}
    for key, name in (("dispersion", "dispersion_hartree"), ("e_solvent", "solvent_hartree")):
        if key in summary:
            out[name] = float(summary[key])
    return out


def _with_solvent(level: ScfLevel, solvent) -> ScfLevel:
    if not isinstance(solvent, dict):
        raise EngineSetupError(
            f"solvent must be a mapping with model and name or eps, not {solvent!r}"
        )
    unknown = [k for k in solvent if k not in ("model", "name", "eps")]
    if unknown:
        raise EngineSetupError(f"unknown solvent key {unknown[0]!r}; allowed: model, name, eps")
    model = str(solvent.get("model", "")).lower()
    if model not in SOLVENT_MODELS:
        raise EngineSetupError(
            f"unknown solvent model {solvent.get('model')!r}; allowed: {', '.join(SOLVENT_MODELS)}"
        )
    if (solvent.get("name") is None) == (solvent.get("eps") is None):
        raise EngineSetupError("solvent needs exactly one of name (e.g. water) or eps")
    if level.model is not None:
        raise EngineSetupError(f"{level.name} has a solvent in its name already")
    if solvent.get("name") is not None:
        name = _solvent_name(str(solvent["name"]))
        return ScfLevel(level.base, level.dispersion, model, name)
    return ScfLevel(level.base, level.dispersion, model, eps=_eps(solvent["eps"]))


def _eps(value) -> float:
    try:
        eps = float(value)
    except (TypeError, ValueError):
        eps = math.nan
    if not (math.isfinite(eps) and eps > 1):
        raise EngineSetupError(f"solvent eps must be a dielectric constant above 1, got {value!r}")
    return eps


def _solvent_name(name: str) -> str:
    dielectric(name)  # raises for an unknown solvent
    return _normalise(name)


def _normalise(name: str) -> str:
    # lower case, spaces as "_", "/" as "-": a level's label is method/basis
    return "_".join(str(name).lower().replace("_", " ").split()).replace("/", "-")


@functools.cache
def _solvent_table() -> dict:
    from pyscf.solvent import smd

    return {_normalise(k): v for k, v in smd.solvent_db.items() if k}


def _check_no_nonlocal(base: str) -> None:
    # A functional with its own nonlocal (VV10) correlation would count dispersion twice.
    if base == "hf":
        return
    from pyscf.dft import libxc

    if libxc.is_nlc(base):
        raise EngineSetupError(
            f"{base} has its own nonlocal dispersion (VV10); an added dispersion "
            "correction would count it twice"
        )
