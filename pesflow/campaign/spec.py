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

from pesflow.campaign.rules import NEEDS_SMARTS, RULES, check_smarts
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


#: Molecule sources that stand for a set of molecules (members named ``<entry>/<name>``).
SET_SOURCES = ("smiles_file", "sdf", "xyz_files")
#: Every molecule source; a molecule entry gives exactly one.
SOURCES = ("builtin", "file", "xyz", "smiles", *SET_SOURCES)


class MoleculeSpec(_Strict):
    """One molecule, or a set of molecules: exactly one source."""

    builtin: str | None = None
    file: str | None = None
    xyz: str | None = None
    #: a SMILES, built in 3-D with RDKit (ETKDG embedding, force-field clean-up)
    smiles: str | None = None
    #: a set: a SMILES file, one 'SMILES name' a line
    smiles_file: str | None = None
    #: a set: an SDF file, one member per record (named by its title line)
    sdf: str | None = None
    #: a set: a folder of .xyz/.extxyz files, or a glob pattern (named by file stem)
    xyz_files: str | None = None
    #: total charge; from a structure's formal charges when not given (else 0)
    charge: int | None = None
    #: 2S + 1; from a structure's radical electrons when not given (else the lowest)
    multiplicity: int | None = Field(default=None, ge=1)
    isotopes: dict[int, float | str] | None = None
    fragments: list[FragmentSpec] | None = None
    #: starting conformers per molecule built from SMILES (RDKit), each scanned
    conformers: int = Field(default=1, ge=1, le=50)
    #: random seed of the embedding (a fixed seed keeps geometries and keys the same)
    seed: int | None = Field(default=None, ge=0, lt=2**31)
    #: force-field clean-up after the embedding
    force_field: Literal["mmff", "uff"] = "mmff"
    #: a set: stop at the first member that cannot be built or scanned
    strict: bool = False

    @model_validator(mode="after")
    def _one_source(self):
        given = [k for k in SOURCES if getattr(self, k) is not None]
        if len(given) != 1:
            raise PydanticCustomError(
                "molecule_source",
                "give exactly one of {allowed} (got {given})",
                {
                    "allowed": ", ".join(SOURCES[:-1]) + " or " + SOURCES[-1],
                    "given": ", ".join(given) or "none",
                },
            )
        if given[0] in SET_SOURCES and (self.isotopes or self.fragments):
            raise PydanticCustomError(
                "molecule_source",
                "isotopes and fragments name atoms of one molecule; give them on a single "
                "molecule, not on a set ({source})",
                {"source": given[0]},
            )
        built = ("smiles", "smiles_file")
        if given[0] not in built:
            for key, default in (("conformers", 1), ("seed", None), ("force_field", "mmff")):
                if getattr(self, key) != default:
                    raise PydanticCustomError(
                        "molecule_source",
                        "{key} applies to molecules built from SMILES (smiles, smiles_file), "
                        "not to {source}",
                        {"key": key, "source": given[0]},
                    )
        if self.strict and given[0] not in SET_SOURCES:
            raise PydanticCustomError(
                "molecule_source",
                "strict applies to sets ({sets}), not to {source}",
                {"sets": ", ".join(SET_SOURCES), "source": given[0]},
            )
        return self

    @property
    def source(self) -> str:
        return next(k for k in SOURCES if getattr(self, k) is not None)


