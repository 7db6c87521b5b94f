"""Vibrational analysis of a scanned stretch or bend: force constants, harmonic wavenumber,
Morse fit, vibrational levels of the 1-D nuclear Schroedinger equation, rotational constant.

Units at the boundary: distances in angstrom, angles in degree, energies in hartree,
masses in dalton (unified atomic mass units; exact isotope masses come from
:func:`pesflow.units.isotope_mass`), wavenumbers in cm-1.  Inside, atomic units
(hbar = m_e = 1, lengths in bohr): then a wavenumber is an energy in hartree times
``HARTREE_TO_CM1``.

Vibrational levels are the eigenvalues of the sinc discrete variable representation of
Colbert & Miller (J. Chem. Phys. 96, 1982 (1992), their eq. A7) on a uniform grid spanning the
scanned range, with the interpolated curve as the potential.  The grid ends act as hard walls,
so a level is trusted only if (i) it lies below the lower of the two end energies (both
classical turning points inside the scan) and (ii) its error from the walls, estimated by
moving both walls inwards and using the exponential decay of the wavefunction under the
barrier, is below a tolerance (default 0.1 cm-1).  A +-0.2 A scan around the minimum of a
hydride typically traps even v = 0 by ~100 cm-1: no level is then reported.

>>> import numpy as np
>>> from pesflow.analysis.curves import analyze_curve
>>> r = np.linspace(0.6, 1.8, 41)
>>> e = 0.225 * (1 - np.exp(-2.2266 * (r - 0.9168))) ** 2 - 100.0
>>> s = analyze_stretch(analyze_curve(r, e), reduced_mass_amu=0.957055)
>>> round(s.omega_cm1, 1), round(s.morse.r_e_angstrom, 4)
(4153.2, 0.9168)
"""

from dataclasses import dataclass, field

import numpy as np
from scipy import linalg, optimize

from pesflow.analysis.flags import Flag
from pesflow.units import (
    AMU_TO_ME,
    BOHR_ANGSTROM,
    DEGREE,
    HARTREE_BOHR2_TO_MDYN_ANGSTROM,
    HARTREE_TO_AJ,
    HARTREE_TO_CM1,
    HARTREE_TO_EV,
)

#: Default tolerance on the wall error of a trusted vibrational level, cm-1.
DEFAULT_LEVEL_TOL_CM1 = 0.1


def reduced_mass_amu(mass_a_amu, mass_b_amu):
    """Reduced mass m_a m_b / (m_a + m_b) of two masses in dalton.

    >>> round(reduced_mass_amu(1.007825, 18.998403), 6)
    0.957055
    """
    return mass_a_amu * mass_b_amu / (mass_a_amu + mass_b_amu)


def stretch_force_constant(curvature_hartree_angstrom2):
    """Force constant of a stretch from d2E/dr2 in hartree/A^2.

    Returns ``(k_hartree_bohr2, k_mdyn_angstrom)``.

    >>> [round(x, 4) for x in stretch_force_constant(1.0 / BOHR_ANGSTROM**2)]
    [1.0, 15.5689]
    """
    k_au = curvature_hartree_angstrom2 * BOHR_ANGSTROM**2
    return k_au, k_au * HARTREE_BOHR2_TO_MDYN_ANGSTROM


def bend_force_constant(curvature_hartree_degree2):
    """Force constant along an angle from d2E/dtheta2 in hartree/degree^2.

    Returns ``(k_hartree_rad2, k_aj_rad2)``; aJ/rad^2 equals mdyn A/rad^2.

    >>> [round(x, 4) for x in bend_force_constant(DEGREE**2)]
    [1.0, 4.3597]
    """
    k_rad = curvature_hartree_degree2 / DEGREE**2
    return k_rad, k_rad * HARTREE_TO_AJ


def harmonic_wavenumber_cm1(k_hartree_bohr2, reduced_mass_amu):
    """Harmonic wavenumber omega = (1 / 2 pi c) sqrt(k / mu), cm-1.

    Args:
        k_hartree_bohr2: force constant, hartree/bohr^2 (must be > 0).
        reduced_mass_amu: reduced mass along the coordinate, dalton.

    >>> round(harmonic_wavenumber_cm1(0.6, 0.957055), 1)
    4070.2
    """
    mu = reduced_mass_amu * AMU_TO_ME
    return float(np.sqrt(k_hartree_bohr2 / mu) * HARTREE_TO_CM1)


