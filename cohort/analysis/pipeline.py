"""The whole analysis of a study, as one pure function, and the run that writes it out.

``analyse(study, options)`` computes every table of the report from a loaded study (no I/O);
``run(...)`` loads, analyses and writes the output folder atomically (see
:mod:`cohort.report.outputs`). The command line, the report and notebooks call these.

Options come from the ``[analysis]`` table of the study file (checked when the file is read;
format and rules in :mod:`cohort.domain.options`); :class:`RunOptions` and
:func:`options_from_study`
live there and are re-exported here. Command-line options (``--seed``, ``--bootstrap``,
``--workers``) override the study file and obey the same rules.
"""

from __future__ import annotations

import time
import warnings
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field, replace
from typing import Any

import pandas as pd

from cohort.analysis.agreement_table import agreement_table
from cohort.analysis.detection import (
    deceptive_agreement,
    finding_strata,
    findings_agreement,
    missed_findings,
)
from cohort.analysis.findings import FindingsResult, evaluate_findings
from cohort.analysis.groups import study_group_comparison
from cohort.analysis.swaps import swap_screen_with
from cohort.domain.options import RunOptions, options_from_study
from cohort.domain.problems import problems_frame
from cohort.domain.segments import SEGMENTS
from cohort.domain.thresholds import SwapOptions, parse_findings_table, thresholds_table
from cohort.io.study import Study
from cohort.stats.results import CohortWarning

Progress = Callable[[str], None]


@dataclass
class Analysis:
    """Everything a report shows: named tidy tables plus the alerts to show first."""

    study: Study
    options: RunOptions
    findings: FindingsResult
    tables: dict[str, pd.DataFrame]
    alerts: list[str] = field(default_factory=list)
    warnings: list[str] = field(default_factory=list)
    timings: dict[str, float] = field(default_factory=dict)


def _segment_catalogue() -> pd.DataFrame:
    return pd.DataFrame(
        {
            "segment": list(SEGMENTS),
            "segment_name": [s.name for s in SEGMENTS.values()],
            "ring": [s.ring for s in SEGMENTS.values()],
            "territory": [s.territory for s in SEGMENTS.values()],
        }
    )


def _present(options: SwapOptions, paired: pd.DataFrame) -> SwapOptions:
    """The swap options without named methods that have no pair left (every value of theirs
    was excluded: the exclusions table says why)."""
    methods = set(paired["method"].astype(str))
    kept = tuple(m for m in options.magnitude_only_methods if m in methods)
    return replace(options, magnitude_only_methods=kept)


def analyse(
    study: Study, options: RunOptions | None = None, progress: Progress | None = None
) -> Analysis:
    """Run every analysis of the report on a loaded study (pure: no files are written)."""
    options = options or options_from_study(study)
    say = progress or (lambda message: None)
    timings: dict[str, float] = {}
    caught: list[warnings.WarningMessage] = []
    tables: dict[str, pd.DataFrame] = {}

    def step(name: str, message: str, func: Callable[[], Any]) -> Any:
        say(message)
        start = time.perf_counter()
        with warnings.catch_warnings(record=True) as record:
            warnings.simplefilter("always", CohortWarning)
            result = func()
        caught.extend(record)
        timings[name] = time.perf_counter() - start
        return result

    source = study.settings.input_name(study.settings.study_file) or "study settings"
    definitions, swap_options = parse_findings_table(
        study.settings.extra.get("findings"), file=source
    )
    findings = step(
        "findings",
        "classifying findings",
        lambda: evaluate_findings(study.values, study.subjects, definitions),
    )
    strata_masks = finding_strata(study.paired, findings)
    agreement = step(
        "agreement",
        f"agreement statistics (subject cluster bootstrap, B = {options.n_boot})",
        lambda: agreement_table(
            study.paired,
            strata=options.strata,
            n_boot=options.n_boot,
            seed=options.seed,
            confidence_level=options.confidence_level,
            ratio_parameters=options.ratio_parameters,
            error_ratio=options.error_ratio,
            extra_strata=strata_masks,
            regression_limits=options.regression_limits,
            pb_max_pairs=options.pb_max_pairs,
            workers=options.workers,
        ),
    )
    detection = step(
        "findings_agreement",
        f"finding-level agreement (B = {options.n_boot})",
        lambda: (
            findings_agreement(
                findings,
                study.reference,
                groups=study.groups,
                n_boot=options.n_boot,
                seed=options.seed,
                confidence_level=options.confidence_level,
            ).table
        ),
    )
    missed = step(
        "missed", "missed and extra findings", lambda: missed_findings(findings, study.reference)
    )
    swaps = step(
        "swaps",
        "fat-water swap screen",
        lambda: swap_screen_with(study.paired, _present(swap_options, study.paired)),
    )
    alerts_found = step(
        "alerts",
        "deceptive-agreement screen",
        lambda: deceptive_agreement(
            agreement,
            detection,
            ccc_min=options.ccc_min,
            sensitivity_max=options.sensitivity_max,
            bias_ratio=options.bias_ratio,
        ),
    )
    alerts = [a.message for a in alerts_found]
    for row in swaps.counts.itertuples():
        if row.n_flagged:
            alerts.append(
                f"fat-water swap screen: {row.n_flagged} of {row.n_pairs} fat-fraction pairs of "
                f"{row.method} flagged ({row.n_swap_suspect} closer to 100 minus the reference, "
                f"{row.n_not_comparable} not comparable with a magnitude-only method); see "
                "tables/swap_flags.csv and exclude them explicitly if justified"
            )
    segment_findings = findings.segments[
        ["subject", "group", "method", "finding", "segment", "positive"]
    ]
    subject_findings = findings.subjects[["subject", "group", "method", "finding", "positive"]]
    comparison = step(
        "groups",
        "group comparisons",
        lambda: study_group_comparison(
            study,
            subject_findings=subject_findings,
            segment_findings=segment_findings,
            correction=options.correction,
            confidence_level=options.confidence_level,
            seed=options.seed,
            workers=options.workers,
        ),
    )

    tables["agreement"] = agreement
    tables["thresholds"] = thresholds_table(definitions)
    tables["findings_segment"] = findings.segments
    tables["findings_territory"] = findings.territories
    tables["findings_subject"] = findings.subjects
    tables["findings_agreement"] = detection
    tables["missed_findings"] = missed
    tables["swap_screen"] = swaps.counts
    tables["swap_flags"] = swaps.flags
    tables.update(comparison.tables())
    tables["subjects_per_group"] = _subjects_per_group(study)
    tables["coverage"] = study.coverage()
    tables["missing_values"] = study.missing_values()
    tables["exclusions"] = study.exclusions()
    tables["input_warnings"] = problems_frame(study.warnings)
    tables["record_accounting"] = pd.DataFrame([study.accounting()])
    messages = list(dict.fromkeys(str(w.message) for w in caught))
    messages.append(f"group comparison: {comparison.model_path}")
    return Analysis(study, options, findings, tables, alerts, messages, timings)


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


def analysis_options(options: RunOptions) -> Mapping[str, Any]:
    return options.to_dict()
