"""2-D surfaces with analytic stationary points: minima, saddles and minimum-energy paths."""

import numpy as np
import pytest

from pesflow.analysis.derived import summarize_surface
from pesflow.analysis.surface import (
    connecting_barrier,
    find_minima,
    find_saddles,
    find_stationary_points,
    minimum_energy_path,
    prepare_surface,
)

SCALE = 0.01  # hartree


def coupled_double_well(x, y):
    """E = (x^2 - 1)^2 + (y - 0.3 x)^2 (times SCALE).

    grad E = 0 gives y = 0.3 x and 4 x (x^2 - 1) = 0: minima at (+-1, +-0.3) with E = 0 and a
    first-order saddle at (0, 0) with E = 1 (Hessian eigenvalues of opposite sign there).
    """
    return SCALE * ((x**2 - 1) ** 2 + (y - 0.3 * x) ** 2)


def grid_surface(n1=37, n2=31, nan_at=None):
    x = np.linspace(-1.8, 1.8, n1)
    y = np.linspace(-1.5, 1.5, n2)
    e = coupled_double_well(*np.meshgrid(x, y, indexing="ij"))
    if nan_at is not None:
        e[nan_at] = np.nan
    return x, y, e


def test_minima_and_saddle_of_a_coupled_double_well():
    s = prepare_surface(*grid_surface())
    minima = find_minima(s)
    assert len(minima) == 2
    got = sorted(m.q for m in minima)
    assert np.allclose(got, [(-1.0, -0.3), (1.0, 0.3)], atol=1e-3)
    saddles = find_saddles(s)
    assert len(saddles) == 1
    assert np.allclose(saddles[0].q, (0.0, 0.0), atol=1e-3)
    assert saddles[0].energy_hartree == pytest.approx(SCALE, rel=1e-3)
    w = saddles[0].hessian_eigenvalues
    assert w[0] < 0 < w[1]
    kinds = sorted(p.kind for p in find_stationary_points(s))
    assert kinds == ["minimum", "minimum", "saddle"]


def test_minimum_energy_path_crosses_the_saddle():
    s = prepare_surface(*grid_surface())
    path = minimum_energy_path(s, (-1.0, -0.3), (1.0, 0.3))
    assert path.converged
    assert path.saddle.kind == "saddle"
    assert np.allclose(path.saddle.q, (0.0, 0.0), atol=1e-3)
    assert path.barrier_hartree == pytest.approx(SCALE, rel=1e-3)
    # On a minimum-energy path the gradient is parallel to the path: its component normal to
    # the tangent vanishes (checked with the analytic gradient).
    x, y = path.q[:, 0], path.q[:, 1]
    gx = SCALE * (4 * x * (x**2 - 1) - 0.6 * (y - 0.3 * x))
    gy = SCALE * 2 * (y - 0.3 * x)
    tx, ty = np.gradient(x), np.gradient(y)
    norm = np.hypot(tx, ty)
    g_normal = (gx * ty - gy * tx) / norm
    assert np.max(np.abs(g_normal)) < 0.02 * np.max(np.hypot(gx, gy))


def test_failed_points_are_filled_and_counted():
    x, y, e = grid_surface(nan_at=(20, 12))
    s = prepare_surface(x, y, e)
    assert s.n_failed == 1
    assert s.energy_hartree[20, 12] == pytest.approx(coupled_double_well(x[20], y[12]), abs=1e-6)
    assert np.allclose(sorted(m.q for m in find_minima(s)), [(-1, -0.3), (1, 0.3)], atol=1e-3)


def periodic_surface(phi1, phi2, a=0.004, b=0.007):
    """E = a (1 - cos 2 phi1) + b (1 - cos phi2).

    Stationary where sin 2 phi1 = sin phi2 = 0: minima (0, 0) and (180, 0); first-order saddles
    (90, 0), (270, 0) at 2a and (0, 180), (180, 180) at 2b; maxima (90, 180), (270, 180).
    """
    r = np.radians
    return a * (1 - np.cos(2 * r(phi1))) + b * (1 - np.cos(r(phi2)))


def test_periodic_surface_with_a_minimum_on_the_seam():
    phi = np.arange(0.0, 360.0, 15.0)
    e = periodic_surface(*np.meshgrid(phi, phi, indexing="ij"))
    s = prepare_surface(phi, phi, e, units=("degree", "degree"))
    assert s.periodic == (True, True)
    minima = sorted(m.q for m in find_minima(s))
    assert np.allclose(minima, [(0.0, 0.0), (180.0, 0.0)], atol=1e-3)
    saddles = sorted(p.q for p in find_saddles(s))
    assert np.allclose(saddles, [(0, 180), (90, 0), (180, 180), (270, 0)], atol=1e-3)
    height, paths = connecting_barrier(s)
    assert height == pytest.approx(2 * 0.004, rel=1e-4)
    assert paths[0].saddle.q[1] == pytest.approx(0.0, abs=1e-3)


def test_summarize_surface():
    phi = np.arange(-180.0, 180.0, 15.0)
    e = periodic_surface(*np.meshgrid(phi, phi, indexing="ij"))
    e[5, 7] = np.nan
    row = summarize_surface(phi, phi, e, kinds=("dihedral", "dihedral"))
    assert row["n_points"] == phi.size**2 - 1 and row["n_failed"] == 1
    assert row["n_minima"] == 2 and row["n_saddles"] == 4
    assert row["minimum_bracketed"] is True
    assert row["q1_e_degree"] in (pytest.approx(0.0, abs=1e-3), pytest.approx(180.0, abs=1e-3))
    assert row["barrier_kcal_mol"] == pytest.approx(2 * 0.004 * 627.5094740631, rel=1e-3)
    assert "filled" in row["flags"]


def test_summarize_surface_flags_an_unbracketed_minimum():
    # E = (x - 0.5)^2 + y^2 scanned for x in [1, 2]: the lowest point is on the edge x = 1.
    x = np.linspace(1.0, 2.0, 11)
    y = np.linspace(-1.0, 1.0, 11)
    xx, yy = np.meshgrid(x, y, indexing="ij")
    row = summarize_surface(x, y, SCALE * ((xx - 0.5) ** 2 + yy**2))
    assert row["minimum_bracketed"] is False
    assert row["n_minima"] == 0
    assert "not bracketed" in row["flags"]
    assert np.isnan(row["q1_e_angstrom"]) and np.isnan(row["barrier_kcal_mol"])
