"""The whole analysis of a study, as one pure function: ``analyse(study, options)``.

``analyse`` computes every table of the report from a loaded study (no I/O) and returns an
:class:`Analysis`, a container naming its tables (:data:`TABLES`). Writing them out is
:func:`cohort.report.runner.run`. The command line, the report and notebooks call these.

Options are the study file's ``[analysis]`` table, parsed when the file was read
(:attr:`cohort.io.settings.StudySettings.options`; format and rules in
:mod:`cohort.domain.options`); :func:`options_from_study` applies a run's overrides
(``--seed``, ``--bootstrap``, ``--workers``), which obey the same rules.
"""

from __future__ import annotations

import time
import warnings
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field, replace
from types import MappingProxyType
from typing import Any

import pandas as pd

from cohort.analysis.agreement_table import agreement_table
from cohort.analysis.alerts import AgreementWarning, deceptive_agreement
from cohort.analysis.display import display_tables
from cohort.analysis.finding_agreement import finding_strata, findings_agreement, missed_findings
from cohort.analysis.findings import FindingsResult, evaluate_findings
from cohort.analysis.group_comparison import study_group_comparison
from cohort.analysis.lesion_alerts import (
    bias_shift_alerts,
    missed_lesion_alerts,
    shown_text,
    without_stronger,
)
from cohort.analysis.method_differences import method_differences
from cohort.analysis.swaps import SwapScreen, swap_screen_with
from cohort.analysis.verdicts import method_verdicts, segment_overall
from cohort.domain.options import RunOptions, override_options
from cohort.domain.problems import problems_frame
from cohort.domain.thresholds import SwapOptions, thresholds_table
from cohort.io.study import Study
from cohort.stats.results import CohortWarning

Progress = Callable[[str], None]

TABLES: Mapping[str, str] = MappingProxyType(
    {
        "method_verdicts": "each test method against the acceptance criteria set in advance",
        "method_differences": "test methods head to head: differences in agreement and "
        "sensitivity with the same reference",
        "agreement": "every agreement statistic per parameter, method and stratum",
        "thresholds": "the finding thresholds in force, with their sources",
        "findings_segment": "each segment classified per method and finding",
        "findings_territory": "each coronary territory classified per method and finding",
        "findings_subject": "each subject classified per method and finding",
        "findings_agreement": "finding-level agreement of each test method with the reference",
        "missed_findings": "reference-positive units missed and extra positives",
        "swap_screen": "fat-water swap screen: counts per method",
        "swap_flags": "fat-water swap screen: the flagged pairs",
        "subjects_per_group": "subjects per group and field strength",
        "coverage": "subjects with a usable value per method, parameter and segment",
        "missing_values": "blank cells per method, parameter and segment",
        "exclusions": "input records not used, each with its reason",
        "input_warnings": "input problems that did not stop the study",
        "record_accounting": "input records by status (used, missing, excluded)",
    }
)
"""The tables an :class:`Analysis` names (and the output folder's ``tables/`` holds), in
order (``method_verdicts`` only when the study declares acceptance criteria,
``method_differences`` only with two or more test methods); the group
comparison's tables (``group_comparison``, ``group_descriptives``, ...; see
:meth:`cohort.analysis.group_comparison.GroupComparison.tables`) follow ``swap_flags``."""


