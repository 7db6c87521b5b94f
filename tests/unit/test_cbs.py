"""CBS extrapolation: the formulas on their own model energies, and the spec's CBS levels.

The formulas are checked on energies built from each scheme's own model, so the exact
limit is known: Helgaker, Klopper, Koch & Noga, J. Chem. Phys. 106, 9639 (1997)
(E_corr(X) = E_inf + A X^-3); Karton & Martin, Theor. Chem. Acc. 115, 330 (2006)
(E_HF(X) = E_inf + A (X+1) exp(-9 sqrt(X))); Feller, J. Chem. Phys. 96, 6104 (1992)
(E_HF(X) = E_inf + B exp(-C X)).
"""

import math
import textwrap
from pathlib import Path

import pytest

from pesflow.analysis import cbs
from pesflow.campaign import load_campaign
from pesflow.cli import main


def test_helgaker_two_point_recovers_the_inverse_cube_limit():
    e_inf, a = -0.3712, 0.21
    for x, y in ((2, 3), (3, 4), (3, 5)):
        energies = [e_inf + a / y**3, e_inf + a / x**3]
        assert cbs.correlation_cbs([y, x], energies) == pytest.approx(e_inf, abs=1e-12)


def test_karton_martin_two_point_recovers_its_model_limit():
    e_inf, a = -100.0712, 3.7
    for y, x in ((2, 3), (3, 4), (4, 5)):
        energies = [e_inf + a * (n + 1) * math.exp(-9 * math.sqrt(n)) for n in (y, x)]
        assert cbs.hf_cbs_two_point([y, x], energies) == pytest.approx(e_inf, abs=1e-12)


def test_feller_three_point_recovers_the_exponential_limit_and_refuses_non_geometric():
    e_inf, b, c = -76.0671, 0.9, 1.63
    energies = [e_inf + b * math.exp(-c * n) for n in (2, 3, 4)]
    assert cbs.hf_cbs_three_point([4, 2, 3], [energies[2], energies[0], energies[1]]) == (
        pytest.approx(e_inf, abs=1e-10)
    )
    assert math.isnan(cbs.hf_cbs_three_point([2, 3, 4], [-1.0, -1.1, -1.3]))  # not converging


def test_cbs_energy_adds_hf_and_correlation_limits():
    cards, hf = [3, 4], [-1.1330, -1.1335]
    total = [-1.1645, -1.1661]
    parts = cbs.cbs_energy("mp2", cards, hf, total)
    corr = (64 * (total[1] - hf[1]) - 27 * (total[0] - hf[0])) / 37
    assert parts["correlation_cbs_hartree"] == pytest.approx(corr, abs=1e-14)
    assert parts["energy_hartree"] == pytest.approx(parts["hf_cbs_hartree"] + corr, abs=1e-14)
    assert cbs.cbs_energy("hf", cards, hf)["correlation_cbs_hartree"] == 0.0


def test_basis_family_parsing_and_labels():
    assert cbs.parse_cc_basis("cc-pVDZ") == ("cc-pvxz", 2)
    assert cbs.parse_cc_basis("aug-cc-pwcv5z") == ("aug-cc-pwcvxz", 5)
    assert cbs.parse_cc_basis("6-31g*") is None
    assert cbs.cbs_basis_label(["cc-pvqz", "cc-pvtz"]) == "cbs(cc-pvtz,cc-pvqz)"


SPEC = """\
campaign: cbs-spec
molecules:
  dihydrogen: {{builtin: H2}}
scans:
  stretch:
    molecules: [dihydrogen]
    coordinates:
      - {{type: distance, atoms: [1, 2], from: 0.6, to: 0.9, points: 5}}
levels:
  - {level}
"""


def _write(level):
    path = Path("campaign.yaml")
    path.write_text(textwrap.dedent(SPEC.format(level=level)))
    return path


