"""The comparison report, built from a real campaign run through ``python -m pesflow run``.

One small campaign (hydrogen fluoride stretch, water stretch x bend grid; hf/sto-3g, hf/6-31g
and the reference level mp2/6-31g) is computed once per module; the report is then built with
:func:`pesflow.report.build_report` and checked against the summary table it was built from,
against the points table, and against basis-set facts.  A headless Chromium renders the page.
"""

import base64
import html
import io
import json
import re
import shutil
import subprocess
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from pesflow.campaign import load_campaign
from pesflow.plan.expand import expand
from pesflow.report import build_report, terminal_summary
from pesflow.report.formatting import fmt_dev
from pesflow.report.tables import QUANTITY, split_flags
from pesflow.store.point_store import PointStore
from pesflow.tables.points import points_table
from pesflow.tables.summary import summary_table
from tests.workflow.helpers import pesflow, store_failed_hf_point

pytestmark = [
    pytest.mark.workflow,
    pytest.mark.integration,
]

EVIL_SOURCE = '<script>alert(1)</script> & "x"'

SPEC = """\
campaign: report-wf
molecules:
  hydrogen_fluoride: {builtin: HF}
  water: {builtin: H2O}
scans:
  stretch:
    molecules: [hydrogen_fluoride]
    coordinates:
      - {type: distance, atoms: [1, 2], from: 0.80, to: %(r_to)s, points: %(r_points)s}
  grid:
    molecules: [water]
    coordinates:
      - {type: distance, atoms: [1, 2], from: 0.90, to: 1.05, points: 4}
      - {type: angle, atoms: [2, 1, 3], from: 92, to: 116, points: 4}
levels:
  - {method: hf, basis: [sto-3g, 6-31g]}
  - {method: mp2, basis: 6-31g}%(extra_level)s
compare:
  reference_level: mp2/6-31g
  reference_values:
    # Huber & Herzberg, Constants of Diatomic Molecules (1979), HF X state (values from
    # memory): r_e = 0.9168 A, omega_e = 4138.32 cm-1.  The first source text is hostile on
    # purpose: it must reach the page escaped.
    - {molecule: hydrogen_fluoride, scan: stretch, quantity: r_e_angstrom, value: 0.9168,
       source: %(evil)s}
    - {molecule: hydrogen_fluoride, scan: stretch, quantity: omega_e_cm-1, value: 4138.32,
       source: "Huber & Herzberg (1979)"}
store: store
"""


def write_spec(path: Path, *, r_to="1.10", r_points=7, extra_level="") -> Path:
    path.write_text(
        SPEC
        % {
            "r_to": r_to,
            "r_points": r_points,
            "extra_level": extra_level,
            "evil": json.dumps(EVIL_SOURCE),
        }
    )
    return path


@pytest.fixture(scope="module")
def computed(tmp_path_factory):
    """The campaign, run once: its folder and spec."""
    root = tmp_path_factory.mktemp("report-campaign")
    spec = write_spec(root / "campaign.yaml")
    out = pesflow("run", str(spec), "--cores", "2", check=0)
    assert "69 done, 0 failed, 0 pending" in out.stdout, out.stdout
    return root, spec


def tables(spec):
    campaign = load_campaign(spec)
    plan = expand(campaign)
    points = points_table(plan, PointStore(campaign.store_path))
    summary = summary_table(campaign, plan, points)
    return campaign, plan, points, summary


@pytest.fixture(scope="module")
def report(computed):
    root, spec = computed
    campaign, plan, points, summary = tables(spec)
    paths = build_report(campaign, plan, points, summary, campaign.results_path / "report")
    return campaign, points, summary, paths


class Cells(HTMLParser):
    """Collects the attributes of every table cell, and the start tags seen."""

    def __init__(self):
        super().__init__()
        self.cells, self.tags, self.text = [], [], []

    def handle_starttag(self, tag, attrs):
        self.tags.append(tag)
        if tag == "td":
            self.cells.append(dict(attrs))
            self.text.append("")

    def handle_data(self, data):
        if self.text:
            self.text[-1] += data