@dataclass
class Analysis:
    """Everything a report shows: the run's tables by name (:data:`TABLES`) plus the alerts
    to show first.

    Attributes
    ----------
    study : the analysed :class:`~cohort.io.study.Study`.
    options : the :class:`~cohort.domain.options.RunOptions` in force.
    findings : the classification of every unit (:class:`FindingsResult`).
    tables : tidy tables by name, in the order of :data:`TABLES`.
    alerts : deceptive-agreement, missed-lesion, over-calling and swap warnings, to read
        first.
    display : the summaries the figures draw (:func:`cohort.analysis.display.display_tables`),
        empty when the run draws no figures; not written as tables.
    warnings : warnings raised by the estimators (each once) and the group model used.
    timings : seconds per step.
    """

    study: Study
    options: RunOptions
    findings: FindingsResult
    tables: dict[str, pd.DataFrame]
    alerts: list[str] = field(default_factory=list)
    warnings: list[str] = field(default_factory=list)
    timings: dict[str, float] = field(default_factory=dict)
    display: dict[str, pd.DataFrame] = field(default_factory=dict)

    def __repr__(self) -> str:
        return (
            f"<Analysis of {self.study.settings.title!r}: tables {list(self.tables)}, "
            f"{len(self.alerts)} alerts, B = {self.options.n_boot}>"
        )


def options_from_study(
    study: Study, *, where: str = "options_from_study()", **overrides: Any
) -> RunOptions:
    """The study's options (its ``[analysis]`` table, parsed when read), then ``overrides``
    (those not None), each checked by its rule; raises
    :class:`~cohort.domain.problems.StudyError` locating a bad override at ``where`` (see
    :func:`cohort.domain.options.override_options`).

    Examples
    --------
    >>> import tempfile
    >>> from cohort.demo import write_demo
    >>> from cohort.io.study import load_study
    >>> with tempfile.TemporaryDirectory() as folder:
    ...     study = load_study(write_demo(folder, n_subjects=6))
    >>> options = options_from_study(study, n_boot=500)
    >>> options.n_boot, options.confidence_level
    (500, 0.95)
    """
    return override_options(study.settings.options, where=where, **overrides)


class _Steps:
    """Runs the steps of an analysis: says each, times it and keeps its warnings."""

    def __init__(self, progress: Progress | None) -> None:
        self.say = progress or (lambda message: None)
        self.timings: dict[str, float] = {}
        self.caught: list[warnings.WarningMessage] = []

    def __call__(self, name: str, message: str, func: Callable[[], Any]) -> Any:
        self.say(message)
        start = time.perf_counter()
        with warnings.catch_warnings(record=True) as record:
            warnings.simplefilter("always", CohortWarning)
            result = func()
        self.caught.extend(record)
        self.timings[name] = time.perf_counter() - start
        return result

    def messages(self) -> list[str]:
        return list(dict.fromkeys(str(w.message) for w in self.caught))


def analyse(
    study: Study, options: RunOptions | None = None, progress: Progress | None = None
) -> Analysis:
    """Run every analysis of the report on a loaded study (pure: no files are written).

    ``options`` default to the study's own (:attr:`StudySettings.options`); ``progress``
    is called with a message before each step.

    Examples
    --------
    >>> import tempfile
    >>> from cohort.demo import write_demo
    >>> from cohort.io.study import load_study
    >>> with tempfile.TemporaryDirectory() as folder:
    ...     study = load_study(write_demo(folder, n_subjects=6))
    >>> analysis = analyse(study, options_from_study(study, n_boot=0, figures=False))
    >>> row = analysis.tables["agreement"].iloc[0]
    >>> str(row["parameter"]), str(row["method"]), int(row["n_subjects"])
    ('ff', 'net-full', 6)
    """
    options = options or study.settings.options
    step = _Steps(progress)
    definitions = study.settings.findings
    findings = step(
        "findings",
        "classifying findings",
        lambda: evaluate_findings(study.values, study.subjects, definitions),
    )
    agreement = step(
        "agreement",
        f"agreement statistics (subject cluster bootstrap, B = {options.n_boot})",
        lambda: _agreement(study, findings, options),
    )
    detection = step(
        "findings_agreement",
        f"finding-level agreement (B = {options.n_boot})",
        lambda: _findings_agreement(study, findings, options),
    )
    missed = step(
        "missed", "missed and extra findings", lambda: missed_findings(findings, study.reference)
    )
    swap_options = _present(study.settings.swap, study.paired)
    swaps = step(
        "swaps", "fat-water swap screen", lambda: swap_screen_with(study.paired, swap_options)
    )
    alerts = step(
        "alerts",
        "alerts: deceptive agreement, missed and over-called lesions",
        lambda: _alerts(study, findings, agreement, detection, options),
    )
    alerts += _swap_alerts(swaps, study.method_label)
    comparison = step(
        "groups", "group comparisons", lambda: _group_comparison(study, findings, options)
    )
    tables = {
        **_verdicts(study, agreement, detection),
        **step(
            "method_differences",
            f"test methods head to head (B = {options.n_boot})",
            lambda: _differences(study, findings, options),
        ),
        "agreement": agreement,
        "thresholds": thresholds_table(definitions),
        "findings_segment": findings.segments,
        "findings_territory": findings.territories,
        "findings_subject": findings.subjects,
        "findings_agreement": detection,
        "missed_findings": missed,
        "swap_screen": swaps.counts,
        "swap_flags": swaps.flags,
        **comparison.tables(),
        **_quality_tables(study),
    }
    display = (
        step("display", "display summaries", lambda: display_tables(study, findings.segments))
        if options.figures
        else {}
    )
    messages = [*step.messages(), f"group comparison: {comparison.model_path}"]
    return Analysis(study, options, findings, tables, alerts, messages, step.timings, display)


