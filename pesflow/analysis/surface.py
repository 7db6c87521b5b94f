"""Two-dimensional scans E(q1, q2) on a regular grid: interpolation, minima, first-order saddle
points and minimum-energy paths.

Interpolant
-----------
A tensor-product interpolating B-spline (:class:`scipy.interpolate.NdBSpline`), built one axis
at a time with :func:`scipy.interpolate.make_interp_spline`: not-a-knot ends on an open axis,
periodic ends on a dihedral axis that covers the full circle, so that a minimum on the seam
(0 = 360 degrees) is as smooth as anywhere else.  Degree 5 by default (3 on short axes), as for
curves (:mod:`pesflow.analysis.curves`).  Failed points (NaN) are first filled, each by the
mean of the 1-D splines through the valid points of its row and its column, and counted.

Stationary points
-----------------
Minima start from the grid points lower than their eight neighbours (edges of open axes are
not bracketed and are skipped) and are polished with :func:`scipy.optimize.minimize`
(L-BFGS-B, analytic gradient).  Saddle points start from the grid points where |grad E|^2 of
the spline is lowest among their neighbours and are solved with :func:`scipy.optimize.root`
on grad E = 0 (Jacobian = the spline's Hessian); a point whose Hessian has exactly one negative
eigenvalue is a first-order saddle.

Minimum-energy path
-------------------
Between two minima, the path is first found on the grid as the *minimax* (bottleneck) path:
the path in the minimum spanning tree (:func:`scipy.sparse.csgraph.minimum_spanning_tree`) of
the grid graph whose edges weigh the highest energy along them (the two nodes and the spline
at the midpoint).  That path never climbs higher than it must, so it passes the right saddle
even on a surface with several passes, but it is only as good as the grid.  It is then relaxed
on the interpolated surface by the simplified string method (E, Ren & Vanden-Eijnden,
J. Chem. Phys. 126, 164103 (2007)): images step down the gradient and are redistributed
evenly by arc length (coordinates in units of the grid step, so that angstrom and degree
mix sensibly).  The highest image is polished to the saddle point by root finding.  A string
is used rather than a nudged elastic band because it needs no spring constant, and the grid
path rather than a straight line as a start so that the string does not settle in the wrong
valley.
"""

from dataclasses import dataclass, field

import numpy as np
from scipy import optimize
from scipy.interpolate import NdBSpline, make_interp_spline
from scipy.ndimage import minimum_filter
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import breadth_first_order, minimum_spanning_tree

from pesflow.analysis.curves import _degree_for, covers_full_circle, wrap_degrees
from pesflow.analysis.flags import Flag


@dataclass(frozen=True)
class SurfacePoint:
    """A stationary point of the interpolated surface.

    Attributes:
        kind: ``"minimum"``, ``"saddle"`` (first order) or ``"maximum"``.
        q: ``(q1, q2)`` in the axes' units (periodic axes wrapped into [0, period)).
        energy_hartree: interpolated energy.
        hessian_eigenvalues: eigenvalues of the Hessian d2E/dq_i dq_j, hartree per product of
            the axes' units (e.g. hartree/degree^2), ascending.
    """

    kind: str
    q: tuple
    energy_hartree: float
    hessian_eigenvalues: tuple


