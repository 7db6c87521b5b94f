"""Scan coordinates checked against ASE's own geometry functions.

Reference: ase.Atoms.set_distance / set_angle / set_dihedral (with ``indices=`` the
moving atoms) and ase.Atoms.get_distance / get_angle / get_dihedral.  Rigidity is
checked directly: a rigid motion keeps every distance inside the moving part and
inside the fixed part, so every bond length and bond angle there too.
"""

import itertools
import time

import ase.build
import numpy as np
import pytest

from pesflow.coordinates.geometry import (
    CoordinateError,
    apply_grid,
    bond_graph,
    displace,
    measure,
    measure_many,
    moving_atoms,
)
from pesflow.coordinates.kinds import KINDS

# Chains without rings, from ASE's g2 set, and the g2 molecules with rings.
CHAINS = ["H2O", "NH3", "CH3CH2OH", "H2O2", "CH3OH", "butadiene", "trans-butane"]


def _bonds(atoms):
    graph = bond_graph(atoms).tocoo()
    return sorted({(int(i), int(j)) for i, j in zip(graph.row, graph.col, strict=True) if i < j})


def _neighbours(atoms):
    graph = bond_graph(atoms).tolil()
    return [list(row) for row in graph.rows]


def _angles(atoms):
    """Every bonded triple (a, b, c) with vertex b and a < c."""
    nb = _neighbours(atoms)
    return [(a, b, c) for b in range(len(atoms)) for a, c in itertools.combinations(nb[b], 2)]


def _dihedrals(atoms):
    """Every bonded chain a-b-c-d, both directions, skipping near-linear a-b-c or b-c-d
    (their dihedral is undefined)."""
    nb = _neighbours(atoms)
    chains = []
    for b, c in _bonds(atoms) + [(c, b) for b, c in _bonds(atoms)]:
        for a in nb[b]:
            for d in nb[c]:
                if a in (b, c) or d in (b, c) or a == d:
                    continue
                if min(atoms.get_angle(a, b, c), atoms.get_angle(b, c, d)) > 5.0:
                    if max(atoms.get_angle(a, b, c), atoms.get_angle(b, c, d)) < 175.0:
                        chains.append((a, b, c, d))
    return chains


def _assert_rigid(before, after, moving):
    """Every distance inside the moving part and inside the fixed part is unchanged."""
    fixed = np.setdiff1d(np.arange(len(before)), moving)
    for part in (moving, fixed):
        d0 = np.linalg.norm(before[part][:, None] - before[part][None], axis=-1)
        d1 = np.linalg.norm(after[part][:, None] - after[part][None], axis=-1)
        np.testing.assert_allclose(d1, d0, rtol=0, atol=1e-10)


def _assert_angles_kept(atoms, after, moving):
    """Bond angles whose three atoms all lie on one side of the cut are unchanged."""
    moved = set(int(i) for i in moving)
    for a, b, c in _angles(atoms):
        if len({a in moved, b in moved, c in moved}) == 1:
            assert measure(after, "angle", [a, b, c]) == pytest.approx(
                atoms.get_angle(a, b, c), abs=1e-10
            )


def test_kinds_and_units():
    assert {k: v.n_atoms for k, v in KINDS.items()} == {"distance": 2, "angle": 3, "dihedral": 4}
    units = {k: v.unit for k, v in KINDS.items()}
    assert units == {"distance": "angstrom", "angle": "degree", "dihedral": "degree"}


@pytest.mark.parametrize("name", CHAINS + ["C6H6", "CH3CN"])
def test_measure_matches_ase(name):
    atoms = ase.build.molecule(name)
    rng = np.random.default_rng(7)
    atoms.rattle(0.05, rng=rng)  # break symmetry so the dihedrals are not all 0 or 180
    for a, b in _bonds(atoms):
        assert measure(atoms.positions, "distance", [a, b]) == pytest.approx(
            atoms.get_distance(a, b), abs=1e-12
        )
    for a, b, c in _angles(atoms):
        assert measure(atoms.positions, "angle", [a, b, c]) == pytest.approx(
            atoms.get_angle(a, b, c), abs=1e-9
        )
    for a, b, c, d in _dihedrals(atoms):
        value = measure(atoms.positions, "dihedral", [a, b, c, d])
        assert 0.0 <= value < 360.0
        assert value == pytest.approx(atoms.get_dihedral(a, b, c, d), abs=1e-9)


