"""The package's layout keeps its promises: imports point down the pipeline, modules and
functions stay small enough to read, and the public API is what the contributor guide says.

These are rules of this project (DEVELOPERS.md, "Layout"), not of an outside source: common
practice for layered packages, checked on the source text with :mod:`ast`.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

PACKAGE = Path(__file__).resolve().parents[1] / "cohort"

# What each part of the package may import from cohort (its own part always included).
ALLOWED = {
    "parallel": set(),
    "domain": set(),
    "stats": {"domain"},
    "io": {"domain"},
    "analysis": {"domain", "stats", "io", "parallel"},
    "plots": {"domain", "stats"},
    "figures": {"domain", "stats", "io", "analysis", "plots", "parallel"},
    "report": {"domain", "stats", "io", "analysis", "plots", "figures", "parallel"},
}
TOP = {"__init__", "__main__", "cli", "demo"}
"""Modules at the top, above every part: they may import anything."""

MAX_MODULE_LINES = 600
MAX_FUNCTION_LINES = 80
LONG_MARKER = "# Long:"


def _modules() -> list[Path]:
    return sorted(PACKAGE.rglob("*.py"))


def _part(path: Path) -> str:
    relative = path.relative_to(PACKAGE)
    return relative.parts[0] if len(relative.parts) > 1 else relative.stem


def _imported_parts(source: str, here: tuple[str, ...]) -> set[str]:
    """The parts of cohort that a module in folder ``here`` (inside cohort) imports."""
    tree = ast.parse(source)
    found = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.ImportFrom):
            if node.level:
                base = here[: len(here) - node.level + 1]
                target = [*base, *(node.module or "").split(".")]
                target = [t for t in target if t]
                names = target or [a.name for a in node.names]
            elif node.module and (node.module == "cohort" or node.module.startswith("cohort.")):
                names = node.module.split(".")[1:] or [a.name for a in node.names]
            else:
                continue
            found.add(names[0])
        elif isinstance(node, ast.Import):
            for alias in node.names:
                if alias.name.startswith("cohort."):
                    found.add(alias.name.split(".")[1])
    return found - {"__version__"}


@pytest.mark.parametrize("path", _modules(), ids=lambda p: str(p.relative_to(PACKAGE)))
def test_imports_point_down_the_pipeline(path: Path) -> None:
    part = _part(path)
    if part in TOP:
        return
    assert part in ALLOWED, f"{path.relative_to(PACKAGE)}: part {part!r} is not in the layout"
    here = path.relative_to(PACKAGE).parts[:-1]
    wrong = _imported_parts(path.read_text(encoding="utf-8"), here) - ALLOWED[part] - {part}
    assert not wrong, f"{path.relative_to(PACKAGE)} ({part}) imports {sorted(wrong)}"


def test_the_rule_catches_upward_imports() -> None:
    source = "from cohort.io.study import Study\nfrom ..analysis import pipeline\nfrom . import x\n"
    assert _imported_parts(source, ("stats",)) == {"io", "analysis", "stats"}
    assert _imported_parts("import numpy\nfrom cohort import __version__\n", ("io",)) == set()


@pytest.mark.parametrize("path", _modules(), ids=lambda p: str(p.relative_to(PACKAGE)))
def test_modules_are_small_enough_to_read(path: Path) -> None:
    lines = path.read_text(encoding="utf-8").count("\n")
    assert lines <= MAX_MODULE_LINES, f"{path.relative_to(PACKAGE)} has {lines} lines"


def _long_functions(path: Path) -> list[str]:
    text = path.read_text(encoding="utf-8")
    source = text.splitlines()
    out = []
    for node in ast.walk(ast.parse(text)):
        if not isinstance(node, ast.FunctionDef | ast.AsyncFunctionDef):
            continue
        length = node.end_lineno - node.lineno + 1
        first = min([node.lineno, *(d.lineno for d in node.decorator_list)])
        above = source[first - 2].strip() if first >= 2 else ""
        if length > MAX_FUNCTION_LINES and not above.startswith(LONG_MARKER):
            out.append(f"{node.name} ({length} lines, line {node.lineno})")
    return out


@pytest.mark.parametrize("path", _modules(), ids=lambda p: str(p.relative_to(PACKAGE)))
def test_long_functions_say_why(path: Path) -> None:
    assert not _long_functions(path), f"{path.relative_to(PACKAGE)}: {_long_functions(path)}"


def test_public_api_of_the_package() -> None:
    import cohort
    import cohort.stats

    for name in ("load_study", "check_study", "analyse", "run", "Study", "StudyError"):
        assert name in cohort.__all__ and callable(getattr(cohort, name)), name
    for name in ("ConfidenceInterval", "Estimate"):
        assert name in cohort.__all__, name
    for name in cohort.stats.__all__:
        assert getattr(cohort.stats, name) is not None, name
    for name in ("limits_of_agreement", "concordance_correlation", "passing_bablok", "holm"):
        assert name in cohort.stats.__all__, name
