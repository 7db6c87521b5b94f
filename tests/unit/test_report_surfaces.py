"""Small pieces of what a person reads: the closest-level ranking on common curves (hand
computed), figure labels from the quantity registry, durations, and the end of a large run
at an 80-column terminal.

Ranking example (deviations in angstrom; "-" is a curve without a value):

    level   m1      m2      m3      MAD over its own curves    MAD over m2, m3
    x       0.000   +0.004  -0.004  0.008 / 3 = 0.002667       0.004
    y       -       +0.003  -0.003  0.003                      0.003

Over its own curves x looks better (0.00267 < 0.003) only because it was also judged on m1,
which y lacks; on the curves both have, y is closer (0.003 < 0.004).
"""

import re

import numpy as np
import pandas as pd
import pytest
from rich.console import Console

from pesflow.analysis.quantities import QUANTITIES
from pesflow.report.stats import closest_levels, common_curve_statistics, level_statistics


def _deviations():
    rows = [
        ("x", "m1", 0.000),
        ("x", "m2", 0.004),
        ("x", "m3", -0.004),
        ("y", "m1", np.nan),
        ("y", "m2", 0.003),
        ("y", "m3", -0.003),
    ]
    return pd.DataFrame(
        [
            {"quantity": "r_e_angstrom", "level": lvl, "molecule": m, "scan": "s", "deviation": d}
            for lvl, m, d in rows
        ]
    )


def test_closest_level_is_ranked_on_the_curves_every_level_has():
    d = _deviations()
    every_curve = closest_levels(level_statistics(d, against="ref"))
    assert every_curve.iloc[0]["level"] == "x"  # the misleading ranking over different curves
    stats = common_curve_statistics(d, against="ref").set_index("level")
    assert stats.loc["x", "n"] == stats.loc["y", "n"] == 2
    assert stats.loc["x", "n_curves"] == 3 and stats.loc["y", "n_curves"] == 2
    assert stats.loc["x", "mean_absolute"] == pytest.approx(0.004, rel=1e-12)
    assert stats.loc["y", "mean_absolute"] == pytest.approx(0.003, rel=1e-12)
    assert stats.loc["x", "mean_signed"] == pytest.approx(0.0, abs=1e-15)
    best = closest_levels(common_curve_statistics(d, against="ref"))
    assert best.iloc[0]["level"] == "y" and best.iloc[0]["same_n"]


def test_a_level_without_any_value_is_not_ranked_and_does_not_empty_the_common_set():
    d = pd.concat(
        [_deviations(), pd.DataFrame([{"quantity": "r_e_angstrom", "level": "z",
                                       "molecule": "m2", "scan": "s", "deviation": np.nan}])],
        ignore_index=True,
    )  # fmt: skip
    stats = common_curve_statistics(d, against="ref", levels=["x", "y", "z"])
    assert list(stats["level"]) == ["x", "y"]
    assert (stats["n"] == 2).all()


def test_figure_labels_use_the_symbols_and_units_of_the_tables():
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    from pesflow.report.plots import quantity_label

    for q in QUANTITIES:
        if not q.shown:
            continue
        label = quantity_label(q, "MAD of ")
        assert label.endswith(f"({q.unit})")
        outside_math = re.sub(r"\$[^$]*\$", "", label)
        assert "_" not in outside_math and q.column not in label, label
        # matplotlib's mathtext parses it (an unbalanced $ or unknown command would raise).
        fig = Figure()
        FigureCanvasAgg(fig)
        fig.add_subplot().set_ylabel(label)
        fig.canvas.draw()


def test_durations_read_as_seconds_minutes_or_hours():
    from pesflow.units import format_duration as fmt_duration

    assert fmt_duration(4.356) == "4.4 s"
    assert fmt_duration(0.00121 * 3600) == "4.4 s"  # the "0.00121 core-hours" of the issue
    assert fmt_duration(95) == "1.6 min"
    assert fmt_duration(7200) == "2.0 h"
    assert fmt_duration(float("nan")) == ""


def test_end_of_a_large_run_shows_level_totals_and_only_rows_that_need_attention(monkeypatch):
    from pesflow import cli

    molecules = [f"molecule_{i:02d}" for i in range(20)]
    levels = ["hf/6-31g", "mp2/cc-pvtz"]
    counts = pd.DataFrame(
        [
            {
                "molecule": m,
                "level": lvl,
                "done": 12 - (m == "molecule_07" and lvl == "mp2/cc-pvtz"),
                "failed": int(m == "molecule_07" and lvl == "mp2/cc-pvtz"),
                "pending": 0,
            }
            for m in molecules
            for lvl in levels
        ]
    )
    console = Console(width=80, record=True)
    monkeypatch.setattr(cli, "console", console)

    class Campaign:
        name = "big"

    warnings = pd.DataFrame(
        {"molecule": ["molecule_03"], "level": ["hf/6-31g"], "warnings": [2]}
    )  # e.g. noisy energies and a minimum not bracketed on that curve
    cli._print_status(
        Campaign(), counts, counts.iloc[:0], [], spec="big.yaml", warnings=lambda: warnings
    )
    out = console.export_text()
    assert all(len(line) <= 80 for line in out.splitlines())
    # Per-level totals: 20 x 12 points, one failed at mp2/cc-pvtz.
    assert re.search(r"hf/6-31g\s+│\s+240\s+│\s+0\s+│\s+0", out), out
    assert re.search(r"mp2/cc-pvtz\s+│\s+239\s+│\s+1\s+│\s+0", out), out
    # Only the row that needs attention, and the command that shows the rest.
    assert "molecule_07" in out and "molecule_08" not in out
    assert re.search(r"molecule_03\s+│\s+hf/6-31g\s+│\s+12\s+│\s+0\s+│\s+0\s+│\s+2", out), out
    assert "molecule_03 │ mp2" not in out
    assert "pesflow status big.yaml" in out and "pesflow report big.yaml" in out
    # A small campaign prints every row.
    console = Console(width=80, record=True)
    monkeypatch.setattr(cli, "console", console)
    small = counts[counts["molecule"].isin(molecules[:3])]
    cli._print_status(Campaign(), small, small.iloc[:0], [], spec="small.yaml")
    out = console.export_text()
    assert all(m in out for m in molecules[:3]) and "pesflow status" not in out
