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
    SET_SOURCES,
    CampaignSpec,
    MoleculeSpec,
    ScanSpec,
    did_you_mean,
)
from pesflow.campaign.yaml_source import _Errors, _read_yaml, parse_spec
from pesflow.coordinates.kinds import KINDS
from pesflow.errors import EngineSetupError, SpecError


def _resolve_molecule(name, spec: MoleculeSpec, base: Path, err) -> Molecule:
    """A single molecule (builtin, file, xyz, or one SMILES with one conformer)."""
    from pesflow.campaign import molecules as mol

    loc = ("molecules", name)
    rdmol, built = None, ""
    try:
        if spec.builtin is not None:
            atoms = mol.from_builtin(spec.builtin)
        elif spec.file is not None:
            file = Path(spec.file)
            if not file.is_absolute():
                file = base / file
            atoms = mol.from_file(file)
        elif spec.smiles is not None:
            seed = mol.DEFAULT_EMBED_SEED if spec.seed is None else spec.seed
            rdmol, (positions,) = mol.embed_smiles(
                spec.smiles, seed=seed, force_field=spec.force_field
            )
            atoms = mol.atoms_from_rdkit(rdmol, positions)
            built = f"SMILES {spec.smiles}: ETKDG seed {seed} + {spec.force_field.upper()}"
        else:
            atoms = mol.from_xyz_text(spec.xyz)
    except ValueError as exc:
        raise err(loc + (spec.source,), str(exc)) from None
    return _checked_molecule(name, atoms, spec, loc, err, rdkit=rdmol, built=built)


def _resolve_entry(name, spec: MoleculeSpec, base: Path, err, notes) -> dict[str, Molecule]:
    """The molecules of one entry: one molecule, a molecule's conformers, or a set's
    members (``<entry>/<member>``, conformers ``.../c1``, ``.../c2``).  A set member that
    cannot be built is left out with the reason in ``notes`` unless the set is strict."""
    from pesflow.campaign import molecules as mol

    if spec.source not in SET_SOURCES and not (spec.smiles and spec.conformers > 1):
        return {name: _resolve_molecule(name, spec, base, err)}
    loc = ("molecules", name, spec.source)
    seed = mol.DEFAULT_EMBED_SEED if spec.seed is None else spec.seed
    recipe = f"ETKDG seed {seed} + {spec.force_field.upper()}"
    try:
        if spec.smiles is not None:
            sources = [(None, name, ("smiles", spec.smiles))]
        elif spec.smiles_file is not None:
            entries = mol.read_smiles_file(_relative(spec.smiles_file, base))
            sources = [(f"line {n}", label, ("smiles", smi)) for n, label, smi in entries]
        elif spec.sdf is not None:
            records = mol.read_sdf(_relative(spec.sdf, base))
            sources = [(f"record {n}", label, ("sdf", (m, why))) for n, label, m, why in records]
        else:
            paths = mol.xyz_paths(spec.xyz_files, base)
            sources = [(p.name, p.stem, ("xyz", p)) for p in paths]
    except ValueError as exc:
        raise err(loc, str(exc)) from None
    out: dict[str, Molecule] = {}
    for where, label, (kind, source) in sources:
        short = mol.member_name(label) or mol.member_name(where or "")
        member = name if spec.smiles is not None else f"{name}/{short}"
        try:
            if member in out or f"{member}/c1" in out:
                raise ValueError(f"the name {short!r} is taken by an earlier member")
            if kind == "smiles":
                rdmol, stack = mol.embed_smiles(
                    source, seed=seed, conformers=spec.conformers, force_field=spec.force_field
                )
                built = f"SMILES {source}: {recipe}"
            elif kind == "sdf":
                rdmol, why = source
                if rdmol is None:
                    raise ValueError(why)
                if not rdmol.GetConformer().Is3D():
                    raise ValueError("the record has no 3-D coordinates")
                if any(a.GetNumImplicitHs() for a in rdmol.GetAtoms()):
                    raise ValueError(
                        "the record leaves hydrogens implicit; write every hydrogen with its "
                        "3-D position (or give the set as SMILES to have them built)"
                    )
                stack, built = [rdmol.GetConformer().GetPositions()], f"SDF {where}"
            else:
                read = mol.from_file(source)
                rdmol, stack, built = None, [read.positions], f"XYZ {source.name}"
                symbols = read.get_chemical_symbols()
            built_here = {}
            for c, positions in enumerate(stack, start=1):
                cname = member if len(stack) == 1 and spec.conformers == 1 else f"{member}/c{c}"
                if rdmol is not None:
                    atoms = mol.atoms_from_rdkit(rdmol, positions)
                else:
                    atoms = mol.Atoms(symbols=symbols, positions=positions)
                conformer = f", conformer {c} of {len(stack)}" if spec.conformers > 1 else ""
                built_here[cname] = _checked_molecule(
                    cname,
                    atoms,
                    spec,
                    ("molecules", name),
                    err,
                    rdkit=rdmol,
                    built=built + conformer,
                    set_name=name if spec.smiles is None else "",
                    member=member,
                    conformer=c if spec.conformers > 1 else 0,
                    lenient=not spec.strict,
                )
        except (ValueError, SpecError) as exc:
            reason = exc.reason if isinstance(exc, SpecError) else str(exc)
            if spec.strict or spec.smiles is not None:
                raise err(loc, f"member '{short}' ({where}): {reason}") from None
            notes.append(
                {"what": "refused", "entry": name, "molecule": member, "scan": "",
                 "text": f"{where}: {reason}"}
            )  # fmt: skip
            continue
        out.update(built_here)
        first = next(iter(built_here.values()))
        notes.append(
            {"what": "member", "entry": name, "molecule": member, "scan": "",
             "text": f"{first.atoms.get_chemical_formula()} charge {first.charge} "
                     f"multiplicity {first.multiplicity}: {first.built.split(', conformer')[0]}"
                     + (f", {len(built_here)} conformers" if len(built_here) > 1 else "")}
        )  # fmt: skip
    if not out:
        first = next(n for n in notes if n["entry"] == name and n["what"] == "refused")
        raise err(
            loc, f"no member of this set could be built; {first['molecule']}: {first['text']}"
        )
    return out


