"""The README's set-up commands are the ones CI runs, and the demo it names exists."""

import re
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]


def _commands():
    text = (ROOT / "README.md").read_text()
    return re.findall(r"```bash\n#[^\n]*\n([^\n]+)\n```", text)


def test_readme_has_two_setup_commands_and_ci_runs_the_test_one():
    demo, tests = _commands()[:2]
    assert "pesflow run configs/" in demo
    assert "pytest" in tests
    ci = (ROOT / ".ci" / "run").read_text()
    test_part = tests.split("&& ", 2)[-1]  # after venv creation and activation
    assert test_part in ci


def test_demo_campaign_named_in_readme_exists_and_is_valid():
    from pesflow.campaign import load_campaign

    demo = _commands()[0]
    spec = re.search(r"pesflow run (\S+)", demo).group(1)
    campaign = load_campaign(ROOT / spec)
    assert len(campaign.molecules) >= 3 and len(campaign.levels) >= 2
