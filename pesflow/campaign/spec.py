"""The campaign spec: pydantic models of the YAML file, loading and validation.

A campaign names molecules, scans over internal coordinates and levels of theory
(method x basis).  :func:`load_campaign` reads a YAML file, validates every field
and resolves everything a later stage needs (molecules as :class:`ase.Atoms`,
0-based atom indices, the atoms that move, the grid of scan values), or raises a
:class:`~pesflow.errors.SpecError` whose message is one line naming the file,
the YAML line, the field path and what is allowed.  Nothing is computed or
written while a spec is loaded.

Conventions of the spec: lengths in angstrom, angles in degrees, energies in
hartree; atoms are numbered from 1, as chemists write them.

>>> # campaign = load_campaign("configs/demo-hydrides.yaml")
>>> # [lvl.label for lvl in campaign.levels]
"""

from __future__ import annotations

import difflib
import functools
import json
import math
import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Literal

import numpy as np
import yaml
from pydantic import (
    BaseModel,
    ConfigDict,
    Field,
    FiniteFloat,
    ValidationError,
    field_validator,
    model_validator,
)
from pydantic_core import PydanticCustomError

from pesflow.coordinates.kinds import KINDS
from pesflow.errors import EngineSetupError, SpecError

NAME_PATTERN = r"^[a-z0-9][a-z0-9_-]*$"
_NAME_HELP = "lower-case letters, digits, '_' and '-', starting with a letter or digit"

#: Smallest distance (angstrom) two atoms of an input geometry may have.
MIN_ATOM_DISTANCE_ANGSTROM = 0.5

#: Most points one campaign may plan (scan grid x molecules x levels, summed over scans), and
#: most values of one coordinate or one grid.  Planning holds every point's geometry and key
#: in memory (about 5 kB a point) and takes about 4 s per 100,000 points (benchmarks/
#: bench_plan.py), so 200,000 points is twice the benchmarked campaign; a larger study is
#: split into several campaigns that share one store.  Checked before any array is built.
MAX_POINTS = 200_000


def did_you_mean(word, choices, n=3) -> str:
    """``" (did you mean 'x'?)"`` naming the closest of ``choices`` to ``word``, or ``""``.

    >>> did_you_mean("pionts", ["points", "step", "values"])
    " (did you mean 'points'?)"
    """
    close = difflib.get_close_matches(str(word), [str(c) for c in choices], n=n)
    if not close:
        return ""
    quoted = [f"'{c}'" for c in close]
    listed = quoted[0] if len(quoted) == 1 else ", ".join(quoted[:-1]) + " or " + quoted[-1]
    return f" (did you mean {listed}?)"


# ---------------------------------------------------------------------------
# pydantic models of the YAML file
# ---------------------------------------------------------------------------


class _Strict(BaseModel):
    """Base of every spec model: unknown keys are refused, naming the allowed ones."""

    model_config = ConfigDict(extra="forbid", populate_by_name=True, frozen=True)

    @model_validator(mode="before")
    @classmethod
    def _refuse_unknown_keys(cls, data):
        if isinstance(data, dict):
            allowed = []
            for name, info in cls.model_fields.items():
                allowed.append(info.alias or name)
            for key in data:
                if key not in allowed and key not in cls.model_fields:
                    raise PydanticCustomError(
                        "unknown_key",
                        "unknown key '{key}'{hint}; allowed: {allowed}",
                        {
                            "key": str(key),
                            "hint": did_you_mean(key, allowed),
                            "allowed": ", ".join(allowed),
                        },
                    )
        return data


class FragmentSpec(_Strict):
    """A fragment of a molecule for dissociation energies (atoms numbered from 1)."""

    atoms: list[int] = Field(min_length=1)
    charge: int = 0
    multiplicity: int | None = Field(default=None, ge=1)


class MoleculeSpec(_Strict):
    """One molecule: exactly one of ``builtin``, ``file`` or ``xyz``."""

    builtin: str | None = None
    file: str | None = None
    xyz: str | None = None
    charge: int = 0
    multiplicity: int | None = Field(default=None, ge=1)
    isotopes: dict[int, float | str] | None = None
    fragments: list[FragmentSpec] | None = None

    @model_validator(mode="after")
    def _one_source(self):
        given = [k for k in ("builtin", "file", "xyz") if getattr(self, k) is not None]
        if len(given) != 1:
            raise PydanticCustomError(
                "molecule_source",
                "give exactly one of builtin, file or xyz (got {given})",
                {"given": ", ".join(given) or "none"},
            )
        return self


