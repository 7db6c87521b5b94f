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


def builtin_names():
    """Names of the built-in molecules: ASE's g2 collection, sorted.

    >>> "H2O" in builtin_names()
    True
    """
    from ase.collections import g2

    return sorted(g2.names)


def from_builtin(name):
    """The molecule ``name`` from ASE's g2 collection (:func:`ase.build.molecule`).

    An unknown name raises :class:`ValueError` with close matches.

    >>> from_builtin("H2O").get_chemical_formula()
    'H2O'
    """
    import ase.build

    names = builtin_names()
    if name not in names:
        by_lower = {n.lower(): n for n in names}
        close = [by_lower[n] for n in difflib.get_close_matches(str(name).lower(), by_lower, n=5)]
        hint = f"did you mean {', '.join(close)}?" if close else "see builtin_names()"
        raise ValueError(f"unknown built-in molecule {name!r} (ASE g2 collection); {hint}")
    return ase.build.molecule(name)


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


def from_file(path):
    """A molecule from an ``.xyz`` or ``.extxyz`` file (read with :func:`ase.io.read`).

    Only the first frame of a multi-frame file is read, and only its elements and
    positions (angstrom) are kept.  A missing or unreadable file raises
    :class:`ValueError` naming the path.
    """
    import ase.io

    path = Path(path)
    suffix = path.suffix.lower()
    if suffix not in (".xyz", ".extxyz"):
        raise ValueError(f"{path}: unsupported file type {path.suffix!r}; allowed: .xyz, .extxyz")
    if not path.is_file():
        raise ValueError(f"{path}: no such file")
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
    from scipy.spatial import cKDTree

    positions = np.asarray(atoms.positions, dtype=float)
    pairs = sorted(cKDTree(positions).query_pairs(min_distance_angstrom))
    contacts = []
    for i, j in pairs:
        distance = float(np.linalg.norm(positions[j] - positions[i]))
        # query_pairs includes the boundary; the threshold itself is not a contact.
        if distance < min_distance_angstrom:
            contacts.append((int(i), int(j), distance))
    return contacts


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
