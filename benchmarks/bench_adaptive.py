"""Benchmark 6: adaptive grids against fixed grids, on accuracy and points (not time).

One real ``pesflow run`` of a campaign where each molecule is scanned twice over the same
range: once with ``refine`` (a 5-point coarse grid, targets omega_e 0.5 cm-1 and r_e 1e-4 A,
at most 9 points) and once on fixed grids of 9, 11, 15 and 20 points; and the H-O-O-H torsion
of H2O2 with ``refine: {barrier_kcal_mol: 0.05}`` from a 60-degree coarse grid against a
10-degree grid.  Every number is compared with PySCF computed directly:

* diatomics (HF/cc-pVDZ): r_e is the root of PySCF's analytic RHF gradient along the bond
  (Brent's method, SCF to 1e-12 hartree); omega_e is pyscf.hessian's analytic RHF Hessian
  turned into wavenumbers by pyscf.hessian.thermo.harmonic_analysis at that r_e (same
  isotope masses as pesflow);
* torsion (HF/6-31G*, rigid rotation of one H of ASE's g2 H2O2): the energy at the trans
  maximum (180 degree, stationary by symmetry) minus the energy at the minimum found by
  Brent's bounded method on PySCF energies.

Goal (issue 11): omega_e within 1 cm-1 and r_e within 1e-4 A with at most 9 points per
curve; the torsion barrier within 0.05 kcal/mol with fewer points than a 10-degree grid.

    OMP_NUM_THREADS=1 python benchmarks/bench_adaptive.py     # ~5 min on 2 cores
"""

from __future__ import annotations

import argparse
import sys
import tempfile
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parent))
from common import check_ok, machine, pesflow_cmd, print_table, run_child  # noqa: E402

#: name, g2 builtin, the two elements (pesflow order), scan range (A) around the minimum
DIATOMICS = (
    ("hydrogen_fluoride", "HF", ("F", "H"), (0.70, 1.30)),
    ("carbon_monoxide", "CO", ("O", "C"), (0.85, 1.45)),
    ("dinitrogen", "N2", ("N", "N"), (0.80, 1.40)),
)
FIXED = (9, 11, 15, 20)
BASIS = "cc-pvdz"
TORSION_BASIS = "6-31g*"


def campaign_yaml() -> str:
    lines = ["campaign: bench-adaptive", "molecules:"]
    lines += [f"  {name}: {{builtin: {g2}}}" for name, g2, _, _ in DIATOMICS]
    lines += ["  hydrogen_peroxide: {builtin: H2O2}", "scans:"]
    for name, _, _, (lo, hi) in DIATOMICS:
        distance = f"type: distance, atoms: [1, 2], from: {lo}, to: {hi}"
        coordinate = "{{" + distance + ", points: {n}}}"
        lines += [
            f"  {name}-adaptive:",
            f"    molecules: [{name}]",
            f"    coordinates: [{coordinate.format(n=5)}]",
            "    refine: {omega_e_cm-1: 0.5, r_e_angstrom: 1.0e-4, max_points: 9}",
        ]
        for n in FIXED:
            lines += [
                f"  {name}-fixed-{n}:",
                f"    molecules: [{name}]",
                f"    coordinates: [{coordinate.format(n=n)}]",
            ]
    dihedral = "{{type: dihedral, atoms: [3, 1, 2, 4], from: {a}, to: {b}, step: {s}}}"
    lines += [
        "  torsion-adaptive:",
        "    molecules: [hydrogen_peroxide]",
        f"    coordinates: [{dihedral.format(a=10, b=310, s=60)}]",
        "    refine: {barrier_kcal_mol: 0.05, max_points: 20}",
        "    levels: [{method: hf, basis: " + TORSION_BASIS + "}]",
        "  torsion-fixed-10:",
        "    molecules: [hydrogen_peroxide]",
        f"    coordinates: [{dihedral.format(a=0, b=350, s=10)}]",
        "    levels: [{method: hf, basis: " + TORSION_BASIS + "}]",
        "levels:",
        f"  - {{method: hf, basis: {BASIS}}}",
        "store: store",
    ]
    return "\n".join(lines) + "\n"


def _rhf(symbols, r_angstrom):
    from pyscf import gto, scf

    mol = gto.M(atom=f"{symbols[0]} 0 0 0; {symbols[1]} 0 0 {r_angstrom}", basis=BASIS, verbose=0)
    mf = scf.RHF(mol)
    mf.conv_tol, mf.conv_tol_grad = 1e-12, 1e-9
    mf.kernel()
    return mol, mf