class CoordinateSpec(_Strict):
    """One scan coordinate: ``from``/``to`` with ``points`` or ``step``, or ``values``."""

    type: Literal[tuple(KINDS)]  # type: ignore[valid-type]  # the coordinate-kind registry
    atoms: list[int]
    from_: FiniteFloat | None = Field(default=None, alias="from")
    to: FiniteFloat | None = None
    points: int | None = None
    step: FiniteFloat | None = None
    values: list[FiniteFloat] | None = None
    move: list[int] | None = None

    @model_validator(mode="after")
    def _one_range(self):
        if self.values is not None:
            if any(v is not None for v in (self.from_, self.to, self.points, self.step)):
                raise PydanticCustomError(
                    "range", "give either values, or from/to with points or step, not both", {}
                )
            if len(self.values) == 0:
                raise PydanticCustomError("range", "values is empty; give at least one value", {})
            if len(set(self.values)) != len(self.values):
                raise PydanticCustomError("range", "values repeats a value", {})
            return self
        if self.from_ is None or self.to is None:
            raise PydanticCustomError(
                "range", "give from and to (with points or step), or a list of values", {}
            )
        if (self.points is None) == (self.step is None):
            raise PydanticCustomError("range", "give exactly one of points or step", {})
        if self.from_ == self.to:
            raise PydanticCustomError(
                "range",
                "the range is empty: from equals to ({value}); give two different ends",
                {"value": self.from_},
            )
        if self.points is not None and self.points < 2:
            raise PydanticCustomError(
                "range", "points must be at least 2 (got {points})", {"points": self.points}
            )
        if self.step is not None:
            if self.step <= 0:
                raise PydanticCustomError(
                    "range",
                    "step must be positive (got {step}); the direction comes from from and to",
                    {"step": self.step},
                )
            if self.step > abs(self.to - self.from_) + 1e-12:
                raise PydanticCustomError(
                    "range",
                    "step {step} is larger than the range {lo}..{hi}",
                    {"step": self.step, "lo": self.from_, "hi": self.to},
                )
        return self

    def n_values(self) -> float:
        """How many values :meth:`grid_values` gives, without building them (a float, so
        that an absurd ``points`` or ``step`` is counted, not allocated)."""
        if self.values is not None:
            return float(len(self.values))
        if self.points is not None:
            return float(self.points)
        return math.floor(abs(self.to - self.from_) / self.step + 1e-9) + 1.0

    def grid_values(self) -> np.ndarray:
        """The scan values in walk order (angstrom or degree)."""
        if self.values is not None:
            return np.asarray(self.values, dtype=float)
        if self.points is not None:
            return np.linspace(self.from_, self.to, self.points)
        span = self.to - self.from_
        n = int(np.floor(abs(span) / self.step + 1e-9))
        return self.from_ + np.sign(span) * self.step * np.arange(n + 1)


class ScanSpec(_Strict):
    """A scan: one coordinate gives a curve, two give a 2-D grid."""

    molecules: list[str] = Field(min_length=1)
    coordinates: list[CoordinateSpec] = Field(min_length=1, max_length=2)
    #: levels of this scan only (instead of the campaign's), e.g. an expensive level on
    #: the smallest molecules
    levels: list[LevelSpec] | None = Field(default=None, min_length=1)
    #: relaxed scan: at each scan value optimise every other degree of freedom
    relax: bool = False
    #: engine settings of this scan only (over the campaign's), e.g. broken_symmetry
    engine: EngineSpec | None = None


class ActiveLabelsSpec(_Strict):
    """An active space chosen by PySCF's AVAS from atomic-orbital labels."""

    ao_labels: list[str] = Field(min_length=1)


class LevelSpec(_Strict):
    """Levels of theory: every method with every basis set listed.  A tight-binding
    level (``gfn2-xtb``, ``gfn1-xtb``) has its own basis and is given without one.

    Level options (:data:`pesflow.engine.LEVEL_OPTIONS`) apply to every method listed
    that takes them and become part of its name (``casscf(6,6)``); a method that takes
    none refuses them."""

    method: str | list[str]
    basis: str | list[str] | None = None
    #: active space of casscf/nevpt2: [electrons, orbitals] or {ao_labels: [...]}
    active: list[int] | ActiveLabelsSpec | None = None
    #: casscf/nevpt2: roots averaged in the CASSCF (state averaging)
    states: int | None = Field(default=None, ge=1)
    #: casscf/nevpt2: weights of the averaged roots (default equal)
    weights: list[FiniteFloat] | None = None

    @field_validator("active", mode="before")
    @classmethod
    def _active_labels(cls, value):
        # A mapping is the AO-label form: name its unknown keys (not "not a list").
        if isinstance(value, dict):
            for key in value:
                if key != "ao_labels":
                    raise PydanticCustomError(
                        "unknown_key",
                        "unknown key '{key}'{hint}; allowed: ao_labels",
                        {"key": str(key), "hint": did_you_mean(key, ["ao_labels"])},
                    )
        return value

    def options(self) -> dict:
        """The level options given, by name (as :func:`pesflow.engine.level_method` takes
        them)."""
        out = {}
        for name in ("active", "states", "weights"):
            value = getattr(self, name)
            if value is not None:
                out[name] = value.model_dump() if isinstance(value, BaseModel) else value
        return out

    def pairs(self) -> list[tuple[str, str | None]]:
        methods = [self.method] if isinstance(self.method, str) else list(self.method)
        if self.basis is None:
            return [(m, None) for m in methods]
        bases = [self.basis] if isinstance(self.basis, str) else list(self.basis)
        return [(m, b) for m in methods for b in bases]


