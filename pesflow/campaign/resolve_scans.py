"""Scan resolution, the second step of :func:`~pesflow.campaign.resolve.load_campaign`:
each scan's molecules listed, rule scans expanded into one scan per coordinate found,
coordinates and grids checked, moving atoms found, counterpoise and refinement fields
checked, and the campaign's point count bounded by ``MAX_POINTS``."""

from __future__ import annotations

import math

import numpy as np

from pesflow.campaign.resolved import Coordinate, Molecule, Scan
from pesflow.campaign.spec import MAX_POINTS, CampaignSpec, ScanSpec, did_you_mean
from pesflow.coordinates.kinds import KINDS
from pesflow.errors import SpecError


def _too_many(what: str) -> str:
    return (
        f"{what}; at most {MAX_POINTS:,} points are allowed (planning holds every point in "
        "memory); use fewer points or a larger step, or split the study into several "
        "campaigns that share one store"
    )


def _check_values(kind, values, loc, err):
    problem = KINDS[kind].range_problem(values)
    if problem:
        raise err(loc, problem)


def _scan_members(name, spec: ScanSpec, groups, molecules, err) -> list[str]:
    """The molecules a scan lists, with each set and member expanded into its molecules
    (a member with several conformers into one molecule per conformer)."""
    loc = ("scans", name)
    members: dict[str, list[str]] = {}
    for m in molecules.values():
        members.setdefault(m.member, []).append(m.name)
    out = []
    for i, mname in enumerate(spec.molecules):
        if mname in groups:
            out += groups[mname]
        elif mname in members:
            out += members[mname]
        else:
            defined = ", ".join(sorted(groups))
            known = list(dict.fromkeys([*groups, *members]))
            raise err(
                loc + ("molecules", i),
                f"molecule '{mname}' is not defined under molecules"
                f"{did_you_mean(mname, known)}; defined: {defined}",
            )
    if len(set(out)) != len(out):
        raise err(loc + ("molecules",), "a molecule is listed twice")
    return out


def _resolve_scans(spec: CampaignSpec, molecules, groups, err, notes) -> dict[str, Scan]:
    """Every scan; a scan whose coordinate is chosen by rule becomes one scan per
    coordinate the rule finds (``<scan>/<coordinate name>``), over the molecules where
    it finds it.  What each rule found, and in which molecule it found nothing, goes to
    ``notes``."""
    from pesflow.campaign import molecules as mol
    from pesflow.campaign.rules import coordinate_name, expand_rule

    scans = {}
    for name, sspec in spec.scans.items():
        names = _scan_members(name, sspec, groups, molecules, err)
        cspec = sspec.coordinates[0]
        if cspec.rule is None:
            scans[name] = _resolve_scan(name, sspec, molecules, err, names, notes=notes)
            continue
        found: dict[str, list[str]] = {}
        atoms_of: dict[str, tuple[int, ...]] = {}
        for mname in names:
            m = molecules[mname]
            try:
                if m.rdkit is None:
                    m.rdkit = mol.perceive_bonds(m.atoms, m.charge)
                picked = expand_rule(
                    m.rdkit, cspec.rule, smarts=cspec.smarts, methyl_rotors=cspec.methyl_rotors
                )
            except ValueError as exc:
                problem = err(("scans", name, "coordinates", 0, "rule"), f"'{mname}': {exc}")
                if not m.lenient:
                    raise problem from None
                _leave_out(notes, name, m, problem.reason)
                continue
            labels = [coordinate_name(m.rdkit, t) for t in picked]
            if m.conformer <= 1:
                notes.append(
                    {"what": "rule" if labels else "no-match", "entry": m.set_name,
                     "molecule": m.member, "scan": name,
                     "text": f"{cspec.rule} found " + (", ".join(labels) or "nothing")}
                )  # fmt: skip
            for t, label in zip(picked, labels):
                found.setdefault(label, []).append(mname)
                atoms_of[label] = t
        for label, mnames in found.items():
            one = cspec.model_copy(update={"atoms": [a + 1 for a in atoms_of[label]], "rule": None})
            concrete = sspec.model_copy(update={"coordinates": [one]})
            scan = _resolve_scan(name, concrete, molecules, err, mnames, notes=notes)
            scan.name, scan.rule = f"{name}/{label}", cspec.rule
            scan.coordinates[0].name = label
            scans[scan.name] = scan
    return scans


