"""Stationary points of a one-dimensional curve E(q), and checks of the grid it was sampled on.

A *curve* is one scan coordinate ``q`` (angstrom for a distance, degree for an angle or a
dihedral) against the energy in hartree.  Everything here is a pure function of arrays: no
file, no store, no spec.

Choice of interpolant
---------------------
The curve is interpolated by a **quintic B-spline through every scanned point** with
not-a-knot end conditions (:func:`scipy.interpolate.make_interp_spline`, ``k=5``), or with
periodic end conditions for a dihedral that covers the full circle.  Why quintic:

* an interpolating spline of degree k reproduces the function to O(h^(k+1)) and its second
  derivative to O(h^(k-1)).  A cubic spline therefore gives the force constant only to O(h^2):
  on a 15-point grid spanning +-0.2 A around the minimum of a hydrogen-fluoride-like Morse
  curve (a = 2.2 1/A) that is a 0.2 % error in k, above the 0.1 % we want.  The quintic spline
  on the same grid gives r_e to ~1e-8 A and k to ~1e-6 (relative), see the unit tests;
* it uses the whole grid (no window size or fit degree to choose), so the same interpolant
  serves for minima, maxima, the Morse start guess and the potential of the nuclear
  Schroedinger equation;
* SCF energies are smooth to ~1e-9 hartree, so an interpolant (not a least-squares fit) is
  appropriate; noisy grids are detected separately (:func:`noisy_points`) instead of being
  smoothed silently.

With fewer than 6 points the degree drops to n - 1 (odd degrees preferred), and the grid is
then nearly always flagged as too coarse.

The same construction two degrees higher (septic; or two lower, or a parabola, on short
grids) gives a second estimate of every stationary point: where the two disagree by more than
a tolerance the grid does not resolve that point, and the flag says between which scanned
points to add more and at what step (:func:`grid_quality`).  Noise is told apart from coarse
spacing by leave-one-out prediction: a higher degree predicts a left-out point of a smooth
curve differently, a noisy point by the same amount whatever the degree (:func:`noisy_points`).

Minima and maxima are taken from the *grid* first (a scanned point lower, or higher, than both
neighbours, :func:`scipy.signal.find_peaks`), then refined to the stationary point of the
spline inside that bracket.  A minimum needs a higher scanned point on each side; when the
lowest scanned energy is at an end of a non-periodic scan, the minimum is **not bracketed** and
is never reported as a minimum.

>>> import numpy as np
>>> r = np.linspace(0.72, 1.12, 15)
>>> e = 0.22 * (1 - np.exp(-2.2 * (r - 0.92))) ** 2 - 100.0
>>> a = analyze_curve(r, e)
>>> round(a.minimum.q, 6), a.minimum_bracketed
(0.92, True)
"""

from dataclasses import dataclass, field

import numpy as np
from scipy.interpolate import BSpline, PPoly, make_interp_spline
from scipy.signal import find_peaks

from pesflow.analysis.flags import Flag

#: Default degree of the interpolating spline (see the module docstring).
DEFAULT_ORDER = 5
#: A coarse grid is flagged when the force constants from the main and the companion
#: interpolant (see :func:`grid_quality`) differ by more than this fraction (1 %).
DEFAULT_CURVATURE_RTOL = 0.01
#: ... or when their stationary-point positions differ by more than this, per coordinate unit.
DEFAULT_POSITION_TOL = {"angstrom": 1e-3, "degree": 0.1}
#: ... or when their stationary-point energies differ by more than this (0.01 kcal/mol).
DEFAULT_ENERGY_TOL_HARTREE = 1.6e-5
#: A point is reported as noisy when it deviates from the interpolants of the other points by
#: more than this (hartree), whatever their degree (:func:`noisy_points`).
#: SCF energies converged to 1e-9 hartree are smooth far below it (common practice).
DEFAULT_NOISE_FLOOR_HARTREE = 1e-7
#: ... and by more than this many times the interpolants' own error at that spacing, estimated
#: by how much the leave-one-out prediction changes between spline degrees 5 and 7.  Values
#: from 2 to 3 tell smooth from noisy on a set of trial curves (Morse stretches of 7-30
#: points, torsions at 5-30 degree spacing, HF H-O-O-H torsions; the same with random noise of
#: 3e-6 hartree or steps of 1e-5 hartree): 1.5 flags a smooth 9-point stretch, 4 misses the
#: noise on a 21-point one.  2.5 sits in the middle.
NOISE_MARGIN = 2.5


