"""Counterpoise scans in the spec and the plan: what is refused, what is planned, the keys."""

import textwrap
from pathlib import Path

import pytest

from pesflow.campaign import load_campaign
from pesflow.cli import main
from pesflow.plan.expand import expand

SPEC = """\
campaign: cp-spec
molecules:
  neon_dimer:
    xyz: "{xyz}"
    {fragments}
  water: {{builtin: H2O}}
scans:
  sep:
    molecules: [neon_dimer]
    coordinates:
      - {coordinate}
    counterpoise: true
    {extra}
levels:
  - {level}
"""

GOOD = dict(
    xyz="Ne 0 0 0\\nNe 0 0 3.1",
    fragments="fragments: [{atoms: [1]}, {atoms: [2]}]",
    coordinate="{type: distance, atoms: [1, 2], from: 2.8, to: 3.6, points: 3}",
    extra="",
    level="{method: hf, basis: cc-pvdz}",
)


def _write(**changes):
    path = Path("campaign.yaml")
    path.write_text(textwrap.dedent(SPEC.format(**{**GOOD, **changes})))
    return path


def test_counterpoise_plans_each_fragment_in_the_complex_basis_with_ghost_keys():
    plan = expand(load_campaign(_write()), version="test")
    roles = plan.points.groupby("role")["key"].count().to_dict()
    assert roles == {"scan": 3, "counterpoise": 6, "fragment": 2}
    cp = [gs for gs in plan.geometry_sets if gs.role == "counterpoise"]
    assert [gs.ghosts for gs in cp] == [(1,), (0,)]
    assert all(len(gs.symbols) == 2 for gs in cp)
    keys = plan.points["key"]
    assert keys.is_unique  # ghosts are part of the key: same geometry, different points


@pytest.mark.parametrize(
    ("changes", "expected"),
    [
        ({"fragments": ""}, "to list 2 fragments"),
        ({"extra": "relax: true"}, "rigid scan"),
        (
            {
                "xyz": "Ne 0 0 0\\nNe 0 0 3.1\\nNe 0 0 6.2",
                "fragments": "fragments: [{atoms: [1]}, {atoms: [2, 3]}]",
            },
            "whole fragment",
        ),
        ({"level": "{method: gfn2-xtb}"}, "basis sets"),
    ],
)
def test_bad_counterpoise_scans_are_refused_in_one_line(changes, expected, capsys):
    code = main(["check", str(_write(**changes))])
    out, err = capsys.readouterr()
    assert code == 2, out + err
    assert len([line for line in err.splitlines() if line.strip()]) == 1, err
    assert "campaign.yaml" in err and expected in " ".join(err.split()), err
