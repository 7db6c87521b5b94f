"""Property-based fuzz test of the spec loader (issue 9): valid campaign specs mutated at random
must always be answered with exit code 0 or 2, within seconds, with one line on error, never a
traceback, and never a written file.

The specs are the shipped ``configs/*.yaml`` and a small inline one with a 2-D grid, a dihedral
and a scan's own levels.  Each example applies one to three random mutations to the parsed
YAML (a value replaced by one of another type, an out-of-range or huge number, odd Unicode; a
key deleted or added; a list item deleted or duplicated) and may duplicate one line of the
text (a key given twice), then runs ``pesflow check`` in-process (``pesflow.cli.main``).

The default run is bounded and reproducible (derandomized, 250 examples, about 30-60 s).
Run it longer, with fresh random examples:

    PESFLOW_FUZZ_EXAMPLES=5000 PESFLOW_FUZZ_RANDOM=1 python -m pytest tests/unit/test_spec_fuzz.py
"""

import copy
import io
import os
import shutil
import tempfile
from contextlib import redirect_stderr, redirect_stdout
from datetime import timedelta
from pathlib import Path

import pytest
import yaml

hypothesis = pytest.importorskip("hypothesis")
from hypothesis import HealthCheck, given, settings  # noqa: E402
from hypothesis import strategies as st  # noqa: E402

from pesflow import cli  # noqa: E402

CONFIGS = Path(__file__).resolve().parents[2] / "configs"

INLINE = """\
campaign: fuzz-inline
molecules:
  peroxide: {builtin: H2O2}
  water: {xyz: "O 0 0 0.1173\\nH 0 0.7572 -0.4692\\nH 0 -0.7572 -0.4692", charge: 0}
scans:
  torsion:
    molecules: [peroxide]
    coordinates:
      - {type: dihedral, atoms: [3, 1, 2, 4], from: 0, to: 180, step: 30}
    levels:
      - {method: hf, basis: sto-3g}
  grid:
    molecules: [water]
    coordinates:
      - {type: distance, atoms: [1, 2], from: 0.9, to: 1.1, points: 3}
      - {type: angle, atoms: [2, 1, 3], values: [95, 105, 115]}
levels:
  - {method: [hf, b3lyp], basis: sto-3g}
compare:
  reference_level: hf/sto-3g
"""

BASES = {path.name: path.read_text() for path in sorted(CONFIGS.glob("*.yaml"))}
BASES["inline.yaml"] = INLINE

HUGE = [10**9, 10**30, 2**63, -(2**63), 1e300, -1e300, 1e-300, float("inf"), float("nan")]
ODD_TEXT = ["", " ", "∞", "Ａ", "\u202e", "é", "ß", "\U0001f600", "1e999", "nan", "-0", "~", "null"]

scalars = st.one_of(
    st.none(),
    st.booleans(),
    st.integers(min_value=-10, max_value=400),
    st.integers(),
    st.floats(allow_nan=True, allow_infinity=True),
    st.sampled_from(HUGE),
    st.text(max_size=12),
    st.sampled_from(ODD_TEXT),
)
values = st.one_of(
    scalars,
    st.lists(st.one_of(st.integers(-3, 12), st.floats(-400, 400)), max_size=5),
    st.dictionaries(st.text(max_size=6), scalars, max_size=2),
)


def _containers(node, path=()):
    """Every dict and list in the parsed spec, with its path."""
    if isinstance(node, (dict, list)):
        yield path, node
        items = node.items() if isinstance(node, dict) else enumerate(node)
        for key, child in items:
            yield from _containers(child, (*path, key))


def _mutate(data, draw):
    containers = [c for _, c in _containers(data) if c]
    node = draw(st.sampled_from(containers))
    keys = list(node) if isinstance(node, dict) else list(range(len(node)))
    key = draw(st.sampled_from(keys))
    old = node[key]
    kinds = ["replace", "delete", "number"] + (
        ["extra key"] if isinstance(node, dict) else ["duplicate"]
    )
    kind = draw(st.sampled_from(kinds))
    if kind == "replace":
        node[key] = draw(values)
    elif kind == "delete":
        del node[key]
    elif kind == "extra key":
        node[draw(st.one_of(st.text(min_size=1, max_size=8), st.sampled_from(ODD_TEXT)))] = draw(
            values
        )
    elif kind == "duplicate":
        node.insert(key, copy.deepcopy(old))
    elif isinstance(old, bool) or not isinstance(old, (int, float)):
        node[key] = draw(st.sampled_from(HUGE))
    else:  # a number moved out of its range
        factor = draw(st.sampled_from([-1, 0, 1e6, -1e6, 1e-9, 10**12]))
        node[key] = old * factor


def _spec_text(draw) -> str:
    name = draw(st.sampled_from(sorted(BASES)))
    data = yaml.safe_load(BASES[name])
    for _ in range(draw(st.integers(1, 3))):
        _mutate(data, draw)
    text = yaml.safe_dump(data, allow_unicode=draw(st.booleans()), sort_keys=False)
    if draw(st.booleans()):  # a line given twice: often a duplicated key
        lines = text.splitlines()
        i = draw(st.integers(0, len(lines) - 1))
        lines.insert(i, lines[i])
        text = "\n".join(lines) + "\n"
    return text


def _check(text: str) -> tuple[int, str]:
    """Write the spec into a fresh folder, run ``pesflow check``, assert nothing was written."""
    with tempfile.TemporaryDirectory() as folder:
        folder = Path(folder)
        for files in ("geometries", "molecule-sets"):  # what the shipped specs name
            shutil.copytree(CONFIGS / files, folder / files)
        spec = folder / "campaign.yaml"
        spec.write_text(text, encoding="utf-8")
        before = sorted(p.relative_to(folder) for p in folder.rglob("*"))
        out, err = io.StringIO(), io.StringIO()
        with redirect_stdout(out), redirect_stderr(err):
            code = cli.main(["check", str(spec)])
        after = sorted(p.relative_to(folder) for p in folder.rglob("*"))
        assert after == before, f"check wrote {set(after) - set(before)}"
        return code, err.getvalue()


@pytest.fixture(scope="module", autouse=True)
def _quiet_consoles():
    """rich consoles bound to the real streams at import: point them at the redirected ones."""
    saved = cli.console.file, cli.err_console.file
    cli.console.file = None
    cli.err_console.file = None
    yield
    cli.console.file, cli.err_console.file = saved


def test_every_base_spec_is_valid():
    for name, text in BASES.items():
        code, err = _check(text)
        assert code == 0, (name, err)


@settings(
    max_examples=int(os.environ.get("PESFLOW_FUZZ_EXAMPLES", "250")),
    derandomize=not os.environ.get("PESFLOW_FUZZ_RANDOM"),
    deadline=timedelta(seconds=10),  # "answered within seconds", with room for a loaded machine
    database=None,  # writes nothing
    suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large],
)
@given(st.data())
def test_mutated_spec_is_answered_with_exit_0_or_2_and_one_line(data):
    text = _spec_text(data.draw)
    code, err = _check(text)
    assert code in (0, 2), err
    assert "Traceback" not in err
    if code == 2:
        lines = [line for line in err.splitlines() if line.strip()]
        assert len(lines) == 1 and lines[0].startswith("error: "), err
