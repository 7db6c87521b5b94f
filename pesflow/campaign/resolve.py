"""Resolution of a validated spec into a :class:`~pesflow.campaign.resolved.Campaign`:
molecules built, atoms checked, moving sides found, grids made, levels checked against the
engines, the point count bounded, reference values checked.  Nothing is computed or written."""

from __future__ import annotations

import functools
import math
from pathlib import Path

import numpy as np

from pesflow.campaign.resolved import Campaign, Coordinate, Level, Molecule, Scan
from pesflow.campaign.spec import (
    MAX_POINTS,
    MIN_ATOM_DISTANCE_ANGSTROM,
    CampaignSpec,
    MoleculeSpec,
    ScanSpec,
    did_you_mean,
)
from pesflow.campaign.yaml_source import _Errors, _read_yaml, parse_spec
from pesflow.coordinates.kinds import KINDS
from pesflow.errors import EngineSetupError


def _resolve_molecule(name, spec: MoleculeSpec, base: Path, err) -> Molecule:
    from pesflow.campaign import molecules as mol

    loc = ("molecules", name)
    try:
        if spec.builtin is not None:
            atoms = mol.from_builtin(spec.builtin)
        elif spec.file is not None:
            file = Path(spec.file)
            if not file.is_absolute():
                file = base / file
            atoms = mol.from_file(file)
        else:
            atoms = mol.from_xyz_text(spec.xyz)
    except ValueError as exc:
        source = "builtin" if spec.builtin is not None else "file" if spec.file else "xyz"
        raise err(loc + (source,), str(exc)) from None
    if len(atoms) == 0:
        raise err(loc, "the molecule has no atoms")
    problem = None
    multiplicity = spec.multiplicity
    if multiplicity is None:
        try:
            multiplicity = mol.default_multiplicity(atoms, spec.charge)
        except ValueError as exc:
            raise err(loc + ("charge",), str(exc)) from None
        problem = mol.multiplicity_problem(atoms, spec.charge, multiplicity)
        if problem is not None:
            raise err(loc + ("charge",), problem)
    else:
        problem = mol.multiplicity_problem(atoms, spec.charge, multiplicity)
        if problem is not None:
            raise err(loc + ("multiplicity",), problem)
    contacts = mol.close_contacts(atoms, MIN_ATOM_DISTANCE_ANGSTROM)
    if contacts:
        i, j, d = contacts[0]
        raise err(
            loc,
            f"atoms {i + 1} and {j + 1} overlap ({d:.3f} A apart; at least "
            f"{MIN_ATOM_DISTANCE_ANGSTROM} A is allowed)",
        )
    n = len(atoms)
    overrides = {}
    for atom, value in (spec.isotopes or {}).items():
        if not 1 <= atom <= n:
            raise err(
                loc + ("isotopes", atom),
                f"atom {atom} is out of range; this molecule has atoms 1-{n}",
            )
        overrides[atom] = value
    try:
        masses = mol.masses_with_isotopes(atoms, overrides or None)
    except ValueError as exc:
        raise err(loc + ("isotopes",), str(exc)) from None
    fragments = []
    for f, frag in enumerate(spec.fragments or []):
        floc = loc + ("fragments", f)
        for a in frag.atoms:
            if not 1 <= a <= n:
                raise err(
                    floc + ("atoms",), f"atom {a} is out of range; this molecule has atoms 1-{n}"
                )
        if len(set(frag.atoms)) != len(frag.atoms):
            raise err(floc + ("atoms",), "an atom is listed twice")
        sub = atoms[[a - 1 for a in frag.atoms]]
        fmult = frag.multiplicity or mol.default_multiplicity(sub, frag.charge)
        problem = mol.multiplicity_problem(sub, frag.charge, fmult)
        if problem is not None:
            raise err(floc + ("multiplicity",), problem)
        fragments.append(
            {
                "atoms": tuple(a - 1 for a in frag.atoms),
                "charge": frag.charge,
                "multiplicity": fmult,
            }
        )
    if fragments:
        listed = sorted(a for f in fragments for a in f["atoms"])
        if listed != list(range(n)):
            raise err(
                loc + ("fragments",),
                f"the fragments must together list every atom 1-{n} exactly once",
            )
        if sum(f["charge"] for f in fragments) != spec.charge:
            raise err(
                loc + ("fragments",),
                f"the fragments' charges must add up to the molecule's charge ({spec.charge})",
            )
    return Molecule(
        name=name,
        atoms=atoms,
        charge=spec.charge,
        multiplicity=multiplicity,
        masses_amu=masses,
        fragments=fragments,
    )


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