@dataclass(frozen=True)
class Curve:
    """A cleaned one-dimensional curve.

    Attributes:
        q: scanned coordinates, sorted ascending (for a periodic curve wrapped into
            ``[0, period)``), failed points removed.  Unit: ``unit``.
        energy_hartree: energies at ``q`` (all finite).
        periodic: whether the curve is joined end to end (a dihedral over the full circle).
        period: the period in ``unit`` (360 for a dihedral), NaN when not periodic.
        unit: ``"angstrom"`` or ``"degree"`` (used in advice texts and tolerances).
        failed_q: coordinates of the points whose energy was NaN (failed calculations).
        notes: warnings found while cleaning (duplicates, failed points).
    """

    q: np.ndarray
    energy_hartree: np.ndarray
    periodic: bool = False
    period: float = float("nan")
    unit: str = "angstrom"
    failed_q: tuple = ()
    notes: tuple = ()

    @property
    def n_points(self):
        """Number of usable (finite-energy) points."""
        return len(self.q)

    @property
    def n_failed(self):
        """Number of points excluded because their energy is NaN."""
        return len(self.failed_q)


@dataclass(frozen=True)
class StationaryPoint:
    """A minimum or maximum of the interpolated curve.

    Attributes:
        kind: ``"minimum"`` or ``"maximum"``.
        q: position, in the curve's unit.
        energy_hartree: interpolated energy there.
        curvature: d2E/dq2 there, hartree per unit squared (hartree/A^2 or hartree/degree^2).
        grid_index: index (into ``Curve.q``) of the scanned point that brackets it.
    """

    kind: str
    q: float
    energy_hartree: float
    curvature: float
    grid_index: int


@dataclass(frozen=True)
class CurveAnalysis:
    """Result of :func:`analyze_curve`.

    Attributes:
        curve: the cleaned curve.
        spline: the interpolant (a :class:`scipy.interpolate.BSpline`; periodic ones extrapolate
            periodically).
        minima, maxima: bracketed stationary points, sorted by position.
        minimum: the lowest bracketed minimum, or None.
        minimum_bracketed: True when ``minimum`` exists and no scanned point at an end of the
            scan is lower than it (i.e. the lowest energy of the scan is bracketed).
        flags: warnings and advice, one sentence each.
    """

    curve: Curve
    spline: BSpline
    minima: tuple
    maxima: tuple
    minimum: StationaryPoint | None
    minimum_bracketed: bool
    flags: tuple = field(default=())


def wrap_degrees(values_degree, period=360.0):
    """Wrap angles into ``[0, period)``.

    >>> wrap_degrees([-60.0, 360.0, 370.0]).tolist()
    [300.0, 0.0, 10.0]
    """
    wrapped = np.mod(np.asarray(values_degree, dtype=float), period)
    # np.mod returns (nearly) `period` for tiny negative inputs: fold those onto 0.
    return np.where(wrapped >= period * (1.0 - 1e-12), wrapped - period, wrapped).clip(0.0)


def covers_full_circle(values_degree, period=360.0):
    """True when a dihedral scan covers the whole circle evenly enough to be joined end to end.

    The gap across the seam (from the largest angle back to the smallest plus one period) must
    not exceed 1.5 times the largest step between neighbouring scanned angles.

    >>> covers_full_circle(np.arange(0, 360, 30))
    True
    >>> covers_full_circle(np.arange(0, 181, 30))
    False
    """
    q = np.unique(wrap_degrees(values_degree, period))
    if len(q) < 3:
        return False
    seam = q[0] + period - q[-1]
    return bool(seam <= 1.5 * np.max(np.diff(q)) + 1e-9)


