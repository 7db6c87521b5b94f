"""A batch walk with the real PySCF engine and the real store.

Reference: plain PySCF RHF at each geometry (pyscf.scf.RHF, same basis and
convergence threshold).
"""

import json

import numpy as np
import pytest

from pesflow.engine import EngineSettings
from pesflow.execution import batch
from pesflow.plan import keys
from pesflow.plan.expand import engine_version
from pesflow.store.point_store import PointStore

pytestmark = pytest.mark.integration


def _task(tmp_path, distances):
    settings = EngineSettings()
    version = engine_version("pyscf")
    points = []
    for walk, r in enumerate(distances):
        positions = [[0.0, 0.0, 0.0], [0.0, 0.0, float(r)]]
        key = keys.point_key(
            ("H", "F"),
            np.array(positions),
            0,
            1,
            "hf",
            "6-31g",
            settings.key_dict("hf"),
            "pyscf",
            version,
        )
        points.append({"walk": walk, "positions": positions, "keys": {"hf": key}})
    task = {
        "format": batch.TASK_FORMAT,
        "version": batch.TASK_VERSION,
        "batch_id": "t",
        "store": str(tmp_path / "store"),
        "engine": "pyscf",
        "engine_version": version,
        "settings": settings.key_dict(),
        "basis": "6-31g",
        "family": "hf",
        "symbols": ["H", "F"],
        "charge": 0,
        "multiplicity": 1,
        "points": points,
    }
    path = tmp_path / "task.json"
    path.write_text(json.dumps(task))
    return path, task


def _rhf(r):
    from pyscf import gto, scf

    mol = gto.M(atom=f"H 0 0 0; F 0 0 {r}", basis="6-31g", verbose=0)
    mf = scf.RHF(mol)
    mf.conv_tol = 1e-10
    return mf.kernel()


def test_walk_stores_every_point_and_skips_them_on_rerun(tmp_path):
    distances = np.linspace(0.8, 1.1, 7)
    path, task = _task(tmp_path, distances)
    marker = batch.run_batch(path, tmp_path / "done.json")
    assert marker["computed"] == 7 and marker["failed"] == 0
    store = PointStore(tmp_path / "store")
    for point, r in zip(task["points"], distances):
        assert store.get(point["keys"]["hf"])["energy_hartree"] == pytest.approx(_rhf(r), abs=1e-8)
    again = batch.run_batch(path, tmp_path / "done2.json")
    assert again["computed"] == 0 and again["skipped"] == 7


def test_backward_walk_replaces_a_higher_solution_with_the_lower_one(tmp_path):
    """A forward walk that landed on a higher solution at one point (injected here as if
    the SCF had converged to an excited determinant) is walked back over, and the lower
    energy is kept with the reason in the record's attempts."""
    distances = np.linspace(0.8, 1.2, 9)
    path, task = _task(tmp_path, distances)
    walk = batch._Walk(task, threads=1)
    computed = []
    for i, point in enumerate(task["points"]):
        results = walk.compute(point, ["hf"])
        if i == 4:
            results["hf"].energy_hartree += 0.05  # the injected higher solution
        walk.write(point, results["hf"])
        computed.append(batch._Computed(index=i, methods=["hf"], results=results))
    status = {}
    improved = batch._backward_sweep(walk, computed, task["points"], status)
    assert improved == 1
    record = walk.store.get(task["points"][4]["keys"]["hf"])
    assert record["energy_hartree"] == pytest.approx(_rhf(distances[4]), abs=1e-8)
    attempts = json.loads(record["attempts_json"])
    assert attempts[-1]["rung"] == "backward-walk"
    assert attempts[-1]["replaced_energy_hartree"] == pytest.approx(
        record["energy_hartree"] + 0.05, abs=1e-8
    )
