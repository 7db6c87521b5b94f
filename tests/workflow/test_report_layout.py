"""The report as a person reads it: in a browser at 1400 and 800 pixels, and at an 80-column
terminal.

A campaign with a torsion (hydrogen peroxide, full circle) and a stretch (hydrogen fluoride)
at hf/sto-3g and mp2/sto-3g (the reference level) is computed once through ``python -m
pesflow run``; a second spec over the same store extends the stretch, adds a level that was
never run (pending points) and one stored failed point.  The demo campaign gets the same
browser check in a slow test.
"""

import re
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from pesflow.campaign import load_campaign
from pesflow.plan.expand import expand
from pesflow.report import CLOSEST_MARK, build_report, terminal_summary
from pesflow.report.formatting import fmt_seconds
from pesflow.report.html import SECTIONS
from pesflow.store.point_store import PointStore
from pesflow.tables.points import points_table
from pesflow.tables.summary import summary_table
from tests.workflow.browser import CHROMIUM, layout_problems
from tests.workflow.helpers import pesflow, store_failed_hf_point

pytestmark = [pytest.mark.workflow, pytest.mark.integration]

ROOT = Path(__file__).resolve().parents[2]
needs_chromium = pytest.mark.skipif(
    not Path(CHROMIUM).exists(),
    reason="headless Chromium not installed (Debian package 'chromium')",
)

SPEC = """\
campaign: layout
molecules:
  peroxide: {builtin: H2O2}
  hydrogen_fluoride: {builtin: HF}
scans:
  torsion:
    molecules: [peroxide]
    coordinates:
      - {type: dihedral, atoms: [3, 1, 2, 4], from: 0, to: 330, step: 30}
  stretch:
    molecules: [hydrogen_fluoride]
    coordinates:
      - {type: distance, atoms: [1, 2], from: 0.80, to: %(r_to)s, points: %(r_points)s}
levels:
  - {method: hf, basis: sto-3g}
  - {method: mp2, basis: sto-3g}%(extra)s
compare:
  reference_level: mp2/sto-3g
store: store
"""


def write_spec(path, r_to="1.10", r_points=7, extra=""):
    path.write_text(SPEC % {"r_to": r_to, "r_points": r_points, "extra": extra})
    return path


def tables(spec):
    campaign = load_campaign(spec)
    plan = expand(campaign)
    points = points_table(plan, PointStore(campaign.store_path))
    return campaign, plan, points, summary_table(campaign, plan, points)


@pytest.fixture(scope="module")
def partial(tmp_path_factory):
    """The computed campaign seen through the second spec: pending and failed points."""
    root = tmp_path_factory.mktemp("layout")
    pesflow("run", str(write_spec(root / "full.yaml")), "--cores", "2", check=0)
    spec = write_spec(
        root / "partial.yaml",
        r_to="1.30",
        r_points=11,
        extra="\n  - {method: b3lyp, basis: sto-3g}",
    )
    campaign, plan, points, _ = tables(spec)
    target = points[(points["level"] == "hf/sto-3g") & np.isclose(points["r_angstrom"], 1.30)].iloc[
        0
    ]
    gs = next(g for g in plan.geometry_sets if g.scan == "stretch")
    store_failed_hf_point(campaign, plan, gs, target)
    campaign, plan, points, summary = tables(spec)
    counts = points["status"].value_counts()
    assert counts["failed"] == 1 and counts["pending"] > 0
    paths = build_report(campaign, plan, points, summary, root / "report")
    return root, spec, campaign, points, summary, paths


@needs_chromium
@pytest.mark.parametrize("width", [1400, 800])
def test_page_fits_the_window_with_torsions_failures_and_pending_points(partial, width, tmp_path):
    *_, paths = partial
    assert layout_problems(paths["html"], width, tmp_path) == []


def test_every_warning_is_listed_once_and_referenced_where_it_applies(partial):
    *_, summary, paths = partial
    page = paths["html"].read_text()
    notes = page[page.index('id="notes"') : page.index('id="cost"')]
    items = re.findall(r'<li id="note-(\d+)">(.*?)</li>', notes, re.S)
    assert items and [int(n) for n, _ in items] == list(range(1, len(items) + 1))
    # Each distinct flag message of the summary is one note, and no note is repeated.
    from pesflow.report.tables import split_flags

    messages = {str(f) for text in summary["flag_records"] for f in split_flags(text)}
    import html as html_lib

    for message in messages:
        assert sum(html_lib.escape(message, quote=True) in text for _, text in items) == 1
    # Every reference elsewhere points at an existing note; the notes are not repeated.
    refs = set(re.findall(r'href="#note-(\d+)"', page))
    assert refs and refs <= {n for n, _ in items}
    body = page.replace(notes, "")
    for message in messages:
        assert html_lib.escape(message, quote=True) not in body
    # The Markdown report numbers them the same way, once, under Notes.
    from pesflow.report.markdown import md

    text = paths["markdown"].read_text()
    assert text.count("## Notes") == 1
    for message in messages:
        assert text.count(md(message)) == 1