def prepare_curve(values, energies_hartree, *, periodic=False, period=360.0, unit="angstrom"):
    """Clean scanned arrays into a :class:`Curve`.

    Args:
        values: scanned coordinates (angstrom or degree, see ``unit``).
        energies_hartree: energies; NaN marks a failed point, which is excluded and counted.
        periodic: join the ends (a dihedral over the full circle); coordinates are then
            wrapped into ``[0, period)``.
        period: period of a periodic coordinate, in ``unit`` (default 360 degrees).
        unit: ``"angstrom"`` or ``"degree"``.

    Returns:
        A :class:`Curve` sorted by coordinate.  Repeated coordinates (e.g. 0 and 360 degrees)
        are merged; a note is added when their energies disagree by more than 1e-8 hartree.
    """
    q = np.asarray(values, dtype=float).ravel()
    e = np.asarray(energies_hartree, dtype=float).ravel()
    if q.shape != e.shape:
        raise ValueError(f"values ({q.size}) and energies ({e.size}) differ in length")
    if not np.all(np.isfinite(q)):
        raise ValueError("scan coordinates must be finite")
    notes = []
    failed = ~np.isfinite(e)
    failed_q = tuple(float(x) for x in np.sort(q[failed]))
    if failed_q:
        where = ", ".join(f"{x:g}" for x in failed_q)
        notes.append(
            Flag(
                "failed-points",
                f"{len(failed_q)} failed point(s) excluded "
                f"(at {where} {_UNIT_LABEL.get(unit, unit)})",
                failed_q,
            )
        )
    q, e = q[~failed], e[~failed]
    if periodic:
        q = wrap_degrees(q, period)
    order = np.argsort(q, kind="stable")
    q, e = q[order], e[order]
    # Merge repeated coordinates (0 and 360 degrees, or a point computed twice).
    uq, start = np.unique(np.round(q, 9), return_index=True)
    if len(uq) < len(q):
        groups = np.split(np.arange(len(q)), start[1:])
        spread = max(np.ptp(e[g]) for g in groups)
        if spread > 1e-8:
            notes.append(
                Flag(
                    "repeated-points",
                    f"repeated coordinates with energies differing by up to {spread:.2e} "
                    "hartree; the first of each was kept",
                )
            )
        q, e = q[start], e[start]
    return Curve(
        q=q,
        energy_hartree=e,
        periodic=bool(periodic),
        period=float(period) if periodic else float("nan"),
        unit=unit,
        failed_q=failed_q,
        notes=tuple(notes),
    )


def _degree_for(n_points, order, periodic):
    """Highest odd spline degree <= ``order`` that ``n_points`` points support."""
    available = n_points - 1 if not periodic else n_points  # periodic adds the closing point
    k = min(order, available)
    if k > 2 and k % 2 == 0:  # three points still make a parabola
        k -= 1
    return max(k, 1)


def interpolant(curve, order=DEFAULT_ORDER):
    """Interpolating B-spline of a :class:`Curve` (degree ``order``, or lower on short grids).

    Non-periodic curves use not-a-knot end conditions; periodic ones close the circle by
    appending the first point one period later and use periodic end conditions, so the
    spline extrapolates periodically.
    """
    q, e = curve.q, curve.energy_hartree
    if len(q) < 2:
        raise ValueError("a curve needs at least two finite points")
    k = _degree_for(len(q), order, curve.periodic)
    if curve.periodic:
        qx = np.append(q, q[0] + curve.period)
        ex = np.append(e, e[0])
        return make_interp_spline(qx, ex, k=k, bc_type="periodic")
    return make_interp_spline(q, e, k=k)


def _critical_points(spline, lo, hi):
    """Roots of the spline's first derivative inside [lo, hi] (the spline's base interval)."""
    roots = PPoly.from_spline(spline.derivative()).roots(extrapolate=False)
    roots = np.unique(roots[np.isfinite(roots)])
    return roots[(roots >= lo) & (roots <= hi)]


