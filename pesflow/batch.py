"""Run one batch: an ordered walk of single points, each made durable at once.

This is what one Snakemake job executes (``python -m pesflow.batch TASK DONE``).
A batch reads its task file (written by :func:`pesflow.run.write_tasks`), skips
every point already in the store, computes the rest in walk order with each
point starting from its neighbour's converged density, and writes one store
record per point as soon as it is finished.  A killed batch therefore loses
only the point in flight; the rerun computes only what is missing.  A point
that fails is recorded with its error text; the batch goes on.

The done marker written at the end lists the batch's points and their status;
Snakemake uses it as the job's output.
"""

from __future__ import annotations

import argparse
import json
import logging
import os
import sys
import time
from pathlib import Path

import numpy as np

log = logging.getLogger("pesflow.batch")

TASK_FORMAT = "pesflow-batch"
TASK_VERSION = 1


def read_task(path) -> dict:
    """Read a batch task file written by :func:`pesflow.run.write_tasks`."""
    task = json.loads(Path(path).read_text())
    if task.get("format") != TASK_FORMAT or task.get("version") != TASK_VERSION:
        raise ValueError(f"{path}: not a pesflow batch task of version {TASK_VERSION}")
    return task


def _record(task, point, result, engine):
    from pesflow.store import make_record

    return make_record(
        key=point["keys_all"][result.method],
        method=result.method,
        basis=task["basis"],
        charge=task["charge"],
        multiplicity=task["multiplicity"],
        symbols=" ".join(task["symbols"]),
        positions_angstrom=np.asarray(point["positions"], dtype=float).ravel().tolist(),
        energy_hartree=float(result.energy_hartree),
        converged=bool(result.converged),
        scf_cycles=int(result.scf_cycles),
        wall_s=float(result.wall_s),
        step_wall_s=float(result.step_wall_s),
        s2=float(result.s2),
        reference=result.reference,
        engine=engine.name,
        engine_version=engine.version,
        settings_json=json.dumps(point["settings"].key_dict(result.method), sort_keys=True),
        attempts_json=json.dumps(result.attempts) if result.attempts else None,
        extra_json=None,
        error=result.error,
        created_unix=time.time(),
    )


def _failure(method, reference, message):
    from pesflow.engine import PointResult

    return PointResult(
        method=method,
        energy_hartree=float("nan"),
        converged=False,
        scf_cycles=0,
        wall_s=0.0,
        step_wall_s=0.0,
        s2=float("nan"),
        reference=reference,
        attempts=[],
        error=message,
    )


def run_batch(task_path, done_path, threads: int = 1) -> dict:
    """Compute every missing point of one batch and write its done marker.

    Parameters
    ----------
    task_path : path of the batch's task JSON.
    done_path : path of the done marker (JSON) written at the end.
    threads : PySCF threads for this batch (Snakemake's ``threads``).

    Returns the marker's content: counts of points computed, skipped, failed.
    """
    from pesflow import keys
    from pesflow.engine import EngineSettings, get_engine
    from pesflow.store import PointStore

    task = read_task(task_path)
    engine = get_engine(task["engine"])
    if engine.version != task["engine_version"]:
        raise RuntimeError(
            f"this batch was planned for {task['engine']} {task['engine_version']} but "
            f"{engine.version} is installed here; use the same environment everywhere"
        )
    settings = EngineSettings(
        **task["settings"], threads=threads, max_memory_mb=int(task.get("max_memory_mb", 4000))
    )
    store = PointStore(task["store"])
    symbols = tuple(task["symbols"])
    counts = {"computed": 0, "skipped": 0, "failed": 0}
    status = {}
    guess = None
    previous_walk = None
    t0 = time.time()
    recompute = set(task.get("recompute", ()))
    for point in task["points"]:
        wanted = point["keys"]
        missing = [m for m, k in wanted.items() if k in recompute or not store.has(k)]
        counts["skipped"] += len(wanted) - len(missing)
        for m in wanted:
            if m not in missing:
                status[wanted[m]] = "cached"
        if not missing:
            continue
        if previous_walk is None or abs(point["walk"] - previous_walk) > 1:
            guess = None  # a neighbour's density is a good guess; a distant one is not
        positions = np.asarray(point["positions"], dtype=float)
        from pesflow.engine import Geometry

        geometry = Geometry(
            symbols=symbols,
            positions_angstrom=positions,
            charge=task["charge"],
            multiplicity=task["multiplicity"],
        )
        try:
            results, guess = engine.compute(geometry, task["basis"], missing, settings, guess=guess)
        except Exception as exc:  # recorded, never allowed to stop the batch
            message = f"{type(exc).__name__}: {exc}".splitlines()[0]
            results = {m: _failure(m, "", message) for m in missing}
            guess = None
        previous_walk = point["walk"]
        point["keys_all"] = dict(wanted)
        point["settings"] = settings
        for method, result in results.items():
            if method not in point["keys_all"]:
                # e.g. the CCSD part of a CCSD(T) calculation: keep it, it is free
                point["keys_all"][method] = keys.point_key(
                    symbols,
                    positions,
                    task["charge"],
                    task["multiplicity"],
                    method,
                    task["basis"],
                    settings.key_dict(method),
                    engine.name,
                    engine.version,
                )
            elif method not in missing:
                continue
            store.write(_record(task, point, result, engine))
            if method in wanted:
                counts["computed"] += 1
                status[wanted[method]] = "done" if result.converged else "failed"
                if not result.converged:
                    counts["failed"] += 1
                    log.warning(
                        "point %s (%s, walk %d) failed: %s",
                        wanted[method],
                        method,
                        point["walk"],
                        result.error,
                    )
    marker = {"batch_id": task["batch_id"], "wall_s": time.time() - t0, **counts, "points": status}
    done_path = Path(done_path)
    done_path.parent.mkdir(parents=True, exist_ok=True)
    tmp = done_path.with_name("." + done_path.name + ".tmp")
    tmp.write_text(json.dumps(marker, indent=1))
    os.replace(tmp, done_path)
    return marker


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(
        prog="python -m pesflow.batch", description="Run one pesflow batch (used by Snakemake)."
    )
    parser.add_argument("task", help="batch task JSON")
    parser.add_argument("done", help="done marker to write")
    parser.add_argument("--threads", type=int, default=1)
    args = parser.parse_args(argv)
    logging.basicConfig(level=logging.INFO, format="%(asctime)s %(levelname)s %(message)s")
    os.environ.setdefault("OMP_NUM_THREADS", str(args.threads))
    marker = run_batch(args.task, args.done, threads=args.threads)
    log.info(
        "batch %s: %d computed, %d failed, %d cached, %.1f s",
        marker["batch_id"],
        marker["computed"],
        marker["failed"],
        marker["skipped"],
        marker["wall_s"],
    )
    return 0


if __name__ == "__main__":
    sys.exit(main())
