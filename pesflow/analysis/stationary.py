"""Every stationary point of a curve or surface, with energies relative to its global minimum.

The summary keeps one barrier per curve; this module lists them all: every minimum and
maximum of a 1-D curve (:func:`pesflow.analysis.curves.stationary_points`), every minimum,
first-order saddle and maximum of a 2-D surface (:mod:`pesflow.analysis.surface`).  Each
point's position is given in the canonical form of the curve's symmetry
(:mod:`pesflow.analysis.symmetry`); points equivalent by that symmetry (the mirror-image
minima of a torsion) are one stationary point: the first found in the canonical range is
kept as such, the others are marked ``equivalent_copy`` and point to it.  Energies are
relative to the lowest of the curve's minima and scanned energies, in the units of
:data:`pesflow.analysis.barriers.ENERGY_UNITS`.

Pure functions of arrays.

>>> import numpy as np
>>> from pesflow.analysis.curves import analyze_curve
>>> phi = np.arange(0.0, 360.0, 15.0)
>>> e = 0.004 * np.cos(np.radians(phi)) + 0.002 * np.cos(np.radians(2 * phi)) - 150.0
>>> a = analyze_curve(phi, e, periodic=True, unit="degree")
>>> rows = curve_stationary_points("dihedral", a.curve, a.minima, a.maxima, a.spline)
>>> [(r["kind"], round(r["position"][0], 1), r["equivalent_copy"]) for r in rows[:2]]
[('minimum', 120.0, False), ('minimum', 120.0, True)]
>>> [(r["kind"], round(r["position"][0], 1)) for r in rows[2:]]
[('maximum', 0.0), ('maximum', 180.0)]
>>> round(rows[2]["relative_kcal_mol"], 2)
5.65
"""

from __future__ import annotations

import numpy as np

from pesflow.analysis.barriers import relative_energies
from pesflow.analysis.symmetry import (
    NONE,
    Symmetry,
    canonical_pair,
    canonical_position,
    curve_symmetry,
    pair_deviation,
    position_deviation,
)

#: Order of kinds in the table.
KIND_ORDER = ("minimum", "maximum", "saddle")
#: Equivalent copies land on the same canonical position within this, per unit (the grid
#: resolves positions no better than that; :data:`pesflow.analysis.curves.DEFAULT_POSITION_TOL`
#: is the tolerance of one position, twice it covers two).
COPY_TOL = {"angstrom": 2e-3, "degree": 0.2}


def _rows(points, kinds, units, symmetry, e_ref):
    """Rows for ``points`` (objects with ``kind``, ``q``, ``energy_hartree``), copies marked."""
    rows = []
    for p in sorted(points, key=lambda p: (KIND_ORDER.index(p.kind), np.atleast_1d(p.q)[0])):
        found = tuple(float(x) for x in np.atleast_1d(p.q))
        relative = relative_energies(p.energy_hartree - e_ref)
        if len(found) == 1:
            canonical = (canonical_position(kinds[0], found[0], symmetry),)
        else:
            canonical = canonical_pair(found, symmetry)
        rows.append(
            {
                "kind": p.kind,
                "position": canonical,
                "found_at": found,
                "energy_hartree": float(p.energy_hartree),
                **{f"relative_{u}": v for u, v in relative.items()},
                "equivalent_copy": False,
                "n_equivalent": 1,
            }
        )
    tol = np.array([COPY_TOL.get(u, 1e-3) for u in units])
    # The representative of a group is the point found nearest its canonical form.
    order = sorted(
        range(len(rows)),
        key=lambda i: float(np.max(np.abs(np.subtract(rows[i]["found_at"], rows[i]["position"])))),
    )
    kept = []
    for i in order:
        r = rows[i]
        for j in kept:
            k = rows[j]
            if k["kind"] == r["kind"] and np.all(
                np.abs(np.subtract(k["position"], r["position"])) <= tol
            ):
                r["equivalent_copy"] = True
                k["n_equivalent"] += 1
                break
        else:
            kept.append(i)
    for i in range(len(rows)):
        if rows[i]["equivalent_copy"]:
            continue
        for r in rows:
            if (
                r["equivalent_copy"]
                and r["kind"] == rows[i]["kind"]
                and np.all(np.abs(np.subtract(r["position"], rows[i]["position"])) <= tol)
            ):
                r["n_equivalent"] = rows[i]["n_equivalent"]
    return rows