def rotational_constant_cm1(r_e_angstrom, reduced_mass_amu):
    """Rotational constant B_e = h / (8 pi^2 c mu r_e^2) of a diatomic, cm-1.

    In atomic units B = 1 / (2 mu r^2) hartree.

    >>> round(rotational_constant_cm1(0.9168, 0.957055), 3)
    20.956
    """
    mu = reduced_mass_amu * AMU_TO_ME
    r = r_e_angstrom / BOHR_ANGSTROM
    return float(HARTREE_TO_CM1 / (2.0 * mu * r * r))


@dataclass(frozen=True)
class MorseFit:
    """Morse potential V = d_e (1 - exp(-a (r - r_e)))^2 + e_min fitted to a curve.

    Attributes:
        d_e_hartree: well depth.
        a_per_angstrom: range parameter, 1/A.
        r_e_angstrom: position of the minimum, A.
        e_min_hartree: energy at the minimum.
        rms_hartree: root-mean-square residual of the fit over the fitted points.
        success: whether the least-squares solver reported convergence.
    """

    d_e_hartree: float
    a_per_angstrom: float
    r_e_angstrom: float
    e_min_hartree: float
    rms_hartree: float
    success: bool

    def __call__(self, r_angstrom):
        x = np.exp(-self.a_per_angstrom * (np.asarray(r_angstrom) - self.r_e_angstrom))
        return self.d_e_hartree * (1.0 - x) ** 2 + self.e_min_hartree

    @property
    def d_e_ev(self):
        return self.d_e_hartree * HARTREE_TO_EV

    @property
    def rms_cm1(self):
        return self.rms_hartree * HARTREE_TO_CM1

    def omega_e_cm1(self, reduced_mass_amu):
        """omega_e = a sqrt(2 D_e / mu), cm-1."""
        k = 2.0 * self.d_e_hartree * (self.a_per_angstrom * BOHR_ANGSTROM) ** 2
        return harmonic_wavenumber_cm1(k, reduced_mass_amu)

    def omega_e_x_e_cm1(self, reduced_mass_amu):
        """omega_e x_e = omega_e^2 / (4 D_e), cm-1."""
        return self.omega_e_cm1(reduced_mass_amu) ** 2 / (4.0 * self.d_e_hartree * HARTREE_TO_CM1)


def fit_morse(r_angstrom, energies_hartree, *, r_e_guess=None, spline=None):
    """Least-squares Morse fit (:func:`scipy.optimize.least_squares`) to a scanned stretch.

    Args:
        r_angstrom, energies_hartree: the scanned points (finite energies only).
        r_e_guess: start value of r_e, A (default: the lowest point).
        spline: the curve's interpolant; when given, the start values use its curvature k and
            third derivative at ``r_e_guess``: for a Morse curve V''' = -3 a k, so
            a = -V''' / (3 k) and D_e = k / (2 a^2).

    Returns a :class:`MorseFit`; every point is weighted equally.
    """
    r = np.asarray(r_angstrom, dtype=float)
    e = np.asarray(energies_hartree, dtype=float)
    i0 = int(np.argmin(e))
    r0 = r[i0] if r_e_guess is None else float(r_e_guess)
    e0 = e[i0] if spline is None else float(spline(r0))
    a0 = 2.0
    if spline is not None:
        k, v3 = float(spline(r0, 2)), float(spline(r0, 3))
        if k > 0 and v3 < 0:
            a0 = -v3 / (3.0 * k)
        d0 = k / (2.0 * a0 * a0) if k > 0 else 0.2
    else:
        d0 = max(float(np.ptp(e)), 1e-3)
    scale = max(float(np.ptp(e)), 1e-8)

    def residual(x):
        d, a, re, em = x
        return (d * (1.0 - np.exp(-a * (r - re))) ** 2 + em - e) / scale

    sol = optimize.least_squares(
        residual,
        x0=[d0, a0, r0, e0],
        bounds=([1e-8, 1e-4, r.min() - 1.0, -np.inf], [np.inf, 50.0, r.max() + 1.0, np.inf]),
        x_scale="jac",
        ftol=1e-15,
        xtol=1e-15,
        gtol=1e-15,
        max_nfev=2000,
    )
    d, a, re, em = sol.x
    rms = float(np.sqrt(np.mean((sol.fun * scale) ** 2)))
    return MorseFit(float(d), float(a), float(re), float(em), rms, bool(sol.success))


