"""The cause of energies that look noisy: a flag names its cause and the advice that fits.

:func:`pesflow.analysis.curves.noisy_points` only sees that some points stray from a smooth
interpolant of their neighbours.  With what the points table knows beside the energies (the
reference's <S^2>, the SCF attempts of each point, whether the method integrates on a DFT
grid) the cause can be told, in this order:

1. ``scf-solution-change``: a point in the range (or next to it) was replaced by a lower SCF
   solution (the stability analysis lowered it, or the walk went back and kept a lower one),
   or the walk's continuity test (:mod:`pesflow.analysis.continuity`) sees a jump of the
   energy or of <S^2> between neighbours there;
2. ``spin-contamination-onset``: else, <S^2> changes by more than :data:`S2_ONSET_CHANGE`
   across the range.  The unrestricted solution starts to break the spin symmetry there and
   the curvature changes quickly: physical, not numerical;
3. ``scf-solution-change`` again: else, a point lies :data:`SOLUTION_JUMP_HARTREE` or more
   off the interpolant of its neighbours, and :data:`JUMP_OVER_MEDIAN` times the curve's
   median residual;
4. ``dft-grid-noise``: a DFT level with none of that evidence: the integration grid;
5. ``noisy-points``: genuine numerical noise of the SCF.

Pure functions of arrays.

>>> import numpy as np
>>> from pesflow.analysis.flags import Flag
>>> r = np.linspace(0.8, 1.6, 17)
>>> s2 = np.where(r < 1.05, 0.7535, 0.7535 + 1.2 * (r - 1.05))
>>> noisy = Flag("noisy-points", "noisy", (1.1, 1.3))
>>> diagnose_noisy(noisy, r, s2=s2).code
'spin-contamination-onset'
>>> diagnose_noisy(noisy, r, dft=True).code
'dft-grid-noise'
"""

from __future__ import annotations

import numpy as np

from pesflow.analysis.continuity import suspect_points
from pesflow.analysis.flags import Flag

#: A change of <S^2> across the flagged range larger than this is the onset of spin
#: contamination (0.05: five times the 0.01 by which a clean doublet's UHF <S^2> typically
#: exceeds 0.75; common practice).
S2_ONSET_CHANGE = 0.05
#: A point this far (hartree) off the interpolant of its neighbours is a different SCF
#: solution, not noise (SCF noise at conv_tol 1e-10 is far smaller; common practice).
SOLUTION_JUMP_HARTREE = 1e-5
#: ... and this many times the curve's median leave-one-out residual (random noise gives a
#: largest residual about three to four times its median; one point off its curve about eight).
JUMP_OVER_MEDIAN = 5.0

_UNIT = {"angstrom": "A", "degree": "deg"}


def _range_indices(q, positions):
    """Indices of the points of the flagged range, with one neighbour on each side."""
    lo, hi = min(positions), max(positions)
    inside = np.flatnonzero((q >= lo - 1e-9) & (q <= hi + 1e-9))
    if not inside.size:
        return inside
    return np.arange(max(inside[0] - 1, 0), min(inside[-1] + 1, len(q) - 1) + 1)


def _fmt(x):
    return f"{x:.4g}"