def _relative(path, base: Path) -> Path:
    path = Path(path)
    return path if path.is_absolute() else base / path


def _checked_molecule(name, atoms, spec: MoleculeSpec, loc, err, **extra) -> Molecule:
    """The molecule ``name`` of ``atoms``: charge, multiplicity, contacts, isotopes and
    fragments checked against ``spec`` (errors at ``loc``).  Charge and multiplicity not
    given in the spec come from the RDKit structure in ``extra`` when there is one."""
    from pesflow.campaign import molecules as mol

    rdmol = extra.get("rdkit")
    written = mol.structure_charge_multiplicity(rdmol) if rdmol is not None else (0, None)
    charge = written[0] if spec.charge is None else spec.charge
    if len(atoms) == 0:
        raise err(loc, "the molecule has no atoms")
    problem = None
    multiplicity = spec.multiplicity
    if multiplicity is None and spec.charge is None and written[1] is not None:
        multiplicity = written[1]
    if multiplicity is None:
        try:
            multiplicity = mol.default_multiplicity(atoms, charge)
        except ValueError as exc:
            raise err(loc + ("charge",), str(exc)) from None
        problem = mol.multiplicity_problem(atoms, charge, multiplicity)
        if problem is not None:
            raise err(loc + ("charge",), problem)
    else:
        problem = mol.multiplicity_problem(atoms, charge, multiplicity)
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
    if overrides:  # checked now, with the spec's location; plain masses on first use
        try:
            mol.masses_with_isotopes(atoms, overrides)
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
        if sum(f["charge"] for f in fragments) != charge:
            raise err(
                loc + ("fragments",),
                f"the fragments' charges must add up to the molecule's charge ({charge})",
            )
    return Molecule(
        name=name,
        atoms=atoms,
        charge=charge,
        multiplicity=multiplicity,
        isotopes=overrides,
        fragments=fragments,
        **extra,
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
    )


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


