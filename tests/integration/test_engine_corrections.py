"""Dispersion corrections and implicit solvent through the PySCF engine.

References, computed in the test at the same geometry and basis and asserted to 1e-8
hartree:
- PySCF directly: ``dft.RKS(mol, xc="b3lyp")`` with ``mf.disp = "d3bj"`` and
  ``scf.RHF`` with ``mf.disp = "d4"`` (PySCF's own dispersion mechanism), and
  ``pyscf.solvent.PCM`` (``method = "IEF-PCM"``) / ``pyscf.solvent.ddCOSMO`` around
  RHF and RKS with the dielectric constant set by hand;
- the ``pyscf-dispersion`` package directly (``dftd3.DFTD3Dispersion``,
  ``dftd4.DFTD4Dispersion``) for the stored dispersion energy.
Each level runs as a walk over two geometries, so the second point starts from the
first one's density (the neighbour reuse of a scan).

One physical check: the hydration energy of water (solvated minus gas-phase SCF energy)
is negative and of the size of the measured hydration free energy, -6.3 kcal/mol
(Ben-Naim & Marcus, J. Chem. Phys. 81, 2016 (1984); from memory), loosely (-12 to -3
kcal/mol): the continuum has only the electrostatic part.
"""

import numpy as np
import pytest
from pyscf import dft, gto, scf, solvent
from pyscf.dispersion import dftd3, dftd4

from pesflow.engine import EngineSettings, Geometry, get_engine
from pesflow.engine.pyscf.corrections import dielectric
from pesflow.units import convert_energy

pytestmark = pytest.mark.integration

SETTINGS = EngineSettings()
#: Water near its equilibrium and with one O-H bond stretched, angstrom.
WATERS = [
    [[0.0, 0.0, 0.0], [0.0, 0.757, 0.587], [0.0, -0.757, 0.587]],
    [[0.0, 0.0, 0.0], [0.0, 0.857, 0.637], [0.0, -0.757, 0.587]],
]


def geometry(positions):
    return Geometry(("O", "H", "H"), positions)


def mole(positions, basis):
    atoms = [(s, tuple(p)) for s, p in zip(("O", "H", "H"), positions)]
    return gto.M(atom=atoms, basis=basis, unit="Angstrom", verbose=0)


def direct(positions, basis, xc=None, disp=None, model=None, eps=None):
    """The same point with PySCF alone, converged from scratch to 1e-12 hartree."""
    mol = mole(positions, basis)
    mf = scf.RHF(mol) if xc is None else dft.RKS(mol, xc=xc)
    # No checkpoint file: a solvent model puts the SCF in a reference cycle, where the
    # garbage collector would warn about PySCF's open temporary file.
    vars(mf).pop("_chkfile").close()
    mf.chkfile = None
    if xc is not None:
        mf.grids.level = SETTINGS.dft_grid_level
    if disp is not None:
        mf.disp = disp
    if model == "pcm":
        mf = solvent.PCM(mf)
        mf.with_solvent.method = "IEF-PCM"
    elif model == "ddcosmo":
        mf = solvent.ddCOSMO(mf)
    if model is not None:
        mf.with_solvent.eps = eps
    mf.conv_tol = 1e-12
    mf.kernel()
    assert mf.converged
    return mf


@pytest.mark.parametrize(
    ("method", "basis", "reference"),
    [
        ("b3lyp-d3bj", "def2-svp", {"xc": "b3lyp", "disp": "d3bj"}),
        ("hf-d4", "cc-pvdz", {"disp": "d4"}),
        ("hf(pcm:water)", "cc-pvdz", {"model": "pcm", "eps": 78.355}),
        ("b3lyp(ddcosmo:eps=35.688)", "def2-svp",
         {"xc": "b3lyp", "model": "ddcosmo", "eps": 35.688}),
        ("pbe0-d3bj(pcm:methanol)", "def2-svp",
         {"xc": "pbe0", "disp": "d3bj", "model": "pcm", "eps": 32.613}),
    ],
)  # fmt: skip
def test_energies_equal_direct_pyscf_along_a_walk(method, basis, reference):
    # eps: water 78.355, methanol 32.613 (PySCF's pyscf.solvent.smd.solvent_db, the
    # Minnesota Solvent Descriptor Database); acetonitrile 35.688 given as a number.
    walk = get_engine("pyscf").start_walk(SETTINGS, basis, [method])
    for positions in WATERS:
        record = walk.compute(geometry(positions))[method]
        assert record.converged, record.error
        mf = direct(positions, basis, **reference)
        assert abs(record.energy_hartree - mf.e_tot) < 1e-8
        if "disp" in reference:
            assert abs(record.extra["dispersion_hartree"] - mf.scf_summary["dispersion"]) < 1e-10
        else:
            assert "dispersion_hartree" not in record.extra
        if "model" in reference:
            # a part of the energy, not variational: first order in the density's error
            # (an SCF converged to 1e-10 hartree from the neighbour's density vs 1e-12)
            assert abs(record.extra["solvent_hartree"] - mf.with_solvent.e) < 1e-6
        else:
            assert "solvent_hartree" not in record.extra