def _leave_out(notes, scan, m: Molecule, reason) -> None:
    notes.append(
        {"what": "left-out", "entry": m.set_name, "molecule": m.name, "scan": scan,
         "text": reason}
    )  # fmt: skip


def _resolve_scan(name, spec: ScanSpec, molecules, err, names=None, notes=None) -> Scan:

    loc = ("scans", name)
    if names is None:
        names = _scan_members(name, spec, {m: [m] for m in molecules}, molecules, err)
    resolved = []
    for c, cspec in enumerate(spec.coordinates):
        cloc = loc + ("coordinates", c)
        need = KINDS[cspec.type].n_atoms
        if len(cspec.atoms) != need:
            raise err(
                cloc + ("atoms",), f"a {cspec.type} takes {need} atoms (got {len(cspec.atoms)})"
            )
        if len(set(cspec.atoms)) != len(cspec.atoms):
            raise err(cloc + ("atoms",), "an atom is listed twice")
        count = cspec.n_values()
        if count > MAX_POINTS:
            given = "values" if cspec.values is not None else "points" if cspec.points else "step"
            raise err(cloc + (given,), _too_many(f"this coordinate has {count:,.0f} values"))
        if cspec.values is not None:
            for v, value in enumerate(cspec.values):
                _check_values(cspec.type, [value], cloc + ("values", v), err)
        else:
            _check_values(cspec.type, [cspec.from_], cloc + ("from",), err)
            _check_values(cspec.type, [cspec.to], cloc + ("to",), err)
        values = cspec.grid_values()
        resolved.append(
            Coordinate(kind=cspec.type, atoms=tuple(a - 1 for a in cspec.atoms), values=values)
        )
    if len(resolved) == 2 and len(resolved[0].values) * len(resolved[1].values) > MAX_POINTS:
        n1, n2 = (len(co.values) for co in resolved)
        raise err(
            loc + ("coordinates",), _too_many(f"this grid has {n1} x {n2} = {n1 * n2:,} points")
        )
    moving = {}
    for mname in names:
        try:
            moving[mname] = _moving_atoms(loc, spec, resolved, mname, molecules[mname].atoms, err)
            if spec.counterpoise:
                _check_counterpoise(spec, molecules[mname], moving[mname], loc, err)
        except SpecError as exc:
            if not molecules[mname].lenient:
                raise
            _leave_out(notes, name, molecules[mname], exc.reason)
    return Scan(
        name=name,
        molecules=[m for m in names if m in moving],
        coordinates=resolved,
        moving=moving,
        relax=spec.relax,
        counterpoise=spec.counterpoise,
        **_refine_fields(spec),
    )


def _refine_fields(spec: ScanSpec) -> dict:
    """A refined scan's targets and point budget (:mod:`pesflow.analysis.refine`)."""
    if spec.refine is None:
        return {}
    from pesflow.analysis.refine import BUDGET_KEY

    targets = {k: float(v) for k, v in spec.refine.items() if k != BUDGET_KEY}
    return {"refine": targets, "max_points": int(spec.refine[BUDGET_KEY])}


