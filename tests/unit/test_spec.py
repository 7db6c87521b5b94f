"""Campaign spec validation: every class of user mistake is refused before anything runs.

Each bad spec must give exit code 2 and one line naming the file, the YAML line
(where there is one), the field path and what is allowed; nothing is written.
"""

import json
import textwrap
from pathlib import Path

import numpy as np
import pytest

from pesflow.campaign.spec import json_schema, load_campaign
from pesflow.cli import main
from pesflow.errors import SpecError

GOOD = """\
campaign: unit-spec
molecules:
  hf_molecule: {builtin: HF}
  water: {file: water.xyz}
  oh_radical: {xyz: "O 0 0 0\\nH 0 0 0.97", charge: 0, multiplicity: 2}
scans:
  stretch:
    molecules: [hf_molecule, oh_radical]
    coordinates:
      - {type: distance, atoms: [1, 2], from: 0.7, to: 1.4, points: 15}
  bend:
    molecules: [water]
    coordinates:
      - {type: angle, atoms: [2, 1, 3], from: 90, to: 120, step: 5}
levels:
  - {method: hf, basis: [sto-3g, 6-31g]}
  - {method: b3lyp, basis: sto-3g}
compare:
  reference_level: hf/6-31g
"""

WATER = """3
water
O 0.0 0.0 0.1173
H 0.0 0.7572 -0.4692
H 0.0 -0.7572 -0.4692
"""


def write(text, name="campaign.yaml"):
    Path("water.xyz").write_text(WATER)
    path = Path(name)
    path.write_text(textwrap.dedent(text))
    return path


def refused(text, capsys, *expected):
    """Run `pesflow check` on a spec; assert exit 2, one line, and the expected parts."""
    path = write(text)
    before = sorted(p.name for p in Path(".").iterdir())
    code = main(["check", str(path)])
    out, err = capsys.readouterr()
    assert code == 2, out + err
    lines = [line for line in err.strip().splitlines() if line.strip()]
    assert len(lines) == 1, err
    assert "Traceback" not in err
    message = " ".join(err.split())
    assert "campaign.yaml" in message
    for part in expected:
        assert part in message, message
    assert sorted(p.name for p in Path(".").iterdir()) == before, "check wrote files"
    return message


def test_good_spec_resolves():
    campaign = load_campaign(write(GOOD))
    assert [lvl.label for lvl in campaign.levels] == ["hf/sto-3g", "hf/6-31g", "b3lyp/sto-3g"]
    stretch = campaign.scans["stretch"]
    np.testing.assert_allclose(stretch.coordinates[0].values, np.linspace(0.7, 1.4, 15))
    assert stretch.coordinates[0].atoms == (0, 1)
    bend = campaign.scans["bend"].coordinates[0]
    np.testing.assert_allclose(bend.values, [90, 95, 100, 105, 110, 115, 120])
    assert campaign.molecules["oh_radical"].multiplicity == 2
    assert campaign.molecules["water"].multiplicity == 1


def test_good_spec_check_exit_0(capsys):
    assert main(["check", str(write(GOOD))]) == 0
    assert "spec is valid" in capsys.readouterr().out


def test_unknown_key(capsys):
    msg = refused(
        GOOD.replace("campaign: unit-spec", "campaign: unit-spec\ncampaing: typo"),
        capsys,
        "campaing",
        "unknown key",
        "allowed:",
    )
    assert ":2:" in msg


def test_unknown_key_nested(capsys):
    refused(
        GOOD.replace("points: 15}", "points: 15, pionts: 3}"),
        capsys,
        "scans.stretch.coordinates[0].pionts",
        "unknown key",
        ":10:",
    )


def test_unknown_method(capsys):
    refused(
        GOOD.replace("method: b3lyp", "method: ccsdt-q"),
        capsys,
        "levels[1].method",
        "ccsdt-q",
        "hf, mp2, ccsd, ccsd(t)",
    )


def test_unknown_basis(capsys):
    refused(
        GOOD.replace("basis: sto-3g}", "basis: no-such-basis}"),
        capsys,
        "levels[1].basis",
        "no-such-basis",
    )


def test_atom_number_out_of_range(capsys):
    refused(
        GOOD.replace("atoms: [2, 1, 3]", "atoms: [2, 1, 5]"),
        capsys,
        "scans.bend.coordinates[0].atoms",
        "atom 5",
        "1-3",
    )


def test_wrong_atom_count_for_coordinate(capsys):
    refused(
        GOOD.replace("atoms: [2, 1, 3]", "atoms: [2, 1]"),
        capsys,
        "scans.bend.coordinates[0].atoms",
        "angle takes 3 atoms",
    )


def test_impossible_multiplicity(capsys):
    refused(
        GOOD.replace("charge: 0, multiplicity: 2", "charge: 0, multiplicity: 1"),
        capsys,
        "molecules.oh_radical.multiplicity",
        "9 electrons",
    )


def test_impossible_charge_default_multiplicity(capsys):
    refused(
        GOOD.replace("{builtin: HF}", "{builtin: HF, charge: 11}"),
        capsys,
        "molecules.hf_molecule.charge",
    )


def test_overlapping_atoms(capsys):
    refused(
        GOOD.replace('"O 0 0 0\\nH 0 0 0.97"', '"O 0 0 0\\nH 0 0 0.1"'),
        capsys,
        "molecules.oh_radical",
        "overlap",
    )


