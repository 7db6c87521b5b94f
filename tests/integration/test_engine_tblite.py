"""The tight-binding backend (tblite) against tblite's own calculators.

References: tblite's Python interface (``tblite.interface.Calculator``) and its ASE
calculator (``tblite.ase.TBLite``, energies in eV converted with ASE's own
``ase.units.Hartree``) at the same geometry, charge, spin and SCC accuracy; for the
relaxation, ASE's BFGS optimiser on tblite's ASE calculator.  Same code underneath,
so energies are asserted to 1e-8 hartree.  pesflow's default tolerance of 1e-10 Eh
is tblite's ``accuracy`` 1e-4 (tblite converges the energy to 1e-6 Eh x accuracy).
"""

import math

import numpy as np
import pytest

from pesflow.engine import EngineSettings, Geometry, get_engine, method_info
from pesflow.engine.tblite import TBLITE_NAMES
from pesflow.errors import EngineSetupError
from pesflow.units import BOHR_ANGSTROM

pytestmark = pytest.mark.integration

WATER = Geometry(("O", "H", "H"), [[0, 0, 0], [0, -0.757, 0.587], [0, 0.757, 0.587]])
HYDROXYL = Geometry(("O", "H"), [[0, 0, 0], [0, 0, 0.97]], multiplicity=2)
HYDROXIDE = Geometry(("O", "H"), [[0, 0, 0], [0, 0, 0.97]], charge=-1)
ACCURACY = 1e-4


@pytest.fixture(scope="module")
def engine():
    return get_engine("tblite")


def tblite_energy(level, geometry):
    """tblite's own calculator at the geometry (bohr inside), same accuracy."""
    from tblite.interface import Calculator

    from pesflow.engine.tblite import _atomic_number

    calc = Calculator(
        TBLITE_NAMES[level],
        np.array([_atomic_number(s) for s in geometry.symbols]),
        geometry.positions_angstrom / BOHR_ANGSTROM,
        charge=float(geometry.charge),
        uhf=geometry.multiplicity - 1,
    )
    calc.set("verbosity", 0)
    calc.set("accuracy", ACCURACY)
    return float(calc.singlepoint().get("energy"))


def ase_calculator(level, geometry):
    from tblite.ase import TBLite

    return TBLite(
        method=TBLITE_NAMES[level],
        charge=geometry.charge,
        multiplicity=geometry.multiplicity,
        accuracy=ACCURACY,
        verbosity=0,
    )


@pytest.mark.parametrize("level", ["gfn2-xtb", "gfn1-xtb"])
@pytest.mark.parametrize("geometry", [WATER, HYDROXYL, HYDROXIDE], ids=["water", "oh", "oh-"])
def test_energy_equals_tblites_own_calculator(engine, level, geometry):
    record = engine.compute(geometry, "", [level], EngineSettings())[level]
    assert record.converged and record.error is None
    assert record.energy_hartree == pytest.approx(tblite_energy(level, geometry), abs=1e-8)
    assert record.reference == TBLITE_NAMES[level] and math.isnan(record.s2)


def test_energy_equals_tblites_ase_calculator(engine):
    from ase import Atoms
    from ase.units import Hartree

    atoms = Atoms(WATER.symbols, positions=WATER.positions_angstrom)
    atoms.calc = ase_calculator("gfn2-xtb", WATER)
    record = engine.compute(WATER, "", ["gfn2-xtb"], EngineSettings())["gfn2-xtb"]
    assert record.energy_hartree == pytest.approx(atoms.get_potential_energy() / Hartree, abs=1e-8)


def test_a_walk_restarts_from_its_neighbour_and_gives_the_same_energies(engine):
    walk = engine.start_walk(EngineSettings(), "", ["gfn2-xtb"])
    for r in np.linspace(0.9, 1.3, 5):
        geometry = Geometry(("O", "H"), [[0, 0, 0], [0, 0, r]], charge=-1)
        record = walk.compute(geometry)["gfn2-xtb"]
        assert walk.state is not None  # the SCC result restarts the next point
        assert record.energy_hartree == pytest.approx(tblite_energy("gfn2-xtb", geometry), abs=1e-8)
    walk.restart()
    assert walk.state is None


