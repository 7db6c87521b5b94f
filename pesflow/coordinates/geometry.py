"""Scan coordinates: distances, angles and dihedrals, and which atoms they move.

A scan coordinate is a ``kind`` (``"distance"``, ``"angle"`` or ``"dihedral"``) and
the atoms it is measured over.  Setting a coordinate moves one side of the molecule
rigidly: the side of the LAST listed atom, found by cutting the covalent bond that
the coordinate turns about and taking that atom's fragment.  Everything here is
vectorised over the target values, so that planning a scan of 100,000 points takes
seconds.

All atom indices in this module are 0-based (the spec layer converts from the
chemist's 1-based numbers); error messages meant for a person show the atoms
numbered from 1 and say so.  Lengths are in angstrom, angles in degrees.

>>> import ase.build
>>> water = ase.build.molecule("H2O")
>>> moving = moving_atoms(water, "distance", [0, 1])
>>> moving.tolist()
[1]
>>> stack = displace(water.positions, "distance", [0, 1], moving, [0.9, 1.0])
>>> measure_many(stack, "distance", [0, 1]).round(10).tolist()
[0.9, 1.0]
"""

import numpy as np
from ase.geometry import get_dihedrals
from scipy.sparse import csgraph
from scipy.spatial.transform import Rotation

from pesflow.coordinates.kinds import KINDS

#: Tolerance on sin(angle) below which three atoms count as collinear, so that the
#: plane a-b-c (and the rotation axis normal to it) is taken from a fixed rule.
_COLLINEAR_SIN = 1e-8
#: A dihedral a-b-c-d is undefined when a-b-c or b-c-d is this close to a line (sine of the
#: bond angle; 1e-4 is 0.006 degree from linear): there is no plane to measure it from.
DIHEDRAL_MIN_SIN = 1e-4
#: Tolerance of :func:`apply_grid` when it checks every coordinate of a grid row.
GRID_TOLERANCE = 1e-6


class CoordinateError(ValueError):
    """Raised when a scan coordinate cannot be set as asked: the atoms that should
    move are connected back to the fixed ones (a ring, or two atoms that are not bonded
    to each other), a ``move:`` list is inconsistent with the coordinate, a dihedral
    has three atoms on a line, a target value is out of range, or two coordinates of a
    grid are coupled."""


def _label(kind, indices):
    """``'angle 2-1-3'``: a coordinate as a person reads it (atoms numbered from 1)."""
    return f"{kind} {'-'.join(str(int(i) + 1) for i in indices)}"


def _check(kind, indices, n_atoms=None):
    """Validate ``kind`` and ``indices``; return the indices as a tuple of ints."""
    if kind not in KINDS:
        raise CoordinateError(f"unknown coordinate kind {kind!r}; allowed: {', '.join(KINDS)}")
    indices = tuple(int(i) for i in indices)
    if len(indices) != KINDS[kind].n_atoms:
        raise CoordinateError(
            f"a {kind} needs {KINDS[kind].n_atoms} atoms, got {len(indices)}: {list(indices)}"
        )
    if len(set(indices)) != len(indices):
        raise CoordinateError(f"{_label(kind, indices)} (atoms numbered from 1) repeats an atom")
    if n_atoms is not None and any(i < 0 or i >= n_atoms for i in indices):
        raise CoordinateError(
            f"{_label(kind, indices)} (atoms numbered from 1) names an atom outside 1..{n_atoms}"
        )
    return indices


def _fixed_atoms(kind, indices):
    """Atoms of the coordinate that must not move (c of a dihedral may: it is on the axis)."""
    return indices[: KINDS[kind].n_fixed]


def _norm(v):
    return np.linalg.norm(v, axis=-1)


def _angle_degree(v0, v1):
    """Angle between the vectors v0 and v1 (..., 3), in degrees.

    ``arctan2(|v0 x v1|, v0 . v1)`` instead of the arccos of ASE's ``get_angles``:
    arccos loses half the digits near 0 and 180 degrees, and scans go there.
    """
    cross = _norm(np.cross(v0, v1))
    dot = np.einsum("...i,...i->...", v0, v1)
    return np.degrees(np.arctan2(cross, dot))