class EngineSpec(_Strict):
    """Backend settings.  Those that change a number are part of every point's key
    (see :class:`pesflow.engine.EngineSettings`, whose field names these are)."""

    name: Literal["pyscf"] = "pyscf"
    #: SCF energy convergence in hartree (also CCSD's, and tight binding's SCC)
    scf_energy_tolerance_hartree: float = Field(default=1e-10, gt=0, le=1e-5)
    #: SCF iterations per ladder rung
    scf_max_iterations: int = Field(default=100, ge=1)
    reference: Literal["auto", "restricted", "unrestricted", "restricted-open"] = "auto"
    frozen_core: bool = False
    #: DFT integration grid level (PySCF's grid level, 0 coarse - 9 fine)
    dft_grid_level: int = Field(default=3, ge=0, le=9)
    scf_ladder: list[Literal["default", "damped", "level-shift", "second-order"]] = Field(
        default=["default", "damped", "level-shift", "second-order"], min_length=1
    )
    #: unrestricted broken-symmetry reference for singlets (homolytic bond breaking)
    broken_symmetry: bool = False
    #: stability analysis of each converged SCF, following instabilities downhill
    stability: bool = False

    @model_validator(mode="before")
    @classmethod
    def _renamed(cls, data):
        if isinstance(data, dict):
            for old, new in _RENAMED_ENGINE_KEYS.items():
                if old in data:
                    raise PydanticCustomError(
                        "unknown_key",
                        "unknown key '{key}'; it is now called '{new}'",
                        {"key": old, "new": new},
                    )
        return data

    @model_validator(mode="after")
    def _bs_reference(self):
        if self.broken_symmetry and self.reference in ("restricted", "restricted-open"):
            raise PydanticCustomError(
                "range",
                "broken_symmetry needs an unrestricted reference; set reference to auto or "
                "unrestricted",
                {},
            )
        return self


#: Engine keys of earlier versions and their names now.
_RENAMED_ENGINE_KEYS = {
    "conv_tol": "scf_energy_tolerance_hartree",
    "max_cycle": "scf_max_iterations",
    "grid_level": "dft_grid_level",
}


class ReferenceValueSpec(_Strict):
    """A value the user supplies to compare against (e.g. an experimental constant)."""

    molecule: str
    scan: str
    quantity: str
    value: float
    source: str = Field(min_length=1)


class CompareSpec(_Strict):
    """What the report compares against."""

    reference_level: str | None = None
    reference_values: list[ReferenceValueSpec] = Field(default_factory=list)


class CampaignSpec(_Strict):
    """The whole YAML file."""

    campaign: str
    molecules: dict[str, MoleculeSpec] = Field(min_length=1)
    scans: dict[str, ScanSpec] = Field(min_length=1)
    levels: list[LevelSpec] = Field(default_factory=list)
    engine: EngineSpec = EngineSpec()
    compare: CompareSpec = CompareSpec()
    store: str = "pesflow-store"
    results: str = "results"

    @field_validator("campaign")
    @classmethod
    def _campaign_name(cls, value):
        if not re.match(NAME_PATTERN, value):
            raise PydanticCustomError(
                "name",
                "campaign name {value!r} is not allowed; use " + _NAME_HELP,
                {"value": value},
            )
        return value

    @field_validator("molecules", "scans")
    @classmethod
    def _entry_names(cls, value):
        for name in value:
            if not isinstance(name, str) or not re.match(NAME_PATTERN, name):
                raise PydanticCustomError(
                    "name",
                    "name {value!r} is not allowed; use " + _NAME_HELP,
                    {"value": str(name)},
                )
        return value


def json_schema() -> dict:
    """The JSON schema of the campaign spec (kept in ``workflows/schemas``)."""
    schema = CampaignSpec.model_json_schema(by_alias=True)
    schema["title"] = "pesflow campaign"
    return schema


# ---------------------------------------------------------------------------
# resolved campaign: what the later stages use
# ---------------------------------------------------------------------------


@dataclass(frozen=True)
class Level:
    """A level of theory; ``basis`` is ``""`` for a level with a built-in basis."""

    method: str
    basis: str

    @property
    def label(self) -> str:
        """``method/basis``, or the method alone for a level without basis set."""
        return f"{self.method}/{self.basis}" if self.basis else self.method


@dataclass
class Molecule:
    """A molecule resolved from the spec."""

    name: str
    atoms: Any  # ase.Atoms
    charge: int
    multiplicity: int
    masses_amu: np.ndarray
    fragments: list[dict] = field(default_factory=list)

    @property
    def symbols(self) -> tuple[str, ...]:
        return tuple(self.atoms.get_chemical_symbols())


