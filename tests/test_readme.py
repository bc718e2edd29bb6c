"""The README's set-up commands are the ones CI runs and the ones that work."""

import re
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def readme_commands():
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    section = text.split("## Set up", 1)[1].split("\n## ", 1)[0]
    return re.findall(r"```bash\n(.+?)\n```", section, flags=re.S)


def test_readme_has_exactly_two_set_up_commands():
    commands = readme_commands()
    assert len(commands) == 2
    assert "cohort " in commands[0] and "demo_cohort/study.toml" in commands[0]
    assert commands[1].rstrip().endswith("pytest")


def test_ci_runs_the_readme_test_command():
    ci = (ROOT / ".ci" / "run").read_text(encoding="utf-8").splitlines()
    assert readme_commands()[1].strip() in [line.strip() for line in ci]


def test_readme_states_the_cautions():
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    for phrase in (
        "Research use only",
        "not a diagnostic device",
        "validation",
        "licensed professionals",
    ):
        assert phrase in text