def _moving_atoms(loc, spec: ScanSpec, resolved, mname, atoms, err) -> list[np.ndarray]:
    """Per coordinate, the 0-based atoms of molecule ``mname`` that move; the ends of the
    range (the corners of a grid) are tried, so that coupled coordinates and undefined
    dihedrals are caught before anything runs."""
    from pesflow.coordinates import geometry as coords

    n = len(atoms)
    per = []
    for c, (cspec, coord) in enumerate(zip(spec.coordinates, resolved)):
        cloc = loc + ("coordinates", c)
        for a in cspec.atoms:
            if not 1 <= a <= n:
                raise err(
                    cloc + ("atoms",),
                    f"atom {a} is out of range for molecule '{mname}', which has atoms 1-{n}",
                )
        move = None
        if cspec.move is not None:
            for a in cspec.move:
                if not 1 <= a <= n:
                    raise err(
                        cloc + ("move",),
                        f"atom {a} is out of range for molecule '{mname}', which has atoms 1-{n}",
                    )
            move = [a - 1 for a in cspec.move]
        if coord.kind == "dihedral":
            problem = coords.undefined_dihedral(
                [atoms.positions[i] for i in coord.atoms], coord.atoms
            )
            if problem:
                raise err(cloc + ("atoms",), f"molecule '{mname}': {problem}")
        try:
            per.append(coords.moving_atoms(atoms, coord.kind, coord.atoms, move=move))
        except ValueError as exc:
            raise err(
                cloc + ("move" if move is not None else "atoms",), f"molecule '{mname}': {exc}"
            ) from None
    # Trial geometries at the ends of the range (the corners of a grid) catch coupled
    # coordinates and undefined dihedrals before anything runs.
    if len(resolved) == 2:
        corners = np.array(
            [[resolved[0].values[i], resolved[1].values[j]] for i in (0, -1) for j in (0, -1)]
        )
    else:
        corners = resolved[0].values[[0, -1], None]
    try:
        coords.apply_grid(
            atoms.get_positions(),
            [(co.kind, co.atoms, mv) for co, mv in zip(resolved, per)],
            corners,
        )
    except ValueError as exc:
        raise err(loc + ("coordinates",), f"molecule '{mname}': {exc}") from None
    return per


def _check_counterpoise(spec: ScanSpec, molecule, moving, loc, err) -> None:
    """A counterpoise scan: one distance moving one whole fragment of a two-fragment molecule."""
    where = loc + ("counterpoise",)
    if spec.relax:
        raise err(where, "counterpoise needs a rigid scan (relax: false)")
    if len(spec.coordinates) != 1 or spec.coordinates[0].type != "distance":
        raise err(where, "counterpoise needs one distance coordinate (the fragments' separation)")
    frags = molecule.fragments
    if len(frags) != 2:
        raise err(
            where,
            f"counterpoise needs molecule '{molecule.name}' to list 2 fragments under "
            f"molecules.{molecule.name}.fragments (it lists {len(frags)})",
        )
    moved = {int(a) for a in moving[0]}
    if moved not in ({int(a) for a in f["atoms"]} for f in frags):
        raise err(
            where,
            f"counterpoise needs the scan to move one whole fragment of '{molecule.name}'; it "
            f"moves atoms {sorted(a + 1 for a in moved)} (give move: with one fragment's atoms)",
        )


def _check_point_count(spec: CampaignSpec, scans, err) -> None:
    """Refuse a campaign whose scans x molecules x levels exceed :data:`MAX_POINTS`."""
    sizes = {
        name: max(math.prod(len(c.values) for c in scan.coordinates), scan.max_points)
        * len(scan.molecules)
        * len(scan.levels)
        for name, scan in scans.items()
    }
    total = sum(sizes.values())
    if total > MAX_POINTS:
        largest = max(sizes, key=sizes.get)
        scan = scans[largest]
        raise err(
            ("scans", scan.source),
            _too_many(
                f"the campaign has {total:,} points (this scan: "
                f"{sizes[largest] // (len(scan.molecules) * len(scan.levels)):,} grid points x "
                f"{len(scan.molecules)} molecule(s) x {len(scan.levels)} level(s))"
            ),
        )
