"""The resolved campaign: what every later stage reads (molecules as :class:`ase.Atoms`,
0-based atoms, moving atoms, scan grids, levels), made by
:func:`pesflow.campaign.resolve.load_campaign`."""

from __future__ import annotations

import functools
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from pesflow.campaign.spec import CampaignSpec
from pesflow.coordinates.kinds import KINDS


@dataclass(frozen=True)
class Level:
    """A level of theory; ``basis`` is ``""`` for a level with a built-in basis.

    A derived level (complete-basis-set extrapolation) has ``members``: the computed
    levels its energies are made from (``basis`` is then e.g. ``cbs(cc-pv[tq]z)``); the
    plan computes no point of its own for it (README "CBS levels")."""

    method: str
    basis: str
    members: tuple[Level, ...] = ()

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
    #: isotope overrides of the spec, 1-based atom number -> mass in dalton or a label
    isotopes: dict = field(default_factory=dict)
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

    @functools.cached_property
    def masses_amu(self) -> np.ndarray:
        """Atomic masses in dalton (most abundant isotopes, with the overrides); made on
        first use, since the isotope table's import (PySCF's) costs a campaign load ~0.4 s
        and only the analysis needs masses."""
        from pesflow.campaign.molecules import masses_with_isotopes

        return masses_with_isotopes(self.atoms, self.isotopes or None)


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
    #: each fragment also computed in the complex's full basis (ghost atoms) at each point
    counterpoise: bool = False

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