@dataclass
class Surface:
    """A regular 2-D grid with its interpolant.

    Attributes:
        q1, q2: axis values, ascending (periodic axes wrapped into [0, period)).
        energy_hartree: grid of shape (len(q1), len(q2)), failed points filled.
        failed: boolean mask of the failed (filled) points.
        periodic: ``(bool, bool)`` per axis.
        period: per axis, in its unit (NaN for an open axis).
        units: per axis, ``"angstrom"`` or ``"degree"``.
        notes: warnings from cleaning.
    """

    q1: np.ndarray
    q2: np.ndarray
    energy_hartree: np.ndarray
    failed: np.ndarray
    periodic: tuple
    period: tuple
    units: tuple
    order: int = 5
    notes: list = field(default_factory=list)
    _spline: object = None

    # Internally the spline works in "grid-step" coordinates u = (q - q_start) / step; a
    # regular grid is assumed (its mean step is used).

    @property
    def n_failed(self):
        return int(self.failed.sum())

    @property
    def steps(self):
        return np.array([np.mean(np.diff(self.q1)), np.mean(np.diff(self.q2))])

    @property
    def origin(self):
        return np.array([self.q1[0], self.q2[0]])

    def _wrap_u(self, u):
        u = np.array(u, dtype=float, copy=True)
        for ax in (0, 1):
            if self.periodic[ax]:
                n_period = self.period[ax] / self.steps[ax]
                u[..., ax] = np.mod(u[..., ax], n_period)
        return u

    def to_u(self, q):
        return (np.asarray(q, dtype=float) - self.origin) / self.steps

    def to_q(self, u):
        q = np.asarray(u, dtype=float) * self.steps + self.origin
        for ax in (0, 1):
            if self.periodic[ax]:
                q[..., ax] = wrap_degrees(q[..., ax], self.period[ax])
        return q

    def energy_u(self, u, nu=(0, 0)):
        return self._spline(self._wrap_u(u), nu=nu)

    def energy(self, q):
        """Interpolated energy at points ``q`` (shape (..., 2)), hartree."""
        return self.energy_u(self.to_u(q))

    def gradient_u(self, u):
        u = np.asarray(u, dtype=float)
        return np.stack([self.energy_u(u, (1, 0)), self.energy_u(u, (0, 1))], axis=-1)

    def hessian_u(self, u):
        u = np.asarray(u, dtype=float)
        hxx, hyy, hxy = (self.energy_u(u, nu) for nu in ((2, 0), (0, 2), (1, 1)))
        return np.stack([np.stack([hxx, hxy], -1), np.stack([hxy, hyy], -1)], -2)

    def bounds_u(self):
        """Per axis ``(lo, hi)`` in grid-step units, None for a periodic axis."""
        return [
            None if self.periodic[ax] else (0.0, float(len(q) - 1) * 1.0)
            for ax, q in enumerate((self.q1, self.q2))
        ]


def _axis_spline(x, y, k, periodic, period, axis):
    if periodic:
        x = np.append(x, x[0] + period)
        y = np.concatenate([y, np.take(y, [0], axis=axis)], axis=axis)
        return make_interp_spline(x, y, k=k, axis=axis, bc_type="periodic")
    return make_interp_spline(x, y, k=k, axis=axis)


def _fill_failed(u_axes, e, periodic, periods_u, k):
    """Fill NaNs with the mean of the 1-D splines through the valid points of row and column."""
    filled = e.copy()
    bad = ~np.isfinite(e)
    for i, j in zip(*np.nonzero(bad), strict=True):
        guesses = []
        for ax, (line, x) in enumerate(((e[:, j], u_axes[0]), (e[i, :], u_axes[1]))):
            ok = np.isfinite(line)
            kk = _degree_for(int(ok.sum()), k, periodic[ax])
            if ok.sum() < 4:
                continue
            s = _axis_spline(x[ok], line[ok], kk, periodic[ax], periods_u[ax], axis=0)
            guesses.append(float(s(x[i if ax == 0 else j])))
        if not guesses:
            raise ValueError("too many failed points to fill the surface grid")
        filled[i, j] = np.mean(guesses)
    return filled


def prepare_surface(
    q1, q2, energies_hartree, *, units=("angstrom", "angstrom"), periodic=(None, None), order=5
):
    """Clean a regular 2-D grid and build its interpolant.

    Args:
        q1, q2: axis values (A or degree), each regularly spaced.
        energies_hartree: array of shape (len(q1), len(q2)); NaN for failed points.
        units: per axis, ``"angstrom"`` or ``"degree"``.
        periodic: per axis True / False, or None to decide: a degree axis is periodic when it
            covers the full circle (:func:`pesflow.analysis.curves.covers_full_circle`).
        order: spline degree (default 5; lowered on short axes).

    Returns a :class:`Surface`.
    """
    q = [np.asarray(q1, dtype=float), np.asarray(q2, dtype=float)]
    e = np.asarray(energies_hartree, dtype=float)
    if e.shape != (len(q[0]), len(q[1])):
        raise ValueError(f"energies have shape {e.shape}, expected ({len(q[0])}, {len(q[1])})")
    per, period = [], []
    for ax in (0, 1):
        p = periodic[ax]
        if p is None:
            p = units[ax] == "degree" and covers_full_circle(q[ax])
        per.append(bool(p))
        period.append(360.0 if p else float("nan"))
        if p:
            wrapped = wrap_degrees(q[ax])
            order_ax = np.argsort(wrapped)
            q[ax] = wrapped[order_ax]
            e = np.take(e, order_ax, axis=ax)
        else:
            order_ax = np.argsort(q[ax])
            q[ax] = q[ax][order_ax]
            e = np.take(e, order_ax, axis=ax)
        steps = np.diff(q[ax])
        if np.any(steps <= 0) or np.ptp(steps) > 1e-6 * np.max(np.abs(q[ax]) + 1.0):
            raise ValueError(f"axis {ax + 1} must be a regular grid without repeats")
    surface = Surface(
        q1=q[0],
        q2=q[1],
        energy_hartree=e,
        failed=~np.isfinite(e),
        periodic=tuple(per),
        period=tuple(period),
        units=tuple(units),
        order=order,
    )
    u_axes = [np.arange(len(q[0]), dtype=float), np.arange(len(q[1]), dtype=float)]
    periods_u = [period[ax] / surface.steps[ax] for ax in (0, 1)]
    if surface.n_failed:
        e = _fill_failed(u_axes, e, per, periods_u, order)
        surface.energy_hartree = e
        surface.notes.append(
            Flag(
                "failed-points", f"{surface.n_failed} failed grid point(s) filled by interpolation"
            )
        )
    k = [_degree_for(len(q[ax]), order, per[ax]) for ax in (0, 1)]
    kk = min(k)
    s1 = _axis_spline(u_axes[0], e, kk, per[0], periods_u[0], axis=0)
    s2 = _axis_spline(u_axes[1], s1.c, kk, per[1], periods_u[1], axis=1)
    # make_interp_spline puts the interpolated axis first: (n_coef2, n_coef1) -> (n_coef1, n_coef2)
    surface._spline = NdBSpline((s1.t, s2.t), np.swapaxes(s2.c, 0, 1), kk, extrapolate=True)
    return surface