def test_scc_failure_is_a_failed_record_not_an_exception(engine):
    settings = EngineSettings(scf_max_iterations=1)
    walk = engine.start_walk(settings, "", ["gfn2-xtb"])
    record = walk.compute(WATER)["gfn2-xtb"]
    assert not record.converged and math.isnan(record.energy_hartree)
    assert "not converged" in record.error
    assert walk.state is None


def test_tight_binding_information_and_setup_errors(engine):
    info = method_info("GFN2-xTB")
    assert (info.engine, info.needs_basis, info.has_gradients) == ("tblite", False, True)
    assert EngineSettings().key_dict("gfn2-xtb") == {"conv_tol": 1e-10, "max_cycle": 100}
    with pytest.raises(EngineSetupError, match="built-in basis"):
        engine.start_walk(EngineSettings(), "sto-3g", ["gfn2-xtb"])
    with pytest.raises(EngineSetupError, match="parametrised for H-Rn"):
        engine.compute(Geometry(("Og",), [[0, 0, 0]]), "", ["gfn2-xtb"], EngineSettings())
    with pytest.raises(EngineSetupError, match="cannot have multiplicity"):
        engine.compute(Geometry(("O", "H"), [[0, 0, 0], [0, 0, 0.97]]), "", ["gfn2-xtb"],
                       EngineSettings())  # fmt: skip
    with pytest.raises(EngineSetupError, match="not a PySCF method"):
        get_engine("pyscf").start_walk(EngineSettings(), "sto-3g", ["gfn2-xtb"])


def test_relaxation_reaches_the_minimum_ases_optimiser_finds(engine):
    from ase import Atoms
    from ase.optimize import BFGS
    from ase.units import Hartree

    start = Geometry(WATER.symbols, [[0, 0, 0], [0, -0.80, 0.55], [0, 0.80, 0.55]])
    walk = engine.start_walk(EngineSettings(), "", ["gfn2-xtb"])
    record = walk.relax(start, [])
    info = record.extra["relaxation"]
    assert record.converged and info["converged"] and info["optimizer"] == "geomeTRIC"
    atoms = Atoms(start.symbols, positions=start.positions_angstrom)
    atoms.calc = ase_calculator("gfn2-xtb", start)
    BFGS(atoms, logfile=None).run(fmax=1e-4)
    # Both minima of one surface: energies agree to far below the optimisers' own
    # convergence in energy (geomeTRIC's default 1e-6 Eh).
    assert record.energy_hartree == pytest.approx(atoms.get_potential_energy() / Hartree, abs=1e-6)
    assert record.energy_hartree == pytest.approx(
        tblite_energy("gfn2-xtb", record.geometry), abs=1e-8
    )


def test_constrained_relaxation_keeps_the_angle_and_lowers_the_energy(engine):
    # water bent rigidly to 95 degrees (bonds of 0.958 angstrom), then relaxed at 95
    half, r = math.radians(95.0 / 2), 0.958
    bent = [[0, 0, 0], [0, -r * math.sin(half), r * math.cos(half)],
            [0, r * math.sin(half), r * math.cos(half)]]  # fmt: skip
    start = Geometry(WATER.symbols, bent)
    walk = engine.start_walk(EngineSettings(), "", ["gfn2-xtb"])
    rigid = engine.compute(start, "", ["gfn2-xtb"], EngineSettings())["gfn2-xtb"]
    record = walk.relax(start, [("angle", (1, 0, 2), 95.0)])
    (constraint,) = record.extra["relaxation"]["constraints"]
    assert constraint["final"] == pytest.approx(95.0, abs=1e-6)
    assert record.converged and record.energy_hartree < rigid.energy_hartree
    vectors = record.geometry.positions_angstrom[[1, 2]] - record.geometry.positions_angstrom[0]
    cosine = vectors[0] @ vectors[1] / np.linalg.norm(vectors[0]) / np.linalg.norm(vectors[1])
    assert math.degrees(math.acos(cosine)) == pytest.approx(95.0, abs=1e-6)