class CoordinateSpec(_Strict):
    """One scan coordinate: ``from``/``to`` with ``points`` or ``step``, or ``values``."""

    type: Literal[tuple(KINDS)]  # type: ignore[valid-type]  # the coordinate-kind registry
    atoms: list[int] | None = None
    from_: FiniteFloat | None = Field(default=None, alias="from")
    to: FiniteFloat | None = None
    points: int | None = None
    step: FiniteFloat | None = None
    values: list[FiniteFloat] | None = None
    move: list[int] | None = None
    #: choose the atoms by rule in each molecule instead (pesflow.campaign.rules)
    rule: Literal[tuple(RULES)] | None = None  # type: ignore[valid-type]
    #: the SMARTS pattern of the rules smarts and angles-at
    smarts: str | None = None
    #: rotatable-torsions: also turn symmetric tops (CH3, CF3, NH3+)
    methyl_rotors: bool = False

    @model_validator(mode="after")
    def _atoms_or_rule(self):
        if (self.atoms is None) == (self.rule is None):
            raise PydanticCustomError(
                "range", "give either atoms (numbered from 1) or a rule, not both", {}
            )
        if self.rule is None:
            for key in ("smarts", "methyl_rotors"):
                if getattr(self, key) not in (None, False):
                    raise PydanticCustomError(
                        "range", "{key} goes with a rule, not with atoms", {"key": key}
                    )
            return self
        if self.type not in RULES[self.rule]:
            raise PydanticCustomError(
                "range",
                "rule {rule} makes {kinds} coordinates, not {type}",
                {"rule": self.rule, "kinds": " or ".join(RULES[self.rule]), "type": self.type},
            )
        if (self.smarts is not None) != (self.rule in NEEDS_SMARTS):
            raise PydanticCustomError(
                "range",
                "give smarts with the rules {needs}, and only with them",
                {"needs": ", ".join(NEEDS_SMARTS)},
            )
        if self.methyl_rotors and self.rule != "rotatable-torsions":
            raise PydanticCustomError(
                "range", "methyl_rotors goes with the rule rotatable-torsions", {}
            )
        if self.smarts is not None:
            problem = check_smarts(self.rule, self.type, self.smarts)
            if problem:
                raise PydanticCustomError("range", "{problem}", {"problem": problem})
        if self.move is not None:
            raise PydanticCustomError(
                "range", "move names atoms of one molecule; it cannot go with a rule", {}
            )
        return self

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

    @model_validator(mode="after")
    def _rule_alone(self):
        if len(self.coordinates) > 1 and any(c.rule for c in self.coordinates):
            raise PydanticCustomError(
                "range",
                "a coordinate chosen by rule is scanned alone (one coordinate per scan); "
                "give the 2-D grid's atoms by number",
                {},
            )
        return self


class LevelSpec(_Strict):
    """Levels of theory: every method with every basis set listed.  A tight-binding
    level (``gfn2-xtb``, ``gfn1-xtb``) has its own basis and is given without one."""

    method: str | list[str]
    basis: str | list[str] | None = None

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
    #: the set (molecule entry) this molecule belongs to, "" for a single molecule
    set_name: str = ""
    #: the member's name without its conformer (``<set>/<name>``); the name by default
    member: str = ""
    #: conformer number (1-based) when the member has several, else 0
    conformer: int = 0
    #: what was built, for ``pesflow check`` (source, embedding, force field)
    built: str = ""
    #: RDKit molecule with explicit hydrogens and bond orders (rules), when known
    rdkit: Any = None
    #: a member of a set that may be left out (with the reason) instead of stopping
    lenient: bool = False

    def __post_init__(self):
        if not self.member:
            self.member = self.name

    @property
    def symbols(self) -> tuple[str, ...]:
        return tuple(self.atoms.get_chemical_symbols())


@dataclass
class Coordinate:
    """One scan coordinate with 0-based atoms and the atoms that move."""

    kind: str
    atoms: tuple[int, ...]
    values: np.ndarray
    #: readable name of a coordinate chosen by rule (``C1-C2-C3-C4``), else ""
    name: str = ""

    @property
    def unit(self) -> str:
        return KINDS[self.kind].unit

    @property
    def label(self) -> str:
        atoms = self.name or "-".join(str(i + 1) for i in self.atoms)
        return f"{KINDS[self.kind].stem}({atoms})"


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
    #: the spec's scan this one comes from (a rule scan expands into one per coordinate)
    source: str = ""
    #: the rule that chose the coordinate, "" for atoms given by number
    rule: str = ""

    def __post_init__(self):
        if not self.source:
            self.source = self.name

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
    #: molecule entry -> the molecules it resolved to (a set's members and conformers)
    groups: dict[str, list[str]] = field(default_factory=dict)
    #: what ``pesflow check`` reports about sets and rules: dicts with ``what``
    #: (``member``, ``refused``, ``rule``, ``no-match``, ``left-out``), ``entry``,
    #: ``molecule``, ``scan`` and ``text``
    notes: list[dict] = field(default_factory=list)

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
        if scan is not None and scan not in self.spec.scans and scan in self.scans:
            scan = self.scans[scan].source
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
    """A single molecule (builtin, file, xyz, or one SMILES with one conformer)."""
    from pesflow.campaign import molecules as mol

    loc = ("molecules", name)
    rdmol, built = None, ""
    try:
        if spec.builtin is not None:
            atoms = mol.from_builtin(spec.builtin)
        elif spec.file is not None:
            file = Path(spec.file)
            if not file.is_absolute():
                file = base / file
            atoms = mol.from_file(file)
        elif spec.smiles is not None:
            seed = mol.DEFAULT_EMBED_SEED if spec.seed is None else spec.seed
            rdmol, (positions,) = mol.embed_smiles(
                spec.smiles, seed=seed, force_field=spec.force_field
            )
            atoms = mol.atoms_from_rdkit(rdmol, positions)
            built = f"SMILES {spec.smiles}: ETKDG seed {seed} + {spec.force_field.upper()}"
        else:
            atoms = mol.from_xyz_text(spec.xyz)
    except ValueError as exc:
        raise err(loc + (spec.source,), str(exc)) from None
    return _checked_molecule(name, atoms, spec, loc, err, rdkit=rdmol, built=built)


