"""Adaptive grids without a quantum-chemistry run: the spec's ``refine`` (what is refused),
the decisions on analytic curves with exact answers, and what the plan does with added points.
"""

import textwrap
from pathlib import Path

import numpy as np
import pytest

from pesflow.analysis import refine as rules
from pesflow.analysis.curves import analyze_curve
from pesflow.analysis.derived import summarize_curve
from pesflow.analysis.vibration import harmonic_wavenumber_cm1
from pesflow.campaign import load_campaign
from pesflow.cli import main
from pesflow.plan.expand import expand
from pesflow.units import BOHR_ANGSTROM

SPEC = """\
campaign: refine-spec
molecules:
  hf: {{builtin: HF}}
  water: {{builtin: H2O}}
scans:
  stretch:
    molecules: [{molecules}]
    coordinates:
      - {{type: distance, atoms: [1, 2], from: 0.7, to: 1.3, points: 5}}
      {second}
    refine: {refine}
levels:
  - {{method: hf, basis: sto-3g}}
store: store
"""

GOOD = dict(molecules="hf", second="", refine="{omega_e_cm-1: 0.5, max_points: 9}")


def _write(**changes):
    path = Path("campaign.yaml")
    path.write_text(textwrap.dedent(SPEC.format(**{**GOOD, **changes})))
    return path


@pytest.mark.parametrize(
    ("changes", "expected"),
    [
        (
            {"refine": "{omega_e: 0.5, max_points: 9}"},
            "unknown refine target 'omega_e' (did you mean 'omega_e_cm-1'",
        ),
        ({"refine": "{omega_e_cm-1: 0.5}"}, "refine needs max_points"),
        ({"refine": "{omega_e_cm-1: 0.5, max_points: 8.5}"}, "refine needs max_points"),
        ({"refine": "{max_points: 9}"}, "refine names no target; allowed: r_e_angstrom"),
        ({"refine": "{omega_e_cm-1: -1, max_points: 9}"}, "must be positive"),
        ({"refine": "{omega_e_cm-1: 0.5, max_points: 5}"}, "must exceed the coarse grid's 5"),
        (
            {
                "molecules": "water",
                "second": "- {type: angle, atoms: [2, 1, 3], from: 90, to: 110, points: 3}",
            },
            "refine works on 1-D scans",
        ),
    ],
)
def test_bad_refine_is_refused_in_one_line_naming_file_and_field(changes, expected, capsys):
    code = main(["check", str(_write(**changes))])
    out, err = capsys.readouterr()
    assert code == 2, out + err
    assert len([line for line in err.splitlines() if line.strip()]) == 1, err
    assert "campaign.yaml" in err and "refine" in err, err
    assert expected in " ".join(err.split()), err
    assert not Path("store").exists()


def test_refine_targets_come_from_the_quantity_registry():
    from pesflow.analysis.quantities import QUANTITY

    targets = rules.refine_targets()
    assert {"r_e_angstrom", "omega_e_cm-1", "barrier_kcal_mol", "dihedral_e_degree"} <= set(targets)
    assert all(QUANTITY[t].uncertain for t in targets)


def test_added_points_join_the_walk_and_leave_the_coarse_keys_unchanged():
    campaign = load_campaign(_write())
    coarse = expand(campaign, version="test")
    campaign.added_points = {("stretch", "hf"): (0.95, 0.9)}
    refined = expand(campaign, version="test")
    gs = refined.geometry_sets[0]
    assert gs.values[:, 0].tolist() == [0.7, 0.85, 0.9, 0.95, 1.0, 1.15, 1.3]
    assert set(coarse.points["key"]) < set(refined.points["key"])
    assert len(refined.points) == len(coarse.points) + 2


MORSE = dict(d_e=0.2250, a_per_angstrom=2.2266, r_e=0.9168, mu=0.957055)


def _morse(r):
    m = MORSE
    return m["d_e"] * (1 - np.exp(-m["a_per_angstrom"] * (np.asarray(r) - m["r_e"]))) ** 2 - 100


def test_rounds_on_a_morse_curve_meet_the_targets_within_nine_points():
    """Refinement as ``pesflow run`` does it, on an analytic Morse curve (parameters close to
    HF's, our own choice).  Exact reference: a Morse potential's curvature at r_e is
    2 D_e a^2, so omega_e follows from the harmonic formula, and its minimum is r_e."""
    m = MORSE
    k_hartree_bohr2 = 2 * m["d_e"] * (m["a_per_angstrom"] * BOHR_ANGSTROM) ** 2
    omega_exact = harmonic_wavenumber_cm1(k_hartree_bohr2, m["mu"])
    targets = {"omega_e_cm-1": 0.5, "r_e_angstrom": 1e-4}
    coarse = np.linspace(0.70, 1.30, 5)
    values, previous = list(coarse), None
    for round_number in range(1, 10):
        q = np.sort(values)
        row = summarize_curve("distance", q, _morse(q), reduced_mass_amu=m["mu"], diatomic=True)
        states = rules.target_states(targets, row, previous)
        if all(s.met for s in states):
            break
        previous = {s.column: (s.value, s.u) for s in states}
        unmet = [s.column for s in states if not s.met]
        analysis = analyze_curve(q, _morse(q), unit="angstrom")
        new = rules.propose_points(analysis, unmet, round_number, 0.15, values, 0.7, 1.3)
        assert new, "a round that does not meet the targets adds points"
        values += [v for v, _ in new]
    assert all(s.met for s in states)
    assert len(values) <= 9
    assert abs(row["omega_e_cm-1"] - omega_exact) < 1.0
    assert abs(row["r_e_angstrom"] - m["r_e"]) < 1e-4


def test_barrier_pairs_go_around_the_maximum_and_its_minima_on_a_periodic_curve():
    """A three-fold cosine torsion (ethane-like, our own numbers): the barrier's maximum and
    the two minima it separates each get a pair, wrapped into the scanned range."""
    phi = np.arange(10.0, 360.0, 60.0)
    energy = 0.5 * 0.0046 * (1 - np.cos(np.radians(3 * phi)))
    analysis = analyze_curve(phi, energy, periodic=True, unit="degree")
    new = rules.propose_points(analysis, ["barrier_kcal_mol"], 1, 60.0, phi, 10.0, 310.0, 360.0)
    values = [v for v, _ in new]
    assert len(values) == 6
    assert all(10.0 <= v < 370.0 for v in values)
    reasons = " ".join(why for _, why in new)
    assert "barrier maximum" in reasons and "minimum under the barrier" in reasons


def test_a_point_already_scanned_is_not_added_again():
    r = np.linspace(0.7, 1.3, 5)
    analysis = analyze_curve(r, _morse(r), unit="angstrom")
    first = rules.propose_points(analysis, ["r_e_angstrom"], 1, 0.15, r, 0.7, 1.3)
    again = rules.propose_points(
        analysis, ["r_e_angstrom"], 1, 0.15, [*r, *(v for v, _ in first)], 0.7, 1.3
    )
    assert len(first) == 2 and again == []
