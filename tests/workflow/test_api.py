"""The Python API: the README's notebook example, run as written on a small campaign, and the
README's way of reading the store directly with ``pyarrow.dataset``.

The example's spec path is the only thing changed: a small campaign with the molecule and
scan the example plots (hydrogen fluoride, ``stretch``) replaces the demo, so that the test
stays fast.  Energies are checked against PySCF run directly at the stored geometries.
"""

import re
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import pesflow
from pesflow.errors import SpecError
from tests.workflow.helpers import direct_energy

pytestmark = [pytest.mark.workflow, pytest.mark.integration]

ROOT = Path(__file__).resolve().parents[2]

SPEC = """\
campaign: api-example
molecules:
  hydrogen_fluoride: {builtin: HF}
scans:
  stretch:
    molecules: [hydrogen_fluoride]
    coordinates:
      - {type: distance, atoms: [1, 2], from: 0.80, to: 1.10, points: 7}
levels:
  - {method: [hf, mp2], basis: sto-3g}
compare:
  reference_level: mp2/sto-3g
store: pesflow-store
"""


def readme_python_blocks() -> list[str]:
    text = (ROOT / "README.md").read_text()
    start = text.index("## From Python")
    end = text.index("\n## ", start + 1)
    return re.findall(r"```python\n(.*?)```", text[start:end], re.S)


@pytest.fixture(scope="module")
def example(tmp_path_factory):
    """The README's example, run as written (spec path replaced), in a fresh folder."""
    root = tmp_path_factory.mktemp("api")
    (root / "campaign.yaml").write_text(SPEC)
    code = readme_python_blocks()[0]
    assert 'pesflow.load("configs/demo-hydrides.yaml")' in code
    code = code.replace("configs/demo-hydrides.yaml", str(root / "campaign.yaml"))
    code = code.replace('c.report("report")', f"c.report({str(root / 'report')!r})")
    namespace: dict = {}
    exec(compile(code, "README.md", "exec"), namespace)  # noqa: S102 - our own README
    return root, namespace


def test_readme_example_runs_and_its_tables_are_the_exports(example):
    root, ns = example
    result, summary, points = ns["result"], ns["summary"], ns["points"]
    assert (result.done, result.failed, result.pending) == (14, 0, 0)
    # The same columns as `pesflow export` writes.
    c = ns["c"]
    out = root / "export"
    out.mkdir()
    for what, frame in (("points", points), ("summary", summary)):
        cmd = [sys.executable, "-m", "pesflow", "export", str(root / "campaign.yaml")]
        cmd += ["--what", what, "-o", str(out / f"{what}.parquet")]
        subprocess.run(cmd, check=True, capture_output=True)
        exported = pd.read_parquet(out / f"{what}.parquet")
        assert list(exported.columns) == list(frame.columns)
    assert set(summary["level"]) == {"hf/sto-3g", "mp2/sto-3g"}
    # Every energy is PySCF's own at the stored geometry (plain RHF / MP2, same basis).
    for _, row in points.iloc[[0, 6, 7, 13]].iterrows():
        assert row["energy_hartree"] == pytest.approx(direct_energy(row), abs=1e-8)
    assert c.status()["done"].sum() == 14
    assert c.check()["formula"].tolist() == ["HF"]


def test_readme_example_makes_a_figure_and_a_report(example):
    from matplotlib.figure import Figure

    root, ns = example
    fig = ns["fig"]
    assert isinstance(fig, Figure)
    ax = fig.axes[0]
    assert "Å" in ax.get_xlabel() and "kcal/mol" in ax.get_ylabel()
    assert ns["paths"]["html"].exists() and ns["paths"]["html"].parent == root / "report"
    plan = ns["c"].plan()
    assert plan["to_compute"].sum() == 0 and plan["cached"].sum() == 14


def test_api_errors_are_the_typed_errors_of_the_command(tmp_path):
    bad = tmp_path / "bad.yaml"
    bad.write_text(SPEC.replace("sto-3g", "no-such-basis"))
    with pytest.raises(SpecError) as info:
        pesflow.load(bad)
    assert "bad.yaml" in str(info.value) and "no-such-basis" in str(info.value)
    c = pesflow.load(_write(tmp_path / "ok.yaml"))
    with pytest.raises(KeyError, match="stretch"):
        c.plot("hydrogen_fluoride", "bend")


def _write(path):
    path.write_text(SPEC)
    return path


def test_import_pesflow_stays_cheap():
    code = (
        "import sys, pesflow; print(sorted({'pandas', 'pyscf', 'matplotlib'} & set(sys.modules)))"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "[]"


def test_store_reads_as_a_parquet_dataset_as_the_readme_says(example, monkeypatch):
    root, ns = example
    code = readme_python_blocks()[1]
    assert "pyarrow.dataset" in code
    monkeypatch.chdir(root)
    namespace: dict = {}
    exec(  # noqa: S102 - our own README
        compile(code.replace("configs/pesflow-store", "pesflow-store"), "README.md", "exec"),
        namespace,
    )
    records = namespace["records"]
    points = ns["points"]
    assert len(records) == len(points) == 14
    joined = points.merge(records, on="key", suffixes=("", "_direct"))
    assert len(joined) == 14
    np.testing.assert_array_equal(joined["energy_hartree"], joined["energy_hartree_direct"])
    assert joined["converged_direct"].all()
    # The file list the README reads is the store's own content, fragments and parts.
    assert namespace["files"] and all(Path(f).suffix == ".parquet" for f in namespace["files"])
