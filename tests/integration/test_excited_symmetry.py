"""Point-group labels of excited states against PySCF's own symmetry analysis.

Reference: the same molecule built with ``symmetry=True`` in PySCF, its TDA states
computed there and labelled by PySCF's ``TDA.analyze()`` (which labels each state from
its symmetry-adapted orbitals), read from its log.  pesflow computes without symmetry
and labels afterwards (``pesflow.engine.pyscf.excited.state_symmetries``); the labels
must be the same.  Water, C2v at its equilibrium (PySCF's orientation kept), and Cs
with one O-H bond stretched.
"""

import io
import re

import pytest
from pyscf import gto, scf, tdscf

from pesflow.engine import EngineSettings, Geometry, get_engine, state_record

pytestmark = pytest.mark.integration

C2V = [("O", (0.1, 0.2, 0.3)), ("H", (0.1, 0.957, 0.887)), ("H", (0.1, -0.557, 0.887))]
CS = [("O", (0.1, 0.2, 0.3)), ("H", (0.1, 0.997, 0.917)), ("H", (0.1, -0.557, 0.887))]


def pyscf_labels(atoms, basis, nstates, singlet=True):
    """Labels of PySCF's TDA.analyze() on a symmetry-adapted RHF (the reference)."""
    mol = gto.M(atom=atoms, basis=basis, symmetry=True, verbose=0)
    mf = scf.RHF(mol)
    mf.conv_tol = 1e-12
    mf.kernel()
    td = tdscf.TDA(mf)
    td.singlet, td.nstates = singlet, nstates
    td.kernel()
    log = io.StringIO()
    td.stdout, td.verbose = log, 4
    td.analyze()
    return re.findall(r"Excited State\s+\d+:\s+(\S+)", log.getvalue()), mol.groupname


@pytest.mark.parametrize(
    ("atoms", "spin", "group"),
    [(C2V, "singlet", "C2v"), (C2V, "triplet", "C2v"), (CS, "singlet", "Cs")],
)
def test_state_symmetry_equals_pyscfs_analysis(atoms, spin, group):
    expected, groupname = pyscf_labels(atoms, "6-31g", 4, singlet=spin == "singlet")
    assert groupname == group
    method = f"cis({spin}s=4)"
    geometry = Geometry([a for a, _ in atoms], [p for _, p in atoms])
    records = get_engine("pyscf").compute(geometry, "6-31g", [method], EngineSettings())
    got = [records[state_record(method, k)].extra["state"]["symmetry"] for k in range(5)]
    assert got[0] == ("A1" if group == "C2v" else "A'")  # closed shell: totally symmetric
    assert got[1:] == expected