def stationary_points(curve, spline):
    """Bracketed minima and maxima of ``curve``, refined on ``spline``.

    A minimum (maximum) is a scanned point lower (higher) than both neighbours — for a periodic
    curve the neighbours wrap around.  Its position is the stationary point of the spline
    between those neighbours with the right sign of curvature (the lowest, or highest, if
    several).  Returns ``(minima, maxima)``, tuples of :class:`StationaryPoint` sorted by q.
    """
    q, e = curve.q, curve.energy_hartree
    n = len(q)
    if n < 3:
        return (), ()
    if curve.periodic:
        # Tile three copies so that find_peaks sees neighbours across the seam.
        tiled = np.concatenate([e, e, e])
        found = {
            "minimum": [i - n for i in find_peaks(-tiled)[0] if n <= i < 2 * n],
            "maximum": [i - n for i in find_peaks(tiled)[0] if n <= i < 2 * n],
        }
        lo, hi = q[0], q[0] + curve.period
    else:
        found = {"minimum": list(find_peaks(-e)[0]), "maximum": list(find_peaks(e)[0])}
        lo, hi = q[0], q[-1]
    roots = _critical_points(spline, lo, hi)
    curv = spline(roots, 2) if len(roots) else np.array([])
    result = {"minimum": [], "maximum": []}
    for kind, indices in found.items():
        sign = 1.0 if kind == "minimum" else -1.0
        for i in indices:
            left, right = _neighbours(curve, i)
            cand = []
            for r, c in zip(roots, curv, strict=True):
                for shift in (0.0, -curve.period, curve.period) if curve.periodic else (0.0,):
                    if left < r + shift < right and sign * c > 0:
                        cand.append(r)
            if cand:
                cand = np.asarray(cand)
                best = cand[np.argmin(sign * spline(cand))]
            else:  # a flat bracket: fall back to the scanned point itself
                best = q[i]
            if curve.periodic:
                best = float(wrap_degrees(best, curve.period))
            result[kind].append(
                StationaryPoint(
                    kind=kind,
                    q=float(best),
                    energy_hartree=float(spline(best)),
                    curvature=float(spline(best, 2)),
                    grid_index=int(i),
                )
            )
    minima = tuple(sorted(result["minimum"], key=lambda p: p.q))
    maxima = tuple(sorted(result["maximum"], key=lambda p: p.q))
    return minima, maxima


def _neighbours(curve, i):
    """Coordinates of the scanned neighbours of point i (unwrapped across a periodic seam)."""
    q, n = curve.q, len(curve.q)
    if not curve.periodic:
        return q[i - 1], q[i + 1]
    left = q[i - 1] if i > 0 else q[-1] - curve.period
    right = q[i + 1] if i < n - 1 else q[0] + curve.period
    return left, right


_UNIT_LABEL = {"angstrom": "A", "degree": "deg"}


def _fmt(x):
    return f"{x:.4g}" if abs(x) < 100 else f"{x:.1f}"


def _periodic_delta(a, b, curve):
    """a - b, folded into (-period/2, period/2] on a periodic curve."""
    d = a - b
    if curve.periodic:
        d = (d + curve.period / 2) % curve.period - curve.period / 2
    return d


