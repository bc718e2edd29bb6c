"""The deceptive-agreement alert on the planted cohort (sensitivity 4/7) and on hand-made
agreement rows: the rule applied by hand."""

from __future__ import annotations

import inspect
import warnings

import numpy as np
import pandas as pd
import pytest

from cohort.analysis.alerts import (
    DEFAULT_MIN_BIAS_DIFFERENCE,
    DeceptiveAgreementWarning,
    deceptive_agreement,
)
from cohort.analysis.finding_agreement import findings_agreement
from cohort.analysis.findings import evaluate_findings
from cohort.domain.options import RunOptions
from cohort.domain.thresholds import HEMORRHAGE
from cohort.stats.results import NotEstimableWarning
from tests.analysis.planted import planted_subjects, planted_values


@pytest.fixture(scope="module")
def detection():
    res = evaluate_findings(planted_values(), planted_subjects(), (HEMORRHAGE,))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", NotEstimableWarning)
        return findings_agreement(res, "ref", levels=("segment",), n_boot=0).table


def rows(ccc, b_pos, b_neg):
    return pd.DataFrame(
        {
            "parameter": "r2star",
            "method": "fast",
            "stratum": ["all", "finding=hemorrhage:positive", "finding=hemorrhage:negative"],
            "ccc": [ccc, np.nan, np.nan],
            "bias": [0.1, b_pos, b_neg],
        }
    )


def test_high_ccc_with_low_sensitivity_warns(detection):
    # planted cohort: sensitivity 4/7 = 0.571 < 0.8 at segment level
    with pytest.warns(
        DeceptiveAgreementWarning, match=r"CCC 0.950, at least 0.9.*sensitivity 0.571, below 0.8"
    ):
        found = deceptive_agreement(rows(0.95, 0.2, 0.1), detection)
    assert [(w.kind, w.parameter, w.method, w.finding) for w in found] == [
        ("low-sensitivity", "r2star", "fast", "hemorrhage")
    ]
    assert found[0].sensitivity == pytest.approx(4 / 7) and "hemorrhage" in found[0].message
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        assert deceptive_agreement(rows(0.85, 0.2, 0.1), detection) == []  # CCC not high
        assert deceptive_agreement(rows(0.95, 0.2, 0.1), detection, sensitivity_max=0.5) == []


@pytest.mark.parametrize(
    ("b_pos", "b_neg", "floor", "marked"),
    [
        (-8.0, 0.5, None, True),  # shift 8.5 >= max(5 1/s default floor, 0.5)
        (1.2, 0.5, None, False),  # shift 0.7 < default floor 5 1/s
        (1.2, 0.5, 0.5, True),  # shift 0.7 >= max(0.5, (2 - 1) x 0.5)
        (0.9, 0.5, 0.1, False),  # shift 0.4 < (2 - 1) x 0.5: less than double
        (-0.2, 0.5, 0.1, True),  # other sign, shift 0.7 >= 0.5
    ],
)
def test_bias_shift_rule(detection, b_pos, b_neg, floor, marked):
    options = {"sensitivity_max": 0.5}
    if floor is not None:
        options["min_bias_difference"] = {"r2star": floor}
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        found = deceptive_agreement(rows(0.95, b_pos, b_neg), detection, **options)
    assert [w.kind for w in found] == (["bias-shift"] if marked else [])
    assert [issubclass(c.category, DeceptiveAgreementWarning) for c in caught] == (
        [True] if marked else []
    )
    if marked:
        assert f"{b_pos:.4g}" in found[0].message and "'hemorrhage'" in found[0].message


def test_deceptive_agreement_input_checks(detection):
    with pytest.raises(ValueError, match="agreement_rows must have columns"):
        deceptive_agreement(pd.DataFrame({"parameter": []}), detection)
    with pytest.raises(ValueError, match="detection must have columns"):
        deceptive_agreement(rows(0.9, 0, 0), detection.drop(columns="sensitivity"))
    # the ranges are the [analysis] rules of the study file (cohort.domain.options)
    with pytest.raises(ValueError, match="ccc_min must be a finite number 0 to 1, got 2"):
        deceptive_agreement(rows(0.9, 0, 0), detection, ccc_min=2)
    with pytest.raises(ValueError, match="sensitivity_max must be a finite number 0 to 1"):
        deceptive_agreement(rows(0.9, 0, 0), detection, sensitivity_max=float("nan"))
    with pytest.raises(ValueError, match="bias_ratio must be a finite number >= 1"):
        deceptive_agreement(rows(0.9, 0, 0), detection, bias_ratio=0.5)
    with pytest.raises(ValueError, match="one row per parameter, method and stratum"):
        deceptive_agreement(pd.concat([rows(0.9, 0, 0)] * 2), detection)


def test_defaults_are_the_study_file_defaults_and_tenth_thresholds():
    # one place for each default: the [analysis] options and the finding thresholds
    defaults = inspect.signature(deceptive_agreement).parameters
    for name in ("ccc_min", "sensitivity_max", "bias_ratio"):
        assert defaults[name].default == getattr(RunOptions(), name)
    # one tenth of the default thresholds at 1.5 T: R2* 50 1/s (common practice; O'Regan et
    # al. 2009, memory), fat fraction 10 % (common practice), field 30 Hz (placeholder)
    assert dict(DEFAULT_MIN_BIAS_DIFFERENCE) == pytest.approx(
        {"r2star": 5.0, "ff": 1.0, "field": 3.0}
    )
