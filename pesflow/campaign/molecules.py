"""Molecule sources, charge and spin, and atomic masses.

Every source returns an :class:`ase.Atoms` with positions in angstrom:

* the built-in library, ASE's g2 collection (:func:`from_builtin`);
* inline XYZ text, with or without the count and comment lines (:func:`from_xyz_text`);
* XYZ and extended-XYZ files (:func:`from_file`).

Errors are :class:`ValueError` with a one-line message; the spec layer adds the
file, line and field it came from.  Atom numbers in messages and in isotope
overrides are 1-based, as chemists write them.

>>> water = from_xyz_text("O 0 0 0\\nH 0 0 0.97\\nH 0.94 0 -0.24")
>>> electron_count(water, charge=0), default_multiplicity(water, charge=0)
(10, 1)
>>> multiplicity_problem(from_xyz_text("O 0 0 0\\nH 0 0 0.97"), 0, 1)
'multiplicity 1 is impossible with 9 electrons; allowed: 2, 4, 6, 8, 10'
"""

import difflib
import functools
import json
import numbers
import re
from pathlib import Path

import numpy as np
from ase import Atoms
from ase.data import atomic_numbers, chemical_symbols

from pesflow.units import isotope_mass

#: Atomic mass of deuterium (2H) in dalton, as listed in the NIST table "Atomic
#: Weights and Isotopic Compositions for All Elements" (relative atomic masses from
#: the Atomic Mass Evaluation, AME).  The newer CODATA 2022 deuteron mass (in
#: scipy.constants) gives an atomic mass 3e-10 Da lower, far below anything a
#: vibrational analysis can see.
DEUTERIUM_MASS_DALTON = 2.01410177812
#: Atomic mass of tritium (3H) in dalton, from the same NIST table (CODATA 2022's
#: triton mass gives 3.4e-9 Da more).
TRITIUM_MASS_DALTON = 3.0160492779

#: Isotope labels understood without a mass number.
_HYDROGEN_LABELS = {"D": DEUTERIUM_MASS_DALTON, "T": TRITIUM_MASS_DALTON}
_MASS_NUMBER_LABEL = re.compile(r"^(\d+)([A-Za-z]{1,2})$")

_XYZ_EXPECTED = "'SYMBOL X Y Z' (element symbol or atomic number, then x, y, z in angstrom)"


@functools.cache
def _g2_entries() -> dict:
    """ASE's g2 collection by name: ``(numbers, positions, initial magnetic moments)``.

    Read from the data file that :mod:`ase.collections` reads (``ase/collections/g2.json``,
    ASE's database JSON), with :mod:`json`: importing :mod:`ase.collections` or
    :mod:`ase.build` costs 0.5-0.7 s of imports (ase.io, scipy.sparse) on every campaign
    load.  ``tests/unit/test_molecules.py`` checks every entry against
    :func:`ase.build.molecule`.
    """
    import ase

    path = Path(ase.__file__).parent / "collections" / "g2.json"
    entries = {}
    for row in json.loads(path.read_text()).values():
        if isinstance(row, dict) and "numbers" in row:
            name = row["key_value_pairs"]["name"]
            entries[name] = (row["numbers"], row["positions"], row.get("initial_magmoms"))
    return entries


def builtin_names():
    """Names of the built-in molecules: ASE's g2 collection, sorted.

    >>> "H2O" in builtin_names()
    True
    """
    return sorted(_g2_entries())


def from_builtin(name):
    """The molecule ``name`` from ASE's g2 collection (as :func:`ase.build.molecule`).

    An unknown name raises :class:`ValueError` with close matches.

    >>> from_builtin("H2O").get_chemical_formula()
    'H2O'
    """
    entries = _g2_entries()
    if name not in entries:
        by_lower = {n.lower(): n for n in entries}
        close = [by_lower[n] for n in difflib.get_close_matches(str(name).lower(), by_lower, n=5)]
        hint = f"did you mean {', '.join(close)}?" if close else "see builtin_names()"
        raise ValueError(f"unknown built-in molecule {name!r} (ASE g2 collection); {hint}")
    numbers, positions, magmoms = entries[name]
    return Atoms(numbers=numbers, positions=positions, magmoms=magmoms)


