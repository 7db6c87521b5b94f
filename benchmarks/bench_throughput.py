"""Benchmark 4: overnight throughput, ``pesflow run --cores 2`` against a careful script.

Usage: python benchmarks/bench_throughput.py [--repeats N] [--small] [--only a|b]
       [--no-cached] [--json OUT] [--keep DIR]

Side by side in one run, each repeat starting from an empty store:

(a) many small molecules: 20 closed-shell molecules of ASE's g2 collection, a 26-point
    stretch of the bond between atoms 1 and 2 each (0.85-1.45 of its length), hf and
    mp2 with cc-pVDZ: 1040 points of ~0.05 s.  Goal: pesflow / script <= 1.15.
(b) points of a second or more: 4 diatomics x 16 points, hf and ccsd(t) with
    cc-pVTZ.  Goal: pesflow / script <= 1.0.

The opponent is ``careful_script.py``: a two-process pool, one thread each, one SCF per
geometry shared by every method, the neighbour's density as the guess, pesflow's
thresholds (1e-10 hartree).  Both sides compute the same geometries (taken from
pesflow's plan); the energies are checked against each other.  While pesflow runs (a),
the time until the first point file appears in the store is noted (goal < 5 s).

Then each shipped config (configs/*.yaml) is computed once in a copy and its fully
cached rerun is timed (goal < 1.5 s each).  ``--small`` uses 10 molecules x 13 points
for (a) and 2 diatomics x 8 points for (b) (about a quarter of the time).
"""

from __future__ import annotations

import argparse
import json
import shutil
import sys
import tempfile
from pathlib import Path

from common import (
    PYTHON,
    REPO,
    check_ok,
    machine,
    median,
    pesflow_cmd,
    plan_of,
    print_table,
    run_child,
    write_result,
)

GOAL_SMALL, GOAL_LARGE = 1.15, 1.0
GOAL_CACHED_S, GOAL_FIRST_POINT_S = 1.5, 5.0

#: Closed-shell g2 molecules of 3-6 atoms whose atoms 1 and 2 are bonded (ASE's atom
#: order): SCF + MP2 / cc-pVDZ from a cold start takes 0.03-0.17 s each here, so with the
#: neighbour's density a point costs ~0.05 s, as in the issue's campaign.
SMALL_MOLECULES = (
    "H2O NH3 CH4 HCN H2O2 SiH4 H2CO PH3 CO2 HOCl N2O C2H2 CH3OH CH3Cl OCS SO2 H2CCO "
    "HCOOH C2H4 CH3SH"
).split()
#: ``--tiny``: smaller molecules (1-5 atoms), ~0.012 s a point: the per-point cost of
#: storing each point durably is then a large share of the work.
TINY_MOLECULES = (
    "H2 LiH HF H2O NH3 CH4 CO N2 HCN C2H2 H2CO HCl F2 LiF CH2_s1A1d SH2 PH3 SiH4 H2O2 CS"
).split()
DIATOMICS = ["HF", "CO", "N2", "HCl"]


def stretch_campaign(name, molecules, points, levels, lo=0.85, hi=1.45) -> str:
    """One stretch scan per molecule (bond 1-2 from ``lo`` to ``hi`` times its length)."""
    from ase.build import molecule

    lines = [f"campaign: {name}", "molecules:"]
    lines += [f"  {m.lower()}: {{builtin: {m}}}" for m in molecules]
    lines.append("scans:")
    for m in molecules:
        r0 = molecule(m).get_distance(0, 1)
        lines += [
            f"  stretch_{m.lower()}:",
            f"    molecules: [{m.lower()}]",
            "    coordinates:",
            f"      - {{type: distance, atoms: [1, 2], from: {lo * r0:.4f}, "
            f"to: {hi * r0:.4f}, points: {points}}}",
        ]
    lines += ["levels:", f"  - {levels}", "store: store", ""]
    return "\n".join(lines)


