"""One flat row of derived quantities per curve (or surface), for the campaign's summary table.

Every column name carries its unit; what does not apply to a curve is NaN, so that every row
has the same columns (:data:`SUMMARY_COLUMNS`).  ``flags`` joins the warnings and advice with
:data:`FLAG_SEPARATOR`.

>>> import numpy as np
>>> r = np.linspace(0.72, 1.12, 15)
>>> e = 0.225 * (1 - np.exp(-2.2266 * (r - 0.9168))) ** 2 - 100.0
>>> row = summarize_curve("distance", r, e, reduced_mass_amu=0.957055, diatomic=True)
>>> round(row["r_e_angstrom"], 5), round(row["omega_e_cm-1"])
(0.9168, 4153)
"""

import numpy as np

from pesflow.analysis.barriers import dissociation_energy, torsion_barrier
from pesflow.analysis.curves import (
    analyze_curve,
    covers_full_circle,
    leave_one_out_residuals,
    noisy_points,
)
from pesflow.analysis.flags import FLAG_SEPARATOR, Flag, flag_records, flag_text
from pesflow.analysis.quantities import (
    BARRIER_UNITS,
    CURVE_COLUMNS,
    UNCERTAIN,
    position_column,
    uncertainty_column,
)
from pesflow.analysis.surface import connecting_barrier, find_minima, find_saddles, prepare_surface
from pesflow.analysis.symmetry import (
    NONE,
    Symmetry,
    canonical_pair,
    canonical_position,
    curve_symmetry,
    surface_symmetry,
)
from pesflow.analysis.uncertainty import curve_uncertainties, surface_uncertainties
from pesflow.analysis.vibration import analyze_stretch, bend_force_constants
from pesflow.coordinates.kinds import KINDS
from pesflow.units import HARTREE_TO_CM1, HARTREE_TO_EV, convert_energy

__all__ = ["FLAG_SEPARATOR", "SUMMARY_COLUMNS", "summarize_curve", "summarize_surface"]

#: Columns of a curve's summary row, in order: counts, the curve quantities of the registry
#: (:mod:`pesflow.analysis.quantities`), their standard uncertainties
#: (:mod:`pesflow.analysis.uncertainty`), the flags as text and as records.
SUMMARY_COLUMNS = (
    "n_points",
    "n_failed",
    "minimum_bracketed",
    *CURVE_COLUMNS,
    *(uncertainty_column(c) for c in CURVE_COLUMNS if c in UNCERTAIN),
    "symmetry_mirror",
    "symmetry_fold",
    "symmetry_swap",
    "flags",
    "flag_records",
)

ONE_D_FLAG = Flag(
    "one-dimensional-wavenumber",
    "1-D wavenumber along the scan coordinate, not a normal-mode frequency",
)
RESTRICTED_FLAG = Flag(
    "restricted-dissociation",
    "a restricted closed-shell reference cannot describe homolytic dissociation: the curve "
    "rises too steeply at long range and D_e from it is wrong (use an unrestricted or "
    "multireference method)",
)


def _set_flags(row, flags):
    row["flags"] = flag_text(flags)
    row["flag_records"] = flag_records(flags)


def _empty_row():
    row = {c: float("nan") for c in SUMMARY_COLUMNS}
    row.update(n_points=0, n_failed=0, minimum_bracketed=False, flags="", flag_records="[]")
    row.update(NONE.columns())
    return row