def test_measure_many_shape_and_values():
    atoms = ase.build.molecule("CH3CH2OH")
    stack = np.stack([atoms.positions, atoms.positions + 1.0, 2.0 * atoms.positions])
    r = measure_many(stack, "distance", [0, 2])
    assert r.shape == (3,)
    # Translation keeps a distance; scaling all positions by 2 doubles it (exact).
    np.testing.assert_allclose(r, [1, 1, 2] * np.full(3, atoms.get_distance(0, 2)), atol=1e-12)
    angles = measure_many(stack, "angle", [0, 1, 2])
    np.testing.assert_allclose(angles, atoms.get_angle(0, 1, 2), atol=1e-10)


def test_measure_rejects_bad_input():
    positions = ase.build.molecule("H2O").positions
    with pytest.raises(CoordinateError, match="unknown coordinate kind"):
        measure(positions, "torsion", [0, 1, 2, 0])
    with pytest.raises(CoordinateError, match="needs 3 atoms"):
        measure(positions, "angle", [0, 1])
    with pytest.raises(CoordinateError, match="outside 1..3"):
        measure(positions, "distance", [0, 3])
    with pytest.raises(CoordinateError, match="repeats an atom"):
        measure(positions, "distance", [1, 1])


def test_bond_graph_counts_bonds():
    # Structural formulas: water has 2 bonds, benzene 12 (6 C-C, 6 C-H), ethanol 8.
    for name, n_bonds in [("H2O", 2), ("C6H6", 12), ("CH3CH2OH", 8)]:
        graph = bond_graph(ase.build.molecule(name))
        assert (graph != graph.T).nnz == 0
        assert graph.nnz == 2 * n_bonds


def test_moving_atoms_follow_chemistry():
    ethanol = ase.build.molecule("CH3CH2OH")  # C0 C1 O2, H3 on O (g2 ordering)
    hydroxyl_h = [i for i in range(3, 9) if ethanol.get_distance(2, i) < 1.1]
    methyl = [i for i in range(3, 9) if ethanol.get_distance(0, i) < 1.2]
    assert len(hydroxyl_h) == 1 and len(methyl) == 3
    # C1-O2 stretch: O and its H move.
    assert moving_atoms(ethanol, "distance", [1, 2]).tolist() == sorted([2] + hydroxyl_h)
    # Methyl torsion about C1-C0 seen from O: C0 and its three H turn.
    assert moving_atoms(ethanol, "dihedral", [2, 1, 0, methyl[0]]).tolist() == sorted([0] + methyl)
    # Angle C0-C1-O2: the OH group swings about C1.
    assert moving_atoms(ethanol, "angle", [0, 1, 2]).tolist() == sorted([2] + hydroxyl_h)


@pytest.mark.parametrize("name", CHAINS)
def test_distance_matches_ase(name):
    atoms = ase.build.molecule(name)
    for a, b in _bonds(atoms):
        for first, second in [(a, b), (b, a)]:
            moving = moving_atoms(atoms, "distance", [first, second])
            r0 = atoms.get_distance(first, second)
            targets = np.array([0.8 * r0, r0 + 0.37, 2.5 * r0])
            stack = displace(atoms.positions, "distance", [first, second], moving, targets)
            assert stack.shape == (3, len(atoms), 3)
            for target, positions in zip(targets, stack, strict=True):
                reference = atoms.copy()
                reference.set_distance(first, second, target, fix=0, indices=moving)
                np.testing.assert_allclose(positions, reference.positions, rtol=0, atol=1e-8)
                assert measure(positions, "distance", [first, second]) == pytest.approx(
                    target, abs=1e-8
                )
                _assert_rigid(atoms.positions, positions, moving)
                _assert_angles_kept(atoms, positions, moving)


@pytest.mark.parametrize("name", CHAINS)
def test_angle_matches_ase(name):
    atoms = ase.build.molecule(name)
    for a, b, c in _angles(atoms):
        for first, last in [(a, c), (c, a)]:
            indices = [first, b, last]
            moving = moving_atoms(atoms, "angle", indices)
            theta0 = atoms.get_angle(*indices)
            targets = np.array([theta0 - 20.0, theta0 + 13.5, 179.0, 60.0])
            stack = displace(atoms.positions, "angle", indices, moving, targets)
            for target, positions in zip(targets, stack, strict=True):
                reference = atoms.copy()
                reference.set_angle(*indices, target, indices=moving)
                np.testing.assert_allclose(positions, reference.positions, rtol=0, atol=1e-8)
                assert measure(positions, "angle", indices) == pytest.approx(target, abs=1e-8)
                _assert_rigid(atoms.positions, positions, moving)
                _assert_angles_kept(atoms, positions, moving)


