# Helpers shared by the rules: config validation and get_* functions.
import sys

from snakemake.utils import validate


validate(config, schema="../schemas/run.schema.json")

PYTHON = config.get("python") or sys.executable


def get_done_markers():
    """The done marker of every batch this run must compute."""
    return [f"done/{batch}.json" for batch in config["batches"]]


def get_threads():
    return int(config["threads_per_batch"])


def get_mem_mb():
    return int(config["mem_mb_per_batch"])


def get_runtime_min():
    return int(config["runtime_min_per_batch"])


def get_starter_option():
    """``--starter ADDRESS`` of a local run's job starter (pesflow/execution/starter.py)."""
    address = config.get("job_starter") or ""
    return f"--starter {address}" if address else ""