def _classify(surface, u):
    h_u = surface.hessian_u(u)
    # Sylvester's law of inertia: the grid-step scaling keeps the signs of the eigenvalues.
    n_neg = int(np.sum(np.linalg.eigvalsh(h_u) < 0))
    kind = {0: "minimum", 1: "saddle", 2: "maximum"}[n_neg]
    scale = 1.0 / surface.steps
    w_q = np.linalg.eigvalsh(h_u * np.outer(scale, scale))
    q = tuple(float(x) for x in surface.to_q(u))
    return SurfacePoint(kind, q, float(surface.energy_u(u)), tuple(float(x) for x in w_q))


def _inside(surface, u, margin=1e-6):
    for ax, b in enumerate(surface.bounds_u()):
        if b is not None and not (b[0] + margin < u[ax] < b[1] - margin):
            return False
    return True


def _dedupe(surface, points_u, tol=1e-3):
    kept = []
    for u in points_u:
        uw = surface._wrap_u(u)
        if all(np.max(np.abs(_fold(surface, uw - v))) > tol for v in kept):
            kept.append(uw)
    return kept


def _fold(surface, du):
    du = np.array(du, dtype=float)
    for ax in (0, 1):
        if surface.periodic[ax]:
            n = surface.period[ax] / surface.steps[ax]
            du[..., ax] = (du[..., ax] + n / 2) % n - n / 2
    return du


def _filter_mode(surface):
    return ["wrap" if p else "nearest" for p in surface.periodic]


def find_minima(surface):
    """Minima of the interpolated surface, lowest first (list of :class:`SurfacePoint`)."""
    e = surface.energy_hartree
    local = e == minimum_filter(e, size=3, mode=_filter_mode(surface))
    starts = []
    for i, j in zip(*np.nonzero(local), strict=True):
        u0 = np.array([i, j], dtype=float)
        if not _inside(surface, u0, margin=0.5):
            continue  # on the edge of an open axis: not bracketed
        res = optimize.minimize(
            lambda u: float(surface.energy_u(u)),
            u0,
            jac=lambda u: surface.gradient_u(u),
            method="L-BFGS-B",
            bounds=[b if b is not None else (None, None) for b in surface.bounds_u()],
            options={"gtol": 1e-12, "ftol": 1e-15, "maxiter": 500},
        )
        if _inside(surface, res.x):
            starts.append(res.x)
    points = [_classify(surface, u) for u in _dedupe(surface, starts)]
    return sorted((p for p in points if p.kind == "minimum"), key=lambda p: p.energy_hartree)


def _is_stationary(surface, u):
    """Gradient negligible against the energy spread of the grid (per grid step)."""
    scale = max(float(np.ptp(surface.energy_hartree)), 1e-12)
    return bool(np.max(np.abs(surface.gradient_u(u))) < 1e-9 * scale)