def _resolve_level_list(lspecs, loc, elements, err, checked) -> list[Level]:
    levels = []
    auto = set()  # members added for a CBS level: listing them again is no repeat
    for i, lspec in enumerate(lspecs):
        if lspec.extrapolate is not None:
            for member in _cbs_members(lspec, loc + (i,), err):
                level = _resolve_pair(*member, loc + (i,), elements, err, checked)
                if level not in levels:
                    levels.append(level)
                    auto.add(level)
            for derived in _cbs_levels(lspec, levels):
                if derived in levels:
                    raise err(loc + (i,), f"level {derived.label} is listed twice")
                levels.append(derived)
            continue
        for method, basis in lspec.pairs():
            level = _resolve_pair(
                method, basis, loc + (i,), elements, err, checked, lspec.options()
            )
            if level in auto:
                auto.discard(level)
                continue
            if level in levels:
                raise err(loc + (i,), f"level {level.label} is listed twice")
            levels.append(level)
    return levels


def _resolve_pair(method, basis, loc, elements, err, checked, options=None) -> Level:
    """One computed level, its method (with its level options folded into its name)
    and basis checked against the engines."""
    from pesflow import engine

    options = options or {}
    try:
        info = engine.method_info(method)
    except EngineSetupError as exc:
        hint = did_you_mean(str(method).strip().lower(), _method_names())
        raise err(loc + ("method",), _with_hint(str(exc), hint)) from None
    if options or info.options:
        try:
            info = engine.method_info(engine.level_method(info.name, options))
        except EngineSetupError as exc:
            given = [k for k in options if k not in info.options]
            named = [k for k in options if k in str(exc)]
            where = (given or named or [*options, "method"])[0]
            raise err(loc + (where,), str(exc)) from None
    where = loc + ("basis",) if basis is not None else loc
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
    return Level(info.name, basis_c)


#: Methods a CBS level can extrapolate: HF alone, or a correlated method on an HF reference.
CBS_METHODS = ("hf", "mp2", "ccsd", "ccsd(t)")


def _cbs_members(lspec, loc, err) -> list[tuple[str, str]]:
    """The (method, basis) pairs a CBS level spec needs computed; checks the spec."""
    from pesflow.analysis.cbs import parse_cc_basis

    methods = [lspec.method] if isinstance(lspec.method, str) else list(lspec.method)
    bases = (
        []
        if lspec.basis is None
        else [lspec.basis]
        if isinstance(lspec.basis, str)
        else list(lspec.basis)
    )
    for j, method in enumerate(methods):
        name = "".join(str(method).strip().lower().split())
        if name not in CBS_METHODS:
            where = loc + ("method",) if isinstance(lspec.method, str) else loc + ("method", j)
            raise err(
                where,
                f"extrapolate: cbs needs hf or a correlated wavefunction method; got "
                f"'{method}'; allowed: {', '.join(CBS_METHODS)}",
            )
    if not 2 <= len(bases) <= 3:
        raise err(
            loc + ("basis",),
            f"extrapolate: cbs needs a list of 2 or 3 basis sets of one correlation-consistent "
            f"family (got {len(bases)}), e.g. [cc-pvtz, cc-pvqz]",
        )
    parsed = []
    for j, basis in enumerate(bases):
        p = parse_cc_basis(basis)
        if p is None:
            raise err(
                loc + ("basis", j),
                f"extrapolate: cbs needs correlation-consistent basis sets; '{basis}' is not one; "
                "allowed: cc-pvXz, aug-cc-pvXz, cc-pcvXz, cc-pwcvXz and their aug- forms, "
                "X = d, t, q, 5, 6",
            )
        parsed.append(p)
    families = list(dict.fromkeys(f for f, _ in parsed))
    if len(families) > 1:
        raise err(
            loc + ("basis",),
            f"extrapolate: cbs needs basis sets of one family; got {' and '.join(families)} "
            "(the formulas assume one family's convergence)",
        )
    cardinals = sorted(x for _, x in parsed)
    if len(set(cardinals)) != len(cardinals):
        raise err(
            loc + ("basis",), "extrapolate: cbs needs basis sets of different cardinal numbers"
        )
    if len(cardinals) == 3 and cardinals[2] - cardinals[0] != 2:
        raise err(
            loc + ("basis",),
            "extrapolate: cbs with 3 basis sets needs consecutive cardinal numbers (e.g. "
            "dz, tz, qz; Feller's three-point formula)",
        )
    pairs = []
    for method in methods:
        pairs += [(method, b) for b in bases]
        if "".join(str(method).strip().lower().split()) != "hf":
            pairs += [("hf", b) for b in bases]
    return pairs


