"""Pure expansion of a campaign into points and batches (no I/O, no Snakemake).

A *point* is one geometry at one level of theory; its key is a content hash
(:mod:`pesflow.plan.keys`).  A *geometry set* is the walk of one scan for one
molecule (or a molecule's fragments for dissociation energies).  A *batch* is
the unit of one Snakemake job: an ordered walk along part of one geometry set at
one basis set and one SCF family (all wavefunction methods share one SCF per
geometry; each DFT functional has its own), so that each point can start from
its neighbour's converged density.

>>> # plan = expand(campaign)
>>> # batches = make_batches(plan, done=set(), cores=2)
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from importlib.metadata import version as _dist_version

import numpy as np
import pandas as pd

from pesflow.coordinates import geometry as coordinates
from pesflow.coordinates.kinds import column_names
from pesflow.engine import method_info, state_record
from pesflow.plan import keys

# A method's order within its family's computation and its cost weight relative to
# the family's SCF (for chunking only) come from the engine: MethodInfo.order, .weight.


#: A relaxed point costs about this many single points (common practice: 10-20
#: gradient steps per constrained optimisation from a good start).
RELAX_WEIGHT = 15.0


#: With size weights (estimated seconds), the least work worth one Snakemake job: a job's
#: start-up (Python, PySCF import) costs 1-2 s, so this keeps it under ~10 %.
MIN_BATCH_S = 15.0


def engine_version(name: str = "pyscf") -> str:
    """Version of the engine's package, read from its metadata (no import).

    The engines are named after their packages (``pyscf``, ``tblite``).
    """
    return _dist_version(name)


@dataclass
class GeometrySet:
    """The geometries of one walk, in walk order."""

    set_id: int
    molecule: str
    scan: str
    role: str  # "scan" or "fragment"
    symbols: tuple[str, ...]
    charge: int
    multiplicity: int
    coordinate_kinds: tuple[str, ...]
    coordinate_atoms: tuple[tuple[int, ...], ...]
    values: np.ndarray  # (m, k) scan values, angstrom / degree
    grid_indices: np.ndarray  # (m, k)
    positions: np.ndarray  # (m, n, 3) canonical, angstrom
    levels: tuple = ()  # levels of theory computed on this set
    relax: bool = False  # relaxed scan: the geometries are the starting (rigid) targets
    settings_key: dict = field(default_factory=dict)  # engine settings of this set
    moving: tuple = ()  # per coordinate, the 0-based atoms that move
    digests: list[bytes] = field(repr=False, default_factory=list)
    #: keys of the methods computed for free beside a level (ccsd beside ccsd(t)) when
    #: they are not levels themselves: (basis, method) -> one key per walk point
    byproduct_keys: dict[tuple[str, str], list[str]] = field(repr=False, default_factory=dict)
    #: 0-based ghost atoms (counterpoise: a fragment in the complex's basis), part of the key
    ghosts: tuple[int, ...] = ()
    #: the scan a role-"counterpoise" set belongs to (its own ``scan`` names the fragment)
    of_scan: str = ""


@dataclass
class Plan:
    """Every point of a campaign and the geometry sets they come from."""

    campaign: str
    engine: str
    engine_version: str
    settings_key: dict  # every result-changing setting (what a batch's engine is built from)
    geometry_sets: list[GeometrySet]
    #: one row per point: set_id, walk, molecule, scan, role, method, basis, level, family, key
    points: pd.DataFrame
    #: engine of each family (shared-work group) in the plan, and each engine's version
    family_engine: dict[str, str] = field(default_factory=dict)
    engine_versions: dict[str, str] = field(default_factory=dict)

    def method_key(self, method: str) -> dict:
        """The settings that enter the key of ``method``'s points."""
        from pesflow.engine import EngineSettings

        return EngineSettings.from_key_dict(self.settings_key).key_dict(method)

    def batch_engine(self, batch) -> tuple[str, str]:
        """Name and version of the engine that computes ``batch``."""
        name = self.family_engine.get(batch.family, self.engine)
        return name, self.engine_versions.get(name, self.engine_version)

    def byproduct_keys(self, batch, walk: int) -> dict[str, str]:
        """Keys of the free byproducts (ccsd beside ccsd(t)) at one point of ``batch``."""
        gs = self.geometry_sets[batch.set_id]
        return {
            method: per_walk[walk]
            for (basis, method), per_walk in gs.byproduct_keys.items()
            if basis == batch.basis and method_info(method).family == batch.family
        }

    def geometry(self, set_id: int, walk: int):
        gs = self.geometry_sets[set_id]
        return gs.symbols, gs.positions[walk], gs.charge, gs.multiplicity


