"""Campaign spec validation: every class of user mistake is refused before anything runs.

Each bad spec must give exit code 2 and one line naming the file, the YAML line
(where there is one), the field path and what is allowed; nothing is written.
"""

import json
import re
import textwrap
from pathlib import Path

import numpy as np
import pytest

from pesflow.campaign import load_campaign
from pesflow.campaign.spec import json_schema
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
        "exactly one of builtin, file, xyz, smiles, smiles_file, sdf or xyz_files",
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


# ---------------------------------------------------------------------------
# odd input: clear one-line errors, never a traceback or a hang (issue 9)
# ---------------------------------------------------------------------------


def refused_at_line(text, capsys, *expected):
    """As :func:`refused`, and the line names ``campaign.yaml:LINE: FIELD: reason``."""
    message = refused(text, capsys, *expected)
    assert re.search(r"campaign\.yaml:\d+: [\w.\[\]-]+: \S", message), message
    return message


def test_start_value_out_of_range_is_reported_under_from(capsys):
    msg = refused_at_line(
        GOOD.replace("from: 0.7, to: 1.4", "from: -0.5, to: 1.4"),
        capsys,
        "scans.stretch.coordinates[0].from:",
        "got -0.5",
        "distances must be positive",
        "campaign.yaml:10:",
    )
    assert ".to:" not in msg


def test_end_value_out_of_range_is_reported_under_to(capsys):
    refused_at_line(
        GOOD.replace("from: 90, to: 120", "from: 90, to: 200"),
        capsys,
        "scans.bend.coordinates[0].to:",
        "got 200",
    )


def test_value_out_of_range_in_a_list_names_its_index(capsys):
    refused_at_line(
        GOOD.replace("from: 90, to: 120, step: 5", "values: [90, 100, 181]"),
        capsys,
        "scans.bend.coordinates[0].values[2]:",
        "got 181",
        "(0, 180]",
    )


ACETYLENE = """\
campaign: unit-spec
molecules:
  acetylene: {builtin: C2H2}
scans:
  twist:
    molecules: [acetylene]
    coordinates:
      - {type: dihedral, atoms: [4, 1, 2, 3], from: 0, to: 180, points: 7}
levels:
  - {method: hf, basis: sto-3g}
"""


def test_dihedral_over_collinear_atoms_is_a_spec_error_not_a_traceback(capsys):
    # ASE's g2 acetylene is linear (H-C-C-H on the z axis): no plane, so no dihedral.
    refused_at_line(
        ACETYLENE,
        capsys,
        "campaign.yaml:8:",
        "scans.twist.coordinates[0].atoms:",
        "dihedral 4-1-2-3",
        "lie on a line",
        "a dihedral needs a-b-c and b-c-d bent",
    )


def test_angle_grid_reaching_180_with_a_dihedral_over_it_is_refused_at_line(capsys):
    # Water's H-O-H opened to 180 degrees leaves the dihedral 3-1-2-... undefined: caught
    # at the trial corner of the grid, before planning.
    spec = """\
    campaign: unit-spec
    molecules:
      peroxide: {builtin: H2O2}
    scans:
      grid:
        molecules: [peroxide]
        coordinates:
          - {type: angle, atoms: [2, 1, 3], from: 100, to: 180, points: 5}
          - {type: dihedral, atoms: [3, 1, 2, 4], from: 0, to: 180, points: 5}
    levels:
      - {method: hf, basis: sto-3g}
    """
    refused_at_line(spec, capsys, "scans.grid.coordinates:", "lie on a line")


@pytest.mark.parametrize(
    ("range_", "field"),
    [
        ("from: 0.7, to: 1.4, points: 30000000", "points"),
        ("from: 0.7, to: 1.4, step: 0.0000000001", "step"),
    ],
)
def test_absurd_point_count_is_refused_before_any_array_is_built(capsys, range_, field):
    # 7e9 values would need 56 GB; the count is checked from points/step alone.
    refused_at_line(
        GOOD.replace("from: 0.7, to: 1.4, points: 15", range_),
        capsys,
        f"scans.stretch.coordinates[0].{field}:",
        "at most 200,000 points are allowed",
        "split the study into several campaigns",
    )


def test_grid_whose_product_explodes_is_refused_at_line(capsys):
    grid = GOOD.replace(
        "      - {type: angle, atoms: [2, 1, 3], from: 90, to: 120, step: 5}",
        "      - {type: angle, atoms: [2, 1, 3], from: 90, to: 120, points: 1000}\n"
        "      - {type: distance, atoms: [1, 2], from: 0.8, to: 1.2, points: 1000}",
    )
    refused_at_line(
        grid, capsys, "scans.bend.coordinates:", "1000 x 1000 = 1,000,000 points", "200,000"
    )


def test_campaign_total_over_the_limit_names_the_largest_scan(capsys):
    # 60,000 grid points x 2 molecules x 3 levels = 360,000 points.
    refused_at_line(
        GOOD.replace("points: 15", "points: 60000"),
        capsys,
        "scans.stretch:",
        "the campaign has 360,021 points",  # + 7 bend points x 1 molecule x 3 levels
        "60,000 grid points x 2 molecule(s) x 3 level(s)",
    )