def test_empty_range(capsys):
    refused(
        GOOD.replace("from: 0.7, to: 1.4", "from: 1.0, to: 1.0"),
        capsys,
        "scans.stretch.coordinates[0]",
        "empty",
    )


def test_negative_step(capsys):
    refused(GOOD.replace("step: 5", "step: -5"), capsys, "step must be positive")


def test_negative_distance(capsys):
    refused(
        GOOD.replace("from: 0.7, to: 1.4", "from: -0.2, to: 1.4"),
        capsys,
        "distances must be positive",
    )


def test_too_few_points(capsys):
    refused(GOOD.replace("points: 15", "points: 1"), capsys, "at least 2")


def test_angle_outside_0_180(capsys):
    refused(
        GOOD.replace("from: 90, to: 120", "from: 90, to: 200"),
        capsys,
        "scans.bend.coordinates[0].to",
        "0 < angle <= 180",
    )


def test_missing_file(capsys):
    refused(
        GOOD.replace("{file: water.xyz}", "{file: nowhere.xyz}"),
        capsys,
        "molecules.water.file",
        "nowhere.xyz",
    )


def test_undefined_molecule(capsys):
    refused(
        GOOD.replace("molecules: [water]", "molecules: [steam]"),
        capsys,
        "scans.bend.molecules[0]",
        "steam",
        "defined:",
    )


def test_malformed_yaml(capsys):
    refused(GOOD.replace("levels:", "levels: [unclosed"), capsys, "malformed YAML")


def test_empty_file(capsys):
    refused("", capsys, "empty")


def test_missing_spec_file(capsys):
    code = main(["check", "no-such-campaign.yaml"])
    err = capsys.readouterr().err
    assert code == 2
    assert "no-such-campaign.yaml" in err and "not found" in err


def test_duplicate_key(capsys):
    refused(
        GOOD.replace(
            "  bend:\n", "  stretch:\n    molecules: [water]\n    coordinates: []\n  bend:\n"
        ),
        capsys,
        "given twice",
    )


def test_two_molecule_sources(capsys):
    refused(
        GOOD.replace("{builtin: HF}", "{builtin: HF, xyz: 'H 0 0 0'}"),
        capsys,
        "molecules.hf_molecule",
        "exactly one of builtin, file or xyz",
    )


def test_bad_campaign_name(capsys):
    refused(
        GOOD.replace("campaign: unit-spec", "campaign: Unit Spec!"),
        capsys,
        "campaign",
        "not allowed",
    )


def test_unknown_builtin(capsys):
    refused(
        GOOD.replace("{builtin: HF}", "{builtin: HFF}"),
        capsys,
        "molecules.hf_molecule.builtin",
        "HFF",
    )


def test_reference_level_not_in_levels(capsys):
    refused(
        GOOD.replace("reference_level: hf/6-31g", "reference_level: mp2/6-31g"),
        capsys,
        "compare.reference_level",
        "allowed: hf/sto-3g",
    )


def test_ring_coordinate_refused_unless_moving_atoms_given(capsys):
    ring = GOOD.replace("hf_molecule: {builtin: HF}", "benzene: {builtin: C6H6}").replace(
        "molecules: [hf_molecule, oh_radical]", "molecules: [benzene]"
    )
    refused(ring, capsys, "ring", "move")
    ok = ring.replace("points: 15}", "points: 15, move: [2, 8]}")
    assert main(["check", str(write(ok))]) == 0


def test_run_refuses_bad_spec_without_writing(capsys):
    path = write(GOOD.replace("method: b3lyp", "method: nonsense"))
    code = main(["run", str(path), "--cores", "1"])
    assert code == 2
    assert not Path("results").exists() and not Path("pesflow-store").exists()


def test_python_api_error_is_typed():
    with pytest.raises(SpecError) as info:
        load_campaign(write(GOOD.replace("points: 15", "points: 0")))
    assert info.value.field == "scans.stretch.coordinates[0]"
    assert info.value.line == 10


def test_json_schema_in_sync():
    """workflows/schemas/campaign.schema.json is the schema exported from the models."""
    path = Path(__file__).resolve().parents[2] / "workflows" / "schemas" / "campaign.schema.json"
    assert json.loads(path.read_text()) == json.loads(json.dumps(json_schema(), sort_keys=True))


def test_tight_binding_level_has_no_basis_and_its_label_is_the_method():
    campaign = load_campaign(
        write(GOOD.replace("method: b3lyp, basis: sto-3g", "method: GFN2-xTB"))
    )
    labels = [level.label for level in campaign.levels]
    assert "gfn2-xtb" in labels and "hf/sto-3g" in labels
    assert next(lvl for lvl in campaign.levels if lvl.method == "gfn2-xtb").basis == ""


def test_basis_given_to_a_tight_binding_level(capsys):
    refused(
        GOOD.replace("method: b3lyp", "method: gfn2-xtb"),
        capsys,
        "levels[1].basis",
        "gfn2-xtb has its own built-in basis",
    )


def test_method_without_basis(capsys):
    refused(
        GOOD.replace("method: b3lyp, basis: sto-3g", "method: b3lyp"),
        capsys,
        "levels[1]",
        "b3lyp needs a basis set",
    )


def test_renamed_engine_key_names_its_new_name(capsys):
    refused(
        GOOD + "engine: {conv_tol: 1.0e-9}\n",
        capsys,
        "engine",
        "unknown key 'conv_tol'; it is now called 'scf_energy_tolerance_hartree'",
    )