@pytest.mark.parametrize("name", CHAINS)
def test_dihedral_matches_ase(name):
    atoms = ase.build.molecule(name)
    chains = _dihedrals(atoms)
    if name not in ("H2O", "NH3"):
        assert chains
    for indices in chains:
        moving = moving_atoms(atoms, "dihedral", indices)
        phi0 = atoms.get_dihedral(*indices)
        targets = np.array([phi0 + 40.0, phi0 - 100.0, 725.0, -30.0])
        stack = displace(atoms.positions, "dihedral", indices, moving, targets)
        for target, positions in zip(targets, stack, strict=True):
            reference = atoms.copy()
            reference.set_dihedral(*indices, target, indices=moving)
            np.testing.assert_allclose(positions, reference.positions, rtol=0, atol=1e-8)
            value = measure(positions, "dihedral", indices)
            assert (value - target + 180.0) % 360.0 - 180.0 == pytest.approx(0.0, abs=1e-8)
            _assert_rigid(atoms.positions, positions, moving)
            _assert_angles_kept(atoms, positions, moving)


def test_angle_from_collinear_geometry():
    # CO2 is linear (O-C-O = 180 degrees): there is no plane, ASE's set_angle has no
    # axis; ours bends about a fixed perpendicular.  Exact result: the moved O stays
    # at the C=O distance and the angle reaches its target.
    co2 = ase.build.molecule("CO2")
    assert co2.get_angle(1, 0, 2) == pytest.approx(180.0, abs=1e-10)
    moving = moving_atoms(co2, "angle", [1, 0, 2])
    assert moving.tolist() == [2]
    targets = np.array([179.9, 150.0, 90.0, 10.0, 180.0])
    stack = displace(co2.positions, "angle", [1, 0, 2], moving, targets)
    np.testing.assert_allclose(measure_many(stack, "angle", [1, 0, 2]), targets, atol=1e-8)
    np.testing.assert_allclose(
        measure_many(stack, "distance", [0, 2]), co2.get_distance(0, 2), atol=1e-12
    )
    # The same rule gives the same bending plane for every target.
    planes = np.cross(stack[:-1, 1] - stack[:-1, 0], stack[:-1, 2] - stack[:-1, 0])
    planes /= np.linalg.norm(planes, axis=1)[:, None]
    np.testing.assert_allclose(np.abs(planes @ planes[0]), 1.0, atol=1e-8)


@pytest.mark.parametrize(
    "kind, indices",
    [("distance", [0, 1]), ("angle", [0, 1, 2]), ("dihedral", [0, 1, 2, 3])],
)
def test_ring_is_refused(kind, indices):
    benzene = ase.build.molecule("C6H6")  # atoms 0-5 are the ring carbons, in ring order
    assert benzene.get_distance(0, 1) < 1.5 and benzene.get_distance(1, 2) < 1.5
    with pytest.raises(CoordinateError) as info:
        moving_atoms(benzene, kind, indices)
    message = str(info.value)
    assert isinstance(info.value, ValueError)
    assert "ring" in message and "move:" in message and "\n" not in message


def test_bond_out_of_a_ring_is_allowed():
    benzene = ase.build.molecule("C6H6")
    h_on_c0 = [i for i in range(6, 12) if benzene.get_distance(0, i) < 1.2]
    assert moving_atoms(benzene, "distance", [0, h_on_c0[0]]).tolist() == h_on_c0


def test_move_override_in_a_ring():
    benzene = ase.build.molecule("C6H6")
    h_on = {c: next(i for i in range(6, 12) if benzene.get_distance(c, i) < 1.2) for c in (1, 2)}
    move = [h_on[1], 1]
    moving = moving_atoms(benzene, "distance", [0, 1], move=move)
    assert moving.tolist() == sorted(move)
    stack = displace(benzene.positions, "distance", [0, 1], moving, [1.6])
    reference = benzene.copy()
    reference.set_distance(0, 1, 1.6, fix=0, indices=moving)
    np.testing.assert_allclose(stack[0], reference.positions, rtol=0, atol=1e-8)
    # A dihedral may list c (it sits on the axis) among the moving atoms.
    dihedral_move = [2, 3, 4, 5, h_on[2]]
    assert moving_atoms(benzene, "dihedral", [0, 1, 2, 3], move=dihedral_move).tolist() == sorted(
        dihedral_move
    )


