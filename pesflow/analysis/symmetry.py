"""Symmetry of a scanned curve or surface, found from the data, and equivalent positions.

Minima (or maxima) related by a symmetry of the curve are one stationary point: the two
mirror-image minima of hydrogen peroxide's H-O-O-H torsion near 120 and 240 degrees, the
three minima of ethane's 3-fold rotor, the two minima (q1, q2) and (q2, q1) of a symmetric
stretch grid.  This module decides from the energies which symmetry a curve has, gives each
position in a stated canonical form, and compares positions through their nearest
equivalent.  Pure functions of arrays; the coordinate kind's period comes from
:mod:`pesflow.coordinates.kinds`.

Symmetries looked for:

* on a full-circle periodic curve (a dihedral scanned all round): the **mirror**
  E(phi) = E(360 - phi), and an **n-fold rotor** E(phi) = E(phi + 360/n), n = 2, 3, 4, 6;
* on a 2-D grid whose two axes are of one kind and scanned over the same values: the
  **swap** E(q1, q2) = E(q2, q1).

A symmetry holds when, at every scanned point, the energy and the interpolant at the image
agree within the noise floor (:data:`DEFAULT_SYMMETRY_TOL_HARTREE`) plus the interpolant's
own error there, estimated as the difference from the interpolant two degrees lower.  At an
image that is itself a scanned point the interpolant is exact, so a symmetric grid (0, 15,
..., 345 degrees) is compared point against point.

Canonical form (the rule the summary and the stationary-point table state):

* mirror and n-fold: the representative in [0, 180/n] degrees (mirror alone: [0, 180]);
* n-fold alone: in [0, 360/n);
* no symmetry: a periodic value in [0, 360), others unchanged;
* swap: q1 <= q2.

>>> import numpy as np
>>> from pesflow.analysis.curves import analyze_curve
>>> phi = np.arange(0.0, 360.0, 15.0)
>>> e = 0.004 * np.cos(np.radians(phi)) + 0.002 * np.cos(np.radians(2 * phi)) - 150.0
>>> a = analyze_curve(phi, e, periodic=True, unit="degree")
>>> s = curve_symmetry(a.curve, a.spline)
>>> s.mirror, s.fold, round(canonical_position("dihedral", 236.1, s), 1)
(True, 1, 123.9)
>>> round(position_deviation("dihedral", 236.1, 119.8, s), 1)
4.1
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from pesflow.coordinates.kinds import KINDS

#: Energies at symmetry-related points count as equal within this (hartree, about 0.2
#: cm-1): far above the SCF convergence of a point (1e-9 hartree or tighter), far below any
#: difference a chemist would call a different conformer (common practice).
DEFAULT_SYMMETRY_TOL_HARTREE = 1e-6
#: Orders of a rotor tested on a full-circle curve.
ROTOR_ORDERS = (2, 3, 4, 6)


@dataclass(frozen=True)
class Symmetry:
    """The symmetry of one curve or surface.

    Attributes:
        mirror: E(phi) = E(period - phi) on a full-circle periodic curve.
        fold: n of an n-fold rotor, E(phi) = E(phi + period / n); 1 when none.
        swap: E(q1, q2) = E(q2, q1) on a 2-D grid.
    """

    mirror: bool = False
    fold: int = 1
    swap: bool = False

    def common(self, other: Symmetry) -> Symmetry:
        """The symmetry both curves have (what a comparison between them may use)."""
        return Symmetry(
            self.mirror and other.mirror, math.gcd(self.fold, other.fold), self.swap and other.swap
        )

    @property
    def text(self) -> str:
        """A short description (``"mirror"``, ``"mirror, 3-fold"``, ``"q1 <-> q2"``, ``""``)."""
        parts = []
        if self.mirror:
            parts.append("mirror")
        if self.fold > 1:
            parts.append(f"{self.fold}-fold")
        if self.swap:
            parts.append("q1 <-> q2")
        return ", ".join(parts)

    def columns(self) -> dict:
        """The summary row's symmetry columns."""
        return {
            "symmetry_mirror": bool(self.mirror),
            "symmetry_fold": int(self.fold),
            "symmetry_swap": bool(self.swap),
        }

    @classmethod
    def of_row(cls, row) -> Symmetry:
        """The symmetry recorded in a summary (or stationary-point) row; none when absent."""

        def flag(name):
            v = row.get(name, False)
            return bool(v) if isinstance(v, bool | np.bool_) else bool(v == 1 or v is True)

        fold = row.get("symmetry_fold", 1)
        try:
            fold = int(fold) if np.isfinite(float(fold)) else 1
        except (TypeError, ValueError):
            fold = 1
        return cls(flag("symmetry_mirror"), max(fold, 1), flag("symmetry_swap"))


NONE = Symmetry()


def _companion(curve, spline):
    """The interpolant two degrees lower (None when the grid is too short for it)."""
    from pesflow.analysis.curves import interpolant

    k = int(spline.k)
    if k < 3:
        return None
    try:
        return interpolant(curve, order=k - 2)
    except ValueError:
        return None


