"""Real ``pesflow run`` through real Snakemake and real PySCF.

Reference for every energy: a direct PySCF calculation at the stored geometry
(pyscf.scf.RHF / UHF / mp.MP2 with the same basis and convergence threshold).
"""

import json
import os
import signal
import subprocess
import sys
import textwrap
import time

import numpy as np
import pandas as pd
import pytest

from pesflow.store.point_store import PointStore
from pesflow.store.records import fragment_keys
from tests.workflow.helpers import SMALL_CAMPAIGN, direct_energy, pesflow

pytestmark = [pytest.mark.workflow, pytest.mark.integration]

SMALL = SMALL_CAMPAIGN.format(name="wf-small")


def test_run_rerun_export(tmp_path):
    spec = tmp_path / "small.yaml"
    spec.write_text(SMALL)
    out = pesflow("run", str(spec), "--cores", "2", check=0)
    assert "20 done, 0 failed, 0 pending" in out.stdout
    store = PointStore(tmp_path / "store")
    assert len(store.keys()) >= 20
    files = sorted((p.name, p.stat().st_mtime_ns) for p in (tmp_path / "store").rglob("*.parquet"))

    again = pesflow("run", str(spec), "--cores", "2", check=0)
    assert "nothing to compute" in again.stdout
    assert (
        sorted((p.name, p.stat().st_mtime_ns) for p in (tmp_path / "store").rglob("*.parquet"))
        == files
    )

    status = pesflow("status", str(spec), check=0)
    assert "20 done, 0 failed, 0 pending" in status.stdout

    pesflow("export", str(spec), "-o", str(tmp_path / "points.parquet"), check=0)
    pesflow("export", str(spec), "-o", str(tmp_path / "points.csv"), check=0)
    table = pd.read_parquet(tmp_path / "points.parquet")
    csv = pd.read_csv(tmp_path / "points.csv")
    assert len(table) == len(csv) == 20
    assert set(table["status"]) == {"done"}
    for col in (
        "campaign",
        "molecule",
        "scan",
        "method",
        "basis",
        "r_angstrom",
        "energy_hartree",
        "converged",
        "scf_cycles",
        "wall_s",
        "key",
        "engine",
        "engine_version",
        "error",
        "positions_angstrom",
    ):
        assert col in table.columns
    np.testing.assert_allclose(np.sort(table["r_angstrom"].unique()), np.linspace(0.6, 1.2, 5))
    np.testing.assert_allclose(table["energy_hartree"], csv["energy_hartree"], rtol=0, atol=1e-12)
    for _, row in table.iloc[::3].iterrows():
        assert row["energy_hartree"] == pytest.approx(direct_energy(row), abs=1e-7)
    oh = table[(table.molecule == "hydroxyl") & (table.method == "hf")]
    assert set(oh["reference"]) == {"UHF"}
    # A doublet: <S^2> = 0.75 near equilibrium; UHF spin contamination only raises it
    # (it grows as the bond stretches, a known UHF property).
    assert np.all(np.abs(oh[oh.r_angstrom <= 1.0]["s2"] - 0.75) < 0.01)
    assert np.all(oh["s2"] >= 0.75 - 1e-8)


KILL = """\
campaign: wf-kill
molecules:
  hydrogen_fluoride: {builtin: HF}
  water: {builtin: H2O}
scans:
  stretch:
    molecules: [hydrogen_fluoride]
    coordinates:
      - {type: distance, atoms: [1, 2], from: 0.7, to: 1.5, points: 24}
  bend:
    molecules: [water]
    coordinates:
      - {type: angle, atoms: [2, 1, 3], from: 90, to: 126, points: 24}
levels:
  - {method: [hf, mp2], basis: 6-31g}
store: store
"""


