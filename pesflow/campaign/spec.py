"""The campaign spec: pydantic models of the YAML file (unknown keys refused) and its JSON schema.

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
import json
import math
import re
from pathlib import Path
from typing import Literal

import numpy as np
from pydantic import (
    BaseModel,
    ConfigDict,
    Field,
    FiniteFloat,
    field_validator,
    model_validator,
)
from pydantic_core import PydanticCustomError

from pesflow.campaign.rules import NEEDS_SMARTS, RULES, check_smarts
from pesflow.coordinates.kinds import KINDS

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

    @field_validator("points", mode="before")
    @classmethod
    def _points_not_bool(cls, value):
        if isinstance(value, bool):  # YAML's true would otherwise count as 1 point
            raise PydanticCustomError("int_type", "points must be a whole number, not true/false")
        return value

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
    #: counterpoise-corrected interaction curve of a complex of two fragments (README
    #: "Counterpoise"): each fragment is also computed in the complex's basis
    counterpoise: bool = False
    #: adaptive grid (README "Adaptive grids"): target accuracies by quantity column (unit as
    #: in the name) and ``max_points`` (points per walk, coarse grid included); the
    #: coordinate's grid is then the first, coarse grid
    refine: dict[str, FiniteFloat] | None = None

    @field_validator("refine", mode="after")
    @classmethod
    def _refine_targets(cls, value):
        if value is None:
            return value
        from pesflow.analysis.refine import BUDGET_KEY, refine_targets

        allowed = refine_targets()
        for name, number in value.items():
            if name != BUDGET_KEY and name not in allowed:
                raise PydanticCustomError(
                    "range",
                    "unknown refine target '{name}'{hint}; allowed: {allowed} and {budget}",
                    {
                        "name": name,
                        "hint": did_you_mean(name, (*allowed, BUDGET_KEY)),
                        "allowed": ", ".join(allowed),
                        "budget": BUDGET_KEY,
                    },
                )
            if not number > 0:
                raise PydanticCustomError(
                    "range",
                    "refine {name} must be positive (got {value})",
                    {"name": name, "value": number},
                )
        budget = value.get(BUDGET_KEY)
        if budget is None or budget != int(budget):
            raise PydanticCustomError(
                "range",
                "refine needs {budget}: a whole number of points per curve (coarse grid "
                "included) at which refinement stops",
                {"budget": BUDGET_KEY},
            )
        if len(value) < 2:
            raise PydanticCustomError(
                "range",
                "refine names no target; allowed: {allowed}",
                {"allowed": ", ".join(allowed)},
            )
        return value

    @model_validator(mode="after")
    def _refine_one_coordinate(self):
        if self.refine is None:
            return self
        if len(self.coordinates) > 1:
            raise PydanticCustomError(
                "range", "refine works on 1-D scans (one coordinate), not on 2-D grids", {}
            )
        coarse = self.coordinates[0].n_values()
        budget = self.refine["max_points"]
        if budget <= coarse:
            raise PydanticCustomError(
                "range",
                "refine max_points ({budget}) must exceed the coarse grid's {n} points",
                {"budget": f"{budget:g}", "n": f"{coarse:g}"},
            )
        return self

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


class ActiveLabelsSpec(_Strict):
    """An active space chosen by PySCF's AVAS from atomic-orbital labels."""

    ao_labels: list[str] = Field(min_length=1)


class SolventSpec(_Strict):
    """An implicit solvent: PySCF's IEF-PCM (``pcm``) or ddCOSMO (``ddcosmo``), around
    a solvent named in PySCF's solvent table or given by its dielectric constant."""

    model: Literal["pcm", "ddcosmo"]
    #: a solvent of PySCF's table (pyscf.solvent.smd.solvent_db), e.g. water
    name: str | None = None
    #: static dielectric constant (above 1), instead of a name
    eps: FiniteFloat | None = Field(default=None, gt=1)

    @model_validator(mode="after")
    def _name_or_eps(self):
        if (self.name is None) == (self.eps is None):
            raise PydanticCustomError(
                "solvent", "give exactly one of name (e.g. water) or eps (e.g. 78.3553)"
            )
        return self


class LevelSpec(_Strict):
    """Levels of theory: every method with every basis set listed.  A tight-binding
    level (``gfn2-xtb``, ``gfn1-xtb``) has its own basis and is given without one.

    Level options (:data:`pesflow.engine.LEVEL_OPTIONS`) apply to every method listed
    that takes them and become part of its name (``casscf(6,6)``,
    ``tda-b3lyp(singlets=4)``, ``b3lyp-d3bj(pcm:water)``); a method that takes none
    refuses them.  ``states`` means the roots averaged in the CASSCF for casscf/nevpt2,
    and the excited states above the ground state for the excited-state methods."""

    method: str | list[str]
    basis: str | list[str] | None = None
    #: active space of casscf/nevpt2: [electrons, orbitals] or {ao_labels: [...]}
    active: list[int] | ActiveLabelsSpec | None = None
    #: casscf/nevpt2: roots averaged in the CASSCF (state averaging); excited-state
    #: methods: excited states computed above the ground state (default 3)
    states: int | None = Field(default=None, ge=1)
    #: casscf/nevpt2: weights of the averaged roots (default equal)
    weights: list[FiniteFloat] | None = None
    #: excited-state methods: spin of the excited states (closed-shell reference)
    spin: Literal["singlet", "triplet"] | None = None
    #: excited-state methods: number states by energy at each point, or follow each
    #: state's character along the walk
    follow: Literal["energy", "character"] | None = None
    #: hf and DFT: empirical dispersion correction (pyscf-dispersion), D3(BJ) or D4
    dispersion: Literal["d3bj", "d4"] | None = None
    #: hf and DFT: implicit solvent, {model: pcm|ddcosmo, name: water} or {..., eps: 78.4}
    solvent: SolventSpec | None = None

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
        from pesflow.engine import LEVEL_OPTIONS

        out = {}
        for name in LEVEL_OPTIONS:
            value = getattr(self, name)
            if value is not None:
                is_model = isinstance(value, BaseModel)
                out[name] = value.model_dump(exclude_none=True) if is_model else value
        return out

    #: ``cbs``: one derived level per method, extrapolated to the complete basis set from
    #: the two or three correlation-consistent basis sets listed (README "CBS levels")
    extrapolate: Literal["cbs"] | None = None

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
    value: FiniteFloat
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


def write_json_schema(path) -> None:
    """Write the campaign JSON schema to ``path`` (used to refresh workflows/schemas)."""
    Path(path).write_text(json.dumps(json_schema(), indent=2, sort_keys=True) + "\n")