def test_cbs_level_plans_its_members_and_no_points_of_its_own():
    from pesflow.plan.expand import expand

    campaign = load_campaign(_write("{method: mp2, basis: [cc-pvdz, cc-pVTZ], extrapolate: cbs}"))
    labels = [lvl.label for lvl in campaign.levels]
    assert labels == [
        "mp2/cc-pvdz", "mp2/cc-pvtz", "hf/cc-pvdz", "hf/cc-pvtz", "mp2/cbs(cc-pvdz,cc-pvtz)"
    ]  # fmt: skip
    derived = campaign.levels[-1]
    assert {m.label for m in derived.members} == set(labels[:4])
    plan = expand(campaign, version="test")
    assert set(plan.points["level"]) == set(labels[:4])
    assert len(plan.points) == 4 * 5


@pytest.mark.parametrize(
    ("level", "expected"),
    [
        ("{method: b3lyp, basis: [cc-pvdz, cc-pvtz], extrapolate: cbs}", "hf or a correlated"),
        ("{method: mp2, basis: [cc-pvtz, aug-cc-pvqz], extrapolate: cbs}", "one family"),
        ("{method: mp2, basis: [cc-pvtz, cc-pVTZ], extrapolate: cbs}", "different cardinal"),
        ("{method: mp2, basis: cc-pvtz, extrapolate: cbs}", "a list of 2 or 3 basis sets"),
        ("{method: mp2, basis: [def2-svp, def2-tzvp], extrapolate: cbs}", "not one"),
        ("{method: hf, basis: [cc-pvdz, cc-pvtz, cc-pv5z], extrapolate: cbs}", "consecutive"),
        ("{method: mp2, basis: [cc-pvdz, cc-pvtz], extrapolate: yes}", "extrapolate"),
    ],
)
def test_bad_cbs_levels_are_refused_in_one_line(level, expected, capsys):
    path = _write(level)
    code = main(["check", str(path)])
    out, err = capsys.readouterr()
    assert code == 2, out + err
    lines = [line for line in err.strip().splitlines() if line.strip()]
    assert len(lines) == 1, err
    assert "campaign.yaml" in err and expected in " ".join(err.split()), err


def test_cbs_rows_are_pending_before_any_member_is_computed(tmp_path):
    from pesflow.plan.expand import expand
    from pesflow.store.point_store import PointStore
    from pesflow.tables.points import points_table, status_counts

    campaign = load_campaign(_write("{method: hf, basis: [cc-pvdz, cc-pvtz], extrapolate: cbs}"))
    table = points_table(expand(campaign, version="test"), PointStore(tmp_path / "store"))
    rows = table[table["level"] == "hf/cbs(cc-pvdz,cc-pvtz)"]
    assert len(rows) == 5 and set(rows["status"]) == {"pending"}
    assert rows["key"].str.startswith("cbs-").all()
    counts = status_counts(table)
    assert list(counts["level"]) == ["hf/cc-pvdz", "hf/cc-pvtz", "hf/cbs(cc-pvdz,cc-pvtz)"]


def test_a_failed_member_fails_the_cbs_point_and_a_done_point_uses_the_formula():
    import numpy as np

    from pesflow.plan.expand import expand, points_frame
    from pesflow.tables.derived import add_derived_rows

    campaign = load_campaign(_write("{method: hf, basis: [cc-pvdz, cc-pvtz], extrapolate: cbs}"))
    plan = expand(campaign, version="test")
    frame = points_frame(plan)
    # made-up member energies (hartree); the walk-0 cc-pVTZ point failed
    dz, tz = -1.1280, -1.1329
    frame["energy_hartree"] = np.where(frame["basis"] == "cc-pvdz", dz, tz)
    frame["converged"] = pd_object([True] * len(frame))
    frame.loc[(frame["basis"] == "cc-pvtz") & (frame["walk"] == 0), "converged"] = False
    frame["wall_s"] = 1.0
    out = add_derived_rows(plan, frame)
    cbs_rows = out[out["level"] == "hf/cbs(cc-pvdz,cc-pvtz)"].sort_values("walk")
    assert cbs_rows["converged"].tolist() == [False, True, True, True, True]
    assert "member hf/cc-pvtz failed" in cbs_rows["error"].iloc[0]
    expected = cbs.hf_cbs_two_point([2, 3], [dz, tz])
    np.testing.assert_allclose(cbs_rows["energy_hartree"].iloc[1:], expected, rtol=0, atol=1e-14)
    assert (cbs_rows["wall_s"] == 2.0).all()


def pd_object(values):
    import pandas as pd

    return pd.Series(values, dtype="object")
