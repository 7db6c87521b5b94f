"""Dispersion and solvent level options without computing: names, plan keys, spec errors.

The checks are of pesflow's own bookkeeping (names, families, keys, one-line refusals
through the CLI, exit 2); the energies are checked against PySCF in
tests/integration/test_engine_corrections.py.  Dielectric constants named here are
PySCF's (``pyscf.solvent.smd.solvent_db``, the Minnesota Solvent Descriptor Database).
"""

import importlib.metadata
import textwrap
from pathlib import Path

import pytest

from pesflow.campaign import load_campaign
from pesflow.cli import main
from pesflow.engine import level_method, method_info
from pesflow.engine.pyscf.corrections import parse
from pesflow.engine.pyscf.scf import family_kind
from pesflow.errors import EngineSetupError
from pesflow.plan import keys
from pesflow.plan.expand import expand

SPEC = """\
campaign: corrections
molecules:
  water: {xyz: "O 0 0 0\\nH 0 0.757 0.587\\nH 0 -0.757 0.587"}
scans:
  stretch:
    molecules: [water]
    coordinates:
      - {type: distance, atoms: [1, 2], from: 0.9, to: 1.1, points: 3}
levels:
  - {method: [hf, b3lyp], basis: sto-3g}
  - {method: [hf, b3lyp], basis: sto-3g, dispersion: d3bj}
  - {method: hf, basis: sto-3g, solvent: {model: pcm, name: Water}}
  - {method: b3lyp, basis: sto-3g, dispersion: d4, solvent: {model: ddcosmo, eps: 35.688}}
"""


@pytest.mark.parametrize(
    ("method", "options", "name", "kind"),
    [
        ("B3LYP", {"dispersion": "d3bj"}, "b3lyp-d3bj", "dft"),
        ("hf", {"dispersion": "d4"}, "hf-d4", "hf"),
        ("hf", {"solvent": {"model": "pcm", "name": "Water"}}, "hf(pcm:water)", "hf"),
        ("pbe0", {"dispersion": "d3bj", "solvent": {"model": "ddcosmo", "eps": 78.3553}},
         "pbe0-d3bj(ddcosmo:eps=78.3553)", "dft"),
        ("b3lyp-d3bj", {"solvent": {"model": "pcm", "name": "pentyl ethanoate"}},
         "b3lyp-d3bj(pcm:pentyl_ethanoate)", "dft"),
        ("hf", {"solvent": {"model": "pcm", "name": "decalin (cis/trans mixture)"}},
         "hf(pcm:decalin_(cis-trans_mixture))", "hf"),
        ("b3lyp", {}, "b3lyp", "dft"),
    ],
)  # fmt: skip
def test_options_fold_into_one_name_that_reads_back(method, options, name, kind):
    assert level_method(method, options) == name
    info = method_info(name)
    assert (info.name, info.family) == (name, name)  # its own SCF, shared with nothing
    assert family_kind(info.family) == kind
    assert info.options == ("dispersion", "solvent")
    plain = method_info("hf" if kind == "hf" else "b3lyp")
    assert info.settings == plain.settings  # the same engine settings change its number
    if name != "b3lyp":
        assert parse(name).name == name


@pytest.mark.parametrize(
    ("method", "options", "message"),
    [
        ("b3lyp", {"dispersion": "d5"}, "unknown dispersion 'd5'; allowed: d3bj, d4"),
        ("mp2", {"dispersion": "d3bj"}, "applies to hf and DFT functionals"),
        ("ccsd", {"solvent": {"model": "pcm", "name": "water"}}, "applies to hf and DFT"),
        ("casscf", {"active": [2, 2], "dispersion": "d3bj"}, "not dispersion"),
        ("tda-b3lyp", {"solvent": {"model": "pcm", "eps": 4.0}}, "not solvent"),
        ("hf", {"solvent": {"model": "pcm", "name": "unobtainium"}}, "unknown solvent"),
        ("hf", {"solvent": {"model": "pcm", "eps": -2}}, "above 1"),
        ("hf", {"solvent": {"model": "smd", "eps": 4.0}}, "allowed: pcm, ddcosmo"),
        ("b3lyp-d3bj", {"dispersion": "d4"}, "in its name already"),
        ("wb97m-v", {"dispersion": "d3bj"}, "count it twice"),
    ],
)
def test_bad_options_are_one_line_errors(method, options, message):
    with pytest.raises(EngineSetupError, match=message) as info:
        level_method(method, options)
    assert "\n" not in str(info.value)


