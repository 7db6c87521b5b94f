"""Physical constants and unit conversions, in one place.

Internal conventions: lengths in angstrom and angles in degrees at every boundary
(spec, store, tables); energies in hartree; atomic units inside the analysis of a
curve.  Every constant is derived from the CODATA values shipped with
:mod:`scipy.constants`, so that the conversions have one pinned source.
Isotope masses come from PySCF's element table (``pyscf.data.elements``), which
lists the exact mass of the most abundant isotope of each element.

>>> round(HARTREE_TO_EV, 6)
27.211386
"""

import math

import scipy.constants as _sc

_pc = _sc.physical_constants

#: 1 bohr in angstrom (CODATA, via scipy.constants).
BOHR_ANGSTROM = _pc["Bohr radius"][0] * 1e10
#: 1 angstrom in bohr.
ANGSTROM_BOHR = 1.0 / BOHR_ANGSTROM
#: 1 hartree in electronvolt.
HARTREE_TO_EV = _pc["Hartree energy in eV"][0]
#: 1 hartree in cm-1 (wavenumber).
HARTREE_TO_CM1 = _pc["hartree-inverse meter relationship"][0] / 100.0
#: 1 hartree in kJ/mol.
HARTREE_TO_KJ_MOL = _pc["Hartree energy"][0] * _sc.N_A / 1000.0
#: 1 hartree in kcal/mol (thermochemical calorie, 4.184 J).
HARTREE_TO_KCAL_MOL = HARTREE_TO_KJ_MOL / 4.184
#: 1 hartree in attojoule (1 aJ = 1 mdyn A).
HARTREE_TO_AJ = _pc["Hartree energy"][0] * 1e18
#: 1 hartree/bohr^2 in mdyn/A (1 mdyn/A = 100 N/m).
HARTREE_BOHR2_TO_MDYN_ANGSTROM = _pc["Hartree energy"][0] / (BOHR_ANGSTROM * 1e-10) ** 2 / 100.0
#: 1 unified atomic mass unit (dalton) in electron masses.
AMU_TO_ME = _pc["atomic mass constant"][0] / _pc["electron mass"][0]
#: 1 degree in radian.
DEGREE = _sc.degree

#: Energy units a report or a table may ask for, as factors from hartree.
ENERGY_FACTORS = {
    "hartree": 1.0,
    "ev": HARTREE_TO_EV,
    "kcal_mol": HARTREE_TO_KCAL_MOL,
    "kj_mol": HARTREE_TO_KJ_MOL,
    "cm-1": HARTREE_TO_CM1,
}


def convert_energy(value_hartree, unit):
    """Convert an energy (or an array of energies) from hartree to ``unit``.

    ``unit`` is one of ``hartree``, ``ev``, ``kcal_mol``, ``kj_mol``, ``cm-1``.

    >>> round(convert_energy(1.0, "kcal_mol"), 4)
    627.5095
    """
    try:
        factor = ENERGY_FACTORS[unit]
    except KeyError:
        allowed = ", ".join(ENERGY_FACTORS)
        raise ValueError(f"unknown energy unit {unit!r}; allowed: {allowed}") from None
    return value_hartree * factor


def isotope_mass(symbol):
    """Exact mass (in dalton) of the most abundant isotope of element ``symbol``.

    Taken from PySCF's element table, never an integer mass number.

    >>> isotope_mass("H")
    1.007825
    """
    from pyscf.data import elements

    z = elements.charge(symbol)
    if z <= 0:
        raise ValueError(f"no isotope mass for {symbol!r}")
    return float(elements.COMMON_ISOTOPE_MASSES[z])


def format_duration(seconds) -> str:
    """A duration in the unit that reads best: seconds, minutes or hours (``""`` for NaN).

    >>> [format_duration(s) for s in (4.356, 0.2, 754, 5 * 3600 + 60)]
    ['4.4 s', '0.2 s', '13 min', '5.0 h']
    """
    try:
        v = float(seconds)
    except (TypeError, ValueError):
        return ""
    if not math.isfinite(v):
        return ""
    if v < 60:
        return f"{v:.2g} s" if v < 10 else f"{v:.0f} s"
    if v < 3600:
        return f"{v / 60:.0f} min" if v >= 600 else f"{v / 60:.1f} min"
    return f"{v / 3600:.1f} h" if v < 36000 else f"{v / 3600:.0f} h"
