"""The registry of derived quantities: one entry per summary column, read by every stage.

A :class:`Quantity` is a column of the summary table (unit in the name) with how a person
reads it (plain-text name, HTML symbol, unit, decimals), whether it belongs to a curve's row
or a surface's row, whether levels are compared on it (a ``dev_`` column, a valid
``reference_values`` quantity, a row of the report's statistics), whether the report shows it
always or only when asked, and, for a position, the coordinate kind it is a position of (so
that equivalent positions are folded by that kind's symmetry).

The analysis fills the columns (:mod:`pesflow.analysis.derived`), the summary table adds the
deviations (:mod:`pesflow.tables.summary`), the spec checks ``reference_values`` against it,
and the report takes its labels from it.  Adding a derived quantity is one entry here and the
pure function that computes it.  This module imports nothing heavy (planning reads it).

>>> QUANTITY["omega_e_cm-1"].title
'ω_e (cm⁻¹)'
>>> "dev_omega_e_cm-1" in [f"dev_{c}" for c in COMPARED]
True
"""

from __future__ import annotations

from dataclasses import dataclass

from pesflow.coordinates.kinds import KINDS, UNIT_TEXT


@dataclass(frozen=True)
class Quantity:
    """One derived quantity.

    Attributes:
        column: summary column, unit in the name (``"r_e_angstrom"``).
        name: plain-text name (``"r_e"``), for terminals, Markdown and figure axes.
        html: the name as our own (trusted) HTML (``"r<sub>e</sub>"``).
        unit: the unit as a person reads it (``"Å"``).
        decimals: decimals shown for values and deviations.
        curve: part of a 1-D curve's summary row.
        surface: part of a 2-D surface's summary row.
        compared: levels are compared on it (deviation column, reference values, statistics).
        headline: the report shows it whenever a curve has it; otherwise only when a
            reference value names it.
        shown: the report shows it at all (False for fit parameters and bookkeeping).
        position_of: the coordinate kind it is a position of (``"dihedral"`` for
            ``dihedral_e_degree``), else None.
        uncertain: the summary carries its standard uncertainty, ``u_<column>`` in the same
            unit (:mod:`pesflow.analysis.uncertainty`); False for counts.
    """

    column: str
    name: str
    html: str
    unit: str
    decimals: int
    curve: bool = True
    surface: bool = False
    compared: bool = True
    headline: bool = True
    shown: bool = True
    position_of: str | None = None
    uncertain: bool = True

    @property
    def title(self) -> str:
        """``"name (unit)"``, for axis labels and table headers."""
        return f"{self.name} ({self.unit})"


def _positions():
    out = []
    for kind in KINDS.values():
        out.append(
            Quantity(
                kind.minimum_column,
                f"{kind.symbol}_e",
                f"{kind.symbol}<sub>e</sub>",
                kind.unit_text,
                kind.decimals,
                position_of=kind.name,
            )
        )
    for axis in (1, 2):
        for unit in dict.fromkeys(k.unit for k in KINDS.values()):
            decimals = max(k.decimals for k in KINDS.values() if k.unit == unit)
            out.append(
                Quantity(
                    f"q{axis}_e_{unit}",
                    f"q{axis} at minimum",
                    f"q<sub>{axis}</sub> at minimum",
                    UNIT_TEXT[unit],
                    decimals,
                    curve=False,
                    surface=True,
                )
            )
    return out


def _barrier(column, unit, decimals, headline):
    return Quantity(column, "barrier", "barrier", unit, decimals, surface=True, headline=headline)


