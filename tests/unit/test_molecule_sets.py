"""Molecule sets (SMILES files, SDF files, XYZ folders) and scans chosen by rule."""

import subprocess
import sys

import numpy as np
import pytest

from pesflow.campaign import load_campaign
from pesflow.campaign import molecules as mol
from pesflow.campaign.rules import coordinate_name, expand_rule
from pesflow.errors import SpecError


def _names(smiles, rule="rotatable-torsions", **options):
    rdmol, _ = mol.embed_smiles(smiles)
    return [coordinate_name(rdmol, t) for t in expand_rule(rdmol, rule, **options)]


def _check(spec, *args):
    return subprocess.run(
        [sys.executable, "-m", "pesflow", "check", str(spec), *args],
        capture_output=True,
        text=True,
        env={"COLUMNS": "200", "PATH": "/usr/bin:/bin"},
        timeout=120,
    )


# ---------------------------------------------------------------------------
# geometry from SMILES
# ---------------------------------------------------------------------------


def test_smiles_geometry_equals_a_rerun_with_the_same_seed_to_1e_8_angstrom():
    for smiles in ("CCCC", "OCCO", "c1ccc(cc1)-c1ccccc1"):
        _, first = mol.embed_smiles(smiles, seed=7, conformers=3)
        _, again = mol.embed_smiles(smiles, seed=7, conformers=3)
        assert len(first) == len(again) >= 2
        for a, b in zip(first, again):
            assert np.abs(a - b).max() < 1e-8
    # the seed matters: another seed gives other starting structures (not a constant result)
    _, other = mol.embed_smiles("OCCO", seed=8, conformers=3)
    _, seven = mol.embed_smiles("OCCO", seed=7, conformers=3)
    assert max(np.abs(a - b).max() for a, b in zip(seven, other)) > 1e-3


def test_same_smiles_set_loaded_twice_gives_the_same_point_keys(tmp_path):
    from pesflow.plan.expand import expand

    (tmp_path / "set.smi").write_text("CCO ethanol\nCCCO propanol\n")
    (tmp_path / "c.yaml").write_text(
        "campaign: keys\nmolecules:\n  alcohols: {smiles_file: set.smi}\n"
        "scans:\n  t:\n    molecules: [alcohols]\n    coordinates:\n"
        "      - {type: dihedral, rule: rotatable-torsions, from: 0, to: 300, step: 60}\n"
        "levels: [{method: gfn2-xtb}]\n"
    )
    first = expand(load_campaign(tmp_path / "c.yaml")).points["key"].tolist()
    again = expand(load_campaign(tmp_path / "c.yaml")).points["key"].tolist()
    assert first == again and len(first) == 6 * 3  # ethanol 1 torsion, propanol 2


def _bond_lengths(rdmol, positions):
    """Bond lengths (angstrom) grouped by element pair and bond order, sorted."""
    out = {}
    for bond in rdmol.GetBonds():
        i, j = bond.GetBeginAtomIdx(), bond.GetEndAtomIdx()
        pair = "-".join(sorted(rdmol.GetAtomWithIdx(k).GetSymbol() for k in (i, j)))
        key = f"{pair} {bond.GetBondTypeAsDouble()}"
        out.setdefault(key, []).append(float(np.linalg.norm(positions[i] - positions[j])))
    return {k: np.sort(v) for k, v in out.items()}


@pytest.mark.parametrize(
    ("smiles", "g2_name"),
    [("CCO", "CH3CH2OH"), ("c1ccccc1", "C6H6"), ("CC", "C2H6"), ("CO", "CH3OH"), ("N", "NH3")],
)
def test_built_bond_lengths_are_within_0_025_angstrom_of_the_g2_geometries(smiles, g2_name):
    """Every bond of the RDKit-built (ETKDG + MMFF94) molecule against the same bond type in
    ASE's g2 collection (the built-in molecules; G2 test-set geometries, MP2(full)/6-31G(d)
    optimised, from memory).  Tolerance 0.025 A, common practice for a force-field geometry:
    MMFF94 reproduces bond lengths of small organic molecules to about 0.01-0.02 A against
    ab initio and experimental structures (Halgren, J. Comput. Chem. 17 (1996) 490, from
    memory), and a force-field clean-up is only meant to give a sound starting geometry."""
    rdmol, (positions,) = mol.embed_smiles(smiles)
    built = _bond_lengths(rdmol, positions)
    reference_atoms = mol.from_builtin(g2_name)
    reference = _bond_lengths(mol.perceive_bonds(reference_atoms), reference_atoms.positions)
    assert sorted(built) == sorted(reference)  # same bonds, same orders
    for key in built:
        assert np.abs(built[key] - reference[key]).max() < 0.025, key


