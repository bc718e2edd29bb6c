"""cohort: cohort statistics for myocardial multi-echo mapping studies.

Research use only; not a diagnostic device. Thresholds need local validation; defer to local
clinical practice and licensed professionals.

What a notebook needs is here; the estimators are in :mod:`cohort.stats`::

    import cohort
    study = cohort.load_study("study.toml")     # checked, harmonised, paired values
    tables = cohort.analyse(study)              # every table of a report, no files written
    cohort.run("study.toml", out="report")      # the whole output folder

Everything else is internal and may change between versions. Names are loaded on first use,
so ``import cohort.stats`` does not load the plotting or report code.
"""

from __future__ import annotations

import importlib
from typing import Any

__version__ = "0.1.0"

_HOMES = {
    "load_study": "cohort.io.study",
    "check_study": "cohort.io.study",
    "Study": "cohort.io.study",
    "StudySettings": "cohort.io.settings",
    "build_settings": "cohort.io.settings",
    "StudyError": "cohort.domain.problems",
    "Problem": "cohort.domain.problems",
    "analyse": "cohort.analysis.pipeline",
    "Analysis": "cohort.analysis.pipeline",
    "RunOptions": "cohort.domain.options",
    "options_from_study": "cohort.analysis.pipeline",
    "run": "cohort.report.runner",
    "RunSummary": "cohort.report.runner",
    "write_demo": "cohort.demo",
    "ConfidenceInterval": "cohort.stats.results",
    "Result": "cohort.stats.results",
    "CohortWarning": "cohort.stats.results",
    "NotEstimableWarning": "cohort.stats.results",
    "Estimate": "cohort.stats.results",
}
"""Each public name and the module that holds it."""

__all__ = ["__version__", *_HOMES]


def __getattr__(name: str) -> Any:
    if name not in _HOMES:
        raise AttributeError(f"module 'cohort' has no attribute {name!r}")
    value = getattr(importlib.import_module(_HOMES[name]), name)
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return sorted(__all__)