#: Every derived quantity, in the order the report shows them.
QUANTITIES: tuple[Quantity, ...] = (
    *_positions(),
    Quantity("omega_e_cm-1", "ω_e", "ω<sub>e</sub>", "cm⁻¹", 1),
    Quantity("omega_1d_cm-1", "ω_1D (along the scan)", "ω<sub>1D</sub> (along the scan)",
             "cm⁻¹", 1),
    Quantity("omega_e_x_e_cm-1", "ω_e x_e", "ω<sub>e</sub>x<sub>e</sub>", "cm⁻¹", 2),
    Quantity("nu_01_cm-1", "ν_01", "ν<sub>01</sub>", "cm⁻¹", 1),
    Quantity("k_aj_rad-2", "k (bend)", "k<sub>bend</sub>", "aJ/rad²", 4),
    Quantity("k_torsion_aj_rad-2", "k (torsion)", "k<sub>torsion</sub>", "aJ/rad²", 4),
    Quantity("d_e_ev", "D_e", "D<sub>e</sub>", "eV", 3),
    Quantity("d_0_ev", "D_0", "D<sub>0</sub>", "eV", 3),
    _barrier("barrier_kcal_mol", "kcal/mol", 2, True),
    # Excited states (a multi-state level's rows of states 1, 2, ...).
    Quantity("t_v_ev", "T_v (vertical)", "T<sub>v</sub> (vertical)", "eV", 3),
    Quantity("t_e_ev", "T_e", "T<sub>e</sub>", "eV", 3),
    Quantity("t_e_cm-1", "T_e", "T<sub>e</sub>", "cm⁻¹", 0, headline=False),
    # counterpoise scans (pesflow.analysis.interaction): the interaction curve
    Quantity("r_min_cp_angstrom", "R_min (CP)", "R<sub>min</sub> (CP)", "Å", 4),
    Quantity("well_depth_cp_kcal_mol", "well depth (CP)", "well depth (CP)", "kcal/mol", 3),
    Quantity("well_depth_cp_cm-1", "well depth (CP)", "well depth (CP)", "cm⁻¹", 1,
             headline=False),
    Quantity("well_depth_kcal_mol", "well depth (no CP)", "well depth (no CP)", "kcal/mol", 3,
             headline=False),
    Quantity("bsse_at_min_kcal_mol", "BSSE at R_min", "BSSE at R<sub>min</sub>", "kcal/mol", 3),
    Quantity("zpe_cm-1", "ZPE", "ZPE", "cm⁻¹", 1, headline=False),
    Quantity("b_e_cm-1", "B_e", "B<sub>e</sub>", "cm⁻¹", 3, headline=False),
    Quantity("k_mdyn_angstrom-1", "k (stretch)", "k<sub>stretch</sub>", "mdyn/Å", 3,
             headline=False),
    Quantity("k_hartree_bohr-2", "k (stretch)", "k<sub>stretch</sub>", "hartree/bohr²", 4,
             headline=False),
    Quantity("morse_d_e_ev", "Morse D_e", "Morse D<sub>e</sub>", "eV", 3, headline=False),
    _barrier("barrier_kj_mol", "kJ/mol", 2, False),
    _barrier("barrier_cm-1", "cm⁻¹", 1, False),
    _barrier("barrier_ev", "eV", 4, False),
    # Computed and exported, not compared between levels and not shown in the report.
    Quantity("e_min_hartree", "E_min", "E<sub>min</sub>", "hartree", 8, surface=True,
             compared=False, shown=False),
    Quantity("k_hartree_rad-2", "k (bend)", "k<sub>bend</sub>", "hartree/rad²", 6,
             compared=False, shown=False),
    Quantity("k_torsion_hartree_rad-2", "k (torsion)", "k<sub>torsion</sub>", "hartree/rad²", 6,
             compared=False, shown=False),
    Quantity("morse_a_angstrom-1", "Morse a", "Morse a", "Å⁻¹", 4, compared=False, shown=False),
    Quantity("morse_r_e_angstrom", "Morse r_e", "Morse r<sub>e</sub>", "Å", 4, compared=False,
             shown=False),
    Quantity("morse_omega_e_cm-1", "Morse ω_e", "Morse ω<sub>e</sub>", "cm⁻¹", 1,
             compared=False, shown=False),
    Quantity("morse_omega_e_x_e_cm-1", "Morse ω_e x_e", "Morse ω<sub>e</sub>x<sub>e</sub>",
             "cm⁻¹", 2, compared=False, shown=False),
    Quantity("morse_rms_cm-1", "Morse fit rms", "Morse fit rms", "cm⁻¹", 1, compared=False,
             shown=False),
    Quantity("n_levels_trusted", "trusted levels", "trusted levels", "", 0, compared=False,
             shown=False, uncertain=False),
)  # fmt: skip

#: The registry by column.
QUANTITY: dict[str, Quantity] = {q.column: q for q in QUANTITIES}

#: Columns levels are compared on (a ``dev_<column>`` each; valid ``reference_values``).
COMPARED: tuple[str, ...] = tuple(q.column for q in QUANTITIES if q.compared)

#: Columns of a curve's summary row that the analysis fills.
CURVE_COLUMNS: tuple[str, ...] = tuple(q.column for q in QUANTITIES if q.curve)

#: Columns that carry a standard uncertainty ``u_<column>`` (same unit).
UNCERTAIN: tuple[str, ...] = tuple(q.column for q in QUANTITIES if q.uncertain)


def uncertainty_column(column: str) -> str:
    """Name of the standard-uncertainty column of a quantity column (same unit).

    >>> uncertainty_column("omega_e_cm-1")
    'u_omega_e_cm-1'
    """
    return f"u_{column}"


#: The barrier columns with the energy unit of :mod:`pesflow.units` each is converted to.
BARRIER_UNITS: dict[str, str] = {
    "barrier_kcal_mol": "kcal_mol",
    "barrier_kj_mol": "kj_mol",
    "barrier_cm-1": "cm-1",
    "barrier_ev": "ev",
}


def deviation(column: str, value: float, reference: float, symmetry=None) -> float:
    """``value - reference`` of a quantity; a position of a periodic coordinate kind is
    compared with the equivalent of ``reference`` nearest to it under ``symmetry`` (a
    :class:`pesflow.analysis.symmetry.Symmetry` both curves have; None: only the period).

    >>> from pesflow.analysis.symmetry import Symmetry
    >>> round(deviation("dihedral_e_degree", 123.9, 240.2, Symmetry(mirror=True)), 6)
    4.1
    >>> deviation("r_e_angstrom", 1.5, 1.0)
    0.5
    """
    from pesflow.analysis.symmetry import NONE, position_deviation

    q = QUANTITY.get(column)
    if q is None or q.position_of is None:
        return float(value) - float(reference)
    return position_deviation(q.position_of, float(value), float(reference), symmetry or NONE)


def position_column(kind: str) -> str:
    """Summary column of the minimum's position of a curve of that coordinate kind."""
    return KINDS[kind].minimum_column
