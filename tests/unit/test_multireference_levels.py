"""Multireference levels without computing: names and their options, spec checks, plan
keys and fragments, and the summary's active-space flags on hand-made records.

The checks are of pesflow's own bookkeeping (names, keys, flags); no energies.  The
thresholds used on the records are those of :mod:`pesflow.analysis.continuity`.
"""

import json
import textwrap
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from pesflow.campaign import load_campaign
from pesflow.engine import level_method, method_info
from pesflow.engine.pyscf.multireference import parse
from pesflow.errors import EngineSetupError, SpecError
from pesflow.plan.expand import expand
from pesflow.tables.summary import _active_space_flags, _fragment_active_space_flags

SPEC = """\
campaign: mr-test
molecules:
  dinitrogen:
    builtin: N2
    fragments: [{atoms: [1], multiplicity: 4}, {atoms: [2], multiplicity: 4}]
scans:
  stretch:
    molecules: [dinitrogen]
    coordinates:
      - {type: distance, atoms: [1, 2], from: 0.9, to: 3.0, points: 8}
levels:
  - {method: [casscf, nevpt2], active: [6, 6], basis: 6-31g}
  - {method: nevpt2, active: {ao_labels: ["N 2s", "N 2p"]}, basis: 6-31g}
  - {method: casscf, active: [6, 6], states: 2, basis: 6-31g}
  - {method: hf, basis: 6-31g}
"""


def campaign(text=SPEC, name="c.yaml"):
    Path(name).write_text(textwrap.dedent(text))
    return load_campaign(name)


@pytest.mark.parametrize(
    ("method", "options", "name"),
    [
        ("CASSCF", {"active": [6, 6]}, "casscf(6,6)"),
        ("nevpt2", {"active": {"ao_labels": ["N 2p", "o 2P"]}}, "nevpt2(avas:n 2p,o 2p)"),
        ("casscf", {"active": [2, 2], "states": 3}, "casscf(2,2;sa3)"),
        ("casscf", {"active": [2, 2], "weights": [0.75, 0.25]}, "casscf(2,2;sa2:0.75,0.25)"),
        ("casscf", {"active": [2, 2], "states": 2, "weights": [0.5, 0.5]}, "casscf(2,2;sa2)"),
        ("hf", {}, "hf"),
    ],
)
def test_level_options_fold_into_one_canonical_name(method, options, name):
    assert level_method(method, options) == name
    if "(" in name:  # the name reads back to the same level
        assert parse(name).name == name
        assert method_info(name).options == ("active", "states", "weights")


def test_nevpt2_shares_its_casscf_and_counts_have_no_fragments():
    info = method_info("nevpt2(6,6;sa2)")
    assert info.family == "casscf(6,6;sa2)"
    assert info.byproducts == ("casscf(6,6;sa2)",)
    assert info.fragments == "asymptote"
    assert method_info("casscf(avas:n 2p)").fragments == "separate"
    assert not info.has_gradients
    assert info.settings == ("conv_tol", "max_cycle", "scf_ladder")


@pytest.mark.parametrize(
    ("method", "options", "message"),
    [
        ("casscf", {}, "needs an active space"),
        ("hf", {"active": [2, 2]}, "hf takes no level options"),
        ("casscf", {"active": [3]}, "two whole numbers"),
        ("casscf", {"active": [7, 3]}, "1 to 2 x orbitals electrons"),
        ("casscf", {"active": {"ao_labels": ["Q 2p"]}}, "not an element and a shell"),
        ("casscf", {"active": [2, 2], "weights": [0.5, 0.6]}, "sum to 1"),
        ("casscf", {"active": [2, 2], "states": 3, "weights": [0.5, 0.5]}, "for 3 states"),
        ("casscf", {"active": [2, 2], "states": 0}, "1 or more"),
    ],
)
def test_bad_level_options_are_one_line_errors(method, options, message):
    with pytest.raises(EngineSetupError, match=message) as info:
        level_method(method, options)
    assert "\n" not in str(info.value)


