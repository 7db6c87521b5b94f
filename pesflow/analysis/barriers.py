"""Relative energies of stationary points, barriers of torsions and inversions, and
dissociation energies, from an analysed 1-D curve.

Energies are reported relative to the global (lowest bracketed) minimum, in the units of
:data:`ENERGY_UNITS` (constants from :mod:`pesflow.units`).

The *barrier* of a curve is the highest maximum on the lowest path that connects all its
minima: for a non-periodic curve the highest maximum between its outermost minima; for a
periodic curve with several minima the path may go either way round the circle, so the highest
of the maxima between neighbouring minima is avoided and the barrier is the highest of the
others (for ethane, any of the three equal maxima; for butane, the anti-gauche maximum rather
than the syn one).  A periodic curve with a single minimum must go over its highest maximum to
come back to that minimum: that maximum is its barrier.

>>> import numpy as np
>>> from pesflow.analysis.curves import analyze_curve
>>> phi = np.arange(0.0, 360.0, 10.0)
>>> a = analyze_curve(phi, 0.5 * 0.0046 * (1 - np.cos(np.radians(3 * phi))), periodic=True,
...                   unit="degree")
>>> round(torsion_barrier(a).height_hartree, 6), len(a.minima)
(0.0046, 3)
"""

from dataclasses import dataclass, field

import numpy as np

from pesflow.analysis.flags import Flag
from pesflow.units import convert_energy

#: Units in which relative energies and barriers are reported.
ENERGY_UNITS = ("kcal_mol", "kj_mol", "cm-1", "ev")
#: The end of a dissociation scan counts as flat when the energy still to come, estimated from
#: its slope and curvature, is below this (1 kcal/mol in hartree; "chemical accuracy", common
#: practice).
DEFAULT_ASYMPTOTE_TOL_HARTREE = 1.0 / 627.5094740631


def relative_energies(value_hartree):
    """``{unit: value}`` for every unit of :data:`ENERGY_UNITS`.

    >>> round(relative_energies(0.01)["kcal_mol"], 4)
    6.2751
    """
    return {u: float(convert_energy(value_hartree, u)) for u in ENERGY_UNITS}


@dataclass(frozen=True)
class Extremum:
    """A minimum or maximum with its energy relative to the global minimum.

    Attributes:
        kind: ``"minimum"`` or ``"maximum"``.
        q: position, in the curve's unit (A or degree).
        energy_hartree: absolute interpolated energy.
        relative_hartree: energy above the global minimum.
    """

    kind: str
    q: float
    energy_hartree: float
    relative_hartree: float

    def relative(self, unit):
        """Energy above the global minimum in ``unit`` (see :data:`ENERGY_UNITS`)."""
        return float(convert_energy(self.relative_hartree, unit))


def extrema_table(analysis):
    """Every bracketed minimum and maximum of ``analysis``, sorted by position, with energies
    relative to the global minimum (or to the lowest scanned energy when no minimum is
    bracketed)."""
    points = sorted((*analysis.minima, *analysis.maxima), key=lambda p: p.q)
    if analysis.minimum is not None:
        ref = analysis.minimum.energy_hartree
    else:
        ref = float(np.min(analysis.curve.energy_hartree))
    return [Extremum(p.kind, p.q, p.energy_hartree, p.energy_hartree - ref) for p in points]


@dataclass(frozen=True)
class Barrier:
    """The barrier of a curve (see the module docstring).

    Attributes:
        height_hartree: energy of the barrier maximum above the global minimum.
        q_max: position of that maximum.
        q_from, q_to: the neighbouring minima it separates.
    """

    height_hartree: float
    q_max: float
    q_from: float
    q_to: float

    def height(self, unit):
        """Barrier height in ``unit`` (see :data:`ENERGY_UNITS`)."""
        return float(convert_energy(self.height_hartree, unit))


def torsion_barrier(analysis):
    """The barrier of a torsion or inversion curve (periodic or not), or None.

    None when the curve has fewer than two minima (one, if periodic) or no maximum between
    them.
    """
    minima, maxima = analysis.minima, analysis.maxima
    if analysis.minimum is None or not minima or not maxima:
        return None
    curve = analysis.curve
    e_ref = analysis.minimum.energy_hartree
    gaps = []  # (highest maximum between neighbouring minima, minimum a, minimum b)
    pairs = list(zip(minima[:-1], minima[1:], strict=True))
    if curve.periodic:
        pairs.append((minima[-1], minima[0]))
    for a, b in pairs:
        if a.q < b.q:
            between = [m for m in maxima if a.q < m.q < b.q]
        else:  # across the seam of a periodic curve
            between = [m for m in maxima if m.q > a.q or m.q < b.q]
        if between:
            top = max(between, key=lambda m: m.energy_hartree)
            gaps.append((top, a, b))
    if not gaps:
        return None
    gaps.sort(key=lambda g: g[0].energy_hartree)
    if curve.periodic and len(gaps) > 1:
        gaps = gaps[:-1]  # going the other way round avoids the highest gap
    top, a, b = gaps[-1]
    return Barrier(top.energy_hartree - e_ref, top.q, a.q, b.q)


