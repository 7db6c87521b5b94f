"""Standard uncertainties of derived quantities, estimated from what the scanned data can tell.

Every quantity of the registry with ``uncertain=True`` (:mod:`pesflow.analysis.quantities`)
gets a column ``u_<column>`` in the same unit: a *standard uncertainty* (one standard
deviation, in the sense of the GUM), not a bound.

The model
---------
The analysis is re-run on the same scanned points with one ingredient changed at a time; the
change of each derived number is one component, and the components are combined in
quadrature:

``u = sqrt(u_interp**2 + u_range**2 + u_energy**2)``

* ``u_interp`` (interpolant): the same analysis with the *companion* interpolant of
  :func:`pesflow.analysis.curves.grid_quality` - the spline two degrees higher (septic) when
  the grid supports it, else two degrees lower (cubic).  The higher degree is far more accurate
  on a resolved curve, so the difference estimates the quintic's own error; with a cubic
  companion the estimate is pessimistic.  A grid too short for two spline degrees (fewer than
  six points) has no estimate: the uncertainty is NaN ("not known"), and the grid is flagged
  as coarse anyway.  A stationary point the companion does not find has no estimate either.
* ``u_range`` (scanned range, which points are used): the analysis without the first and
  without the last scanned point of a non-periodic curve (each edge row and column of a
  non-periodic surface axis); the larger change counts.  It carries the sensitivity of the
  end conditions, of the Morse fit and of a dissociation energy taken at the last point.
  A leave-one-out over every point is not used: dropping an inner point doubles the local
  spacing, and the resulting change overstates the error of the full grid by about
  2**(k+1) (64 for a quintic), which would make the error bar useless on a fine grid.
* ``u_energy`` (SCF convergence, DFT grid noise): the energies are perturbed by
  ``+eps, -eps, +eps, ...`` point by point, the pattern that moves curvatures and positions
  most, and the change is taken as it is.  ``eps`` is the level's SCF energy tolerance
  (``engine.scf_energy_tolerance_hartree``) or, when smaller, the largest leave-one-out
  residual of the curve (a converged SCF is usually far better than its threshold, and the
  data bound the noise: :func:`pesflow.analysis.derived.energy_noise`); when the noise check
  flags noisy points (DFT integration-grid noise, or another SCF solution), ``eps`` is the
  largest leave-one-out residual of those points.  Analytic energies still get ``eps`` = a few
  units in the last place of the energies (float64 rounding).
* vibrational levels (ZPE, nu_01, D_0) add the DVR's own estimate of the shift the ends of
  the scan cause (``wall_error_cm1`` of :func:`pesflow.analysis.vibration.vibrational_levels`).

Cautions: the estimate covers the numerical error of turning scanned points into numbers,
not the error of the electronic-structure method; a curve whose minimum is not bracketed has
no position, and no uncertainty either.  The calibration against exact references
(``tests/unit/test_uncertainty.py``) checks that the true error lies within twice the stated
uncertainty in at least 90 % of the cases and that the stated uncertainty is not more than ten
times the true error on fine grids.

>>> import numpy as np
>>> r = np.linspace(0.72, 1.12, 15)
>>> e = 0.225 * (1 - np.exp(-2.2266 * (r - 0.9168))) ** 2 - 100.0
>>> from pesflow.analysis.derived import summarize_curve
>>> row = summarize_curve("distance", r, e, reduced_mass_amu=0.957055, diatomic=True)
>>> bool(row["u_r_e_angstrom"] < 1e-5), bool(0 < row["u_omega_e_cm-1"] < 1.0)
(True, True)
"""

from __future__ import annotations

import numpy as np

from pesflow.analysis.curves import DEFAULT_ORDER, _degree_for
from pesflow.analysis.quantities import UNCERTAIN, uncertainty_column

#: Energies are never more exact than float64 rounding: the energy term uses at least this
#: many units in the last place of the largest |E| (an SCF total energy is a sum of large
#: terms; a few ulps is its floor).
ROUNDING_ULPS = 4.0


