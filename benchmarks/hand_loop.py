"""The serial loop a chemist would write by hand, to compare ``pesflow run`` against.

Usage: python benchmarks/hand_loop.py POINTS.json OUT.json [--reuse-scf]

POINTS.json (written by bench_fresh_run.py from the campaign's plan, so that both sides
compute exactly the same geometries) holds the levels and one entry per molecule with
its symbols, charge, multiplicity and geometries in Å.  The loop runs, for each molecule,
level and geometry, ``gto.M`` and an SCF from scratch (RHF for closed shells, UHF
otherwise, conv_tol 1e-10 like pesflow) and MP2 on top where the level asks for it.

``--reuse-scf``: the careful variant, one SCF per geometry and basis serving both hf
and mp2 (still serial, still no starting guess from the neighbouring geometry).
OUT.json receives the energies, in hartree, for the cross-check against the store.
"""

import json
import sys
import time

from pyscf import gto, mp, scf


def scf_energy(symbols, xyz, basis, charge, spin):
    mol = gto.M(
        atom=list(zip(symbols, xyz, strict=True)),
        basis=basis,
        charge=charge,
        spin=spin,
        unit="Angstrom",
        verbose=0,
    )
    mf = scf.RHF(mol) if spin == 0 else scf.UHF(mol)
    mf.conv_tol = 1e-10
    mf.kernel()
    return mf


def main(argv):
    points_path, out_path = argv[1], argv[2]
    reuse = "--reuse-scf" in argv
    job = json.loads(open(points_path).read())
    energies = {}
    start = time.perf_counter()
    for molecule in job["molecules"]:
        symbols, charge = molecule["symbols"], molecule["charge"]
        spin = molecule["multiplicity"] - 1
        if reuse:
            for basis in job["bases"]:
                for i, xyz in enumerate(molecule["geometries"]):
                    mf = scf_energy(symbols, xyz, basis, charge, spin)
                    energies[f"{molecule['name']}|hf/{basis}|{i}"] = mf.e_tot
                    if f"mp2/{basis}" in job["levels"]:
                        energies[f"{molecule['name']}|mp2/{basis}|{i}"] = mp.MP2(mf).run().e_tot
            continue
        for level in job["levels"]:
            method, basis = level.split("/")
            for i, xyz in enumerate(molecule["geometries"]):
                mf = scf_energy(symbols, xyz, basis, charge, spin)
                e = mf.e_tot if method == "hf" else mp.MP2(mf).run().e_tot
                energies[f"{molecule['name']}|{level}|{i}"] = e
    wall_s = time.perf_counter() - start
    with open(out_path, "w") as fh:
        json.dump({"energies": energies, "loop_wall_s": wall_s}, fh)


if __name__ == "__main__":
    main(sys.argv)
