"""A SMILES set with scans chosen by rule, end to end: run, kill, resume, per-set report."""

import os
import signal
import subprocess
import sys
import time

import numpy as np
import pandas as pd
import pytest

from pesflow.campaign import load_campaign
from pesflow.plan.expand import expand
from pesflow.store.point_store import PointStore
from tests.workflow.helpers import direct_energy, pesflow

pytestmark = pytest.mark.workflow

#: Twenty small molecules of our own choosing (SMILES, name); the rule finds one to three
#: torsions in most, and nothing in the ones whose only acyclic bonds end in a methyl group
#: or a terminal atom (methylamine, dimethyl ether, acetaldehyde, methanethiol).
TWENTY = """\
smiles name
CCO ethanol
CCCO propan-1-ol
CC(C)O propan-2-ol
CCCC butane
CN methylamine
CCN ethylamine
COC dimethyl-ether
COC=O methyl-formate
CC=O acetaldehyde
CC(=O)O acetic-acid
OC=O formic-acid
CCS ethanethiol
OO hydrogen-peroxide
NN hydrazine
OCCO ethylene-glycol
CCC=O propanal
CS methanethiol
C=CC=O acrolein
C=CC=C butadiene
OCCF fluoroethanol
"""

#: Five of them, for the default run.  Torsions the rule finds (see
#: tests/unit/test_molecule_sets.py for the definition): ethanol C1-C2-O3-H9; butane
#: C1-C2-C3-C4; hydrogen peroxide H3-O1-O2-H4; butadiene C1=C2-C3=C4 (single bond between two
#: sp2 carbons) C1-C2-C3-C4; dimethyl ether none (both C-O bonds end in a methyl group).
FIVE = """\
CCO ethanol
CCCC butane
OO hydrogen-peroxide
C=CC=C butadiene
COC dimethyl-ether
"""

SPEC = """\
campaign: {name}
molecules:
  survey: {{smiles_file: survey.smi}}
scans:
  torsions:
    molecules: [survey]
    coordinates:
      - {{type: dihedral, rule: rotatable-torsions, from: 0, to: 300, step: 60}}
levels:
  - {{method: hf, basis: sto-3g}}
store: store
"""


def _kill_midrun(spec, tmp_path, at_least):
    """Start ``pesflow run``, SIGKILL its process group once ``at_least`` points are stored;
    return how many points survived."""
    proc = subprocess.Popen(
        [sys.executable, "-m", "pesflow", "run", str(spec), "--cores", "2"],
        stdout=subprocess.DEVNULL,
        stderr=subprocess.DEVNULL,
        env=dict(os.environ, OMP_NUM_THREADS="1"),
        start_new_session=True,
    )
    fragments = tmp_path / "store" / "fragments"
    deadline = time.monotonic() + 300
    while time.monotonic() < deadline:
        done = (
            sum(not p.name.startswith(".") for p in fragments.glob("*.parquet"))
            if fragments.exists()
            else 0
        )
        if done >= at_least:
            break
        assert proc.poll() is None, "the run ended before it could be killed"
        time.sleep(0.02)
    os.killpg(proc.pid, signal.SIGKILL)
    proc.wait()
    return sum(not p.name.startswith(".") for p in fragments.glob("*.parquet"))


