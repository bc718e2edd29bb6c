"""Tissue findings by threshold: segment, territory and subject level, per method.

Each :class:`~cohort.domain.thresholds.FindingDefinition` classifies every segment of every method
as positive or negative:

- absolute thresholds: the value in force at the subject's field strength;
- remote thresholds: per subject *and method*, from that method's own remote segments:
  ``mean + k SD`` (direction ``above``) or ``mean - k SD`` (``below``), SD with ``ddof=1``.
  Remote segments are the listed segment numbers, or those outside the subject's culprit
  territory (subjects-table column ``culprit_territory``; a subject with a blank culprit
  territory, such as a healthy control, uses all its segments). With fewer than 2 remote
  segments the threshold is not estimable: the segments are *unclassified* (``positive`` is
  NA), a note says why and a :class:`~cohort.stats.results.NotEstimableWarning` is emitted.

A territory is positive when any of its classified segments is; a subject when at least
``min_segments`` of its classified segments are. Extents count positive segments and give
their percentage of the classified segments. Territories are those of the values table
(which may carry per-subject assignments).
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import Literal

import numpy as np
import pandas as pd

from cohort.domain.problems import Problem, StudyError
from cohort.domain.segments import TERRITORIES
from cohort.domain.thresholds import (
    CULPRIT_COLUMN,
    DEFAULT_FINDINGS,
    OUTSIDE_CULPRIT,
    FindingDefinition,
)
from cohort.stats.results import warn_not_estimable

SEGMENT_COLUMNS = (
    "finding", "parameter", "method", "subject", "group", "field_strength", "segment",
    "segment_name", "ring", "territory", "value", "threshold", "derived", "positive",
)  # fmt: skip
"""Columns of :attr:`FindingsResult.segments`."""

_AGGREGATE_KEYS = ("finding", "parameter", "method", "subject", "group", "field_strength")

TERRITORY_COLUMNS = (
    *_AGGREGATE_KEYS, "territory", "n_segments", "n_classified", "n_positive",
    "extent_percent", "positive", "extreme_value", "extreme_segment", "threshold",
)  # fmt: skip
"""Columns of :attr:`FindingsResult.territories`."""

SUBJECT_COLUMNS = (
    *_AGGREGATE_KEYS, "n_segments", "n_classified", "n_positive", "extent_percent",
    "min_segments", "positive", "positive_segments", "extreme_value", "extreme_segment",
    "threshold",
)  # fmt: skip
"""Columns of :attr:`FindingsResult.subjects`. ``extreme_value`` is the value furthest in
the finding's direction (the maximum for ``above``), at ``extreme_segment``."""

NOTE_COLUMNS = ("finding", "method", "subject", "note")
"""Columns of :attr:`FindingsResult.notes`."""

Level = Literal["segment", "territory", "subject"]

_VALUE_COLUMNS = (
    "subject", "method", "segment", "parameter", "value", "group", "field_strength",
    "segment_name", "ring", "territory",
)  # fmt: skip


@dataclass(frozen=True)
class FindingsResult:
    """Findings per method at segment, territory and subject level (tidy tables)."""

    definitions: tuple[FindingDefinition, ...]
    segments: pd.DataFrame
    territories: pd.DataFrame
    subjects: pd.DataFrame
    notes: pd.DataFrame

    def definition(self, name: str) -> FindingDefinition:
        for d in self.definitions:
            if d.name == name:
                return d
        raise ValueError(
            f"finding must be one of {[d.name for d in self.definitions]}, got {name!r}"
        )

    def to_frame(self, level: Level = "subject") -> pd.DataFrame:
        """The table of one level: ``"segment"``, ``"territory"`` or ``"subject"``."""
        tables = {"segment": self.segments, "territory": self.territories}
        tables["subject"] = self.subjects
        if level not in tables:
            raise ValueError(f"level must be one of {list(tables)}, got {level!r}")
        return tables[level]


def _note(definition: FindingDefinition, method: str, subject: str, text: str) -> dict:
    """A row of :attr:`FindingsResult.notes` (columns :data:`NOTE_COLUMNS`)."""
    return dict(zip(NOTE_COLUMNS, (definition.name, method, subject, text), strict=True))


