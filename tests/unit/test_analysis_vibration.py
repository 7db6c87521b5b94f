"""Vibrational analysis against exact results: the harmonic oscillator, the Morse oscillator
(Morse, Phys. Rev. 34, 57 (1929): E_v = omega_e (v + 1/2) - omega_e x_e (v + 1/2)^2), and
published spectroscopic constants of hydrogen fluoride."""

import numpy as np
import pytest
import scipy.constants as sc

from pesflow.analysis.curves import analyze_curve
from pesflow.analysis.derived import ONE_D_FLAG, RESTRICTED_FLAG, summarize_curve
from pesflow.analysis.vibration import (
    HARTREE_BOHR2_TO_MDYN_ANGSTROM,
    analyze_stretch,
    bend_force_constant,
    bend_force_constants,
    fit_morse,
    harmonic_wavenumber_cm1,
    rotational_constant_cm1,
    sinc_dvr,
    stretch_force_constant,
    vibrational_levels,
)
from pesflow.units import AMU_TO_ME, BOHR_ANGSTROM, DEGREE, HARTREE_TO_CM1, HARTREE_TO_EV
from tests.unit.test_analysis_curves import (
    A_PER_ANGSTROM,
    D_E_HARTREE,
    MU_HF_AMU,
    OMEGA_E_CM1,
    OMEGA_E_X_E_CM1,
    R_E_ANGSTROM,
    morse,
)


def morse_levels_cm1(n):
    v = np.arange(n) + 0.5
    return OMEGA_E_CM1 * v - OMEGA_E_X_E_CM1 * v**2


def test_force_constant_units():
    # 1 hartree/bohr^2 = E_h / a0^2 = 1556.89 N/m = 15.5689 mdyn/A (CODATA E_h and a0).
    expected = (
        sc.physical_constants["Hartree energy"][0]
        / sc.physical_constants["Bohr radius"][0] ** 2
        / 100.0
    )
    assert HARTREE_BOHR2_TO_MDYN_ANGSTROM == pytest.approx(expected, rel=1e-12)
    assert HARTREE_BOHR2_TO_MDYN_ANGSTROM == pytest.approx(15.5689, abs=1e-4)
    k_au, k_mdyn = stretch_force_constant(0.5 / BOHR_ANGSTROM**2)
    assert k_au == pytest.approx(0.5) and k_mdyn == pytest.approx(0.5 * 15.5689, abs=1e-3)
    # 1 aJ = 1 mdyn A; E_h = 4.3597447222071 aJ (CODATA 2018).
    k_rad, k_aj = bend_force_constant(0.2 * DEGREE**2)
    assert k_rad == pytest.approx(0.2) and k_aj == pytest.approx(0.2 * 4.3597447222071)


def test_harmonic_wavenumber_of_a_parabola():
    # E = k/2 (r - r0)^2 with k = 0.6 hartree/bohr^2: omega = sqrt(k / mu) in hartree.
    k = 0.6
    r = np.linspace(0.8, 1.0, 11)
    e = 0.5 * k * ((r - 0.9) / BOHR_ANGSTROM) ** 2 - 1.0
    s = analyze_stretch(analyze_curve(r, e), MU_HF_AMU)
    expected = np.sqrt(k / (MU_HF_AMU * AMU_TO_ME)) * HARTREE_TO_CM1
    assert s.k_hartree_bohr2 == pytest.approx(k, rel=1e-9)
    assert s.omega_cm1 == pytest.approx(expected, rel=1e-9)
    assert harmonic_wavenumber_cm1(k, MU_HF_AMU) == pytest.approx(expected, rel=1e-12)


def test_morse_fit_returns_its_own_parameters():
    r = np.linspace(0.7, 1.6, 25)
    fit = fit_morse(r, morse(r), spline=analyze_curve(r, morse(r)).spline, r_e_guess=0.92)
    assert fit.success
    assert fit.d_e_hartree == pytest.approx(D_E_HARTREE, rel=1e-8)
    assert fit.a_per_angstrom == pytest.approx(A_PER_ANGSTROM, rel=1e-8)
    assert fit.r_e_angstrom == pytest.approx(R_E_ANGSTROM, abs=1e-9)
    assert fit.omega_e_cm1(MU_HF_AMU) == pytest.approx(OMEGA_E_CM1, abs=1e-4)
    assert fit.omega_e_x_e_cm1(MU_HF_AMU) == pytest.approx(OMEGA_E_X_E_CM1, abs=1e-5)
    assert fit.rms_cm1 < 1e-6