def grid_quality(
    curve,
    points,
    *,
    order=DEFAULT_ORDER,
    curvature_rtol=DEFAULT_CURVATURE_RTOL,
    position_tol=None,
    energy_tol_hartree=DEFAULT_ENERGY_TOL_HARTREE,
):
    """Flag stationary points that the grid does not resolve, with advice where to add points.

    Each point in ``points`` (found with :func:`stationary_points` on the spline of degree
    ``order``, lowered on short grids) is located again on a *companion* interpolant: the
    spline two degrees higher when the grid has enough points (their difference estimates the
    error of the main spline), else two degrees lower, else (4 points) the parabola through the
    three scanned points around it.  A flag is raised when the two positions differ by more
    than ``position_tol`` (default 1e-3 A or 0.1 degree), the energies by more than
    ``energy_tol_hartree`` (default 1.6e-5 hartree = 0.01 kcal/mol), or, for minima, the
    curvatures by more than ``curvature_rtol`` (default 1 %).  A minimum with fewer than two
    scanned points on one side is flagged too.

    Returns a list of advice texts such as ``"grid too coarse near the minimum at 1.1 A (its
    force constant changes by 3.2 % with the interpolation order): add points between 1.05
    and 1.15 A, step 0.01 A or finer"``.  The step assumes the curvature error falls as
    step^(k-1) for a spline of degree k, with a 0.7 safety factor.
    """
    if position_tol is None:
        position_tol = DEFAULT_POSITION_TOL.get(curve.unit, 1e-3)
    flags = []
    if not points:
        return flags
    q, e, unit = curve.q, curve.energy_hartree, _UNIT_LABEL.get(curve.unit, curve.unit)
    k_main = _degree_for(len(q), order, curve.periodic)
    companion, power = None, 2.0
    if _degree_for(len(q), k_main + 2, curve.periodic) == k_main + 2:
        companion, power = interpolant(curve, order=k_main + 2), float(k_main - 1)
    elif k_main >= 5:
        companion, power = interpolant(curve, order=k_main - 2), float(k_main - 3)
    for p in points:
        i = p.grid_index
        left, right = _neighbours(curve, i)
        if companion is not None:
            q_c, e_c, c_c = _refine_on(companion, p, left, right, curve)
        else:
            # Too few points for two spline degrees: a parabola through the bracket.
            x = np.array([left, q[i], right]) - q[i]
            y = np.array([e[(i - 1) % len(e)], e[i], e[(i + 1) % len(e)]])
            c2, c1, c0 = np.polyfit(x, y, 2)
            q_c, e_c, c_c = q[i] - c1 / (2 * c2), c0 - c1**2 / (4 * c2), 2 * c2
        reasons, ratios = [], [1.0]
        if not np.isfinite(q_c):
            reasons.append("the companion interpolant has no such stationary point there")
            ratios.append(4.0)
        else:
            dq = abs(_periodic_delta(q_c, p.q, curve))
            de = abs(e_c - p.energy_hartree)
            rel = abs(c_c - p.curvature) / abs(p.curvature) if p.curvature else np.inf
            if dq > position_tol:
                reasons.append(f"its position moves by {dq:.2g} {unit}")
            if de > energy_tol_hartree:
                reasons.append(f"its energy by {de:.2g} hartree")
            # The energy error falls faster than the step squared: it does not set the step.
            ratios.append(dq / position_tol)
            if p.kind == "minimum":
                if rel > curvature_rtol:
                    reasons.append(f"its force constant by {100 * rel:.2g} %")
                ratios.append(rel / curvature_rtol)
        if reasons:
            reasons[-1] += " with the interpolation order"
        if p.kind == "minimum" and not curve.periodic:
            n_side = min(int(np.sum(q < p.q)), int(np.sum(q > p.q)))
            if n_side < 2:
                reasons.append(f"only {n_side} scanned point on one side")
        if not reasons:
            continue
        step = (
            min(p.q - left, right - p.q)
            if not curve.periodic
            else min(
                abs(_periodic_delta(p.q, left, curve)), abs(_periodic_delta(right, p.q, curve))
            )
        )
        new_step = max(0.7 * step / max(ratios) ** (1.0 / power), step / 8.0)
        flags.append(
            Flag(
                "grid-coarse",
                f"grid too coarse near the {p.kind} at {_fmt(p.q)} {unit} "
                f"({', '.join(reasons)}): add points between "
                f"{_fmt(left)} and {_fmt(right)} {unit}, step {new_step:.2g} {unit} or finer",
                (p.q,),
            )
        )
    return flags


def _refine_on(spline, p, left, right, curve):
    """Stationary point of the same kind as ``p`` on another spline, within (left, right)."""
    if curve.periodic:
        lo, hi = curve.q[0], curve.q[0] + curve.period
    else:
        lo, hi = curve.q[0], curve.q[-1]
    roots = _critical_points(spline, lo, hi)
    sign = 1.0 if p.kind == "minimum" else -1.0
    shifts = (0.0, -curve.period, curve.period) if curve.periodic else (0.0,)
    cand = [
        r + s for r in roots for s in shifts if left < r + s < right and sign * spline(r, 2) > 0
    ]
    if not cand:
        return np.inf, np.inf, np.inf
    cand = np.asarray(cand)
    # The stationary point nearest the reference one, not merely the lowest.
    best = cand[np.argmin(np.abs(_periodic_delta(cand, p.q, curve)))]
    return float(best), float(spline(best)), float(spline(best, 2))


