"""Excited states without a quantum-chemistry run: names and level options, plan rows
and keys per state, following by overlaps and crossings on an analytic two-state model.

The two-state model: diabatic energies +s q and -s q coupled by V, H = [[s q, V],
[V, -s q]]; its adiabatic energies are -+sqrt(s^2 q^2 + V^2) and its eigenvectors
U(q) are known exactly, so the overlaps between neighbouring points are |U(q_a)^T
U(q_b)| (textbook two-level avoided crossing, e.g. the Landau-Zener model)."""

import textwrap
from pathlib import Path

import numpy as np
import pytest

from pesflow.analysis.states import (
    excitation_energies,
    find_crossings,
    follow_states,
    followed_energies,
)
from pesflow.campaign import load_campaign
from pesflow.engine import level_method, method_info, split_state, state_record
from pesflow.errors import EngineSetupError, SpecError
from pesflow.plan.expand import expand, make_batches

SLOPE = 1.0  # hartree per unit of q
GRID = np.round(np.arange(-0.95, 1.0, 0.1), 10)  # never on the crossing at q = 0


def two_state_walk(coupling):
    """Energies (ground state at -10 hartree, then the two adiabatic states) and the
    neighbour overlaps of the model along GRID."""
    energies, vectors = [], []
    for q in GRID:
        w, u = np.linalg.eigh(np.array([[SLOPE * q, coupling], [coupling, -SLOPE * q]]))
        energies.append([-10.0, *w])
        vectors.append(u)
    overlaps = [None] + [np.abs(a.T @ b) for a, b in zip(vectors, vectors[1:])]
    return np.array(energies), overlaps


def test_weakly_coupled_states_keep_their_character_and_cross_at_zero():
    # V much smaller than the grid step times the slope: the characters swap within
    # one step.  Curve 1 starts as the lower state, the diabat of energy +s q (lower at
    # q < 0); followed, it goes on as the upper adiabatic state past q = 0.
    energies, overlaps = two_state_walk(1e-4)
    following = follow_states(overlaps, 2, energies)
    left = GRID < 0
    assert following.assignment[left, 0].tolist() == [1] * int(left.sum())
    assert following.assignment[~left, 0].tolist() == [2] * int((~left).sum())
    assert following.gaps == []
    # the followed curves are the diabats, +s q and -s q (analytic)
    followed = followed_energies(energies, following)
    assert np.allclose(followed[:, 1], SLOPE * GRID, atol=1e-6)
    (crossing,) = find_crossings(GRID, energies, following, overlaps)
    # the diabats meet at q = 0 (analytic); unmixed across the step
    assert crossing.kind == "crossing"
    assert crossing.position == pytest.approx(0.0, abs=1e-6)
    assert crossing.between == pytest.approx((-0.05, 0.05))


def test_avoided_crossing_is_followed_by_character_and_called_avoided():
    # V = 0.02: across the step from -0.05 to 0.05 the adiabatic states rotate by
    # 0.5 (atan2(V, -0.05) - atan2(V, 0.05)) = 68 degrees (analytic): the character
    # goes with the other adiabatic state (overlap 0.93) but the two mix (0.37).
    energies, overlaps = two_state_walk(0.02)
    following = follow_states(overlaps, 2, energies)
    assert following.assignment[GRID > 0, 0].tolist() == [2] * int((GRID > 0).sum())
    (crossing,) = find_crossings(GRID, energies, following, overlaps)
    assert crossing.kind == "avoided"
    assert crossing.states == (1, 2)
    # smallest adiabatic gap on the grid: 2 sqrt((s 0.05)^2 + V^2) hartree (analytic)
    gap_ev = 2 * np.hypot(0.05, 0.02) * 27.211386245988
    assert crossing.gap_ev == pytest.approx(gap_ev, rel=1e-6)


def test_broad_avoided_crossing_stays_adiabatic():
    # V = 0.3, wide against the step: neighbours overlap most with the same adiabatic
    # state everywhere, so following keeps the energy order and finds no crossing.
    energies, overlaps = two_state_walk(0.3)
    following = follow_states(overlaps, 2, energies)
    assert (following.assignment == [1, 2]).all()
    assert find_crossings(GRID, energies, following, overlaps) == []


def test_missing_overlaps_are_gaps_in_energy_order():
    energies, overlaps = two_state_walk(1e-4)
    overlaps[10] = None
    following = follow_states(overlaps, 2, energies)
    assert following.gaps == [10]
    assert following.assignment[10].tolist() == [1, 2]


def test_excitation_energies_of_two_parabolas():
    # analytic: ground (q - 1.5)^2, state 0.2 + (q - 1.6)^2 hartree; T_v at q = 1.5 is
    # 0.21 hartree, T_e 0.2 hartree.
    q = np.linspace(1.0, 2.0, 11)
    out = excitation_energies(q, (q - 1.5) ** 2, 0.2 + (q - 1.6) ** 2, (1.5, 0.0), (1.6, 0.2))
    assert out["t_v_ev"] == pytest.approx(0.21 * 27.211386245988, rel=1e-9)
    assert out["t_e_cm-1"] == pytest.approx(0.2 * 219474.6313632, rel=1e-9)
    assert np.isnan(excitation_energies(q, q, q, None, None)["t_v_ev"])