def _culprit(subjects: pd.DataFrame, definition: FindingDefinition) -> pd.Series:
    if CULPRIT_COLUMN not in subjects.columns:
        raise ValueError(
            f"finding {definition.name!r} takes remote segments from outside the culprit "
            f"territory, but the subjects table has no column {CULPRIT_COLUMN!r}; add it or "
            "list remote_segments"
        )
    culprit = subjects.set_index("subject")[CULPRIT_COLUMN]
    culprit = culprit.astype(object).where(culprit.notna(), "")
    culprit = culprit.map(lambda v: str(v).strip())
    unknown = sorted(set(culprit) - {"", *TERRITORIES})
    if unknown:
        raise ValueError(
            f"subjects column {CULPRIT_COLUMN!r} must name a territory of {list(TERRITORIES)} "
            f"or be blank, got {unknown!r}"
        )
    return culprit


def _absolute_thresholds(part: pd.DataFrame, definition: FindingDefinition) -> None:
    strengths = pd.unique(part["field_strength"])
    threshold = {}
    derived = {}
    problems = []
    for b0 in strengths:
        try:
            t = definition.threshold_at(float(b0))
        except ValueError as exc:
            n = part.loc[part["field_strength"] == b0, "subject"].nunique()
            problems.append(Problem("study-option", f"{exc} ({n} subjects at {b0:g} T)"))
            continue
        threshold[b0] = t.value
        derived[b0] = t.derived
    if problems:
        raise StudyError(problems)
    part["threshold"] = part["field_strength"].map(threshold).astype(float)
    part["derived"] = part["field_strength"].map(derived).astype(bool)


def _remote_thresholds(
    part: pd.DataFrame,
    compared: pd.Series,
    subjects: pd.DataFrame,
    definition: FindingDefinition,
    notes: list[dict],
) -> None:
    if definition.remote_segments == OUTSIDE_CULPRIT:
        culprit = part["subject"].map(_culprit(subjects, definition)).fillna("")
        remote = culprit.eq("") | ~part["territory"].eq(culprit)
        text = "no culprit territory: all segments taken as remote"
        for subject in pd.unique(part.loc[culprit.eq(""), "subject"]):
            notes.append(_note(definition, "", subject, text))
    else:
        remote = part["segment"].isin(definition.remote_segments)
    basis = pd.DataFrame({"subject": part["subject"], "method": part["method"], "x": compared}).loc[
        remote.to_numpy()
    ]
    stats = basis.groupby(["subject", "method"])["x"].agg(["mean", "std", "count"])
    sign = 1.0 if definition.direction == "above" else -1.0
    limit = stats["mean"] + sign * definition.k * stats["std"]
    key = pd.MultiIndex.from_frame(part[["subject", "method"]])
    part["threshold"] = limit.reindex(key).to_numpy(dtype=float)
    part["derived"] = False
    count = stats["count"].reindex(key).fillna(0).to_numpy()
    few = count < 2
    if few.any():
        lacking = part.loc[few, ["subject", "method"]].drop_duplicates()
        for subject, method in lacking.itertuples(index=False):
            notes.append(
                _note(
                    definition,
                    method,
                    subject,
                    "remote threshold not estimable: fewer than 2 remote segments; "
                    "segments unclassified",
                )
            )
        warn_not_estimable(
            f"remote threshold of finding {definition.name!r}",
            f"fewer than 2 remote segments for {len(lacking)} subject-method pair(s); their "
            "segments are unclassified",
            stacklevel=4,
        )


def _compared(values: pd.Series, definition: FindingDefinition) -> pd.Series:
    return values.abs() if definition.absolute_value else values


def _positive(compared: pd.Series, threshold: pd.Series, definition: FindingDefinition):
    x, t = compared.to_numpy(dtype=float), threshold.to_numpy(dtype=float)
    with np.errstate(invalid="ignore"):
        if definition.direction == "above":
            hit = x >= t if definition.inclusive else x > t
        else:
            hit = x <= t if definition.inclusive else x < t
    out = pd.array(hit, dtype="boolean")
    out[np.isnan(t)] = pd.NA
    return out


