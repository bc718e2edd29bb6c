"""The ``[findings]`` table of a study file as finding definitions and swap-screen options.

Format and defaults: :mod:`cohort.domain.thresholds` (rules :data:`FINDINGS_RULES` and
:data:`FINDING_RULES`). :mod:`cohort.io.settings` calls this once, when the study file is
read; the analysis takes the parsed :attr:`StudySettings.findings` and
:attr:`StudySettings.swap`. A key given for a default finding replaces the default's value;
a new finding needs ``parameter`` (and a threshold if absolute).
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import replace
from types import MappingProxyType
from typing import Any

from cohort.domain.problems import Problem, StudyError
from cohort.domain.rules import TableSchema, check_table, did_you_mean, study_problem
from cohort.domain.thresholds import (
    BUILT_IN,
    DEFAULT_FINDINGS,
    DEFAULT_SWAP_MARGIN_PP,
    DERIVATIONS,
    FINDING_RULES,
    FINDINGS_RULES,
    FindingDefinition,
    SwapOptions,
)


def _finding(
    name: str, table: Mapping[str, Any], file: str, problems: list[Problem]
) -> FindingDefinition | None:
    """The definition of a finding table whose keys are valid, or None with its problems."""
    where = f"[findings.{name}]"
    base = BUILT_IN.get(name)
    changes: dict[str, Any] = {
        k: table[k]
        for k in ("parameter", "direction", "kind", "inclusive", "absolute_value", "derived",
                  "label", "source", "k", "min_segments")
        if k in table
    }  # fmt: skip
    if "k" in changes:
        changes["k"] = float(changes["k"])
    if "thresholds" in table and "threshold" in table:
        problems.append(
            study_problem(file, f"{where} gives both 'thresholds' and 'threshold'", None,
                          "one of them")
        )  # fmt: skip
        return None
    if "thresholds" in table:
        changes["thresholds"] = {float(b): float(v) for b, v in table["thresholds"].items()}
        changes["value_any_field"] = None
    if "threshold" in table:
        changes["value_any_field"] = float(table["threshold"])
        changes["thresholds"] = MappingProxyType({})
    if ("thresholds" in table or "threshold" in table) and "source" not in table:
        changes["source"] = "declared in the study file"
        changes.setdefault("derived", False)
    if "derive" in table:
        rule = table["derive"]
        changes["derivation"] = None if rule is False or rule == "none" else DERIVATIONS[rule]
    elif "thresholds" in table or "threshold" in table:
        changes["derivation"] = None  # a rule applies to declared values only if re-declared
    if "remote_segments" in table:
        remote = table["remote_segments"]
        changes["remote_segments"] = remote if isinstance(remote, str) else tuple(remote)
    if base is None:
        hint = did_you_mean(name, BUILT_IN).replace("'", "[findings.", 1).replace("'", "]", 1)
        if "parameter" not in changes:
            problems.append(
                study_problem(file, f"{where} needs 'parameter'{hint}", None, "a new finding")
            )
            return None
        if changes.get("kind", "absolute") == "absolute" and not (
            "thresholds" in table or "threshold" in table
        ):
            problems.append(
                study_problem(file, f"{where} needs 'thresholds' or 'threshold'{hint}", None,
                              "an absolute finding")
            )  # fmt: skip
            return None
        changes.setdefault("source", "declared in the study file")
    try:
        if base is None:
            return FindingDefinition(name=name, **changes)
        if changes.get("kind") == "remote" and "k" in changes:
            changes.setdefault("thresholds", MappingProxyType({}))
            changes.setdefault("value_any_field", None)
            changes.setdefault("derivation", None)
        return replace(base, **changes)
    except (ValueError, TypeError) as exc:
        problems.append(study_problem(file, f"{where}: {exc}", None))
        return None


def _build(
    table: Mapping[str, Any], bad: frozenset[str], file: str, problems: list[Problem]
) -> tuple[tuple[FindingDefinition, ...], SwapOptions]:
    """Definitions and swap options of a ``[findings]`` table, leaving ``bad`` keys alone."""
    use_defaults = table.get("use_defaults", True) if "use_defaults" not in bad else True
    chosen: dict[str, FindingDefinition] = (
        {d.name: d for d in DEFAULT_FINDINGS} if use_defaults else {}
    )
    for name, content in table.items():
        if name in FINDINGS_RULES or not isinstance(content, Mapping) or name in bad:
            continue
        if not content.get("enabled", True):
            if name not in BUILT_IN and set(content) == {"enabled"}:
                hint = did_you_mean(name, BUILT_IN)
                problems.append(
                    study_problem(file, f"[findings.{name}] switches off a finding that is not "
                                  f"defined{hint}", name, f"one of {list(BUILT_IN)}")
                )  # fmt: skip
            chosen.pop(name, None)
            continue
        definition = _finding(name, content, file, problems)
        if definition is not None:
            chosen[name] = definition
    magnitude = (
        table.get("magnitude_only_methods", []) if "magnitude_only_methods" not in bad else []
    )
    margin = (
        table.get("swap_margin", DEFAULT_SWAP_MARGIN_PP)
        if "swap_margin" not in bad
        else DEFAULT_SWAP_MARGIN_PP
    )
    swap = SwapOptions(
        margin=float(margin), magnitude_only_methods=tuple(m.strip() for m in magnitude)
    )
    return tuple(chosen.values()), swap


def _check_findings(
    table: Mapping[str, Any], bad: frozenset[str], file: str, document: Mapping[str, Any]
) -> list[Problem]:
    problems: list[Problem] = []
    _build(table, bad, file, problems)
    return problems


FINDINGS_SCHEMA = TableSchema(keys=FINDINGS_RULES, entries=FINDING_RULES, check=_check_findings)
"""Schema of the ``[findings]`` table for :func:`cohort.domain.rules.check_document`: the
rules of its keys, and the problems found while building the definitions."""


def build_findings(
    table: Mapping[str, Any] | None, file: str
) -> tuple[tuple[FindingDefinition, ...], SwapOptions]:
    """Definitions and swap options of a ``[findings]`` table already checked against
    :data:`FINDINGS_SCHEMA` (what :mod:`cohort.io.settings` does when it reads a study)."""
    problems: list[Problem] = []
    built = _build(dict(table or {}), frozenset(), file, problems)
    if problems:  # pragma: no cover - the schema check found these before
        raise StudyError(problems)
    return built


def parse_findings_table(
    table: Mapping[str, Any] | None, file: str = "study file"
) -> tuple[tuple[FindingDefinition, ...], SwapOptions]:
    """The finding definitions and the swap-screen options of a ``[findings]`` table, in one
    pass (:func:`parse_findings` and :func:`parse_swap_options` give one of the two)."""
    table = dict(table or {})
    problems = check_table("findings", table, FINDINGS_SCHEMA, file)
    if problems:
        raise StudyError(problems)
    return _build(table, frozenset(), file, problems)


def parse_findings(
    table: Mapping[str, Any] | None, file: str = "study file"
) -> tuple[FindingDefinition, ...]:
    """Finding definitions from the ``[findings]`` table of a study file (format in
    :mod:`cohort.domain.thresholds`).

    ``None`` or an empty table gives :data:`DEFAULT_FINDINGS`. Raises
    :class:`~cohort.domain.problems.StudyError` (code ``study-option``, located in ``file``)
    listing every problem.

    Examples
    --------
    >>> [d.name for d in parse_findings(None)]
    ['hemorrhage', 'fat']
    >>> (fat,) = parse_findings({"use_defaults": False, "fat": {"threshold": 5.0}})
    >>> fat.rule(fat.threshold_at(1.5).value)
    'fat fraction >= 5 %'
    """
    return parse_findings_table(table, file)[0]


def parse_swap_options(table: Mapping[str, Any] | None, file: str = "study file") -> SwapOptions:
    """Swap-screen options from the ``[findings]`` table (``magnitude_only_methods``,
    ``swap_margin``); raises :class:`~cohort.domain.problems.StudyError`
    like :func:`parse_findings`.

    Examples
    --------
    >>> swap = parse_swap_options({"magnitude_only_methods": ["two-point"], "swap_margin": 5})
    >>> swap.magnitude_only_methods, swap.margin
    (('two-point',), 5.0)
    """
    return parse_findings_table(table, file)[1]