def _resolve_entry(name, spec: MoleculeSpec, base: Path, err, notes) -> dict[str, Molecule]:
    """The molecules of one entry: one molecule, a molecule's conformers, or a set's
    members (``<entry>/<member>``, conformers ``.../c1``, ``.../c2``).  A set member that
    cannot be built is left out with the reason in ``notes`` unless the set is strict."""
    from pesflow.campaign import molecules as mol

    if spec.source not in SET_SOURCES and not (spec.smiles and spec.conformers > 1):
        return {name: _resolve_molecule(name, spec, base, err)}
    loc = ("molecules", name, spec.source)
    seed = mol.DEFAULT_EMBED_SEED if spec.seed is None else spec.seed
    recipe = f"ETKDG seed {seed} + {spec.force_field.upper()}"
    try:
        if spec.smiles is not None:
            sources = [(None, name, ("smiles", spec.smiles))]
        elif spec.smiles_file is not None:
            entries = mol.read_smiles_file(_relative(spec.smiles_file, base))
            sources = [(f"line {n}", label, ("smiles", smi)) for n, label, smi in entries]
        elif spec.sdf is not None:
            records = mol.read_sdf(_relative(spec.sdf, base))
            sources = [(f"record {n}", label, ("sdf", (m, why))) for n, label, m, why in records]
        else:
            paths = mol.xyz_paths(spec.xyz_files, base)
            sources = [(p.name, p.stem, ("xyz", p)) for p in paths]
    except ValueError as exc:
        raise err(loc, str(exc)) from None
    out: dict[str, Molecule] = {}
    for where, label, (kind, source) in sources:
        short = mol.member_name(label) or mol.member_name(where or "")
        member = name if spec.smiles is not None else f"{name}/{short}"
        try:
            if member in out or f"{member}/c1" in out:
                raise ValueError(f"the name {short!r} is taken by an earlier member")
            if kind == "smiles":
                rdmol, stack = mol.embed_smiles(
                    source, seed=seed, conformers=spec.conformers, force_field=spec.force_field
                )
                built = f"SMILES {source}: {recipe}"
            elif kind == "sdf":
                rdmol, why = source
                if rdmol is None:
                    raise ValueError(why)
                if not rdmol.GetConformer().Is3D():
                    raise ValueError("the record has no 3-D coordinates")
                stack, built = [rdmol.GetConformer().GetPositions()], f"SDF {where}"
            else:
                read = mol.from_file(source)
                rdmol, stack, built = None, [read.positions], f"XYZ {source.name}"
                symbols = read.get_chemical_symbols()
            built_here = {}
            for c, positions in enumerate(stack, start=1):
                cname = member if len(stack) == 1 and spec.conformers == 1 else f"{member}/c{c}"
                if rdmol is not None:
                    atoms = mol.atoms_from_rdkit(rdmol, positions)
                else:
                    atoms = mol.Atoms(symbols=symbols, positions=positions)
                conformer = f", conformer {c} of {len(stack)}" if spec.conformers > 1 else ""
                built_here[cname] = _checked_molecule(
                    cname,
                    atoms,
                    spec,
                    ("molecules", name),
                    err,
                    rdkit=rdmol,
                    built=built + conformer,
                    set_name=name if spec.smiles is None else "",
                    member=member,
                    conformer=c if spec.conformers > 1 else 0,
                    lenient=not spec.strict,
                )
        except (ValueError, SpecError) as exc:
            reason = exc.reason if isinstance(exc, SpecError) else str(exc)
            if spec.strict or spec.smiles is not None:
                raise err(loc, f"member '{short}' ({where}): {reason}") from None
            notes.append(
                {"what": "refused", "entry": name, "molecule": member, "scan": "",
                 "text": f"{where}: {reason}"}
            )  # fmt: skip
            continue
        out.update(built_here)
        first = next(iter(built_here.values()))
        notes.append(
            {"what": "member", "entry": name, "molecule": member, "scan": "",
             "text": f"{first.atoms.get_chemical_formula()} charge {first.charge} "
                     f"multiplicity {first.multiplicity}: {first.built.split(', conformer')[0]}"
                     + (f", {len(built_here)} conformers" if len(built_here) > 1 else "")}
        )  # fmt: skip
    if not out:
        first = next(n for n in notes if n["entry"] == name and n["what"] == "refused")
        raise err(
            loc, f"no member of this set could be built; {first['molecule']}: {first['text']}"
        )
    return out