def classify_segments(
    values: pd.DataFrame,
    subjects: pd.DataFrame,
    definition: FindingDefinition,
    notes: list[dict] | None = None,
) -> pd.DataFrame:
    """Segment rows of one finding (columns :data:`SEGMENT_COLUMNS`), all methods.

    ``notes`` (if given) receives the rows of :attr:`FindingsResult.notes`.

    Examples
    --------
    Fat fraction at or above 10 % (common practice):

    >>> from cohort.domain.thresholds import FAT
    >>> values = pd.DataFrame({
    ...     "subject": "a", "method": "ref", "segment": [1, 2], "parameter": "ff",
    ...     "value": [10.0, 3.0], "group": "all", "field_strength": 1.5,
    ...     "segment_name": "", "ring": "", "territory": ""})
    >>> rows = classify_segments(values, pd.DataFrame({"subject": ["a"]}), FAT)
    >>> print(rows[["segment", "threshold", "positive"]].to_string(index=False))
     segment  threshold  positive
           1       10.0      True
           2       10.0     False
    """
    notes = [] if notes is None else notes
    missing = [c for c in _VALUE_COLUMNS if c not in values.columns]
    if missing:
        raise ValueError(f"values must have columns {list(_VALUE_COLUMNS)}; missing {missing}")
    part = values.loc[values["parameter"].eq(definition.parameter), list(_VALUE_COLUMNS)]
    part = part.copy().reset_index(drop=True)
    part["value"] = part["value"].astype(float)
    compared = _compared(part["value"], definition)
    if part.empty:
        text = f"no values of parameter {definition.parameter!r}: finding not evaluated"
        notes.append(_note(definition, "", "", text))
        part["threshold"] = pd.Series(dtype=float)
        part["derived"] = pd.Series(dtype=bool)
    elif definition.kind == "absolute":
        _absolute_thresholds(part, definition)
    else:
        _remote_thresholds(part, compared, subjects, definition, notes)
    part["positive"] = _positive(compared, part["threshold"], definition)
    part["finding"] = definition.name
    return part[list(SEGMENT_COLUMNS)]


def _score(segments: pd.DataFrame, definitions: Mapping[str, FindingDefinition]) -> np.ndarray:
    """Larger = further in the finding's direction (for the extreme value)."""
    score = segments["value"].to_numpy(dtype=float).copy()
    for name, d in definitions.items():
        rows = segments["finding"].eq(name).to_numpy()
        if d.absolute_value:
            score[rows] = np.abs(score[rows])
        if d.direction == "below":
            score[rows] = -score[rows]
    return score