def parse(page: str) -> Cells:
    parser = Cells()
    parser.feed(page)
    return parser


def pngs(page: str) -> list[bytes]:
    return [base64.b64decode(m) for m in re.findall(r'src="data:image/png;base64,([^"]+)"', page)]


def test_report_names_every_molecule_level_and_quantity(report):
    campaign, _, summary, paths = report
    page = paths["html"].read_text()
    md = paths["markdown"].read_text()
    for molecule in campaign.molecules:
        assert molecule in page and molecule in md
    for level in campaign.levels:
        assert level.label in page and level.label in md
    quantities = pd.read_csv(paths["quantities_csv"])
    shown = set(quantities["quantity"])
    # Every headline quantity the summary determined for some curve is in the report.
    for q in QUANTITY.values():
        if q.headline and q.column in summary and summary[q.column].notna().any():
            assert q.column in shown
            assert f'id="q-{q.column}"' in page
            assert f"### {q.name} ({q.unit})" in md
    # This campaign has a diatomic stretch and a 2-D grid: both kinds of quantity.
    assert {"r_e_angstrom", "omega_e_cm-1", "q1_e_angstrom", "q2_e_degree"} <= shown
    for path in paths.values():
        assert path.exists()


def test_deviations_shown_are_the_summary_deviations(report):
    _, _, summary, paths = report
    page = paths["html"].read_text()
    parsed = parse(page)
    cells = [(a, t) for a, t in zip(parsed.cells, parsed.text) if "data-dev" in a]
    assert cells
    ref = summary.set_index(["molecule", "scan", "level"])
    checked = 0
    for attrs, text in cells:
        column = attrs["data-quantity"]
        row = ref.loc[(attrs["data-molecule"], attrs["data-scan"], attrs["data-level"])]
        dev = row[f"dev_{column}"]
        if not np.isfinite(dev):
            assert attrs["data-dev"] == ""
            continue
        assert float(attrs["data-dev"]) == dev
        assert float(attrs["data-value"]) == row[column]
        if attrs["data-level"] != "mp2/6-31g":
            assert f"Δ {fmt_dev(dev, QUANTITY[column].decimals)}" in text
        checked += 1
    assert checked >= 8
    # The CSV holds the same numbers at full precision.
    csv = pd.read_csv(paths["quantities_csv"])
    for _, r in csv.iterrows():
        s = ref.loc[(r["molecule"], r["scan"], r["level"])]
        np.testing.assert_equal(r["dev_reference_level"], s[f"dev_{r['quantity']}"])
        np.testing.assert_equal(r["value"], s[r["quantity"]])


def test_statistics_and_cost_agree_with_the_tables(report):
    _, points, summary, paths = report
    stats = pd.read_csv(paths["statistics_csv"])
    for level in ("hf/sto-3g", "hf/6-31g"):
        dev = summary.loc[summary["level"] == level, "dev_r_e_angstrom"].dropna()
        row = stats[
            (stats["quantity"] == "r_e_angstrom")
            & (stats["level"] == level)
            & (stats["against"] == "mp2/6-31g")
        ].iloc[0]
        assert row["n"] == len(dev) == 1
        assert row["mean_absolute"] == pytest.approx(np.abs(dev).mean(), rel=1e-12)
        assert row["mean_signed"] == pytest.approx(dev.mean(), rel=1e-12)
    # Against the user's value: r_e(level) - 0.9168 A.
    hf = summary[
        (summary["molecule"] == "hydrogen_fluoride") & (summary["level"] == "hf/6-31g")
    ].iloc[0]
    row = stats[
        (stats["quantity"] == "r_e_angstrom")
        & (stats["level"] == "hf/6-31g")
        & (stats["against"] == "reference values")
    ].iloc[0]
    assert row["mean_signed"] == pytest.approx(hf["r_e_angstrom"] - 0.9168, abs=1e-12)
    cost = pd.read_csv(paths["cost_csv"]).set_index("level")
    for level, sub in points.groupby("level"):
        assert cost.loc[level, "core_s"] == pytest.approx(sub["wall_s"].sum(), rel=1e-9)
        assert cost.loc[level, "points_done"] == (sub["status"] == "done").sum()


