"""A careful hand-written scan script, as a competent user writes it for two cores.

Usage: python benchmarks/careful_script.py WALKS.json OUT.json [--processes 2]

What makes it careful (and the fair opponent for ``pesflow run --cores 2``):

* a pool of two worker processes, each with one OpenMP thread (set in the environment
  before numpy or PySCF is imported);
* one SCF per geometry and basis, shared by every method on top of it (hf, mp2,
  ccsd(t));
* each geometry of a walk starts from the converged density of the previous one;
* the same convergence thresholds as pesflow's defaults (SCF and CCSD energy to
  1e-10 hartree), so that both sides do the same work and only overhead differs;
* the most expensive walks (most electrons, largest basis) go to the pool first, so
  that the run does not end with one long walk on one core.

WALKS.json (written by bench_throughput.py from pesflow's own plan, so that both sides
compute exactly the same geometries) holds one entry per walk: a name, symbols,
charge, multiplicity, basis, the methods, and the geometries in angstrom in walk
order.  OUT.json receives the energies (hartree) keyed ``name|method/basis|index`` and
the time spent inside the pool.
"""

import os

os.environ["OMP_NUM_THREADS"] = "1"  # before numpy / PySCF are imported

import json  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402
from multiprocessing import Pool  # noqa: E402

from pyscf import cc, gto, mp, scf  # noqa: E402  (imported once; the pool's forks share it)

CONV_TOL = 1e-10  # pesflow's default SCF and CCSD threshold (hartree)


def run_walk(walk):
    """Every method at every geometry of one walk; returns {key: energy}."""
    spin = walk["multiplicity"] - 1
    energies, dm = {}, None
    for i, xyz in enumerate(walk["geometries"]):
        mol = gto.M(
            atom=list(zip(walk["symbols"], xyz)),
            basis=walk["basis"],
            charge=walk["charge"],
            spin=spin,
            unit="Angstrom",
            verbose=0,
        )
        mf = scf.RHF(mol) if spin == 0 else scf.UHF(mol)
        mf.conv_tol = CONV_TOL
        mf.chkfile = None
        mf.kernel(dm0=dm)
        dm = mf.make_rdm1()
        prefix = f"{walk['name']}|"
        suffix = f"/{walk['basis']}|{i}"
        for method in walk["methods"]:
            if method == "hf":
                energies[prefix + "hf" + suffix] = mf.e_tot
            elif method == "mp2":
                energies[prefix + "mp2" + suffix] = mp.MP2(mf).run().e_tot
            elif method in ("ccsd", "ccsd(t)"):
                mycc = cc.CCSD(mf)
                mycc.conv_tol = CONV_TOL
                mycc.kernel()
                energies[prefix + "ccsd" + suffix] = mycc.e_tot
                if method == "ccsd(t)":
                    energies[prefix + "ccsd(t)" + suffix] = mycc.e_tot + mycc.ccsd_t()
            else:
                raise ValueError(f"this script does hf, mp2, ccsd and ccsd(t), not {method}")
    return energies


def walk_size(walk):
    """A cost proxy a user would think of: electrons times the basis' zeta level."""
    zeta = {"d": 2, "t": 3, "q": 4}.get(walk["basis"].lower().rsplit("v", 1)[-1][:1], 1)
    heavy = sum(1 for s in walk["symbols"] if s != "H")
    correlated = any(m.startswith("ccsd") for m in walk["methods"])
    return (correlated, zeta, heavy, len(walk["geometries"]))


def main(argv):
    walks_path, out_path = argv[1], argv[2]
    processes = int(argv[argv.index("--processes") + 1]) if "--processes" in argv else 2
    walks = json.loads(open(walks_path).read())["walks"]
    walks.sort(key=walk_size, reverse=True)
    start = time.perf_counter()
    energies = {}
    with Pool(processes) as pool:
        for part in pool.imap_unordered(run_walk, walks, chunksize=1):
            energies.update(part)
    wall_s = time.perf_counter() - start
    with open(out_path, "w") as fh:
        json.dump({"energies": energies, "pool_wall_s": wall_s}, fh)


if __name__ == "__main__":
    main(sys.argv)