def find_stationary_points(surface):
    """All stationary points (minima, first-order saddles, maxima) of the interpolated surface.

    Starts from every grid point where |grad E|^2 is lowest among its eight neighbours, solves
    grad E = 0 by :func:`scipy.optimize.root` and keeps solutions inside the grid.
    """
    n1, n2 = surface.energy_hartree.shape
    uu = np.stack(np.meshgrid(np.arange(float(n1)), np.arange(float(n2)), indexing="ij"), axis=-1)
    g2 = np.sum(surface.gradient_u(uu) ** 2, axis=-1)
    local = g2 == minimum_filter(g2, size=3, mode=_filter_mode(surface))
    found = []
    for i, j in zip(*np.nonzero(local), strict=True):
        sol = optimize.root(surface.gradient_u, uu[i, j], jac=surface.hessian_u, tol=1e-13)
        if _inside(surface, sol.x) and _is_stationary(surface, sol.x):
            found.append(sol.x)
    return [_classify(surface, u) for u in _dedupe(surface, found)]


def find_saddles(surface):
    """First-order saddle points of the interpolated surface, lowest first."""
    points = [p for p in find_stationary_points(surface) if p.kind == "saddle"]
    return sorted(points, key=lambda p: p.energy_hartree)


def _grid_graph(surface):
    """Sparse graph of grid nodes, 8-neighbour edges weighted by the highest energy on them."""
    e = surface.energy_hartree
    n1, n2 = e.shape
    idx = np.arange(n1 * n2).reshape(n1, n2)
    rows, cols, weights = [], [], []
    base = float(e.min())
    for d1, d2 in ((1, 0), (0, 1), (1, 1), (1, -1)):
        i = np.arange(n1)[:, None] + d1 + 0 * np.arange(n2)[None, :]
        j = 0 * np.arange(n1)[:, None] + np.arange(n2)[None, :] + d2
        ok = np.ones_like(i, dtype=bool)
        if surface.periodic[0]:
            i = i % n1
        else:
            ok &= (i >= 0) & (i < n1)
        if surface.periodic[1]:
            j = j % n2
        else:
            ok &= (j >= 0) & (j < n2)
        a = idx[ok]
        b = idx[i[ok], j[ok]]
        ua = np.stack(np.unravel_index(a, (n1, n2)), -1).astype(float)
        mid = ua + 0.5 * np.array([d1, d2], dtype=float)
        w = np.maximum(np.maximum(e.ravel()[a], e.ravel()[b]), surface.energy_u(mid))
        rows.append(a)
        cols.append(b)
        # Shift so that every weight is positive: zero weights would vanish from the graph.
        weights.append(w - base + 1.0)
    rows, cols, weights = np.concatenate(rows), np.concatenate(cols), np.concatenate(weights)
    return coo_matrix((weights, (rows, cols)), shape=(n1 * n2, n1 * n2)).tocsr()


def _node_of(surface, u):
    """Index of the grid node nearest to u (grid-step units) in the flattened grid."""
    shape = surface.energy_hartree.shape
    return int(np.ravel_multi_index(tuple(np.mod(np.rint(u).astype(int), shape)), shape))


def _tree_path(tree, start, end):
    _, pred = breadth_first_order(tree, start, directed=False, return_predecessors=True)
    path = [end]
    while path[-1] != start:
        nxt = pred[path[-1]]
        if nxt < 0:
            raise ValueError("the two minima are not connected on the grid")
        path.append(int(nxt))
    return path[::-1]


@dataclass(frozen=True)
class MinimumEnergyPath:
    """A minimum-energy path between two minima of a surface.

    Attributes:
        q: images along the path, shape (n_images, 2), axes' units (periodic axes wrapped).
        energy_hartree: energies of the images.
        saddle: the highest point of the path polished to a stationary point (a
            :class:`SurfacePoint`; its ``kind`` says whether it is a first-order saddle).
        barrier_hartree: saddle energy above the lower of the two end minima.
        converged: whether the string stopped moving within the iteration limit.
    """

    q: np.ndarray
    energy_hartree: np.ndarray
    saddle: SurfacePoint
    barrier_hartree: float
    converged: bool


def _unwrap_path(surface, u_path):
    """Make consecutive images continuous across periodic seams."""
    out = [u_path[0]]
    for u in u_path[1:]:
        out.append(out[-1] + _fold(surface, u - out[-1]))
    return np.array(out)


