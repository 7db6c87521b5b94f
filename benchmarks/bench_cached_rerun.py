"""Benchmark 2: ``pesflow run`` of a 10,000-point campaign whose points are all stored.

Usage: python benchmarks/bench_cached_rerun.py [--repeats N] [--json OUT]

Computing 10,000 real points would take hours, and a cached rerun never looks at the
numbers, so the store is filled with synthetic but schema-valid records for the
campaign's planned keys (real keys, geometries, methods; made-up energies), written
one point at a time through ``PointStore.write`` and compacted every 5,000 points, as a
store grown over a few runs is.  The campaign: 12 diatomic stretches of 150 points and
two 25 x 14 (angle x bond) grids, at hf and mp2 with cc-pVDZ and cc-pVTZ.

Measured: the whole ``pesflow run SPEC --cores 2`` process (start-up, spec, plan, store
lookup, "nothing to compute", compaction check, the final status table), which must
start no Snakemake and no batch.  Goal: <= 5 s.
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
from pathlib import Path

from common import (
    check_ok,
    large_campaign_yaml,
    machine,
    median,
    pesflow_cmd,
    populate_with_writes,
    print_table,
    run_child,
    write_result,
)

GOAL_S = 5.0


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=5)
    parser.add_argument("--json", default=None, help="also write the figures here")
    args = parser.parse_args(argv)

    work = Path(tempfile.mkdtemp(prefix="pesflow-bench-cached-"))
    spec = work / "campaign.yaml"
    spec.write_text(large_campaign_yaml("bench-cached", 12, 150, 2, 25, 14))
    print(f"benchmark 2: fully cached rerun, {machine()}")
    print(f"work folder: {work}")
    start = time.perf_counter()
    n = populate_with_writes(spec)
    print(
        f"store filled with {n} SYNTHETIC records (valid schema, real keys, made-up "
        f"energies) via PointStore.write + compact in {time.perf_counter() - start:.0f} s"
    )

    runs = []
    for r in range(args.repeats):
        m = check_ok(
            run_child(pesflow_cmd("run", "campaign.yaml", "--cores", "2"), cwd=work), "pesflow run"
        )
        if "nothing to compute" not in m.stdout or f"{n} done, 0 failed, 0 pending" not in m.stdout:
            raise SystemExit(f"the rerun was not fully cached:\n{m.stdout[-3000:]}")
        runs.append(m)
        print(
            f"  repeat {r + 1}: {m.wall_s:.2f} s, {m.maxrss_mib:.0f} MiB "
            f"(load average {m.load_before:.1f} before)",
            flush=True,
        )
    if (work / "results" / "bench-cached" / ".pesflow" / "workflow" / "tasks").exists():
        raise SystemExit("the cached rerun wrote batch tasks")

    # the same process start and imports, doing nothing: the floor under any pesflow verb
    floor = [run_child(pesflow_cmd("--version"), cwd=work).wall_s for _ in range(args.repeats)]
    t = median([m.wall_s for m in runs])
    rows = [
        [
            "pesflow run, all points cached",
            f"{t:.2f}",
            f"{min(m.wall_s for m in runs):.2f}-{max(m.wall_s for m in runs):.2f}",
            f"{max(m.maxrss_mib for m in runs):.0f}",
        ],
        [
            "pesflow --version (start-up floor)",
            f"{median(floor):.2f}",
            f"{min(floor):.2f}-{max(floor):.2f}",
            "-",
        ],
    ]
    print_table(
        f"benchmark 2: {n} points, median of {args.repeats}",
        ["", "wall s (median)", "range", "peak RSS MiB"],
        rows,
    )
    verdict = "met" if t <= GOAL_S else "MISSED"
    print(
        f"cached rerun: {t:.2f} s = {t / GOAL_S:.2f} of the goal (<= {GOAL_S} s: {verdict}); "
        f"{1e3 * t / n:.2f} ms per point"
    )
    write_result(
        args.json,
        {
            "name": "cached rerun",
            "points": n,
            "repeats": args.repeats,
            "wall_s": t,
            "floor_s": median(floor),
            "goal_s": GOAL_S,
            "maxrss_mib": max(m.maxrss_mib for m in runs),
        },
    )
    return 0


if __name__ == "__main__":
    sys.exit(main())