def _resolve_scan(name, spec: ScanSpec, molecules, err) -> Scan:
    from pesflow.coordinates import geometry as coords

    loc = ("scans", name)
    for i, mname in enumerate(spec.molecules):
        if mname not in molecules:
            defined = ", ".join(sorted(molecules))
            raise err(
                loc + ("molecules", i),
                f"molecule '{mname}' is not defined under molecules"
                f"{did_you_mean(mname, molecules)}; defined: {defined}",
            )
    if len(set(spec.molecules)) != len(spec.molecules):
        raise err(loc + ("molecules",), "a molecule is listed twice")
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
    for mname in spec.molecules:
        atoms = molecules[mname].atoms
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
                            f"atom {a} is out of range for molecule "
                            f"'{mname}', which has atoms 1-{n}",
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
        moving[mname] = per
    return Scan(
        name=name,
        molecules=list(spec.molecules),
        coordinates=resolved,
        moving=moving,
        relax=spec.relax,
    )


def _resolve_level_list(lspecs, loc, elements, err, checked) -> list[Level]:
    from pesflow import engine

    levels = []
    for i, lspec in enumerate(lspecs):
        options = lspec.options()
        for method, basis in lspec.pairs():
            try:
                info = engine.method_info(method)
            except EngineSetupError as exc:
                hint = did_you_mean(str(method).strip().lower(), _method_names())
                raise err(loc + (i, "method"), _with_hint(str(exc), hint)) from None
            if options or info.options:
                try:
                    info = engine.method_info(engine.level_method(info.name, options))
                except EngineSetupError as exc:
                    given = [k for k in options if k not in info.options]
                    named = [k for k in options if k in str(exc)]
                    where = (given or named or [*options, "method"])[0]
                    raise err(loc + (i, where), str(exc)) from None
            where = loc + (i, "basis") if basis is not None else loc + (i,)
            basis_c = ""
            for element in elements:
                if (info.name, basis, element) not in checked:
                    try:
                        _, basis_c = engine.check_level(info.name, basis, [element])
                        checked[(info.name, basis, element)] = (basis_c, None)
                    except EngineSetupError as exc:
                        hint = _basis_hint(basis.strip().lower()) if basis else ""
                        checked[(info.name, basis, element)] = (None, str(exc) + hint)
                basis_c, problem = checked[(info.name, basis, element)]
                if problem is not None:
                    raise err(where, problem)
            if not elements:
                basis_c = "" if basis is None else basis.strip().lower()
            level = Level(info.name, basis_c)
            if level in levels:
                raise err(loc + (i,), f"level {level.label} is listed twice")
            levels.append(level)
    return levels


def _with_hint(message: str, hint: str) -> str:
    """``message`` with a did-you-mean ``hint`` placed before its list of what is allowed."""
    if not hint:
        return message
    for sep in ("; allowed", ": use one of"):
        if sep in message:
            head, tail = message.split(sep, 1)
            return f"{head}{hint}{sep}{tail}"
    return message + hint


@functools.lru_cache(maxsize=1)
def _method_names() -> tuple[str, ...]:
    """Method names to suggest from: the wavefunction methods and libxc's functionals."""
    from pyscf.dft import libxc

    from pesflow.engine import TIGHT_BINDING_METHODS, WAVEFUNCTION_METHODS

    names = {*WAVEFUNCTION_METHODS, *TIGHT_BINDING_METHODS, *(k.lower() for k in libxc.XC_ALIAS)}
    names |= {k.lower() for k in libxc.XC_CODES}
    return tuple(sorted(names))


def _basis_hint(basis: str) -> str:
    """Did-you-mean for a basis name, among PySCF's library names (written as PySCF
    normalises them: lower case without '-', '_' or spaces, which it accepts as given)."""
    from pyscf.gto import basis as pyscf_basis

    normalised = basis.lower().replace("-", "").replace("_", "").replace(" ", "")
    if normalised in pyscf_basis.ALIAS:  # a known basis that lacks an element: no guess
        return ""
    return did_you_mean(normalised, pyscf_basis.ALIAS)


def _check_point_count(spec: CampaignSpec, scans, err) -> None:
    """Refuse a campaign whose scans x molecules x levels exceed :data:`MAX_POINTS`."""
    sizes = {
        name: math.prod(len(c.values) for c in scan.coordinates)
        * len(scan.molecules)
        * len(scan.levels)
        for name, scan in scans.items()
    }
    total = sum(sizes.values())
    if total > MAX_POINTS:
        largest = max(sizes, key=sizes.get)
        scan = scans[largest]
        raise err(
            ("scans", largest),
            _too_many(
                f"the campaign has {total:,} points (this scan: "
                f"{sizes[largest] // (len(scan.molecules) * len(scan.levels)):,} grid points x "
                f"{len(scan.molecules)} molecule(s) x {len(scan.levels)} level(s))"
            ),
        )