@dataclass
class Batch:
    """One Snakemake job: an ordered walk at one basis and SCF family."""

    batch_id: str
    set_id: int
    basis: str
    family: str
    #: (walk index, {method: key}) in walk order
    entries: list[tuple[int, dict[str, str]]]
    weight: float = 1.0


def _scan_sets(campaign, start_id):
    sets = []
    for scan in campaign.scans.values():
        coarse, coarse_idx = scan.grid(), scan.grid_indices()
        for mname in scan.molecules:
            mol = campaign.molecules[mname]
            spec = [(c.kind, c.atoms, mv) for c, mv in zip(scan.coordinates, scan.moving[mname])]
            grid, idx = coarse, coarse_idx
            added = campaign.added_points.get((scan.name, mname))
            if added:  # adaptive refinement: the coarse grid and the points added so far
                grid = refined_grid(coarse, added)
                idx = np.arange(len(grid))[:, None]
            positions = coordinates.apply_grid(mol.atoms.get_positions(), spec, grid)
            sets.append(
                GeometrySet(
                    set_id=start_id + len(sets),
                    molecule=mname,
                    scan=scan.name,
                    role="scan",
                    symbols=mol.symbols,
                    charge=mol.charge,
                    multiplicity=mol.multiplicity,
                    coordinate_kinds=tuple(c.kind for c in scan.coordinates),
                    coordinate_atoms=tuple(c.atoms for c in scan.coordinates),
                    values=grid,
                    grid_indices=idx,
                    positions=keys.canonical_positions(positions),
                    levels=tuple(scan.levels),
                    relax=scan.relax,
                    moving=tuple(tuple(int(a) for a in mv) for mv in scan.moving[mname]),
                )
            )
    return sets


def refined_grid(coarse, added) -> np.ndarray:
    """The walk of a refined 1-D scan, shape (m, 1): the coarse grid's values and the ``added``
    ones, each once, in the coarse grid's direction (pesflow.analysis.refine).

    >>> refined_grid(np.array([[1.3], [1.0], [0.7]]), (0.9, 1.1))[:, 0].tolist()
    [1.3, 1.1, 1.0, 0.9, 0.7]
    """
    values = np.unique(np.concatenate([coarse[:, 0], np.asarray(added, dtype=float)]))
    if len(coarse) > 1 and coarse[-1, 0] < coarse[0, 0]:
        values = values[::-1]
    return values[:, None]


def _counterpoise_sets(campaign, scan_sets, start_id):
    """Per counterpoise scan and fragment: the complex's walk with the other fragment's
    atoms as ghosts, at the fragment's charge and multiplicity (role ``counterpoise``,
    scan ``<scan>-cp-fragment-<n>``)."""
    sets = []
    for gs in scan_sets:
        scan = campaign.scans[gs.scan]
        if not scan.counterpoise:
            continue
        mol = campaign.molecules[gs.molecule]
        for f, frag in enumerate(mol.fragments):
            ghosts = tuple(a for a in range(len(gs.symbols)) if a not in frag["atoms"])
            sets.append(
                GeometrySet(
                    set_id=start_id + len(sets),
                    molecule=gs.molecule,
                    scan=f"{gs.scan}-cp-fragment-{f + 1}",
                    role="counterpoise",
                    symbols=gs.symbols,
                    charge=frag["charge"],
                    multiplicity=frag["multiplicity"],
                    coordinate_kinds=gs.coordinate_kinds,
                    coordinate_atoms=gs.coordinate_atoms,
                    values=gs.values,
                    grid_indices=gs.grid_indices,
                    positions=gs.positions,
                    levels=gs.levels,
                    moving=gs.moving,
                    ghosts=ghosts,
                    of_scan=gs.scan,
                )
            )
    return sets


def _fragment_sets(campaign, start_id):
    sets = []
    for mol in campaign.molecules.values():
        positions = mol.atoms.get_positions()
        levels = []
        for scan in campaign.scans.values():
            if mol.name in scan.molecules:
                levels += [lvl for lvl in scan.levels if lvl not in levels]
        # Excited states of isolated fragments are no dissociation limit of a curve's
        # states; a level whose fragments have no consistent counterpart (an active
        # space by counts) takes D_e from its curve's end instead.
        levels = tuple(
            lvl
            for lvl in levels
            if method_info(lvl.method).n_states == 1
            and method_info(lvl.method).fragments == "separate"
        )
        for f, frag in enumerate(mol.fragments):
            atoms = list(frag["atoms"])
            sets.append(
                GeometrySet(
                    set_id=start_id + len(sets),
                    molecule=mol.name,
                    scan=f"fragment-{f + 1}",
                    role="fragment",
                    symbols=tuple(mol.symbols[a] for a in atoms),
                    charge=frag["charge"],
                    multiplicity=frag["multiplicity"],
                    coordinate_kinds=(),
                    coordinate_atoms=(),
                    values=np.zeros((1, 0)),
                    grid_indices=np.zeros((1, 0), dtype=int),
                    positions=keys.canonical_positions(positions[atoms][None]),
                    levels=levels,
                )
            )
    return sets