def diagnose_noisy(
    flag,
    q,
    *,
    energies_hartree=None,
    s2=None,
    replaced=None,
    residuals_hartree=None,
    dft=False,
    unit="angstrom",
    s2_change=S2_ONSET_CHANGE,
    jump_hartree=SOLUTION_JUMP_HARTREE,
) -> Flag:
    """The ``noisy-points`` flag ``flag`` re-diagnosed by its cause (see the module docstring).

    Args:
        flag: a ``noisy-points`` :class:`~pesflow.analysis.flags.Flag` (its positions are
            the flagged coordinates); any other flag is returned unchanged.
        q: the curve's scanned coordinates, sorted ascending (``unit``).
        energies_hartree: energies at ``q`` (NaN where failed), for the continuity test.
        s2: <S^2> at ``q`` (NaN where not defined, e.g. a restricted closed shell).
        replaced: per point, True when its stored solution replaced another SCF solution
            (stability restart or a walk back that kept a lower energy, by 1e-5 hartree or
            more).
        residuals_hartree: per point, the deviation from the interpolant of its neighbours.
        dft: the level integrates on a DFT grid.
        unit: ``"angstrom"`` or ``"degree"``.
        s2_change, jump_hartree: thresholds (:data:`S2_ONSET_CHANGE`,
            :data:`SOLUTION_JUMP_HARTREE`).
    """
    if flag.code != "noisy-points" or not flag.positions:
        return flag
    q = np.asarray(q, dtype=float)
    label = _UNIT.get(unit, unit)
    lo, hi = min(flag.positions), max(flag.positions)
    where = f"{_fmt(lo)} {label}" if lo == hi else f"{_fmt(lo)}-{_fmt(hi)} {label}"
    idx = _range_indices(q, flag.positions)
    s = np.asarray(s2, dtype=float) if s2 is not None else None
    evidence = []
    if replaced is not None and idx.size and np.any(np.asarray(replaced, bool)[idx]):
        evidence.append("a point there replaced another SCF solution")
    if energies_hartree is not None and idx.size:
        if set(suspect_points(energies_hartree, s)) & set(int(i) for i in idx):
            evidence.append("the walk's continuity test sees a jump in the energy or <S^2>")
    if not evidence and s is not None and idx.size:
        ok = idx[np.isfinite(s[idx])]
        if ok.size >= 2 and np.ptp(s[ok]) > s2_change:
            first = ok[0]
            far = ok[np.argmax(np.abs(s[ok] - s[first]))]
            return Flag(
                "spin-contamination-onset",
                f"spin-contamination onset at {where}: <S^2> goes from {s[first]:.3f} at "
                f"{_fmt(q[first])} {label} to {s[far]:.3f} at {_fmt(q[far])} {label} as "
                "the unrestricted solution starts to break the spin symmetry, so the curve "
                "bends quickly there. The energies are right: this is physical, not numerical "
                "(no SCF setting changes it). For this range consider a multireference method "
                "or a restricted-open-shell reference; numbers that lean on it (Morse fit, "
                "anharmonicity, levels, D_e) carry it",
                flag.positions,
            )
    if not evidence and residuals_hartree is not None and idx.size:
        every = np.abs(np.asarray(residuals_hartree, dtype=float))
        res = np.nan_to_num(every[idx])
        typical = float(np.nanmedian(every)) if np.isfinite(every).any() else 0.0
        # A jump stands out of the curve's own scatter; noise (amplified about tenfold by
        # leave-one-out prediction) does not.
        if res.max(initial=0.0) >= max(jump_hartree, JUMP_OVER_MEDIAN * typical):
            evidence.append(f"a point lies {res.max():.2g} hartree off its neighbours")
    if evidence:
        return Flag(
            "scf-solution-change",
            f"change of SCF solution at {where} ({'; '.join(evidence)}): the curve mixes two "
            "solutions; check the stability of each (engine stability analysis) and rerun "
            "the range with the SCF walked from the lower solution",
            flag.positions,
        )
    if dft:
        return Flag(
            "dft-grid-noise",
            f"DFT integration-grid noise at {where} (energies off a smooth curve by more than "
            "the SCF convergence, no change of solution): raise the engine's "
            "dft_grid_level (e.g. from 3 to 5)",
            flag.positions,
        )
    size = ""
    if residuals_hartree is not None and idx.size:
        size = f" up to {np.nanmax(np.abs(np.asarray(residuals_hartree, float)[idx])):.2g} hartree"
    return Flag(
        "noisy-points",
        f"numerical noise at {where}: energies{size} off a smooth curve, with no change of "
        "SCF solution or of <S^2> there; tighten the SCF convergence (engine "
        "scf_energy_tolerance_hartree)",
        flag.positions,
    )
