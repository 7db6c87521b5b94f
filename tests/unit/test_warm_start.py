"""The Snakemake child started before it is needed (pesflow/execution/warm.py).

Checked against Snakemake itself: the child run with a command line prints what
``python -m snakemake`` prints with it, runs a workflow to its end, and holds the run lock
it was handed as long as it runs.
"""

from __future__ import annotations

import importlib.util
import os
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


def test_the_child_ends_with_snakemakes_status_when_a_job_fails(tmp_path):
    (tmp_path / "Snakefile").write_text('rule broken:\n    output: "x.txt"\n    shell: "exit 3"\n')
    expected = subprocess.run(
        [sys.executable, "-m", "snakemake", "-c1", "--directory", str(tmp_path / "plain")]
        + ["--snakefile", str(tmp_path / "Snakefile")],
        capture_output=True,
    ).returncode
    lock = RunLock(tmp_path / "run.lock").acquire()
    warm = WarmSnakemake(snakemake_env())
    argv = ["-c1", "--directory", str(tmp_path), "--snakefile", str(tmp_path / "Snakefile")]
    with open(tmp_path / "log", "w") as log:
        proc = warm.start(argv, log.fileno(), lock.fd)
    assert proc.wait(timeout=120) == expected != 0
    assert "Error in rule broken" in (tmp_path / "log").read_text()
    lock.release()


def _fake_slurm_tools(tmp_path):
    """``scontrol``, ``sacct`` and ``squeue`` that only note that they were asked (a SLURM
    plugin loaded by Snakemake asks ``scontrol show config``; where no controller answers,
    that costs a 10 s time-out)."""
    bin_dir = tmp_path / "bin"
    bin_dir.mkdir()
    asked = tmp_path / "asked.txt"
    for tool in ("scontrol", "sacct", "squeue"):
        script = bin_dir / tool
        script.write_text(f'#!/bin/sh\necho "{tool} $*" >> "{asked}"\n')
        script.chmod(0o755)
    env = snakemake_env()
    env["PATH"] = f"{bin_dir}{os.pathsep}{env['PATH']}"
    env.pop("SNAKEMAKE_PROFILE", None)
    return env, asked


def _run_warm(tmp_path, env, local):
    (tmp_path / "Snakefile").write_text(
        'rule one:\n    output: "done.txt"\n    shell: "touch {output}"\n'
    )
    (tmp_path / "done.txt").unlink(missing_ok=True)
    lock = RunLock(tmp_path / "run.lock").acquire()
    warm = WarmSnakemake(env, local=local)
    argv = ["--snakefile", str(tmp_path / "Snakefile"), "--directory", str(tmp_path), "-c1"]
    with open(tmp_path / "log", "w") as log:
        proc = warm.start(argv, log.fileno(), lock.fd)
    lock.release()
    assert proc.wait(timeout=120) == 0, (tmp_path / "log").read_text()
    assert (tmp_path / "done.txt").exists()


def test_a_local_child_runs_the_workflow_without_loading_executor_plugins(tmp_path):
    env, asked = _fake_slurm_tools(tmp_path)
    _run_warm(tmp_path, env, local=True)
    assert not asked.exists()  # no plugin asked SLURM anything
    if importlib.util.find_spec("snakemake_executor_plugin_slurm") is not None:
        # the same child for a cluster profile loads the plugins, which ask SLURM: the
        # check above would have seen it
        _run_warm(tmp_path, env, local=False)
        assert "scontrol" in asked.read_text()
