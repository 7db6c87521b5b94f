"""Every shipped campaign in configs/ is valid and its rule graph builds (Snakemake dry run)."""

import subprocess
from pathlib import Path

import pytest

from pesflow.campaign import load_campaign
from pesflow.execution import driver as runner
from pesflow.plan.expand import expand, make_batches

CONFIGS = sorted((Path(__file__).resolve().parents[2] / "configs").glob("*.yaml"))

pytestmark = pytest.mark.workflow


@pytest.mark.parametrize("spec", CONFIGS, ids=[p.stem for p in CONFIGS])
def test_shipped_campaign_is_valid_and_dry_runs(spec, tmp_path):
    campaign = load_campaign(spec)
    plan = expand(campaign)
    batches = make_batches(plan, done=set(), cores=2)
    assert len(plan.points) > 0 and batches
    wd = tmp_path / "workflow"
    config = runner.write_tasks(plan, batches, tmp_path / "store", wd, runner.RunOptions())
    cmd = runner.snakemake_command(wd, config, runner.RunOptions(cores=2)) + ["--dry-run"]
    proc = subprocess.run(cmd, capture_output=True, text=True, timeout=300)
    assert proc.returncode == 0, proc.stdout + proc.stderr
    # the job table of the dry run lists the batch rule with one job per batch
    assert any(
        line.split()[:2] == ["batch", str(len(batches))] for line in proc.stdout.splitlines()
    ), proc.stdout


def test_the_demo_and_the_basis_survey_are_shipped():
    assert {p.stem for p in CONFIGS} >= {"demo-hydrides", "basis-survey"}