def sinc_dvr(potential_hartree, x_min_bohr, x_max_bohr, mass_me, *, n_grid, n_levels=None):
    """Eigenstates of -1/(2m) d2/dx2 + V(x) in the Colbert-Miller sinc-DVR (atomic units).

    Args:
        potential_hartree: callable V(x) on an array of x in bohr, returning hartree.
        x_min_bohr, x_max_bohr: ends of the uniform grid (included); the wavefunction is zero
            beyond them.
        mass_me: mass along x in electron masses.
        n_grid: number of grid points.
        n_levels: number of lowest states to return (default all).

    Returns ``(x_bohr, energies_hartree, vectors)``; ``vectors[:, v]`` is state v on the grid.

    The kinetic matrix is Colbert & Miller's eq. A7,
    T_ij = (-1)^(i-j) / (2 m dx^2) * (pi^2/3 if i == j else 2 / (i-j)^2).
    """
    x = np.linspace(x_min_bohr, x_max_bohr, int(n_grid))
    dx = x[1] - x[0]
    m = np.arange(len(x), dtype=float)
    m[0] = 1.0  # placeholder, replaced below: the diagonal has its own formula
    column = (-1.0) ** np.arange(len(x)) * 2.0 / m**2
    column[0] = np.pi**2 / 3.0
    hamiltonian = linalg.toeplitz(column / (2.0 * mass_me * dx * dx))
    hamiltonian[np.diag_indices_from(hamiltonian)] += potential_hartree(x)
    subset = None if n_levels is None else (0, min(int(n_levels), len(x)) - 1)
    energies, vectors = linalg.eigh(hamiltonian, subset_by_index=subset)
    return x, energies, vectors


@dataclass(frozen=True)
class VibrationalLevels:
    """Vibrational levels G(v) of a 1-D curve, relative to its minimum.

    Attributes:
        energies_cm1: G(v) for v = 0, 1, ... (every level below the lower end energy of the
            scan, at most ``max_levels``), cm-1 relative to the minimum.
        wall_error_cm1: estimated shift of each level caused by the ends of the scan, cm-1.
        trusted: per level, whether it is below the lower end energy and its wall error below
            the tolerance (levels are trusted from v = 0 upwards without gaps).
        edge_energy_cm1: the lower of the two end energies of the scan, relative to the minimum.
    """

    energies_cm1: np.ndarray
    wall_error_cm1: np.ndarray
    trusted: np.ndarray
    edge_energy_cm1: float

    @property
    def n_trusted(self):
        return int(np.sum(self.trusted))

    @property
    def trusted_cm1(self):
        return self.energies_cm1[self.trusted]

    @property
    def zpe_cm1(self):
        """Zero-point energy G(0), cm-1 (NaN when v = 0 is not trusted)."""
        return float(self.trusted_cm1[0]) if self.n_trusted >= 1 else float("nan")

    @property
    def nu_01_cm1(self):
        """Fundamental G(1) - G(0), cm-1 (NaN unless v = 0 and 1 are trusted)."""
        g = self.trusted_cm1
        return float(g[1] - g[0]) if len(g) >= 2 else float("nan")

    def anharmonic_constants_cm1(self):
        """``(omega_e, omega_e_x_e)`` in cm-1 from the three lowest trusted levels.

        From G(v) = omega_e (v + 1/2) - omega_e x_e (v + 1/2)^2: Delta G(1/2) - Delta G(3/2)
        = 2 omega_e x_e and omega_e = Delta G(1/2) + 2 omega_e x_e.  NaN with fewer than three
        trusted levels.
        """
        g = self.trusted_cm1
        if len(g) < 3:
            return float("nan"), float("nan")
        dg1, dg2 = g[1] - g[0], g[2] - g[1]
        wexe = (dg1 - dg2) / 2.0
        return float(dg1 + 2.0 * wexe), float(wexe)