def _parse_symbol(field):
    """Element symbol (any case) or atomic number -> canonical symbol, or None."""
    if field.isdigit():
        z = int(field)
        return chemical_symbols[z] if 0 < z < len(chemical_symbols) else None
    symbol = field.capitalize()
    return symbol if symbol in atomic_numbers and symbol != "X" else None


def _parse_atom_line(line, number):
    fields = line.split()
    if len(fields) != 4:
        raise ValueError(f"line {number}: expected {_XYZ_EXPECTED}, got {line.strip()!r}")
    symbol = _parse_symbol(fields[0])
    if symbol is None:
        raise ValueError(f"line {number}: unknown element {fields[0]!r}; expected {_XYZ_EXPECTED}")
    try:
        xyz = [float(f) for f in fields[1:]]
    except ValueError:
        raise ValueError(
            f"line {number}: coordinates are not numbers; expected {_XYZ_EXPECTED}, "
            f"got {line.strip()!r}"
        ) from None
    if not all(np.isfinite(xyz)):
        raise ValueError(f"line {number}: coordinates must be finite, got {line.strip()!r}")
    return symbol, xyz


def from_xyz_text(text):
    """A molecule from XYZ text, positions in angstrom.

    Accepts plain atom lines (``"O 0 0 0\\nH 0 0 0.97"``) and a standard XYZ block
    (atom count, comment line, atom lines).  Symbols are case-normalised
    (``cl`` -> ``Cl``); an atomic number is accepted in place of a symbol.  Blank
    lines are skipped.  A malformed line raises :class:`ValueError` naming its
    number (1-based within ``text``) and what was expected.

    >>> from_xyz_text("2\\nhydrogen chloride\\ncl 0 0 0\\nh 0 0 1.27").get_chemical_symbols()
    ['Cl', 'H']
    """
    lines = list(enumerate(str(text).splitlines(), start=1))
    content = [(n, line) for n, line in lines if line.strip()]
    if not content:
        raise ValueError("no atoms: the XYZ text is empty")

    first_number, first = content[0]
    count = None
    if len(first.split()) == 1 and first.strip().isdigit():
        count = int(first)
        if count < 1:
            raise ValueError(f"line {first_number}: atom count must be >= 1, got {count}")
        # The comment line is the line right after the count, even when blank.
        atom_lines = [(n, line) for n, line in lines[first_number + 1 :] if line.strip()]
        if len(atom_lines) < count:
            last = atom_lines[-1][0] if atom_lines else first_number + 1
            raise ValueError(
                f"line {last}: the count on line {first_number} says {count} atoms, "
                f"found {len(atom_lines)} atom lines"
            )
        if len(atom_lines) > count:
            extra = atom_lines[count][0]
            raise ValueError(
                f"line {extra}: more atom lines than the count on line {first_number} "
                f"({count}); only one frame is read from inline XYZ"
            )
    else:
        atom_lines = content

    symbols, positions = [], []
    for number, line in atom_lines:
        symbol, xyz = _parse_atom_line(line, number)
        symbols.append(symbol)
        positions.append(xyz)
    return Atoms(symbols=symbols, positions=positions)


def _plain_xyz_frame(text: str):
    """The first frame of plain XYZ text (atom count, comment, ``symbol x y z`` lines) as
    :class:`ase.Atoms`, or None when it is anything else (extended XYZ with its own
    ``Properties=`` column layout, extra columns, a malformed line): :func:`from_file`
    then reads it with ASE."""
    lines = text.splitlines()
    head = lines[0].split() if lines else []
    if len(head) != 1 or not head[0].isdigit() or int(head[0]) < 1:
        return None
    count = int(head[0])
    if len(lines) < count + 2 or "properties=" in lines[1].lower():
        return None
    symbols, positions = [], []
    for number, line in enumerate(lines[2 : count + 2], start=3):
        try:
            symbol, xyz = _parse_atom_line(line, number)
        except ValueError:
            return None
        symbols.append(symbol)
        positions.append(xyz)
    return Atoms(symbols=symbols, positions=positions)