def test_charge_and_multiplicity_come_from_the_structure_unless_given(tmp_path):
    (tmp_path / "ions.smi").write_text("[NH4+] ammonium\n[CH3] methyl\nCC(=O)[O-] acetate\n")
    (tmp_path / "c.yaml").write_text(
        "campaign: ions\nmolecules:\n  ions: {smiles_file: ions.smi}\n"
        "  given: {smiles: '[CH3]', multiplicity: 4}\n"
        "scans:\n  s:\n    molecules: [ions, given]\n    coordinates:\n"
        "      - {type: distance, rule: bonds-to-hydrogen, from: 1.0, to: 1.2, points: 3}\n"
        "levels: [{method: gfn2-xtb}]\n"
    )
    c = load_campaign(tmp_path / "c.yaml")
    # formal charges and radical electrons written in the SMILES
    assert (c.molecules["ions/ammonium"].charge, c.molecules["ions/ammonium"].multiplicity) == (
        1,
        1,
    )
    assert (c.molecules["ions/methyl"].charge, c.molecules["ions/methyl"].multiplicity) == (0, 2)
    assert c.molecules["ions/acetate"].charge == -1
    assert c.molecules["given"].multiplicity == 4  # given in the spec: the spec wins
    assert c.molecules["ions/ammonium"].set_name == "ions"


# ---------------------------------------------------------------------------
# rules
# ---------------------------------------------------------------------------


def test_rotatable_torsions_of_butane_ethanol_biphenyl_and_benzene():
    # Butane CCCC (atoms C1 C2 C3 C4, then hydrogens H5-H14): single acyclic bonds C1-C2,
    # C2-C3, C3-C4; C1-C2 and C3-C4 end in a methyl group (a symmetric top: three terminal
    # H), left out by default.  The central bond's torsion takes the heaviest other
    # neighbours: C1 on C2, C4 on C3.
    assert _names("CCCC") == ["C1-C2-C3-C4"]
    # Ethanol CCO (C1 C2 O3, H4-H9 with H9 on O3): C1-C2 is a methyl rotor (left out); C2-O3
    # is a hydroxyl rotor (kept: gauche/trans of an alcohol).  On C2 the heaviest other
    # neighbour is C1; on O3 the only one is its hydrogen H9.
    assert _names("CCO") == ["C1-C2-O3-H9"]
    # Biphenyl c1ccc(cc1)-c1ccccc1: ring A is C1-C6 (C4 carries the bond), ring B is C7-C12
    # (C7 carries it).  Only the inter-ring bond C4-C7 is acyclic; the other neighbours of
    # C4 are C3 and C5 (both carbon: the lower number, C3), of C7 are C8 and C12 (C8).
    assert _names("c1ccc(cc1)-c1ccccc1") == ["C3-C4-C7-C8"]
    # Benzene: every C-C bond is in the ring and every C-H ends in a terminal hydrogen.
    assert _names("c1ccccc1") == []
    # With methyl rotors, butane's two methyl torsions join (heaviest neighbour of C1 other
    # than C2 is a hydrogen: the lowest-numbered, H5; of C4 other than C3: H12).
    assert _names("CCCC", methyl_rotors=True) == ["H5-C1-C2-C3", "C1-C2-C3-C4", "C2-C3-C4-H12"]
    # A bond next to a triple bond is linear at one end (no torsion): but-2-yne has none.
    assert _names("CC#CC", methyl_rotors=True) == []