def companion_order(n_points, periodic, order=DEFAULT_ORDER):
    """Spline degree of the companion interpolant for ``n_points`` points, or None.

    >>> companion_order(15, False), companion_order(7, False), companion_order(5, False)
    (7, 3, None)
    """
    k_main = _degree_for(n_points, order, periodic)
    if _degree_for(n_points, k_main + 2, periodic) == k_main + 2:
        return k_main + 2
    if k_main >= 5:
        return k_main - 2
    return None


def alternating(shape):
    """``+1, -1, +1, ...`` over an array of ``shape`` (a checkerboard in 2-D)."""
    idx = np.indices(shape).sum(axis=0)
    return np.where(idx % 2 == 0, 1.0, -1.0)


def _match_surface(nominal, other, positions, periods):
    """Replace ``other``'s position columns by those of its minimum nearest the nominal one."""
    row, found = other
    a = [nominal.get(c, np.nan) for c in positions]
    if row is None or not found or not np.all(np.isfinite(a)):
        return row
    best, best_d = None, np.inf
    for m in found:
        d = np.asarray(m, dtype=float) - np.asarray(a, dtype=float)
        for ax, period in enumerate(periods):
            if period:
                d[ax] = (d[ax] + period / 2) % period - period / 2
        dist = float(np.hypot(*d))
        if dist < best_d:
            best, best_d = d, dist
    out = dict(row)
    for ax, c in enumerate(positions):
        out[c] = float(a[ax] + best[ax])
    return out


def _change(nominal, other, columns):
    """``|other - nominal|`` per column; ``other`` is a row or ``(row, minima, position,
    period)``, and then the position column is compared with the nearest of ``minima``
    (equivalent minima of a symmetric torsion may swap which one is lowest)."""
    minima, position, period = (), None, None
    if isinstance(other, tuple):
        other, minima, position, period = other
    out = {}
    for c in columns:
        a, b = nominal.get(c, np.nan), (other or {}).get(c, np.nan)
        if c == position and np.isfinite(a) and len(minima):
            d = np.asarray(minima, dtype=float) - float(a)
            if period:
                d = (d + period / 2) % period - period / 2
            out[c] = float(np.min(np.abs(d)))
            continue
        out[c] = abs(float(b) - float(a)) if np.isfinite(a) and np.isfinite(b) else np.nan
    return out


def combine(nominal, *, interp, ranges=(), energy=None, columns=None, extra=None):
    """Uncertainty columns from re-analysed rows (see the module docstring).

    Args:
        nominal: the row of the unperturbed analysis.
        interp: the row with the companion interpolant, or None when there is none (then
            every uncertainty is NaN).
        ranges: rows with fewer points (first or last dropped); NaN entries are ignored.
        energy: the row with perturbed energies, or None (analytic energies).
        columns: quantity columns to cover (default all of :data:`UNCERTAIN` in ``nominal``).
        extra: further components by column (the vibrational levels' wall error).

    Returns ``{u_<column>: value}``; NaN where the value itself is NaN or has no estimate.
    """
    if columns is None:
        columns = [c for c in UNCERTAIN if c in nominal]
    out = {}
    d_interp = _change(nominal, interp, columns) if interp is not None else None
    d_ranges = [_change(nominal, r, columns) for r in ranges]
    d_energy = _change(nominal, energy, columns) if energy is not None else None
    for c in columns:
        value = nominal.get(c, np.nan)
        if d_interp is None or not np.isfinite(value) or not np.isfinite(d_interp[c]):
            out[uncertainty_column(c)] = float("nan")
            continue
        terms = [d_interp[c]]
        rng = [d[c] for d in d_ranges if np.isfinite(d[c])]
        if rng:
            terms.append(max(rng))
        if d_energy is not None and np.isfinite(d_energy[c]):
            terms.append(d_energy[c])
        if extra and np.isfinite(extra.get(c, np.nan)):
            terms.append(extra[c])
        out[uncertainty_column(c)] = float(np.sqrt(np.sum(np.square(terms))))
    return out


