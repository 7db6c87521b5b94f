"""Run the benchmarks one after the other and print the final table.

Usage: python benchmarks/run_all.py [--repeats-fresh N] [--repeats N] [--small]

Each benchmark prints its own figures as it goes; the table at the end puts the headline
figure of each beside its goal, with the peak memory (``ru_maxrss``) of the pesflow
process tree measured in it.  About 30 minutes on 2 cores (``--small``: benchmark 4 at
a quarter size).
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import tempfile
from pathlib import Path

from common import PYTHON, machine, print_table

HERE = Path(__file__).resolve().parent


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats-fresh", type=int, default=3, help="benchmark 1 repeats")
    parser.add_argument("--repeats", type=int, default=5, help="benchmarks 2 and 3 repeats")
    parser.add_argument("--repeats-throughput", type=int, default=3, help="benchmark 4 repeats")
    parser.add_argument("--small", action="store_true", help="benchmark 4 at a quarter size")
    args = parser.parse_args(argv)

    out = Path(tempfile.mkdtemp(prefix="pesflow-bench-all-"))
    jobs = [
        ("bench_fresh_run.py", args.repeats_fresh),
        ("bench_cached_rerun.py", args.repeats),
        ("bench_plan.py", args.repeats),
    ]
    results = []
    for script, repeats in jobs:
        path = out / f"{Path(script).stem}.json"
        print(f"\n=== {script} ===", flush=True)
        subprocess.run(
            [PYTHON, str(HERE / script), "--repeats", str(repeats), "--json", str(path)],
            check=True,
        )
        results.append(json.loads(path.read_text()))
    fresh, cached, plan = results
    path = out / "bench_throughput.json"
    print("\n=== bench_throughput.py ===", flush=True)
    extra = ["--small"] if args.small else []
    subprocess.run(
        [PYTHON, str(HERE / "bench_throughput.py"), "--repeats", str(args.repeats_throughput)]
        + extra
        + ["--json", str(path)],
        check=True,
    )
    throughput = json.loads(path.read_text())
    path = out / "bench_cost.json"
    print("\n=== bench_cost.py ===", flush=True)
    subprocess.run(
        [PYTHON, str(HERE / "bench_cost.py"), "--computed", throughput["work"] + "/configs"]
        + ["--json", str(path)],
        check=True,
    )
    costs = json.loads(path.read_text())

    def verdict(ok):
        return "met" if ok else "MISSED"

    rows = [
        [
            f"1. fresh run, {fresh['points']} points: pesflow / hand loop",
            f"{fresh['ratio']:.2f} ({fresh['pesflow_s']:.1f} s / {fresh['loop_s']:.1f} s)",
            f"<= {fresh['goal']}",
            verdict(fresh["ratio"] <= fresh["goal"]),
            f"{fresh['maxrss_mib']:.0f}",
        ],
        [
            f"2. cached rerun, {cached['points']} points (synthetic store)",
            f"{cached['wall_s']:.2f} s",
            f"<= {cached['goal_s']:g} s",
            verdict(cached["wall_s"] <= cached["goal_s"]),
            f"{cached['maxrss_mib']:.0f}",
        ],
        [
            f"3. plan, {plan['points']} points, {plan['stored']} stored (synthetic)",
            f"{plan['wall_s']:.2f} s ({plan['compacted_wall_s']:.2f} s compacted)",
            f"<= {plan['goal_s']:g} s",
            verdict(plan["wall_s"] <= plan["goal_s"]),
            f"{plan['maxrss_mib']:.0f}",
        ],
    ]
    for name, res in throughput["campaigns"].items():
        rows.append(
            [
                f"4{name}. {res['title']}: pesflow / careful script",
                f"{res['ratio']:.2f} ({res['pesflow_s']:.1f} s / {res['script_s']:.1f} s)",
                f"<= {res['goal']}",
                verdict(res["ratio"] <= res["goal"]),
                "-",
            ]
        )
    first = throughput["campaigns"].get("a", {}).get("first_point_s")
    if first is not None:
        rows.append(["4. first point stored", f"{first:.2f} s", "< 5 s", verdict(first < 5), "-"])
    for spec, res in throughput["cached"].items():
        rows.append(
            [
                f"4. cached rerun of configs/{spec}",
                f"{res['cached_s']:.2f} s",
                "< 1.5 s",
                verdict(res["cached_s"] < 1.5),
                "-",
            ]
        )
    for r in costs["levels"]:
        rows.append(
            [
                f"5. estimate {r['config']} {r['level']}: before / after calibrating",
                f"{r['ratio_before']:.2f} / {r['ratio_after']:.2f}",
                "x2 / +-30 %",
                verdict(0.5 <= r["ratio_before"] <= 2 and abs(r["ratio_after"] - 1) <= 0.3),
                "-",
            ]
        )
    print_table(
        f"pesflow benchmarks, {machine()}",
        ["benchmark", "measured (median)", "goal", "", "4. peak RSS MiB"],
        rows,
    )
    loads = fresh["load_average"]
    print(f"load average before the benchmark 1 runs: {min(loads):.1f}-{max(loads):.1f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
