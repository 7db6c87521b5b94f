"""Molecule sources, electron counts, spin rules, close contacts and isotope masses.

References: ASE's g2 collection and its XYZ reader/writer; PySCF's Mole.build (which
refuses a spin inconsistent with the electron count); scipy.constants (CODATA 2022
nuclear masses) and the NIST table of isotope masses.
"""

import io
import subprocess
import sys
from pathlib import Path

import ase.build
import ase.io
import numpy as np
import pytest
import scipy.constants as sc
from ase.collections import g2

from pesflow.campaign.molecules import (
    DEUTERIUM_MASS_DALTON,
    TRITIUM_MASS_DALTON,
    builtin_names,
    close_contacts,
    default_multiplicity,
    electron_count,
    from_builtin,
    from_file,
    from_xyz_text,
    masses_with_isotopes,
    multiplicity_problem,
)

REPO = Path(__file__).resolve().parents[2]

WATER_XYZ = "O 0.0 0.0 0.119262\nH 0.0 0.763239 -0.477047\nH 0.0 -0.763239 -0.477047"


# --- built-in library ---------------------------------------------------------------


def test_builtin_names_are_the_g2_collection():
    names = builtin_names()
    assert sorted(g2.names) == names
    assert {"H2O", "CH3CH2OH", "C6H6", "OH", "O2"} <= set(names)


def test_from_builtin_is_ase_molecule():
    """Every built-in molecule equals ASE's own ase.build.molecule: atoms, positions and the
    initial magnetic moments (pesflow reads the collection's data file itself)."""
    for name in g2.names:
        got, reference = from_builtin(name), ase.build.molecule(name)
        assert got.get_chemical_symbols() == reference.get_chemical_symbols(), name
        np.testing.assert_array_equal(got.positions, reference.positions, err_msg=name)
        np.testing.assert_array_equal(
            got.get_initial_magnetic_moments(),
            reference.get_initial_magnetic_moments(),
            err_msg=name,
        )


@pytest.mark.parametrize("typo, expected", [("H20", "H2O"), ("h2o", "H2O"), ("C6H5", "C6H6")])
def test_unknown_builtin_suggests_close_names(typo, expected):
    with pytest.raises(ValueError) as info:
        from_builtin(typo)
    message = str(info.value)
    assert "unknown" in message and repr(typo) in message and expected in message
    assert "\n" not in message


def test_unknown_builtin_without_close_names():
    with pytest.raises(ValueError, match="unknown built-in molecule"):
        from_builtin("unobtainium-42-xyzzy")


# --- inline XYZ text ----------------------------------------------------------------


def test_plain_atom_lines():
    atoms = from_xyz_text(WATER_XYZ)
    assert atoms.get_chemical_symbols() == ["O", "H", "H"]
    np.testing.assert_allclose(atoms.positions, ase.build.molecule("H2O").positions, atol=1e-12)


def test_standard_xyz_block_matches_ase_reader():
    text = "3\nwater, comment line: 1 2 3\n" + WATER_XYZ + "\n"
    atoms = from_xyz_text(text + "\n  \n")  # trailing blank lines are fine for us
    reference = ase.io.read(io.StringIO(text), format="xyz")
    assert atoms.get_chemical_symbols() == reference.get_chemical_symbols()
    np.testing.assert_allclose(atoms.positions, reference.positions, atol=1e-12)


def test_blank_comment_line_and_blank_lines():
    atoms = from_xyz_text("\n2\n\nH 0 0 0\n\nH 0 0 0.74\n")
    assert atoms.get_chemical_symbols() == ["H", "H"]
    assert atoms.get_distance(0, 1) == pytest.approx(0.74, abs=1e-12)


def test_symbols_are_case_normalised_and_numbers_accepted():
    atoms = from_xyz_text("cl 0 0 0\nH 0 0 1.27\nCL 0 0 3\n8 0 0 5")
    assert atoms.get_chemical_symbols() == ["Cl", "H", "Cl", "O"]