@dataclass
class Coordinate:
    """One scan coordinate with 0-based atoms and the atoms that move."""

    kind: str
    atoms: tuple[int, ...]
    values: np.ndarray

    @property
    def unit(self) -> str:
        return KINDS[self.kind].unit

    @property
    def label(self) -> str:
        return f"{KINDS[self.kind].stem}({'-'.join(str(i + 1) for i in self.atoms)})"


@dataclass
class Scan:
    """A scan resolved for its molecules."""

    name: str
    molecules: list[str]
    coordinates: list[Coordinate]
    #: per molecule: list (one per coordinate) of 0-based moving atoms
    moving: dict[str, list[np.ndarray]]
    #: levels of theory of this scan
    levels: list[Level] = field(default_factory=list)
    #: optimise every other degree of freedom at each scan value
    relax: bool = False

    def grid(self) -> np.ndarray:
        """All scan points in walk order, shape (m, k): a serpentine walk for grids,
        so that consecutive points are neighbours and can share a starting guess."""
        if len(self.coordinates) == 1:
            return self.coordinates[0].values[:, None]
        first, second = (c.values for c in self.coordinates)
        rows = []
        for i, a in enumerate(first):
            inner = second if i % 2 == 0 else second[::-1]
            rows.extend((a, b) for b in inner)
        return np.asarray(rows, dtype=float)

    def grid_indices(self) -> np.ndarray:
        """Indices of each walk point into the coordinate value arrays, shape (m, k)."""
        if len(self.coordinates) == 1:
            return np.arange(len(self.coordinates[0].values))[:, None]
        n1, n2 = (len(c.values) for c in self.coordinates)
        rows = []
        for i in range(n1):
            inner = range(n2) if i % 2 == 0 else range(n2 - 1, -1, -1)
            rows.extend((i, j) for j in inner)
        return np.asarray(rows, dtype=int)


@dataclass
class Campaign:
    """A validated campaign, ready for planning."""

    spec: CampaignSpec
    path: Path
    molecules: dict[str, Molecule]
    scans: dict[str, Scan]
    levels: list[Level]

    @property
    def name(self) -> str:
        return self.spec.campaign

    @property
    def store_path(self) -> Path:
        return (self.path.parent / self.spec.store).resolve()

    @property
    def results_path(self) -> Path:
        return (self.path.parent / self.spec.results / self.spec.campaign).resolve()

    def engine_settings(self, scan: str | None = None):
        """Engine settings of the campaign, with ``scan``'s own overrides applied."""
        from pesflow.engine import EngineSettings

        e = self.spec.engine
        if scan is not None and self.spec.scans[scan].engine is not None:
            own = self.spec.scans[scan].engine
            e = e.model_copy(update={k: getattr(own, k) for k in own.model_fields_set})
        return EngineSettings(
            scf_energy_tolerance_hartree=e.scf_energy_tolerance_hartree,
            scf_max_iterations=e.scf_max_iterations,
            reference=e.reference,
            frozen_core=e.frozen_core,
            dft_grid_level=e.dft_grid_level,
            scf_ladder=tuple(e.scf_ladder),
            broken_symmetry=e.broken_symmetry,
            stability=e.stability,
        )


# ---------------------------------------------------------------------------
# YAML loading with line numbers
# ---------------------------------------------------------------------------


class _Located:
    """Maps a field path to the YAML line where it is written."""

    def __init__(self, root):
        self.root = root

    def line(self, loc) -> int | None:
        node = self.root
        line = None if node is None else node.start_mark.line + 1
        for part in loc:
            if isinstance(node, yaml.MappingNode):
                found = None
                for key, value in node.value:
                    if str(key.value) == str(part):
                        found = (key, value)
                        break
                if found is None:
                    return line
                line = found[0].start_mark.line + 1
                node = found[1]
            elif isinstance(node, yaml.SequenceNode) and isinstance(part, int):
                if part >= len(node.value):
                    return line
                node = node.value[part]
                line = node.start_mark.line + 1
            else:
                return line
        return line


def _field_path(loc) -> str:
    out = ""
    for part in loc:
        if isinstance(part, int):
            out += f"[{part}]"
        else:
            out += ("." if out else "") + str(part)
    return out


def _check_duplicate_keys(node, path, file):
    if isinstance(node, yaml.MappingNode):
        seen = set()
        for key, value in node.value:
            name = str(key.value)
            if name in seen:
                raise SpecError(
                    f"key '{name}' is given twice; give each key once",
                    file=file,
                    line=key.start_mark.line + 1,
                    field=_field_path(path + [name]),
                )
            seen.add(name)
            _check_duplicate_keys(value, path + [name], file)
    elif isinstance(node, yaml.SequenceNode):
        for i, item in enumerate(node.value):
            _check_duplicate_keys(item, path + [i], file)


