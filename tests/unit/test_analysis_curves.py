"""Stationary points of 1-D curves: exact analytic curves in, known positions and curvatures out."""

import numpy as np
import pytest

from pesflow.analysis.curves import (
    analyze_curve,
    covers_full_circle,
    interpolant,
    noisy_points,
    prepare_curve,
    wrap_degrees,
)
from pesflow.analysis.derived import SUMMARY_COLUMNS, summarize_curve
from pesflow.units import AMU_TO_ME, ANGSTROM_BOHR, HARTREE_TO_CM1, isotope_mass

# Hydrogen fluoride, Huber & Herzberg, Constants of Diatomic Molecules (1979) (values from
# memory): omega_e = 4138.32 cm-1, omega_e x_e = 89.88 cm-1, r_e = 0.9168 A.  The Morse curve
# with these constants has D_e = omega_e^2 / (4 omega_e x_e) and a = omega_e sqrt(mu / 2 D_e)
# (Morse, Phys. Rev. 34, 57 (1929)); its exact force constant is k = 2 D_e a^2.
OMEGA_E_CM1, OMEGA_E_X_E_CM1, R_E_ANGSTROM = 4138.32, 89.88, 0.9168
MU_HF_AMU = isotope_mass("H") * isotope_mass("F") / (isotope_mass("H") + isotope_mass("F"))
D_E_HARTREE = OMEGA_E_CM1**2 / (4 * OMEGA_E_X_E_CM1) / HARTREE_TO_CM1
OMEGA_E_HARTREE = OMEGA_E_CM1 / HARTREE_TO_CM1
MU_HF_ME = MU_HF_AMU * AMU_TO_ME
A_PER_ANGSTROM = OMEGA_E_HARTREE * np.sqrt(MU_HF_ME / (2 * D_E_HARTREE)) * ANGSTROM_BOHR
K_HARTREE_ANGSTROM2 = 2 * D_E_HARTREE * A_PER_ANGSTROM**2
E_OFFSET = -100.07  # a typical absolute SCF energy; the analysis must not depend on it


def morse(r):
    return D_E_HARTREE * (1 - np.exp(-A_PER_ANGSTROM * (r - R_E_ANGSTROM))) ** 2 + E_OFFSET


def test_quintic_spline_gives_r_e_and_k_on_15_points_spanning_0_2_angstrom():
    # Deliberately off-centre grid: the minimum does not sit on a grid point.
    r = np.linspace(R_E_ANGSTROM - 0.19, R_E_ANGSTROM + 0.21, 15)
    a = analyze_curve(r, morse(r))
    assert a.minimum_bracketed
    assert a.minimum.q == pytest.approx(R_E_ANGSTROM, abs=1e-5)
    assert a.minimum.energy_hartree == pytest.approx(E_OFFSET, abs=1e-9)
    assert a.minimum.curvature == pytest.approx(K_HARTREE_ANGSTROM2, rel=1e-3)
    assert a.flags == ()


def test_cubic_spline_alone_would_miss_the_force_constant_target():
    # Why the default is quintic: a cubic through the same 15 points is off by > 0.1 % in k.
    r = np.linspace(R_E_ANGSTROM - 0.2, R_E_ANGSTROM + 0.2, 15)
    cubic = interpolant(prepare_curve(r, morse(r)), order=3)
    assert abs(cubic(R_E_ANGSTROM, 2) / K_HARTREE_ANGSTROM2 - 1) > 1e-3


def test_minimum_at_the_edge_is_not_bracketed_and_not_reported():
    r = np.linspace(R_E_ANGSTROM + 0.05, R_E_ANGSTROM + 0.5, 12)
    a = analyze_curve(r, morse(r))
    assert not a.minimum_bracketed
    assert a.minimum is None and a.minima == ()
    assert any("not bracketed" in f and "extend the scan below" in f for f in a.flags)
    row = summarize_curve("distance", r, morse(r), reduced_mass_amu=MU_HF_AMU, diatomic=True)
    assert row["minimum_bracketed"] is False
    assert np.isnan(row["r_e_angstrom"]) and np.isnan(row["omega_e_cm-1"])


