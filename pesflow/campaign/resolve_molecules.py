"""Molecule resolution, the first step of :func:`~pesflow.campaign.resolve.load_campaign`:
each entry of ``molecules:`` built (builtin, file, XYZ text, SMILES, or a set's members and
conformers) and checked (charge, multiplicity, close contacts, isotopes, fragments)."""

from __future__ import annotations

from pathlib import Path

from pesflow.campaign.resolved import Molecule
from pesflow.campaign.spec import MIN_ATOM_DISTANCE_ANGSTROM, SET_SOURCES, MoleculeSpec
from pesflow.errors import SpecError


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