def _relative(path, base: Path) -> Path:
    path = Path(path)
    return path if path.is_absolute() else base / path


def _checked_molecule(name, atoms, spec: MoleculeSpec, loc, err, **extra) -> Molecule:
    """The molecule ``name`` of ``atoms``: charge, multiplicity, contacts, isotopes and
    fragments checked against ``spec`` (errors at ``loc``).  Charge and multiplicity not
    given in the spec come from the RDKit structure in ``extra`` when there is one."""
    from pesflow.campaign import molecules as mol

    rdmol = extra.get("rdkit")
    written = mol.structure_charge_multiplicity(rdmol) if rdmol is not None else (0, None)
    charge = written[0] if spec.charge is None else spec.charge
    if len(atoms) == 0:
        raise err(loc, "the molecule has no atoms")
    problem = None
    multiplicity = spec.multiplicity
    if multiplicity is None and spec.charge is None and written[1] is not None:
        multiplicity = written[1]
    if multiplicity is None:
        try:
            multiplicity = mol.default_multiplicity(atoms, charge)
        except ValueError as exc:
            raise err(loc + ("charge",), str(exc)) from None
        problem = mol.multiplicity_problem(atoms, charge, multiplicity)
        if problem is not None:
            raise err(loc + ("charge",), problem)
    else:
        problem = mol.multiplicity_problem(atoms, charge, multiplicity)
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
        if sum(f["charge"] for f in fragments) != charge:
            raise err(
                loc + ("fragments",),
                f"the fragments' charges must add up to the molecule's charge ({charge})",
            )
    return Molecule(
        name=name,
        atoms=atoms,
        charge=charge,
        multiplicity=multiplicity,
        masses_amu=masses,
        fragments=fragments,
        **extra,
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


def _scan_members(name, spec: ScanSpec, groups, molecules, err) -> list[str]:
    """The molecules a scan lists, with each set and member expanded into its molecules
    (a member with several conformers into one molecule per conformer)."""
    loc = ("scans", name)
    members: dict[str, list[str]] = {}
    for m in molecules.values():
        members.setdefault(m.member, []).append(m.name)
    out = []
    for i, mname in enumerate(spec.molecules):
        if mname in groups:
            out += groups[mname]
        elif mname in members:
            out += members[mname]
        else:
            defined = ", ".join(sorted(groups))
            known = list(dict.fromkeys([*groups, *members]))
            raise err(
                loc + ("molecules", i),
                f"molecule '{mname}' is not defined under molecules"
                f"{did_you_mean(mname, known)}; defined: {defined}",
            )
    if len(set(out)) != len(out):
        raise err(loc + ("molecules",), "a molecule is listed twice")
    return out


def _resolve_scans(spec: CampaignSpec, molecules, groups, err, notes) -> dict[str, Scan]:
    """Every scan; a scan whose coordinate is chosen by rule becomes one scan per
    coordinate the rule finds (``<scan>/<coordinate name>``), over the molecules where
    it finds it.  What each rule found, and in which molecule it found nothing, goes to
    ``notes``."""
    from pesflow.campaign import molecules as mol
    from pesflow.campaign.rules import coordinate_name, expand_rule

    scans = {}
    for name, sspec in spec.scans.items():
        names = _scan_members(name, sspec, groups, molecules, err)
        cspec = sspec.coordinates[0]
        if cspec.rule is None:
            scans[name] = _resolve_scan(name, sspec, molecules, err, names, notes=notes)
            continue
        found: dict[str, list[str]] = {}
        atoms_of: dict[str, tuple[int, ...]] = {}
        for mname in names:
            m = molecules[mname]
            try:
                if m.rdkit is None:
                    m.rdkit = mol.perceive_bonds(m.atoms, m.charge)
                picked = expand_rule(
                    m.rdkit, cspec.rule, smarts=cspec.smarts, methyl_rotors=cspec.methyl_rotors
                )
            except ValueError as exc:
                problem = err(("scans", name, "coordinates", 0, "rule"), f"'{mname}': {exc}")
                if not m.lenient:
                    raise problem from None
                _leave_out(notes, name, m, problem.reason)
                continue
            labels = [coordinate_name(m.rdkit, t) for t in picked]
            if m.conformer <= 1:
                notes.append(
                    {"what": "rule" if labels else "no-match", "entry": m.set_name,
                     "molecule": m.member, "scan": name,
                     "text": f"{cspec.rule} found " + (", ".join(labels) or "nothing")}
                )  # fmt: skip
            for t, label in zip(picked, labels):
                found.setdefault(label, []).append(mname)
                atoms_of[label] = t
        for label, mnames in found.items():
            one = cspec.model_copy(update={"atoms": [a + 1 for a in atoms_of[label]], "rule": None})
            concrete = sspec.model_copy(update={"coordinates": [one]})
            scan = _resolve_scan(name, concrete, molecules, err, mnames, notes=notes)
            scan.name, scan.rule = f"{name}/{label}", cspec.rule
            scan.coordinates[0].name = label
            scans[scan.name] = scan
    return scans


def _leave_out(notes, scan, m: Molecule, reason) -> None:
    notes.append(
        {"what": "left-out", "entry": m.set_name, "molecule": m.name, "scan": scan,
         "text": reason}
    )  # fmt: skip


def _resolve_scan(name, spec: ScanSpec, molecules, err, names=None, notes=None) -> Scan:

    loc = ("scans", name)
    if names is None:
        names = _scan_members(name, spec, {m: [m] for m in molecules}, molecules, err)
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
    for mname in names:
        try:
            moving[mname] = _moving_atoms(loc, spec, resolved, mname, molecules[mname].atoms, err)
        except SpecError as exc:
            if not molecules[mname].lenient:
                raise
            _leave_out(notes, name, molecules[mname], exc.reason)
    return Scan(
        name=name,
        molecules=[m for m in names if m in moving],
        coordinates=resolved,
        moving=moving,
        relax=spec.relax,
    )


def _moving_atoms(loc, spec: ScanSpec, resolved, mname, atoms, err) -> list[np.ndarray]:
    """Per coordinate, the 0-based atoms of molecule ``mname`` that move; the ends of the
    range (the corners of a grid) are tried, so that coupled coordinates and undefined
    dihedrals are caught before anything runs."""
    from pesflow.coordinates import geometry as coords

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
                        f"atom {a} is out of range for molecule '{mname}', which has atoms 1-{n}",
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
    return per


def _resolve_level_list(lspecs, loc, elements, err, checked) -> list[Level]:
    from pesflow import engine

    levels = []
    for i, lspec in enumerate(lspecs):
        for method, basis in lspec.pairs():
            try:
                info = engine.method_info(method)
            except EngineSetupError as exc:
                hint = did_you_mean(str(method).strip().lower(), _method_names())
                raise err(loc + (i, "method"), _with_hint(str(exc), hint)) from None
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

    from pesflow.engine import TIGHT_BINDING_METHODS, WAVEFUNCTION_METHODS

    names = {*WAVEFUNCTION_METHODS, *TIGHT_BINDING_METHODS, *(k.lower() for k in libxc.XC_ALIAS)}
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
            ("scans", scan.source),
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
        m for sc in scans.values() if spec.scans[sc.source].levels is None for m in sc.molecules
    ]
    campaign_levels = _resolve_level_list(
        spec.levels, ("levels",), elements_of(default_users), err, checked_basis
    )
    union = list(campaign_levels)
    for scan in scans.values():
        own = spec.scans[scan.source].levels
        if own is None:
            if not campaign_levels:
                raise err(
                    ("scans", scan.source),
                    "no levels of theory: give levels at the top of the campaign or in this scan",
                )
            scan.levels = list(campaign_levels)
        else:
            scan.levels = _resolve_level_list(
                own,
                ("scans", scan.source, "levels"),
                elements_of(scan.molecules),
                err,
                checked_basis,
            )
        if scan.relax:
            from pesflow.engine import method_info

            for lvl in scan.levels:
                if not method_info(lvl.method).has_gradients:
                    where = ("scans", scan.source, "levels") if own is not None else ("levels",)
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
    notes: list[dict] = []
    molecules, groups = {}, {}
    for name, m in spec.molecules.items():
        resolved = _resolve_entry(name, m, path.parent, err, notes)
        molecules.update(resolved)
        groups[name] = list(resolved)
    scans = _resolve_scans(spec, molecules, groups, err, notes)
    levels = _resolve_levels(spec, molecules, scans, err)
    _check_point_count(spec, scans, err)
    campaign = Campaign(
        spec=spec,
        path=path,
        molecules=molecules,
        scans=scans,
        levels=levels,
        groups=groups,
        notes=notes,
    )
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
