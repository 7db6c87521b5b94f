"""Small output defects of issue 9: one failed-count column, plain text in Markdown, and the
spec's order of molecules and levels in every table (status, plan, summary, terminal report).

No calculation runs: the store is empty, so every point is pending.
"""

import html
import textwrap
from pathlib import Path

from pesflow.campaign import load_campaign
from pesflow.cli import main
from pesflow.plan.expand import expand
from pesflow.report.markdown import md
from pesflow.store.point_store import PointStore
from pesflow.tables.points import points_table, status_counts
from pesflow.tables.summary import summary_table

# Levels and molecules deliberately out of alphabetical order.
SPEC = """\
campaign: order
molecules:
  water: {builtin: H2O}
  hf_molecule: {builtin: HF}
scans:
  stretch:
    molecules: [water, hf_molecule]
    coordinates:
      - {type: distance, atoms: [1, 2], from: 0.8, to: 1.2, points: 5}
levels:
  - {method: mp2, basis: 6-31g}
  - {method: hf, basis: sto-3g}
  - {method: b3lyp, basis: 6-31g}
"""
LEVELS = ["mp2/6-31g", "hf/sto-3g", "b3lyp/6-31g"]
MOLECULES = ["water", "hf_molecule"]


def campaign_tables():
    path = Path("order.yaml")
    path.write_text(textwrap.dedent(SPEC))
    campaign = load_campaign(path)
    plan = expand(campaign)
    points = points_table(plan, PointStore(campaign.store_path))
    return path, campaign, plan, points


def test_status_counts_follow_the_spec_order_of_molecules_and_levels():
    _, campaign, _, points = campaign_tables()
    counts = status_counts(points, list(campaign.molecules), [x.label for x in campaign.levels])
    assert list(counts["molecule"]) == [m for m in MOLECULES for _ in LEVELS]
    assert list(counts["level"]) == LEVELS * len(MOLECULES)
    assert (counts["pending"] == 5).all()


def test_status_command_lists_levels_in_the_spec_order_as_plan_does(capsys):
    path, *_ = campaign_tables()
    assert main(["status", str(path)]) == 0
    status = capsys.readouterr().out
    assert main(["plan", str(path)]) == 0
    plan = capsys.readouterr().out

    def order(text):
        return sorted(LEVELS, key=lambda lvl: text.index(lvl))

    assert order(status) == LEVELS
    assert order(plan) == LEVELS
    assert status.index("water") < status.index("hf_molecule")


def test_summary_has_one_failed_count_column_in_the_spec_order():
    _, campaign, plan, points = campaign_tables()
    summary = summary_table(campaign, plan, points)
    failed = [c for c in summary.columns if "failed" in c]
    assert failed == ["n_failed"]
    assert list(summary["level"]) == LEVELS * len(MOLECULES)
    assert (summary["n_failed"] == 0).all() and (summary["n_pending"] == 5).all()


def test_report_before_any_run_shows_pending_points_in_the_spec_order(capsys):
    # A report of an empty store works (every point pending) and names the levels in order.
    path, *_ = campaign_tables()
    assert main(["report", str(path), "-o", "report"]) == 0
    out = " ".join(capsys.readouterr().out.split())
    line = out[out.index("incomplete:") :]
    assert sorted(LEVELS, key=line.index) == LEVELS
    md_text = Path("report/report.md").read_text()
    assert sorted(LEVELS, key=md_text.index) == LEVELS


def test_markdown_keeps_user_text_plain_and_html_escapes_it():
    source = "Huber & Herzberg, Constants of Diatomic Molecules (1979)"
    assert md(source) == source
    assert md("6-31g* and r_e") == "6-31g* and r_e"
    assert html.escape(source) == "Huber &amp; Herzberg, Constants of Diatomic Molecules (1979)"


def test_markdown_makes_markup_in_user_text_inert_with_backslashes():
    # CommonMark (spec 0.31, "Backslash escapes"): any ASCII punctuation may be escaped.
    assert md("a | b") == "a \\| b"
    assert md("<script>x</script>") == "\\<script>x\\</script>"
    assert md("&amp; stays literal") == "\\&amp; stays literal"
    assert md("x < y & y > z") == "x < y & y > z"
    assert md("line\nbreak") == "line break"