def _read_yaml(path: Path):
    if not path.exists():
        raise SpecError("file not found", file=path)
    if path.is_dir():
        raise SpecError("is a folder, not a campaign file", file=path)
    try:
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise SpecError(f"cannot read the file ({exc.__class__.__name__})", file=path) from None
    try:
        node = yaml.compose(text, Loader=yaml.SafeLoader)
        data = yaml.safe_load(text)
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        problem = getattr(exc, "problem", None) or str(exc).splitlines()[0]
        raise SpecError(
            f"malformed YAML: {problem}",
            file=path,
            line=None if mark is None else mark.line + 1,
        ) from None
    if data is None:
        raise SpecError(
            "the file is empty; a campaign needs campaign, molecules, scans and levels", file=path
        )
    if not isinstance(data, dict):
        raise SpecError(
            "the top level must be a mapping with keys campaign, molecules, scans, levels",
            file=path,
            line=1,
        )
    _check_duplicate_keys(node, [], path)
    return data, _Located(node)


def _message(err: dict) -> tuple[tuple, str]:
    """A short reason for one pydantic error, and the location it refers to."""
    loc = tuple(err["loc"])
    kind = err["type"]
    ctx = err.get("ctx") or {}
    if kind == "unknown_key":
        return loc + (ctx["key"],), err["msg"]
    if kind == "missing":
        return loc, "this key is required"
    if kind == "literal_error":
        allowed = re.findall(r"'([^']*)'", str(ctx.get("expected", "")))
        hint = did_you_mean(err.get("input"), allowed)
        return loc, f"got {err.get('input')!r}{hint}; {err['msg'].lower()}"
    # Union errors repeat the location with the member type; keep the first, plainest.
    loc = tuple(
        p
        for p in loc
        if not (
            isinstance(p, str)
            and ("[" in p or p in ("str", "float", "int", "list[str]", "list[float]"))
        )
    )
    msg = err["msg"]
    if "input" in err and kind not in ("range", "molecule_source", "name"):
        msg = f"{msg} (got {err['input']!r})"
    return loc, msg


def parse_spec(path) -> CampaignSpec:
    """Read and validate the YAML file at ``path`` (structure and types only)."""
    path = Path(path)
    data, located = _read_yaml(path)
    try:
        return CampaignSpec.model_validate(data)
    except ValidationError as exc:
        errors = exc.errors()
        # Report the first error; a user fixes one line at a time.
        loc, msg = _message(errors[0])
        more = f" (and {len(errors) - 1} more)" if len(errors) > 1 else ""
        raise SpecError(
            msg + more, file=path, line=located.line(loc), field=_field_path(loc) or None
        ) from None


# ---------------------------------------------------------------------------
# semantic validation: molecules, atoms, ranges, levels
# ---------------------------------------------------------------------------


class _Errors:
    def __init__(self, path: Path, located: _Located):
        self.path = path
        self.located = located

    def __call__(self, loc, message):
        return SpecError(
            message, file=self.path, line=self.located.line(loc), field=_field_path(loc)
        )


def _resolve_molecule(name, spec: MoleculeSpec, base: Path, err) -> Molecule:
    from pesflow.campaign import molecules as mol

    loc = ("molecules", name)
    try:
        if spec.builtin is not None:
            atoms = mol.from_builtin(spec.builtin)
        elif spec.file is not None:
            file = Path(spec.file)
            if not file.is_absolute():
                file = base / file
            atoms = mol.from_file(file)
        else:
            atoms = mol.from_xyz_text(spec.xyz)
    except ValueError as exc:
        source = "builtin" if spec.builtin is not None else "file" if spec.file else "xyz"
        raise err(loc + (source,), str(exc)) from None
    if len(atoms) == 0:
        raise err(loc, "the molecule has no atoms")
    problem = None
    multiplicity = spec.multiplicity
    if multiplicity is None:
        try:
            multiplicity = mol.default_multiplicity(atoms, spec.charge)
        except ValueError as exc:
            raise err(loc + ("charge",), str(exc)) from None
        problem = mol.multiplicity_problem(atoms, spec.charge, multiplicity)
        if problem is not None:
            raise err(loc + ("charge",), problem)
    else:
        problem = mol.multiplicity_problem(atoms, spec.charge, multiplicity)
        if problem is not None:
            raise err(loc + ("multiplicity",), problem)
    contacts = mol.close_contacts(atoms, MIN_ATOM_DISTANCE_ANGSTROM)
    if contacts:
        i, j, d = contacts[0]
        raise err(
            loc,
            f"atoms {i + 1} and {j + 1} overlap ({d:.3f} A apart; at least "
            f"{MIN_ATOM_DISTANCE_ANGSTROM} A is allowed)",
        )
    n = len(atoms)
    overrides = {}
    for atom, value in (spec.isotopes or {}).items():
        if not 1 <= atom <= n:
            raise err(
                loc + ("isotopes", atom),
                f"atom {atom} is out of range; this molecule has atoms 1-{n}",
            )
        overrides[atom] = value
    try:
        masses = mol.masses_with_isotopes(atoms, overrides or None)
    except ValueError as exc:
        raise err(loc + ("isotopes",), str(exc)) from None
    fragments = []
    for f, frag in enumerate(spec.fragments or []):
        floc = loc + ("fragments", f)
        for a in frag.atoms:
            if not 1 <= a <= n:
                raise err(
                    floc + ("atoms",), f"atom {a} is out of range; this molecule has atoms 1-{n}"
                )
        if len(set(frag.atoms)) != len(frag.atoms):
            raise err(floc + ("atoms",), "an atom is listed twice")
        sub = atoms[[a - 1 for a in frag.atoms]]
        fmult = frag.multiplicity or mol.default_multiplicity(sub, frag.charge)
        problem = mol.multiplicity_problem(sub, frag.charge, fmult)
        if problem is not None:
            raise err(floc + ("multiplicity",), problem)
        fragments.append(
            {
                "atoms": tuple(a - 1 for a in frag.atoms),
                "charge": frag.charge,
                "multiplicity": fmult,
            }
        )
    if fragments:
        listed = sorted(a for f in fragments for a in f["atoms"])
        if listed != list(range(n)):
            raise err(
                loc + ("fragments",),
                f"the fragments must together list every atom 1-{n} exactly once",
            )
        if sum(f["charge"] for f in fragments) != spec.charge:
            raise err(
                loc + ("fragments",),
                f"the fragments' charges must add up to the molecule's charge ({spec.charge})",
            )
    return Molecule(
        name=name,
        atoms=atoms,
        charge=spec.charge,
        multiplicity=multiplicity,
        masses_amu=masses,
        fragments=fragments,
    )