def summarize_curve(
    kind,
    values,
    energies_hartree,
    *,
    reduced_mass_amu=None,
    diatomic=False,
    fragment_energies_hartree=None,
    restricted_closed_shell_reference=False,
    bond_breaking=False,
    periodic=None,
    energy_noise_hartree=0.0,
    uncertainties=True,
    order=5,
    checks=True,
    minima_out=None,
):
    """Summary row of one scanned curve.

    Args:
        kind: ``"distance"``, ``"angle"`` or ``"dihedral"``.
        values: scanned coordinates, A (distance) or degree (angle, dihedral).
        energies_hartree: energies; NaN for failed points (excluded, counted in ``n_failed``).
        reduced_mass_amu: reduced mass along a distance, dalton; None (the default) unless the
            stretch is a true diatomic or the caller supplies a fragment reduced mass.
        diatomic: True for the bond of a diatomic molecule.  If False, the wavenumber from a
            reduced mass is a 1-D quantity: it goes to ``omega_1d_cm-1`` with a flag, and no
            levels, ZPE or B_e are given.
        fragment_energies_hartree: optional energies of the two fragments; then
            D_e = E(A) + E(B) - E_min.  Without them D_e is taken from the last point only for
            a bond-breaking scan (``bond_breaking`` or reaching beyond 2 r_e).
        restricted_closed_shell_reference: True when the energies come from a restricted
            closed-shell reference (RHF, RKS, or methods built on them); adds a warning for a
            bond-breaking scan.
        bond_breaking: the caller says the scan breaks the bond.
        periodic: join the ends of a dihedral; default: when it covers the full circle.
        energy_noise_hartree: the energies' noise amplitude, at least the SCF energy
            tolerance (0 for analytic energies); enters the uncertainties.
        uncertainties: fill the ``u_<column>`` columns (:mod:`pesflow.analysis.uncertainty`).
        order, checks: spline degree and grid checks of :func:`analyze_curve` (the
            uncertainty estimate re-analyses with other degrees and without checks).
        minima_out: a list that receives the positions of all bracketed minima (the
            uncertainty estimate matches a position to the nearest one of equivalent minima).

    Returns a dict with the keys of :data:`SUMMARY_COLUMNS`.
    """
    if kind not in KINDS:
        raise ValueError(f"unknown kind {kind!r}; allowed: {', '.join(KINDS)}")
    row = _empty_row()
    values = np.asarray(values, dtype=float)
    energies = np.asarray(energies_hartree, dtype=float)
    finite = np.isfinite(energies)
    row["n_points"] = int(finite.sum())
    row["n_failed"] = int((~finite).sum())
    period = KINDS[kind].period
    if period is not None and periodic is None:
        periodic = covers_full_circle(values[finite])
    periodic = bool(periodic) if period is not None else False
    flags = []
    try:
        analysis = analyze_curve(
            values, energies, periodic=periodic, unit=KINDS[kind].unit, order=order, checks=checks
        )
    except ValueError as err:
        _set_flags(row, [Flag("analysis-failed", str(err))])
        return row
    flags.extend(analysis.flags)
    if minima_out is not None:
        minima_out.extend(m.q for m in analysis.minima)
    row["minimum_bracketed"] = bool(analysis.minimum_bracketed)
    symmetry = curve_symmetry(analysis.curve, analysis.spline)
    row.update(symmetry.columns())
    p = analysis.minimum
    if p is not None and analysis.minimum_bracketed:
        # Equivalent minima are one: the position in its canonical form (analysis.symmetry).
        row[position_column(kind)] = canonical_position(kind, p.q, symmetry)
        row["e_min_hartree"] = p.energy_hartree
    stretch = None
    if KINDS[kind].motion == "stretch":
        stretch = _stretch_columns(
            row,
            flags,
            analysis,
            reduced_mass_amu,
            diatomic,
            fragment_energies_hartree,
            restricted_closed_shell_reference,
            bond_breaking,
            checks,
        )
    else:
        # An angle's curvature is a bending force constant, a dihedral's a torsional one.
        prefix = "k_torsion" if KINDS[kind].motion == "torsion" else "k"
        row[f"{prefix}_hartree_rad-2"], row[f"{prefix}_aj_rad-2"] = bend_force_constants(analysis)
    barrier = torsion_barrier(analysis)
    if barrier is not None:
        for col, unit in BARRIER_UNITS.items():
            row[col] = barrier.height(unit)
    _set_flags(row, flags)
    if uncertainties:
        noise = energy_noise(analysis.curve, energy_noise_hartree, flags)
        options = dict(
            reduced_mass_amu=reduced_mass_amu,
            diatomic=diatomic,
            fragment_energies_hartree=fragment_energies_hartree,
            bond_breaking=bond_breaking,
            periodic=periodic,
            uncertainties=False,
            checks=False,
        )

        def analyse(q, e, k):
            minima = []
            out = summarize_curve(kind, q, e, order=k, minima_out=minima, **options)
            return out, minima

        row.update(
            curve_uncertainties(
                analyse,
                values,
                energies,
                row,
                periodic=periodic,
                position=position_column(kind),
                period=period if periodic else None,
                noise_hartree=noise,
                extra=_level_wall_errors(row, stretch),
            )
        )
    return row