@dataclass(frozen=True)
class Dissociation:
    """Dissociation energy of a scanned bond.

    Attributes:
        d_e_hartree: D_e, hartree (NaN when it cannot be given).
        source: ``"fragments"`` (E(A) + E(B) - E_min) or ``"asymptote"`` (E(last) - E_min).
        end_slope_hartree_angstrom: slope of the curve at the last scanned point.
        missing_hartree: estimated energy still to come beyond the last point (exponential
            tail: slope^2 / |curvature|; infinite when the end is not yet concave).
        flattened: whether ``missing_hartree`` is below the tolerance.
        flags: warnings.
    """

    d_e_hartree: float
    source: str
    end_slope_hartree_angstrom: float
    missing_hartree: float
    flattened: bool
    flags: tuple = field(default=())

    @property
    def d_e_ev(self):
        return float(convert_energy(self.d_e_hartree, "ev"))


def asymptote_check(analysis):
    """``(slope, missing)`` at the far end of a stretch curve, in hartree/A and hartree.

    An exponential approach E(r) = E_inf - C exp(-b r) has E' = b C exp(-b r) and
    E'' = -b E', so the energy still missing is E' / b = E'^2 / |E''|.  A curve still convex
    at its end (E'' >= 0 while rising) is not in its tail: the missing energy is infinite.
    """
    spline, r_end = analysis.spline, analysis.curve.q[-1]
    slope, curv = float(spline(r_end, 1)), float(spline(r_end, 2))
    if abs(slope) < 1e-9:
        return slope, 0.0
    if slope > 0 and curv < 0:
        return slope, slope * slope / abs(curv)
    return slope, float("inf")


def dissociation_energy(
    analysis,
    fragment_energies_hartree=None,
    *,
    asymptote_tol_hartree=DEFAULT_ASYMPTOTE_TOL_HARTREE,
):
    """D_e of a bond from a stretch curve.

    Args:
        analysis: :class:`pesflow.analysis.curves.CurveAnalysis` of a distance scan (A).
        fragment_energies_hartree: optional energies of the separated fragments; then
            D_e = sum(fragments) - E_min, and the scan's own end is only compared with it.
        asymptote_tol_hartree: largest energy still missing beyond the last point for the end
            to count as flat (default 1 kcal/mol).

    Returns a :class:`Dissociation`, or None without a bracketed minimum.  Without fragment
    energies D_e = E(last point) - E_min, flagged when the curve has not flattened.
    """
    p = analysis.minimum
    if p is None or not analysis.minimum_bracketed:
        return None
    slope, missing = asymptote_check(analysis)
    flat = missing < asymptote_tol_hartree
    e_last = float(analysis.curve.energy_hartree[-1])
    r_last = float(analysis.curve.q[-1])
    flags = []
    if fragment_energies_hartree is not None:
        e_frag = float(np.sum(fragment_energies_hartree))
        d_e = e_frag - p.energy_hartree
        if flat and abs(e_last - e_frag) > asymptote_tol_hartree:
            flags.append(
                Flag(
                    "fragments-not-reached",
                    f"the scan levels off {convert_energy(e_last - e_frag, 'ev'):+.3g} eV away "
                    "from the sum of the fragment energies: it does not reach those fragments "
                    "(another state, or a reference that cannot dissociate correctly)",
                    (r_last,),
                )
            )
        return Dissociation(d_e, "fragments", slope, missing, flat, tuple(flags))
    d_e = e_last - p.energy_hartree
    if not flat:
        more = "" if not np.isfinite(missing) else f", about {convert_energy(missing, 'ev'):.2g} eV"
        flags.append(
            Flag(
                "asymptote-not-reached",
                f"the curve has not flattened at {r_last:.4g} A (slope {slope:.2g} "
                f"hartree/A{more} still to come): D_e from the last point is a lower bound; "
                "extend the scan or give fragment energies",
                (r_last,),
            )
        )
    return Dissociation(d_e, "asymptote", slope, missing, flat, tuple(flags))
