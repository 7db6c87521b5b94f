"""Adaptive grids: where to add points to a scanned curve so that chosen derived numbers reach
a target accuracy, and when to stop (pure functions; the rounds are run by
:mod:`pesflow.execution.refinement`).

A scan's ``refine`` names *targets*: quantity columns of the registry
(:mod:`pesflow.analysis.quantities`) with the accuracy wanted, in the column's unit, and a
point budget ``max_points`` (points per walk, the coarse grid included).  The coordinate's
grid is the first, coarse grid.  Each round analyses the curve as the summary does and

* counts a target as **met** when its standard uncertainty ``u_<column>``
  (:mod:`pesflow.analysis.uncertainty`) is at most the target *and* the value moved since the
  previous round by no more than the target or twice the previous round's uncertainty,
  whichever is larger (a move beyond what the previous round stated means the uncertainty
  model does not yet hold on this curve, so its present value is not trusted either; a coarse
  grid whose uncertainty is within the target counts at once).  The uncertainty is calibrated
  so that the true error lies within twice it in at least 90 % of cases: a target of half the
  accuracy you need is the safe choice;
* otherwise adds a *symmetric pair* of points around each stationary point the unmet targets
  depend on, at ``q* +- h`` with ``h = REFINE_FRACTIONS[round] x`` the coarse grid's spacing
  (0.35, then 0.12, then a third of that each round): pairs at shrinking spacing resolve the
  curvature and position of a minimum the way a finite-difference stencil does, and the
  energy of a maximum (a barrier) to second order.  The minimum targets refine the global
  minimum; the barrier targets the barrier's maximum and the two minima it separates.

Tried on HF/cc-pVDZ (omega_e, r_e against PySCF's analytic Hessian and gradient root): a
5-point coarse grid over 0.70-1.30 A plus two pairs (9 points) gives omega_e within 0.2 cm-1
and r_e within 1e-6 A, where a uniform grid needs 15 points for the same (benchmarks/
bench_adaptive.py).  Refinement trusts the coarse grid to bracket every stationary point it
should refine: a minimum the coarse grid misses is not found.

>>> from pesflow.analysis.refine import refine_targets
>>> "omega_e_cm-1" in refine_targets() and "barrier_kcal_mol" in refine_targets()
True
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from pesflow.analysis.quantities import BARRIER_UNITS, QUANTITY, uncertainty_column
from pesflow.coordinates.kinds import KINDS

#: The budget key of ``refine`` (points per walk, coarse grid included).
BUDGET_KEY = "max_points"

#: Half-width of the pair added in round 1, 2, ... as a fraction of the coarse spacing; later
#: rounds divide the last by 3.  Chosen on HF/cc-pVDZ and H-O-O-H torsions (module docstring):
#: the first pair lands near the quintic's own resolution of a minimum, the second inside it.
REFINE_FRACTIONS = (0.35, 0.12)

#: Two coordinate values closer than this fraction of the coarse spacing are the same point.
SAME_POINT_FRACTION = 1e-3

#: Decimals new coordinate values are rounded to (1e-6 A or degree: well inside the key's
#: 1e-8 A geometry precision, far below any useful spacing).
VALUE_DECIMALS = 6

#: Quantities that depend on the global minimum only (its position, energy and curvature).
MINIMUM_TARGETS = (
    "e_min_hartree",
    "omega_e_cm-1",
    "omega_1d_cm-1",
    "k_aj_rad-2",
    "k_torsion_aj_rad-2",
    "k_mdyn_angstrom-1",
    "k_hartree_bohr-2",
    "k_hartree_rad-2",
    "k_torsion_hartree_rad-2",
)


def refine_targets() -> tuple[str, ...]:
    """The quantity columns a scan may refine on: minimum positions of every coordinate kind,
    the minimum's energy and curvature quantities (:data:`MINIMUM_TARGETS`) and the barrier
    heights (:data:`~pesflow.analysis.quantities.BARRIER_UNITS`)."""
    positions = tuple(dict.fromkeys(kind.minimum_column for kind in KINDS.values()))
    names = positions + MINIMUM_TARGETS + tuple(BARRIER_UNITS)
    return tuple(n for n in names if n in QUANTITY and QUANTITY[n].uncertain)


def is_barrier_target(column: str) -> bool:
    return column in BARRIER_UNITS


@dataclass(frozen=True)
class TargetState:
    """One target of one curve after a round: ``value`` and its uncertainty ``u`` (column
    unit), ``change`` since the previous round (NaN in the first), and whether it is ``met``."""

    column: str
    target: float
    value: float
    u: float
    change: float
    met: bool

    def as_dict(self) -> dict:
        """Plain JSON values (None for a number not known)."""

        def number(x):
            return float(x) if np.isfinite(x) else None

        return {
            "column": self.column,
            "target": self.target,
            "value": number(self.value),
            "u": number(self.u),
            "change": number(self.change),
            "met": self.met,
        }


def _number(x) -> float:
    return np.nan if x is None else float(x)


def _change(column, value, before, row) -> float:
    """``value - before``; a position of a periodic coordinate (a torsion's minimum) is
    compared with the nearest position equivalent to ``before`` under the curve's symmetry,
    since the summary may report either of two mirror-image minima.

    >>> _change("dihedral_e_degree", 236.07, 123.93, {"symmetry_mirror": True})
    0.0
    """
    if not (np.isfinite(value) and np.isfinite(before)):
        return np.nan
    from pesflow.analysis.quantities import deviation
    from pesflow.analysis.symmetry import Symmetry

    return float(deviation(column, value, before, Symmetry.of_row(row)))


def target_states(targets: dict, row: dict, previous: dict | None) -> list[TargetState]:
    """The state of each target on a summary ``row`` (a dict with the quantity and ``u_``
    columns); ``previous``: ``{column: (value, u)}`` of the previous round, or None.

    >>> s = target_states({"omega_e_cm-1": 0.5}, {"omega_e_cm-1": 4440.7,
    ...                   "u_omega_e_cm-1": 0.2}, {"omega_e_cm-1": (4440.9, 0.05)})
    >>> s[0].met, round(s[0].change, 3)
    (True, -0.2)
    >>> target_states({"omega_e_cm-1": 0.5}, {"omega_e_cm-1": 4440.7,
    ...               "u_omega_e_cm-1": 0.2}, {"omega_e_cm-1": (4443.0, 0.3)})[0].met
    False
    >>> target_states({"omega_e_cm-1": 0.5}, {"omega_e_cm-1": 4440.7,
    ...               "u_omega_e_cm-1": 0.2}, {"omega_e_cm-1": (4438.2, 5e4)})[0].met
    True
    """
    states = []
    for column, target in targets.items():
        value = _number(row.get(column))
        u = _number(row.get(uncertainty_column(column)))
        before, u_before = (
            (np.nan, np.nan) if previous is None else previous.get(column, (None,) * 2)
        )
        change = _change(column, value, _number(before), row)
        ok = bool(np.isfinite(value) and np.isfinite(u) and u <= target)
        if previous is not None:
            allowed = max(target, 2.0 * _number(u_before)) if u_before is not None else target
            ok = ok and bool(np.isfinite(change) and abs(change) <= allowed)
        states.append(TargetState(column, float(target), value, u, float(change), ok))
    return states


@dataclass
class Proposal:
    """Points a round wants on one curve: ``(value, reason)`` pairs in the coordinate's unit."""

    points: list[tuple[float, str]] = field(default_factory=list)


def pair_half_width(round_number: int, coarse_spacing: float) -> float:
    """Half-width of the pair of round ``round_number`` (1-based).

    >>> [round(pair_half_width(k, 0.15), 5) for k in (1, 2, 3)]
    [0.0525, 0.018, 0.006]
    """
    if round_number <= len(REFINE_FRACTIONS):
        fraction = REFINE_FRACTIONS[round_number - 1]
    else:
        fraction = REFINE_FRACTIONS[-1] / 3.0 ** (round_number - len(REFINE_FRACTIONS))
    return fraction * coarse_spacing


def stationary_centres(analysis, columns) -> list[tuple[float, str]]:
    """``(position, what)`` of the stationary points the unmet ``columns`` depend on, from a
    :class:`~pesflow.analysis.curves.CurveAnalysis` (no duplicates, sorted)."""
    from pesflow.analysis.barriers import torsion_barrier

    centres = {}
    if any(not is_barrier_target(c) for c in columns) and analysis.minimum is not None:
        centres[round(analysis.minimum.q, VALUE_DECIMALS)] = "minimum"
    if any(is_barrier_target(c) for c in columns):
        barrier = torsion_barrier(analysis)
        if barrier is not None:
            centres[round(barrier.q_max, VALUE_DECIMALS)] = "barrier maximum"
            for q in (barrier.q_from, barrier.q_to):
                centres.setdefault(round(q, VALUE_DECIMALS), "minimum under the barrier")
    return sorted(centres.items())


def place(value, lo, hi, period):
    """``value`` mapped into the scanned range ``[lo, hi]`` (a periodic curve, ``period``
    given: into ``[lo, lo + period)``), or None when it falls outside the range.

    >>> place(-10.0, 0.0, 330.0, 360.0), place(365.0, 10.0, 310.0, 360.0)
    (350.0, 5.0)
    >>> place(1.4, 0.7, 1.3, None)
    """
    if period is not None:
        wrapped = lo + float(np.mod(value - lo, period))
        return wrapped - period if wrapped > period else wrapped
    if lo - 1e-12 <= value <= hi + 1e-12:
        return float(value)
    return None


def propose_points(
    analysis,
    columns,
    round_number: int,
    coarse_spacing: float,
    existing,
    lo: float,
    hi: float,
    period=None,
) -> list[tuple[float, str]]:
    """New ``(value, reason)`` points of round ``round_number`` for the unmet target
    ``columns`` of one curve: a symmetric pair around each stationary point they depend on,
    inside the scanned range, none closer than :data:`SAME_POINT_FRACTION` of the coarse
    spacing to an ``existing`` value or to each other.

    >>> import numpy as np
    >>> from pesflow.analysis.curves import analyze_curve
    >>> r = np.linspace(0.7, 1.3, 5)
    >>> a = analyze_curve(r, 0.2 * (1 - np.exp(-2.2 * (r - 0.92))) ** 2, unit="angstrom")
    >>> new = propose_points(a, ["omega_e_cm-1"], 1, 0.15, r, 0.7, 1.3)
    >>> [round(v, 4) for v, _ in new]
    [0.8668, 0.9718]
    >>> new[0][1]
    'minimum at 0.919275 - 0.0525 (round 1 pair; omega_e_cm-1)'
    """
    tolerance = SAME_POINT_FRACTION * coarse_spacing
    taken = [float(v) for v in existing]
    h = pair_half_width(round_number, coarse_spacing)
    wanted = ", ".join(columns)
    out = []
    for centre, what in stationary_centres(analysis, columns):
        for sign, text in ((-1.0, "-"), (1.0, "+")):
            value = place(centre + sign * h, lo, hi, period)
            if value is None:
                continue
            value = round(value, VALUE_DECIMALS)
            if period is not None:
                near = [abs((value - t + period / 2) % period - period / 2) for t in taken]
            else:
                near = [abs(value - t) for t in taken]
            if near and min(near) < tolerance:
                continue
            taken.append(value)
            reason = f"{what} at {centre:.6g} {text} {h:.3g} (round {round_number} pair; {wanted})"
            out.append((value, reason))
    return out


def coarse_spacing(values) -> float:
    """The coarse grid's typical spacing: the median gap of its sorted values.

    >>> coarse_spacing([0.7, 0.85, 1.0, 1.15, 1.3])
    0.15
    """
    q = np.sort(np.asarray(values, dtype=float))
    return float(np.round(np.median(np.diff(q)), 12)) if len(q) > 1 else 1.0