def test_basis_set_convergence_counts_basis_functions(report):
    _, _, _, paths = report
    conv = pd.read_csv(paths["convergence_csv"])
    hf = conv[(conv["molecule"] == "hydrogen_fluoride") & (conv["quantity"] == "r_e_angstrom")]
    # Contracted functions: STO-3G F 1s2s2p = 5, H 1s = 1; 6-31G F 1s + split 2s2p = 9,
    # H split 1s = 2 (the definition of the basis sets, Hehre, Stewart & Pople 1969;
    # Hehre, Ditchfield & Pople 1972).
    assert dict(zip(hf["basis"], hf["nbf"])) == {"sto-3g": 6, "6-31g": 11}
    assert set(hf["method"]) == {"hf"}
    assert "convergence-r_e_angstrom.png" in {p.name for p in paths["figures"].glob("*.png")}


def test_images_decode_and_are_not_blank(report):
    from matplotlib.image import imread

    _, _, _, paths = report
    page = paths["html"].read_text()
    images = pngs(page)
    # curve + surface + difference map + 3 convergence views (r_e, omega_e, omega_e x_e)
    # + accuracy against cost, at the least.
    assert len(images) >= 5
    for png in images:
        assert png[:8] == b"\x89PNG\r\n\x1a\n"
        pixels = imread(io.BytesIO(png), format="png")
        assert pixels.ndim == 3 and min(pixels.shape[:2]) > 100
        assert pixels[..., :3].std() > 0.02
    assert "http://" not in page and "https://" not in page


def test_user_text_is_escaped_and_no_script_exists(report):
    _, _, summary, paths = report
    page = paths["html"].read_text()
    assert html.escape(EVIL_SOURCE, quote=True) in page
    assert "<script" not in page.lower()
    assert "script" not in parse(page).tags
    assert "alert(1)</script>" not in page
    md = paths["markdown"].read_text()
    # Markdown: plain text, the tag made inert by CommonMark backslash escapes (no entities).
    assert not re.search(r"(?<!\\)<script", md, re.IGNORECASE)
    assert '\\<script>alert(1)\\</script> & "x"' in md
    assert "Huber & Herzberg (1979)" in md and "&amp;" not in md
    assert "Huber &amp; Herzberg (1979)" in page
    refs = pd.read_csv(paths["reference_values_csv"])
    assert EVIL_SOURCE in set(refs["source"])
    # The summary's flags are shown, each next to the numbers it concerns (escaped).
    for text in summary["flag_records"]:
        for flag in split_flags(text):
            assert html.escape(flag, quote=True) in page


def test_terminal_summary_prints_the_ranking(report):
    from rich.console import Console

    campaign, _, summary, paths = report
    console = Console(record=True, width=120)
    terminal_summary(campaign, summary, console, paths=paths)
    out = console.export_text()
    assert "r_e" in out and "hf/6-31g" in out and "mp2/6-31g" in out
    assert str(paths["html"]) in out