def test_sigkill_midrun_then_rerun_gives_every_point_once(tmp_path):
    spec = tmp_path / "kill.yaml"
    spec.write_text(KILL)
    env = dict(os.environ, OMP_NUM_THREADS="1")
    proc = subprocess.Popen(
        [sys.executable, "-m", "pesflow", "run", str(spec), "--cores", "2"],
        stdout=subprocess.DEVNULL,
        stderr=subprocess.DEVNULL,
        env=env,
        start_new_session=True,
    )
    fragments = tmp_path / "store" / "fragments"
    deadline = time.monotonic() + 300
    while time.monotonic() < deadline:
        # (one file per point, every level computed there; hidden temporary files of
        # writers in flight are not points yet)
        done = (
            sum(not p.name.startswith(".") for p in fragments.glob("*.parquet"))
            if fragments.exists()
            else 0
        )
        if done >= 12:
            break
        assert proc.poll() is None, "the run ended before it could be killed"
        time.sleep(0.05)
    os.killpg(proc.pid, signal.SIGKILL)
    proc.wait()
    time.sleep(0.5)
    # (a writer killed mid-write leaves a hidden temporary file: not a point, skip it)
    survivors = sorted(p for p in fragments.glob("*.parquet") if not p.name.startswith("."))
    assert 12 <= len(survivors) < 96, "kill should land mid-run"
    # A crash that tore a file: the damaged point must be set aside and computed again.
    torn = survivors[0]
    os.truncate(torn, torn.stat().st_size // 2)

    rerun = pesflow("run", str(spec), "--cores", "2", check=0)
    assert "96 done, 0 failed, 0 pending" in rerun.stdout
    assert "corrupt store file" in rerun.stderr and torn.name in rerun.stderr
    assert any(torn.stem in p.name for p in (tmp_path / "store" / "quarantine").iterdir())

    table = PointStore(tmp_path / "store").load().to_pandas()
    assert table["key"].is_unique
    pesflow("export", str(spec), "-o", str(tmp_path / "points.parquet"), check=0)
    points = pd.read_parquet(tmp_path / "points.parquet")
    assert len(points) == 96 and points["key"].is_unique
    assert set(points["status"]) == {"done"}
    sample = points.iloc[::7]
    for _, row in sample.iterrows():
        assert row["energy_hartree"] == pytest.approx(direct_energy(row), abs=1e-7)
    # the torn point (every record of its geometry) was recomputed, not read as data
    assert set(fragment_keys(torn.name)) <= set(points["key"])


def test_failed_point_is_recorded_and_exit_code_is_1(tmp_path):
    spec = tmp_path / "fail.yaml"
    spec.write_text(
        textwrap.dedent("""\
        campaign: wf-fail
        molecules:
          hydroxyl: {xyz: "O 0 0 0\\nH 0 0 0.97", multiplicity: 2}
        scans:
          stretch:
            molecules: [hydroxyl]
            coordinates:
              - {type: distance, atoms: [1, 2], values: [0.97, 3.5]}
        levels:
          - {method: hf, basis: 6-31g}
        engine: {scf_max_iterations: 1, scf_ladder: [default]}
        store: store
        """)
    )
    out = pesflow("run", str(spec), "--cores", "1", check=1)
    assert "failed" in out.stdout
    assert "did not converge" in out.stdout
    status = pesflow("status", str(spec), check=1)
    assert "2 failed" in status.stdout or "1 failed" in status.stdout


#: 7 molecules x 2 levels = 14 status rows: more than the run prints one by one, so it
#: shows the rows that need attention, with the analysis warnings found while Snakemake
#: winds down.  The H2 range (1.0-1.4 angstrom) misses its minimum (0.74 angstrom,
#: Huber & Herzberg 1979): a warning to list.
LARGE = """\
campaign: wf-large
molecules:
  h2: {builtin: H2}
  lih: {builtin: LiH}
  hf: {builtin: HF}
  hcl: {builtin: HCl}
  f2: {builtin: F2}
  co: {builtin: CO}
  n2: {builtin: N2}
scans:
  far:
    molecules: [h2]
    coordinates:
      - {type: distance, atoms: [1, 2], from: 1.0, to: 1.4, points: 5}
  near:
    molecules: [lih, hf, hcl, f2, co, n2]
    coordinates:
      - {type: distance, atoms: [1, 2], from: 0.9, to: 1.6, points: 5}
levels:
  - {method: [hf, mp2], basis: sto-3g}
store: store
"""


def test_a_large_run_lists_the_rows_with_warnings(tmp_path):
    """The run's table of rows that need attention holds the warning counts the analysis
    gives afterwards (pesflow.api.warning_counts on the finished store)."""
    from pesflow import api
    from pesflow.plan.expand import expand

    spec = tmp_path / "large.yaml"
    spec.write_text(LARGE)
    run = pesflow("run", str(spec), "--cores", "2", check=0)
    lines = run.stdout.splitlines()
    start = next(i for i, line in enumerate(lines) if "rows that need attention" in line)
    end = next(i for i, line in enumerate(lines) if "molecule x level rows" in line)
    cells = [[c.strip() for c in line.split("│")[1:-1]] for line in lines[start:end]]
    shown = {(c[0], c[1]): int(c[5]) for c in cells if len(c) == 6 and c[5].isdigit()}

    campaign = api.load(spec).campaign
    counts = api.warning_counts(campaign, expand(campaign), PointStore(tmp_path / "store"))
    expected = {
        (r.molecule, r.level): int(r.warnings) for r in counts.itertuples() if r.warnings > 0
    }
    assert shown == expected
    assert ("h2", "hf/sto-3g") in shown


def test_on_ended_is_called_once_with_every_point_stored(tmp_path):
    """``on_ended`` (the run's early analysis) fires once, and only when the store holds
    every point of the run."""
    from pesflow import api
    from pesflow.plan.expand import expand

    spec = tmp_path / "small.yaml"
    spec.write_text(SMALL_CAMPAIGN.format(name="wf-ended"))
    loaded = api.load(spec)
    plan = expand(loaded.campaign)
    store = PointStore(tmp_path / "store")
    seen, shown = [], []
    keys = set(plan.points["key"])
    result = api.run_campaign(
        loaded.campaign,
        plan,
        store,
        cores=2,
        on_ended=lambda: seen.append(keys <= PointStore(tmp_path / "store").keys()),
        on_progress=shown.append,
    )
    assert result.returncode == 0
    assert seen == [True]
    # the progress display ends on the run's final figures, not a poll's older ones
    assert (shown[-1].finished, shown[-1].total) == (len(keys), len(keys))


def test_second_run_of_same_campaign_is_refused(tmp_path):
    from pesflow.errors import RunError
    from pesflow.execution.driver import RunLock

    spec = tmp_path / "small.yaml"
    spec.write_text(SMALL)
    lock = RunLock(tmp_path / "results" / "wf-small" / ".pesflow" / "run.lock").acquire()
    try:
        out = pesflow("run", str(spec), "--cores", "1", check=2)
        assert "another pesflow run of this campaign is alive" in out.stderr
        assert not (tmp_path / "store").exists()
        with pytest.raises(RunError):
            RunLock(lock.path).acquire()
    finally:
        lock.release()


def test_snakemake_lint_and_dry_run(tmp_path):
    """The shipped workflow passes `snakemake --lint` and a dry run with a real config."""
    from pesflow.execution.driver import RunOptions, snakemake_command

    wd = tmp_path / "wd"
    (wd / "tasks").mkdir(parents=True)
    (wd / "tasks" / "b-001.json").write_text("{}")
    config = wd / "config.json"
    config.write_text(
        json.dumps(
            {
                "campaign": "x",
                "batches": ["b-001"],
                "threads_per_batch": 1,
                "mem_mb_per_batch": 1000,
                "runtime_min_per_batch": 10,
            }
        )
    )
    # the same command line pesflow run uses
    base = snakemake_command(wd, config, RunOptions(cores=1))
    dry = subprocess.run(base + ["--dry-run"], capture_output=True, text=True)
    assert dry.returncode == 0, dry.stdout + dry.stderr
    assert "batch" in dry.stdout
    lint = subprocess.run(base + ["--lint"], capture_output=True, text=True)
    text = lint.stdout + lint.stderr
    # The one lint we keep on purpose: batches run in pesflow's own environment (the
    # engine version is part of every point key), not in a per-rule conda env or container.
    findings = [line.strip() for line in text.splitlines() if line.strip().startswith("*")]
    assert findings == ["* Specify a conda environment or container for each rule.:"], text


@pytest.mark.parametrize("how", ["sigint-group", "sigterm-driver"])
def test_interrupt_stops_cleanly_and_rerun_finishes(tmp_path, how):
    """Ctrl-C (SIGINT to the whole group) or a SIGTERM to the driver alone stops the run
    within seconds, exits 130, leaves no live job behind and loses no finished point."""
    spec = tmp_path / "kill.yaml"
    spec.write_text(KILL.replace("points: 24", "points: 12"))
    env = dict(os.environ, OMP_NUM_THREADS="1")
    proc = subprocess.Popen(
        [sys.executable, "-m", "pesflow", "run", str(spec), "--cores", "2"],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
        env=env,
        start_new_session=True,
    )
    fragments = tmp_path / "store" / "fragments"
    deadline = time.monotonic() + 300
    while time.monotonic() < deadline:
        if fragments.exists() and len(list(fragments.glob("*.parquet"))) >= 4:
            break
        assert proc.poll() is None
        time.sleep(0.05)
    if how == "sigint-group":
        os.killpg(proc.pid, signal.SIGINT)
    else:
        os.kill(proc.pid, signal.SIGTERM)
    out, err = proc.communicate(timeout=60)
    assert proc.returncode == 130, out + err
    assert "interrupted" in out
    time.sleep(1.0)
    before = {p.name for p in fragments.glob("*.parquet")}
    time.sleep(1.0)
    assert {p.name for p in fragments.glob("*.parquet")} == before, "a job outlived the run"
    rerun = pesflow("run", str(spec), "--cores", "2", check=0)
    assert "48 done, 0 failed, 0 pending" in rerun.stdout
