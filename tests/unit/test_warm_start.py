"""The Snakemake child started before it is needed (pesflow/execution/warm.py).

Checked against Snakemake itself: the child run with a command line prints what
``python -m snakemake`` prints with it, runs a workflow to its end, and holds the run lock
it was handed as long as it runs.
"""

from __future__ import annotations

import subprocess
import sys
import textwrap
import time

import pytest

from pesflow.errors import RunError
from pesflow.execution.driver import RunLock, snakemake_env
from pesflow.execution.warm import WarmSnakemake


def test_the_child_runs_snakemake_with_the_command_line_it_is_sent(tmp_path):
    expected = subprocess.run(
        [sys.executable, "-m", "snakemake", "--version"], capture_output=True, text=True
    ).stdout
    lock = RunLock(tmp_path / "run.lock").acquire()
    warm = WarmSnakemake(snakemake_env())
    with open(tmp_path / "log", "w") as log:
        proc = warm.start(["--version"], log.fileno(), lock.fd)
    assert proc is not None and proc.wait(timeout=60) == 0
    assert (tmp_path / "log").read_text() == expected
    warm.cancel()  # no effect on a child that was started
    lock.release()


def test_a_cancelled_child_ends_without_running_anything(tmp_path):
    warm = WarmSnakemake(snakemake_env())
    warm.cancel()
    assert warm.proc.returncode is not None
    assert warm.start(["--version"], 1, 2) is None  # the caller then starts Snakemake itself


def test_the_child_holds_the_run_lock_while_its_workflow_runs(tmp_path):
    (tmp_path / "Snakefile").write_text(
        textwrap.dedent(
            """
            rule slow:
                output: "done.txt"
                shell: "sleep 3 && touch {output}"
            """
        )
    )
    lock = RunLock(tmp_path / "run.lock").acquire()
    warm = WarmSnakemake(snakemake_env())
    argv = ["--snakefile", str(tmp_path / "Snakefile"), "--directory", str(tmp_path), "-c1"]
    with open(tmp_path / "log", "w") as log:
        proc = warm.start(argv, log.fileno(), lock.fd)
    lock.release()  # the parent lets go (as a killed pesflow would): the child still holds it
    deadline = time.monotonic() + 60
    while not (tmp_path / ".snakemake").exists() and time.monotonic() < deadline:
        time.sleep(0.05)
    with pytest.raises(RunError, match="another pesflow run of this campaign is alive"):
        RunLock(tmp_path / "run.lock").acquire()
    assert proc.wait(timeout=120) == 0
    assert (tmp_path / "done.txt").exists()
    RunLock(tmp_path / "run.lock").acquire().release()  # free once Snakemake has ended