def test_every_level_has_its_own_keys_and_plain_keys_stay(tmp_path):
    spec = tmp_path / "c.yaml"
    spec.write_text(SPEC)
    campaign = load_campaign(spec)
    assert [level.label for level in campaign.levels] == [
        "hf/sto-3g", "b3lyp/sto-3g", "hf-d3bj/sto-3g", "b3lyp-d3bj/sto-3g",
        "hf(pcm:water)/sto-3g", "b3lyp-d4(ddcosmo:eps=35.688)/sto-3g",
    ]  # fmt: skip
    plan = expand(campaign, version="2.14.0")
    scan = plan.points[plan.points["role"] == "scan"]
    assert scan["key"].is_unique and len(scan) == 6 * 3
    # The plain level's key is the one made from its name alone, as before the options
    # existed (tests/unit/test_key_pinned.py pins such keys).
    row = scan[scan["method"] == "hf"].iloc[0]
    symbols, positions, charge, multiplicity = plan.geometry(row["set_id"], row["walk"])
    settings = campaign.engine_settings("stretch").key_dict("hf")
    assert row["key"] == keys.point_key(
        symbols, positions, charge, multiplicity, "hf", "sto-3g", settings, "pyscf", "2.14.0"
    )

    # A dispersion-corrected level's keys also hold the version of pyscf-dispersion (its
    # D3/D4 code and parameters are not PySCF's): a new release never reuses its points.
    installed = importlib.metadata.version("pyscf-dispersion")
    for method in ("hf-d3bj", "b3lyp-d3bj", "b3lyp-d4(ddcosmo:eps=35.688)"):
        settings = campaign.engine_settings("stretch").key_dict(method)
        assert settings["libraries"] == {"pyscf-dispersion": installed}
        row = scan[scan["method"] == method].iloc[0]
        symbols, positions, charge, multiplicity = plan.geometry(row["set_id"], row["walk"])
        args = (symbols, positions, charge, multiplicity, method, "sto-3g")
        assert row["key"] == keys.point_key(*args, settings, "pyscf", "2.14.0")
        older = {**settings, "libraries": {"pyscf-dispersion": "0.0.1"}}
        assert row["key"] != keys.point_key(*args, older, "pyscf", "2.14.0")
    for method in ("hf", "b3lyp", "hf(pcm:water)"):
        assert "libraries" not in campaign.engine_settings("stretch").key_dict(method)


def refused(tmp_path, capsys, level, *expected):
    """`pesflow check` on the spec with one more level: exit 2, one line, nothing written."""
    spec = tmp_path / "campaign.yaml"
    spec.write_text(textwrap.dedent(SPEC) + f"  - {level}\n")
    before = sorted(p.name for p in tmp_path.iterdir())
    assert main(["check", str(spec)]) == 2
    out, err = capsys.readouterr()
    lines = [line for line in err.strip().splitlines() if line.strip()]
    assert len(lines) == 1 and "Traceback" not in err, err
    for part in ("campaign.yaml", *expected):
        assert part in lines[0], lines[0]
    assert sorted(p.name for p in tmp_path.iterdir()) == before
    return lines[0]


@pytest.mark.parametrize(
    ("level", "expected"),
    [
        ("{method: b3lyp, basis: sto-3g, dispersion: d2}", ("levels[4].dispersion", "d3bj")),
        ("{method: hf, basis: sto-3g, solvent: {model: pcm, name: seawater}}",
         ("levels[4].solvent", "unknown solvent 'seawater'")),
        ("{method: mp2, basis: sto-3g, dispersion: d3bj}",
         ("levels[4].dispersion", "applies to hf and DFT functionals", "not mp2")),
        ("{method: hf, basis: sto-3g, solvent: {model: pcm, eps: -4}}",
         ("levels[4].solvent.eps", "greater than 1")),
        ("{method: hf, basis: sto-3g, solvent: {model: pcm, name: water, eps: 4}}",
         ("levels[4].solvent", "exactly one of name")),
        ("{method: hf, basis: sto-3g, solvent: {model: cosmo-rs, name: water}}",
         ("levels[4].solvent.model", "pcm")),
    ],
)  # fmt: skip
def test_cli_refuses_bad_dispersion_and_solvent(tmp_path, capsys, monkeypatch, level, expected):
    monkeypatch.chdir(tmp_path)
    refused(tmp_path, capsys, level, *expected)


def test_good_spec_checks(tmp_path, capsys, monkeypatch):
    monkeypatch.chdir(tmp_path)
    spec = Path("campaign.yaml")
    spec.write_text(SPEC)
    assert main(["check", str(spec)]) == 0, capsys.readouterr()
