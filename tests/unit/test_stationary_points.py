"""Every stationary point of a curve or surface, relative to its global minimum, with
equivalent copies folded and deviations against the reference level's nearest equivalent.

Analytic curves, so the check values are exact; the unit factors are those of
:mod:`pesflow.units` (CODATA through scipy.constants; 1 kcal = 4.184 kJ).
"""

import numpy as np
import pandas as pd
import pytest

from pesflow.analysis.stationary import (
    match_deviation,
    stationary_points_of_curve,
    stationary_points_of_surface,
)
from pesflow.analysis.symmetry import Symmetry
from pesflow.tables.stationary import ENERGY, add_stationary_deviations
from pesflow.units import convert_energy
from tests.unit.test_analysis_symmetry import PHI, peroxide_like


def _by_kind(rows, kind):
    return [r for r in rows if r["kind"] == kind]


def test_peroxide_like_torsion_lists_cis_and_trans_maxima_and_one_minimum():
    e = peroxide_like(PHI, 120.0)
    rows = stationary_points_of_curve("dihedral", PHI, e)
    minima, maxima = _by_kind(rows, "minimum"), _by_kind(rows, "maximum")
    # Two mirror-image minima (120 and 240): one point and its equivalent copy.
    assert len(minima) == 2
    assert [m["equivalent_copy"] for m in minima].count(False) == 1
    assert all(m["position"][0] == pytest.approx(120.0, abs=0.01) for m in minima)
    assert {m["n_equivalent"] for m in minima} == {2}
    assert sorted(m["found_at"][0] for m in minima) == pytest.approx([120.0, 240.0], abs=0.01)
    # Maxima at 0 (cis) and 180 (trans); exact heights: with cos(phi0) = -1/2, A = 2 B and
    # E(0) - E(phi0) = (A + B) - (-A/2 - B/2) = 4.5 B, E(180) - E(phi0) = 0.5 B.
    b = 0.002
    cis = next(m for m in maxima if m["position"][0] < 1.0)
    trans = next(m for m in maxima if abs(m["position"][0] - 180.0) < 1.0)
    kcal = convert_energy(b, "kcal_mol")
    assert cis["relative_kcal_mol"] == pytest.approx(4.5 * kcal, rel=1e-6)
    assert trans["relative_kcal_mol"] == pytest.approx(0.5 * kcal, rel=1e-5)
    for unit in ("kj_mol", "cm-1", "ev"):
        assert cis[f"relative_{unit}"] == pytest.approx(convert_energy(4.5 * b, unit), rel=1e-6)
    assert cis["relative_kj_mol"] == pytest.approx(cis["relative_kcal_mol"] * 4.184, rel=1e-12)


def test_stretch_curve_has_one_minimum_and_no_copies():
    r = np.linspace(0.75, 1.25, 21)
    e = 0.22 * (1 - np.exp(-2.2 * (r - 0.92))) ** 2 - 100.0
    rows = stationary_points_of_curve("distance", r, e)
    assert [(x["kind"], x["equivalent_copy"]) for x in rows] == [("minimum", False)]
    assert rows[0]["position"][0] == pytest.approx(0.92, abs=1e-6)
    assert rows[0]["relative_kcal_mol"] == pytest.approx(0.0, abs=1e-9)


def test_symmetric_stretch_grid_has_two_equivalent_minima_and_a_saddle():
    # A double well along q1 - q2 (two equivalent minima swapped by q1 <-> q2) with a saddle
    # on the diagonal between them: E = (u^2 - c^2)^2 + w v^2, u = q1 - q2, v = q1 + q2 - 2.
    q = np.linspace(0.70, 1.30, 13)
    g1, g2 = np.meshgrid(q, q, indexing="ij")
    u, v = g1 - g2, g1 + g2 - 2.0
    c = 0.3
    e = 0.5 * (u**2 - c**2) ** 2 + 0.2 * v**2 - 76.0
    rows = stationary_points_of_surface(q, q, e, ("distance", "distance"))
    minima = _by_kind(rows, "minimum")
    saddles = _by_kind(rows, "saddle")
    assert len(minima) == 2 and sorted(m["equivalent_copy"] for m in minima) == [False, True]
    # Exact minima at u = +-c, v = 0: (1 -+ c/2, 1 +- c/2); canonical form q1 <= q2.
    for m in minima:
        assert m["position"] == pytest.approx((1 - c / 2, 1 + c / 2), abs=1e-4)
    assert len(saddles) == 1
    assert saddles[0]["position"] == pytest.approx((1.0, 1.0), abs=1e-4)
    # Its height: 0.5 c^4 hartree above the minima.
    assert saddles[0]["relative_kcal_mol"] == pytest.approx(
        convert_energy(0.5 * c**4, "kcal_mol"), rel=1e-4
    )


def test_deviation_matches_the_reference_point_of_the_same_kind_nearest_equivalent():
    mirror = Symmetry(mirror=True)
    reference = [
        {"kind": "minimum", "position": (119.8,)},
        {"kind": "maximum", "position": (0.0,)},
        {"kind": "maximum", "position": (180.0,)},
    ]
    dev, match = match_deviation(("dihedral",), {"kind": "minimum", "position": (236.1,)},
                                 reference, mirror)  # fmt: skip
    assert match is reference[0] and dev[0] == pytest.approx(4.1)
    dev, match = match_deviation(("dihedral",), {"kind": "maximum", "position": (359.5,)},
                                 reference, mirror)  # fmt: skip
    assert match is reference[1] and dev[0] == pytest.approx(0.5)


def test_stationary_table_deviations_between_two_levels_on_opposite_mirror_sides():
    frames = []
    for level, phi0, tilt in (("ref", 119.8, -1e-8), ("other", 123.9, 1e-8)):
        for r in stationary_points_of_curve("dihedral", PHI, peroxide_like(PHI, phi0, tilt)):
            frames.append(
                {
                    "molecule": "hydrogen_peroxide",
                    "scan": "torsion",
                    "level": level,
                    "kind": r["kind"],
                    "dihedral_degree": r["position"][0],
                    **{k: r[k] for k in ENERGY},
                    "_kinds": ("dihedral",),
                }
            )
    table = add_stationary_deviations(pd.DataFrame(frames), "ref", ["dihedral_degree"])
    other = table[(table["level"] == "other") & ~table["equivalent_copy"]]
    minimum = other[other["kind"] == "minimum"].iloc[0]
    assert minimum["dev_dihedral_degree"] == pytest.approx(4.1, abs=0.01)
    assert (other["dev_dihedral_degree"].abs() < 5.0).all()
