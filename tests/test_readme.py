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


def test_the_python_api_example_runs(monkeypatch):
    """The README's notebook example works as written (on the demo cohort)."""
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    section = text[text.index("## Python API") :]
    start = section.index("```python\n") + len("```python\n")
    code = section[start : section.index("\n```", start)]
    monkeypatch.chdir(ROOT)
    namespace: dict = {}
    exec(compile(code, "README.md (Python API)", "exec"), namespace)
    limits = namespace["limits"]
    assert limits.n_subjects == 48 and limits.lower.estimate < limits.bias.estimate
    assert limits.upper.ci.low < limits.upper.estimate < limits.upper.ci.high
    assert "agreement" in namespace["analysis"].tables