def write_walks(spec: Path, out: Path) -> dict:
    """The plan's walks as the script's input; returns ``name|level|walk`` -> key."""
    _, plan = plan_of(spec)
    walks = []
    for gs in plan.geometry_sets:
        bases = dict.fromkeys(lvl.basis for lvl in gs.levels)
        for basis in bases:
            walks.append(
                {
                    "name": gs.molecule,
                    "symbols": list(gs.symbols),
                    "charge": gs.charge,
                    "multiplicity": gs.multiplicity,
                    "basis": basis,
                    "methods": [lvl.method for lvl in gs.levels if lvl.basis == basis],
                    "geometries": gs.positions.tolist(),
                }
            )
    out.write_text(json.dumps({"walks": walks}))
    return {f"{r.molecule}|{r.level}|{r.walk}": r.key for r in plan.points.itertuples()}


def stored_energies(store_root: Path) -> dict:
    from pesflow.store.point_store import PointStore

    table = PointStore(store_root).load(columns=["energy_hartree", "converged"]).to_pandas()
    if not table["converged"].all():
        raise SystemExit("pesflow stored failed points; the comparison is void")
    return dict(zip(table["key"], table["energy_hartree"], strict=True))


def idle_at_end(run_dir: Path, cores: int = 2) -> tuple[float, int, float]:
    """Core-seconds idle at the end of a pesflow run, walks taken over between jobs, and
    seconds the jobs waited for their store writes (summed over the jobs).

    From the jobs' done markers: the last ``cores`` jobs to end, each core idle from its
    job's end to the last job's end (the markers' modification times)."""
    markers = list((run_dir / "results").glob("*/.pesflow/workflow/done/*.json"))
    ends = sorted(p.stat().st_mtime for p in markers)[-cores:]
    content = [json.loads(p.read_text()) for p in markers]
    taken = sum(m.get("taken_over", 0) for m in content)
    waited = sum(m.get("store_wait_s", 0.0) for m in content)
    return (sum(ends[-1] - t for t in ends) if ends else 0.0), taken, waited


class FirstPoint:
    """Notes when the first point file appears under a store (polled every 50 ms)."""

    def __init__(self, store: Path):
        self.folder = store / "fragments"
        self.at = None
        self.next = 0.0

    def __call__(self, t):
        if self.at is not None or t < self.next:
            return
        self.next = t + 0.05
        if self.folder.exists() and any(self.folder.glob("*.parquet")):
            self.at = t


def compare(name, work, spec_text, repeats, first_point=False):
    """Repeats of the careful script and a fresh pesflow run; returns the figures."""
    folder = work / name
    folder.mkdir()
    spec0 = folder / "campaign.yaml"
    spec0.write_text(spec_text)
    walks = folder / "walks.json"
    key_of = write_walks(spec0, walks)
    n = len(key_of)
    method_of = {key: k.split("|")[1].split("/")[0] for k, key in key_of.items()}
    script, pesflow = "careful script (2 processes)", "pesflow run --cores 2"
    runs = {script: [], pesflow: []}
    firsts, worst, idle = [], {}, []
    for r in range(repeats):
        order = (script, pesflow) if r % 2 == 0 else (pesflow, script)
        for side in order:
            if side == pesflow:
                run_dir = folder / f"run-{r}"
                run_dir.mkdir()
                (run_dir / "campaign.yaml").write_text(spec_text)
                tick = FirstPoint(run_dir / "store") if first_point else None
                cmd = pesflow_cmd("run", "campaign.yaml", "--cores", "2")
                m = check_ok(run_child(cmd, cwd=run_dir, on_tick=tick), side)
                energies = stored_energies(run_dir / "store")
                if tick is not None and tick.at is not None:
                    firsts.append(tick.at)
                idle.append(idle_at_end(run_dir))
            else:
                out = folder / f"script-{r}.json"
                cmd = [PYTHON, str(Path(__file__).with_name("careful_script.py")), str(walks)]
                m = check_ok(run_child(cmd + [str(out)], cwd=folder), side)
                got = json.loads(out.read_text())["energies"]
                energies = {key_of[k]: e for k, e in got.items() if k in key_of}
            runs[side].append((m, energies))
            extra = ""
            if side == pesflow:
                extra = (
                    f"; a core idle {idle[-1][0]:.2f} s at the end, "
                    f"{idle[-1][1]} walks taken over between jobs, "
                    f"jobs waited {idle[-1][2]:.2f} s for the store"
                )
            print(
                f"  ({name}) repeat {r + 1}: {side}: {m.wall_s:.1f} s wall, {m.cpu_s:.1f} s CPU "
                f"({m.sys_s:.1f} s of it system, {m.minor_faults / 1e6:.2f} M page faults; "
                f"load average {m.load_before:.1f} before){extra}",
                flush=True,
            )
    reference = runs[script][0][1]
    for _, energies in runs[pesflow] + runs[script][1:]:
        if len(set(energies) & set(reference)) != n:
            raise SystemExit(f"({name}) a side gave {len(energies)} of {n} points")
        for k, e in energies.items():
            if k in reference:
                m = method_of[k]
                worst[m] = max(worst.get(m, 0.0), abs(e - reference[k]))
    wall = {s: median([m.wall_s for m, _ in runs[s]]) for s in runs}
    cpu = {s: median([m.cpu_s for m, _ in runs[s]]) for s in runs}
    # The two runs of a repeat follow each other; the machine's speed drifts over minutes
    # (on 2026-12-02 the script's CPU seconds for the same work ranged 43-64 s), so
    # the ratio within each repeat is the measurement, and their median the figure.
    paired = [p.wall_s / s.wall_s for (p, _), (s, _) in zip(runs[pesflow], runs[script])]
    return {
        "points": n,
        "script_s": wall[script],
        "pesflow_s": wall[pesflow],
        "script_cpu_s": cpu[script],
        "pesflow_cpu_s": cpu[pesflow],
        "script_range": [m.wall_s for m, _ in runs[script]],
        "pesflow_range": [m.wall_s for m, _ in runs[pesflow]],
        "ratio": median(paired),
        "paired_ratios": paired,
        "ratio_of_medians": wall[pesflow] / wall[script],
        "first_point_s": median(firsts) if firsts else None,
        "idle_at_end_core_s": median([i for i, _, _ in idle]),
        "taken_over": [t for _, t, _ in idle],
        "store_wait_s": [w for _, _, w in idle],
        "max_energy_diff_hartree": worst,
        "load_average": [m.load_before for s in runs for m, _ in runs[s]],
    }