def _redistribute(path, n_images):
    seg = np.linalg.norm(np.diff(path, axis=0), axis=1)
    s = np.concatenate([[0.0], np.cumsum(seg)])
    if s[-1] == 0:
        return np.repeat(path[:1], n_images, axis=0)
    t = np.linspace(0.0, s[-1], n_images)
    keep = np.concatenate([[True], seg > 1e-12])  # drop repeated images
    if keep.sum() < 4:
        return np.stack([np.interp(t, s, path[:, ax]) for ax in (0, 1)], axis=-1)
    # A cubic through the images (not straight segments) keeps a curved path from cutting
    # its corners when the images are redistributed.
    return make_interp_spline(s[keep], path[keep], k=3, axis=0)(t)


def minimum_energy_path(surface, start_q, end_q, *, n_images=41, max_iter=5000, tol=1e-7):
    """Minimum-energy path between two minima (see the module docstring for the method).

    Args:
        surface: a :class:`Surface`.
        start_q, end_q: the two minima, ``(q1, q2)`` in the axes' units.
        n_images: images of the string (default 41).
        max_iter: most string iterations (default 5000).
        tol: convergence threshold on the largest image move per iteration, grid steps.

    Returns a :class:`MinimumEnergyPath`.
    """
    n1, n2 = surface.energy_hartree.shape
    u_a, u_b = surface.to_u(start_q), surface.to_u(end_q)
    node = [_node_of(surface, u) for u in (u_a, u_b)]
    tree = minimum_spanning_tree(_grid_graph(surface))
    grid_path = _tree_path(tree, node[0], node[1])
    u_grid = np.stack(np.unravel_index(grid_path, (n1, n2)), -1).astype(float)
    u_grid = np.concatenate([[u_a], u_grid, [u_b]])
    path = _redistribute(_unwrap_path(surface, u_grid), n_images)
    # Stable step: below 1 / (largest curvature on the grid, in grid-step units).
    uu = np.stack(np.meshgrid(np.arange(float(n1)), np.arange(float(n2)), indexing="ij"), axis=-1)
    lam = np.max(np.abs(np.linalg.eigvalsh(surface.hessian_u(uu))))
    dt = 0.5 / lam
    converged = False
    lo_hi = surface.bounds_u()
    for _ in range(max_iter):
        new = path.copy()
        new[1:-1] -= dt * surface.gradient_u(path[1:-1])
        for ax, b in enumerate(lo_hi):
            if b is not None:
                new[:, ax] = np.clip(new[:, ax], *b)
        new = _redistribute(new, n_images)
        move = np.max(np.abs(new - path))
        path = new
        if move < tol:
            converged = True
            break
    energies = surface.energy_u(path)
    top = int(np.argmax(energies))
    sol = optimize.root(surface.gradient_u, path[top], jac=surface.hessian_u, tol=1e-13)
    near = (
        _is_stationary(surface, sol.x) and np.linalg.norm(_fold(surface, sol.x - path[top])) < 2.0
    )
    u_s = sol.x if near else path[top]
    saddle = _classify(surface, u_s)
    e_low = min(float(surface.energy_u(u_a)), float(surface.energy_u(u_b)))
    return MinimumEnergyPath(
        q=surface.to_q(path),
        energy_hartree=np.asarray(energies),
        saddle=saddle,
        barrier_hartree=saddle.energy_hartree - e_low,
        converged=converged,
    )


def connecting_barrier(surface, minima=None, **path_options):
    """Barrier of the lowest network of paths that connects all minima of a surface.

    The minima are joined by the minimum spanning tree of their grid bottleneck energies; the
    path of each tree edge is relaxed with :func:`minimum_energy_path`.  Returns ``(height
    above the global minimum in hartree, list of MinimumEnergyPath)``, or ``(nan, [])`` with
    fewer than two minima.
    """
    minima = find_minima(surface) if minima is None else minima
    if len(minima) < 2:
        return float("nan"), []
    n1, n2 = surface.energy_hartree.shape
    tree = minimum_spanning_tree(_grid_graph(surface))
    e = surface.energy_hartree.ravel()
    nodes = [_node_of(surface, surface.to_u(m.q)) for m in minima]
    k = len(minima)
    weights = np.zeros((k, k))
    for a in range(k):
        for b in range(a + 1, k):
            weights[a, b] = max(e[_tree_path(tree, nodes[a], nodes[b])]) - e.min() + 1.0
    links = minimum_spanning_tree(weights).tocoo()
    paths = [
        minimum_energy_path(surface, minima[a].q, minima[b].q, **path_options)
        for a, b in zip(links.row, links.col, strict=True)
    ]
    top = max(p.saddle.energy_hartree for p in paths)
    return top - minima[0].energy_hartree, paths