def curve_stationary_points(kind, curve, minima, maxima, spline, *, symmetry=None) -> list[dict]:
    """Every minimum and maximum of a 1-D curve as rows (dicts).

    Args:
        kind: the coordinate kind (``"distance"``, ``"angle"``, ``"dihedral"``).
        curve, minima, maxima, spline: a :class:`~pesflow.analysis.curves.Curve`, its
            stationary points and its interpolant (from
            :func:`~pesflow.analysis.curves.analyze_curve`).
        symmetry: the curve's :class:`~pesflow.analysis.symmetry.Symmetry`; default: found
            from the data (:func:`~pesflow.analysis.symmetry.curve_symmetry`).

    Returns one dict per point, minima first then maxima, each by position: ``kind``,
    ``position`` (a 1-tuple, canonical form), ``found_at`` (where it was found),
    ``energy_hartree``, ``relative_<unit>`` for each energy unit, ``equivalent_copy``,
    ``n_equivalent`` (how many equivalent copies the curve has of it, itself included) and
    the curve's symmetry (:meth:`~pesflow.analysis.symmetry.Symmetry.columns`).
    """
    if symmetry is None:
        symmetry = curve_symmetry(curve, spline)
    points = [*minima, *maxima]
    energies = [p.energy_hartree for p in minima] + list(curve.energy_hartree)
    e_ref = float(np.min(energies)) if len(energies) else 0.0
    rows = _rows(points, (kind,), (curve.unit,), symmetry, e_ref)
    for r in rows:
        r.update(symmetry.columns())
    return rows


def surface_stationary_points(kinds, surface, minima, others, *, symmetry=NONE) -> list[dict]:
    """Every minimum, saddle and maximum of a 2-D surface as rows (see
    :func:`curve_stationary_points`; positions are pairs, q1 <= q2 when the surface has the
    q1 <-> q2 symmetry).  ``others``: the saddles and maxima."""
    points = [*minima, *others]
    energies = [p.energy_hartree for p in minima] + list(
        surface.energy_hartree[np.isfinite(surface.energy_hartree)].ravel()
    )
    e_ref = float(np.min(energies)) if len(energies) else 0.0
    rows = _rows(points, tuple(kinds), tuple(surface.units), symmetry, e_ref)
    for r in rows:
        r.update(symmetry.columns())
    return rows


def match_deviation(kinds, row, candidates, symmetry: Symmetry):
    """The deviation of stationary point ``row`` from the nearest of ``candidates`` (rows of
    the reference level of the same curve) of the same kind, through the nearest equivalent
    position under ``symmetry``.

    Returns ``(position_deviations, reference_row)``: a tuple with one deviation per
    coordinate (this minus the reference), or ``(None, None)`` when no candidate is of that
    kind.
    """
    best, best_d = None, None
    for c in candidates:
        if c["kind"] != row["kind"]:
            continue
        if len(kinds) == 1:
            d = (position_deviation(kinds[0], row["position"][0], c["position"][0], symmetry),)
        else:
            d = pair_deviation(row["position"], c["position"], symmetry)
        size = float(np.hypot(*d)) if len(d) == 2 else abs(d[0])
        if best is None or size < best_d:
            best, best_d, best_dev = c, size, d
    if best is None:
        return None, None
    return best_dev, best


def stationary_points_of_curve(kind, values, energies_hartree) -> list[dict]:
    """:func:`curve_stationary_points` of scanned arrays, analysed as the summary analyses
    them (:func:`pesflow.analysis.derived.summarize_curve`: quintic spline, a dihedral over
    the full circle joined end to end).  Empty when the curve cannot be analysed."""
    from pesflow.analysis.curves import (
        covers_full_circle,
        interpolant,
        prepare_curve,
        stationary_points,
    )
    from pesflow.coordinates.kinds import KINDS

    values = np.asarray(values, dtype=float)
    energies = np.asarray(energies_hartree, dtype=float)
    finite = np.isfinite(energies)
    k = KINDS[kind]
    periodic = k.period is not None and covers_full_circle(values[finite])
    try:
        curve = prepare_curve(values, energies, periodic=periodic, unit=k.unit)
        if curve.n_points < 3:
            return []
        spline = interpolant(curve)
    except ValueError:
        return []
    minima, maxima = stationary_points(curve, spline)
    return curve_stationary_points(kind, curve, minima, maxima, spline)


def stationary_points_of_surface(q1, q2, energies_hartree, kinds) -> list[dict]:
    """:func:`surface_stationary_points` of a scanned 2-D grid, analysed as the summary
    analyses it (:func:`pesflow.analysis.derived.summarize_surface`)."""
    from pesflow.analysis.surface import find_minima, find_stationary_points, prepare_surface
    from pesflow.analysis.symmetry import surface_symmetry
    from pesflow.coordinates.kinds import KINDS

    units = tuple(KINDS[k].unit for k in kinds)
    periodic = tuple(None if KINDS[k].period is not None else False for k in kinds)
    try:
        surface = prepare_surface(q1, q2, energies_hartree, units=units, periodic=periodic)
    except ValueError:
        return []
    minima = find_minima(surface)
    others = [p for p in find_stationary_points(surface) if p.kind != "minimum"]
    symmetry = surface_symmetry(q1, q2, energies_hartree, kinds)
    return surface_stationary_points(kinds, surface, minima, others, symmetry=symmetry)
