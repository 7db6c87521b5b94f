"""Barriers and dissociation energies of analytic curves with known stationary points."""

import numpy as np
import pytest
from scipy import optimize

from pesflow.analysis.barriers import (
    ENERGY_UNITS,
    dissociation_energy,
    extrema_table,
    relative_energies,
    torsion_barrier,
)
from pesflow.analysis.curves import analyze_curve
from pesflow.analysis.derived import summarize_curve
from pesflow.units import HARTREE_TO_KCAL_MOL, convert_energy
from tests.unit.test_analysis_curves import D_E_HARTREE, R_E_ANGSTROM, morse

V0_KCAL_MOL = 2.9  # an ethane-like threefold barrier


def threefold(phi_degree):
    v0 = V0_KCAL_MOL / HARTREE_TO_KCAL_MOL
    return v0 / 2 * (1 - np.cos(3 * np.radians(phi_degree))) - 79.2


def test_threefold_torsion_barrier_is_exact_with_three_equivalent_minima():
    # Offset 5-degree grid: neither the minima nor the maxima sit on grid points.
    phi = np.arange(2.5, 360.0, 5.0)
    a = analyze_curve(phi, threefold(phi), periodic=True, unit="degree")
    assert [round(p.q, 4) for p in a.minima] == [0.0, 120.0, 240.0]
    assert [round(p.q, 4) for p in a.maxima] == [60.0, 180.0, 300.0]
    table = extrema_table(a)
    for m in (x for x in table if x.kind == "minimum"):
        assert m.relative("kcal_mol") == pytest.approx(0.0, abs=1e-6)
    barrier = torsion_barrier(a)
    assert barrier.height("kcal_mol") == pytest.approx(V0_KCAL_MOL, abs=1e-6)
    # The other units follow the constants of pesflow.units (1 kcal = 4.184 kJ, thermochemical).
    assert barrier.height("kj_mol") == pytest.approx(V0_KCAL_MOL * 4.184, abs=1e-5)
    row = summarize_curve("dihedral", phi, threefold(phi))
    assert row["barrier_kcal_mol"] == pytest.approx(V0_KCAL_MOL, abs=1e-6)
    assert row["barrier_cm-1"] == pytest.approx(
        convert_energy(V0_KCAL_MOL / HARTREE_TO_KCAL_MOL, "cm-1"), abs=1e-3
    )
    # Any of the three equivalent minima may come out lowest.
    assert min(abs(row["dihedral_e_degree"] - m) for m in (0.0, 120.0, 240.0, 360.0)) < 1e-4
    # A dihedral's curvature is labelled as a torsion, not as a bend.
    assert np.isnan(row["k_hartree_rad-2"]) and np.isnan(row["k_aj_rad-2"])
    # Torsional force constant 9 V0 / 2 per rad^2; a 5-degree grid gives it to ~1e-5.
    assert row["k_torsion_hartree_rad-2"] == pytest.approx(
        9 / 2 * V0_KCAL_MOL / HARTREE_TO_KCAL_MOL, rel=1e-4
    )


def butane_like(phi_degree):
    # Fourier torsion potential with anti (180), gauche (~60, ~300) minima and a high syn
    # maximum at 0: the barrier that connects all minima is the anti-gauche one.
    p = np.radians(phi_degree)
    v1, v2, v3 = 1.5, -0.2, 3.0  # kcal/mol
    return (
        v1 / 2 * (1 + np.cos(p)) + v2 / 2 * (1 - np.cos(2 * p)) + v3 / 2 * (1 + np.cos(3 * p))
    ) / HARTREE_TO_KCAL_MOL


def test_barrier_on_the_lowest_path_avoids_the_syn_maximum():
    phi = np.arange(0.0, 360.0, 5.0)
    a = analyze_curve(phi, butane_like(phi), periodic=True, unit="degree")
    assert len(a.minima) == 3 and len(a.maxima) == 3
    # Reference from the analytic function, maximised independently of the spline.
    anti_gauche = optimize.minimize_scalar(lambda x: -butane_like(x), bounds=(90, 150)).x
    syn = butane_like(0.0) - butane_like(180.0)
    expected = butane_like(anti_gauche) - butane_like(180.0)
    b = torsion_barrier(a)
    assert b.q_max == pytest.approx(anti_gauche, abs=1e-3) or b.q_max == pytest.approx(
        360 - anti_gauche, abs=1e-3
    )
    assert b.height_hartree == pytest.approx(expected, abs=1e-9)
    assert b.height_hartree < syn


def test_inversion_double_well():
    # E = c (x^2 - b^2)^2: minima at +-b, maximum c b^4 at 0 (e.g. an inversion coordinate).
    c, b = 0.02, 0.4
    x = np.linspace(-0.8, 0.8, 33)
    a = analyze_curve(x, c * (x**2 - b**2) ** 2)
    assert [round(p.q, 6) for p in a.minima] == [-b, b]
    assert torsion_barrier(a).height_hartree == pytest.approx(c * b**4, rel=1e-6)


def test_single_minimum_open_curve_has_no_barrier():
    r = np.linspace(0.7, 1.2, 15)
    assert torsion_barrier(analyze_curve(r, morse(r))) is None


def test_relative_energies_in_every_unit():
    e = relative_energies(0.001)
    assert set(e) == set(ENERGY_UNITS)
    # 1 hartree = 627.5094740631 kcal/mol = 219474.63 cm-1 = 27.211386 eV (CODATA 2018).
    assert e["kcal_mol"] == pytest.approx(0.6275094740631, rel=1e-9)
    assert e["cm-1"] == pytest.approx(219.47463136, rel=1e-8)
    assert e["ev"] == pytest.approx(0.027211386246, rel=1e-8)


def test_dissociation_energy_from_a_scan_that_reaches_the_asymptote():
    r = np.linspace(0.6, 8.0, 60)
    d = dissociation_energy(analyze_curve(r, morse(r)))
    assert d.flattened and d.source == "asymptote"
    assert d.d_e_hartree == pytest.approx(D_E_HARTREE, rel=1e-4)
    assert d.flags == ()


def test_dissociation_from_a_scan_that_stops_early_is_flagged():
    r = np.linspace(0.6, 2.2, 40)
    d = dissociation_energy(analyze_curve(r, morse(r)))
    assert not d.flattened
    assert d.d_e_hartree < D_E_HARTREE
    assert any("not flattened" in f for f in d.flags)


def test_dissociation_from_fragment_energies():
    r = np.linspace(0.7, 1.2, 15)
    e_a, e_b = -99.8, -0.5
    d = dissociation_energy(analyze_curve(r, morse(r)), (e_a, e_b))
    assert d.source == "fragments"
    assert d.d_e_hartree == pytest.approx(e_a + e_b - morse(R_E_ANGSTROM), abs=1e-9)
    row = summarize_curve("distance", r, morse(r), fragment_energies_hartree=(e_a, e_b))
    assert row["d_e_ev"] == pytest.approx(d.d_e_ev)


def test_fragments_that_the_scan_does_not_reach_are_flagged():
    r = np.linspace(0.6, 8.0, 60)
    asymptote = morse(r[-1])
    d = dissociation_energy(analyze_curve(r, morse(r)), (asymptote - 0.01, 0.0))
    assert any("does not reach those fragments" in f for f in d.flags)