def relax_key(gs) -> list | None:
    """What a relaxed scan adds to its points' keys: the constrained coordinates."""
    if not gs.relax:
        return None
    return [[kind, list(atoms)] for kind, atoms in zip(gs.coordinate_kinds, gs.coordinate_atoms)]


def point_settings_key(settings, method, gs) -> dict:
    """The settings part of the key of ``method``'s points on geometry set ``gs``.

    A relaxed point is keyed by its rigid target geometry plus the constrained
    coordinates (the optimiser's start depends on the walk, so it cannot be the key).
    """
    key = settings.key_dict(method)
    relax = relax_key(gs)
    if relax is not None:
        key = {**key, "relax": relax}
    if gs.ghosts:
        key = {**key, "ghosts": list(gs.ghosts)}
    return key


def expand(campaign, engine: str = "pyscf", version: str | None = None) -> Plan:
    """Expand a validated :class:`~pesflow.campaign.resolved.Campaign` into every point.

    Each level is computed by the engine its method belongs to
    (:attr:`~pesflow.engine.MethodInfo.engine`); ``version`` overrides the version of
    ``engine`` (the default engine, PySCF), the others are read from their packages.
    Returns a :class:`Plan`; geometries are computed with vectorised rigid
    displacements and rounded to the key precision.
    """
    versions = {engine: version or engine_version(engine)}
    settings_key = campaign.engine_settings().key_dict()
    sets = _scan_sets(campaign, 0)
    sets += _counterpoise_sets(campaign, list(sets), len(sets))
    sets += _fragment_sets(campaign, len(sets))
    columns = {k: [] for k in ("set_id", "walk", "method", "basis", "state", "key")}
    family_engine = {}
    for gs in sets:
        settings = campaign.engine_settings(gs.scan if gs.role == "scan" else gs.of_scan or None)
        gs.settings_key = settings.key_dict()
        gs.digests = keys.geometry_digests(gs.symbols, gs.positions)
        walks = np.arange(len(gs.digests))
        levels = {(level.method, level.basis) for level in gs.levels}
        # A derived (CBS) level has no points of its own: its members are levels too, and
        # the points table makes its rows from theirs (pesflow.tables.derived).

        def point_keys(method, basis, gs=gs, settings=settings):
            info = method_info(method)
            if info.engine not in versions:
                versions[info.engine] = engine_version(info.engine)
            family_engine[info.family] = info.engine
            prefix = keys.level_prefix(
                gs.charge,
                gs.multiplicity,
                method,
                basis,
                point_settings_key(settings, method, gs),
                info.engine,
                versions[info.engine],
            )
            return [keys.combine(prefix, d) for d in gs.digests]

        for level in (lvl for lvl in gs.levels if not lvl.members):
            # A multi-state method has one row (and key) per electronic state.
            for state in level_states(level.method):
                record = state_record(level.method, state)
                columns["key"].extend(point_keys(record, level.basis))
                columns["set_id"].append(np.full(len(walks), gs.set_id))
                columns["walk"].append(walks)
                columns["method"].extend([level.method] * len(walks))
                columns["basis"].extend([level.basis] * len(walks))
                columns["state"].extend([state or 0] * len(walks))
            for extra in method_info(level.method).byproducts:
                if (extra, level.basis) not in levels:
                    gs.byproduct_keys[(level.basis, extra)] = point_keys(extra, level.basis)
    set_id = np.concatenate(columns["set_id"]) if columns["set_id"] else np.zeros(0, int)
    points = pd.DataFrame(
        {
            "set_id": set_id,
            "walk": np.concatenate(columns["walk"]) if columns["walk"] else np.zeros(0, int),
            "method": columns["method"],
            "basis": columns["basis"],
            "state": np.asarray(columns["state"], dtype=int),
            "key": columns["key"],
        }
    )
    meta = pd.DataFrame(
        {
            "set_id": [gs.set_id for gs in sets],
            "molecule": [gs.molecule for gs in sets],
            "scan": [gs.scan for gs in sets],
            "role": [gs.role for gs in sets],
        }
    )
    points = points.merge(meta, on="set_id", how="left")
    points["level"] = np.where(
        points["basis"] == "", points["method"], points["method"] + "/" + points["basis"]
    )
    families = {m: method_info(m).family for m in points["method"].unique()}
    points["family"] = points["method"].map(families)
    return Plan(
        campaign=campaign.name,
        engine=engine,
        engine_version=versions[engine],
        settings_key=settings_key,
        geometry_sets=sets,
        points=points,
        family_engine=family_engine,
        engine_versions=versions,
    )