@pytest.mark.parametrize(
    "text, line, expected",
    [
        ("O 0 0 0\nH 0 0 0.97\nH 0 0", "line 3", "expected 'SYMBOL X Y Z'"),
        ("O 0 0 0\nH 0 zero 0.97", "line 2", "not numbers"),
        ("O 0 0 0\nXx 0 0 0.97", "line 2", "unknown element 'Xx'"),
        ("O 0 0 0\nH 0 0 nan", "line 2", "finite"),
        ("3\nwater\nO 0 0 0\nH 0 0 0.97", "line 4", "says 3 atoms"),
        ("2\nwater\nO 0 0 0\nH 0 0 0.97\nH 0 0.9 0", "line 5", "more atom lines"),
        ("0\nnothing\n", "line 1", "count must be >= 1"),
        ("3 atoms\nO 0 0 0", "line 1", "expected 'SYMBOL X Y Z'"),
    ],
)
def test_malformed_xyz_names_the_line(text, line, expected):
    with pytest.raises(ValueError) as info:
        from_xyz_text(text)
    message = str(info.value)
    assert message.startswith(line + ":") and expected in message and "\n" not in message


def test_empty_xyz_text():
    with pytest.raises(ValueError, match="empty"):
        from_xyz_text("  \n\n")


# --- files --------------------------------------------------------------------------


@pytest.mark.parametrize("suffix, fmt", [(".xyz", "xyz"), (".extxyz", "extxyz")])
def test_files_written_by_ase(tmp_path, suffix, fmt):
    ethanol = ase.build.molecule("CH3CH2OH")
    water = ase.build.molecule("H2O")
    path = tmp_path / f"frames{suffix}"
    ase.io.write(path, [ethanol, water], format=fmt)
    atoms = from_file(path)  # first frame only
    assert atoms.get_chemical_symbols() == ethanol.get_chemical_symbols()
    np.testing.assert_allclose(atoms.positions, ethanol.positions, atol=1e-7)


