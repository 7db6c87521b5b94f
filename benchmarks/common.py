"""Helpers shared by the benchmark scripts: timed child processes, stores, tables.

Every figure is measured on a child process started from scratch (imports included),
because that is what a user waits for.  Wall time comes from ``time.perf_counter``
around the child; peak memory is the child's ``ru_maxrss`` from ``os.wait4``, i.e. the
largest resident set of the child or of any process it waited for (Snakemake and the
batch jobs below ``pesflow run``), in MiB; CPU seconds (user + system) are summed over
the same processes.  The machine is shared: each figure carries the load average seen
just before it started, and CPU seconds are less disturbed by other users than wall
time.
"""

from __future__ import annotations

import json
import os
import platform
import statistics
import subprocess
import sys
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np

PYTHON = sys.executable
REPO = Path(__file__).resolve().parents[1]


@dataclass
class Measured:
    """One timed child process."""

    wall_s: float
    maxrss_mib: float
    returncode: int
    stdout: str
    #: user + system CPU seconds of the child and every process it waited for
    cpu_s: float = 0.0
    #: 1-minute load average of the machine just before the child started
    load_before: float = 0.0
    #: of ``cpu_s``, the seconds spent in the kernel (system time)
    sys_s: float = 0.0
    #: minor page faults of the child and every process it waited for
    minor_faults: int = 0


def run_child(cmd, cwd=None, env=None, timeout_s=3600, on_tick=None) -> Measured:
    """Run ``cmd`` to the end; return its wall time, peak RSS (MiB) and output.

    Inputs:
        cmd: argument list.
        cwd: working folder (default: this process's).
        env: extra environment variables; OMP_NUM_THREADS defaults to 1.
        timeout_s: kill the child after this many seconds (default 3600).
        on_tick: called with the seconds since the start every ~10 ms while the child
            runs (e.g. to note when the first point appears in the store).
    """
    full_env = dict(os.environ)
    full_env.setdefault("OMP_NUM_THREADS", "1")
    full_env.update(env or {})
    out_path = Path(cwd or ".") / f".bench-out-{os.getpid()}-{time.monotonic_ns()}.txt"
    load_before = os.getloadavg()[0]
    with open(out_path, "w") as out:
        start = time.perf_counter()
        proc = subprocess.Popen(
            cmd,
            cwd=cwd,
            env=full_env,
            stdout=out,
            stderr=subprocess.STDOUT,
            stdin=subprocess.DEVNULL,
        )
        deadline = start + timeout_s
        while True:
            pid, status, usage = os.wait4(proc.pid, os.WNOHANG)
            if pid:
                break
            if time.perf_counter() > deadline:
                proc.kill()
                pid, status, usage = os.wait4(proc.pid, 0)
                break
            if on_tick is not None:
                on_tick(time.perf_counter() - start)
            time.sleep(0.01)
        wall_s = time.perf_counter() - start
        proc.returncode = os.waitstatus_to_exitcode(status)
    text = out_path.read_text()
    out_path.unlink()
    # Linux reports ru_maxrss in KiB
    return Measured(
        wall_s,
        usage.ru_maxrss / 1024,
        proc.returncode,
        text,
        cpu_s=usage.ru_utime + usage.ru_stime,
        load_before=load_before,
        sys_s=usage.ru_stime,
        minor_faults=usage.ru_minflt,
    )


def pesflow_cmd(*args) -> list[str]:
    return [PYTHON, "-m", "pesflow", *args]


def check_ok(m: Measured, what: str) -> Measured:
    if m.returncode != 0:
        raise SystemExit(f"{what} failed (exit {m.returncode}):\n{m.stdout[-4000:]}")
    return m


def median(values) -> float:
    return float(statistics.median(values))


def machine() -> str:
    return (
        f"{platform.node()} {platform.machine()}, {os.cpu_count()} cores, "
        f"Python {platform.python_version()}, {time.strftime('%Y-%m-%d')}"
    )