def test_minimum_at_the_far_edge_asks_to_extend_above():
    r = np.linspace(R_E_ANGSTROM - 0.4, R_E_ANGSTROM - 0.02, 10)
    a = analyze_curve(r, morse(r))
    assert not a.minimum_bracketed
    assert any("extend the scan above" in f for f in a.flags)


def test_coarse_four_point_grid_gets_concrete_advice_and_a_fine_grid_none():
    coarse = np.linspace(R_E_ANGSTROM - 0.2, R_E_ANGSTROM + 0.25, 4)
    a = analyze_curve(coarse, morse(coarse))
    advice = [f for f in a.flags if "grid too coarse" in f]
    assert len(advice) == 1
    # The advice names the scanned points around the minimum and a step.
    assert "add points between" in advice[0] and "step" in advice[0]
    i = int(np.argmin(morse(coarse)))
    assert f"{coarse[i - 1]:.4g}" in advice[0] and f"{coarse[i + 1]:.4g}" in advice[0]

    fine = np.linspace(R_E_ANGSTROM - 0.2, R_E_ANGSTROM + 0.25, 25)
    assert not [f for f in analyze_curve(fine, morse(fine)).flags if "coarse" in f]


def test_random_noise_is_detected_and_a_smooth_curve_is_not():
    r = np.linspace(R_E_ANGSTROM - 0.3, R_E_ANGSTROM + 0.3, 21)
    smooth = analyze_curve(r, morse(r))
    assert not [f for f in smooth.flags if "noisy" in f]
    noise = np.random.default_rng(7).normal(0.0, 3e-6, r.size)
    noisy = analyze_curve(r, morse(r) + noise)
    assert [f for f in noisy.flags if "noisy" in f]


def test_a_single_outlier_is_located():
    r = np.linspace(R_E_ANGSTROM - 0.3, R_E_ANGSTROM + 0.3, 21)
    e = morse(r)
    e[13] += 2e-5  # e.g. one SCF landed on another solution
    bad, residuals = noisy_points(prepare_curve(r, e))
    assert bad == [13]
    assert abs(residuals[13]) > 1e-5


def test_failed_points_are_excluded_and_counted():
    r = np.linspace(R_E_ANGSTROM - 0.2, R_E_ANGSTROM + 0.2, 17)
    e = morse(r)
    e[[3, 12]] = np.nan
    a = analyze_curve(r, e)
    assert a.curve.n_failed == 2 and a.curve.n_points == 15
    assert a.minimum.q == pytest.approx(R_E_ANGSTROM, abs=1e-5)
    assert any("2 failed point(s)" in f for f in a.flags)
    row = summarize_curve("distance", r, e)
    assert row["n_points"] == 15 and row["n_failed"] == 2


def test_periodic_curve_wraps_and_joins_the_ends():
    # A 1-fold torsion E = (1 - cos phi)/2 scanned from -180 to 170: the minimum (0) is interior
    # only once the ends are joined; the maximum at 180 sits on the seam.
    phi = np.arange(-180.0, 180.0, 10.0)
    e = 0.5 * (1 - np.cos(np.radians(phi))) * 0.004
    assert covers_full_circle(phi)
    a = analyze_curve(phi, e, periodic=True, unit="degree")
    assert [round(p.q, 6) for p in a.minima] == [0.0]
    assert [round(p.q, 6) for p in a.maxima] == [180.0]
    assert a.maxima[0].energy_hartree == pytest.approx(0.004, abs=1e-12)
    # Curvature at the minimum: d2/dphi2 of 0.002 (1 - cos phi) is 0.002 per rad^2.
    assert a.minimum.curvature == pytest.approx(0.002 * np.radians(1.0) ** 2, rel=1e-4)


def test_half_circle_dihedral_is_not_joined():
    assert not covers_full_circle(np.arange(0.0, 181.0, 15.0))
    assert wrap_degrees([-90.0, 360.0, 725.0]).tolist() == [270.0, 0.0, 5.0]