def _too_many(what: str) -> str:
    return (
        f"{what}; at most {MAX_POINTS:,} points are allowed (planning holds every point in "
        "memory); use fewer points or a larger step, or split the study into several "
        "campaigns that share one store"
    )


def _check_values(kind, values, loc, err):
    problem = KINDS[kind].range_problem(values)
    if problem:
        raise err(loc, problem)


def _resolve_scan(name, spec: ScanSpec, molecules, err) -> Scan:
    from pesflow.coordinates import geometry as coords

    loc = ("scans", name)
    for i, mname in enumerate(spec.molecules):
        if mname not in molecules:
            defined = ", ".join(sorted(molecules))
            raise err(
                loc + ("molecules", i),
                f"molecule '{mname}' is not defined under molecules"
                f"{did_you_mean(mname, molecules)}; defined: {defined}",
            )
    if len(set(spec.molecules)) != len(spec.molecules):
        raise err(loc + ("molecules",), "a molecule is listed twice")
    resolved = []
    for c, cspec in enumerate(spec.coordinates):
        cloc = loc + ("coordinates", c)
        need = KINDS[cspec.type].n_atoms
        if len(cspec.atoms) != need:
            raise err(
                cloc + ("atoms",), f"a {cspec.type} takes {need} atoms (got {len(cspec.atoms)})"
            )
        if len(set(cspec.atoms)) != len(cspec.atoms):
            raise err(cloc + ("atoms",), "an atom is listed twice")
        count = cspec.n_values()
        if count > MAX_POINTS:
            given = "values" if cspec.values is not None else "points" if cspec.points else "step"
            raise err(cloc + (given,), _too_many(f"this coordinate has {count:,.0f} values"))
        if cspec.values is not None:
            for v, value in enumerate(cspec.values):
                _check_values(cspec.type, [value], cloc + ("values", v), err)
        else:
            _check_values(cspec.type, [cspec.from_], cloc + ("from",), err)
            _check_values(cspec.type, [cspec.to], cloc + ("to",), err)
        values = cspec.grid_values()
        resolved.append(
            Coordinate(kind=cspec.type, atoms=tuple(a - 1 for a in cspec.atoms), values=values)
        )
    if len(resolved) == 2 and len(resolved[0].values) * len(resolved[1].values) > MAX_POINTS:
        n1, n2 = (len(co.values) for co in resolved)
        raise err(
            loc + ("coordinates",), _too_many(f"this grid has {n1} x {n2} = {n1 * n2:,} points")
        )
    moving = {}
    for mname in spec.molecules:
        atoms = molecules[mname].atoms
        n = len(atoms)
        per = []
        for c, (cspec, coord) in enumerate(zip(spec.coordinates, resolved)):
            cloc = loc + ("coordinates", c)
            for a in cspec.atoms:
                if not 1 <= a <= n:
                    raise err(
                        cloc + ("atoms",),
                        f"atom {a} is out of range for molecule '{mname}', which has atoms 1-{n}",
                    )
            move = None
            if cspec.move is not None:
                for a in cspec.move:
                    if not 1 <= a <= n:
                        raise err(
                            cloc + ("move",),
                            f"atom {a} is out of range for molecule "
                            f"'{mname}', which has atoms 1-{n}",
                        )
                move = [a - 1 for a in cspec.move]
            if coord.kind == "dihedral":
                problem = coords.undefined_dihedral(
                    [atoms.positions[i] for i in coord.atoms], coord.atoms
                )
                if problem:
                    raise err(cloc + ("atoms",), f"molecule '{mname}': {problem}")
            try:
                per.append(coords.moving_atoms(atoms, coord.kind, coord.atoms, move=move))
            except ValueError as exc:
                raise err(
                    cloc + ("move" if move is not None else "atoms",), f"molecule '{mname}': {exc}"
                ) from None
        # Trial geometries at the ends of the range (the corners of a grid) catch coupled
        # coordinates and undefined dihedrals before anything runs.
        if len(resolved) == 2:
            corners = np.array(
                [[resolved[0].values[i], resolved[1].values[j]] for i in (0, -1) for j in (0, -1)]
            )
        else:
            corners = resolved[0].values[[0, -1], None]
        try:
            coords.apply_grid(
                atoms.get_positions(),
                [(co.kind, co.atoms, mv) for co, mv in zip(resolved, per)],
                corners,
            )
        except ValueError as exc:
            raise err(loc + ("coordinates",), f"molecule '{mname}': {exc}") from None
        moving[mname] = per
    return Scan(
        name=name,
        molecules=list(spec.molecules),
        coordinates=resolved,
        moving=moving,
        relax=spec.relax,
    )


