"""Benchmark 5: the cost model's estimates against real runs of the shipped configs.

Usage: python benchmarks/bench_cost.py [--computed DIR] [--json OUT]

For each shipped config (configs/*.yaml), computed once in a copy (or taken from
``--computed DIR``, a folder holding such copies, e.g. bench_throughput.py's
``configs/``), each level's measured core seconds (the sum of its records' ``wall_s``)
are set against:

* the estimate before any run (empty store: the model's default prefactors);
  goal: within a factor of 2;
* the estimate after one calibrating run: each molecule in turn is left out, the
  model is calibrated on the other molecules' stored timings (as a first run of part
  of a campaign would leave them), and the left-out molecule's points are estimated;
  goal: within +-30 %.

Timings are wall seconds of one-thread points on a shared machine: the load average
is printed; a busy machine inflates the measured side.
"""

from __future__ import annotations

import argparse
import os
import shutil
import sys
import tempfile
from pathlib import Path

from common import REPO, check_ok, machine, pesflow_cmd, print_table, run_child, write_result

FACTOR_BEFORE, WITHIN_AFTER = 2.0, 0.30


def level_table(spec: Path):
    """Points table of a computed campaign: status, wall_s and step_wall_s per point."""
    import numpy as np

    from pesflow.campaign.spec import load_campaign
    from pesflow.plan import cost
    from pesflow.plan.expand import expand
    from pesflow.store.point_store import PointStore

    campaign = load_campaign(spec)
    plan = expand(campaign)
    pts = plan.points[["key", "molecule", "level", "method", "basis"]].copy()
    stored = (
        PointStore(campaign.store_path)
        .load(columns=("wall_s", "step_wall_s", "converged"))
        .to_pandas()
    )
    pts = pts.merge(stored, on="key", how="left")
    if pts["wall_s"].isna().any() or not pts["converged"].astype(bool).all():
        raise SystemExit(f"{spec.name}: not every point is stored and converged")
    pts["status"] = "done"
    grid = campaign.engine_settings().grid_level
    return pts.drop(columns="converged"), cost.molecule_sizes(campaign), grid, np


def check(spec: Path) -> list[dict]:
    from pesflow.plan import cost

    pts, sizes, grid, np = level_table(spec)
    measured = pts.groupby("level", sort=False)["wall_s"].sum()
    before = cost.estimate(pts.assign(status="pending"), sizes, grid).set_index("level")
    after = dict.fromkeys(measured.index, 0.0)
    for molecule in pts["molecule"].unique():
        # the others' timings calibrate the model; this molecule's points are pending
        # (and its own stored timings hidden, so that only the model speaks)
        view = pts.copy()
        own = view["molecule"] == molecule
        view.loc[own, "status"] = "pending"
        view.loc[own, ["wall_s", "step_wall_s"]] = np.nan
        est = cost.estimate(view, sizes, grid)
        for row in est.itertuples():
            after[row.level] += row.estimate_s
    rows = []
    for level, seconds in measured.items():
        rows.append(
            {
                "config": spec.name,
                "level": level,
                "points": int((pts["level"] == level).sum()),
                "measured_s": float(seconds),
                "before_s": float(before.loc[level, "estimate_s"]),
                "after_s": float(after[level]),
            }
        )
    return rows


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--computed", default=None, help="folder of computed config copies")
    parser.add_argument("--json", default=None, help="also write the figures here")
    args = parser.parse_args(argv)
    print(f"benchmark 5: cost model against real runs, {machine()}")
    if args.computed:
        configs = Path(args.computed)
    else:
        configs = Path(tempfile.mkdtemp(prefix="pesflow-bench-cost-")) / "configs"
        shutil.copytree(REPO / "configs", configs)
        print(f"work folder: {configs}")
        for spec in sorted(configs.glob("*.yaml")):
            m = check_ok(
                run_child(pesflow_cmd("run", spec.name, "--cores", "2"), cwd=configs),
                f"pesflow run {spec.name}",
            )
            print(
                f"  computed {spec.name} in {m.wall_s:.1f} s (load average "
                f"{m.load_before:.1f} before)",
                flush=True,
            )
    rows = []
    for spec in sorted(configs.glob("*.yaml")):
        rows += check(spec)
    table = []
    ok_before = ok_after = True
    for r in rows:
        rb, ra = r["before_s"] / r["measured_s"], r["after_s"] / r["measured_s"]
        good_b = 1 / FACTOR_BEFORE <= rb <= FACTOR_BEFORE
        good_a = abs(ra - 1) <= WITHIN_AFTER
        ok_before &= good_b
        ok_after &= good_a
        r.update(ratio_before=rb, ratio_after=ra)
        table.append(
            [
                f"{r['config']} {r['level']}",
                str(r["points"]),
                f"{r['measured_s']:.1f}",
                f"{r['before_s']:.1f} ({rb:.2f}) {'ok' if good_b else 'OUT'}",
                f"{r['after_s']:.1f} ({ra:.2f}) {'ok' if good_a else 'OUT'}",
            ]
        )
    print_table(
        "benchmark 5: core seconds per level, estimate (estimate / measured)",
        [
            "config, level",
            "points",
            "measured",
            f"before any run (goal x{FACTOR_BEFORE:g})",
            f"after calibrating (goal +-{WITHIN_AFTER:.0%})",
        ],
        table,
    )
    print(
        f"before any run: {'met' if ok_before else 'MISSED'}; after one calibrating run: "
        f"{'met' if ok_after else 'MISSED'}; load average now {os.getloadavg()[0]:.1f}"
    )
    write_result(args.json, {"name": "cost model", "levels": rows})
    return 0


if __name__ == "__main__":
    sys.exit(main())
