"""The registry of scan-coordinate kinds: one entry per kind, read by every stage.

Each :class:`CoordinateKind` says how many atoms the coordinate is measured over, its unit,
the names of its columns (the scanned value in the points table, the position of the minimum
in the summary), the range a value may take, whether it is periodic, which atoms stay fixed
when it is set, the bond that is cut to find the moving side, and the constraint a relaxed
scan hands to the optimiser.  The spec, the plan, the analysis, the tables, the report and the
engine ask this module instead of keeping their own maps.

How a kind is measured and displaced lives beside it in :mod:`pesflow.coordinates.geometry`
(``_MEASURE`` and ``_SET``): adding a kind is one entry here and its two functions there.

>>> KINDS["distance"].column, KINDS["angle"].minimum_column
('r_angstrom', 'angle_e_degree')
>>> KINDS["angle"].range_problem([90.0, 180.0]) is None
True
>>> KINDS["angle"].range_problem([0.0])
'got 0: an angle must lie in (0, 180] degree: 0 < angle <= 180'
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class CoordinateKind:
    """One kind of scan coordinate.

    Attributes:
        name: the spec's ``type`` (``"distance"``, ``"angle"``, ``"dihedral"``).
        n_atoms: atoms it is measured over, in the order a chemist writes them.
        stem: column stem (``"r"``, ``"angle"``, ``"dihedral"``).
        unit: unit of values as given and stored (``"angstrom"`` or ``"degree"``).
        unit_text: the unit as a person reads it (``"Å"``, ``"degree"``).
        symbol: the symbol as plain text (``"r"``, ``"θ"``, ``"φ"``).
        motion: what scanning it does to the molecule (``"stretch"``, ``"bend"``,
            ``"torsion"``), used to label force constants and wavenumbers.
        lower, upper: the allowed range of a value; ``lower_open``/``upper_open`` say
            whether the end itself is excluded.
        period: the period in ``unit`` for a periodic coordinate (360 for a dihedral), else
            None.
        n_fixed: how many leading atoms stay fixed when the coordinate is set (a for a
            distance; a and b for an angle or a dihedral).
        cut: positions (into the atom list) of the bond that is cut to find the moving side.
        decimals: decimals shown for a position of this kind.
        constraint: the name of the constraint a relaxed scan holds (geomeTRIC's
            ``$set`` keyword).
        rule: the allowed range as a sentence, for error messages.
    """

    name: str
    n_atoms: int
    stem: str
    unit: str
    unit_text: str
    symbol: str
    motion: str
    lower: float
    upper: float
    lower_open: bool
    upper_open: bool
    period: float | None
    n_fixed: int
    cut: tuple[int, int]
    decimals: int
    constraint: str
    rule: str

    @property
    def column(self) -> str:
        """Points-table column of the scanned value, unit in the name (``r_angstrom``)."""
        return f"{self.stem}_{self.unit}"

    @property
    def minimum_column(self) -> str:
        """Summary column of the minimum's position (``r_e_angstrom``)."""
        return f"{self.stem}_e_{self.unit}"

    def outside(self, values) -> np.ndarray:
        """Boolean mask of the values outside the allowed range (NaN counts as outside)."""
        v = np.asarray(values, dtype=float)
        below = v <= self.lower if self.lower_open else v < self.lower
        above = v >= self.upper if self.upper_open else v > self.upper
        return below | above | ~np.isfinite(v)

    def range_problem(self, values) -> str | None:
        """None when every value is allowed, else a sentence naming the first bad value."""
        v = np.asarray(values, dtype=float).reshape(-1)
        bad = v[self.outside(v)]
        if not bad.size:
            return None
        return f"got {bad[0]:g}: {self.rule}"

    def fold(self, value: float) -> float:
        """A periodic value folded into ``[0, period)``; other values unchanged."""
        if self.period is None or not math.isfinite(value):
            return value
        return float(np.mod(value, self.period))


#: Every coordinate kind, in the order documentation lists them.
KINDS: dict[str, CoordinateKind] = {
    k.name: k
    for k in (
        CoordinateKind(
            name="distance", n_atoms=2, stem="r", unit="angstrom", unit_text="Å", symbol="r",
            motion="stretch", lower=0.0, upper=math.inf, lower_open=True, upper_open=True,
            period=None, n_fixed=1, cut=(0, 1), decimals=4, constraint="distance",
            rule="distances must be positive (> 0 angstrom)",
        ),
        CoordinateKind(
            name="angle", n_atoms=3, stem="angle", unit="degree", unit_text="degree",
            symbol="θ", motion="bend", lower=0.0, upper=180.0, lower_open=True,
            upper_open=False, period=None, n_fixed=2, cut=(1, 2), decimals=2,
            constraint="angle", rule="an angle must lie in (0, 180] degree: 0 < angle <= 180",
        ),
        CoordinateKind(
            name="dihedral", n_atoms=4, stem="dihedral", unit="degree", unit_text="degree",
            symbol="φ", motion="torsion", lower=-360.0, upper=360.0, lower_open=False,
            upper_open=False, period=360.0, n_fixed=2, cut=(1, 2), decimals=2,
            constraint="dihedral", rule="a dihedral must lie within -360..360 degree",
        ),
    )
}  # fmt: skip

#: Unit text of every unit a coordinate can have (``"angstrom"`` -> ``"Å"``).
UNIT_TEXT: dict[str, str] = {k.unit: k.unit_text for k in KINDS.values()}


def get_kind(name: str) -> CoordinateKind:
    """The registered kind of that name; ValueError naming the allowed kinds otherwise."""
    try:
        return KINDS[name]
    except KeyError:
        raise ValueError(f"unknown coordinate kind {name!r}; allowed: {', '.join(KINDS)}") from None


def column_names(kinds) -> list[str]:
    """Points-table columns of a scan's coordinates (``r_angstrom``, ``angle_degree``, ...);
    a second coordinate of the same kind gets a ``2`` after its stem (``r2_angstrom``).

    >>> column_names(["distance", "distance"]), column_names(["distance", "angle"])
    (['r_angstrom', 'r2_angstrom'], ['r_angstrom', 'angle_degree'])
    """
    names, seen = [], {}
    for name in kinds:
        kind = get_kind(name)
        seen[name] = seen.get(name, 0) + 1
        suffix = "" if seen[name] == 1 else str(seen[name])
        names.append(f"{kind.stem}{suffix}_{kind.unit}")
    return names
