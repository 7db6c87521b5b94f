"""Adaptive grids end to end: real ``pesflow run`` campaigns with ``refine``, checked against
PySCF computed directly (analytic gradient root and analytic Hessian of a diatomic; energies at
the stationary geometries of a torsion), with fewer points than a fixed grid needs; a second
run adds nothing; a run killed after a round was decided continues from the log.
"""

import json

import numpy as np
import pandas as pd
import pytest

from tests.workflow.helpers import pesflow

pytestmark = [pytest.mark.workflow, pytest.mark.integration]

DIATOMIC = """\
campaign: adaptive-hf
molecules:
  hydrogen_fluoride: {builtin: HF}
scans:
  stretch:
    molecules: [hydrogen_fluoride]
    coordinates:
      - {type: distance, atoms: [1, 2], from: 0.70, to: 1.30, points: 5}
    refine: {omega_e_cm-1: 0.5, r_e_angstrom: 1.0e-4, max_points: 9}
levels:
  - {method: hf, basis: cc-pvdz}
store: store
"""

TORSION = """\
campaign: adaptive-peroxide
molecules:
  hydrogen_peroxide: {builtin: H2O2}
scans:
  torsion:
    molecules: [hydrogen_peroxide]
    coordinates:
      - {type: dihedral, atoms: [3, 1, 2, 4], from: 10, to: 310, step: 60}
    refine: {barrier_kcal_mol: 0.05, max_points: 20}
levels:
  - {method: hf, basis: 6-31g*}
store: store
"""


def _log(folder, campaign):
    return json.loads((folder / "results" / campaign / "refinement.json").read_text())


def _summary(folder, spec):
    pesflow("export", str(spec), "--what", "summary", "-o", str(folder / "s.csv"), check=0)
    return pd.read_csv(folder / "s.csv").iloc[0]


def _rhf(r_angstrom, conv_tol=1e-12):
    from pyscf import gto, scf

    mol = gto.M(atom=f"F 0 0 0; H 0 0 {r_angstrom}", basis="cc-pvdz", verbose=0)
    mf = scf.RHF(mol)
    mf.conv_tol, mf.conv_tol_grad = conv_tol, 1e-9
    mf.kernel()
    return mol, mf


@pytest.fixture(scope="module")
def diatomic(tmp_path_factory):
    folder = tmp_path_factory.mktemp("adaptive")
    spec = folder / "campaign.yaml"
    spec.write_text(DIATOMIC)
    first = pesflow("run", str(spec), "--cores", "2", check=0)
    return folder, spec, first


def test_diatomic_meets_pyscf_hessian_and_gradient_root_with_nine_points(diatomic):
    from pyscf.hessian import thermo
    from scipy.optimize import brentq

    from pesflow.units import isotope_mass

    folder, spec, first = diatomic
    assert "adaptive refinement: 2 points added" in first.stdout
    row = _summary(folder, spec)
    assert row["n_done"] <= 9
    # Reference r_e: the root of PySCF's analytic RHF gradient along the bond (Brent's
    # method, SCF to 1e-12 hartree), good to ~1e-9 A.
    r_e = brentq(
        lambda r: float(_rhf(r)[1].nuc_grad_method().kernel()[1, 2]), 0.85, 0.95, xtol=1e-11
    )
    assert abs(row["r_e_angstrom"] - r_e) < 1e-4
    # Reference omega_e: pyscf.hessian (analytic RHF Hessian) + thermo.harmonic_analysis at
    # that r_e, the same isotope masses (pesflow.units, PySCF's element table).
    mol, mf = _rhf(r_e)
    masses = np.array([isotope_mass("F"), isotope_mass("H")])
    freq = thermo.harmonic_analysis(mol, mf.Hessian().kernel(), mass=masses)["freq_wavenumber"]
    assert abs(row["omega_e_cm-1"] - float(np.max(np.real(freq)))) < 1.0
    log = _log(folder, "adaptive-hf")
    assert [e["outcome"] for e in log["rounds"]] == ["refining", "refining", "met"]
    assert [p["round"] for p in log["points"]] == [1, 1, 2, 2]


def test_second_run_computes_and_adds_nothing(diatomic):
    folder, spec, _ = diatomic
    before = _log(folder, "adaptive-hf")
    again = pesflow("run", str(spec), "--cores", "2", check=0)
    assert "nothing to compute" in again.stdout
    assert "points added" not in again.stdout
    assert "hydrogen_fluoride stretch hf/cc-pvdz: targets met with 9 points" in again.stdout
    assert _log(folder, "adaptive-hf") == before
    status = pesflow("status", str(spec), check=0)
    assert "9 done, 0 failed, 0 pending" in status.stdout