@pytest.mark.parametrize(
    "method, options, name",
    [
        ("tda-b3lyp", {}, "tda-b3lyp(singlets=3)"),
        ("TDDFT-PBE0", {"states": 5, "spin": "triplet"}, "tddft-pbe0(triplets=5)"),
        ("cis", {"follow": "character"}, "cis(singlets=3,follow)"),
        ("eom-ccsd", {"states": 2}, "eom-ccsd(singlets=2)"),
        ("tdhf", {"follow": "energy"}, "tdhf(singlets=3)"),
    ],
)
def test_level_options_fold_into_the_name(method, options, name):
    assert level_method(method, options) == name
    info = method_info(name)
    assert info.name == name and info.n_states == (options.get("states", 3) + 1)
    assert info.has_gradients is False


def test_excited_methods_share_their_ground_state_family():
    assert method_info("tda-b3lyp").family == "b3lyp"
    assert method_info("cis").family == method_info("eom-ccsd").family == "hf"
    assert method_info("eom-ccsd").byproducts == ("ccsd",)


@pytest.mark.parametrize(
    "method, options, text",
    [
        ("tda-hf", {}, "DFT functional"),
        ("cis", {"states": 0}, "states must be"),
        ("cis", {"spin": "quintet"}, "spin must be"),
        ("hf", {"states": 2}, "takes no level options"),
    ],
)
def test_bad_level_options_are_one_line_errors(method, options, text):
    with pytest.raises(EngineSetupError, match=text) as info:
        level_method(method, options)
    assert "\n" not in str(info.value)


def test_state_record_names_round_trip():
    assert split_state(state_record("cis(singlets=2)", 2)) == ("cis(singlets=2)", 2)
    assert state_record("hf", None) == "hf"
    assert method_info("cis(singlets=2)#1").name == "cis(singlets=2)"


SPEC = """\
campaign: excited-plan
molecules:
  lih: {xyz: "Li 0 0 0\\nH 0 0 1.6", fragments: [{atoms: [1], multiplicity: 2},
        {atoms: [2], multiplicity: 2}]}
scans:
  stretch:
    molecules: [lih]
    coordinates:
      - {type: distance, atoms: [1, 2], from: 1.4, to: 1.8, points: 5}
levels:
  - {method: hf, basis: 6-31g}
  - {method: cis, basis: 6-31g, states: 2, follow: character}
store: store
"""


def test_plan_has_one_row_and_key_per_state(tmp_path):
    spec = tmp_path / "c.yaml"
    spec.write_text(SPEC)
    plan = expand(load_campaign(spec), version="2.14.0")
    scan = plan.points[plan.points["role"] == "scan"]
    cis = scan[scan["method"] == "cis(singlets=2,follow)"]
    assert sorted(cis["state"].unique()) == [0, 1, 2]
    assert cis["key"].is_unique and len(cis) == 15
    assert (scan.loc[scan["method"] == "hf", "state"] == 0).all()
    # fragments (D_e) are computed for the single-state level only
    fragments = plan.points[plan.points["role"] == "fragment"]
    assert set(fragments["method"]) == {"hf"}
    (batch,) = [b for b in make_batches(plan, set(), cores=1) if b.set_id == 0]
    assert list(batch.entries[0][1]) == [
        "hf", "cis(singlets=2,follow)#0", "cis(singlets=2,follow)#1", "cis(singlets=2,follow)#2"
    ]  # fmt: skip


def test_spec_refuses_options_a_method_does_not_take(tmp_path):
    spec = tmp_path / "c.yaml"
    spec.write_text(
        SPEC.replace("{method: hf, basis: 6-31g}", "{method: hf, basis: 6-31g, states: 2}")
    )
    with pytest.raises(SpecError, match="takes no level options") as info:
        load_campaign(spec)
    assert "states" in str(info.value)
    spec.write_text(textwrap.dedent(SPEC).replace("states: 2,", "states: 2, spin: quartet,"))
    with pytest.raises(SpecError, match="spin"):
        load_campaign(spec)
    assert Path(spec).exists()


def _rows(method, positions, overlaps_at, against):
    """Points-table rows of a 1-excited-state level along three geometries; the point
    ``overlaps_at`` stores overlaps against walk point ``against``."""
    import json

    import pandas as pd

    rows = []
    for w in range(3):
        for s in (0, 1):
            info = {"index": s}
            if s == 1 and w == overlaps_at:
                info["neighbour_overlaps"] = [0.9]
                info["neighbour_positions_angstrom"] = positions[against].ravel().tolist()
            rows.append(
                {"set_id": 0, "walk": w, "state": s, "method": method, "status": "done",
                 "energy_hartree": -1.0 + 0.1 * s, "extra_json": json.dumps({"state": info})}
            )  # fmt: skip
    return pd.DataFrame(rows)


def test_overlaps_are_used_only_between_neighbours_of_the_walk():
    from types import SimpleNamespace

    from pesflow.tables.states import walk_states

    positions = np.array([[[0, 0, 0], [0, 0, r]] for r in (1.0, 1.1, 1.2)])
    plan = SimpleNamespace(
        geometry_sets=[SimpleNamespace(positions=positions, values=np.array([[1.0], [1.1], [1.2]]))]
    )
    method = "cis(singlets=1)"
    forward = walk_states(_rows(method, positions, 1, 0), plan)["overlaps"]
    assert forward[0] is None and forward[1].tolist() == [[0.9]] and forward[2] is None
    # a point redone walking back stores its overlaps against walk + 1
    backward = walk_states(_rows(method, positions, 1, 2), plan)["overlaps"]
    assert backward[1] is None and backward[2].tolist() == [[0.9]]
    # overlaps against a geometry that is not a neighbour here are not used
    elsewhere = positions.copy()
    elsewhere[0, 1, 2] = 0.95
    stale = _rows(method, elsewhere, 1, 0)
    assert walk_states(stale, plan)["overlaps"][1] is None