def summarise(
    segments: pd.DataFrame,
    definitions: tuple[FindingDefinition, ...],
    level: Literal["territory", "subject"],
) -> pd.DataFrame:
    """Territory or subject rows from segment rows (columns as :data:`SEGMENT_COLUMNS`).

    Vectorised group-by; used for each method's own segments here and for the segments both
    methods measured in :mod:`cohort.analysis.finding_agreement`.

    Examples
    --------
    >>> from cohort.domain.thresholds import FAT
    >>> values = pd.DataFrame({
    ...     "subject": "a", "method": "ref", "segment": [1, 2, 3], "parameter": "ff",
    ...     "value": [12.0, 3.0, 15.0], "group": "all", "field_strength": 1.5,
    ...     "segment_name": "", "ring": "", "territory": ["LAD", "LAD", "RCA"]})
    >>> rows = classify_segments(values, pd.DataFrame({"subject": ["a"]}), FAT)
    >>> subject = summarise(rows, (FAT,), "subject").iloc[0]
    >>> print(subject["n_positive"], subject["positive_segments"], subject["extreme_value"])
    2 1, 3 15.0
    """
    if level not in ("territory", "subject"):
        raise ValueError(f"level must be 'territory' or 'subject', got {level!r}")
    by_name = {d.name: d for d in definitions}
    keys = [*_AGGREGATE_KEYS, "territory"] if level == "territory" else list(_AGGREGATE_KEYS)
    columns = TERRITORY_COLUMNS if level == "territory" else SUBJECT_COLUMNS
    if segments.empty:
        return pd.DataFrame(columns=list(columns))
    seg = segments.copy()
    seg["_classified"] = seg["positive"].notna().to_numpy()
    seg["_positive"] = seg["positive"].fillna(False).to_numpy(dtype=bool)
    seg["_score"] = _score(seg, by_name)
    grouped = seg.groupby(keys, sort=False, dropna=False)
    out = grouped.agg(
        n_segments=("segment", "size"),
        n_classified=("_classified", "sum"),
        n_positive=("_positive", "sum"),
        threshold=("threshold", "first"),
    )
    top = seg.loc[grouped["_score"].idxmax().to_numpy()].set_index(keys)
    out["extreme_value"] = top["value"].reindex(out.index).to_numpy()
    out["extreme_segment"] = top["segment"].reindex(out.index).to_numpy()
    out = out.reset_index()
    n_cls = out["n_classified"].to_numpy()
    with np.errstate(invalid="ignore", divide="ignore"):
        out["extent_percent"] = np.where(n_cls > 0, 100.0 * out["n_positive"] / n_cls, np.nan)
    if level == "territory":
        need = np.ones(len(out), dtype=int)
    else:
        need = out["finding"].map({n: d.min_segments for n, d in by_name.items()}).to_numpy()
        out["min_segments"] = need
        listed = (
            seg[seg["_positive"]]
            .groupby(keys, sort=False)["segment"]
            .agg(lambda s: ", ".join(str(v) for v in sorted(s)))
        )
        idx = pd.MultiIndex.from_frame(out[keys])
        out["positive_segments"] = listed.reindex(idx).astype(object).fillna("").to_numpy()
    positive = pd.array(out["n_positive"].to_numpy() >= need, dtype="boolean")
    positive[n_cls == 0] = pd.NA
    out["positive"] = positive
    return out[list(columns)]


def evaluate_findings(
    values: pd.DataFrame,
    subjects: pd.DataFrame,
    definitions: tuple[FindingDefinition, ...] | None = None,
) -> FindingsResult:
    """Classify every segment of every method for each finding; summarise by territory, subject.

    Parameters
    ----------
    values : canonical values (:attr:`cohort.io.study.Study.values`).
    subjects : the subjects table (``culprit_territory`` is used by remote thresholds).
    definitions : findings to evaluate; default :data:`cohort.domain.thresholds.DEFAULT_FINDINGS`.

    Remote thresholds are ``mean +/- k SD`` (``ddof=1``) of the method's own remote segments
    per subject; validated against direct numpy computation in the tests.

    Examples
    --------
    Hemorrhage: R2* above 50 1/s at 1.5 T (common practice); two methods, one subject.

    >>> from cohort.domain.thresholds import HEMORRHAGE
    >>> values = pd.DataFrame({
    ...     "subject": "a", "method": ["ref", "ref", "new", "new"], "segment": [1, 2, 1, 2],
    ...     "parameter": "r2star", "value": [80.0, 30.0, 45.0, 31.0], "group": "all",
    ...     "field_strength": 1.5, "segment_name": "", "ring": "", "territory": "LAD"})
    >>> found = evaluate_findings(values, pd.DataFrame({"subject": ["a"]}), (HEMORRHAGE,))
    >>> print(found.subjects[["method", "n_positive", "positive"]].to_string(index=False))
    method  n_positive  positive
       ref           1      True
       new           0     False
    """
    definitions = DEFAULT_FINDINGS if definitions is None else tuple(definitions)
    names = [d.name for d in definitions]
    if len(set(names)) != len(names):
        raise ValueError(f"definitions must have distinct names, got {names}")
    notes: list[dict] = []
    parts = [classify_segments(values, subjects, d, notes) for d in definitions]
    segments = (
        pd.concat(parts, ignore_index=True)
        if parts
        else pd.DataFrame(columns=list(SEGMENT_COLUMNS))
    )
    return FindingsResult(
        definitions=definitions,
        segments=segments,
        territories=summarise(segments, definitions, "territory"),
        subjects=summarise(segments, definitions, "subject"),
        notes=pd.DataFrame(notes, columns=list(NOTE_COLUMNS)),
    )
