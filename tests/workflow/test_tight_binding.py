"""Tight-binding levels beside PySCF levels in one campaign, through real `pesflow run`.

A stretch of HF and OH at hf/sto-3g and gfn2-xtb, and a relaxed torsion of H2O2 at
gfn2-xtb.  References: tblite's own calculator (``tblite.interface.Calculator``) at
each stored geometry, same charge, spin and SCC accuracy (1e-4, pesflow's default
tolerance of 1e-10 Eh), to 1e-8 hartree; plain PySCF RHF/UHF for the hf points; ASE's
``get_dihedral`` for the constrained torsion of the relaxed geometries.
"""

import numpy as np
import pandas as pd
import pytest
from ase import Atoms

from pesflow.units import BOHR_ANGSTROM
from tests.workflow.helpers import direct_energy, run_and_export

pytestmark = [pytest.mark.workflow, pytest.mark.integration]

SPEC = """\
campaign: tight-binding
molecules:
  hydrogen_fluoride: {builtin: HF}
  hydroxyl: {xyz: "O 0 0 0\\nH 0 0 0.97", multiplicity: 2}
  peroxide: {builtin: H2O2}
scans:
  stretch:
    molecules: [hydrogen_fluoride, hydroxyl]
    coordinates:
      - {type: distance, atoms: [1, 2], from: 0.75, to: 1.15, points: 9}
  torsion:
    molecules: [peroxide]
    coordinates:
      - {type: dihedral, atoms: [3, 1, 2, 4], values: [90, 120, 150]}
    levels: [{method: gfn2-xtb}]
    relax: true
levels:
  - {method: hf, basis: [sto-3g, 6-31g]}
  - {method: gfn2-xtb}
compare:
  reference_level: hf/6-31g
store: store
"""


@pytest.fixture(scope="module")
def campaign(tmp_path_factory):
    folder = tmp_path_factory.mktemp("tight-binding")
    points, summary = run_and_export(folder, SPEC, cores=2, report=True, suffix="parquet")
    return {"summary": summary, "points": points, "report": folder / "report"}


def tblite_energy(row):
    from tblite.interface import Calculator

    symbols = row["symbols"].split()
    numbers = Atoms(symbols).get_atomic_numbers()
    positions = np.asarray(row["positions_angstrom"]).reshape(-1, 3) / BOHR_ANGSTROM
    calc = Calculator(
        "GFN2-xTB",
        numbers,
        positions,
        charge=float(row["charge"]),
        uhf=int(row["multiplicity"]) - 1,
    )
    calc.set("verbosity", 0)
    calc.set("accuracy", 1e-4)
    return float(calc.singlepoint().get("energy"))


def test_summary_has_both_levels(campaign):
    summary = campaign["summary"]
    stretch = summary[summary["scan"] == "stretch"]
    assert set(stretch["level"]) == {"hf/sto-3g", "hf/6-31g", "gfn2-xtb"}
    assert (stretch["n_done"] == 9).all()
    assert set(summary[summary["scan"] == "torsion"]["level"]) == {"gfn2-xtb"}


def test_every_point_is_done_and_equals_its_reference(campaign):
    points = campaign["points"]
    assert (points["status"] == "done").all()
    tight = points[points["level"] == "gfn2-xtb"]
    assert set(tight["engine"]) == {"tblite"} and set(tight["basis"]) == {""}
    for _, row in tight.iterrows():
        assert row["energy_hartree"] == pytest.approx(tblite_energy(row), abs=1e-8)
    for _, row in points[points["level"] == "hf/sto-3g"].head(4).iterrows():
        assert row["engine"] == "pyscf"
        assert row["energy_hartree"] == pytest.approx(direct_energy(row), abs=1e-8)


def test_relaxed_torsion_keeps_its_dihedral(campaign):
    points = campaign["points"]
    relaxed = points[points["scan"] == "torsion"].sort_values("walk")
    assert len(relaxed) == 3
    for target, (_, row) in zip((90.0, 120.0, 150.0), relaxed.iterrows()):
        atoms = Atoms(row["symbols"].split(), np.asarray(row["positions_angstrom"]).reshape(-1, 3))
        assert atoms.get_dihedral(2, 0, 1, 3) == pytest.approx(target, abs=1e-4)


def test_report_shows_the_tight_binding_level_and_leaves_it_out_of_basis_convergence(campaign):
    report = campaign["report"]
    markdown = (report / "report.md").read_text()
    assert "gfn2-xtb" in markdown and "gfn2-xtb/" not in markdown
    convergence = pd.read_csv(report / "convergence.csv")
    assert len(convergence) and set(convergence["method"]) == {"hf"}
    cost = pd.read_csv(report / "cost.csv")
    assert "gfn2-xtb" in set(cost["level"])