def _stretch_columns(
    row, flags, analysis, mass, diatomic, fragments, restricted, bond_breaking, checks
):
    # Levels only for a diatomic (a polyatomic's 1-D levels are not reported); the
    # range advice of its few-levels flag only for a checked analysis.
    stretch = analyze_stretch(analysis, mass, levels=diatomic, advice=checks)
    if stretch is None:
        return None
    flags.extend(stretch.flags)
    row["k_hartree_bohr-2"] = stretch.k_hartree_bohr2
    row["k_mdyn_angstrom-1"] = stretch.k_mdyn_angstrom
    m = stretch.morse
    if m is not None:
        row["morse_d_e_ev"] = m.d_e_ev
        row["morse_a_angstrom-1"] = m.a_per_angstrom
        row["morse_r_e_angstrom"] = m.r_e_angstrom
        row["morse_rms_cm-1"] = m.rms_cm1
    if mass is not None:
        if diatomic:
            row["omega_e_cm-1"] = stretch.omega_cm1
            row["omega_e_x_e_cm-1"] = stretch.omega_e_x_e_cm1
            row["b_e_cm-1"] = stretch.b_e_cm1
            levels = stretch.levels
            row["n_levels_trusted"] = levels.n_trusted
            row["nu_01_cm-1"] = levels.nu_01_cm1
            row["zpe_cm-1"] = levels.zpe_cm1
            if m is not None:
                row["morse_omega_e_cm-1"] = m.omega_e_cm1(mass)
                row["morse_omega_e_x_e_cm-1"] = m.omega_e_x_e_cm1(mass)
        else:
            row["omega_1d_cm-1"] = stretch.omega_cm1
            flags.append(ONE_D_FLAG)
            flags[:] = [
                f
                for f in flags
                if f.code not in ("few-vibrational-levels", "anharmonicity-from-morse")
            ]
    r_end = float(analysis.curve.q[-1])
    breaking = bond_breaking or r_end > 2.0 * stretch.r_e_angstrom
    if fragments is not None or breaking:
        dis = dissociation_energy(analysis, fragments)
        if dis is not None:
            flags.extend(dis.flags)
            row["d_e_ev"] = dis.d_e_ev
            zpe = row["zpe_cm-1"]
            if np.isfinite(zpe):
                row["d_0_ev"] = dis.d_e_ev - zpe / HARTREE_TO_CM1 * HARTREE_TO_EV
    if restricted and breaking:
        flags.append(RESTRICTED_FLAG)
    return stretch


def energy_noise(curve, tolerance_hartree, flags=()):
    """Noise amplitude of a curve's energies for the uncertainty estimate (hartree).

    The SCF energy tolerance bounds how far a converged energy may be off, but a converged
    SCF is usually much better than its threshold: the largest leave-one-out residual of the
    curve bounds the noise from the data (a noisy point is missed by every interpolant, a
    smooth one less and less as the degree rises; the smallest over degrees 5, 7 and 9 the
    grid allows is taken), and the smaller of the two is used.  When the noise check flags
    noisy points (DFT grid noise, another SCF solution), their largest residual is used
    instead, whatever the tolerance.
    """
    noise = float(tolerance_hartree)
    if any(getattr(f, "code", None) == "noisy-points" for f in flags):
        bad, res = noisy_points(curve)
        if bad:
            return max(noise, float(np.nanmax(np.abs(res[bad]))))
    if noise > 0:
        for degree in (5, 7, 9):
            res = leave_one_out_residuals(curve, degree)
            if not np.all(np.isnan(res)):
                noise = min(noise, float(np.nanmax(np.abs(res))))
    return noise


def _level_wall_errors(row, stretch):
    """Extra uncertainty components of the vibrational levels: their wall error estimate."""
    if stretch is None or stretch.levels is None or not np.isfinite(row["zpe_cm-1"]):
        return {}
    wall = np.abs(np.asarray(stretch.levels.wall_error_cm1, dtype=float))
    out = {"zpe_cm-1": float(wall[0])}
    out["d_0_ev"] = float(wall[0]) / HARTREE_TO_CM1 * HARTREE_TO_EV
    if np.isfinite(row["nu_01_cm-1"]) and len(wall) > 1:
        out["nu_01_cm-1"] = float(np.hypot(wall[0], wall[1]))
    return out