def test_bonds_to_hydrogen_smarts_and_angles_at_rules():
    # methanol CO: C1 O2, H3-H5 on C1, H6 on O2; heavy atom written first so H moves
    assert _names("CO", "bonds-to-hydrogen") == ["C1-H3", "C1-H4", "C1-H5", "O2-H6"]
    assert _names("CO", "smarts", smarts="[#8]-[#1]") == ["O2-H6"]
    # angle at the oxygen: its two neighbours, heavier first (C1, then H6)
    assert _names("CO", "angles-at", smarts="[OX2]") == ["C1-O2-H6"]
    assert _names("O", "angles-at", smarts="[OX2]") == ["H2-O1-H3"]
    assert _names("CC", "smarts", smarts="[#8]-[#1]") == []


# ---------------------------------------------------------------------------
# spec: sources, leniency, strictness, messages
# ---------------------------------------------------------------------------

SET_SPEC = """\
campaign: sets
molecules:
  survey: {{smiles_file: survey.smi{strict}}}
scans:
  stretch12:
    molecules: [survey]
    coordinates:
      - {{type: distance, atoms: [1, 2], from: 1.3, to: 1.6, points: 4}}
  torsions:
    molecules: [survey]
    coordinates:
      - {{type: dihedral, rule: rotatable-torsions, from: 0, to: 300, step: 60}}
levels: [{{method: gfn2-xtb}}]
"""


def _write_set(tmp_path, strict=""):
    (tmp_path / "survey.smi").write_text(
        "smiles name\nCCCC butane\nC1CC1 cyclopropane\nC1CC1(C broken\nCCO ethanol\n"
    )
    spec = tmp_path / "c.yaml"
    spec.write_text(SET_SPEC.format(strict=strict))
    return spec


def test_unbuildable_member_and_ring_bond_are_left_out_by_name_not_stopping_the_others(tmp_path):
    spec = _write_set(tmp_path)
    c = load_campaign(spec)
    assert list(c.groups["survey"]) == ["survey/butane", "survey/cyclopropane", "survey/ethanol"]
    refused = [n for n in c.notes if n["what"] == "refused"]
    assert [n["molecule"] for n in refused] == ["survey/broken"]
    assert "line 4" in refused[0]["text"] and "SMILES" in refused[0]["text"]
    # bond 1-2 of cyclopropane is in the ring: left out of that scan, with the reason
    left = [n for n in c.notes if n["what"] == "left-out"]
    assert [(n["molecule"], n["scan"]) for n in left] == [("survey/cyclopropane", "stretch12")]
    assert "ring" in left[0]["text"]
    assert c.scans["stretch12"].molecules == ["survey/butane", "survey/ethanol"]
    # the rule expanded per molecule into named scans
    assert c.scans["torsions/C1-C2-C3-C4"].molecules == ["survey/butane"]
    assert c.scans["torsions/C1-C2-O3-H9"].rule == "rotatable-torsions"
    nothing = [n for n in c.notes if n["what"] == "no-match"]
    assert [n["molecule"] for n in nothing] == ["survey/cyclopropane"]

    out = _check(spec)
    assert out.returncode == 0, out.stderr
    for text in (
        "survey/broken",
        "refused",
        "rotatable-torsions found C1-C2-C3-C4",
        "rotatable-torsions found nothing",
        "left out",
        "torsions/C1-C2-O3-H9",
    ):
        assert text in out.stdout, text


def test_plan_lists_what_each_rule_expanded_to(tmp_path):
    spec = _write_set(tmp_path)
    out = subprocess.run(
        [sys.executable, "-m", "pesflow", "plan", str(spec)],
        capture_output=True,
        text=True,
        env={"COLUMNS": "200", "PATH": "/usr/bin:/bin"},
        timeout=120,
    )
    assert out.returncode == 0, out.stderr
    row = next(line for line in out.stdout.splitlines() if "rotatable-torsions" in line)
    # butane C1-C2-C3-C4 and ethanol C1-C2-O3-H9: two coordinates, two molecules, 6 points each
    cells = [c.strip() for c in row.strip("│ ").split("│")]
    assert cells == ["torsions", "rotatable-torsions", "2: C1-C2-C3-C4, C1-C2-O3-H9", "2", "12"]