def test_move_override_is_validated():
    water = ase.build.molecule("H2O")
    with pytest.raises(CoordinateError, match="must contain atom 2"):
        moving_atoms(water, "distance", [0, 1], move=[2])
    with pytest.raises(CoordinateError, match="must not contain atom"):
        moving_atoms(water, "distance", [0, 1], move=[0, 1])
    with pytest.raises(CoordinateError, match="must not contain atom"):
        moving_atoms(water, "angle", [1, 0, 2], move=[0, 2])
    with pytest.raises(CoordinateError, match="outside"):
        moving_atoms(water, "angle", [1, 0, 2], move=[2, 7])
    with pytest.raises(CoordinateError, match="must not contain"):
        displace(water.positions, "distance", [0, 1], [0, 1], [1.0])


def test_targets_out_of_range_are_refused():
    water = ase.build.molecule("H2O")
    with pytest.raises(CoordinateError, match="> 0"):
        displace(water.positions, "distance", [0, 1], [1], [1.0, 0.0])
    for bad in (0.0, 180.5, -10.0):
        with pytest.raises(CoordinateError, match=r"\(0, 180\]"):
            displace(water.positions, "angle", [1, 0, 2], [2], [bad])
    with pytest.raises(CoordinateError, match="finite"):
        displace(water.positions, "distance", [0, 1], [1], [np.nan])


def test_two_dimensional_grid_of_water_stretches():
    water = ase.build.molecule("H2O")
    r1, r2 = np.meshgrid(np.linspace(0.8, 1.3, 6), np.linspace(0.85, 1.5, 5), indexing="ij")
    grid = np.column_stack([r1.ravel(), r2.ravel()])
    coords = [
        ("distance", [0, 1], moving_atoms(water, "distance", [0, 1])),
        ("distance", [0, 2], moving_atoms(water, "distance", [0, 2])),
    ]
    stack = apply_grid(water.positions, coords, grid)
    assert stack.shape == (30, 3, 3)
    np.testing.assert_allclose(measure_many(stack, "distance", [0, 1]), grid[:, 0], atol=1e-8)
    np.testing.assert_allclose(measure_many(stack, "distance", [0, 2]), grid[:, 1], atol=1e-8)
    # Stretching along each bond keeps the H-O-H angle.
    np.testing.assert_allclose(
        measure_many(stack, "angle", [1, 0, 2]), water.get_angle(1, 0, 2), atol=1e-10
    )
    for row, positions in zip(grid, stack, strict=True):
        reference = water.copy()
        reference.set_distance(0, 1, row[0], fix=0, indices=[1])
        reference.set_distance(0, 2, row[1], fix=0, indices=[2])
        np.testing.assert_allclose(positions, reference.positions, rtol=0, atol=1e-8)


def test_grid_of_stretch_and_bend():
    water = ase.build.molecule("H2O")
    grid = np.array([[0.9, 95.0], [1.1, 120.0], [1.4, 180.0]])
    coords = [("distance", [0, 1], [1]), ("angle", [1, 0, 2], [2])]
    stack = apply_grid(water.positions, coords, grid)
    np.testing.assert_allclose(measure_many(stack, "distance", [0, 1]), grid[:, 0], atol=1e-8)
    np.testing.assert_allclose(measure_many(stack, "angle", [1, 0, 2]), grid[:, 1], atol=1e-8)


def test_coupled_coordinates_are_refused():
    water = ase.build.molecule("H2O")
    # Moving H1 to set the H1...H2 distance changes the O-H1 bond set just before.
    coords = [("distance", [0, 1], [1]), ("distance", [2, 1], [1])]
    with pytest.raises(CoordinateError) as info:
        apply_grid(water.positions, coords, np.array([[1.0, 1.2], [0.9, 2.0]]))
    message = str(info.value)
    assert "coupled" in message and "distance 1-2" in message and "distance 3-2" in message


def test_large_scan_is_fast():
    # Planning 100,000 points must take seconds (DESIGN.md); a generous bound for a
    # shared 2-core machine.
    ethanol = ase.build.molecule("CH3CH2OH")
    indices = [0, 1, 2, next(i for i in range(3, 9) if ethanol.get_distance(2, i) < 1.1)]
    moving = moving_atoms(ethanol, "dihedral", indices)
    targets = np.linspace(-180.0, 180.0, 100_000)
    start = time.perf_counter()
    stack = displace(ethanol.positions, "dihedral", indices, moving, targets)
    elapsed = time.perf_counter() - start
    assert stack.shape == (100_000, 9, 3)
    assert elapsed < 10.0
    measured = measure_many(stack, "dihedral", indices)
    assert np.max(np.abs((measured - targets + 180.0) % 360.0 - 180.0)) < 1e-8