def from_file(path):
    """A molecule from an ``.xyz`` or ``.extxyz`` file.

    Only the first frame of a multi-frame file is read, and only its elements and
    positions (angstrom) are kept.  A plain ``.xyz`` file (atom count, comment line,
    ``symbol x y z`` lines) is read directly; anything else with :func:`ase.io.read`
    (extended XYZ), whose import costs about half a second (``ase.io`` imports SciPy's
    integrators) on every command that loads the campaign.  A missing or unreadable file
    raises :class:`ValueError` naming the path.
    """
    path = Path(path)
    suffix = path.suffix.lower()
    if suffix not in (".xyz", ".extxyz"):
        raise ValueError(f"{path}: unsupported file type {path.suffix!r}; allowed: .xyz, .extxyz")
    if not path.is_file():
        raise ValueError(f"{path}: no such file")
    if suffix == ".xyz":
        try:
            atoms = _plain_xyz_frame(path.read_text(encoding="utf-8"))
        except (OSError, UnicodeDecodeError):
            atoms = None  # ASE reports it
        if atoms is not None:
            return atoms
    import ase.io

    try:
        frame = ase.io.read(path, index=0, format="extxyz")
    except Exception as exc:  # ASE raises many types for a bad file; report one.
        reason = " ".join(str(exc).split()) or type(exc).__name__
        raise ValueError(f"{path}: cannot read as XYZ: {reason}") from exc
    if len(frame) == 0:
        raise ValueError(f"{path}: no atoms in the first frame")
    return Atoms(numbers=frame.numbers, positions=frame.positions)


def electron_count(atoms, charge):
    """Number of electrons of ``atoms`` (:class:`ase.Atoms`) carrying total ``charge``
    (in units of e; +1 removes an electron).  May be negative for an impossible charge.

    >>> electron_count(from_builtin("OH"), charge=-1)
    10
    """
    if isinstance(charge, bool) or int(charge) != charge:
        raise ValueError(f"charge must be an integer, got {charge!r}")
    return int(np.sum(atoms.numbers)) - int(charge)


def _allowed_multiplicities(electrons):
    allowed = list(range(1 if electrons % 2 == 0 else 2, electrons + 2, 2))
    if len(allowed) <= 6:
        return ", ".join(map(str, allowed))
    return f"{', '.join(map(str, allowed[:3]))}, ..., {allowed[-1]}"


def multiplicity_problem(atoms, charge, multiplicity):
    """Why ``multiplicity`` (2S + 1) is impossible for ``atoms`` with ``charge``, or None.

    Allowed: multiplicity >= 1, multiplicity - 1 has the parity of the electron
    count, and multiplicity - 1 <= electrons.  A negative electron count is a problem
    too.  Returns a one-line reason or None.

    >>> multiplicity_problem(from_builtin("O2"), 0, 3) is None
    True
    """
    electrons = electron_count(atoms, charge)
    if electrons < 0:
        return f"charge {int(charge):+d} leaves {electrons} electrons; the charge is too high"
    if isinstance(multiplicity, bool) or int(multiplicity) != multiplicity:
        return f"multiplicity must be an integer, got {multiplicity!r}"
    multiplicity = int(multiplicity)
    allowed = _allowed_multiplicities(electrons)
    if multiplicity < 1:
        return f"multiplicity must be >= 1, got {multiplicity}; allowed: {allowed}"
    unpaired = multiplicity - 1
    if unpaired % 2 != electrons % 2 or unpaired > electrons:
        return (
            f"multiplicity {multiplicity} is impossible with {electrons} electrons; "
            f"allowed: {allowed}"
        )
    return None


def default_multiplicity(atoms, charge):
    """Lowest multiplicity for the electron count: 1 if even, 2 if odd.

    >>> default_multiplicity(from_builtin("OH"), 0)
    2
    """
    electrons = electron_count(atoms, charge)
    if electrons < 0:
        raise ValueError(f"charge {int(charge):+d} leaves {electrons} electrons")
    return 1 if electrons % 2 == 0 else 2