def measure_many(positions_stack, kind, atoms):
    """Measure one coordinate in each of ``m`` geometries.

    positions_stack: array (m, n, 3) in angstrom (an (n, 3) array counts as m = 1).
    kind: ``"distance"``, ``"angle"`` or ``"dihedral"``.
    atoms: the 0-based atom indices (2, 3 or 4 of them).
    Returns an array (m,): angstrom for a distance; degrees in [0, 180] for an angle
    (b is the vertex of [a, b, c]); degrees in [0, 360) for a dihedral, with ASE's
    sign convention (:meth:`ase.Atoms.get_dihedral`).
    """
    stack = np.asarray(positions_stack, dtype=float)
    if stack.ndim == 2:
        stack = stack[None]
    idx = _check(kind, atoms, stack.shape[1])
    p = [stack[:, i] for i in idx]
    if kind == "dihedral":  # name the atoms when the dihedral has no plane
        problem = undefined_dihedral(p, idx)
        if problem:
            raise CoordinateError(problem)
    return _MEASURE[kind](p)


def _measure_distance(p):
    return _norm(p[1] - p[0])


def _measure_angle(p):
    return _angle_degree(p[0] - p[1], p[2] - p[1])


def _measure_dihedral(p):
    # ASE's arctan2 formula for dihedrals; it returns [0, 360] and may give 360.0
    # after rounding, so fold that back to 0.
    return np.mod(get_dihedrals(p[1] - p[0], p[2] - p[1], p[3] - p[2]), 360.0)


def undefined_dihedral(p, atoms=None):
    """None when the dihedral is defined in every geometry, else a sentence saying why not.

    p: the four atoms' positions, one (m, 3) (or (3,)) array per atom, in angstrom.
    atoms: their 0-based indices, for the message (default: "a, b, c, d").
    A dihedral a-b-c-d is measured between the planes a-b-c and b-c-d; when three
    consecutive atoms lie on a line (sine of the angle below :data:`DIHEDRAL_MIN_SIN`)
    that plane does not exist.

    >>> import ase.build
    >>> acetylene = ase.build.molecule("C2H2").positions
    >>> undefined_dihedral([acetylene[i] for i in (3, 0, 1, 2)], [3, 0, 1, 2])[:82]
    'dihedral 4-1-2-3 (atoms numbered from 1) is undefined: atoms 4, 1, 2 lie on a line'
    """
    p = [np.atleast_2d(np.asarray(x, dtype=float)) for x in p]
    names = ["a", "b", "c", "d"] if atoms is None else [str(int(i) + 1) for i in atoms]
    for first in (0, 1):
        v0 = p[first] - p[first + 1]
        v1 = p[first + 2] - p[first + 1]
        lengths = _norm(v0) * _norm(v1)
        with np.errstate(invalid="ignore", divide="ignore"):
            sin = _norm(np.cross(v0, v1)) / lengths
        bad = ~(sin >= DIHEDRAL_MIN_SIN)  # NaN (two atoms on top of each other) counts too
        if np.any(bad):
            angle = float(np.asarray(_angle_degree(v0, v1))[bad][0])
            label = "dihedral " + "-".join(names) if atoms is not None else "the dihedral"
            return (
                f"{label}{' (atoms numbered from 1)' if atoms is not None else ''} is "
                f"undefined: atoms {', '.join(names[first : first + 3])} lie on a line "
                f"(angle {angle:.4g} degree); a dihedral needs a-b-c and b-c-d bent"
            )
    return None


def measure(positions, kind, atoms):
    """Measure one coordinate in one geometry (positions (n, 3) in angstrom).

    Returns a float: angstrom for a distance, degrees for an angle ([0, 180]) or a
    dihedral ([0, 360), as :meth:`ase.Atoms.get_dihedral`).

    >>> import ase.build
    >>> round(measure(ase.build.molecule("H2O").positions, "angle", [1, 0, 2]), 4)
    103.9999
    """
    return float(measure_many(np.asarray(positions, dtype=float)[None], kind, atoms)[0])