def test_spec_labels_keys_and_fragments():
    plan = expand(campaign(), version="test")
    points = plan.points
    assert list(dict.fromkeys(points["level"])) == [
        "casscf(6,6)/6-31g",
        "nevpt2(6,6)/6-31g",
        "nevpt2(avas:n 2s,n 2p)/6-31g",
        "casscf(6,6;sa2)/6-31g",
        "hf/6-31g",
    ]
    assert points["key"].is_unique
    # nevpt2 by AVAS labels brings its casscf as a free byproduct with its own keys.
    (labels_set,) = [gs for gs in plan.geometry_sets if gs.role == "scan"]
    assert ("6-31g", "casscf(avas:n 2s,n 2p)") in labels_set.byproduct_keys
    # Fragments only for the levels whose active space has a counterpart on them.
    fragments = points[points["role"] == "fragment"]
    assert set(fragments["level"]) == {"nevpt2(avas:n 2s,n 2p)/6-31g", "hf/6-31g"}
    # One walk family per CASSCF: casscf(6,6) and nevpt2(6,6) together, apart from hf.
    families = dict(zip(points["level"], points["family"]))
    assert families["casscf(6,6)/6-31g"] == families["nevpt2(6,6)/6-31g"] == "casscf(6,6)"
    assert families["hf/6-31g"] == "hf"


def test_level_options_change_only_their_own_keys():
    base = expand(campaign(), version="test").points
    other = SPEC.replace("active: [6, 6], basis", "active: [4, 4], basis", 1)
    changed = expand(campaign(other, "d.yaml"), version="test").points

    def keys(points, level):
        return list(points.loc[points["level"] == level, "key"])

    assert keys(base, "hf/6-31g") == keys(changed, "hf/6-31g")
    assert keys(changed, "casscf(4,4)/6-31g")
    assert not set(base["key"]) & set(keys(changed, "casscf(4,4)/6-31g"))


@pytest.mark.parametrize(
    ("level", "field", "message"),
    [
        ("{method: hf, active: [2, 2], basis: 6-31g}", "levels[0].active", "takes no level"),
        ("{method: casscf, basis: 6-31g}", "levels[0].method", "needs an active space"),
        (
            "{method: casscf, active: [2, 2], weights: [0.2, 0.2], basis: 6-31g}",
            "levels[0].weights",
            "sum to 1",
        ),
        (
            "{method: casscf, active: {labels: [N 2p]}, basis: 6-31g}",
            "levels[0].active",
            "unknown key",
        ),
    ],
)
def test_spec_refuses_bad_level_options_with_one_line(level, field, message):
    text = SPEC.split("levels:")[0] + f"levels:\n  - {level}\n"
    with pytest.raises(SpecError) as info:
        campaign(text)
    text = str(info.value)
    assert field in text and message in text and "\n" not in text


def _rows(occupations, changes=None, q=None):
    q = np.linspace(1.0, 2.0, len(occupations)) if q is None else q
    extras = []
    for i, occ in enumerate(occupations):
        electrons = round(sum(occ))
        active = {"n_electrons": electrons, "n_orbitals": len(occ), "natural_occupations": occ}
        change = bool(changes and changes[i])
        extras.append(json.dumps({"active_space": active, "character_change": change}))
    return pd.DataFrame(
        {"r_angstrom": q, "status": "done", "extra_json": extras, "walk": range(len(q))}
    )


def test_summary_flags_a_jump_of_natural_occupations_where_it_stays():
    smooth = [[1.9, 0.1], [1.8, 0.2], [1.6, 0.4], [1.4, 0.6]]
    assert _active_space_flags(_rows(smooth), "r_angstrom") == []
    jump = [[1.9, 0.1], [1.8, 0.2], [1.0, 1.0], [1.0, 1.0]]
    (flag,) = _active_space_flags(_rows(jump), "r_angstrom")
    assert flag.code == "active-space-change" and flag.positions == (pytest.approx(5 / 3),)
    (flag,) = _active_space_flags(_rows(smooth, [0, 0, 0, 1]), "r_angstrom")
    assert flag.positions == (2.0,)
    # Points without an active space (an SCF level) are never flagged.
    plain = pd.DataFrame({"r_angstrom": [1.0, 2.0], "status": "done", "extra_json": None})
    assert _active_space_flags(plain, "r_angstrom") == []


def test_summary_flags_fragments_whose_active_spaces_do_not_add_up():
    curve = _rows([[1.0, 1.0, 1.0, 1.0, 1.0, 1.0]]).assign(
        molecule="dinitrogen", level="x", role="scan"
    )

    def fragment(n_electrons, n_orbitals):
        active = {"n_electrons": n_electrons, "n_orbitals": n_orbitals}
        return {
            "molecule": "dinitrogen",
            "level": "x",
            "role": "fragment",
            "extra_json": json.dumps({"active_space": active}),
        }

    table = pd.concat([curve, pd.DataFrame([fragment(3, 3), fragment(3, 3)])])
    assert _fragment_active_space_flags(table, curve) == []
    table = pd.concat([curve, pd.DataFrame([fragment(5, 4), fragment(3, 3)])])
    (flag,) = _fragment_active_space_flags(table, curve)
    assert flag.code == "inconsistent-active-space"