def test_a_run_killed_after_a_decision_continues_from_the_log(diatomic, tmp_path):
    """The state a kill leaves between deciding a round and computing it: the coarse points
    stored and round 1 in the log.  The next run computes only the logged points and what
    follows, and decides exactly what the uninterrupted run decided (decisions depend on
    stored energies only)."""
    import pesflow as api
    from pesflow.api import _run_round
    from pesflow.execution.refinement import refine_round

    spec = tmp_path / "campaign.yaml"
    spec.write_text(DIATOMIC)
    campaign = api.load(spec)
    result = _run_round(campaign.campaign, campaign._expanded(), campaign._store(), cores=2)
    assert result.to_compute == 5
    assert refine_round(campaign.campaign, campaign._expanded(), campaign._store()).added == 2
    status = pesflow("status", str(spec), check=0)
    assert "5 done, 0 failed, 2 pending" in status.stdout
    resumed = pesflow("run", str(spec), "--cores", "2", check=0)
    assert "2 points to compute in 1 jobs (5 cached)" in resumed.stdout
    uninterrupted = _log(diatomic[0], "adaptive-hf")
    assert _log(tmp_path, "adaptive-hf")["points"] == uninterrupted["points"]


def _peroxide_energy(phi_degree):
    """RHF/6-31G* energy of ASE's g2 H2O2 with H-O-O-H set to ``phi_degree`` by rotating the
    last H, as the scan does (pesflow moves the coordinate's last atom's side)."""
    from ase.build import molecule
    from pyscf import gto, scf

    atoms = molecule("H2O2")  # O, O, H, H
    atoms.set_dihedral(2, 0, 1, 3, phi_degree, indices=[3])
    mol = gto.M(
        atom=[(s, tuple(p)) for s, p in zip(atoms.get_chemical_symbols(), atoms.positions)],
        basis="6-31g*",
        verbose=0,
    )
    mf = scf.RHF(mol)
    mf.conv_tol = 1e-11
    return float(mf.kernel())


def test_torsion_barrier_matches_direct_energies_at_the_stationary_geometries(tmp_path):
    from scipy.optimize import minimize_scalar

    from pesflow.units import convert_energy

    spec = tmp_path / "campaign.yaml"
    spec.write_text(TORSION)
    pesflow("run", str(spec), "--cores", "2", check=0)
    row = _summary(tmp_path, spec)
    # Fewer points than the 36 of a 10-degree grid.
    assert row["n_done"] < 36
    log = _log(tmp_path, "adaptive-peroxide")
    assert log["rounds"][-1]["outcome"] == "met"
    assert any("barrier maximum" in p["reason"] for p in log["points"])
    # Reference: PySCF directly at the stationary geometries of the same rigid rotation: the
    # trans maximum at 180 degree (stationary by the C2h symmetry of the planar form) and
    # the minimum found by Brent's bounded method on PySCF energies.
    best = minimize_scalar(
        _peroxide_energy, bounds=(100.0, 150.0), method="bounded", options={"xatol": 1e-4}
    )
    barrier = float(convert_energy(_peroxide_energy(180.0) - best.fun, "kcal_mol"))
    assert abs(row["barrier_kcal_mol"] - barrier) < 0.05


def test_report_shows_each_round_its_points_and_why(diatomic):
    folder, spec, _ = diatomic
    out = folder / "report"
    shown = pesflow("report", str(spec), "-o", str(out), check=0)
    assert "adaptive refinement: hydrogen_fluoride stretch hf/cc-pvdz: targets met with 9" in (
        shown.stdout
    )
    text = (out / "report.md").read_text()
    section = text[text.index("## Adaptive refinement") :]
    assert "targets met with 9 points" in section
    # One table row per round (0: the coarse grid), the added points with their reasons.
    log = _log(folder, "adaptive-hf")
    for p in log["points"]:
        assert f"{p['value']:.6g}: {p['reason']}" in section
    assert section.count("| 0 | 5 |") == 1 and section.count("| 2 | 9 |") == 1
    added = pd.read_csv(out / "refinement.csv")
    assert added["round"].tolist() == [1, 1, 2, 2]
    assert added["reason"].str.contains("minimum at").all()
    html = (out / "report.html").read_text()
    assert 'id="refinement"' in html
    plan = pesflow("plan", str(spec), check=0)
    assert "adaptive refinement: pesflow run may add points" in " ".join(plan.stdout.split())