def test_summary_row_has_every_column_with_units_in_the_names():
    r = np.linspace(R_E_ANGSTROM - 0.2, R_E_ANGSTROM + 0.2, 15)
    row = summarize_curve("distance", r, morse(r))
    assert tuple(row) == SUMMARY_COLUMNS
    assert row["r_e_angstrom"] == pytest.approx(R_E_ANGSTROM, abs=1e-5)
    assert np.isnan(row["omega_e_cm-1"])  # no mass given
    assert np.isnan(row["angle_e_degree"]) and np.isnan(row["barrier_kcal_mol"])


def test_too_few_points_give_a_row_of_nans_with_the_reason():
    row = summarize_curve("distance", [0.9, 1.0, 1.1], [np.nan, -100.0, np.nan])
    assert row["n_points"] == 1 and row["n_failed"] == 2
    assert "at least three" in row["flags"]


# A torsion-like curve with hydrogen-peroxide magnitudes: V(phi) = sum_k a_k cos(k phi) with
# a = (4.5, 3.2, 0.4, 0.1) mhartree.  Its cis barrier is about 9 kcal/mol and its trans barrier
# about 1 kcal/mol above the minima near 115 and 245 degrees, the shape of H2O2's torsion
# (experiment: cis about 7, trans about 1.1 kcal/mol; values from memory, for scale only).
TORSION_A_HARTREE = (4.5e-3, 3.2e-3, 0.4e-3, 0.1e-3)


def torsion(phi_degree):
    phi = np.radians(phi_degree)
    return -150.8 + sum(a * np.cos((k + 1) * phi) for k, a in enumerate(TORSION_A_HARTREE))


PHI_15 = np.arange(0.0, 360.0, 15.0)


def test_smooth_torsion_on_a_15_degree_grid_raises_no_noise_flag():
    a = analyze_curve(PHI_15, torsion(PHI_15), periodic=True, unit="degree")
    # The quintic misses left-out points by up to ~3e-6 hartree on the steep parts (a
    # 30-degree gap): interpolation error, not noise.
    assert np.nanmax(np.abs(noisy_points(a.curve)[1])) > 1e-6
    assert not [f for f in a.flags if "noisy" in f]
    assert noisy_points(a.curve)[0] == []


@pytest.mark.parametrize("spacing", [5.0, 10.0, 20.0, 30.0])
def test_smooth_torsion_raises_no_noise_flag_at_other_spacings(spacing):
    phi = np.arange(0.0, 360.0, spacing)
    assert noisy_points(prepare_curve(phi, torsion(phi), periodic=True, unit="degree"))[0] == []


@pytest.mark.parametrize("index", [0, 2, 5, 12])
def test_a_1e5_hartree_step_on_one_point_of_the_torsion_is_found_there(index):
    # Another SCF solution 1e-5 hartree (0.006 kcal/mol) above the curve at one point.
    e = torsion(PHI_15)
    e[index] += 1e-5
    bad, _ = noisy_points(prepare_curve(PHI_15, e, periodic=True, unit="degree"))
    assert index in bad and len(bad) <= 2
    flags = analyze_curve(PHI_15, e, periodic=True, unit="degree").flags
    assert [f for f in flags if "noisy" in f]


def test_a_1e5_hartree_step_on_a_run_of_points_is_caught():
    e = torsion(PHI_15)
    e[5:8] += 1e-5  # three neighbouring points on another solution
    bad, _ = noisy_points(prepare_curve(PHI_15, e, periodic=True, unit="degree"))
    assert bad and set(bad) <= {4, 5, 6, 7, 8}
    half = np.arange(0.0, 181.0, 15.0)
    e = torsion(half)
    e[7:] += 1e-5  # a jump to another solution for the rest of a half-circle scan
    bad, _ = noisy_points(prepare_curve(half, e, unit="degree"))
    assert bad and min(bad) in (6, 7)


def test_random_noise_on_the_torsion_is_detected():
    noise = np.random.default_rng(7).normal(0.0, 3e-6, PHI_15.size)
    a = analyze_curve(PHI_15, torsion(PHI_15) + noise, periodic=True, unit="degree")
    assert [f for f in a.flags if "noisy" in f]