def test_morse_fit_on_a_short_scan_around_the_minimum():
    # The usual +-0.2 A scan: D_e is an extrapolation, yet exact data give exact parameters.
    r = np.linspace(R_E_ANGSTROM - 0.2, R_E_ANGSTROM + 0.2, 15)
    fit = fit_morse(r, morse(r), spline=analyze_curve(r, morse(r)).spline, r_e_guess=0.92)
    assert fit.d_e_ev == pytest.approx(D_E_HARTREE * HARTREE_TO_EV, rel=1e-5)
    assert fit.omega_e_x_e_cm1(MU_HF_AMU) == pytest.approx(OMEGA_E_X_E_CM1, rel=1e-5)


def test_sinc_dvr_reproduces_harmonic_levels():
    # Harmonic oscillator: E_v = omega (v + 1/2) exactly.
    mu = MU_HF_AMU * AMU_TO_ME
    omega = 4000.0 / HARTREE_TO_CM1
    k = mu * omega**2
    _, e, _ = sinc_dvr(lambda x: 0.5 * k * x**2, -1.2, 1.2, mu, n_grid=201, n_levels=8)
    exact = omega * (np.arange(8) + 0.5)
    assert np.max(np.abs(e - exact)) * HARTREE_TO_CM1 < 0.01


def test_sinc_dvr_reproduces_morse_levels():
    mu = MU_HF_AMU * AMU_TO_ME
    a_bohr = A_PER_ANGSTROM * BOHR_ANGSTROM
    x_e = R_E_ANGSTROM / BOHR_ANGSTROM

    def v(x):
        return D_E_HARTREE * (1 - np.exp(-a_bohr * (x - x_e))) ** 2

    _, e, _ = sinc_dvr(v, 0.9, 5.0, mu, n_grid=401, n_levels=10)
    assert np.max(np.abs(e * HARTREE_TO_CM1 - morse_levels_cm1(10))) < 0.01


def test_levels_from_a_sampled_wide_scan():
    # 61 scanned points from 0.5 to 2.5 A: levels from the interpolated curve, not the formula.
    r = np.linspace(0.5, 2.5, 61)
    a = analyze_curve(r, morse(r))
    levels = vibrational_levels(a.spline, r[0], r[-1], a.minimum.energy_hartree, MU_HF_AMU)
    assert levels.n_trusted >= 6
    exact = morse_levels_cm1(levels.n_trusted)
    assert np.max(np.abs(levels.trusted_cm1 - exact)) < 0.01
    omega_e, wexe = levels.anharmonic_constants_cm1()
    assert omega_e == pytest.approx(OMEGA_E_CM1, abs=0.01)
    assert wexe == pytest.approx(OMEGA_E_X_E_CM1, abs=0.01)
    assert levels.zpe_cm1 == pytest.approx(exact[0], abs=0.01)
    assert levels.nu_01_cm1 == pytest.approx(OMEGA_E_CM1 - 2 * OMEGA_E_X_E_CM1, abs=0.01)


def test_levels_trapped_by_a_short_scan_are_not_trusted():
    # On +-0.2 A the ends act as walls and push v = 0 up by ~100 cm-1: nothing is reported.
    r = np.linspace(R_E_ANGSTROM - 0.2, R_E_ANGSTROM + 0.2, 15)
    a = analyze_curve(r, morse(r))
    levels = vibrational_levels(a.spline, r[0], r[-1], a.minimum.energy_hartree, MU_HF_AMU)
    assert levels.n_trusted == 0
    assert levels.energies_cm1[0] - morse_levels_cm1(1)[0] > 50.0
    assert levels.wall_error_cm1[0] > 50.0  # the wall estimate sees it
    row = summarize_curve("distance", r, morse(r), reduced_mass_amu=MU_HF_AMU, diatomic=True)
    assert row["n_levels_trusted"] == 0
    assert np.isnan(row["zpe_cm-1"]) and np.isnan(row["nu_01_cm-1"])
    assert "extend the scan" in row["flags"]
    # The harmonic wavenumber needs only the curvature and is exact here.
    assert row["omega_e_cm-1"] == pytest.approx(OMEGA_E_CM1, abs=0.01)


def test_wall_error_estimate_tracks_the_true_error():
    # Scan ends at +-0.45 A: the lowest levels feel the walls a little; the estimate must be
    # within a factor of two of the true shift (and never say "trusted" for a bad level).
    r = np.linspace(R_E_ANGSTROM - 0.45, R_E_ANGSTROM + 0.45, 41)
    a = analyze_curve(r, morse(r))
    levels = vibrational_levels(a.spline, r[0], r[-1], a.minimum.energy_hartree, MU_HF_AMU)
    true = levels.energies_cm1 - morse_levels_cm1(len(levels.energies_cm1))
    big = true > 0.01
    assert big.any()
    ratio = levels.wall_error_cm1[big] / true[big]
    assert np.all((ratio > 0.5) & (ratio < 2.0))
    assert np.all(np.abs(true[levels.trusted]) < 0.1 + 0.01)