def curve_uncertainties(
    analyse,
    values,
    energies,
    nominal,
    *,
    periodic,
    position=None,
    period=None,
    noise_hartree=0.0,
    extra=None,
):
    """Uncertainty columns of one curve's summary row.

    Args:
        analyse: ``analyse(values, energies, order)`` -> ``(summary row, positions of all
            bracketed minima)``, without checks.
        values, energies: the scanned curve (NaN energies are failed points).
        nominal: the row of the full analysis.
        periodic: whether the curve is joined end to end.
        position: the row's position column (matched to the nearest minimum).
        period: the period of a periodic curve (positions compared modulo it), else None.
        noise_hartree: energy noise amplitude ``eps`` (SCF tolerance or measured noise); at
            least the rounding of the energies (:data:`ROUNDING_ULPS` units in the last place).
        extra: further components by column, added in quadrature.
    """
    values = np.asarray(values, dtype=float)
    energies = np.asarray(energies, dtype=float)
    keep = np.isfinite(energies)
    q, e = values[keep], energies[keep]
    order = np.argsort(q)
    q, e = q[order], e[order]

    def run(qq, ee, k=DEFAULT_ORDER):
        return _safe(analyse, qq, ee, k, position=position, period=period)

    k2 = companion_order(len(q), periodic)
    interp = run(q, e, k2) if k2 is not None else None
    ranges = []
    if not periodic and _degree_for(len(q) - 1, DEFAULT_ORDER, False) == DEFAULT_ORDER:
        ranges = [run(q[1:], e[1:]), run(q[:-1], e[:-1])]
    eps = max(float(noise_hartree), rounding_hartree(e))
    energy = run(q, e + eps * alternating(e.shape))
    return combine(nominal, interp=interp, ranges=ranges, energy=energy, extra=extra)


def rounding_hartree(energies):
    """The rounding of stored float64 energies: :data:`ROUNDING_ULPS` ulps of the largest."""
    e = np.asarray(energies, dtype=float)
    e = e[np.isfinite(e)]
    return ROUNDING_ULPS * np.finfo(float).eps * float(np.max(np.abs(e))) if e.size else 0.0


def _safe(analyse, q, e, order=DEFAULT_ORDER, *, position=None, period=None):
    try:
        row, minima = analyse(q, e, order)
    except (ValueError, np.linalg.LinAlgError):
        return None
    return row, tuple(minima), position, period


def surface_uncertainties(
    analyse, q1, q2, energies, nominal, *, periodic, positions, periods, noise_hartree=0.0
):
    """Uncertainty columns of one surface's summary row (the model of the module docstring).

    Args:
        analyse: ``analyse(q1, q2, energies, order)`` -> ``(summary row, [(q1, q2) of every
            minimum])``, without uncertainties.
        q1, q2, energies: the grid (energies shaped ``(len(q1), len(q2))``, NaN for failed).
        nominal: the row of the full analysis.
        periodic: per axis, whether it is joined end to end.
        positions: the row's two position columns; periods: per axis period or None.
        noise_hartree: energy noise amplitude (at least the rounding of the energies).
    """
    q1, q2 = np.asarray(q1, dtype=float), np.asarray(q2, dtype=float)
    e = np.asarray(energies, dtype=float)

    def run(a1, a2, grid, k=DEFAULT_ORDER):
        try:
            other = analyse(a1, a2, grid, k)
        except (ValueError, np.linalg.LinAlgError):
            return None
        return _match_surface(nominal, other, positions, periods)

    ks = [companion_order(n, p) for n, p in zip((len(q1), len(q2)), periodic, strict=True)]
    k2 = None
    if all(k is not None for k in ks):
        k2 = max(ks) if all(k > DEFAULT_ORDER for k in ks) else min(ks)
    interp = run(q1, q2, e, k2) if k2 is not None else None
    ranges = []
    for ax, axis in enumerate((q1, q2)):
        if periodic[ax] or _degree_for(len(axis) - 1, DEFAULT_ORDER, False) != DEFAULT_ORDER:
            continue
        for drop in (int(np.argmin(axis)), int(np.argmax(axis))):
            keep = np.arange(len(axis)) != drop
            a1, a2 = (q1[keep], q2) if ax == 0 else (q1, q2[keep])
            ranges.append(run(a1, a2, np.compress(keep, e, axis=ax)))
    eps = max(float(noise_hartree), rounding_hartree(e))
    energy = run(q1, q2, e + eps * alternating(e.shape))
    return combine(nominal, interp=interp, ranges=ranges, energy=energy)