def _holds(curve, spline, companion, images, tol):
    e_image = spline(images)
    error = np.abs(e_image - companion(images)) if companion is not None else 0.0
    return bool(np.all(np.abs(curve.energy_hartree - e_image) <= tol + error))


def curve_symmetry(curve, spline, *, tolerance_hartree=DEFAULT_SYMMETRY_TOL_HARTREE) -> Symmetry:
    """The symmetry of a 1-D curve (:class:`~pesflow.analysis.curves.Curve` and its spline).

    Only a periodic curve (a dihedral over the full circle) can have one; the mirror is
    phi <-> period - phi and the rotor orders are :data:`ROTOR_ORDERS` (the highest that
    holds is kept).  See the module docstring for the test.
    """
    if not curve.periodic or curve.n_points < 4:
        return NONE
    period = curve.period
    companion = _companion(curve, spline)
    q = curve.q
    mirror = _holds(curve, spline, companion, np.mod(-q, period), tolerance_hartree)
    fold = 1
    for n in ROTOR_ORDERS:
        if _holds(curve, spline, companion, np.mod(q + period / n, period), tolerance_hartree):
            fold = n
    return Symmetry(mirror=mirror, fold=fold)


def surface_symmetry(
    q1, q2, energies_hartree, kinds, *, tolerance_hartree=DEFAULT_SYMMETRY_TOL_HARTREE
) -> Symmetry:
    """The swap symmetry E(q1, q2) = E(q2, q1) of a 2-D grid (axes of one kind, same values).

    Compared point against point on the grid (no interpolation); failed points are skipped.
    """
    q1, q2 = np.asarray(q1, float), np.asarray(q2, float)
    e = np.asarray(energies_hartree, float)
    if kinds[0] != kinds[1] or q1.shape != q2.shape or not np.allclose(q1, q2, atol=1e-9):
        return NONE
    both = np.isfinite(e) & np.isfinite(e.T)
    if both.sum() < 3:
        return NONE
    swap = bool(np.all(np.abs(e - e.T)[both] <= tolerance_hartree))
    return Symmetry(swap=swap)


def _periodic(kind):
    return KINDS[kind].period if kind is not None and kind in KINDS else None


def equivalent_positions(kind, value, symmetry: Symmetry) -> np.ndarray:
    """Every position equivalent to ``value`` under ``symmetry``, within one period
    ([0, period)); for a non-periodic kind just ``[value]``."""
    period = _periodic(kind)
    if period is None or not math.isfinite(value):
        return np.array([value], dtype=float)
    step = period / symmetry.fold
    base = np.array([value, -value] if symmetry.mirror else [value], dtype=float)
    shifts = step * np.arange(symmetry.fold)
    return np.unique(np.mod((base[:, None] + shifts[None, :]).ravel(), period))


def canonical_position(kind, value, symmetry: Symmetry) -> float:
    """The canonical representative of ``value`` (rule in the module docstring).

    >>> canonical_position("dihedral", 236.1, Symmetry(mirror=True))
    123.9
    >>> canonical_position("dihedral", 300.0, Symmetry(mirror=True, fold=3))
    60.0
    """
    period = _periodic(kind)
    if period is None or not math.isfinite(value):
        return value
    step = period / symmetry.fold
    r = float(np.mod(value, step))
    if r >= step * (1.0 - 1e-12):
        r = 0.0
    if symmetry.mirror and r > step / 2:
        r = step - r
    return round(r, 10)


def position_deviation(kind, value, reference, symmetry: Symmetry) -> float:
    """The canonical form of ``value`` minus the position equivalent to ``reference`` that
    lies nearest to it (so the sign goes with the positions as reported).

    For a periodic kind the difference is also taken across the period (350 and 10 degrees
    are 20 degrees apart).  NaN when either is NaN.
    """
    if not (math.isfinite(value) and math.isfinite(reference)):
        return float("nan")
    period = _periodic(kind)
    if period is None:
        return value - reference
    value = canonical_position(kind, value, symmetry)
    d = value - equivalent_positions(kind, reference, symmetry)
    d = (d + period / 2) % period - period / 2
    return float(d[np.argmin(np.abs(d))])


def pair_deviation(value, reference, symmetry: Symmetry) -> tuple[float, float]:
    """``(dq1, dq2)`` of a 2-D position against a reference one, through the swap when the
    surface has it (the pairing with the smaller distance)."""
    a = np.asarray(value, float)
    b = np.asarray(reference, float)
    direct = a - b
    if symmetry.swap and np.all(np.isfinite(direct)):
        swapped = a - b[::-1]
        if np.hypot(*swapped) < np.hypot(*direct):
            return float(swapped[0]), float(swapped[1])
    return float(direct[0]), float(direct[1])


def canonical_pair(value, symmetry: Symmetry) -> tuple[float, float]:
    """A 2-D position in canonical form: q1 <= q2 when the surface has the swap."""
    a, b = (float(x) for x in value)
    if symmetry.swap and math.isfinite(a) and math.isfinite(b) and a > b:
        return b, a
    return a, b