def test_rotational_constant_of_hydrogen_fluoride():
    # Huber & Herzberg (1979): B_e(HF) = 20.9557 cm-1 with r_e = 0.9168 A (values from memory);
    # r_e to 4 digits fixes B_e to ~1e-4 relative.
    assert rotational_constant_cm1(R_E_ANGSTROM, MU_HF_AMU) == pytest.approx(20.9557, rel=3e-4)


def test_summary_of_a_wide_diatomic_scan():
    r = np.linspace(0.5, 2.5, 61)
    row = summarize_curve("distance", r, morse(r), reduced_mass_amu=MU_HF_AMU, diatomic=True)
    assert row["omega_e_cm-1"] == pytest.approx(OMEGA_E_CM1, abs=0.01)
    assert row["omega_e_x_e_cm-1"] == pytest.approx(OMEGA_E_X_E_CM1, abs=0.01)
    assert row["morse_omega_e_cm-1"] == pytest.approx(OMEGA_E_CM1, abs=0.01)
    assert row["morse_d_e_ev"] == pytest.approx(D_E_HARTREE * HARTREE_TO_EV, rel=1e-6)
    assert row["morse_a_angstrom-1"] == pytest.approx(A_PER_ANGSTROM, rel=1e-6)
    assert row["nu_01_cm-1"] == pytest.approx(OMEGA_E_CM1 - 2 * OMEGA_E_X_E_CM1, abs=0.01)
    assert row["b_e_cm-1"] == pytest.approx(rotational_constant_cm1(R_E_ANGSTROM, MU_HF_AMU))
    assert row["k_mdyn_angstrom-1"] == pytest.approx(
        2 * D_E_HARTREE * (A_PER_ANGSTROM * BOHR_ANGSTROM) ** 2 * HARTREE_BOHR2_TO_MDYN_ANGSTROM,
        rel=1e-4,
    )
    assert np.isnan(row["omega_1d_cm-1"])


def test_polyatomic_stretch_is_labelled_one_dimensional():
    r = np.linspace(R_E_ANGSTROM - 0.2, R_E_ANGSTROM + 0.2, 15)
    row = summarize_curve("distance", r, morse(r), reduced_mass_amu=MU_HF_AMU, diatomic=False)
    assert np.isnan(row["omega_e_cm-1"])
    assert row["omega_1d_cm-1"] == pytest.approx(OMEGA_E_CM1, abs=0.01)
    assert ONE_D_FLAG in row["flags"]
    assert np.isnan(row["zpe_cm-1"]) and np.isnan(row["b_e_cm-1"])


def test_restricted_reference_warning_on_a_bond_breaking_scan():
    r = np.linspace(0.7, 2.5, 40)  # beyond 2 r_e
    row = summarize_curve("distance", r, morse(r), restricted_closed_shell_reference=True)
    assert RESTRICTED_FLAG in row["flags"]
    short = np.linspace(0.8, 1.1, 12)
    row = summarize_curve("distance", short, morse(short), restricted_closed_shell_reference=True)
    assert RESTRICTED_FLAG not in row["flags"]
    row = summarize_curve(
        "distance",
        short,
        morse(short),
        restricted_closed_shell_reference=True,
        bond_breaking=True,
    )
    assert RESTRICTED_FLAG in row["flags"]


def test_bend_force_constant_from_an_angle_scan():
    # E = k/2 (theta - 104.5 deg)^2 with k = 0.16 hartree/rad^2 and a small cubic term.
    theta = np.arange(90.0, 120.1, 2.5)
    x = np.radians(theta - 104.5)
    e = 0.5 * 0.16 * x**2 - 0.05 * x**3 - 76.0
    a = analyze_curve(theta, e, unit="degree")
    k_rad, k_aj = bend_force_constants(a)
    assert k_rad == pytest.approx(0.16, rel=1e-6)
    row = summarize_curve("angle", theta, e)
    assert row["angle_e_degree"] == pytest.approx(104.5, abs=1e-6)
    assert row["k_hartree_rad-2"] == pytest.approx(0.16, rel=1e-6)
    assert row["k_aj_rad-2"] == pytest.approx(k_aj)
    assert np.isnan(row["k_hartree_bohr-2"]) and np.isnan(row["omega_e_cm-1"])
