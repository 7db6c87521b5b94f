"""Continuity of a walk along a scan: where the SCF may have jumped to another solution.

A point is suspect when its energy misses a cubic through its two neighbours on
each side by far more than the curve's own smoothness explains, when <S^2>
changes abruptly between neighbours, or when the engine saw the character of the
solution change from the previous point (a multireference walk: an orbital rotated
into or out of the active space, a jump in natural occupations).  Pure functions on
arrays in walk order (equal steps assumed, as on a scan grid).

>>> import numpy as np
>>> e = np.cos(np.linspace(0, 1, 12)); e[7:] += 0.01
>>> suspect_points(e)
[5, 6, 7, 8]
"""

from __future__ import annotations

import numpy as np

#: Smallest energy residual (hartree) taken as a jump: 0.3 kcal/mol (common practice:
#: well above SCF noise at conv_tol 1e-10 and DFT grid noise, well below chemistry).
MIN_JUMP_HARTREE = 5e-4
#: Residuals this many times the walk's lower-quartile residual are jumps (a quartile, not
#: the median: one jump spoils four residuals, half of a short walk's).
JUMP_FACTOR = 20.0
#: A change of <S^2> between neighbours larger than this is a change of solution.
MAX_S2_STEP = 0.25
#: A natural occupation of an active orbital that changes by more than this between
#: neighbours is a jump.  Measured with PySCF 2.14 (N2 CAS(6,6)/6-31G and cc-pVDZ) where
#: the bonds break: at most 0.12 per 0.1 A step and 0.3 per 0.3 A step, a smooth
#: change; an orbital swapped into the space changes an occupation by about 1 or more.
MAX_OCCUPATION_STEP = 0.5

# Lagrange weights predicting f(0) from f(-2), f(-1), f(1), f(2) with a cubic.
_WEIGHTS = np.array([-1.0, 4.0, 4.0, -1.0]) / 6.0


def energy_residuals(energies_hartree) -> np.ndarray:
    """Residual of each interior point against the cubic through its four neighbours
    (NaN at the two points at each end and next to failed points)."""
    e = np.asarray(energies_hartree, dtype=float)
    out = np.full(len(e), np.nan)
    for i in range(2, len(e) - 2):
        window = e[[i - 2, i - 1, i + 1, i + 2]]
        out[i] = e[i] - float(_WEIGHTS @ window)
    return out


def suspect_points(
    energies_hartree,
    s2=None,
    *,
    min_jump_hartree=MIN_JUMP_HARTREE,
    factor=JUMP_FACTOR,
    max_s2_step=MAX_S2_STEP,
    changes=None,
) -> list[int]:
    """Indices of the points around a discontinuity (sorted, unique).

    ``s2`` is the <S^2> of each point (NaN for restricted closed shells); ``changes``
    is per point True when its solution changed character from the previous point's
    (both are then suspect).

    >>> suspect_points(np.zeros(6), changes=[False, False, False, True, False, False])
    [2, 3]
    """
    e = np.asarray(energies_hartree, dtype=float)
    flagged = set()
    r = np.abs(energy_residuals(e))
    finite = r[np.isfinite(r)]
    if finite.size:
        threshold = min_jump_hartree
        if finite.size >= 10:  # enough points for the walk's own smoothness to say more
            threshold = max(threshold, factor * float(np.percentile(finite, 25)))
        flagged.update(int(i) for i in np.flatnonzero(np.nan_to_num(r) > threshold))
    if s2 is not None:
        s = np.asarray(s2, dtype=float)
        steps = np.abs(np.diff(s))
        for i in np.flatnonzero(np.nan_to_num(steps) > max_s2_step):
            flagged.update((int(i), int(i) + 1))
    if changes is not None:
        for i in np.flatnonzero(np.asarray(changes, dtype=bool)):
            flagged.update(j for j in (int(i) - 1, int(i)) if j >= 0)
    return sorted(flagged)


def occupation_jumps(occupations, max_step) -> list[int]:
    """Indices i where the natural occupations jump from point i-1 to point i by more
    than ``max_step`` in one occupation (lists of unequal length always jump; None
    entries, failed points, are skipped).

    >>> occupation_jumps([[2.0, 0.0], [1.9, 0.1], [1.0, 1.0], None, [1.0, 1.0]], 0.3)
    [2]
    """
    jumps, previous = [], None
    for i, occ in enumerate(occupations):
        if occ is None:
            previous = None
            continue
        occ = np.asarray(occ, dtype=float)
        if previous is not None and (
            len(occ) != len(previous) or float(np.max(np.abs(occ - previous))) > max_step
        ):
            jumps.append(i)
        previous = occ
    return jumps


def segment(flagged: list[int], n: int, margin: int = 2) -> tuple[int, int] | None:
    """The index range [lo, hi] to redo around the flagged points (None if none)."""
    if not flagged:
        return None
    return max(0, min(flagged) - margin), min(n - 1, max(flagged) + margin)