def bond_graph(atoms):
    """Covalent connectivity of ``atoms`` (an :class:`ase.Atoms`) as a sparse matrix.

    Two atoms are bonded when their distance is below the sum of ASE's natural
    cutoffs (covalent radii, :func:`ase.neighborlist.natural_cutoffs`).  Returns a
    symmetric (n, n) ``scipy.sparse`` CSR matrix with 1 for every bond.
    """
    from ase.neighborlist import NeighborList, natural_cutoffs

    neighbours = NeighborList(natural_cutoffs(atoms), self_interaction=False, bothways=True)
    neighbours.update(atoms)
    return neighbours.get_connectivity_matrix(sparse=True).tocsr()


def _validate_move(kind, indices, move, n_atoms):
    """Check a given list of moving atoms against the coordinate; return it sorted."""
    label = _label(kind, indices)
    move = np.unique(np.asarray(move, dtype=int))
    if move.size and (move.min() < 0 or move.max() >= n_atoms):
        raise CoordinateError(f"{label}: move names an atom outside 1..{n_atoms}")
    if indices[-1] not in move:
        raise CoordinateError(
            f"{label} (atoms numbered from 1): move must contain atom {indices[-1] + 1}, "
            "the last atom of the coordinate"
        )
    fixed = [i for i in _fixed_atoms(kind, indices) if i in move]
    if fixed:
        raise CoordinateError(
            f"{label} (atoms numbered from 1): move must not contain atom(s) "
            f"{', '.join(str(i + 1) for i in fixed)}, which the coordinate keeps fixed"
        )
    return move


def moving_atoms(atoms, kind, indices, move=None):
    """Which atoms move when the coordinate ``kind`` over ``indices`` is set.

    atoms: :class:`ase.Atoms` (for its connectivity, :func:`bond_graph`).
    kind: ``"distance"``, ``"angle"`` or ``"dihedral"``; indices: 0-based atoms.
    move: optional 0-based indices that move, overriding the rule below; they must
    contain the last atom and none of the fixed ones (a for a distance; a and b for
    an angle or a dihedral).

    Rule: the side of the LAST listed atom moves.  distance [a, b]: cut the bond
    a-b (if any) and take b's fragment; angle [a, b, c] (vertex b): cut b-c, take c's
    fragment; dihedral [a, b, c, d]: cut b-c, take the fragment of c (and of d, in
    case d is not bonded to c).  If that fragment still holds a fixed atom there is
    no side to move: the cut bond lies in a ring, or the two atoms are not bonded to
    each other but joined through others (ammonia's H...H); :class:`CoordinateError`
    says which, with the path that joins them.  Returns the sorted 0-based indices.

    >>> import ase.build
    >>> moving_atoms(ase.build.molecule("CH3OH"), "dihedral", [2, 0, 1, 3]).tolist()
    [1, 3]
    """
    n_atoms = len(atoms)
    indices = _check(kind, indices, n_atoms)
    if move is not None:
        return _validate_move(kind, indices, move, n_atoms)

    graph = bond_graph(atoms).tolil()
    # The bond that the coordinate stretches or turns about: its two sides separate.
    cut = [indices[i] for i in KINDS[kind].cut]
    bonded = graph[cut[0], cut[1]] != 0
    graph[cut[0], cut[1]] = 0
    graph[cut[1], cut[0]] = 0
    graph = graph.tocsr()
    graph.eliminate_zeros()  # an explicitly stored zero would still count as an edge
    _, labels = csgraph.connected_components(graph, directed=False)
    sides = {labels[indices[-1]]}
    if kind == "dihedral":
        sides.add(labels[indices[2]])
    moving = np.flatnonzero(np.isin(labels, list(sides)))
    fixed = [i for i in _fixed_atoms(kind, indices) if i in moving]
    if fixed:
        raise CoordinateError(_no_side_message(kind, indices, cut, bonded, graph, fixed))
    return moving


