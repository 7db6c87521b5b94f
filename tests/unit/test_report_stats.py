"""Error statistics of the report against hand-computed examples, and the splitting of the
summary's warnings.

Hand computation for the deviations d = (+0.012, -0.004, +0.020, NaN) angstrom (NaN is a
curve without a value and is left out):
    n = 3
    MSD = (0.012 - 0.004 + 0.020) / 3 = 0.028 / 3 = 0.0093333...
    MAD = (0.012 + 0.004 + 0.020) / 3 = 0.036 / 3 = 0.012
    max |d| = 0.020, at the third entry (index 2)
"""

import math

import numpy as np
import pandas as pd
import pytest

from pesflow.analysis.derived import ONE_D_FLAG, RESTRICTED_FLAG
from pesflow.report.section_tables import cardinal_number
from pesflow.report.stats import closest_levels, error_statistics, level_statistics
from pesflow.report.tables import split_flags


def test_error_statistics_hand_computed():
    s = error_statistics([0.012, -0.004, 0.020, np.nan])
    assert s.n == 3
    assert s.mean_signed == pytest.approx(0.028 / 3, rel=1e-14)
    assert s.mean_absolute == pytest.approx(0.012, rel=1e-14)
    assert s.max_absolute == pytest.approx(0.020, rel=1e-14)
    assert s.max_index == 2


def test_error_statistics_largest_deviation_may_be_negative():
    # d = (-30, +10) cm-1: MSD = -10, MAD = 20, max |d| = 30 (the negative one).
    s = error_statistics([-30.0, 10.0])
    assert (s.n, s.mean_signed, s.mean_absolute, s.max_absolute, s.max_index) == (
        2,
        -10.0,
        20.0,
        30.0,
        0,
    )


def test_error_statistics_without_values():
    s = error_statistics([np.nan, np.nan])
    assert s.n == 0 and s.max_index is None
    assert all(math.isnan(x) for x in (s.mean_signed, s.mean_absolute, s.max_absolute))
    assert error_statistics([]).n == 0


def _long_table():
    # Two levels against a reference level "ref", three molecules; level "b" has no value
    # for "m2" (still pending).
    rows = [
        ("a", "m1", +0.012),
        ("a", "m2", -0.004),
        ("a", "m3", +0.020),
        ("b", "m1", -0.001),
        ("b", "m2", np.nan),
        ("b", "m3", +0.003),
        ("ref", "m1", 0.0),
        ("ref", "m2", 0.0),
        ("ref", "m3", 0.0),
        ("never", "m1", np.nan),
        ("never", "m2", np.nan),
        ("never", "m3", np.nan),
    ]
    return pd.DataFrame(
        [
            {
                "quantity": "r_e_angstrom",
                "level": lvl,
                "molecule": m,
                "scan": "stretch",
                "deviation": d,
            }
            for lvl, m, d in rows
        ]
    )


def test_level_statistics_per_level():
    table = level_statistics(_long_table(), against="ref", exclude_level="ref")
    assert list(table["level"]) == ["a", "b", "never"]
    a, b, never = (table.iloc[i] for i in range(3))
    assert (a["n"], a["mean_absolute"], a["max_absolute"]) == (
        3,
        pytest.approx(0.012),
        pytest.approx(0.020),
    )
    assert a["max_absolute_at"] == "m3 stretch"
    # b: d = (-0.001, +0.003): MSD = +0.001, MAD = 0.002, max 0.003 at m3.
    assert b["n"] == 2
    assert b["mean_signed"] == pytest.approx(0.001, rel=1e-12)
    assert b["mean_absolute"] == pytest.approx(0.002, rel=1e-12)
    assert b["max_absolute_at"] == "m3 stretch"
    # A level with nothing computed still has its row, with n = 0.
    assert never["n"] == 0 and math.isnan(never["mean_absolute"])
    assert set(table["against"]) == {"ref"}


def test_closest_level_is_the_smallest_mean_absolute_deviation():
    table = level_statistics(_long_table(), against="ref", exclude_level="ref")
    best = closest_levels(table)
    assert len(best) == 1
    row = best.iloc[0]
    assert row["level"] == "b" and row["n_levels"] == 2
    # a over 3 curves, b over 2: the ranking says the counts differ.
    assert not row["same_n"]


def test_split_flags_reads_the_structured_records():
    from pesflow.analysis.flags import Flag, flag_records

    warnings = [
        Flag(
            "few-vibrational-levels",
            "only 0 vibrational level(s) converged within the scanned range (0.75-1.25 A; "
            "levels are trapped by its ends): extend the scan | even with a separator inside",
            (1.25,),
        ),
        Flag("anharmonicity-from-morse", "omega_e x_e from the Morse fit (fewer than two)"),
        Flag("noisy-points", "noisy energies at 1.2 A: up to 4.9e-06 hartree off", (1.2,)),
    ]
    assert split_flags(flag_records(warnings)) == warnings
    assert [f.code for f in split_flags(flag_records(warnings))] == [w.code for w in warnings]
    assert split_flags(flag_records(warnings))[0].positions == (1.25,)
    assert split_flags(float("nan")) == [] and split_flags("") == []


def test_flags_are_attached_to_the_quantities_they_concern():
    from pesflow.analysis.flags import Flag

    assert ONE_D_FLAG.concerns == {"omega_1d_cm-1"}
    assert {"d_e_ev", "d_0_ev"} <= RESTRICTED_FLAG.concerns
    assert "r_e_angstrom" not in RESTRICTED_FLAG.concerns
    unbracketed = Flag("minimum-not-bracketed", "the lowest energy is at the end of the scan")
    assert unbracketed.concerns is None


def test_cardinal_numbers():
    # Dunning's cc-pVXZ: X = D, T, Q, 5 is 2, 3, 4, 5; def2-SVP/TZVP/QZVP are double/triple/
    # quadruple zeta (Weigend & Ahlrichs 2005); Pople sets have no cardinal number.
    assert [
        cardinal_number(b)
        for b in (
            "cc-pvdz",
            "aug-cc-pvtz",
            "cc-pwcvqz",
            "cc-pv5z",
            "def2-svp",
            "def2-tzvpp",
            "def2-qzvp",
            "6-31g*",
        )
    ] == [2, 3, 4, 5, 2, 3, 4, None]