def test_partial_campaign_is_reported_honestly(computed, tmp_path):
    root, _ = computed
    # Extend the stretch (4 new points at every level) and add a level that was never run;
    # the store is shared, so the 69 computed points are found again.
    spec = write_spec(
        tmp_path / "partial.yaml",
        r_to="1.30",
        r_points=11,
        extra_level="\n  - {method: hf, basis: 3-21g}",
    )
    shutil.copytree(root / "store", tmp_path / "store")
    campaign, plan, points, _ = tables(spec)
    # One new point failed at hf/sto-3g: store the record a failed SCF leaves.
    target = points[
        (points["level"] == "hf/sto-3g")
        & (points["scan"] == "stretch")
        & np.isclose(points["r_angstrom"], 1.30)
    ].iloc[0]
    gs = next(
        g for g in plan.geometry_sets if (g.molecule, g.scan) == ("hydrogen_fluoride", "stretch")
    )
    store_failed_hf_point(campaign, plan, gs, target)
    campaign, plan, points, summary = tables(spec)
    counts = points["status"].value_counts()
    assert counts["done"] == 69 and counts["failed"] == 1
    # 4 new stretch points at each of 3 levels (one of them failed), all 27 of hf/3-21g.
    assert counts["pending"] == 3 + 4 + 4 + 27
    paths = build_report(campaign, plan, points, summary, tmp_path / "report")
    page = paths["html"].read_text()
    md = paths["markdown"].read_text()
    assert "Incomplete campaign" in page and "Incomplete campaign" in md
    assert "69 of 108 points done, 1 failed, 38 pending" in page
    # The missing counts per molecule and level, as shown in the page.
    shown = {
        (a["data-molecule"], a["data-level"]): (int(a["data-failed"]), int(a["data-pending"]))
        for a in parse(page).cells
        if "data-pending" in a
    }
    assert shown[("hydrogen_fluoride", "hf/sto-3g")] == (1, 3)
    assert shown[("hydrogen_fluoride", "hf/6-31g")] == (0, 4)
    assert shown[("water", "hf/3-21g")] == (0, 16)
    assert shown[("hydrogen_fluoride", "hf/3-21g")] == (0, 11)
    assert "SCF did not converge in 100 cycles" in page
    assert "r = 1.3 Å" in page  # the failed point is named by its coordinate
    status = pd.read_csv(paths["status_csv"])
    assert status["pending"].sum() == 38 and status["failed"].sum() == 1
    # A level with nothing computed shows as pending in every quantity table, never as a
    # number and never left out.
    cells = [a for a in parse(page).cells if a.get("data-level") == "hf/3-21g" and "data-dev" in a]
    assert cells and all(a["data-value"] == "" for a in cells)
    quantities = pd.read_csv(paths["quantities_csv"])
    new = quantities[quantities["level"] == "hf/3-21g"]
    assert set(new["state"]) == {"pending"}
    assert set(new["molecule"]) == {"hydrogen_fluoride", "water"}
    # The analysis calls pending points "failed" in its warnings; the page says so.
    assert "counts them among the &quot;failed&quot; points" in page
    # Numbers from curves with points missing carry a note saying so.
    assert "from an incomplete curve: 4 of 11 points pending" in page


CHROMIUM = "/usr/bin/chromium"


@pytest.mark.skipif(
    not Path(CHROMIUM).exists(),
    reason="headless Chromium not installed (Debian package 'chromium')",
)
def test_page_renders_in_a_real_browser(report, tmp_path):
    from matplotlib.image import imread

    _, _, _, paths = report
    shot = tmp_path / "page.png"
    common = [
        CHROMIUM,
        "--headless",
        "--no-sandbox",
        "--disable-gpu",
        "--disable-background-networking",
        "--disable-component-update",
        "--disable-sync",
        "--no-first-run",
        f"--user-data-dir={tmp_path / 'profile'}",
        "--enable-logging=stderr",
        "--v=0",
    ]
    url = paths["html"].resolve().as_uri()
    run = subprocess.run(
        common + [f"--screenshot={shot}", "--window-size=1280,2000", "--hide-scrollbars", url],
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert run.returncode == 0, run.stderr
    pixels = imread(shot)
    assert pixels.shape[:2] == (2000, 1280)
    assert pixels[..., :3].std() > 0.05  # not a blank page
    # The page header is dark and the body light: both must be on the screenshot.
    assert pixels[20, 640, :3].mean() < 0.3 and pixels[1500, 640, :3].mean() > 0.5
    dom = subprocess.run(common + ["--dump-dom", url], capture_output=True, text=True, timeout=120)
    assert dom.returncode == 0, dom.stderr
    assert "Which level is closest" in dom.stdout
    assert dom.stdout.count("<img") == len(pngs(paths["html"].read_text()))
    for log in (run.stderr, dom.stderr):
        for line in log.splitlines():
            assert "CONSOLE" not in line and "Uncaught" not in line, line
            assert "Content Security Policy" not in line, line