def close_contacts(atoms, min_distance_angstrom=0.5):
    """Pairs of atoms closer than ``min_distance_angstrom`` (default 0.5 Å), which no
    real molecule has: usually a typo in a geometry or a unit mix-up (bohr for Å).

    Returns a list of ``(i, j, distance_angstrom)`` with 0-based ``i < j``, sorted.
    """
    # ASE's all-pairs distances: a molecule's few hundred atoms at most, and no scipy.spatial
    # import (0.1 s) on every campaign load.
    distances = atoms.get_all_distances()
    i, j = np.nonzero(np.triu(distances < min_distance_angstrom, k=1))
    return [(int(a), int(b), float(distances[a, b])) for a, b in zip(i, j, strict=True)]


def _isotope_label_mass(label, symbol, number):
    """Mass in dalton for an isotope label of atom ``number`` (1-based), element ``symbol``."""
    from pyscf.data import elements

    if label in _HYDROGEN_LABELS:
        if symbol != "H":
            raise ValueError(
                f"isotope of atom {number}: {label!r} is a hydrogen isotope but atom "
                f"{number} is {symbol}"
            )
        return _HYDROGEN_LABELS[label]
    match = _MASS_NUMBER_LABEL.match(label)
    if not match:
        raise ValueError(
            f"isotope of atom {number}: cannot read {label!r}; expected a mass in dalton, "
            "'D', 'T' or a label like '2H'"
        )
    mass_number, element = int(match.group(1)), match.group(2).capitalize()
    if element != symbol:
        raise ValueError(
            f"isotope of atom {number}: {label!r} is an isotope of {element} but atom "
            f"{number} is {symbol}"
        )
    if symbol == "H" and mass_number in (2, 3):
        return _HYDROGEN_LABELS["D" if mass_number == 2 else "T"]
    if mass_number == elements.ISOTOPE_MAIN[atomic_numbers[symbol]]:
        return isotope_mass(symbol)
    # Neither PySCF nor ASE ships a table of all isotope masses (ASE downloads it from
    # NIST at run time, which this program must not depend on).
    raise ValueError(
        f"isotope of atom {number}: no isotope-mass table is available for {label!r}; "
        "give the mass in dalton instead"
    )


def masses_with_isotopes(atoms, overrides=None):
    """Atomic masses in dalton, one per atom of ``atoms`` (:class:`ase.Atoms`).

    Each atom gets the exact mass of its element's most abundant isotope
    (:func:`pesflow.units.isotope_mass`), unless ``overrides`` (default None) maps its
    1-based atom number to a mass in dalton (a positive number) or a label:
    ``"D"`` / ``"2H"`` (deuterium), ``"T"`` / ``"3H"`` (tritium), or the mass number
    of the most abundant isotope (``"12C"``, ``"16O"``).  Other mass-number labels
    (``"13C"``) need the mass given as a number: no library here ships that table.

    >>> masses_with_isotopes(from_builtin("H2O"), {2: "D"}).round(6).tolist()
    [15.994915, 2.014102, 1.007825]
    """
    symbols = atoms.get_chemical_symbols()
    masses = np.array([isotope_mass(s) for s in symbols], dtype=float)
    for key, value in (overrides or {}).items():
        if isinstance(key, bool) or int(key) != key or not 1 <= int(key) <= len(symbols):
            raise ValueError(
                f"isotope override for atom {key!r}: atoms are numbered 1..{len(symbols)}"
            )
        number = int(key)
        symbol = symbols[number - 1]
        if isinstance(value, str):
            masses[number - 1] = _isotope_label_mass(value.strip(), symbol, number)
        elif isinstance(value, numbers.Real) and not isinstance(value, bool):
            if not (np.isfinite(value) and value > 0):
                raise ValueError(f"isotope of atom {number}: mass must be > 0 Da, got {value}")
            masses[number - 1] = float(value)
        else:
            raise ValueError(
                f"isotope of atom {number}: expected a mass in dalton or a label, got {value!r}"
            )
    return masses


