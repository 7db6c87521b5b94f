"""Shared fixtures: every test runs in its own temporary working directory."""

import os

import pytest


@pytest.fixture(autouse=True)
def _in_tmp_path(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    # Keep PySCF and BLAS to one thread in tests: deterministic and fair on a shared machine.
    monkeypatch.setenv("OMP_NUM_THREADS", os.environ.get("OMP_NUM_THREADS", "1"))
    yield