def test_stored_dispersion_equals_the_dispersion_package():
    # pyscf-dispersion called directly: D3(BJ) for B3LYP (two-body, PySCF's default for
    # d3bj) and D4 for HF (with its three-body term).
    pos = WATERS[1]
    mol = mole(pos, "def2-svp")
    walk = get_engine("pyscf").start_walk(SETTINGS, "def2-svp", ["b3lyp-d3bj"])
    e_d3 = dftd3.DFTD3Dispersion(mol, xc="b3lyp", version="d3bj", atm=False).get_dispersion()
    assert walk.compute(geometry(pos))["b3lyp-d3bj"].extra["dispersion_hartree"] == (
        pytest.approx(e_d3["energy"], abs=1e-12)
    )
    walk = get_engine("pyscf").start_walk(SETTINGS, "def2-svp", ["hf-d4"])
    e_d4 = dftd4.DFTD4Dispersion(mol, xc="hf", atm=True).get_dispersion()
    assert walk.compute(geometry(pos))["hf-d4"].extra["dispersion_hartree"] == (
        pytest.approx(e_d4["energy"], abs=1e-12)
    )


@pytest.mark.parametrize("model", ["pcm", "ddcosmo"])
def test_water_is_stabilised_by_a_polar_solvent(model):
    # The solvated SCF lies below the gas-phase one (a polar molecule in a dielectric),
    # each equal to PySCF directly; and a weakly polar solvent (benzene, eps 2.2706 in
    # PySCF's table) stabilises less than water.
    basis, pos = "cc-pvdz", WATERS[0]
    energies = {}
    for method in ("hf", f"hf({model}:water)", f"hf({model}:benzene)"):
        record = get_engine("pyscf").compute(geometry(pos), basis, [method], SETTINGS)[method]
        assert record.converged, record.error
        energies[method] = record.energy_hartree
    e_gas = direct(pos, basis).e_tot
    e_water = direct(pos, basis, model=model, eps=dielectric("water")).e_tot
    assert abs(energies["hf"] - e_gas) < 1e-8
    assert abs(energies[f"hf({model}:water)"] - e_water) < 1e-8
    in_water = energies[f"hf({model}:water)"] - energies["hf"]
    in_benzene = energies[f"hf({model}:benzene)"] - energies["hf"]
    assert in_water < in_benzene < 0
    hydration_kcal_mol = convert_energy(in_water, "kcal_mol")
    assert -12 < hydration_kcal_mol < -3, hydration_kcal_mol  # measured -6.3 (see top)


def test_solvent_table_is_pyscfs():
    # PySCF's table (Minnesota Solvent Descriptor Database): water 78.355, acetonitrile
    # 35.688, dimethylsulfoxide 46.826; names in any case, spaces or underscores.
    assert dielectric("Water") == 78.355
    assert dielectric("acetonitrile") == 35.688
    assert dielectric("DimethylSulfoxide") == 46.826
    assert dielectric("carbon_tetrachloride") == dielectric("Carbon Tetrachloride")
    assert np.isclose(dielectric("carbon tetrachloride"), 2.228)


@pytest.mark.parametrize("method", ["hf(pcm:water)", "b3lyp-d3bj(ddcosmo:water)"])
def test_a_solvated_walk_starts_each_point_from_its_neighbour(method):
    # The neighbour's density is the guess (the scanner idea): the second point of a walk
    # converges in fewer SCF cycles than the same point from scratch, to the same energy.
    # A scan's step: one O-H bond 0.011 A longer.
    near = geometry([[0.0, 0.0, 0.0], [0.0, 0.767, 0.592], [0.0, -0.757, 0.587]])
    walk = get_engine("pyscf").start_walk(SETTINGS, "cc-pvdz", [method])
    walk.compute(geometry(WATERS[0]))
    walked = walk.compute(near)[method]
    cold = get_engine("pyscf").compute(near, "cc-pvdz", [method], SETTINGS)[method]
    assert walked.scf_cycles < cold.scf_cycles, (walked.scf_cycles, cold.scf_cycles)
    assert abs(walked.energy_hartree - cold.energy_hartree) < 1e-8