def _no_side_message(kind, indices, cut, bonded, graph, fixed):
    """Why the side of the last atom cannot move alone, and what to write instead."""
    label = f"{_label(kind, indices)} (atoms numbered from 1)"
    # The shortest bonded path from the cut's first atom to its second, as a chemist reads it.
    _, previous = csgraph.shortest_path(
        graph, directed=False, indices=cut[1], return_predecessors=True
    )
    path, atom = [], cut[0]
    while atom >= 0:
        path.append(atom + 1)
        atom = previous[atom]
    via = "-".join(str(a) for a in path)
    a, b = cut[0] + 1, cut[1] + 1
    if bonded:
        reason = (
            f"the bond {a}-{b} lies in a ring ({via} closes it), so the side of atom "
            f"{indices[-1] + 1} is bonded back to atom(s) {', '.join(str(i + 1) for i in fixed)}"
        )
    else:
        reason = (
            f"atoms {a} and {b} are not bonded to each other (they are joined through {via}), "
            f"so there is no side of atom {indices[-1] + 1} that moves alone"
        )
    return (
        f"{label} has no side to move: {reason}; list the atoms that move with the "
        f"coordinate's move: [...] (e.g. move: [{indices[-1] + 1}])"
    )


def _check_targets(kind, indices, values):
    values = np.asarray(values, dtype=float).reshape(-1)
    label = _label(kind, indices)
    if not np.all(np.isfinite(values)):
        raise CoordinateError(f"{label}: target values must be finite numbers")
    # A periodic coordinate is set modulo its period, so only its folded value is checked.
    kind_ = KINDS[kind]
    problem = kind_.range_problem(values if kind_.period is None else values % kind_.period)
    if problem:
        raise CoordinateError(f"{label}: {problem}")
    return values


def _rotate(stack, moving, center, rotvec):
    """Rotate the moving atoms of each geometry about ``center`` (m, 3) by ``rotvec`` (m, 3)."""
    matrices = Rotation.from_rotvec(rotvec).as_matrix()  # (m, 3, 3)
    relative = stack[:, moving] - center[:, None]
    stack[:, moving] = np.einsum("mij,mkj->mki", matrices, relative) + center[:, None]


def _perpendicular(v):
    """A unit vector perpendicular to each row of v (m, 3): v x e_k, with e_k the
    Cartesian axis least aligned with v, so the choice is fixed and well conditioned."""
    axes = np.eye(3)[np.argmin(np.abs(v), axis=1)]
    w = np.cross(v, axes)
    return w / _norm(w)[:, None]


def _set_stack(stack, kind, indices, moving, values):
    """Set the coordinate in each geometry of ``stack`` (m, n, 3) to ``values`` (m,),
    in place.  Each row has its own starting geometry (needed for grids)."""
    _SET[kind](stack, [stack[:, i] for i in indices], moving, values)


def _set_distance(stack, p, moving, values):
    """Translate the moving atoms along a->b."""
    bond = p[1] - p[0]
    length = _norm(bond)
    shift = ((values - length) / length)[:, None] * bond
    stack[:, moving] += shift[:, None]


def _set_angle(stack, p, moving, values):
    """Rotate the moving atoms about the vertex b, normal to the plane a-b-c."""
    v0 = p[0] - p[1]
    v1 = p[2] - p[1]
    normal = np.cross(v0, v1)
    sin = _norm(normal) / (_norm(v0) * _norm(v1))
    # Rotating about v0 x v1 by a positive angle opens the angle (as ASE's set_angle);
    # a collinear a-b-c has no plane, so any axis normal to b->c does, chosen by rule.
    collinear = sin < _COLLINEAR_SIN
    axis = np.empty_like(normal)
    axis[~collinear] = normal[~collinear] / _norm(normal[~collinear])[:, None]
    if np.any(collinear):
        axis[collinear] = _perpendicular(v1[collinear])
    delta = np.radians(values - _angle_degree(v0, v1))
    _rotate(stack, moving, p[1].copy(), axis * delta[:, None])


def _set_dihedral(stack, p, moving, values):
    """Rotate the moving atoms about the b->c axis."""
    problem = undefined_dihedral(p)
    if problem:
        raise CoordinateError(problem)
    axis = p[2] - p[1]
    axis = axis / _norm(axis)[:, None]
    delta = np.radians(values - _measure_dihedral(p))
    _rotate(stack, moving, p[2].copy(), axis * delta[:, None])