def _resolve_levels(spec: CampaignSpec, molecules, scans, err) -> list[Level]:
    """Resolve the campaign's and each scan's levels; return their union in order."""
    checked_basis = {}

    def elements_of(names):
        return sorted({s for m in names for s in molecules[m].symbols})

    default_users = [
        m for n, sc in scans.items() if spec.scans[n].levels is None for m in sc.molecules
    ]
    campaign_levels = _resolve_level_list(
        spec.levels, ("levels",), elements_of(default_users), err, checked_basis
    )
    union = list(campaign_levels)
    for name, scan in scans.items():
        own = spec.scans[name].levels
        if own is None:
            if not campaign_levels:
                raise err(
                    ("scans", name),
                    "no levels of theory: give levels at the top of the campaign or in this scan",
                )
            scan.levels = list(campaign_levels)
        else:
            scan.levels = _resolve_level_list(
                own, ("scans", name, "levels"), elements_of(scan.molecules), err, checked_basis
            )
        if scan.relax:
            from pesflow.engine import method_info

            for lvl in scan.levels:
                if not method_info(lvl.method).has_gradients:
                    where = ("scans", name, "levels") if own is not None else ("levels",)
                    raise err(
                        where,
                        f"a relaxed scan needs analytic gradients; {lvl.method} has "
                        "none here (allowed: hf, DFT functionals, mp2, ccsd, gfn2-xtb, gfn1-xtb)",
                    )
        union += [lvl for lvl in scan.levels if lvl not in union]
    _check_reference_values(spec, err)
    ref = spec.compare.reference_level
    if ref is not None:
        labels = [lvl.label for lvl in union]
        if ref.strip().lower() not in labels:
            raise err(
                ("compare", "reference_level"),
                f"'{ref}' is not one of the levels{did_you_mean(ref.strip().lower(), labels)}; "
                f"allowed: {', '.join(labels)}",
            )
    return union


def _check_reference_values(spec: CampaignSpec, err) -> None:
    if not spec.compare.reference_values:
        return  # (the summary module is heavy to import; only load it when needed)
    from pesflow.analysis.quantities import COMPARED

    for i, ref in enumerate(spec.compare.reference_values):
        loc = ("compare", "reference_values", i)
        if ref.molecule not in spec.molecules:
            raise err(
                loc + ("molecule",),
                f"molecule '{ref.molecule}' is not defined"
                f"{did_you_mean(ref.molecule, spec.molecules)}; "
                f"defined: {', '.join(sorted(spec.molecules))}",
            )
        scan = spec.scans.get(ref.scan)
        if scan is None:
            raise err(
                loc + ("scan",),
                f"scan '{ref.scan}' is not defined{did_you_mean(ref.scan, spec.scans)}; "
                f"defined: {', '.join(sorted(spec.scans))}",
            )
        if ref.molecule not in scan.molecules:
            raise err(
                loc + ("scan",), f"scan '{ref.scan}' does not include molecule '{ref.molecule}'"
            )
        if ref.quantity not in COMPARED:
            raise err(
                loc + ("quantity",),
                f"unknown quantity '{ref.quantity}'"
                f"{did_you_mean(ref.quantity, COMPARED)}; "
                f"allowed: {', '.join(COMPARED)}",
            )


def load_campaign(path) -> Campaign:
    """Load, validate and resolve the campaign spec at ``path``.

    Raises :class:`~pesflow.errors.SpecError` (one line: file, YAML line, field, reason)
    on the first problem found.  Reads the spec and the XYZ files it names; writes
    nothing.
    """
    path = Path(path).resolve() if Path(path).exists() else Path(path)
    spec = parse_spec(path)
    _, located = _read_yaml(path)
    err = _Errors(path, located)
    molecules = {
        name: _resolve_molecule(name, m, path.parent, err) for name, m in spec.molecules.items()
    }
    scans = {name: _resolve_scan(name, s, molecules, err) for name, s in spec.scans.items()}
    levels = _resolve_levels(spec, molecules, scans, err)
    _check_point_count(spec, scans, err)
    campaign = Campaign(spec=spec, path=path, molecules=molecules, scans=scans, levels=levels)
    for name in [None, *(n for n, s in spec.scans.items() if s.engine is not None)]:
        try:
            campaign.engine_settings(name)
        except EngineSetupError as exc:
            where = ("engine",) if name is None else ("scans", name, "engine")
            raise err(where, str(exc)) from None
    return campaign
