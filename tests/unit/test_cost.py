"""Cost estimates: stored timings first, a calibrated scaling model otherwise."""

import numpy as np
import pandas as pd
import pytest

from pesflow.engine import method_info
from pesflow.plan import cost


def table(rows):
    return pd.DataFrame(rows, columns=["molecule", "level", "method", "basis", "status", "wall_s"])


def test_stored_timings_are_used_for_the_same_molecule_and_level():
    rows = [("w", "hf/b", "hf", "b", "done", t) for t in (1.0, 2.0, 3.0)]
    rows += [("w", "hf/b", "hf", "b", "pending", np.nan)] * 10
    est = cost.estimate(table(rows), {("w", "b"): 50})
    assert est.loc[0, "pending"] == 10
    assert est.loc[0, "estimate_core_h"] == pytest.approx(10 * 2.0 / 3600)
    assert est.loc[0, "source"] == "stored timings"


def test_scaling_model_calibrated_on_another_molecule():
    # one timing of water at 50 basis functions: 1 s; ethanol at 100 functions by N^p
    rows = [("w", "hf/b", "hf", "b", "done", 1.0), ("e", "hf/b", "hf", "b", "pending", np.nan)]
    est = cost.estimate(table(rows), {("w", "b"): 50, ("e", "b"): 100})
    expected = cost.OVERHEAD_S + (1.0 - cost.OVERHEAD_S) * 2.0 ** method_info("hf").cost_exponent
    assert est.loc[0, "estimate_core_h"] == pytest.approx(expected / 3600)
    assert est.loc[0, "source"] == "scaling model"


def test_small_points_do_not_calibrate_the_model():
    # a 10-function point is all overhead: it must not inflate the prefactor
    rows = [("w", "hf/b", "hf", "b", "done", 0.05), ("e", "hf/b", "hf", "b", "pending", np.nan)]
    est = cost.estimate(table(rows), {("w", "b"): 10, ("e", "b"): 50})
    expected = cost.OVERHEAD_S + method_info("hf").cost_prefactor_s
    assert est.loc[0, "estimate_core_h"] == pytest.approx(expected / 3600)


def test_dominant_level_is_named():
    rows = [("w", "hf/b", "hf", "b", "pending", np.nan)] * 5
    rows += [("w", "ccsd(t)/b", "ccsd(t)", "b", "pending", np.nan)] * 5
    est = cost.estimate(table(rows), {("w", "b"): 80})
    assert cost.dominant_levels(est) == ["ccsd(t)/b"]
    assert est["share"].sum() == pytest.approx(1.0)