def _resolve_level_list(lspecs, loc, elements, err, checked) -> list[Level]:
    from pesflow import engine

    levels = []
    for i, lspec in enumerate(lspecs):
        options = lspec.options()
        for method, basis in lspec.pairs():
            try:
                info = engine.method_info(method)
            except EngineSetupError as exc:
                hint = did_you_mean(str(method).strip().lower(), _method_names())
                raise err(loc + (i, "method"), _with_hint(str(exc), hint)) from None
            if options or info.options:
                try:
                    info = engine.method_info(engine.level_method(info.name, options))
                except EngineSetupError as exc:
                    given = [k for k in options if k not in info.options]
                    named = [k for k in options if k in str(exc)]
                    where = (given or named or [*options, "method"])[0]
                    raise err(loc + (i, where), str(exc)) from None
            where = loc + (i, "basis") if basis is not None else loc + (i,)
            basis_c = ""
            for element in elements:
                if (info.name, basis, element) not in checked:
                    try:
                        _, basis_c = engine.check_level(info.name, basis, [element])
                        checked[(info.name, basis, element)] = (basis_c, None)
                    except EngineSetupError as exc:
                        hint = _basis_hint(basis.strip().lower()) if basis else ""
                        checked[(info.name, basis, element)] = (None, str(exc) + hint)
                basis_c, problem = checked[(info.name, basis, element)]
                if problem is not None:
                    raise err(where, problem)
            if not elements:
                basis_c = "" if basis is None else basis.strip().lower()
            level = Level(info.name, basis_c)
            if level in levels:
                raise err(loc + (i,), f"level {level.label} is listed twice")
            levels.append(level)
    return levels


def _with_hint(message: str, hint: str) -> str:
    """``message`` with a did-you-mean ``hint`` placed before its list of what is allowed."""
    if not hint:
        return message
    for sep in ("; allowed", ": use one of"):
        if sep in message:
            head, tail = message.split(sep, 1)
            return f"{head}{hint}{sep}{tail}"
    return message + hint


@functools.lru_cache(maxsize=1)
def _method_names() -> tuple[str, ...]:
    """Method names to suggest from: the wavefunction methods and libxc's functionals."""
    from pyscf.dft import libxc

    from pesflow.engine import (
        MULTIREFERENCE_METHODS,
        TIGHT_BINDING_METHODS,
        WAVEFUNCTION_METHODS,
    )

    names = {*WAVEFUNCTION_METHODS, *TIGHT_BINDING_METHODS, *MULTIREFERENCE_METHODS}
    names |= {k.lower() for k in libxc.XC_ALIAS}
    names |= {k.lower() for k in libxc.XC_CODES}
    return tuple(sorted(names))


def _basis_hint(basis: str) -> str:
    """Did-you-mean for a basis name, among PySCF's library names (written as PySCF
    normalises them: lower case without '-', '_' or spaces, which it accepts as given)."""
    from pyscf.gto import basis as pyscf_basis

    normalised = basis.lower().replace("-", "").replace("_", "").replace(" ", "")
    if normalised in pyscf_basis.ALIAS:  # a known basis that lacks an element: no guess
        return ""
    return did_you_mean(normalised, pyscf_basis.ALIAS)


def _check_point_count(spec: CampaignSpec, scans, err) -> None:
    """Refuse a campaign whose scans x molecules x levels exceed :data:`MAX_POINTS`."""
    sizes = {
        name: math.prod(len(c.values) for c in scan.coordinates)
        * len(scan.molecules)
        * len(scan.levels)
        for name, scan in scans.items()
    }
    total = sum(sizes.values())
    if total > MAX_POINTS:
        largest = max(sizes, key=sizes.get)
        scan = scans[largest]
        raise err(
            ("scans", largest),
            _too_many(
                f"the campaign has {total:,} points (this scan: "
                f"{sizes[largest] // (len(scan.molecules) * len(scan.levels)):,} grid points x "
                f"{len(scan.molecules)} molecule(s) x {len(scan.levels)} level(s))"
            ),
        )