def _cbs_levels(lspec, levels) -> list[Level]:
    """The derived CBS levels of a spec whose members are resolved in ``levels``."""
    from pesflow.analysis.cbs import cbs_basis_label

    methods = [lspec.method] if isinstance(lspec.method, str) else list(lspec.method)
    bases = [b.strip().lower() for b in lspec.basis]
    out = []
    for method in methods:
        name = "".join(str(method).strip().lower().split())
        want = {(name, b) for b in bases} | ({("hf", b) for b in bases} if name != "hf" else set())
        members = tuple(lvl for lvl in levels if (lvl.method, lvl.basis) in want)
        out.append(Level(name, cbs_basis_label(bases), members=members))
    return out


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

    from pesflow.engine import (
        MULTIREFERENCE_METHODS,
        TIGHT_BINDING_METHODS,
        WAVEFUNCTION_METHODS,
    )

    names = {*WAVEFUNCTION_METHODS, *TIGHT_BINDING_METHODS, *MULTIREFERENCE_METHODS}
    names |= {k.lower() for k in libxc.XC_ALIAS}
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
            ("scans", scan.source),
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
        m for sc in scans.values() if spec.scans[sc.source].levels is None for m in sc.molecules
    ]
    campaign_levels = _resolve_level_list(
        spec.levels, ("levels",), elements_of(default_users), err, checked_basis
    )
    union = list(campaign_levels)
    for scan in scans.values():
        own = spec.scans[scan.source].levels
        if own is None:
            if not campaign_levels:
                raise err(
                    ("scans", scan.source),
                    "no levels of theory: give levels at the top of the campaign or in this scan",
                )
            scan.levels = list(campaign_levels)
        else:
            scan.levels = _resolve_level_list(
                own,
                ("scans", scan.source, "levels"),
                elements_of(scan.molecules),
                err,
                checked_basis,
            )
        if scan.counterpoise:
            from pesflow.engine import method_info

            for lvl in scan.levels:
                if not lvl.members and not method_info(lvl.method).needs_basis:
                    where = ("scans", scan.source, "levels") if own is not None else ("levels",)
                    raise err(
                        where,
                        f"counterpoise needs levels with basis sets; {lvl.method} has a "
                        "built-in basis (no ghost atoms)",
                    )
        if scan.relax:
            from pesflow.engine import method_info

            for lvl in scan.levels:
                if not lvl.members and not method_info(lvl.method).has_gradients:
                    where = ("scans", scan.source, "levels") if own is not None else ("levels",)
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
    notes: list[dict] = []
    molecules, groups = {}, {}
    for name, m in spec.molecules.items():
        resolved = _resolve_entry(name, m, path.parent, err, notes)
        molecules.update(resolved)
        groups[name] = list(resolved)
    scans = _resolve_scans(spec, molecules, groups, err, notes)
    levels = _resolve_levels(spec, molecules, scans, err)
    _check_point_count(spec, scans, err)
    campaign = Campaign(
        spec=spec,
        path=path,
        molecules=molecules,
        scans=scans,
        levels=levels,
        groups=groups,
        notes=notes,
    )
    for name in [None, *(n for n, s in spec.scans.items() if s.engine is not None)]:
        try:
            campaign.engine_settings(name)
        except EngineSetupError as exc:
            where = ("engine",) if name is None else ("scans", name, "engine")
            raise err(where, str(exc)) from None
    return campaign