AMMONIA = """\
campaign: unit-spec
molecules:
  ammonia: {builtin: NH3}
scans:
  hh:
    molecules: [ammonia]
    coordinates:
      - {type: distance, atoms: [2, 3], from: 1.5, to: 1.8, points: 4}
levels:
  - {method: hf, basis: sto-3g}
"""


def test_distance_between_atoms_that_are_not_bonded_says_so_and_how_to_fix_it(capsys):
    # ASE's g2 ammonia: N is atom 1, the hydrogens 2-4; H...H is 1.6 A, no bond.
    msg = refused_at_line(
        AMMONIA,
        capsys,
        "campaign.yaml:8:",
        "scans.hh.coordinates[0].atoms:",
        "atoms 2 and 3 are not bonded to each other",
        "joined through 2-1-3",
        "move: [3]",
    )
    assert "ring" not in msg
    ok = AMMONIA.replace("points: 4}", "points: 4, move: [3]}")
    assert main(["check", str(write(ok))]) == 0


def test_misspelt_key_gets_did_you_mean_and_the_allowed_list(capsys):
    refused_at_line(
        GOOD.replace("points: 15}", "pionts: 15}"),
        capsys,
        "scans.stretch.coordinates[0].pionts:",
        "did you mean 'points'?",
        "allowed: type, atoms, from, to, points, step, values, move",
    )


def test_misspelt_coordinate_type_gets_did_you_mean(capsys):
    refused_at_line(
        GOOD.replace("type: distance", "type: distnace"),
        capsys,
        "scans.stretch.coordinates[0].type:",
        "did you mean 'distance'?",
        "'distance', 'angle' or 'dihedral'",
    )


def test_misspelt_basis_gets_did_you_mean(capsys):
    refused_at_line(
        GOOD.replace("basis: sto-3g}", "basis: sto-3gg}"),
        capsys,
        "levels[1].basis:",
        "unknown basis 'sto-3gg'",
        "did you mean 'sto3g'",
    )


def test_misspelt_method_gets_did_you_mean_and_the_allowed_list(capsys):
    refused_at_line(
        GOOD.replace("method: b3lyp", "method: b3lpy"),
        capsys,
        "levels[1].method:",
        "did you mean 'b3lyp'",
        "use one of hf, mp2, ccsd, ccsd(t)",
    )


def test_misspelt_builtin_molecule_gets_did_you_mean(capsys):
    refused_at_line(
        GOOD.replace("{builtin: HF}", "{builtin: NH4}"),
        capsys,
        "molecules.hf_molecule.builtin:",
        "did you mean",
        "NH3",
    )


def test_misspelt_molecule_reference_in_a_scan_gets_did_you_mean(capsys):
    refused_at_line(
        GOOD.replace("molecules: [water]", "molecules: [watter]"),
        capsys,
        "scans.bend.molecules[0]:",
        "did you mean 'water'?",
        "defined: hf_molecule, oh_radical, water",
    )


def test_misspelt_reference_level_gets_did_you_mean(capsys):
    refused_at_line(
        GOOD.replace("reference_level: hf/6-31g", "reference_level: hf/6-31gg"),
        capsys,
        "compare.reference_level:",
        "did you mean 'hf/6-31g'",
        "allowed: hf/sto-3g, hf/6-31g, b3lyp/sto-3g",
    )


def test_misspelt_scan_and_quantity_in_reference_values_get_did_you_mean(capsys):
    values = GOOD + (
        "  reference_values:\n"
        "    - {molecule: hf_molecule, scan: strech, quantity: r_e_angstrom, value: 0.9168,"
        " source: Huber & Herzberg 1979}\n"
    )
    refused_at_line(values, capsys, "reference_values[0].scan:", "did you mean 'stretch'?")
    refused_at_line(
        values.replace("scan: strech", "scan: stretch").replace("r_e_angstrom", "r_e_angstom"),
        capsys,
        "reference_values[0].quantity:",
        "did you mean 'r_e_angstrom'",
        "allowed:",
    )


def test_run_refuses_an_absurd_point_count_at_once_without_writing(capsys):
    path = write(GOOD.replace("points: 15", "points: 50000000"))
    assert main(["run", str(path), "--cores", "1"]) == 2
    assert "at most 200,000 points" in capsys.readouterr().err
    assert not Path("results").exists() and not Path("pesflow-store").exists()


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


def test_points_given_as_true_is_refused_not_read_as_one(capsys):
    refused_at_line(
        GOOD.replace("points: 15", "points: true"),
        capsys,
        "scans.stretch.coordinates[0].points:",
        "whole number",
    )


def test_reference_value_that_is_not_finite_is_refused(capsys):
    refused_at_line(
        GOOD
        + "  reference_values:\n"
        + "    - {molecule: hf_molecule, scan: stretch, quantity: r_e_angstrom, value: .nan,"
        + " source: x}\n",
        capsys,
        "compare.reference_values[0].value:",
        "finite number",
    )