# ---------------------------------------------------------------------------
# molecule sets: SMILES files, SDF files, folders or globs of XYZ files
# ---------------------------------------------------------------------------

#: Random seed of the distance-geometry embedding when the spec gives none: a fixed seed
#: makes a SMILES-built geometry, and so every point key, the same on every run.
DEFAULT_EMBED_SEED = 20261202


def member_name(text):
    """A member's name as the spec allows names: lower case, runs of other characters
    turned into ``-`` (``"Acetic acid"`` -> ``"acetic-acid"``); ``""`` if nothing is left.

    >>> member_name("Acetic acid (1)"), member_name("n_butane")
    ('acetic-acid-1', 'n_butane')
    """
    return re.sub(r"[^a-z0-9_]+", "-", str(text).strip().lower()).strip("-_")


def read_smiles_file(path):
    """Entries of a SMILES file: ``[(line, name, smiles), ...]``.

    One molecule a line: the SMILES, then (after white space) its name; blank lines and
    lines starting with ``#`` are skipped, and a first line whose first word is
    ``smiles`` (any case) is a header.  A line without a name is named ``line<N>``.
    """
    path = Path(path)
    if not path.is_file():
        raise ValueError(f"{path}: no such file")
    entries = []
    for number, line in enumerate(path.read_text(encoding="utf-8").splitlines(), start=1):
        fields = line.split(maxsplit=1)
        if not fields or fields[0].startswith("#"):
            continue
        if not entries and fields[0].lower() == "smiles":
            continue
        name = fields[1].strip() if len(fields) > 1 else f"line{number}"
        entries.append((number, name, fields[0]))
    if not entries:
        raise ValueError(f"{path}: no SMILES in the file (one 'SMILES name' a line)")
    return entries


def read_sdf(path):
    """Records of an SDF file: ``[(record, name, rdkit_mol_or_None, reason), ...]``.

    ``record`` counts from 1; ``name`` is the record's title line (``record<N>`` when
    blank); a record RDKit cannot read gives ``None`` and RDKit's reason.  Hydrogens
    and 3-D coordinates are kept as written.
    """
    from rdkit import Chem, RDLogger

    path = Path(path)
    if not path.is_file():
        raise ValueError(f"{path}: no such file")
    RDLogger.DisableLog("rdApp.*")
    try:
        supplier = Chem.SDMolSupplier(str(path), removeHs=False, sanitize=True)
        records = []
        for index, rdmol in enumerate(supplier, start=1):
            if rdmol is None:
                records.append((index, f"record{index}", None, "RDKit cannot read this record"))
                continue
            title = rdmol.GetProp("_Name").strip() if rdmol.HasProp("_Name") else ""
            records.append((index, title or f"record{index}", rdmol, None))
    finally:
        RDLogger.EnableLog("rdApp.*")
    if not records:
        raise ValueError(f"{path}: no molecules in the SDF file")
    return records


def xyz_paths(pattern, base):
    """The XYZ/extended-XYZ files of a folder (``*.xyz`` and ``*.extxyz`` in it) or of a
    glob pattern, relative to ``base``, sorted by name."""
    root = Path(pattern)
    if not root.is_absolute():
        root = Path(base) / root
    if root.is_dir():
        paths = [p for p in root.iterdir() if p.suffix.lower() in (".xyz", ".extxyz")]
    else:
        paths = [
            p
            for p in Path(root.anchor or ".").glob(str(root.relative_to(root.anchor or ".")))
            if p.is_file()
        ]
    if not paths:
        raise ValueError(f"{pattern}: no .xyz or .extxyz files there")
    return sorted(paths)


