"""Per-subject summaries of segment values and their description per group.

Unit of analysis. Segments are clustered in subjects, so tests between groups run on
*per-subject summaries*: one value per subject, method and parameter (the mean over its
segments, its maximum segment, the mean over its culprit territory). Subjects are
independent, so tests on these summaries and their intervals respect the clustering.
:func:`subject_summaries` makes them; :func:`describe_groups` describes them per group
(the ``group_descriptives`` table).
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np
import pandas as pd

from cohort.analysis.group_tables import (
    one_warning_per_reason,
    ordered_groups,
    require_columns,
)
from cohort.domain.segments import SEGMENTS, TERRITORIES
from cohort.domain.units import PARAMETERS
from cohort.io.method_order import levels
from cohort.stats.results import warn_not_estimable

MEAN, MAX, CULPRIT_MEAN = "mean", "max", "culprit_mean"
SUMMARY_KINDS: tuple[str, ...] = (MEAN, MAX, CULPRIT_MEAN)
"""Per-subject summaries: mean over segments, maximum segment, mean over the culprit territory."""

SUMMARY_COLUMNS: tuple[str, ...] = (
    "subject", "group", "method", "parameter", "summary", "value", "n_segments", "note",
)  # fmt: skip
"""Columns of :func:`subject_summaries`."""

DESCRIPTIVE_COLUMNS: tuple[str, ...] = (
    "parameter", "unit", "method", "summary", "group", "n_subjects",
    "median", "q1", "q3", "mean", "sd", "note",
)  # fmt: skip
"""Columns of :func:`describe_groups` (quartiles: linear interpolation, numpy's default)."""

_NO_CULPRIT = "no culprit territory named for this subject (blank, e.g. a control)"


def _culprit(subjects: pd.DataFrame, column: str) -> pd.Series:
    raw = subjects[column].astype(object).where(subjects[column].notna(), "")
    text = raw.map(lambda v: str(v).strip())
    canonical = {t.lower(): t for t in TERRITORIES}
    mapped = text.str.lower().map(canonical)
    bad = (text != "") & mapped.isna()
    if bad.any():
        examples = sorted(set(text[bad]))[:5]
        raise ValueError(
            f"subjects[{column!r}] must be blank or one of {TERRITORIES}, got {examples}"
        )
    return pd.Series(mapped.fillna("").to_numpy(), index=subjects["subject"].astype(str))


def subject_summaries(
    values: pd.DataFrame, subjects: pd.DataFrame, *, culprit_column: str = "culprit_territory"
) -> pd.DataFrame:
    """Per subject, method and parameter: mean and maximum over segments, culprit-territory mean.

    ``values`` is :attr:`Study.values` (``subject, method, parameter, segment, value``;
    ``territory`` if present, else the recommended assignment of Cerqueira et al. 2002);
    ``subjects`` gives ``group`` and, optionally, ``culprit_column``. The culprit mean is
    the mean over the segments of the subject's culprit territory; it is NaN with a note
    when no territory is named (controls) or no segment of it has a value. Without the
    column there are no culprit rows. Columns: :data:`SUMMARY_COLUMNS`; ``n_segments`` is
    the number of segment values behind each summary.

    Examples
    --------
    >>> values = pd.DataFrame({"subject": ["s1"] * 3 + ["s2"] * 3, "method": "m",
    ...     "parameter": "ff", "segment": [1, 3, 5] * 2, "value": [2.0, 4, 9, 1, 1, 4]})
    >>> subjects = pd.DataFrame({"subject": ["s1", "s2"], "group": ["acute", "control"],
    ...     "culprit_territory": ["RCA", ""]})
    >>> import warnings
    >>> with warnings.catch_warnings():
    ...     warnings.simplefilter("ignore")  # s2 names no culprit territory: NaN with a note
    ...     table = subject_summaries(values, subjects)
    >>> table[["subject", "summary", "value", "n_segments"]]
      subject       summary  value  n_segments
    0      s1          mean    5.0           3
    1      s2          mean    2.0           3
    2      s1           max    9.0           3
    3      s2           max    4.0           3
    4      s1  culprit_mean    4.0           1
    5      s2  culprit_mean    NaN           0
    """
    values = require_columns(
        values, "values", ("subject", "method", "parameter", "segment", "value")
    )
    subjects = require_columns(subjects, "subjects", ("subject", "group"))
    v = values[["subject", "method", "parameter", "segment", "value"]].copy()
    v["subject"] = v["subject"].astype(str)
    v["value"] = pd.to_numeric(v["value"], errors="coerce")
    bad = ~np.isfinite(v["value"].to_numpy(dtype=float))
    if bad.any():
        raise ValueError(f"values['value'] must hold finite numbers, got {int(bad.sum())} others")
    group_of = pd.Series(
        subjects["group"].astype(str).to_numpy(), index=subjects["subject"].astype(str)
    )
    unknown = sorted(set(v["subject"].unique()) - set(group_of.index))
    if unknown:
        raise ValueError(f"values name subjects absent from subjects: {unknown[:5]}")
    keys = ["subject", "method", "parameter"]
    grouped = v.groupby(keys, sort=True)["value"]
    base = grouped.agg(["mean", "max", "count"])
    parts = []
    for kind in (MEAN, MAX):
        part = base[[kind, "count"]].rename(columns={kind: "value", "count": "n_segments"})
        parts.append(part.assign(summary=kind, note=""))
    if culprit_column in subjects.columns:
        culprit = _culprit(subjects, culprit_column)
        parts.append(_culprit_means(values, v, culprit, base.index))
    out = pd.concat(parts).reset_index()
    out["group"] = out["subject"].map(group_of)
    out["n_segments"] = out["n_segments"].astype(int)
    rank = {p: i for i, p in enumerate(PARAMETERS)}
    # as plain text: a categorical column would map to a categorical and sort by its codes
    out["_p"] = out["parameter"].astype(str).map(rank).fillna(len(rank))
    out["_s"] = out["summary"].astype(str).map({s: i for i, s in enumerate(SUMMARY_KINDS)})
    out = out.sort_values(["_p", "parameter", "method", "_s", "subject"], kind="stable")
    return out[list(SUMMARY_COLUMNS)].reset_index(drop=True)


def _culprit_means(values, v, culprit, index) -> pd.DataFrame:
    """Mean over the segments of each subject's culprit territory (NaN with a note when
    none is named or none of its segments has a value), on ``index`` of subject x method x
    parameter."""
    keys = ["subject", "method", "parameter"]
    territory = (
        values["territory"].astype(str).to_numpy()
        if "territory" in values.columns
        else v["segment"].map({s: seg.territory for s, seg in SEGMENTS.items()}).to_numpy()
    )
    named = v["subject"].map(culprit).to_numpy()
    inside = v[(territory == named) & (named != "")]
    agg = inside.groupby(keys, sort=True)["value"].agg(["mean", "count"]).reindex(index)
    part = agg.rename(columns={"mean": "value", "count": "n_segments"})
    part["n_segments"] = part["n_segments"].fillna(0).astype(int)
    has_name = index.get_level_values("subject").map(culprit).to_numpy() != ""
    part["note"] = np.where(
        has_name,
        np.where(part["n_segments"] > 0, "", "no segment of the culprit territory has a value"),
        _NO_CULPRIT,
    )
    n_missing = int(part["value"].isna().sum())
    if n_missing:
        reasons = "; ".join(sorted(set(part.loc[part["value"].isna(), "note"])))
        warn_not_estimable(f"{CULPRIT_MEAN} of {n_missing} subject x method x parameter", reasons)
    return part.assign(summary=CULPRIT_MEAN)


def summary_keys(frame: pd.DataFrame) -> list[tuple[str, str, str]]:
    """The (parameter, method, summary) cells of a summaries table, in table order:
    parameters in the order of :data:`~cohort.domain.units.PARAMETERS`, summaries in the
    order of :data:`SUMMARY_KINDS`.

    Examples
    --------
    >>> frame = pd.DataFrame({"parameter": ["r2star", "ff"], "method": ["m", "m"],
    ...                       "summary": ["max", "mean"]})
    >>> summary_keys(frame)
    [('ff', 'm', 'mean'), ('r2star', 'm', 'max')]
    """
    keys = frame[["parameter", "method", "summary"]].drop_duplicates()
    rank = {p: i for i, p in enumerate(PARAMETERS)}
    srank = {s: i for i, s in enumerate(SUMMARY_KINDS)}
    mrank = {m: i for i, m in enumerate(levels(frame["method"]))}  # the study's method order
    return sorted(
        (tuple(k) for k in keys.itertuples(index=False)),
        key=lambda k: (
            rank.get(k[0], len(rank)), k[0], mrank.get(k[1], 0), k[1],
            srank.get(k[2], len(srank)), k[2],
        ),
    )  # fmt: skip


def values_by_group(part: pd.DataFrame, order: Sequence[str]) -> dict[str, np.ndarray]:
    """The finite ``value`` of each group of ``part`` (an empty array for a group without).

    Examples
    --------
    >>> part = pd.DataFrame({"group": ["a", "b", "a"], "value": [1.0, float("nan"), 3.0]})
    >>> {g: v.tolist() for g, v in values_by_group(part, ["a", "b"]).items()}
    {'a': [1.0, 3.0], 'b': []}
    """
    finite = part[np.isfinite(part["value"].to_numpy(dtype=float))]
    by = {str(g): d["value"].to_numpy(dtype=float) for g, d in finite.groupby("group", sort=False)}
    return {g: by.get(g, np.zeros(0)) for g in order}


def describe_groups(
    summaries: pd.DataFrame, group_order: Sequence[str] | None = None
) -> pd.DataFrame:
    """Per parameter, method, summary and group: n, median [Q1, Q3], mean and SD (ddof=1).

    Quartiles use linear interpolation (numpy's default, Hyndman & Fan type 7). A group
    with no value or a single subject gets NaN where the statistic needs more, with a note
    (the subjects' own note when they share one, e.g. no culprit territory for controls).
    Columns: :data:`DESCRIPTIVE_COLUMNS`. Validated against ``numpy.quantile`` and
    ``numpy.std(ddof=1)`` on the demo cohort.

    Examples
    --------
    >>> summaries = pd.DataFrame({"parameter": "ff", "method": "m", "summary": "mean",
    ...     "group": ["control"] * 3 + ["acute"] * 2, "value": [1.0, 2, 4, 6, 9]})
    >>> table = describe_groups(summaries, ["control", "acute"])
    >>> table[["group", "n_subjects", "median", "mean", "sd"]].round(2)
         group  n_subjects  median  mean    sd
    0  control           3     2.0  2.33  1.53
    1    acute           2     7.5  7.50  2.12
    """
    summaries = require_columns(
        summaries, "summaries", ("parameter", "method", "summary", "group", "value")
    )
    order = ordered_groups(summaries["group"], group_order, "summaries")
    rows = []
    with one_warning_per_reason():
        for parameter, method, summary in summary_keys(summaries):
            part = summaries[
                summaries["parameter"].eq(parameter)
                & summaries["method"].eq(method)
                & summaries["summary"].eq(summary)
            ]
            samples = values_by_group(part, order)
            for group in order:
                key = {"parameter": parameter, "method": method, "summary": summary}
                rows.append(_describe(samples[group], part, group, key))
    return pd.DataFrame(rows, columns=list(DESCRIPTIVE_COLUMNS))


def _describe(x: np.ndarray, part: pd.DataFrame, group: str, key: dict) -> dict[str, object]:
    """One row of :func:`describe_groups`: the values ``x`` of ``group`` in ``part``."""
    parameter, summary = key["parameter"], key["summary"]
    row = {
        **key,
        "unit": PARAMETERS[parameter].unit if parameter in PARAMETERS else "",
        "group": group,
        "n_subjects": int(x.size),
        "note": "",
    }
    if x.size == 0:
        notes = part.loc[part["group"].eq(group), "note"] if "note" in part else []
        shared = sorted(set(notes) - {""})
        reason = shared[0] if len(shared) == 1 else "no subject of this group has a value"
        row["note"] = warn_not_estimable(f"{summary} of group {group}", reason)
        row.update(dict.fromkeys(("median", "q1", "q3", "mean", "sd"), math.nan))
        return row
    q1, median, q3 = np.quantile(x, [0.25, 0.5, 0.75])
    row.update(median=median, q1=q1, q3=q3, mean=float(x.mean()))
    if x.size < 2:
        row["sd"] = math.nan
        row["note"] = warn_not_estimable(f"SD of {summary} in group {group}", "a single subject")
    else:
        row["sd"] = float(x.std(ddof=1))
    return row