def synthetic_records(plan, pts, seed: int = 0):
    """Schema-valid point records for the rows ``pts`` of ``plan.points`` (made-up energies).

    Each record has the point's real key, symbols, charge, multiplicity, method, basis and
    canonical positions; the energy is a made-up number near -100 hartree and
    ``extra_json`` says ``{"synthetic": true}``.  A cached run or a plan never reads the
    energies, so they do not change what is measured.
    """
    from pesflow.store.point_store import make_record

    rng = np.random.default_rng(seed)
    energies = -100.0 + rng.standard_normal(len(pts)) * 1e-3
    settings = {m: json.dumps(plan.method_key(m), sort_keys=True) for m in pts["method"].unique()}
    rows = pts[["set_id", "walk", "method", "basis", "key"]].itertuples(index=False)
    for (set_id, walk, method, basis, key), energy in zip(rows, energies, strict=True):
        gs = plan.geometry_sets[set_id]
        yield make_record(
            key=key,
            method=method,
            basis=basis,
            charge=gs.charge,
            multiplicity=gs.multiplicity,
            symbols=" ".join(gs.symbols),
            positions_angstrom=gs.positions[walk].ravel().tolist(),
            energy_hartree=float(energy),
            converged=True,
            scf_cycles=8,
            wall_s=0.5,
            step_wall_s=0.5,
            s2=float("nan"),
            reference="RHF",
            engine=plan.engine,
            engine_version=plan.engine_version,
            settings_json=settings[method],
            extra_json='{"synthetic": true}',
            created_unix=1.0e9,
        )


def plan_of(spec_path: Path):
    from pesflow.campaign import load_campaign
    from pesflow.plan.expand import expand

    campaign = load_campaign(spec_path)
    return campaign, expand(campaign)


def populate_with_writes(spec_path: Path, rows=None, compact_every: int = 5000) -> int:
    """Store synthetic records through ``PointStore.write`` (one fragment per point), as
    batches do, compacting every ``compact_every`` points as a store grown over several
    runs would be (0: never compact, leave fragments as an interrupted run does).

    ``rows``: a slice object or index array into the plan's points (default: all).
    Written without fsync: durability is not what is measured.  Returns the count.
    """
    from pesflow.store.point_store import PointStore

    campaign, plan = plan_of(spec_path)
    pts = plan.points if rows is None else plan.points.iloc[rows]
    store = PointStore(campaign.store_path, fsync=False)
    n = 0
    for record in synthetic_records(plan, pts):
        store.write(record)
        n += 1
        if compact_every and n % compact_every == 0:
            store.compact()
    if compact_every:
        store.compact()
    return n


def populate_parts(spec_path: Path, rows, n_parts: int) -> int:
    """Store synthetic records directly as ``n_parts`` compacted part files.

    Writes ``parts/part-<utc>-<uuid>.parquet`` files of
    :data:`pesflow.store.point_store.POINT_SCHEMA`,
    the layout the store documents and its compaction produces, because 100,000 single
    writes plus compaction take about 8 minutes here.  Check the result with
    ``PointStore.verify()``.  Returns the count.
    """
    import uuid

    import pyarrow as pa
    import pyarrow.parquet as pq

    from pesflow.store.point_store import POINT_SCHEMA, PointStore

    campaign, plan = plan_of(spec_path)
    pts = plan.points.iloc[rows]
    store = PointStore(campaign.store_path, fsync=False)
    store.compact()  # creates the store layout (STORE.json, folders)
    store.parts_dir.mkdir(parents=True, exist_ok=True)
    records = list(synthetic_records(plan, pts))
    bounds = np.linspace(0, len(records), n_parts + 1).astype(int)
    for i in range(n_parts):
        chunk = sorted(records[bounds[i] : bounds[i + 1]], key=lambda r: r["key"])
        table = pa.Table.from_pylist(chunk, schema=POINT_SCHEMA)
        stamp = time.strftime("%Y%m%dT%H%M%S", time.gmtime()) + f"{i:06d}Z"
        pq.write_table(
            table, store.parts_dir / f"part-{stamp}-{uuid.uuid4().hex}.parquet", compression="zstd"
        )
    return len(records)


