"""Shared helpers of the workflow tests: the pesflow command as a user runs it, and
the same point computed directly with PySCF as the reference."""

import os
import subprocess
import sys

import numpy as np

#: A campaign of 20 tiny points (2 molecules x 5 geometries x hf and mp2 at sto-3g),
#: a closed and an open shell, for tests of the machinery rather than the chemistry.
SMALL_CAMPAIGN = """\
campaign: {name}
molecules:
  dihydrogen: {{builtin: H2}}
  hydroxyl: {{xyz: "O 0 0 0\\nH 0 0 0.97", multiplicity: 2}}
scans:
  stretch:
    molecules: [dihydrogen, hydroxyl]
    coordinates:
      - {{type: distance, atoms: [1, 2], from: 0.6, to: 1.2, points: 5}}
levels:
  - {{method: [hf, mp2], basis: sto-3g}}
store: store
"""


def pesflow(*args, check=None, timeout=900, cwd=None):
    """Run ``python -m pesflow ARGS`` (one PySCF thread); assert the exit code if given."""
    env = dict(os.environ, OMP_NUM_THREADS="1")
    proc = subprocess.run(
        [sys.executable, "-m", "pesflow", *args],
        capture_output=True,
        text=True,
        env=env,
        timeout=timeout,
        cwd=cwd,
    )
    if check is not None:
        assert proc.returncode == check, proc.stdout + proc.stderr
    return proc


def direct_energy(row):
    """The same point computed directly with PySCF (RHF/UHF, then MP2 if asked).

    Reference: plain pyscf.scf.RHF / UHF and pyscf.mp.MP2 at the stored geometry, with
    the same basis and convergence threshold.
    """
    from pyscf import gto, mp, scf

    symbols = row["symbols"].split()
    xyz = np.asarray(row["positions_angstrom"]).reshape(-1, 3)
    mol = gto.M(
        atom=list(zip(symbols, xyz.tolist())),
        basis=row["basis"],
        unit="Angstrom",
        spin=int(row["multiplicity"]) - 1,
        charge=int(row["charge"]),
        verbose=0,
    )
    mf = (scf.RHF if mol.spin == 0 else scf.UHF)(mol)
    mf.conv_tol = 1e-10
    e = mf.kernel()
    if row["method"] == "mp2":
        e = mp.MP2(mf).run().e_tot
    return e
