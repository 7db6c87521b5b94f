"""Interaction curves of a two-fragment complex, with and without counterpoise correction.

Pure functions on arrays.  At each separation R the interaction energy is

    E_int(R)    = E_AB(R) - E_A - E_B                     (uncorrected; fragments in own basis)
    E_int^CP(R) = E_AB(R) - E_A^AB(R) - E_B^AB(R)         (counterpoise corrected)

where E_X^AB is fragment X computed in the complex's full basis, the other fragment's atoms
as ghosts (Boys & Bernardi, Mol. Phys. 19, 553 (1970)), and the basis-set superposition
error is BSSE(R) = E_int^CP(R) - E_int(R) = E_A + E_B - E_A^AB - E_B^AB (>= 0 as a rule:
each fragment is lowered by the partner's functions, so the uncorrected curve is too deep).  The
counterpoise-corrected curve's minimum is found on the same interpolant as every curve
(:mod:`pesflow.analysis.curves`); its well depth is
-E_int^CP there.

>>> row = interaction_summary([3.0, 3.5, 4.0, 5.0], [-1e-4, -3e-4, -2e-4, -1e-4],
...                           [-5e-5, -2e-4, -1.5e-4, -0.8e-4])
>>> 3.0 < row["r_min_cp_angstrom"] < 4.0 and row["well_depth_cp_kcal_mol"] > 0
True
"""

from __future__ import annotations

import numpy as np

from pesflow.analysis.curves import interpolant, prepare_curve, stationary_points
from pesflow.units import convert_energy

#: Summary columns this module fills (registered in :mod:`pesflow.analysis.quantities`).
INTERACTION_COLUMNS = (
    "r_min_cp_angstrom",
    "well_depth_cp_kcal_mol",
    "well_depth_cp_cm-1",
    "well_depth_kcal_mol",
    "bsse_at_min_kcal_mol",
)


def interaction_summary(r_angstrom, e_int_hartree, e_int_cp_hartree) -> dict:
    """Minimum of the corrected interaction curve, well depths and the BSSE there.

    Inputs: separations (angstrom) and the uncorrected and corrected interaction energies
    (hartree; NaN where a point is missing).  Returns the :data:`INTERACTION_COLUMNS`
    (NaN when the corrected curve has no bracketed minimum): position of the corrected
    minimum, corrected well depth (kcal/mol, cm-1), uncorrected well depth at its own
    minimum (kcal/mol), and the BSSE at the corrected minimum (kcal/mol, from the
    interpolated BSSE curve).
    """
    out = dict.fromkeys(INTERACTION_COLUMNS, float("nan"))
    r = np.asarray(r_angstrom, dtype=float)
    e_int = np.asarray(e_int_hartree, dtype=float)
    e_cp = np.asarray(e_int_cp_hartree, dtype=float)
    cp_min = _lowest_minimum(r, e_cp)
    if cp_min is not None:
        out["r_min_cp_angstrom"] = cp_min[0]
        out["well_depth_cp_kcal_mol"] = float(convert_energy(-cp_min[1], "kcal_mol"))
        out["well_depth_cp_cm-1"] = float(convert_energy(-cp_min[1], "cm-1"))
        both = np.isfinite(e_int) & np.isfinite(e_cp)
        if both.sum() >= 2:
            bsse = prepare_curve(r[both], (e_cp - e_int)[both])
            out["bsse_at_min_kcal_mol"] = float(
                convert_energy(interpolant(bsse)(cp_min[0]), "kcal_mol")
            )
    raw_min = _lowest_minimum(r, e_int)
    if raw_min is not None:
        out["well_depth_kcal_mol"] = float(convert_energy(-raw_min[1], "kcal_mol"))
    return out


def _lowest_minimum(r, e):
    """(position, energy) of the lowest bracketed minimum of a curve, or None."""
    ok = np.isfinite(e)
    if ok.sum() < 3:
        return None
    curve = prepare_curve(r[ok], e[ok])
    minima, _ = stationary_points(curve, interpolant(curve))
    if not minima:
        return None
    best = min(minima, key=lambda p: p.energy_hartree)
    return best.q, best.energy_hartree
