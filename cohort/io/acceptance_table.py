"""The ``[acceptance]`` table of a study file as :class:`~cohort.domain.acceptance.Acceptance`.

Format and meaning: :mod:`cohort.domain.acceptance`. :mod:`cohort.io.settings` calls this
once, when the study file is read; every problem (an unknown parameter or finding, a
criterion out of range, a baseline that is not a listed test method) is listed with the
others of the study file.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from cohort.domain.acceptance import Acceptance
from cohort.domain.problems import Problem, StudyError
from cohort.domain.rules import (
    Rule,
    TableSchema,
    did_you_mean,
    is_number,
    study_problem,
    text,
    value_text,
)
from cohort.domain.thresholds import DEFAULT_FINDINGS
from cohort.domain.units import PARAMETERS
from cohort.io.findings_table import parse_findings_table


def _criteria_table() -> Rule:
    return Rule(
        "a table of name = number pairs",
        lambda v: isinstance(v, Mapping) and not any(isinstance(x, Mapping) for x in v.values()),
        "table",
    )


ACCEPTANCE_RULES = {
    "baseline": text(),
    "limits": _criteria_table(),
    "findings": _criteria_table(),
    "ccc": _criteria_table(),
}
"""Keys of ``[acceptance]``: ``baseline`` and the three sub-tables of criteria."""

_RANGES: Mapping[str, tuple[str, Any]] = {
    "limits": ("a number > 0 (the parameter's unit)", lambda v: v > 0),
    "findings": ("a number > 0 and at most 1", lambda v: 0 < v <= 1),
    "ccc": ("a number > 0 and at most 1", lambda v: 0 < v <= 1),
}


def _finding_names(document: Mapping[str, Any], file: str) -> list[str]:
    """Names of the findings the study evaluates (defaults when ``[findings]`` is bad)."""
    table = document.get("findings")
    try:
        definitions, _ = parse_findings_table(table if isinstance(table, Mapping) else None, file)
    except StudyError:  # its own problems are listed by the [findings] check
        definitions = DEFAULT_FINDINGS
    return [d.name for d in definitions]


def _entry_problems(
    sub: str, table: Mapping[str, Any], known: list[str], file: str
) -> list[Problem]:
    what, accepts = _RANGES[sub]
    problems: list[Problem] = []
    for name, value in table.items():
        where = f"[acceptance.{sub}] {name}"
        if name not in known:
            noun = "finding" if sub == "findings" else "parameter"
            hint = did_you_mean(name, known)
            if noun == "parameter" and name.strip().lower() in ("r2*", "t2*", "t2star"):
                # how papers write it; T2* criteria are given as R2* (the report's unit)
                hint = "; did you mean 'r2star'? (criteria are in the report's unit, 1/s)"
            problems.append(
                study_problem(
                    file,
                    f"{where}: unknown {noun}{hint}",
                    name,
                    f"one of {known}",
                )
            )
        elif not (is_number(value) and accepts(float(value))):
            problems.append(
                study_problem(file, f"{where} is not valid ({value_text(value)})", value, what)
            )
    return problems


def _check_acceptance(
    table: Mapping[str, Any], bad: frozenset[str], file: str, document: Mapping[str, Any]
) -> list[Problem]:
    """Criteria name known parameters and findings, in range; the baseline is listed."""
    problems: list[Problem] = []
    parameters = list(PARAMETERS)
    for sub in ("limits", "ccc", "findings"):
        if sub in table and sub not in bad:
            known = _finding_names(document, file) if sub == "findings" else parameters
            problems += _entry_problems(sub, table[sub], known, file)
    study = document.get("study")
    listed = study.get("methods") if isinstance(study, Mapping) else None
    baseline = table.get("baseline")
    if "baseline" not in bad and isinstance(baseline, str) and isinstance(listed, list):
        names = [str(m).strip() for m in listed]
        if baseline.strip() not in names:
            problems.append(
                study_problem(
                    file,
                    f"[acceptance] baseline is not one of the methods listed in [study] methods"
                    f"{did_you_mean(baseline, names)}",
                    baseline,
                    f"one of {names}",
                )
            )
    return problems


ACCEPTANCE_SCHEMA = TableSchema(keys=ACCEPTANCE_RULES, check=_check_acceptance)
"""Schema of the ``[acceptance]`` table for :func:`cohort.domain.rules.check_document`."""


def build_acceptance(table: Mapping[str, Any] | None) -> Acceptance:
    """:class:`Acceptance` of a checked ``[acceptance]`` table (None: no criteria).

    Examples
    --------
    >>> a = build_acceptance({"limits": {"ff": 3}, "findings": {"hemorrhage": 0.8}})
    >>> dict(a.limits), dict(a.findings), a.baseline
    ({'ff': 3.0}, {'hemorrhage': 0.8}, None)
    """
    table = table or {}

    def numbers(sub: str) -> dict[str, float]:
        return {str(k): float(v) for k, v in table.get(sub, {}).items()}

    baseline = table.get("baseline")
    return Acceptance(
        limits=numbers("limits"),
        findings=numbers("findings"),
        ccc=numbers("ccc"),
        baseline=baseline.strip() if isinstance(baseline, str) else None,
    )