def diatomic_reference(symbols, r_guess):
    """(r_e, omega_e) from PySCF's analytic gradient root and analytic Hessian."""
    from pyscf.hessian import thermo
    from scipy.optimize import brentq

    from pesflow.units import isotope_mass

    def gradient(r):
        return float(_rhf(symbols, r)[1].nuc_grad_method().kernel()[1, 2])

    r_e = brentq(gradient, r_guess - 0.08, r_guess + 0.08, xtol=1e-11)
    mol, mf = _rhf(symbols, r_e)
    masses = np.array([isotope_mass(s) for s in symbols])
    freq = thermo.harmonic_analysis(mol, mf.Hessian().kernel(), mass=masses)["freq_wavenumber"]
    return r_e, float(np.max(np.real(freq)))


def peroxide_energy(phi_degree):
    from ase.build import molecule
    from pyscf import gto, scf

    atoms = molecule("H2O2")
    atoms.set_dihedral(2, 0, 1, 3, phi_degree, indices=[3])
    mol = gto.M(
        atom=[(s, tuple(p)) for s, p in zip(atoms.get_chemical_symbols(), atoms.positions)],
        basis=TORSION_BASIS,
        verbose=0,
    )
    mf = scf.RHF(mol)
    mf.conv_tol = 1e-11
    return float(mf.kernel())


def torsion_reference():
    from scipy.optimize import minimize_scalar

    from pesflow.units import convert_energy

    best = minimize_scalar(
        peroxide_energy, bounds=(100.0, 150.0), method="bounded", options={"xatol": 1e-4}
    )
    return float(convert_energy(peroxide_energy(180.0) - best.fun, "kcal_mol"))


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--cores", type=int, default=2)
    args = parser.parse_args(argv)
    folder = Path(tempfile.mkdtemp(prefix="pesflow-bench-adaptive-"))
    print(f"folder: {folder}\nmachine: {machine()}")
    spec = folder / "campaign.yaml"
    spec.write_text(campaign_yaml())
    run = check_ok(
        run_child(pesflow_cmd("run", str(spec), "--cores", str(args.cores)), cwd=folder),
        "pesflow run",
    )
    print(f"pesflow run: {run.wall_s:.1f} s wall, {run.cpu_s:.1f} CPU s")
    check_ok(
        run_child(pesflow_cmd("export", str(spec), "--what", "summary", "-o", "s.csv"), cwd=folder),
        "pesflow export",
    )
    summary = pd.read_csv(folder / "s.csv").set_index("scan")
    rows = []
    for name, _, symbols, _ in DIATOMICS:
        guess = float(summary.loc[f"{name}-fixed-20", "r_e_angstrom"])
        r_e, omega = diatomic_reference(symbols, guess)
        for grid in ("adaptive", *(f"fixed-{n}" for n in FIXED)):
            s = summary.loc[f"{name}-{grid}"]
            rows.append(
                [
                    name,
                    grid,
                    int(s["n_done"]),
                    f"{s['omega_e_cm-1'] - omega:+.3f}",
                    f"{s['u_omega_e_cm-1']:.2g}",
                    f"{s['r_e_angstrom'] - r_e:+.1e}",
                    f"{s['u_r_e_angstrom']:.1g}",
                ]
            )
    print_table(
        f"diatomics, HF/{BASIS}: errors against PySCF's analytic gradient root and Hessian",
        ["molecule", "grid", "points", "omega_e error", "u(omega_e)", "r_e error", "u(r_e)"],
        rows,
    )
    barrier = torsion_reference()
    rows = []
    for grid in ("adaptive", "fixed-10"):
        s = summary.loc[f"torsion-{grid}"]
        rows.append(
            [
                grid,
                int(s["n_done"]),
                f"{s['barrier_kcal_mol']:.4f}",
                f"{s['barrier_kcal_mol'] - barrier:+.4f}",
                f"{s['u_barrier_kcal_mol']:.1g}",
            ]
        )
    print_table(
        f"H2O2 torsion, HF/{TORSION_BASIS}: barrier (kcal/mol) against direct energies "
        f"({barrier:.4f})",
        ["grid", "points", "barrier", "error", "u"],
        rows,
    )
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
