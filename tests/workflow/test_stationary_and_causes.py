"""Real runs: every stationary point, symmetry-aware comparisons, warnings that name their cause.

* A UMP2-on-UHF stretch of the hydroxyl radical (mp2/sto-3g): where the reference's <S^2>
  starts to climb the curve bends quickly; the analysis must call that the onset of spin
  contamination, not noise.  The stored energy and <S^2> are checked against PySCF's own
  UHF and UMP2 at the same geometry.
* A rigid H-O-O-H torsion of hydrogen peroxide at hf/6-31g* and hf/cc-pvdz (slow): the two
  levels put their lowest minimum on opposite mirror sides (about 124 and 234 degrees); the
  deviations must be a few degrees, the stationary-point table must hold the cis maximum and
  the trans barrier, checked against PySCF energies at geometries set by ASE.
"""

import numpy as np
import pandas as pd
import pytest

from pesflow.analysis.flags import flags_from_records
from pesflow.units import convert_energy
from tests.workflow.helpers import pesflow

pytestmark = [pytest.mark.workflow, pytest.mark.integration]

HYDROXYL = """\
campaign: hydroxyl-uhf
molecules:
  hydroxyl: {xyz: "O 0 0 0\\nH 0 0 0.97", multiplicity: 2}
scans:
  stretch:
    molecules: [hydroxyl]
    coordinates:
      - {type: distance, atoms: [1, 2], from: 0.80, to: 1.80, points: 21}
levels:
  - {method: mp2, basis: sto-3g}
store: store
"""


@pytest.fixture(scope="module")
def hydroxyl(tmp_path_factory):
    folder = tmp_path_factory.mktemp("hydroxyl")
    spec = folder / "campaign.yaml"
    spec.write_text(HYDROXYL)
    pesflow("run", str(spec), "--cores", "2", check=0)
    for what, name in (
        ("summary", "summary.csv"),
        ("points", "points.parquet"),
        ("stationary", "stationary.csv"),
        ("stationary", "stationary.parquet"),
    ):
        pesflow("export", str(spec), "--what", what, "-o", str(folder / name), check=0)
    return folder


def test_unrestricted_hydroxyl_stretch_is_spin_contamination_onset_not_noise(hydroxyl):
    summary = pd.read_csv(hydroxyl / "summary.csv")
    flags = flags_from_records(summary["flag_records"].iloc[0])
    codes = [f.code for f in flags]
    assert "spin-contamination-onset" in codes, summary["flags"].iloc[0]
    assert "noisy-points" not in codes
    onset = next(f for f in flags if f.code == "spin-contamination-onset")
    assert "physical, not numerical" in onset
    # Across the flagged range <S^2> really climbs (stored values).
    points = pd.read_parquet(hydroxyl / "points.parquet")
    points = points[points["role"] == "scan"].sort_values("r_angstrom")
    lo, hi = min(onset.positions), max(onset.positions)
    inside = points[(points["r_angstrom"] >= lo - 0.051) & (points["r_angstrom"] <= hi + 0.051)]
    assert np.ptp(inside["s2"].to_numpy(float)) > 0.05


def test_stored_s2_is_pyscf_uhf_spin_square(hydroxyl):
    from pyscf import gto, mp, scf

    points = pd.read_parquet(hydroxyl / "points.parquet")
    row = points[np.isclose(points["r_angstrom"], 1.0)].iloc[0]
    mol = gto.M(atom="O 0 0 0; H 0 0 1.0", basis="sto-3g", spin=1, verbose=0)
    mf = scf.UHF(mol)
    mf.conv_tol = 1e-11
    mf.kernel()
    # Reference library: PySCF's UHF spin_square and UMP2 energy (all electrons correlated,
    # pesflow's default) at the same geometry (short of the onset there is one UHF solution).
    assert row["energy_hartree"] == pytest.approx(mp.UMP2(mf).run().e_tot, abs=1e-7)
    assert row["s2"] == pytest.approx(mf.spin_square()[0], abs=1e-5)


def test_export_stationary_writes_csv_and_parquet_with_unit_columns(hydroxyl):
    csv = pd.read_csv(hydroxyl / "stationary.csv")
    parquet = pd.read_parquet(hydroxyl / "stationary.parquet")
    assert len(csv) == len(parquet) >= 1
    minimum = parquet[parquet["kind"] == "minimum"].iloc[0]
    summary = pd.read_csv(hydroxyl / "summary.csv").iloc[0]
    # The stationary table's minimum is the summary's r_e and E_min, at 0 relative energy.
    assert minimum["r_angstrom"] == pytest.approx(summary["r_e_angstrom"], abs=1e-9)
    assert minimum["energy_hartree"] == pytest.approx(summary["e_min_hartree"], abs=1e-10)
    for unit in ("kcal_mol", "kj_mol", "cm-1", "ev"):
        assert minimum[f"relative_{unit}"] == pytest.approx(0.0, abs=1e-9)
    assert not minimum["equivalent_copy"]