#: How each kind in :data:`pesflow.coordinates.kinds.KINDS` is measured and set: functions of
#: the atoms' position arrays ``p`` (one (m, 3) array per atom of the coordinate).
_MEASURE = {"distance": _measure_distance, "angle": _measure_angle, "dihedral": _measure_dihedral}
_SET = {"distance": _set_distance, "angle": _set_angle, "dihedral": _set_dihedral}


def displace(positions, kind, indices, moving, values):
    """Geometries with the coordinate set to each of the target ``values``.

    positions: (n, 3) in angstrom.  kind and indices (0-based) name the coordinate;
    moving: the 0-based atoms that move (see :func:`moving_atoms`); values: m targets,
    angstrom (> 0) for a distance, degrees in (0, 180] for an angle, any real for a
    dihedral (periodic).

    The moving atoms move rigidly: translated along a->b for a distance, rotated
    about the axis through the vertex b normal to the plane a-b-c for an angle (for
    collinear a-b-c: normal to b->c by a fixed rule), rotated about the b->c axis for
    a dihedral.  Returns an array (m, n, 3); no loop over the values.

    >>> import ase.build
    >>> water = ase.build.molecule("H2O")
    >>> stack = displace(water.positions, "angle", [1, 0, 2], [2], [90.0, 180.0])
    >>> measure_many(stack, "angle", [1, 0, 2]).round(8).tolist()
    [90.0, 180.0]
    """
    positions = np.asarray(positions, dtype=float)
    indices = _check(kind, indices, len(positions))
    moving = _validate_move(kind, indices, moving, len(positions))
    values = _check_targets(kind, indices, values)
    stack = np.repeat(positions[None], len(values), axis=0)
    _set_stack(stack, kind, indices, moving, values)
    return stack


def _deviation(kind, measured, target):
    """|measured - target|, taking a dihedral modulo 360 degrees."""
    diff = measured - target
    period = KINDS[kind].period
    if period is not None:
        diff = (diff + period / 2) % period - period / 2
    return np.abs(diff)


def apply_grid(positions, coords, grid_values):
    """Geometries for a grid of several coordinates (2-D scans and up).

    positions: (n, 3) in angstrom.  coords: a list of k ``(kind, indices, moving)``,
    0-based, applied in this order in every row.  grid_values: (m, k) targets, one
    row per point (units as in :func:`displace`).

    After each coordinate is set, every coordinate set before it is measured again;
    if one has moved off its target by more than 1e-6 (angstrom or degree) the two
    are coupled and :class:`CoordinateError` names both.  Returns (m, n, 3).
    """
    positions = np.asarray(positions, dtype=float)
    grid = np.asarray(grid_values, dtype=float)
    if grid.ndim == 1:
        grid = grid[:, None]
    if grid.shape[1] != len(coords):
        raise CoordinateError(
            f"grid has {grid.shape[1]} columns but {len(coords)} coordinates were given"
        )
    checked = []
    for kind, indices, moving in coords:
        indices = _check(kind, indices, len(positions))
        checked.append((kind, indices, _validate_move(kind, indices, moving, len(positions))))
    for j, (kind, indices, _) in enumerate(checked):
        _check_targets(kind, indices, grid[:, j])

    stack = np.repeat(positions[None], len(grid), axis=0)
    for j, (kind, indices, moving) in enumerate(checked):
        _set_stack(stack, kind, indices, moving, grid[:, j])
        for i in range(j + 1):
            kind_i, indices_i, _ = checked[i]
            error = _deviation(kind_i, measure_many(stack, kind_i, indices_i), grid[:, i])
            if np.max(error) > GRID_TOLERANCE:
                if i == j:
                    raise CoordinateError(
                        f"{_label(kind_i, indices_i)} (atoms numbered from 1) misses its "
                        f"target by {np.max(error):.3g} {KINDS[kind_i].unit}"
                    )
                raise CoordinateError(
                    f"coordinates {_label(kind_i, indices_i)} and {_label(kind, indices)} "
                    f"(atoms numbered from 1) are coupled: setting the second changes the "
                    f"first by up to {np.max(error):.3g} {KINDS[kind_i].unit}; choose atoms that "
                    "move independently"
                )
    return stack