def _resolve_levels(spec: CampaignSpec, molecules, scans, err) -> list[Level]:
    """Resolve the campaign's and each scan's levels; return their union in order."""
    checked_basis = {}

    def elements_of(names):
        return sorted({s for m in names for s in molecules[m].symbols})

    default_users = [
        m for n, sc in scans.items() if spec.scans[n].levels is None for m in sc.molecules
    ]
    campaign_levels = _resolve_level_list(
        spec.levels, ("levels",), elements_of(default_users), err, checked_basis
    )
    union = list(campaign_levels)
    for name, scan in scans.items():
        own = spec.scans[name].levels
        if own is None:
            if not campaign_levels:
                raise err(
                    ("scans", name),
                    "no levels of theory: give levels at the top of the campaign or in this scan",
                )
            scan.levels = list(campaign_levels)
        else:
            scan.levels = _resolve_level_list(
                own, ("scans", name, "levels"), elements_of(scan.molecules), err, checked_basis
            )
        if scan.relax:
            from pesflow.engine import method_info

            for lvl in scan.levels:
                if not method_info(lvl.method).has_gradients:
                    where = ("scans", name, "levels") if own is not None else ("levels",)
                    raise err(
                        where,
                        f"a relaxed scan needs analytic gradients; {lvl.method} has "
                        "none here (allowed: hf, DFT functionals, mp2, ccsd, gfn2-xtb, gfn1-xtb)",
                    )
        union += [lvl for lvl in scan.levels if lvl not in union]
    _check_reference_values(spec, err)
    ref = spec.compare.reference_level
    if ref is not None:
        labels = [lvl.label for lvl in union]
        if ref.strip().lower() not in labels:
            raise err(
                ("compare", "reference_level"),
                f"'{ref}' is not one of the levels{did_you_mean(ref.strip().lower(), labels)}; "
                f"allowed: {', '.join(labels)}",
            )
    return union


def _check_reference_values(spec: CampaignSpec, err) -> None:
    if not spec.compare.reference_values:
        return  # (the summary module is heavy to import; only load it when needed)
    from pesflow.analysis.quantities import COMPARED

    for i, ref in enumerate(spec.compare.reference_values):
        loc = ("compare", "reference_values", i)
        if ref.molecule not in spec.molecules:
            raise err(
                loc + ("molecule",),
                f"molecule '{ref.molecule}' is not defined"
                f"{did_you_mean(ref.molecule, spec.molecules)}; "
                f"defined: {', '.join(sorted(spec.molecules))}",
            )
        scan = spec.scans.get(ref.scan)
        if scan is None:
            raise err(
                loc + ("scan",),
                f"scan '{ref.scan}' is not defined{did_you_mean(ref.scan, spec.scans)}; "
                f"defined: {', '.join(sorted(spec.scans))}",
            )
        if ref.molecule not in scan.molecules:
            raise err(
                loc + ("scan",), f"scan '{ref.scan}' does not include molecule '{ref.molecule}'"
            )
        if ref.quantity not in COMPARED:
            raise err(
                loc + ("quantity",),
                f"unknown quantity '{ref.quantity}'"
                f"{did_you_mean(ref.quantity, COMPARED)}; "
                f"allowed: {', '.join(COMPARED)}",
            )


def load_campaign(path) -> Campaign:
    """Load, validate and resolve the campaign spec at ``path``.

    Raises :class:`~pesflow.errors.SpecError` (one line: file, YAML line, field, reason)
    on the first problem found.  Reads the spec and the XYZ files it names; writes
    nothing.
    """
    path = Path(path).resolve() if Path(path).exists() else Path(path)
    spec = parse_spec(path)
    _, located = _read_yaml(path)
    err = _Errors(path, located)
    molecules = {
        name: _resolve_molecule(name, m, path.parent, err) for name, m in spec.molecules.items()
    }
    scans = {name: _resolve_scan(name, s, molecules, err) for name, s in spec.scans.items()}
    levels = _resolve_levels(spec, molecules, scans, err)
    _check_point_count(spec, scans, err)
    campaign = Campaign(spec=spec, path=path, molecules=molecules, scans=scans, levels=levels)
    for name in [None, *(n for n, s in spec.scans.items() if s.engine is not None)]:
        try:
            campaign.engine_settings(name)
        except EngineSetupError as exc:
            where = ("engine",) if name is None else ("scans", name, "engine")
            raise err(where, str(exc)) from None
    return campaign


def write_json_schema(path) -> None:
    """Write the campaign JSON schema to ``path`` (used to refresh workflows/schemas)."""
    Path(path).write_text(json.dumps(json_schema(), indent=2, sort_keys=True) + "\n")