def print_table(title: str, header: list[str], rows: list[list]) -> None:
    """A plain-text table (no colour, so it pastes into README files)."""
    cells = [header] + [[str(c) for c in row] for row in rows]
    widths = [max(len(r[i]) for r in cells) for i in range(len(header))]
    print(f"\n{title}")
    line = "+".join("-" * (w + 2) for w in widths)
    print(line)
    for j, row in enumerate(cells):
        print(
            " | ".join(
                c.ljust(w) if i == 0 else c.rjust(w)
                for i, (c, w) in enumerate(zip(row, widths, strict=True))
            )
        )
        if j == 0:
            print(line)
    print(line)


def write_result(path, result: dict) -> None:
    """Save a benchmark's figures as JSON (for ``run_all.py``'s final table); no-op if None."""
    if path:
        Path(path).write_text(json.dumps(result, indent=1))


# ---------------------------------------------------------------------------
# synthetic large campaigns (valid specs; only planned and looked up, never computed)
# ---------------------------------------------------------------------------

#: Closed-shell diatomics of ASE's g2 collection.
DIATOMICS = [
    "H2",
    "LiH",
    "HF",
    "HCl",
    "CO",
    "N2",
    "F2",
    "Cl2",
    "LiF",
    "NaCl",
    "ClF",
    "CS",
    "SiO",
    "P2",
    "Li2",
    "Na2",
    "S2",
    "SO",
    "Si2",
    "NH",
]
#: Bent triatomics of g2 as (name, central atom, the two outer atoms), 1-based.
BENT = [
    ("H2O", 1, (2, 3)),
    ("SH2", 1, (2, 3)),
    ("SiH2_s1A1d", 1, (2, 3)),
    ("CH2_s1A1d", 1, (2, 3)),
    ("SO2", 1, (2, 3)),
    ("F2O", 2, (1, 3)),
]
LEVELS = "  - {method: [hf, mp2], basis: [cc-pvdz, cc-pvtz]}\n"


def large_campaign_yaml(
    name: str,
    n_diatomics: int,
    stretch_points: int,
    n_bent: int,
    angle_points: int,
    bond_points: int,
) -> str:
    """A campaign of ``4 * (n_diatomics * stretch_points + n_bent * angle_points *
    bond_points)`` points: bond stretches of diatomics and 2-D (angle x bond) grids of
    bent triatomics, each at hf and mp2 with cc-pVDZ and cc-pVTZ."""
    lines = [f"campaign: {name}", "molecules:"]
    di = DIATOMICS[:n_diatomics]
    bent = BENT[:n_bent]
    for mol in di:
        lines.append(f"  {mol.lower()}: {{builtin: {mol}}}")
    for mol, _, _ in bent:
        lines.append(f"  {mol.lower()}: {{builtin: {mol}}}")
    lines.append("scans:")
    if di:
        lines += [
            "  stretch:",
            f"    molecules: [{', '.join(m.lower() for m in di)}]",
            "    coordinates:",
            f"      - {{type: distance, atoms: [1, 2], from: 0.6, to: 3.0, "
            f"points: {stretch_points}}}",
        ]
    for mol, centre, (a, b) in bent:
        lines += [
            f"  grid_{mol.lower()}:",
            f"    molecules: [{mol.lower()}]",
            "    coordinates:",
            f"      - {{type: angle, atoms: [{a}, {centre}, {b}], from: 80, to: 160, "
            f"points: {angle_points}}}",
            f"      - {{type: distance, atoms: [{centre}, {a}], from: 0.9, to: 2.0, "
            f"points: {bond_points}}}",
        ]
    lines += ["levels:", LEVELS.rstrip("\n"), "store: store", ""]
    return "\n".join(lines)