def embed_smiles(smiles, *, seed=DEFAULT_EMBED_SEED, conformers=1, force_field="mmff"):
    """A 3-D structure from a SMILES: ``(rdkit_mol_with_hydrogens, [positions, ...])``.

    RDKit's distance-geometry embedding (ETKDG version 3) with random seed ``seed`` on one
    thread, then a force-field clean-up of every conformer (``"mmff"``: MMFF94, or
    ``"uff"``; MMFF falls back to UFF for elements it lacks).  ``conformers`` (default 1)
    asks for that many starting conformers; fewer may come back when the embedding finds
    fewer.  Positions in angstrom, atoms in the SMILES order followed by the added
    hydrogens.  The same SMILES, seed and RDKit version give the same positions.

    >>> rdmol, (xyz,) = embed_smiles("O")
    >>> [a.GetSymbol() for a in rdmol.GetAtoms()], xyz.shape
    (['O', 'H', 'H'], (3, 3))
    """
    from rdkit import Chem, RDLogger
    from rdkit.Chem import AllChem, rdDistGeom

    RDLogger.DisableLog("rdApp.*")
    try:
        base = Chem.MolFromSmiles(smiles)
        if base is None:
            raise ValueError(f"RDKit cannot read the SMILES {smiles!r}")
        rdmol = Chem.AddHs(base)
        params = rdDistGeom.ETKDGv3()
        params.randomSeed = int(seed)
        params.numThreads = 1
        ids = list(rdDistGeom.EmbedMultipleConfs(rdmol, int(conformers), params))
        if not ids:
            raise ValueError(f"the embedding of {smiles!r} found no 3-D structure")
        use_mmff = force_field == "mmff" and AllChem.MMFFHasAllMoleculeParams(rdmol)
        if use_mmff:
            AllChem.MMFFOptimizeMoleculeConfs(rdmol, numThreads=1, maxIters=2000)
        elif AllChem.UFFHasAllMoleculeParams(rdmol):
            AllChem.UFFOptimizeMoleculeConfs(rdmol, numThreads=1, maxIters=2000)
        positions = [np.array(rdmol.GetConformer(i).GetPositions(), dtype=float) for i in ids]
    finally:
        RDLogger.EnableLog("rdApp.*")
    return rdmol, positions


def structure_charge_multiplicity(rdmol):
    """Charge and multiplicity written in a structure: the sum of the formal charges, and
    one more than the number of radical electrons (unpaired electrons taken parallel).

    >>> from rdkit import Chem
    >>> structure_charge_multiplicity(Chem.MolFromSmiles("[CH3]")), \\
    ...     structure_charge_multiplicity(Chem.MolFromSmiles("C[NH3+]"))
    ((0, 2), (1, 1))
    """
    charge = sum(a.GetFormalCharge() for a in rdmol.GetAtoms())
    radicals = sum(a.GetNumRadicalElectrons() for a in rdmol.GetAtoms())
    return int(charge), int(radicals) + 1


def atoms_from_rdkit(rdmol, positions=None):
    """An :class:`ase.Atoms` of ``rdmol``'s elements at ``positions`` (angstrom; default
    its first conformer)."""
    if positions is None:
        positions = rdmol.GetConformer().GetPositions()
    return Atoms(
        symbols=[a.GetSymbol() for a in rdmol.GetAtoms()],
        positions=np.asarray(positions, dtype=float),
    )


def perceive_bonds(atoms, charge=0):
    """An RDKit molecule with bonds and bond orders perceived from a geometry
    (:func:`rdkit.Chem.rdDetermineBonds.DetermineBonds`: connectivity from covalent
    radii, bond orders by the xyz2mol method); ``ValueError`` when no bond orders fit
    the total ``charge``."""
    from rdkit import Chem, RDLogger
    from rdkit.Chem import rdDetermineBonds

    block = f"{len(atoms)}\n\n" + "\n".join(
        f"{s} {x:.10f} {y:.10f} {z:.10f}"
        for s, (x, y, z) in zip(atoms.get_chemical_symbols(), atoms.positions)
    )
    RDLogger.DisableLog("rdApp.*")
    try:
        rdmol = Chem.MolFromXYZBlock(block)
        try:
            rdDetermineBonds.DetermineBonds(rdmol, charge=int(charge))
        except Exception as exc:  # RDKit raises ValueError or RuntimeError here
            raise ValueError(
                f"cannot perceive bond orders from the geometry with charge {int(charge)} "
                f"({' '.join(str(exc).split()) or type(exc).__name__})"
            ) from None
    finally:
        RDLogger.EnableLog("rdApp.*")
    return rdmol