def _agreement(study: Study, findings: FindingsResult, options: RunOptions) -> pd.DataFrame:
    return agreement_table(
        study.paired,
        strata=options.strata,
        n_boot=options.n_boot,
        seed=options.seed,
        confidence_level=options.confidence_level,
        ratio_parameters=options.ratio_parameters,
        error_ratio=options.error_ratio,
        extra_strata=finding_strata(study.paired, findings),
        regression_limits=options.regression_limits,
        pb_max_pairs=options.pb_max_pairs,
        workers=options.workers,
    )


def _findings_agreement(
    study: Study, findings: FindingsResult, options: RunOptions
) -> pd.DataFrame:
    return findings_agreement(
        findings,
        study.reference,
        groups=study.groups,
        n_boot=options.n_boot,
        seed=options.seed,
        confidence_level=options.confidence_level,
    ).table


def _group_comparison(study: Study, findings: FindingsResult, options: RunOptions) -> Any:
    return study_group_comparison(
        study,
        subject_findings=findings.subjects[["subject", "group", "method", "finding", "positive"]],
        segment_findings=findings.segments[
            ["subject", "group", "method", "finding", "segment", "positive"]
        ],
        correction=options.correction,
        confidence_level=options.confidence_level,
        seed=options.seed,
        workers=options.workers,
    )


def _verdicts(
    study: Study, agreement: pd.DataFrame, detection: pd.DataFrame
) -> dict[str, pd.DataFrame]:
    """The ``method_verdicts`` table, when the study declares acceptance criteria."""
    acceptance = study.settings.acceptance
    if not acceptance.declared:
        return {}
    return {
        "method_verdicts": method_verdicts(agreement, detection, acceptance, study.test_methods)
    }


def _differences(
    study: Study, findings: FindingsResult, options: RunOptions
) -> dict[str, pd.DataFrame]:
    """The ``method_differences`` table, with two or more test methods."""
    if len(study.test_methods) < 2:
        return {}
    table = method_differences(
        study.paired,
        findings.segments,
        study.reference,
        study.test_methods,
        baseline=study.settings.acceptance.baseline,
        n_boot=options.n_boot,
        seed=options.seed,
        confidence_level=options.confidence_level,
        correction=options.correction,
    )
    return {"method_differences": table}