def test_strict_set_stops_at_the_first_member_that_cannot_be_built(tmp_path):
    spec = _write_set(tmp_path, strict=", strict: true")
    with pytest.raises(SpecError) as info:
        load_campaign(spec)
    message = str(info.value)
    assert "molecules.survey.smiles_file" in message and "member 'broken' (line 4)" in message
    assert "\n" not in message
    out = _check(spec)
    assert out.returncode == 2 and len(out.stderr.strip().splitlines()) == 1


@pytest.mark.parametrize(
    ("coordinate", "expected"),
    [
        ("{type: dihedral, rule: rotatable-torsion, from: 0, to: 300, step: 60}",
         "did you mean 'rotatable-torsions'"),
        ("{type: distance, rule: rotatable-torsions, from: 1, to: 2, points: 3}",
         "rule rotatable-torsions makes dihedral coordinates, not distance"),
        ("{type: angle, rule: smarts, smarts: '[#6]-[#8]', from: 90, to: 120, points: 3}",
         "an angle takes 3 atoms but the pattern"),
        ("{type: distance, rule: smarts, from: 1, to: 2, points: 3}",
         "give smarts with the rules smarts, angles-at"),
        ("{type: distance, rule: smarts, smarts: '[#6', from: 1, to: 2, points: 3}",
         "RDKit cannot read the SMARTS"),
        ("{type: distance, atoms: [1, 2], rule: bonds-to-hydrogen, from: 1, to: 2, points: 3}",
         "give either atoms (numbered from 1) or a rule, not both"),
    ],
)  # fmt: skip
def test_bad_rule_is_refused_in_one_line_with_file_line_and_field(tmp_path, coordinate, expected):
    (tmp_path / "c.yaml").write_text(
        "campaign: bad\nmolecules:\n  e: {smiles: CCO}\nscans:\n  s:\n    molecules: [e]\n"
        f"    coordinates:\n      - {coordinate}\nlevels: [{{method: gfn2-xtb}}]\n"
    )
    with pytest.raises(SpecError) as info:
        load_campaign(tmp_path / "c.yaml")
    message = str(info.value).replace("a angle", "an angle")
    assert expected in message, message
    assert "c.yaml:8: scans.s.coordinates[0]" in message


def test_set_sources_sdf_and_xyz_folder_name_their_members(tmp_path):
    from rdkit import Chem

    block = ""
    for smiles, title in (("CCO", "Ethanol"), ("CCCO", "Propan-1-ol")):
        rdmol, (positions,) = mol.embed_smiles(smiles)
        rdmol.SetProp("_Name", title)
        block += Chem.MolToMolBlock(rdmol) + "$$$$\n"
    (tmp_path / "set.sdf").write_text(block)
    folder = tmp_path / "xyz"
    folder.mkdir()
    (folder / "water.xyz").write_text("3\n\nO 0 0 0\nH 0 0 0.96\nH 0.93 0 -0.24\n")
    (folder / "peroxide.xyz").write_text(
        "4\n\nO 0 0.734 -0.053\nO 0 -0.734 -0.053\nH 0.839 0.880 0.422\nH -0.839 -0.880 0.422\n"
    )
    (tmp_path / "notes.txt").write_text("not a molecule")
    (tmp_path / "c.yaml").write_text(
        "campaign: src\nmolecules:\n  sdfset: {sdf: set.sdf}\n  folder: {xyz_files: xyz}\n"
        "  globbed: {xyz_files: 'xyz/p*.xyz'}\n"
        "scans:\n  oh:\n    molecules: [sdfset, folder, globbed]\n    coordinates:\n"
        "      - {type: distance, rule: smarts, smarts: '[#8]-[#1]', from: 0.9, to: 1.1, "
        "points: 3}\n"
        "levels: [{method: gfn2-xtb}]\n"
    )
    c = load_campaign(tmp_path / "c.yaml")
    assert c.groups == {
        "sdfset": ["sdfset/ethanol", "sdfset/propan-1-ol"],
        "folder": ["folder/peroxide", "folder/water"],
        "globbed": ["globbed/peroxide"],
    }
    # An XYZ member gets its bonds from the geometry: water O1 H2 H3 has O1-H2 and O1-H3;
    # the peroxide O1 O2 H3 H4 has H3 next to O1 and H4 next to O2; ethanol (CCO) has O3-H9,
    # propanol (CCCO) O4-H12.  One scan per name, over every molecule that has it.
    assert sorted(c.scans) == ["oh/O1-H2", "oh/O1-H3", "oh/O2-H4", "oh/O3-H9", "oh/O4-H12"]
    assert c.scans["oh/O1-H3"].molecules == ["folder/peroxide", "folder/water", "globbed/peroxide"]