def vibrational_levels(
    potential_hartree,
    r_min_angstrom,
    r_max_angstrom,
    e_min_hartree,
    reduced_mass_amu,
    *,
    max_levels=30,
    level_tol_cm1=DEFAULT_LEVEL_TOL_CM1,
    n_grid=None,
):
    """Vibrational levels of a 1-D curve on the scanned range, with a trust test per level.

    Args:
        potential_hartree: callable E(r) with r in A (e.g. the curve's spline), hartree.
        r_min_angstrom, r_max_angstrom: scanned range; the DVR grid spans exactly this range.
        e_min_hartree: energy of the minimum (levels are relative to it).
        reduced_mass_amu: reduced mass, dalton.
        max_levels: most levels computed (default 30).
        level_tol_cm1: largest wall error of a trusted level (default 0.1 cm-1).
        n_grid: DVR grid points (default: spacing pi / (4 p), p the classical momentum at the
            lower end energy, between 64 and 1500 points).

    Returns a :class:`VibrationalLevels`.

    Wall error: moving both walls inwards by delta shifts a level by
    err(L - delta) - err(L) = err(L) (exp(2 kappa delta) - 1), where kappa = sqrt(2 mu (V_edge -
    E)) is the decay constant of the wavefunction under the lower end; so err(L) is that shift
    divided by (exp(2 kappa delta) - 1).  Using the lower end energy overestimates the error.
    """
    mu = reduced_mass_amu * AMU_TO_ME
    x0, x1 = r_min_angstrom / BOHR_ANGSTROM, r_max_angstrom / BOHR_ANGSTROM

    def v(x_bohr):
        return np.asarray(potential_hartree(x_bohr * BOHR_ANGSTROM), dtype=float) - e_min_hartree

    edge = float(min(v(np.array([x0]))[0], v(np.array([x1]))[0]))
    empty = np.array([])
    if not edge > 0:
        return VibrationalLevels(empty, empty, np.array([], dtype=bool), edge * HARTREE_TO_CM1)
    if n_grid is None:
        p = np.sqrt(2.0 * mu * edge)
        n_grid = int(np.clip(np.ceil((x1 - x0) / (np.pi / (4.0 * p))) + 1, 64, 1500))
    x, energies, _ = sinc_dvr(v, x0, x1, mu, n_grid=n_grid, n_levels=max_levels)
    energies = energies[energies < edge]
    if len(energies) == 0:
        return VibrationalLevels(empty, empty, np.array([], dtype=bool), edge * HARTREE_TO_CM1)
    # Narrow the box by a few grid points at each end and watch the levels move.
    shift = max(3, n_grid // 50)
    delta = shift * (x[1] - x[0])
    _, narrow, _ = sinc_dvr(
        v, x[shift], x[-1 - shift], mu, n_grid=n_grid - 2 * shift, n_levels=len(energies)
    )
    kappa = np.sqrt(2.0 * mu * np.maximum(edge - energies, 0.0))
    with np.errstate(divide="ignore"):
        wall = np.where(kappa > 0, (narrow - energies) / np.expm1(2.0 * kappa * delta), np.inf)
    wall_cm1 = wall * HARTREE_TO_CM1
    ok = np.abs(wall_cm1) < level_tol_cm1
    trusted = np.logical_and.accumulate(ok) if len(ok) else ok
    return VibrationalLevels(
        energies_cm1=energies * HARTREE_TO_CM1,
        wall_error_cm1=wall_cm1,
        trusted=trusted,
        edge_energy_cm1=edge * HARTREE_TO_CM1,
    )


@dataclass(frozen=True)
class StretchAnalysis:
    """Everything :func:`analyze_stretch` derives from one scanned bond length.

    Attributes:
        r_e_angstrom, e_min_hartree: the bracketed minimum of the interpolated curve.
        k_hartree_bohr2, k_mdyn_angstrom: force constant d2E/dr2 there.
        omega_cm1: harmonic wavenumber (1 / 2 pi c) sqrt(k / mu), NaN without a mass.
        morse: the :class:`MorseFit` (None if it failed).
        levels: :class:`VibrationalLevels` (None without a mass).
        b_e_cm1: rotational constant at r_e, NaN without a mass.
        omega_e_x_e_cm1: anharmonicity constant, and ``omega_e_x_e_source`` the way it was
            obtained: ``"levels"`` (three trusted levels), ``"levels+harmonic"`` ((omega -
            nu_01) / 2 from two levels) or ``"morse"``.
        flags: warnings and advice.
    """

    r_e_angstrom: float
    e_min_hartree: float
    k_hartree_bohr2: float
    k_mdyn_angstrom: float
    omega_cm1: float = float("nan")
    morse: MorseFit | None = None
    levels: VibrationalLevels | None = None
    b_e_cm1: float = float("nan")
    omega_e_x_e_cm1: float = float("nan")
    omega_e_x_e_source: str = ""
    flags: tuple = field(default=())


def analyze_stretch(
    analysis,
    reduced_mass_amu=None,
    *,
    level_tol_cm1=DEFAULT_LEVEL_TOL_CM1,
    max_levels=30,
    levels=True,
    advice=True,
):
    """Force constant, harmonic wavenumber, Morse fit, levels and B_e of a scanned stretch.

    Args:
        analysis: a :class:`pesflow.analysis.curves.CurveAnalysis` of a distance scan (A).
        reduced_mass_amu: reduced mass in dalton, or None (then no wavenumber, levels or B_e).
        level_tol_cm1: wall-error tolerance of trusted levels (default 0.1 cm-1).
        max_levels: most levels computed (default 30).
        levels: solve for the vibrational levels (default True; a stretch inside a
            polyatomic molecule has no 1-D levels to report, and ``levels`` is then None).
        advice: when fewer than two levels are trusted, estimate on the Morse fit the range
            that would trap them, for the flag's advice (default True; a search of some
            thirty level solutions, skipped by the uncertainty's re-analyses).

    Returns a :class:`StretchAnalysis`, or None when the curve has no bracketed minimum.
    """
    p = analysis.minimum
    if p is None or not analysis.minimum_bracketed:
        return None
    flags = []
    curve, spline = analysis.curve, analysis.spline
    k_au, k_mdyn = stretch_force_constant(p.curvature)
    try:
        morse = fit_morse(curve.q, curve.energy_hartree, r_e_guess=p.q, spline=spline)
    except (ValueError, np.linalg.LinAlgError):
        morse = None
    if morse is not None and not morse.success:
        flags.append(Flag("morse-fit-failed", "Morse fit did not converge"))
    if reduced_mass_amu is None:
        return StretchAnalysis(p.q, p.energy_hartree, k_au, k_mdyn, morse=morse, flags=tuple(flags))
    omega = harmonic_wavenumber_cm1(k_au, reduced_mass_amu)
    if not levels:
        return StretchAnalysis(
            p.q,
            p.energy_hartree,
            k_au,
            k_mdyn,
            omega_cm1=omega,
            morse=morse,
            b_e_cm1=rotational_constant_cm1(p.q, reduced_mass_amu),
            flags=tuple(flags),
        )
    levels = vibrational_levels(
        spline,
        curve.q[0],
        curve.q[-1],
        p.energy_hartree,
        reduced_mass_amu,
        max_levels=max_levels,
        level_tol_cm1=level_tol_cm1,
    )
    if levels.n_trusted < 2:
        lo, hi = curve.q[0], curve.q[-1]
        need = range_for_levels(morse, reduced_mass_amu) if morse is not None and advice else None
        if need is not None and (need[0] < lo or need[1] > hi):
            lo, hi = min(lo, need[0]), max(hi, need[1])
        elif curve.energy_hartree[0] < curve.energy_hartree[-1]:
            # No estimate: the end with the lower energy traps the levels first.
            lo = curve.q[0] - 0.1 * (curve.q[-1] - curve.q[0])
        else:
            hi = curve.q[-1] + 0.1 * (curve.q[-1] - curve.q[0])
        flags.append(few_levels_flag(levels.n_trusted, curve.q[0], curve.q[-1], lo, hi))
    _, wexe = levels.anharmonic_constants_cm1()
    source = "levels"
    if not np.isfinite(wexe) and levels.n_trusted == 2:
        wexe, source = (omega - levels.nu_01_cm1) / 2.0, "levels+harmonic"
    if not np.isfinite(wexe) and morse is not None:
        wexe, source = morse.omega_e_x_e_cm1(reduced_mass_amu), "morse"
        flags.append(
            Flag(
                "anharmonicity-from-morse",
                "omega_e x_e from the Morse fit (fewer than two trusted levels)",
            )
        )
    return StretchAnalysis(
        r_e_angstrom=p.q,
        e_min_hartree=p.energy_hartree,
        k_hartree_bohr2=k_au,
        k_mdyn_angstrom=k_mdyn,
        omega_cm1=omega,
        morse=morse,
        levels=levels,
        b_e_cm1=rotational_constant_cm1(p.q, reduced_mass_amu),
        omega_e_x_e_cm1=float(wexe),
        omega_e_x_e_source=source if np.isfinite(wexe) else "",
        flags=tuple(flags),
    )


def range_for_levels(morse, reduced_mass_amu, *, n_levels=2, level_tol_cm1=DEFAULT_LEVEL_TOL_CM1):
    """The scan range, about, that traps ``n_levels`` trusted levels: ``(r_min, r_max)`` in A.

    Estimated on the Morse fit ``morse`` (a :class:`MorseFit`): the range between its two
    turning points at the lowest energy (found by bisection, up to 0.95 D_e) at which
    :func:`vibrational_levels` trusts ``n_levels`` levels, plus 5 % (at most 0.95 D_e).
    None when even 0.95 D_e does not.
    """
    d, a, r_e = morse.d_e_hartree, morse.a_per_angstrom, morse.r_e_angstrom

    def ends(fraction):
        root = np.sqrt(fraction)
        return r_e - np.log1p(root) / a, r_e - np.log1p(-root) / a

    def enough(fraction):
        lo, hi = ends(fraction)
        # A steep wall makes exp(2 kappa delta) overflow: its wall error is then zero.
        with np.errstate(over="ignore"):
            levels = vibrational_levels(
                morse,
                lo,
                hi,
                morse.e_min_hartree,
                reduced_mass_amu,
                level_tol_cm1=level_tol_cm1,
                max_levels=n_levels + 2,
                n_grid=256,  # enough for the few lowest levels of an estimate
            )
        return levels.n_trusted >= n_levels

    low, high = 1e-4, 0.95
    if not (d > 0 and a > 0) or not enough(high):
        return None
    for _ in range(30):
        mid = np.sqrt(low * high)
        low, high = (low, mid) if enough(mid) else (mid, high)
        if high / low < 1.02:
            break
    # A margin of 5 % in energy: the fit is not the curve.
    lo, hi = ends(min(1.05 * high, 0.95))
    return float(lo), float(hi)


def few_levels_flag(n_trusted, q_start, q_end, r_min, r_max):
    """The ``few-vibrational-levels`` flag: the scan (``q_start``-``q_end`` A) traps only
    ``n_trusted`` levels; extend it to ``r_min`` below and ``r_max`` above (A; an end not
    beyond the scan needs no extension).  Its positions are ``(r_min, r_max, q_start,
    q_end)``."""
    parts = []
    if r_min < q_start - 1e-9:
        parts.append(f"below {q_start:.4g} A by about {q_start - r_min:.2g} A (to {r_min:.3g} A)")
    if r_max > q_end + 1e-9:
        parts.append(f"above {q_end:.4g} A by about {r_max - q_end:.2g} A (to {r_max:.3g} A)")
    where = " and ".join(parts) or "at both ends"
    return Flag(
        "few-vibrational-levels",
        f"only {n_trusted} vibrational level(s) converged within the scanned range "
        f"({q_start:.4g}-{q_end:.4g} A, whose ends trap the levels): extend the scan {where} "
        "for nu_01, ZPE and anharmonicity from levels",
        (r_min, r_max, q_start, q_end),
    )


def bend_force_constants(analysis):
    """``(k_hartree_rad2, k_aj_rad2)`` at the bracketed minimum of an angle (or dihedral)
    curve in degree, or ``(nan, nan)`` when there is none."""
    p = analysis.minimum
    if p is None or not analysis.minimum_bracketed:
        return float("nan"), float("nan")
    return bend_force_constant(p.curvature)
