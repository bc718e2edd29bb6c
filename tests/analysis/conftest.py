"""Fixtures of the group-comparison tests: the demo study and its whole group comparison,
computed once per session (the four group test modules share them; tests must not modify
them)."""

from __future__ import annotations

import warnings

import pytest

from cohort.analysis.group_comparison import study_group_comparison
from cohort.demo import write_demo
from cohort.io.study import load_study
from cohort.stats.results import NotEstimableWarning

from .group_data import demo_findings


@pytest.fixture(scope="session")
def demo_study(tmp_path_factory):
    return load_study(write_demo(tmp_path_factory.mktemp("demo")))


@pytest.fixture(scope="session")
def demo_groups(demo_study):
    segment, subject = demo_findings(demo_study.values)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", NotEstimableWarning)
        return study_group_comparison(
            demo_study, subject_findings=subject, segment_findings=segment
        )