def _alerts(
    study: Study,
    findings: FindingsResult,
    agreement: pd.DataFrame,
    detection: pd.DataFrame,
    options: RunOptions,
) -> list[str]:
    """Every alert, strongest first: deceptive agreement (high CCC yet lesions missed), then
    missed lesions, bias shifts in lesions and over-calling of any method
    (:mod:`cohort.analysis.lesion_alerts`), each method in the study's order."""
    deceptive: list[AgreementWarning] = deceptive_agreement(
        agreement,
        detection,
        ccc_min=options.ccc_min,
        sensitivity_max=options.sensitivity_max,
        bias_ratio=options.bias_ratio,
        label=study.method_label,
    )
    labels = {d.name: d.label or d.name for d in study.settings.findings}
    methods = study.test_methods
    lesions = missed_lesion_alerts(
        detection,
        findings.segments,
        study.settings.acceptance,
        reference=study.reference,
        methods=methods,
        label=study.method_label,
        finding_labels=labels,
    )
    lesions += bias_shift_alerts(
        agreement,
        detection,
        methods=methods,
        bias_ratio=options.bias_ratio,
        label=study.method_label,
        finding_labels=labels,
    )
    rank = {m: i for i, m in enumerate(methods)}
    kept = sorted(without_stronger(lesions, deceptive), key=lambda a: rank.get(a.method, 0))
    stronger = [_deceptive_text(w, study, findings, detection, labels, options) for w in deceptive]
    return stronger + [a.message for a in kept]


def _deceptive_text(
    warning: AgreementWarning,
    study: Study,
    findings: FindingsResult,
    detection: pd.DataFrame,
    labels: Mapping[str, str],
    options: RunOptions,
) -> str:
    """A deceptive-agreement alert of low sensitivity in the words of the missed-lesion
    alert (counts, interval, subjects affected); a bias shift keeps its own words."""
    rows = segment_overall(detection, warning.method)
    rows = rows[rows["finding"].astype(str).eq(warning.finding)]
    if warning.kind != "low-sensitivity" or rows.empty:
        return warning.message
    criterion = options.sensitivity_max
    return (
        f"Deceptive agreement: {study.method_label(warning.method)} agrees well with the "
        f"reference on {warning.parameter} overall (CCC {warning.ccc:.3f}, at least "
        f"{options.ccc_min:g}), yet it "
        + shown_text(
            rows.iloc[0], "", labels.get(warning.finding, warning.finding), criterion,
            findings.segments, study.reference, warning.method,
        ).lstrip()
    )  # fmt: skip


def _present(options: SwapOptions, paired: pd.DataFrame) -> SwapOptions:
    """The swap options without named methods that have no pair left (every value of theirs
    was excluded: the exclusions table says why)."""
    methods = set(paired["method"].astype(str))
    kept = tuple(m for m in options.magnitude_only_methods if m in methods)
    return replace(options, magnitude_only_methods=kept)


def _swap_alerts(swaps: SwapScreen, label: Callable[[str], str]) -> list[str]:
    return [
        f"fat-water swap screen: {row.n_flagged} of {row.n_pairs} fat-fraction pairs of "
        f"{label(str(row.method))} flagged ({row.n_swap_suspect} closer to 100 minus the "
        "reference, "
        f"{row.n_not_comparable} not comparable with a magnitude-only method); see "
        "tables/swap_flags.csv and exclude them explicitly if justified"
        for row in swaps.counts.itertuples()
        if row.n_flagged
    ]


def _quality_tables(study: Study) -> dict[str, pd.DataFrame]:
    """The tables of the study's inputs: subjects, coverage, missing and excluded values."""
    return {
        "subjects_per_group": _subjects_per_group(study),
        "coverage": study.coverage(),
        "missing_values": study.missing_values(),
        "exclusions": study.exclusions(),
        "input_warnings": problems_frame(study.warnings),
        "record_accounting": pd.DataFrame([study.accounting()]),
    }


def _subjects_per_group(study: Study) -> pd.DataFrame:
    table = (
        study.subjects.groupby(["group", "field_strength"], sort=False)
        .size()
        .rename("n_subjects")
        .reset_index()
    )
    order = {g: i for i, g in enumerate(study.groups)}
    table = table.sort_values(
        ["group", "field_strength"], key=lambda c: c.map(order) if c.name == "group" else c
    )
    return table.reset_index(drop=True)
