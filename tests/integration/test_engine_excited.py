"""Excited-state levels against PySCF itself and against a measured constant.

References:
* plain PySCF at the same geometry: ``scf.RHF``/``dft.RKS`` then ``.TDA()``,
  ``.TDDFT()``, ``.TDHF()`` (same number of states, spin, Davidson tolerance), and
  ``cc.eom_rccsd.EOMEESinglet`` on ``cc.CCSD``;
* PySCF's full CI (``fci.FCI``): for two electrons EOM-EE-CCSD is exact, so its
  states equal the singlet FCI roots in the same basis;
* H2 B 1Sigma_u+: T_e = 91700.0 cm-1, measured (Huber & Herzberg, Constants of
  Diatomic Molecules, 1979; value from memory).
"""

import numpy as np
import pytest

from pesflow.analysis.derived import summarize_curve
from pesflow.analysis.states import excitation_energies, follow_states
from pesflow.engine import EngineSettings, Geometry, get_engine
from pesflow.units import HARTREE_TO_EV

pytestmark = pytest.mark.integration

LIH = Geometry(("Li", "H"), [[0, 0, 0], [0, 0, 1.6]])


def walk_energies(method, basis, geometry):
    walk = get_engine().start_walk(EngineSettings(), basis, [method])
    records = walk.compute(geometry)
    states = sorted((k for k in records if "#" in k), key=lambda k: int(k.split("#")[1]))
    return [records[k] for k in states]


def direct_td(mf, kind, nstates, singlet=True):
    from pesflow.engine.pyscf.excited import DAVIDSON_TOLERANCE_HARTREE

    td = getattr(mf, kind)()
    td.nstates, td.conv_tol, td.singlet = nstates, DAVIDSON_TOLERANCE_HARTREE, singlet
    td.kernel()
    return td


@pytest.mark.parametrize(
    "method, functional, kind, singlet",
    [
        ("cis(singlets=3)", None, "TDA", True),
        ("tdhf(triplets=2)", None, "TDHF", False),
        ("tda-b3lyp(singlets=3)", "b3lyp", "TDA", True),
        ("tddft-pbe0(triplets=2)", "pbe0", "TDDFT", False),
    ],
)
def test_states_equal_direct_pyscf(method, functional, kind, singlet):
    from pyscf import dft, gto, scf

    mol = gto.M(atom="Li 0 0 0; H 0 0 1.6", basis="6-31g", verbose=0)
    if functional is None:
        mf = scf.RHF(mol)
    else:
        mf = dft.RKS(mol)
        mf.xc = functional
    mf.conv_tol = 1e-10
    mf.kernel()
    records = walk_energies(method, "6-31g", LIH)
    td = direct_td(mf, kind, len(records) - 1, singlet)
    energies = np.array([r.energy_hartree for r in records])
    # the same SCF to 1e-10 and the same Davidson roots (tolerance 1e-7 hartree)
    assert energies[0] == pytest.approx(mf.e_tot, abs=1e-8)
    assert energies[1:] == pytest.approx(mf.e_tot + td.e, abs=1e-7)
    strengths = [r.extra["state"]["oscillator_strength"] for r in records[1:]]
    expected = td.oscillator_strength() if singlet else np.zeros(len(td.e))
    assert strengths == pytest.approx(expected, abs=1e-6)
    excitation = [r.extra["state"]["excitation_energy_ev"] for r in records[1:]]
    assert excitation == pytest.approx(td.e * HARTREE_TO_EV, abs=1e-5)
    assert [r.extra["state"]["label"] for r in records] == [
        "S0",
        *[("S" if singlet else "T") + str(k) for k in range(1, len(records))],
    ]


def test_eom_ccsd_equals_direct_pyscf_and_two_electron_fci():
    from pyscf import cc, fci, gto, scf
    from pyscf.cc import eom_rccsd

    mol = gto.M(atom="H 0 0 0; H 0 0 0.9", basis="6-31g**", verbose=0)
    mf = scf.RHF(mol).run(conv_tol=1e-10)
    mycc = cc.CCSD(mf).run(conv_tol=1e-10)
    eom = eom_rccsd.EOMEESinglet(mycc)
    eom.conv_tol = 1e-7
    e_eom, _ = eom.kernel(nroots=3)
    records = walk_energies(
        "eom-ccsd(singlets=3)", "6-31g**", Geometry(("H", "H"), mol.atom_coords(unit="Angstrom"))
    )
    energies = np.array([r.energy_hartree for r in records])
    assert energies == pytest.approx([mycc.e_tot, *(mycc.e_tot + e_eom)], abs=1e-7)
    # two electrons: CCSD and EOM-CCSD are full CI; the singlet roots of FCI
    solver = fci.FCI(mf)
    solver.nroots = 8
    e_fci, vectors = solver.kernel()
    spins = [solver.spin_square(v, mol.nao, mol.nelectron)[0] for v in vectors]
    singlets = [e for e, s2 in zip(e_fci, spins) if abs(s2) < 1e-6]
    assert energies == pytest.approx(singlets[:4], abs=1e-6)


