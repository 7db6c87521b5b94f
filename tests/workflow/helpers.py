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


def run_and_export(folder, spec_text, *, cores=1, report=False, suffix="csv"):
    """Write ``spec_text`` as ``folder/campaign.yaml``, run it on ``cores`` cores and
    export its points and summary (``suffix``: csv or parquet); with ``report``, build the
    report into ``folder/report``.  Returns the points and the summary as DataFrames."""
    import pandas as pd

    spec = folder / "campaign.yaml"
    spec.write_text(spec_text)
    pesflow("run", str(spec), "--cores", str(cores), check=0, cwd=folder, timeout=1200)
    for what in ("points", "summary"):
        out = str(folder / f"{what}.{suffix}")
        pesflow("export", str(spec), "--what", what, "-o", out, check=0, cwd=folder)
    if report:
        pesflow("report", str(spec), "-o", str(folder / "report"), check=0, cwd=folder)
    read = pd.read_csv if suffix == "csv" else pd.read_parquet
    return read(folder / f"points.{suffix}"), read(folder / f"summary.{suffix}")


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


def store_failed_hf_point(campaign, plan, gs, target):
    """Store the record a failed HF/STO-3G SCF leaves for the point ``target`` (a row of the
    points table) of geometry set ``gs``: what a real failure writes, without waiting for one."""
    from pesflow.store import PointStore, make_record

    symbols, positions, charge, mult = plan.geometry(gs.set_id, int(target["walk"]))
    PointStore(campaign.store_path).write(
        make_record(
            key=target["key"],
            method="hf",
            basis="sto-3g",
            charge=charge,
            multiplicity=mult,
            symbols=" ".join(symbols),
            positions_angstrom=positions,
            energy_hartree=float("nan"),
            converged=False,
            scf_cycles=100,
            wall_s=1.5,
            step_wall_s=1.5,
            s2=float("nan"),
            reference="RHF",
            engine="pyscf",
            engine_version=plan.engine_version,
            settings_json=plan.method_key("hf"),
            error="SCF did not converge in 100 cycles",
        )
    )