def level_states(method: str) -> list[int | None]:
    """The electronic states a level's points are stored for: ``[None]`` for a
    single-state method (its record is named by the method alone), ``[0, 1, ..., n]``
    for a multi-state one (one record each, :func:`pesflow.engine.state_record`)."""
    n_states = method_info(method).n_states
    return [None] if n_states == 1 else list(range(n_states))


def record_name(method: str, state: int) -> str:
    """The record name (the key of a batch's ``{record: key}``) of a plan row."""
    return state_record(method, int(state) if method_info(method).n_states > 1 else None)


def points_frame(plan: Plan) -> pd.DataFrame:
    """The points table with the coordinate values as columns (unit in each name)."""
    frames = []
    for set_id, sub in plan.points.groupby("set_id", sort=True):
        gs = plan.geometry_sets[int(set_id)]
        cols = column_names(gs.coordinate_kinds)
        sub = sub.copy()
        for j, name in enumerate(cols):
            sub[name] = gs.values[sub["walk"].to_numpy(), j]
        frames.append(sub)
    if not frames:
        return plan.points.copy()
    return pd.concat(frames, ignore_index=True)


def _safe(text: str) -> str:
    return re.sub(r"[^A-Za-z0-9]+", "_", text).strip("_").lower() or "x"


def make_batches(
    plan: Plan,
    done: set[str],
    cores: int = 2,
    *,
    batches_per_core: int = 3,
    min_points_per_batch: int = 4,
    max_points_per_batch: int = 250,
    size_weight: dict[tuple[str, str], float] | None = None,
) -> list[Batch]:
    """Group the points not in ``done`` into batches.

    Each batch is an ordered walk (walk order of its geometry set) at one basis
    and SCF family, holding every pending method for each of its geometries.
    Long walks are cut into chunks so that about ``batches_per_core * cores``
    batches exist in all (a few per core keeps both cores busy while each job's
    start-up stays a small share), never below ``min_points_per_batch``
    geometries per chunk and never above ``max_points_per_batch`` (so that a job
    stays well inside a cluster's time limit and a long walk is spread over nodes).
    ``size_weight`` maps (molecule, basis) to the estimated seconds of one SCF point
    (:func:`pesflow.plan.cost.size_weights`), so that chunks of a walk in a large basis are
    cut shorter than those in a small one, and no chunk holds less than
    :data:`MIN_BATCH_S` of work unless its walk does.
    """
    pts = plan.points
    if done:
        pending = pts[~pts["key"].isin(done)]
    else:
        pending = pts
    if pending.empty:
        return []
    groups = []
    for (set_id, basis, family), sub in pending.groupby(["set_id", "basis", "family"], sort=True):
        entries = {}
        for walk, method, state, key in zip(
            sub["walk"].to_numpy(), sub["method"], sub["state"], sub["key"]
        ):
            entries.setdefault(int(walk), {})[record_name(method, state)] = key
        ordered = []
        for walk in sorted(entries):
            methods = dict(sorted(entries[walk].items(), key=lambda mk: method_info(mk[0]).order))
            ordered.append((walk, methods))
        weight = sum(max(method_info(m).weight for m in methods) for _, methods in ordered)
        gs = plan.geometry_sets[int(set_id)]
        if gs.relax:
            weight *= RELAX_WEIGHT * len(ordered[0][1])
        if size_weight is not None:
            weight *= size_weight.get((gs.molecule, basis), 1.0)
        groups.append((int(set_id), basis, family, ordered, weight))
    total_weight = sum(g[4] for g in groups)
    target = max(len(groups), batches_per_core * max(1, cores))
    batches = []
    for set_id, basis, family, ordered, weight in groups:
        gs = plan.geometry_sets[set_id]
        n_chunks = max(1, int(round(target * weight / total_weight)))
        n_chunks = min(n_chunks, max(1, len(ordered) // min_points_per_batch))
        if size_weight is not None:
            # weights are then estimated seconds: a job must outweigh its start-up
            n_chunks = min(n_chunks, max(1, int(weight // MIN_BATCH_S)))
        n_chunks = max(n_chunks, -(-len(ordered) // max_points_per_batch))
        bounds = np.linspace(0, len(ordered), n_chunks + 1).round().astype(int)
        stem = _safe(f"{gs.molecule}-{gs.scan}-{basis}-{family}")
        for c in range(n_chunks):
            chunk = ordered[bounds[c] : bounds[c + 1]]
            if not chunk:
                continue
            first_key = next(iter(chunk[0][1].values()))
            bid = f"{stem}-{c + 1:03d}-{first_key[:8]}"
            batches.append(
                Batch(
                    batch_id=bid,
                    set_id=set_id,
                    basis=basis,
                    family=family,
                    entries=chunk,
                    weight=weight * len(chunk) / len(ordered),
                )
            )
    return batches