def _survey(tmp_path, members, name, kill_at):
    (tmp_path / "survey.smi").write_text(members)
    spec = tmp_path / "survey.yaml"
    spec.write_text(SPEC.format(name=name))
    total = len(expand(load_campaign(spec)).points)
    survivors = _kill_midrun(spec, tmp_path, kill_at)
    assert kill_at <= survivors < total, "the kill should land mid-run"

    rerun = pesflow("run", str(spec), "--cores", "2", check=0)
    assert f"{total} done, 0 failed, 0 pending" in rerun.stdout
    stored = PointStore(tmp_path / "store").load().to_pandas()
    assert len(stored) == total and stored["key"].is_unique  # nothing computed twice

    pesflow("export", str(spec), "-o", str(tmp_path / "points.parquet"), check=0)
    points = pd.read_parquet(tmp_path / "points.parquet")
    # stored energies are PySCF's own RHF/STO-3G energies at the stored geometries
    for _, row in points.iloc[:: max(1, len(points) // 4)].iterrows():
        assert row["energy_hartree"] == pytest.approx(direct_energy(row), abs=1e-7)

    pesflow("export", str(spec), "--what", "summary", "-o", str(tmp_path / "s.csv"), check=0)
    summary = pd.read_csv(tmp_path / "s.csv", keep_default_na=False, na_values=[""])
    assert set(summary["set"]) == {"survey"} and set(summary["rule"]) == {"rotatable-torsions"}
    assert all(s.startswith("torsions/") for s in summary["scan"])

    pesflow("report", str(spec), check=0)
    report = tmp_path / "results" / name / "report"
    sets = pd.read_csv(report / "sets.csv")
    barrier = sets[sets["quantity"] == "barrier_kcal_mol"].iloc[0]
    values = pd.to_numeric(summary["barrier_kcal_mol"], errors="coerce").dropna()
    assert (barrier["set"], barrier["rule"], barrier["level"]) == (
        "survey",
        "rotatable-torsions",
        "hf/sto-3g",
    )
    assert barrier["n_curves"] == len(summary)
    assert barrier["median"] == pytest.approx(values.median())
    assert barrier["maximum"] == pytest.approx(values.max())
    page = (report / "report.html").read_text()
    assert "Molecule sets and rules" in page and "<details>" in page
    return summary


def test_five_member_smiles_set_runs_resumes_after_a_kill_and_reports_per_set(tmp_path):
    summary = _survey(tmp_path, FIVE, "five", kill_at=6)
    assert sorted(zip(summary["molecule"], summary["scan"])) == [
        ("survey/butadiene", "torsions/C1-C2-C3-C4"),
        ("survey/butane", "torsions/C1-C2-C3-C4"),
        ("survey/ethanol", "torsions/C1-C2-O3-H9"),
        ("survey/hydrogen-peroxide", "torsions/H3-O1-O2-H4"),
    ]


@pytest.mark.slow
def test_twenty_member_smiles_set_runs_resumes_after_a_kill_and_reports_per_set(tmp_path):
    summary = _survey(tmp_path, TWENTY, "twenty", kill_at=20)
    assert summary["molecule"].nunique() == 16  # four members have no rotatable torsion


def test_lower_envelope_over_conformers(tmp_path):
    """Three conformers of ethylene glycol, each scanned along the O-C-C-O torsion; the
    lower envelope's minimum is no higher than any conformer's lowest point."""
    spec = tmp_path / "glycol.yaml"
    spec.write_text(
        "campaign: glycol\nmolecules:\n  glycol: {smiles: OCCO, conformers: 3, seed: 11}\n"
        "scans:\n  t:\n    molecules: [glycol]\n    coordinates:\n"
        "      - {type: dihedral, rule: smarts, smarts: 'OCCO', from: 0, to: 330, step: 30}\n"
        "levels: [{method: gfn2-xtb}]\nstore: store\n"
    )
    pesflow("run", str(spec), "--cores", "2", check=0)
    pesflow("export", str(spec), "--what", "summary", "-o", str(tmp_path / "s.csv"), check=0)
    pesflow("export", str(spec), "-o", str(tmp_path / "p.parquet"), check=0)
    summary = pd.read_csv(tmp_path / "s.csv", keep_default_na=False, na_values=[""])
    points = pd.read_parquet(tmp_path / "p.parquet")
    envelope = summary[summary["conformer"] == "lower envelope"]
    conformers = summary[summary["conformer"].isin(["c1", "c2", "c3"])]
    assert len(envelope) == 1 and len(conformers) == 3
    assert envelope["molecule"].iloc[0] == "glycol"
    lowest_point = points["energy_hartree"].min()
    e_envelope = float(envelope["e_min_hartree"].iloc[0])
    assert e_envelope <= lowest_point + 1e-9
    assert np.all(conformers["e_min_hartree"].to_numpy(float) >= e_envelope - 1e-9)