def summarize_surface(
    q1,
    q2,
    energies_hartree,
    *,
    kinds=("distance", "distance"),
    periodic=(None, None),
    energy_noise_hartree=0.0,
    uncertainties=True,
    order=5,
    minima_out=None,
):
    """Summary row of one 2-D scan E(q1, q2) on a regular grid.

    Args:
        q1, q2: axis values, A or degree according to ``kinds``.
        energies_hartree: array (len(q1), len(q2)); NaN for failed points.
        kinds: per axis ``"distance"``, ``"angle"`` or ``"dihedral"``.
        periodic: per axis True / False, or None (a dihedral axis covering the full circle).
        energy_noise_hartree, uncertainties, order, minima_out: as for
            :func:`summarize_curve` (``minima_out`` receives ``(q1, q2)`` of every minimum).

    Returns a dict: ``n_points``, ``n_failed``, ``minimum_bracketed``, ``n_minima``,
    ``n_saddles``, ``q1_e_<unit>``, ``q2_e_<unit>``, ``e_min_hartree``, ``barrier_kcal_mol``,
    ``barrier_kj_mol``, ``barrier_cm-1``, ``barrier_ev`` (the highest saddle on the lowest
    minimum-energy paths connecting all minima, above the global minimum), the standard
    uncertainties ``u_<column>`` of the positions, E_min and barriers, the symmetry
    columns (``symmetry_swap`` for a grid with E(q1, q2) = E(q2, q1); the minimum is then
    given with q1 <= q2) and ``flags``.
    """
    units = tuple(KINDS[k].unit for k in kinds)
    per = tuple(
        p if KINDS[k].period is not None else False for p, k in zip(periodic, kinds, strict=True)
    )
    e = np.asarray(energies_hartree, dtype=float)
    row = {
        "n_points": int(np.isfinite(e).sum()),
        "n_failed": int((~np.isfinite(e)).sum()),
        "minimum_bracketed": False,
        "n_minima": 0,
        "n_saddles": 0,
        f"q1_e_{units[0]}": float("nan"),
        f"q2_e_{units[1]}": float("nan"),
        "e_min_hartree": float("nan"),
        **{c: float("nan") for c in BARRIER_UNITS},
        **surface_symmetry(q1, q2, e, kinds).columns(),
        "flags": "",
        "flag_records": "[]",
    }
    flags = []
    try:
        surface = prepare_surface(q1, q2, e, units=units, periodic=per, order=order)
    except ValueError as err:
        _set_flags(row, [Flag("analysis-failed", str(err))])
        return row
    flags.extend(surface.notes)
    minima = find_minima(surface)
    if minima_out is not None:
        minima_out.extend(tuple(m.q) for m in minima)
    saddles = find_saddles(surface)
    row["n_minima"], row["n_saddles"] = len(minima), len(saddles)
    grid = surface.energy_hartree
    i, j = np.unravel_index(int(np.argmin(grid)), grid.shape)
    on_edge = (not surface.periodic[0] and i in (0, grid.shape[0] - 1)) or (
        not surface.periodic[1] and j in (0, grid.shape[1] - 1)
    )
    if on_edge:
        flags.append(
            Flag(
                "minimum-not-bracketed",
                f"minimum not bracketed: the lowest grid energy is on the edge of the grid at "
                f"({surface.q1[i]:.4g}, {surface.q2[j]:.4g}); extend the grid there",
                (surface.q1[i], surface.q2[j]),
            )
        )
    if minima:
        row["minimum_bracketed"] = not on_edge
        row[f"q1_e_{units[0]}"], row[f"q2_e_{units[1]}"] = canonical_pair(
            minima[0].q, Symmetry.of_row(row)
        )
        row["e_min_hartree"] = minima[0].energy_hartree
    else:
        flags.append(Flag("no-minimum", "no bracketed minimum on the surface"))
    height, paths = connecting_barrier(surface, minima)
    if np.isfinite(height):
        for col, unit in BARRIER_UNITS.items():
            row[col] = float(convert_energy(height, unit))
        for path in paths:
            if path.saddle.kind != "saddle":
                flags.append(
                    Flag(
                        "path-not-saddle",
                        f"the highest point of a minimum-energy path near {path.saddle.q} is "
                        "not a first-order saddle; refine the grid there",
                        tuple(path.saddle.q),
                    )
                )
            if not path.converged:
                flags.append(Flag("path-not-converged", "a minimum-energy path did not converge"))
    _set_flags(row, flags)
    if uncertainties:

        def analyse(a1, a2, grid, k):
            found = []
            out = summarize_surface(
                a1,
                a2,
                grid,
                kinds=kinds,
                periodic=surface.periodic,
                uncertainties=False,
                order=k,
                minima_out=found,
            )
            return out, found

        row.update(
            surface_uncertainties(
                analyse,
                q1,
                q2,
                e,
                row,
                periodic=surface.periodic,
                positions=(f"q1_e_{units[0]}", f"q2_e_{units[1]}"),
                periods=tuple(KINDS[k].period for k in kinds),
                noise_hartree=float(energy_noise_hartree),
            )
        )
    return row