PEROXIDE = """\
campaign: peroxide-torsion
molecules:
  hydrogen_peroxide: {builtin: H2O2}
scans:
  torsion:
    molecules: [hydrogen_peroxide]
    coordinates:
      - {type: dihedral, atoms: [3, 1, 2, 4], from: 0, to: 345, step: 15}
levels:
  - {method: hf, basis: [6-31g*, cc-pvdz]}
compare:
  reference_level: hf/cc-pvdz
  reference_values:
    - {molecule: hydrogen_peroxide, scan: torsion, quantity: dihedral_e_degree, value: 111.9,
       source: "gas-phase H2O2 dihedral, about 112 degree (value from memory)"}
store: store
"""


def _pyscf_torsion_energy(phi_degree, basis):
    """RHF energy of ASE's g2 H2O2 with H-O-O-H set to ``phi_degree`` by rotating one H."""
    from ase.build import molecule
    from pyscf import gto, scf

    atoms = molecule("H2O2")  # O, O, H, H
    atoms.set_dihedral(2, 0, 1, 3, phi_degree, indices=[3])
    mol = gto.M(
        atom=[(s, tuple(p)) for s, p in zip(atoms.get_chemical_symbols(), atoms.positions)],
        basis=basis,
        unit="Angstrom",
        verbose=0,
    )
    mf = scf.RHF(mol)
    mf.conv_tol = 1e-11
    return float(mf.kernel())


@pytest.mark.slow
def test_peroxide_mirror_minima_deviate_by_degrees_and_every_stationary_point_is_listed(
    tmp_path,
):
    spec = tmp_path / "campaign.yaml"
    spec.write_text(PEROXIDE)
    pesflow("run", str(spec), "--cores", "2", check=0)
    for what, name in (("summary", "s.csv"), ("stationary", "st.parquet")):
        pesflow("export", str(spec), "--what", what, "-o", str(tmp_path / name), check=0)
    pesflow("report", str(spec), "-o", str(tmp_path / "report"), check=0)
    summary = pd.read_csv(tmp_path / "s.csv").set_index("level")
    # Both curves are mirror symmetric; the positions are canonical, in [0, 180].
    assert summary["symmetry_mirror"].all()
    assert ((summary["dihedral_e_degree"] > 90) & (summary["dihedral_e_degree"] < 180)).all()
    # Deviation between levels: a few degrees, not ~110 (the two HF minima lie 2-3 degrees
    # apart once folded; issue 9 measured 236.1 and 233.7, i.e. 123.9 and 126.3).
    assert abs(summary.loc["hf/6-31g*", "dev_dihedral_e_degree"]) < 5.0
    # Against the user's reference value: the nearest equivalent, so about 12-15 degrees.
    ref = pd.read_csv(tmp_path / "report" / "reference_values.csv")
    assert (ref["deviation"].abs() < 20.0).all()

    st = pd.read_parquet(tmp_path / "st.parquet")
    for level, basis in (("hf/6-31g*", "6-31g*"), ("hf/cc-pvdz", "cc-pvdz")):
        rows = st[(st["level"] == level) & ~st["equivalent_copy"]]
        minima, maxima = rows[rows["kind"] == "minimum"], rows[rows["kind"] == "maximum"]
        assert len(minima) == 1 and len(maxima) == 2
        cis = maxima[maxima["dihedral_degree"] < 1.0].iloc[0]
        trans = maxima[(maxima["dihedral_degree"] - 180.0).abs() < 1.0].iloc[0]
        # The trans maximum is the summary's barrier (the lowest path between the minima).
        assert trans["relative_kcal_mol"] == pytest.approx(
            summary.loc[level, "barrier_kcal_mol"], abs=1e-6
        )
        # Reference library: PySCF RHF at geometries set by ASE, cis (0 degree) and the
        # minimum (the summary's dihedral, rounded to 0.1 degree: the curve is flat there).
        e_cis = _pyscf_torsion_energy(0.0, basis)
        e_min = _pyscf_torsion_energy(round(float(minima["dihedral_degree"].iloc[0]), 1), basis)
        assert cis["relative_kcal_mol"] == pytest.approx(
            convert_energy(e_cis - e_min, "kcal_mol"), abs=0.02
        )
        assert 8.0 < cis["relative_kcal_mol"] < 12.0  # cis barrier of issue 9: ~9 kcal/mol
    other = st[(st["level"] == "hf/6-31g*") & ~st["equivalent_copy"]]
    assert (other["dev_dihedral_degree"].abs() < 5.0).all()
    page = (tmp_path / "report" / "report.html").read_text()
    assert 'id="stationary"' in page
    assert (tmp_path / "report" / "stationary.csv").exists()


def test_report_shows_the_stationary_points(hydroxyl):
    spec = hydroxyl / "campaign.yaml"
    pesflow("report", str(spec), "-o", str(hydroxyl / "report"), check=0)
    st = pd.read_csv(hydroxyl / "report" / "stationary.csv")
    exported = pd.read_csv(hydroxyl / "stationary.csv")
    pd.testing.assert_frame_equal(st, exported)
    r_e = f"{exported.loc[exported['kind'] == 'minimum', 'r_angstrom'].iloc[0]:.4f}"
    page = (hydroxyl / "report" / "report.html").read_text()
    section = page[page.index('id="stationary"') :]
    section = section[: section.index("</section>")]
    assert r_e in section and "minimum" in section
    markdown = (hydroxyl / "report" / "report.md").read_text()
    assert "## Every stationary point" in markdown and r_e in markdown