def test_plain_xyz_files_read_directly_give_what_ase_reads(tmp_path):
    """A plain XYZ file is read without ASE's reader (whose import costs ~0.5 s on every
    campaign load); the reference is ase.io.read of the same file."""
    shipped = sorted((REPO / "configs" / "geometries").glob("*.xyz"))
    hand = tmp_path / "two-frames.xyz"
    hand.write_text(
        "3\nwater, then a second frame that is not read\n"
        "O 0.0 0.0 0.1173\nH 0.0 0.7572 -0.4692\nH 0.0 -0.7572 -0.4692\n"
        "2\nsecond\nH 0 0 0\nH 0 0 0.74\n"
    )
    assert shipped
    for path in [*shipped, hand]:
        want = ase.io.read(path, index=0, format="extxyz")
        got = from_file(path)
        assert got.get_chemical_symbols() == want.get_chemical_symbols(), path
        np.testing.assert_allclose(got.positions, want.positions, atol=1e-12)
    code = (
        "import sys; from pesflow.campaign.molecules import from_file; "
        f"from_file({str(hand)!r}); print('ase.io' in sys.modules)"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "False"


def test_extended_xyz_with_its_own_column_order_is_read_by_ase(tmp_path):
    """A comment line with ``Properties=`` may put the columns in another order: such a
    file goes to ASE's reader, which follows it (positions first here)."""
    path = tmp_path / "reordered.xyz"
    path.write_text(
        "2\nProperties=pos:R:3:species:S:1 energy=-1.0\n0.0 0.0 0.0 H\n0.0 0.0 0.74 H\n"
    )
    atoms = from_file(path)
    assert atoms.get_chemical_symbols() == ["H", "H"]
    np.testing.assert_allclose(atoms.positions[1], [0.0, 0.0, 0.74])


def test_missing_file_names_the_path(tmp_path):
    path = tmp_path / "nowhere" / "water.xyz"
    with pytest.raises(ValueError, match="no such file") as info:
        from_file(path)
    assert str(path) in str(info.value)


def test_unreadable_file_names_the_path(tmp_path):
    path = tmp_path / "broken.xyz"
    path.write_text("three\nnot an xyz file at all\n")
    with pytest.raises(ValueError, match="cannot read as XYZ") as info:
        from_file(path)
    assert str(path) in str(info.value) and "\n" not in str(info.value)


def test_unsupported_suffix(tmp_path):
    path = tmp_path / "water.pdb"
    path.write_text("")
    with pytest.raises(ValueError, match="allowed: .xyz, .extxyz"):
        from_file(path)


# --- electrons and spin -------------------------------------------------------------


def _pyscf_accepts(atoms, charge, multiplicity):
    """PySCF's own check: Mole.build refuses a spin (2S) whose parity differs from the
    electron count (RuntimeError) or that exceeds it (AssertionError)."""
    from pyscf import gto

    atom = [
        (s, tuple(p)) for s, p in zip(atoms.get_chemical_symbols(), atoms.positions, strict=True)
    ]
    try:
        mol = gto.M(atom=atom, basis="sto-3g", charge=charge, spin=multiplicity - 1, verbose=0)
    except (RuntimeError, AssertionError):
        return False, None
    return True, mol.nelectron


@pytest.mark.parametrize(
    "name, charge, multiplicity",
    [
        ("OH", 0, 1),
        ("OH", 0, 2),
        ("OH", 0, 4),
        ("OH", -1, 1),
        ("O2", 0, 3),
        ("O2", 0, 1),
        ("O2", 0, 2),
        ("H2O", 0, 1),
        ("H2O", 1, 2),
        ("H", 0, 2),
        ("H", 0, 4),
        ("CH3", 0, 2),
        ("CH3", 1, 1),
    ],
)
def test_multiplicity_rules_agree_with_pyscf(name, charge, multiplicity):
    atoms = from_builtin(name)
    accepted, n_electrons = _pyscf_accepts(atoms, charge, multiplicity)
    problem = multiplicity_problem(atoms, charge, multiplicity)
    assert (problem is None) == accepted, problem
    if accepted:
        assert electron_count(atoms, charge) == n_electrons


def test_oh_radical_cannot_be_a_singlet():
    oh = from_xyz_text("O 0 0 0\nH 0 0 0.97")
    assert electron_count(oh, 0) == 9  # 8 + 1
    problem = multiplicity_problem(oh, 0, 1)
    assert problem == "multiplicity 1 is impossible with 9 electrons; allowed: 2, 4, 6, 8, 10"
    assert default_multiplicity(oh, 0) == 2


def test_o2_triplet_and_defaults():
    o2 = from_builtin("O2")
    assert multiplicity_problem(o2, 0, 3) is None
    assert default_multiplicity(o2, 0) == 1
    assert default_multiplicity(o2, 1) == 2


def test_long_allowed_list_is_shortened():
    benzene = from_builtin("C6H6")  # 42 electrons
    problem = multiplicity_problem(benzene, 0, 2)
    assert problem == "multiplicity 2 is impossible with 42 electrons; allowed: 1, 3, 5, ..., 43"


def test_impossible_charge_and_multiplicity_values():
    hydrogen = from_builtin("H")
    assert electron_count(hydrogen, 2) == -1
    assert "leaves -1 electrons" in multiplicity_problem(hydrogen, 2, 1)
    assert multiplicity_problem(hydrogen, 1, 1) is None  # a bare proton: 0 electrons, singlet
    assert ">= 1" in multiplicity_problem(hydrogen, 0, 0)
    with pytest.raises(ValueError):
        default_multiplicity(hydrogen, 2)
    with pytest.raises(ValueError, match="integer"):
        electron_count(hydrogen, 0.5)


# --- close contacts -----------------------------------------------------------------


def test_close_contacts():
    assert close_contacts(from_builtin("CH3CH2OH")) == []
    atoms = from_xyz_text("O 0 0 0\nH 0 0 0.3\nH 0 0.9 0\nH 0 0.9 0.45")
    contacts = close_contacts(atoms)
    assert [(i, j) for i, j, _ in contacts] == [(0, 1), (2, 3)]
    assert contacts[0][2] == pytest.approx(0.3, abs=1e-12)
    assert contacts[1][2] == pytest.approx(0.45, abs=1e-12)


def test_close_contacts_match_all_distances():
    # Reference: ASE's full distance matrix on a random cloud of atoms.
    rng = np.random.default_rng(3)
    atoms = ase.Atoms("C40", positions=rng.uniform(0.0, 4.0, size=(40, 3)))
    distances = atoms.get_all_distances()
    threshold = 0.9
    expected = [(i, j) for i in range(40) for j in range(i + 1, 40) if distances[i, j] < threshold]
    contacts = close_contacts(atoms, min_distance_angstrom=threshold)
    assert expected  # the cloud is dense enough to have some
    assert [(i, j) for i, j, _ in contacts] == expected
    for i, j, d in contacts:
        assert d == pytest.approx(distances[i, j], abs=1e-12)


# --- isotope masses -----------------------------------------------------------------


def _atom_mass_from_codata(nucleus):
    """Atomic mass in dalton of a one-electron atom from CODATA 2022 (scipy.constants):
    nuclear mass + electron mass - ionisation energy (Rydberg energy x reduced mass)."""
    pc = sc.physical_constants
    m_nucleus = pc[f"{nucleus} mass in u"][0]
    m_e = pc["electron mass in u"][0]
    reduced = 1.0 / (1.0 + m_e / m_nucleus)
    binding_u = pc["Rydberg constant times hc in eV"][0] * reduced * 1e-6
    binding_u /= pc["atomic mass constant energy equivalent in MeV"][0]
    return m_nucleus + m_e - binding_u


def test_deuterium_and_tritium_masses():
    # NIST, Atomic Weights and Isotopic Compositions for All Elements (relative atomic
    # masses from the Atomic Mass Evaluation): 2H 2.01410177812(12), 3H 3.0160492779(24).
    assert DEUTERIUM_MASS_DALTON == 2.01410177812
    assert TRITIUM_MASS_DALTON == 3.0160492779
    # Independent: CODATA 2022 deuteron and triton masses; they agree to a few 1e-9 Da.
    assert DEUTERIUM_MASS_DALTON == pytest.approx(_atom_mass_from_codata("deuteron"), abs=1e-9)
    assert TRITIUM_MASS_DALTON == pytest.approx(_atom_mass_from_codata("triton"), abs=5e-9)


def test_default_masses_are_most_abundant_isotopes():
    masses = masses_with_isotopes(from_builtin("H2O"))
    # NIST, Atomic Weights and Isotopic Compositions: 1H 1.00782503223(9) Da,
    # 16O 15.99491461957(17) Da (value from memory); the table used keeps 6 decimals.
    np.testing.assert_allclose(masses, [15.99491461957, 1.00782503223, 1.00782503223], atol=1e-6)
    assert masses[1] == pytest.approx(_atom_mass_from_codata("proton"), abs=1e-6)


def test_isotope_overrides():
    water = from_builtin("H2O")  # O, H, H
    heavy = masses_with_isotopes(water, {2: "D", 3: "T"})
    np.testing.assert_allclose(heavy[1:], [2.01410178, 3.01604928], atol=1e-8)
    assert masses_with_isotopes(water, {2: "2H", 3: "3H"}).tolist() == heavy.tolist()
    custom = masses_with_isotopes(water, {1: 17.9991596, 3: "1H"})  # a mass in dalton
    assert custom[0] == 17.9991596
    assert custom[2] == masses_with_isotopes(water)[2]
    assert masses_with_isotopes(water, {1: "16O"})[0] == masses_with_isotopes(water)[0]
    assert masses_with_isotopes(water, {1: np.float64(18.0)})[0] == 18.0


@pytest.mark.parametrize(
    "overrides, expected",
    [
        ({1: "D"}, "hydrogen isotope but atom 1 is O"),
        ({2: "13C"}, "isotope of C but atom 2 is H"),
        ({1: "18O"}, "no isotope-mass table"),
        ({1: "heavy"}, "cannot read 'heavy'"),
        ({0: "D"}, "numbered 1..3"),
        ({4: "D"}, "numbered 1..3"),
        ({2: -2.0}, "must be > 0"),
        ({2: None}, "expected a mass in dalton or a label"),
    ],
)
def test_bad_isotope_overrides(overrides, expected):
    with pytest.raises(ValueError, match=expected):
        masses_with_isotopes(from_builtin("H2O"), overrides)