def cached_reruns(work: Path, repeats: int) -> dict:
    """Compute each shipped config once in a copy, then time its fully cached reruns."""
    configs = work / "configs"
    shutil.copytree(REPO / "configs", configs)
    out = {}
    for spec in sorted(configs.glob("*.yaml")):
        first = check_ok(
            run_child(pesflow_cmd("run", spec.name, "--cores", "2"), cwd=configs),
            f"pesflow run {spec.name}",
        )
        times = []
        for _ in range(repeats):
            m = check_ok(
                run_child(pesflow_cmd("run", spec.name, "--cores", "2"), cwd=configs),
                f"cached rerun of {spec.name}",
            )
            if "nothing to compute" not in m.stdout:
                raise SystemExit(f"the rerun of {spec.name} was not fully cached:\n{m.stdout}")
            times.append(m.wall_s)
        out[spec.name] = {"first_run_s": first.wall_s, "cached_s": median(times), "range": times}
        print(
            f"  {spec.name}: computed in {first.wall_s:.1f} s; cached rerun "
            f"{median(times):.2f} s (median of {repeats})",
            flush=True,
        )
    return out


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--small", action="store_true", help="a quarter-size variant")
    parser.add_argument("--small-b", action="store_true", help="(b) only at a quarter size")
    parser.add_argument("--only", choices=("a", "b", "c"), default=None)
    parser.add_argument(
        "--tiny", action="store_true", help="also (c): campaign (a) with smaller molecules"
    )
    parser.add_argument("--no-cached", action="store_true", help="skip the shipped configs")
    parser.add_argument("--json", default=None, help="also write the figures here")
    parser.add_argument("--keep", default=None, help="work folder (default: a new temp folder)")
    args = parser.parse_args(argv)

    work = Path(args.keep or tempfile.mkdtemp(prefix="pesflow-bench-throughput-"))
    work.mkdir(parents=True, exist_ok=True)
    print(f"benchmark 4: throughput against a careful script, {machine()}")
    print(f"work folder: {work}")
    small = SMALL_MOLECULES[:10] if args.small else SMALL_MOLECULES
    n_a = 13 if args.small else 26
    diatomics = DIATOMICS[:2] if args.small or args.small_b else DIATOMICS
    n_b = 8 if args.small or args.small_b else 16
    cases = {
        "a": (
            f"(a) {len(small)} small molecules x {n_a} points, hf + mp2 / cc-pvdz",
            stretch_campaign("throughput-a", small, n_a, "{method: [hf, mp2], basis: cc-pvdz}"),
            GOAL_SMALL,
        ),
        "b": (
            f"(b) {len(diatomics)} diatomics x {n_b} points, hf + ccsd(t) / cc-pvtz",
            stretch_campaign(
                "throughput-b", diatomics, n_b, "{method: [hf, ccsd(t)], basis: cc-pvtz}", 0.9, 1.3
            ),
            GOAL_LARGE,
        ),
    }
    if args.tiny or args.only == "c":
        tiny = TINY_MOLECULES[:10] if args.small else TINY_MOLECULES
        cases["c"] = (
            f"(c) {len(tiny)} tiny molecules x {n_a} points, hf + mp2 / cc-pvdz",
            stretch_campaign("throughput-c", tiny, n_a, "{method: [hf, mp2], basis: cc-pvdz}"),
            GOAL_SMALL,
        )
    results = {}
    for name, (title, text, goal) in cases.items():
        if args.only and name != args.only:
            continue
        print(f"\n{title}", flush=True)
        figures = compare(name, work, text, args.repeats, first_point=name == "a")
        results[name] = {"title": title, "goal": goal, **figures}
    cached = {} if args.no_cached else cached_reruns(work, max(3, args.repeats))

    rows = []
    for res in results.values():
        verdict = "met" if res["ratio"] <= res["goal"] else "MISSED"
        rows.append(
            [
                f"{res['title']} ({res['points']} points)",
                f"{res['script_s']:.1f}",
                f"{res['pesflow_s']:.1f}",
                f"{res['ratio']:.2f}",
                f"<= {res['goal']}",
                verdict,
                f"{res['pesflow_cpu_s'] / res['script_cpu_s']:.2f}",
            ]
        )
    print_table(
        f"benchmark 4: medians of {args.repeats}, wall seconds; ratio: the median of the "
        "repeats' ratios (each repeat runs both sides back to back)",
        ["campaign", "careful script", "pesflow run", "ratio", "goal", "", "CPU ratio"],
        rows,
    )
    rows = []
    if "a" in results and results["a"]["first_point_s"] is not None:
        t = results["a"]["first_point_s"]
        rows.append(
            [
                "first point stored after `pesflow run` starts, campaign (a)",
                f"{t:.2f} s",
                f"< {GOAL_FIRST_POINT_S:g} s",
                "met" if t < GOAL_FIRST_POINT_S else "MISSED",
            ]
        )
    for spec, res in cached.items():
        t = res["cached_s"]
        rows.append(
            [
                f"fully cached rerun of configs/{spec}",
                f"{t:.2f} s",
                f"< {GOAL_CACHED_S:g} s",
                "met" if t < GOAL_CACHED_S else "MISSED",
            ]
        )
    if rows:
        print_table("start-up and cached reruns (medians)", ["", "measured", "goal", ""], rows)
    for name, res in results.items():
        diffs = ", ".join(f"{m} {d:.1e}" for m, d in sorted(res["max_energy_diff_hartree"].items()))
        loads = res["load_average"]
        print(
            f"({name}) pesflow / script in each repeat: "
            + ", ".join(f"{r:.3f}" for r in res["paired_ratios"])
            + f"; ratio of the medians {res['ratio_of_medians']:.3f}"
        )
        print(
            f"({name}) largest energy differences between the sides: {diffs} hartree; "
            f"CPU s script {res['script_cpu_s']:.1f}, pesflow {res['pesflow_cpu_s']:.1f}; "
            f"pesflow's cores idle at the end {res['idle_at_end_core_s']:.2f} core-s (median); "
            f"load average before the runs {min(loads):.1f}-{max(loads):.1f}"
        )
    write_result(
        args.json,
        {
            "name": "throughput",
            "repeats": args.repeats,
            "small": args.small,
            "campaigns": results,
            "cached": cached,
            "work": str(work),
        },
    )
    return 0


if __name__ == "__main__":
    sys.exit(main())
