"""Excited-state curves through real `pesflow run`, export and report.

LiH at CIS/6-31G (7 singlets, followed by character and numbered by energy) beside
HF/6-31G, 2.5-3.1 A.  References: plain PySCF ``scf.RHF(...).TDA()`` at each stored
geometry (same states and Davidson tolerance); the crossing of the Sigma state with the
Pi pair near 2.79 A is the one measured in
``tests/integration/test_engine_excited.py``.
"""

import json

import numpy as np
import pytest

from tests.workflow.helpers import run_and_export

pytestmark = [pytest.mark.workflow, pytest.mark.integration]

SPEC = """\
campaign: excited
molecules:
  lithium_hydride: {xyz: "Li 0 0 0\\nH 0 0 1.6"}
scans:
  stretch:
    molecules: [lithium_hydride]
    coordinates:
      - {type: distance, atoms: [1, 2], from: 2.5, to: 3.1, points: 7}
levels:
  - {method: hf, basis: 6-31g}
  - {method: cis, basis: 6-31g, states: 7, follow: character}
  - {method: cis, basis: 6-31g, states: 7}
compare:
  reference_level: hf/6-31g
store: store
"""
FOLLOWED = "cis(singlets=7,follow)/6-31g"
BY_ENERGY = "cis(singlets=7)/6-31g"


@pytest.fixture(scope="module")
def campaign(tmp_path_factory):
    folder = tmp_path_factory.mktemp("excited")
    points, summary = run_and_export(folder, SPEC, cores=2, report=True, suffix="parquet")
    return {"summary": summary, "points": points, "report": folder / "report"}


def test_every_state_is_a_row_and_equals_direct_pyscf(campaign):
    from pyscf import gto, scf

    from pesflow.engine.pyscf.excited import DAVIDSON_TOLERANCE_HARTREE

    points = campaign["points"]
    assert (points["status"] == "done").all()
    cis = points[points["level"] == BY_ENERGY]
    assert len(cis) == 7 * 8 and cis["key"].is_unique
    for walk in (0, 6):
        rows = cis[cis["walk"] == walk].sort_values("state")
        xyz = np.asarray(rows["positions_angstrom"].iloc[0]).reshape(-1, 3)
        mol = gto.M(atom=list(zip(["Li", "H"], xyz.tolist())), basis="6-31g", verbose=0)
        mf = scf.RHF(mol).run(conv_tol=1e-10)
        td = mf.TDA()
        td.nstates, td.conv_tol = 7, DAVIDSON_TOLERANCE_HARTREE
        td.kernel()
        expected = [mf.e_tot, *(mf.e_tot + td.e)]
        assert rows["energy_hartree"].to_numpy() == pytest.approx(expected, abs=1e-7)
        assert rows["oscillator_strength"].iloc[1:].to_numpy() == pytest.approx(
            td.oscillator_strength(), abs=1e-6
        )


def test_followed_curve_keeps_the_sigma_state(campaign):
    points = campaign["points"]
    followed = points[points["level"] == FOLLOWED]
    curve = followed[followed["state"] == 7].sort_values("walk")
    # numbered by energy at the start, it is the 7th state there and the 5th at 3.1 A
    assert curve["adiabatic_state"].tolist()[0] == 7
    assert curve["adiabatic_state"].tolist()[-1] == 5
    extra = json.loads(curve["extra_json"].iloc[1])["state"]
    assert max(extra["neighbour_overlaps"]) > 0.9
    # a Sigma+ state all along (A1 in PySCF's C2v labels of a linear molecule without
    # inversion), which symmetry alone says, computed without symmetry at each point
    assert set(curve["state_symmetry"]) == {"A1"}


def test_summary_has_a_row_per_state_with_the_crossing(campaign):
    summary = campaign["summary"]
    followed = summary[summary["level"] == FOLLOWED]
    assert sorted(followed["state"]) == list(range(8))
    assert followed.set_index("state").loc[1, "state_label"] == "S1"
    codes = {f["code"] for text in summary["flag_records"] for f in json.loads(text)}
    assert "state-crossing" in codes
    crossing = [
        f
        for text in followed["flag_records"]
        for f in json.loads(text)
        if f["code"] == "state-crossing"
    ]
    assert crossing and all(2.7 < f["positions"][0] < 2.9 for f in crossing[:1])
    # no job cut this walk: the overlaps link every pair of neighbours
    assert not any("state-following-gap" in text for text in followed["flag_records"])


def test_report_shows_each_state(campaign):
    text = (campaign["report"] / "report.md").read_text()
    assert f"{FOLLOWED} S1" in text
    assert f"{BY_ENERGY} S5" in text