def test_a_tighter_refine_continues_from_the_stored_grid(diatomic, tmp_path):
    """Changing ``refine`` after a finished run evaluates the stored grid again under the new
    targets and budget and goes on from there; no stored point is computed again."""
    import shutil

    folder = tmp_path / "copy"
    shutil.copytree(diatomic[0], folder)
    spec = folder / "campaign.yaml"
    spec.write_text(
        DIATOMIC.replace("omega_e_cm-1: 0.5", "omega_e_cm-1: 0.001").replace(
            "max_points: 9", "max_points: 11"
        )
    )
    run = pesflow("run", str(spec), "--cores", "2", check=0)
    assert "2 points to compute in 1 jobs (9 cached)" in run.stdout
    log = _log(folder, "adaptive-hf")
    assert [p["round"] for p in log["points"]] == [1, 1, 2, 2, 3, 3]
    last = log["rounds"][-1]
    assert (last["round"], last["n_points"], last["max_points"]) == (3, 11, 11)
    assert last["outcome"] in ("met", "budget spent")


TWO_LEVELS = """\
campaign: adaptive-two-levels
molecules:
  dihydrogen: {builtin: H2}
scans:
  stretch:
    molecules: [dihydrogen]
    coordinates:
      - {type: distance, atoms: [1, 2], from: 0.50, to: 1.10, points: 5}
    refine: {omega_e_cm-1: 0.5, max_points: 11}
levels:
  - {method: hf, basis: [sto-3g, 6-31g]}
store: store
"""


def test_points_of_each_level_are_computed_at_every_level_within_one_budget(tmp_path):
    """Two levels with minima 0.02 A apart (HF/STO-3G and HF/6-31G H2): each level's curve
    asks for its own pairs, every added point is computed at both levels, and the walk stops
    at the budget."""
    spec = tmp_path / "campaign.yaml"
    spec.write_text(TWO_LEVELS)
    pesflow("run", str(spec), "--cores", "2", check=0)
    log = _log(tmp_path, "adaptive-two-levels")
    assert {p["level"] for p in log["points"] if p["round"] == 1} == {"hf/sto-3g", "hf/6-31g"}
    assert len(log["points"]) == 11 - 5
    pesflow("export", str(spec), "--what", "summary", "-o", str(tmp_path / "s.csv"), check=0)
    summary = pd.read_csv(tmp_path / "s.csv")
    assert summary["n_done"].tolist() == [11, 11]
    outcomes = {e["level"]: e["outcome"] for e in log["rounds"]}  # the last of each level
    assert set(outcomes.values()) <= {"met", "budget spent"}


@pytest.mark.slow
@pytest.mark.parametrize(
    ("builtin", "symbols", "lo", "hi"),
    [("CO", ("O", "C"), 0.85, 1.45), ("N2", ("N", "N"), 0.80, 1.40)],
)
def test_more_diatomics_meet_the_analytic_references_with_nine_points(
    tmp_path, builtin, symbols, lo, hi
):
    from pyscf import gto, scf
    from pyscf.hessian import thermo
    from scipy.optimize import brentq

    from pesflow.units import isotope_mass

    spec = tmp_path / "campaign.yaml"
    spec.write_text(
        DIATOMIC.replace("hydrogen_fluoride: {builtin: HF}", f"hydrogen_fluoride: {{builtin: "
                         f"{builtin}}}").replace("from: 0.70, to: 1.30", f"from: {lo}, to: {hi}")
    )  # fmt: skip
    pesflow("run", str(spec), "--cores", "2", check=0)
    row = _summary(tmp_path, spec)
    assert row["n_done"] <= 9

    def rhf(r):
        mol = gto.M(atom=f"{symbols[0]} 0 0 0; {symbols[1]} 0 0 {r}", basis="cc-pvdz", verbose=0)
        mf = scf.RHF(mol)
        mf.conv_tol, mf.conv_tol_grad = 1e-12, 1e-9
        mf.kernel()
        return mol, mf

    # References as in the HF test: PySCF's analytic gradient root and analytic Hessian.
    guess = row["r_e_angstrom"]
    r_e = brentq(
        lambda r: float(rhf(r)[1].nuc_grad_method().kernel()[1, 2]),
        guess - 0.02,
        guess + 0.02,
        xtol=1e-11,
    )
    mol, mf = rhf(r_e)
    masses = np.array([isotope_mass(s) for s in symbols])
    freq = thermo.harmonic_analysis(mol, mf.Hessian().kernel(), mass=masses)["freq_wavenumber"]
    assert abs(row["r_e_angstrom"] - r_e) < 1e-4
    assert abs(row["omega_e_cm-1"] - float(np.max(np.real(freq)))) < 1.0