def test_long_sections_fold_and_empty_sections_say_why(partial):
    *_, paths = partial
    page = paths["html"].read_text()
    # Each method has one basis set here: no basis-set convergence section, one line saying why.
    assert 'id="convergence"' not in page
    assert "Basis-set convergence: left out, each method was computed with one basis set only" in (
        page
    )
    assert [s[0] for s in SECTIONS].count("notes") == 1
    folds = re.findall(r'<details id="[^"]+" class="fold"( open="open")?>', page)
    assert len(folds) >= 4  # every quantity and every curve folds
    assert 1 <= folds.count(' open="open"') < len(folds)  # the first of each is open
    assert "<script" not in page.lower()


def test_closest_level_is_ranked_on_the_curves_every_level_has(partial):
    *_, summary, paths = partial
    page = paths["html"].read_text()
    # r_e: hf/sto-3g has one curve (the stretch), b3lyp none (pending), so the ranking is on
    # that one curve; the verdict cell says how many.
    cells = re.findall(r'<td[^>]*data-best="([^"]+)"[^>]*data-n="(\d+)"', page)
    assert cells and all(int(n) >= 1 for _, n in cells)
    stats = pd.read_csv(paths["statistics_csv"])
    assert {"n", "mean_absolute"} <= set(stats.columns)


def test_terminal_report_fits_80_columns_and_gives_the_page_numbers(partial):
    from rich.console import Console

    *_, campaign, points, summary, paths = partial
    console = Console(width=80, record=True)
    terminal_summary(campaign, summary, console, paths=paths, points=points)
    out = console.export_text()
    lines = out.splitlines()
    too_long = [
        line for line in lines if len(line) > 80 and not line.startswith(("html:", "markdown:"))
    ]
    assert not too_long, too_long
    assert "…" not in out  # nothing cut
    for level in ("hf/sto-3g", "mp2/sto-3g", "b3lyp/sto-3g"):
        assert level in out
    assert CLOSEST_MARK in out and " *" not in out
    assert out.count("MSD, MAD: mean signed and mean absolute deviation") == 1
    assert "core-s: core-seconds" in out
    # The same core-seconds as the page's cost table (fragment points included).
    cost = pd.read_csv(paths["cost_csv"])
    cost_lines = lines[lines.index(next(x for x in lines if "cost and points per level" in x)) :]
    for _, c in cost.iterrows():
        row = next(line for line in cost_lines if line.startswith(f"│ {c['level']}"))
        assert f" {fmt_seconds(c['core_s'])} " in row
    page = paths["html"].read_text()
    for _, c in cost.iterrows():
        assert f'data-level="{c["level"]}" data-core-s=' in page


def test_plan_and_status_fit_80_columns(partial):
    import os

    root, spec, *_ = partial
    env = dict(os.environ, COLUMNS="80", OMP_NUM_THREADS="1")
    for verb in ("plan", "status", "check"):
        out = subprocess.run(
            [sys.executable, "-m", "pesflow", verb, str(spec)],
            capture_output=True,
            text=True,
            env=env,
            timeout=300,
        ).stdout
        lines = [line for line in out.splitlines() if not line.startswith("store: ")]
        assert all(len(line) <= 80 for line in lines), out
        assert "…" not in out, out
        for level in ("hf/sto-3g", "mp2/sto-3g", "b3lyp/sto-3g"):
            assert level in out, out
        if verb == "plan":
            assert "warning" not in out.lower()
            assert "from: " in out and "core-hours" not in out
            assert re.search(r"\d (s|min|h)\b", out), out
            assert f"store: {load_campaign(spec).store_path}\n" in out


@pytest.mark.slow
@needs_chromium
def test_demo_page_fits_the_window(tmp_path):
    configs = tmp_path / "configs"
    shutil.copytree(
        ROOT / "configs", configs, ignore=shutil.ignore_patterns("pesflow-store", "results")
    )
    spec = configs / "demo-hydrides.yaml"
    pesflow("run", str(spec), "--cores", "2", check=0)
    pesflow("report", str(spec), "-o", str(tmp_path / "report"), check=0)
    for width in (1400, 800):
        assert layout_problems(tmp_path / "report" / "report.html", width, tmp_path) == []
