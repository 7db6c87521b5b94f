"""A CBS level from a real run: stored member energies, the formulas by hand, PySCF directly.

One `pesflow run` of H2 at MP2 with cc-pVDZ and cc-pVTZ extrapolated (Helgaker X^-3
correlation, Karton-Martin two-point HF), then the points table:
- each derived energy equals the formulas applied here, by hand, to the stored member
  energies at the same geometry (Helgaker et al., J. Chem. Phys. 106, 9639 (1997);
  Karton & Martin, Theor. Chem. Acc. 115, 330 (2006));
- the extrapolated curve is closer to MP2/cc-pV5Z, computed directly with PySCF at the
  same geometries (the outside reference, a basis two cardinal numbers beyond the largest
  member), than either member curve (root-mean-square of total energies over the curve).
"""

import math

import numpy as np
import pytest

from tests.workflow.helpers import run_and_export

pytestmark = [pytest.mark.workflow, pytest.mark.integration]

SPEC = """\
campaign: cbs-run
molecules:
  dihydrogen: {builtin: H2}
scans:
  stretch:
    molecules: [dihydrogen]
    coordinates:
      - {type: distance, atoms: [1, 2], from: 0.64, to: 0.84, points: 4}
levels:
  - {method: mp2, basis: [cc-pvdz, cc-pvtz], extrapolate: cbs}
store: store
"""

LABEL = "mp2/cbs(cc-pvdz,cc-pvtz)"


@pytest.fixture(scope="module")
def points(tmp_path_factory):
    return run_and_export(tmp_path_factory.mktemp("cbs"), SPEC)


def _by_level(table, level):
    return table[table["level"] == level].sort_values("walk").reset_index(drop=True)


def test_derived_energies_are_the_formulas_applied_to_the_stored_members(points):
    table, summary = points
    cbs = _by_level(table, LABEL)
    assert len(cbs) == 4 and set(cbs["status"]) == {"done"}
    e = {lvl: _by_level(table, lvl)["energy_hartree"].to_numpy() for lvl in
         ("hf/cc-pvdz", "hf/cc-pvtz", "mp2/cc-pvdz", "mp2/cc-pvtz")}  # fmt: skip
    # Karton-Martin: E(X) = E_inf + A (X+1) exp(-9 sqrt(X)), X = 2, 3
    f2, f3 = 3 * math.exp(-9 * math.sqrt(2)), 4 * math.exp(-9 * math.sqrt(3))
    hf_inf = (e["hf/cc-pvtz"] * f2 - e["hf/cc-pvdz"] * f3) / (f2 - f3)
    # Helgaker: E_corr(X) = E_inf + A X^-3, X = 2, 3
    c2, c3 = e["mp2/cc-pvdz"] - e["hf/cc-pvdz"], e["mp2/cc-pvtz"] - e["hf/cc-pvtz"]
    corr_inf = (27 * c3 - 8 * c2) / (27 - 8)
    np.testing.assert_allclose(cbs["energy_hartree"], hf_inf + corr_inf, rtol=0, atol=1e-11)
    # analysed like any level: the summary has its curve with a minimum
    row = summary[summary["level"] == LABEL]
    assert len(row) == 1 and 0.70 < float(row["r_e_angstrom"].iloc[0]) < 0.77


def test_extrapolated_curve_is_closer_to_a_larger_basis_than_either_member(points):
    from pyscf import gto, mp, scf

    table, _ = points
    cbs = _by_level(table, LABEL)
    reference = []
    for xyz in cbs["positions_angstrom"]:
        pos = np.asarray(str(xyz).split(), dtype=float).reshape(-1, 3)
        mol = gto.M(atom=[("H", p) for p in pos.tolist()], basis="cc-pv5z", verbose=0)
        mf = scf.RHF(mol)
        mf.conv_tol = 1e-10
        mf.kernel()
        reference.append(mp.MP2(mf).run().e_tot)  # MP2/cc-pV5Z directly with PySCF
    reference = np.asarray(reference)

    def rms(level):
        return float(np.sqrt(np.mean((_by_level(table, level)["energy_hartree"] - reference) ** 2)))

    assert rms(LABEL) < rms("mp2/cc-pvtz") < rms("mp2/cc-pvdz")
    # (The curve's shape, energies relative to its first point, is not better than
    # cc-pVTZ's here: a (DZ,TZ) extrapolation is crude; see README "CBS levels".)