def test_conformers_are_separate_molecules_of_one_member(tmp_path):
    (tmp_path / "c.yaml").write_text(
        "campaign: conf\nmolecules:\n  glycol: {smiles: OCCO, conformers: 3, seed: 11}\n"
        "scans:\n  t:\n    molecules: [glycol]\n    coordinates:\n"
        "      - {type: dihedral, rule: rotatable-torsions, from: 0, to: 300, step: 60}\n"
        "levels: [{method: gfn2-xtb}]\n"
    )
    c = load_campaign(tmp_path / "c.yaml")
    assert c.groups["glycol"] == ["glycol/c1", "glycol/c2", "glycol/c3"]
    assert {m.member for m in c.molecules.values()} == {"glycol"}
    # every conformer shares the atom numbering, so each torsion scan holds all three
    assert c.scans["t/O1-C2-C3-O4"].molecules == ["glycol/c1", "glycol/c2", "glycol/c3"]
    positions = [c.molecules[f"glycol/c{k}"].atoms.positions for k in (1, 2, 3)]
    assert np.abs(positions[0] - positions[1]).max() > 0.1  # different starting structures


def test_a_scan_may_list_one_member_of_a_set(tmp_path):
    spec = _write_set(tmp_path)
    spec.write_text(
        spec.read_text().replace(
            "molecules: [survey]\n    coordinates:\n      - {type: dihedral",
            "molecules: [survey/ethanol]\n    coordinates:\n      - {type: dihedral",
        )
    )
    c = load_campaign(spec)
    assert [s for s in c.scans if s.startswith("torsions/")] == ["torsions/C1-C2-O3-H9"]
    assert c.scans["torsions/C1-C2-O3-H9"].molecules == ["survey/ethanol"]


def test_sdf_record_without_hydrogens_or_without_3d_is_refused_by_name(tmp_path):
    from rdkit import Chem
    from rdkit.Chem import AllChem

    rdmol, _ = mol.embed_smiles("CCO")
    rdmol.SetProp("_Name", "ethanol")
    heavy = Chem.RemoveHs(rdmol)  # 3-D, but the hydrogens left implicit
    heavy.SetProp("_Name", "no-hydrogens")
    flat = Chem.AddHs(Chem.MolFromSmiles("CCCO"))
    AllChem.Compute2DCoords(flat)  # 2-D drawing coordinates only
    flat.SetProp("_Name", "flat")
    (tmp_path / "set.sdf").write_text(
        "".join(Chem.MolToMolBlock(m) + "$$$$\n" for m in (rdmol, heavy, flat))
    )
    (tmp_path / "c.yaml").write_text(
        "campaign: sdf\nmolecules:\n  s: {sdf: set.sdf}\nscans:\n  oh:\n    molecules: [s]\n"
        "    coordinates:\n      - {type: distance, rule: bonds-to-hydrogen, from: 0.9, to: 1.1, "
        "points: 3}\nlevels: [{method: gfn2-xtb}]\n"
    )
    c = load_campaign(tmp_path / "c.yaml")
    assert c.groups["s"] == ["s/ethanol"]
    refused = {n["molecule"]: n["text"] for n in c.notes if n["what"] == "refused"}
    assert "hydrogens implicit" in refused["s/no-hydrogens"]
    assert "no 3-D coordinates" in refused["s/flat"]
