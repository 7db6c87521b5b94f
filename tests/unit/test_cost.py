"""Cost estimates: stored timings first, a calibrated scaling model otherwise."""

import numpy as np
import pandas as pd
import pytest

from pesflow.engine import method_info
from pesflow.plan import cost
from pesflow.units import format_duration


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
    assert est.loc[0, "source"] == "scaling model, calibrated"


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


def test_dft_pays_for_its_grid_per_atom():
    # same basis-function count, three times the atoms: the grid term triples, the SCF not
    rows = [("a", "b3lyp/b", "b3lyp", "b", "pending", np.nan)]
    rows += [("c", "b3lyp/b", "b3lyp", "b", "pending", np.nan)]
    few = cost.Size(nbf=50, nocc=5, natm=2)
    many = cost.Size(nbf=50, nocc=5, natm=6)
    grid_few = cost.step_seconds("dft", few)
    grid_many = cost.step_seconds("dft", many)
    assert grid_many == pytest.approx(3 * grid_few)
    est = cost.estimate(table(rows), {("a", "b"): few, ("c", "b"): many})
    expected = 2 * cost.scf_seconds(few) + grid_few + grid_many
    assert est.loc[0, "estimate_s"] == pytest.approx(expected)
    # and a finer grid costs more (PySCF's grids grow with the level)
    assert cost.step_seconds("dft", few, grid_level=5) > grid_few


def test_correlated_terms_scale_with_occupied_and_virtual_orbitals():
    # same basis-function count, twice the occupied orbitals: each correlated term
    # grows as (o ratio)^o_power * (v ratio)^v_power of its row in the table
    small, more_occ = cost.Size(60, 5, 2), cost.Size(60, 10, 2)
    for family in ("mp2", "ccsd", "ccsd(t)"):
        for term in cost.FAMILY_COST[family]:
            ratio = cost._term(term, more_occ) / cost._term(term, small)
            assert ratio == pytest.approx(2.0**term.o_power * (50 / 55) ** term.v_power)
    # ccsd(t) is ccsd plus the triples
    assert cost.step_seconds("ccsd(t)", small) > cost.step_seconds("ccsd", small)


def test_calibration_is_per_family_and_basis():
    # hf at basis x runs twice the model, at basis y as modelled: a pending hf point of
    # another molecule at x is predicted at twice the model's SCF, at y at the model's
    size = cost.Size(nbf=60, nocc=5, natm=2)
    model = cost.scf_seconds(size) - cost.OVERHEAD_S
    rows = [("w", "hf/x", "hf", "x", "done", cost.OVERHEAD_S + 2 * model)]
    rows += [("w", "hf/y", "hf", "y", "done", cost.OVERHEAD_S + model)]
    rows += [
        ("e", "hf/x", "hf", "x", "pending", np.nan),
        ("e", "hf/y", "hf", "y", "pending", np.nan),
    ]
    sizes = {(m, b): size for m in "we" for b in "xy"}
    est = cost.estimate(table(rows), sizes).set_index("level")
    assert est.loc["hf/x", "estimate_s"] == pytest.approx(cost.OVERHEAD_S + 2 * model)
    assert est.loc["hf/y", "estimate_s"] == pytest.approx(cost.OVERHEAD_S + model)


def test_correlated_steps_calibrate_on_their_own_step_time():
    size = cost.Size(nbf=60, nocc=5, natm=2)
    step = cost.step_seconds("mp2", size)
    done = pd.DataFrame(
        [("w", "mp2/b", "mp2", "b", "done", 5.0 + 3 * step, 3 * step)],
        columns=["molecule", "level", "method", "basis", "status", "wall_s", "step_wall_s"],
    )
    scales = cost.calibrate(done.assign(nbf=60, nocc=5, natm=2))
    assert scales["mp2"] == pytest.approx(3.0) and "scf" not in scales


def test_total_counts_a_shared_scf_once():
    rows = [("w", "hf/b", "hf", "b", "pending", np.nan)] * 4
    rows += [("w", "mp2/b", "mp2", "b", "pending", np.nan)] * 4
    sizes = {("w", "b"): cost.Size(50)}
    t = table(rows)
    est = cost.estimate(t, sizes)
    size = cost.Size(50)
    assert cost.total_seconds(est, t, sizes) == pytest.approx(
        4 * (cost.scf_seconds(size) + cost.step_seconds("mp2", size))
    )


def test_durations_read_in_seconds_minutes_or_hours():
    assert format_duration(2.2) == "2.2 s"
    assert format_duration(42) == "42 s"
    assert format_duration(547) == "9.1 min"
    assert format_duration(12.8 * 60) == "13 min"
    assert format_duration(0.152 * 3600) == "9.1 min"
    assert format_duration(5 * 3600) == "5.0 h"
    assert format_duration(30 * 3600) == "30 h"
