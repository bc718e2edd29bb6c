"""Display summaries of a study: the numbers the report's figures draw, as tidy tables.

These are simple descriptive summaries formed for display only (segment medians, per-subject
means, percentages of subjects positive); the statistics with their intervals are in the
agreement, findings and groups tables. Each function takes a
:class:`~cohort.io.study.Study` (or an analysis table) and returns a tidy DataFrame, one row
per drawn quantity, so the figures compute nothing themselves.

Field strength: R2* and off-resonance in Hz depend on B0 (R2*(3 T) = 1.88 R2*(1.5 T) - 15
1/s, Storey et al., J Magn Reson Imaging 2007; Hz scale with B0, physics), so the segment
medians of these parameters are formed per field strength when a study has more than one
(:data:`FIELD_DEPENDENT_PARAMETERS`).
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np
import pandas as pd

from cohort.domain.segments import segment_model
from cohort.io.study import Study

FIELD_DEPENDENT_PARAMETERS: tuple[str, ...] = ("r2star", "field")
"""Parameters whose absolute level depends on B0: summarised per field strength."""

SEGMENT_MEDIANS = "display_segment_medians"
DIFFERENCE_MEDIANS = "display_difference_medians"
SUBJECT_MEANS = "display_subject_means"
PAIRED_SUBJECT_MEANS = "display_paired_subject_means"
SEGMENT_PREVALENCE = "display_segment_prevalence"
"""Names of the display tables (:func:`display_tables`); they are drawn, not written."""


def _model_numbers(study: Study) -> tuple[int, ...]:
    return segment_model(study.settings.segment_model).numbers


def field_strengths(
    parameter: str, frame: pd.DataFrame, split: Sequence[str] = FIELD_DEPENDENT_PARAMETERS
) -> list[float | None]:
    """Field strengths summarised separately (``[None]``: all pooled): the levels of
    ``frame["field_strength"]`` for a parameter in ``split`` when there are several.

    Examples
    --------
    >>> frame = pd.DataFrame({"field_strength": [3.0, 1.5, 3.0]})
    >>> field_strengths("r2star", frame), field_strengths("ff", frame)
    ([1.5, 3.0], [None])
    """
    if parameter not in split:
        return [None]
    levels = sorted(float(b) for b in pd.unique(frame["field_strength"]))
    return levels if len(levels) > 1 else [None]


def segment_medians(
    study: Study, split: Sequence[str] = FIELD_DEPENDENT_PARAMETERS
) -> pd.DataFrame:
    """Median of each method's own values per parameter, group, method and segment.

    Parameters in ``split`` get one set of medians per field strength when the study has
    several (:func:`field_strengths`); ``field_strength`` is NaN where all are pooled.
    Columns: ``parameter, field_strength, group, method, segment, median``.
    """
    values = study.values
    numbers = _model_numbers(study)
    parts = []
    for parameter in study.parameters:
        part = values[(values["parameter"] == parameter) & values["segment"].isin(numbers)]
        for b0 in field_strengths(parameter, part, split):
            sub = part if b0 is None else part[part["field_strength"] == b0]
            median = sub.groupby(["group", "method", "segment"])["value"].median()
            frame = median.rename("median").reset_index()
            frame.insert(0, "parameter", parameter)
            frame.insert(1, "field_strength", math.nan if b0 is None else b0)
            parts.append(frame)
    columns = ["parameter", "field_strength", "group", "method", "segment", "median"]
    return _concat(parts, columns)


def difference_medians(study: Study) -> pd.DataFrame:
    """Median difference (test minus reference) per parameter, test method, group and
    segment over the pairs of ``study.paired``.

    Columns: ``parameter, method, group, segment, median_difference``.
    """
    paired = study.paired
    numbers = _model_numbers(study)
    parts = []
    for parameter in study.parameters:
        part = paired[(paired["parameter"] == parameter) & paired["segment"].isin(numbers)]
        if part.empty:
            continue
        diff = part.assign(value=part["test_value"] - part["reference_value"])
        medians = diff.groupby(["method", "group", "segment"])["value"].median()
        frame = medians.rename("median_difference").reset_index()
        frame.insert(0, "parameter", parameter)
        parts.append(frame)
    return _concat(parts, ["parameter", "method", "group", "segment", "median_difference"])


def subject_means(study: Study) -> pd.DataFrame:
    """Per-subject arithmetic mean of each method's own segment values, per parameter.

    Rows in order of first appearance in ``study.values``. Columns: ``parameter, subject,
    group, method, field_strength, mean``. (The ``mean`` rows of the groups analysis'
    subject summaries hold the same numbers, without field strength.)
    """
    values = study.values
    numbers = _model_numbers(study)
    parts = []
    for parameter in study.parameters:
        part = values[(values["parameter"] == parameter) & values["segment"].isin(numbers)]
        keys = ["subject", "group", "method", "field_strength"]
        frame = part.groupby(keys, sort=False)["value"].mean().rename("mean").reset_index()
        frame.insert(0, "parameter", parameter)
        parts.append(frame)
    return _concat(parts, ["parameter", "subject", "group", "method", "field_strength", "mean"])


def paired_subject_means(study: Study) -> pd.DataFrame:
    """Per-subject means of the reference and the test values over the segments where both
    methods have a value, per parameter and test method.

    Columns: ``parameter, method, subject, group, field_strength, reference_mean,
    test_mean, n_pairs`` (``n_pairs``: the segments behind each mean).
    """
    paired = study.paired
    numbers = _model_numbers(study)
    parts = []
    keys = ["subject", "group", "field_strength"]
    for parameter in study.parameters:
        for method in study.test_methods:
            part = paired[
                (paired["parameter"] == parameter)
                & (paired["method"] == method)
                & paired["segment"].isin(numbers)
            ]
            if part.empty:
                continue
            grouped = part.groupby(keys, sort=False)
            frame = grouped[["reference_value", "test_value"]].mean().reset_index()
            frame = frame.rename(
                columns={"reference_value": "reference_mean", "test_value": "test_mean"}
            )
            frame["n_pairs"] = grouped.size().to_numpy()
            frame.insert(0, "parameter", parameter)
            frame.insert(1, "method", method)
            parts.append(frame)
    columns = ["parameter", "method", *keys, "reference_mean", "test_mean", "n_pairs"]
    return _concat(parts, columns)


def segment_prevalence(findings_segment: pd.DataFrame, segments: Sequence[int]) -> pd.DataFrame:
    """Percent of classified subjects positive per finding, group, method and segment.

    ``findings_segment`` is the segment table of :func:`cohort.analysis.findings.
    evaluate_findings` (``finding, group, method, segment, positive``); segments not
    classified (``positive`` missing) are left out of the denominator. Columns: ``finding,
    group, method, segment, percent_positive, n_positive, n_classified``.

    Examples
    --------
    >>> table = pd.DataFrame({"finding": "fat", "group": "g", "method": "m", "segment": 1,
    ...                       "positive": [True, False, None, True]})
    >>> row = segment_prevalence(table, [1]).iloc[0]
    >>> round(float(row["percent_positive"]), 2), int(row["n_positive"]), int(row["n_classified"])
    (66.67, 2, 3)
    """
    parts = []
    for finding in pd.unique(findings_segment["finding"].astype(str)):
        rows = findings_segment[
            (findings_segment["finding"].astype(str) == finding)
            & findings_segment["segment"].isin(segments)
        ]
        positive = rows["positive"].astype("boolean")
        classified = rows[positive.notna().to_numpy()]
        if classified.empty:
            continue
        flags = classified["positive"].astype("boolean").astype(bool).to_numpy()
        classified = classified.assign(_pos=flags, group=classified["group"].astype(str))
        grouped = classified.groupby(["group", "method", "segment"])["_pos"]
        frame = grouped.mean().mul(100.0).rename("percent_positive").reset_index()
        frame["n_positive"] = grouped.sum().to_numpy().astype(int)
        frame["n_classified"] = grouped.size().to_numpy()
        frame.insert(0, "finding", finding)
        parts.append(frame)
    columns = ["finding", "group", "method", "segment", "percent_positive"]
    return _concat(parts, [*columns, "n_positive", "n_classified"])


def display_tables(study: Study, findings_segment: pd.DataFrame) -> dict[str, pd.DataFrame]:
    """Every display summary the report's figures draw, by name (computed once, in the
    analysis; the figures read them and compute nothing)."""
    return {
        SEGMENT_MEDIANS: segment_medians(study),
        DIFFERENCE_MEDIANS: difference_medians(study),
        SUBJECT_MEANS: subject_means(study),
        PAIRED_SUBJECT_MEANS: paired_subject_means(study),
        SEGMENT_PREVALENCE: segment_prevalence(findings_segment, _model_numbers(study)),
    }


def _concat(parts: list[pd.DataFrame], columns: list[str]) -> pd.DataFrame:
    if not parts:
        return pd.DataFrame(columns=columns)
    return pd.concat(parts, ignore_index=True)[columns]


def select(table: pd.DataFrame, **where: object) -> pd.DataFrame:
    """Rows of a display table whose columns equal the given values (NaN matches None or
    NaN, for the pooled ``field_strength``), index reset.

    Examples
    --------
    >>> table = pd.DataFrame({"parameter": ["ff", "r2star"], "field_strength": [np.nan, 3.0]})
    >>> select(table, parameter="ff", field_strength=None)["parameter"].tolist()
    ['ff']
    """
    mask = np.ones(len(table), dtype=bool)
    for column, value in where.items():
        if value is None or (isinstance(value, float) and math.isnan(value)):
            mask &= table[column].isna().to_numpy()
        else:
            mask &= (table[column].astype(str) == str(value)).to_numpy()
    return table[mask].reset_index(drop=True)