def leave_one_out_residuals(curve, order=DEFAULT_ORDER):
    """Deviation of each scanned point from the spline through all the other points (hartree).

    Returns an array like ``curve.q``; entries that cannot be predicted (the two ends of a
    non-periodic curve, or too few points left for degree ``order``) are NaN.
    """
    q, e = curve.q, curve.energy_hartree
    n = len(q)
    res = np.full(n, np.nan)
    need = order + 1 if not curve.periodic else order
    if n - 1 < need:
        return res
    inner = range(n) if curve.periodic else range(1, n - 1)
    for i in inner:
        keep = np.arange(n) != i
        rest = Curve(
            q=q[keep], energy_hartree=e[keep], periodic=curve.periodic, period=curve.period
        )
        try:
            res[i] = e[i] - float(interpolant(rest, order=order)(q[i]))
        except ValueError:  # too few points left for a periodic spline of this degree
            res[i] = np.nan
    return res


def noisy_points(curve, *, order=DEFAULT_ORDER, noise_floor_hartree=DEFAULT_NOISE_FLOOR_HARTREE):
    """Scanned points that look noisy (not explained by a smooth curve at this spacing).

    Each point is predicted from all the others twice, by the spline of degree ``order`` and
    by the spline two degrees higher (leave-one-out).  For a smooth curve the two predictions
    miss by the interpolants' own error at this spacing, and the higher degree misses by a
    different amount (much less on a fine grid, about as much but elsewhere on a coarse one):
    their difference estimates how far off an interpolant may be there.  A point whose own
    energy is off (noise, or another SCF solution) is missed by both by the same amount, with
    the same sign, whatever the degree.  So a point is noisy when both residuals agree in
    sign, the smaller exceeds ``noise_floor_hartree``, and it exceeds
    :data:`NOISE_MARGIN` times the difference of the two (the largest difference at the point
    and its two neighbours, so that a chance agreement of the two interpolants at one point
    does not count).  The threshold therefore scales with the error the interpolant is
    expected to have at that spacing: a steep, coarsely sampled torsion raises nothing, a step
    of 1e-5 hartree on a point of a reasonable grid is found.  Short curves (fewer than
    ``order + 4`` points; ``order + 3`` periodic) compare degrees ``order - 2`` and ``order``.

    An outlier also spoils the prediction of its neighbours, so the worst point is removed and
    the rest looked at again (at most a third of the points, and ten).

    Returns ``(indices, residuals_hartree)``: the indices into ``curve.q`` of the noisy points
    and the leave-one-out residuals of every point at degree ``order`` (NaN where not
    computable).
    """
    original = np.arange(curve.n_points)
    work, flagged, first = curve, [], None
    for _ in range(max(1, min(curve.n_points // 3, 10))):
        low, high = leave_one_out_residuals(work, order), leave_one_out_residuals(work, order + 2)
        if first is None:
            first = low
        if np.all(np.isnan(high)):  # too few points for the higher degree
            low, high = leave_one_out_residuals(work, order - 2), low
        common = np.where(np.sign(low) == np.sign(high), np.minimum(np.abs(low), np.abs(high)), 0.0)
        expected = _neighbourhood_max(np.abs(low - high), work.periodic)
        with np.errstate(invalid="ignore"):
            bad = (common > noise_floor_hartree) & (common > NOISE_MARGIN * expected)
        if not bad.any():
            break
        j = int(np.nanargmax(np.where(bad, common, np.nan)))
        flagged.append(int(original[j]))
        keep = np.arange(work.n_points) != j
        original = original[keep]
        work = Curve(
            q=work.q[keep],
            energy_hartree=work.energy_hartree[keep],
            periodic=work.periodic,
            period=work.period,
            unit=work.unit,
        )
    return sorted(flagged), first


def _neighbourhood_max(values, periodic):
    """The largest of each value and its two neighbours (NaN counts as 0)."""
    v = np.where(np.isnan(values), 0.0, values)
    if periodic:
        return np.maximum(v, np.maximum(np.roll(v, 1), np.roll(v, -1)))
    out = v.copy()
    out[1:] = np.maximum(out[1:], v[:-1])
    out[:-1] = np.maximum(out[:-1], v[1:])
    return out


def analyze_curve(
    values,
    energies_hartree,
    *,
    periodic=False,
    period=360.0,
    unit="angstrom",
    order=DEFAULT_ORDER,
    curvature_rtol=DEFAULT_CURVATURE_RTOL,
    position_tol=None,
    energy_tol_hartree=DEFAULT_ENERGY_TOL_HARTREE,
    noise_floor_hartree=DEFAULT_NOISE_FLOOR_HARTREE,
    checks=True,
):
    """Stationary points of a scanned curve, with grid checks.

    Args:
        values: scanned coordinates, in ``unit`` (angstrom for a distance, degree otherwise).
        energies_hartree: energies; NaN for failed points (excluded and counted).
        periodic: join the ends (dihedral over the full circle); default False.
        period: period in ``unit`` (default 360).
        unit: ``"angstrom"`` or ``"degree"``.
        order: degree of the interpolating spline (default 5, see the module docstring).
        curvature_rtol, position_tol, energy_tol_hartree: coarse-grid tolerances
            (:func:`grid_quality`).
        noise_floor_hartree: noise threshold (:func:`noisy_points`), default 1e-7 hartree.
        checks: run the coarse-grid and noise checks (default True; the uncertainty
            estimate re-analyses perturbed curves without them).

    Returns:
        A :class:`CurveAnalysis`.  Its ``flags`` carry: failed points, an unbracketed minimum
        (with the direction in which to extend the scan), coarse-grid advice and noisy points.
    """
    curve = prepare_curve(values, energies_hartree, periodic=periodic, period=period, unit=unit)
    flags = list(curve.notes)
    if curve.n_points < 3:
        raise ValueError(
            f"a curve needs at least three finite points, got {curve.n_points} "
            f"({curve.n_failed} failed)"
        )
    spline = interpolant(curve, order=order)
    minima, maxima = stationary_points(curve, spline)
    q, e = curve.q, curve.energy_hartree
    label = _UNIT_LABEL.get(unit, unit)
    minimum = min(minima, key=lambda p: p.energy_hartree) if minima else None
    bracketed = minimum is not None
    if not curve.periodic:
        i_low = int(np.argmin(e))
        if i_low in (0, len(e) - 1):
            bracketed = False
            side = "below" if i_low == 0 else "above"
            where_low = "start" if i_low == 0 else "end"
            flags.append(
                Flag(
                    "minimum-not-bracketed",
                    f"minimum not bracketed: the lowest energy is at the {where_low}"
                    f" of the scan ({_fmt(q[i_low])} {label}); extend the scan {side} "
                    f"{_fmt(q[i_low])} {label}"
                    + (
                        f" (the reported minimum at {_fmt(minimum.q)} {label} is only local)"
                        if minimum is not None
                        else ""
                    ),
                    (q[i_low],),
                )
            )
    if minimum is None and curve.periodic:
        flags.append(Flag("no-minimum", "no minimum found on the periodic curve"))
    checked = [p for p in (*minima, *maxima)] if checks else []
    flags.extend(
        grid_quality(
            curve,
            checked,
            order=order,
            curvature_rtol=curvature_rtol,
            position_tol=position_tol,
            energy_tol_hartree=energy_tol_hartree,
        )
    )
    bad, res = [], None
    if checks:
        bad, res = noisy_points(curve, order=min(order, 5), noise_floor_hartree=noise_floor_hartree)
    if bad:
        where = ", ".join(_fmt(q[i]) for i in bad)
        flags.append(
            Flag(
                "noisy-points",
                f"noisy or non-smooth energies at {where} {label}: up to "
                f"{np.nanmax(np.abs(res[bad])):.2g} hartree off the interpolant of their "
                "neighbours (not explained by the grid spacing); tighten the SCF convergence "
                "or integration grid, or check for a jump to another SCF solution (or a "
                "Coulson-Fischer point)",
                [q[i] for i in bad],
            )
        )
    return CurveAnalysis(
        curve=curve,
        spline=spline,
        minima=minima,
        maxima=maxima,
        minimum=minimum,
        minimum_bracketed=bool(bracketed),
        flags=tuple(flags),
    )