def test_followed_state_keeps_its_character_through_a_crossing():
    # LiH, CIS/6-31G, 2.5-3.1 A: a Sigma state (non-degenerate) comes down through the
    # lowest excited Pi pair above the ionic state (a degenerate pair; measured here:
    # crossing near 2.79 A).  Numbered by energy, state 5 is a Pi component at 2.5 A
    # and the Sigma state at 3.1 A; followed by overlaps, curve 7 stays the Sigma
    # state: never degenerate with another state.  Degeneracy (a Pi state comes in a
    # pair) tells the characters apart independently of the overlaps.
    walk = get_engine().start_walk(EngineSettings(), "6-31g", ["cis(singlets=7)"])
    r = np.round(np.arange(2.5, 3.15, 0.1), 3)
    energies, overlaps = [], []
    for x in r:
        records = walk.compute(Geometry(("Li", "H"), [[0, 0, 0], [0, 0, x]]))
        states = [records[f"cis(singlets=7)#{k}"] for k in range(8)]
        energies.append([s.energy_hartree for s in states])
        stored = [s.extra["state"].get("neighbour_overlaps") for s in states[1:]]
        overlaps.append(None if stored[0] is None else np.array(stored).T)
    energies = np.array(energies)
    following = follow_states(overlaps, 7, energies)
    assert following.gaps == []

    def degenerate(i, k):  # adiabatic state k (1-based) at point i has a partner
        e = energies[i, 1:]
        return int(np.sum(np.abs(e - e[k - 1]) < 1e-5)) > 1

    first, last = 0, len(r) - 1
    assert degenerate(first, 5) and not degenerate(last, 5)  # energy order: hops
    sigma = following.assignment[:, 6]  # curve 7
    assert not any(degenerate(i, k) for i, k in enumerate(sigma))
    assert sigma[first] == 7 and sigma[last] == 5


def test_h2_b_state_adiabatic_excitation_against_measured():
    # EOM-CCSD is full CI for H2; the basis aug-cc-pVDZ misses part of the B state's
    # diffuse ionic character (measured here: T_e 90564 cm-1 on a 0.05 A grid).
    # Tolerance 2000 cm-1 (0.25 eV): basis incompleteness of a double-zeta set for an
    # excited state (common practice); Born-Oppenheimer corrections are ~100 cm-1.
    walk = get_engine().start_walk(EngineSettings(), "aug-cc-pvdz", ["eom-ccsd(singlets=1)"])
    r = np.round(np.arange(0.6, 1.65, 0.1), 3)
    energies = []
    for x in r:
        records = walk.compute(Geometry(("H", "H"), [[0, 0, 0], [0, 0, x]]))
        energies.append([records[f"eom-ccsd(singlets=1)#{k}"].energy_hartree for k in (0, 1)])
    energies = np.array(energies)
    mu = 1.00782503207 / 2  # amu, H atoms
    rows = [summarize_curve("distance", r, energies[:, k], reduced_mass_amu=mu, diatomic=True)
            for k in (0, 1)]  # fmt: skip
    assert rows[1]["minimum_bracketed"]
    minima = [(row["r_e_angstrom"], row["e_min_hartree"]) for row in rows]
    out = excitation_energies(r, energies[:, 0], energies[:, 1], minima[0], minima[1])
    assert out["t_e_cm-1"] == pytest.approx(91700.0, abs=2000.0)
    # B state r_e 1.2928 A (Huber & Herzberg 1979, from memory); a 0.1 A grid, same basis
    assert rows[1]["r_e_angstrom"] == pytest.approx(1.2928, abs=0.05)
    assert out["t_v_ev"] > out["t_e_ev"]  # the vertical excitation lies above T_e


def test_a_failed_scf_is_recorded_on_every_state():
    # one SCF iteration, one rung: cannot converge O2 (a failure, never an exception)
    settings = EngineSettings(scf_max_iterations=1, scf_ladder=("default",))
    walk = get_engine().start_walk(settings, "sto-3g", ["cis(singlets=2)#1"])
    records = walk.compute(Geometry(("O", "O"), [[0, 0, 0], [0, 0, 1.2]]))
    assert sorted(records) == [f"cis(singlets=2)#{k}" for k in range(3)]
    assert not any(r.converged for r in records.values())
    assert all("SCF did not converge" in r.error for r in records.values())


def test_triplets_on_an_open_shell_are_a_recorded_error():
    walk = get_engine().start_walk(EngineSettings(), "sto-3g", ["cis(triplets=2)"])
    records = walk.compute(Geometry(("O", "H"), [[0, 0, 0], [0, 0, 0.97]], multiplicity=2))
    assert all(not r.converged and "closed-shell" in r.error for r in records.values())
