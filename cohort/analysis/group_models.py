"""Segment-level models of groups: the ``group_models`` table.

Questions about segments use models with a random intercept per subject (linear mixed
model) or GEE clustered by subject (:mod:`cohort.stats.models` fits them); above a
documented size the linear models switch to the equivalent subject-level analysis (see
:data:`~cohort.stats.models.MIXED_MODEL_MAX_OBSERVATIONS`). Three questions, one table
(columns :data:`MODEL_COLUMNS`):

- :func:`group_models`: do segment values differ between groups?
- :func:`method_group_interaction`: does the difference between methods depend on the group?
- :func:`finding_models`: does the chance of a segment finding differ between groups?

Families: the group terms of one fit; the joint group tests over every parameter x method
(method x finding for GEE); both corrected by ``correction`` (Holm by default).
"""

from __future__ import annotations

from collections.abc import Callable, Sequence

import numpy as np
import pandas as pd

from cohort.analysis.group_tables import (
    GROUP_TERMS,
    JOINT_TESTS,
    Family,
    adjust_by_family,
    blank_row,
    join_notes,
    one_warning_per_reason,
    ordered_groups,
    positive_flags,
    require_columns,
)
from cohort.domain.units import PARAMETERS
from cohort.io.method_order import levels
from cohort.parallel import map_shared
from cohort.stats.group_samples import check_confidence_level
from cohort.stats.models import (
    JOINT_GROUP,
    MIXED_MODEL_MAX_OBSERVATIONS,
    choose_model_path,
    fit_group_model,
)
from cohort.stats.multiplicity import HOLM, check_correction

GROUP_DIFFERENCE = "group difference"
FINDING_BY_GROUP = "finding by group"
METHOD_BY_GROUP = "method x group interaction (test - reference)"

MODEL_COLUMNS: tuple[str, ...] = (
    "parameter", "method", "finding", "model", "path", "term", "estimate", "estimate_name",
    "std_error", "ci_low", "ci_high", "ci_method", "statistic", "statistic_name", "df",
    "df_denominator", "p_value", "p_adjusted", "correction", "family", "confidence_level",
    "n_subjects", "n_observations", "note",
)  # fmt: skip
"""Columns of the segment-level model table (mixed model, GEE, method x group)."""

_MODEL_TEXT = (
    "parameter", "method", "finding", "model", "path", "term", "estimate_name", "ci_method",
    "statistic_name", "correction", "family", "note",
)  # fmt: skip


def _model_row(**cells: object) -> dict[str, object]:
    """A model row: NaN numbers, empty texts, then ``cells``."""
    return blank_row(MODEL_COLUMNS, _MODEL_TEXT, **cells)


def subject_info(
    subjects: pd.DataFrame | None, covariates: Sequence[str], frame: pd.DataFrame
) -> pd.DataFrame:
    """Group and covariates per subject, indexed by subject (covariates from ``subjects``;
    without ``subjects``, the groups of ``frame``).

    Examples
    --------
    >>> frame = pd.DataFrame({"subject": ["s1", "s1", "s2"], "group": ["a", "a", "b"]})
    >>> subject_info(None, (), frame)["group"].to_dict()
    {'s1': 'a', 's2': 'b'}
    """
    if covariates and subjects is None:
        raise ValueError("subjects must be given when covariates are requested")
    if subjects is not None:
        subjects = require_columns(subjects, "subjects", ("subject", "group", *covariates))
        info = subjects[["subject", "group", *covariates]].astype({"subject": str, "group": str})
        return info.drop_duplicates("subject").set_index("subject")
    info = frame[["subject", "group"]].astype(str).drop_duplicates("subject")
    return info.set_index("subject")


def _fit_rows(frame, y, info, order, covariates, kind, key, level, estimate_name):
    """One fit (kind "mixed", "subject-means" or "gee"): term rows and the joint row."""
    cell = tuple(str(key[c]) for c in ("parameter", "method", "finding") if key.get(c))
    what = f"{key['model']} ({', '.join(cell)})"
    fit = fit_group_model(kind, y, frame["subject"], info, order, covariates, what=what)
    base = {**key, "path": fit.path, "confidence_level": level}
    counts = {"n_subjects": fit.n_subjects, "n_observations": fit.n_observations}
    if not fit.estimable:
        return [_model_row(**base, **counts, term=JOINT_GROUP, note=fit.note)]
    reference = fit.groups[0]
    terms = Family(GROUP_TERMS, key["model"], cell, reference=reference)
    rows = []
    for cells in fit.term_tests(level):
        if cells["term"].startswith("group["):
            extra = {"estimate_name": f"{estimate_name} vs {reference}", "family": terms}
        else:
            per = "per unit" if cells["term"] in covariates else "vs first level"
            extra = {
                "estimate_name": f"{estimate_name} {per}",
                "correction": "none (covariate, not a group comparison)",
            }
        rows.append(_model_row(**base, **cells, **counts, **extra))
    across = ("method", "finding") if kind == "gee" else ("parameter", "method")
    rows.append(_model_row(
        **base, **fit.joint_group_test(), **counts, term=JOINT_GROUP,
        estimate_name=f"joint test of {len(fit.group_terms())} group terms",
        family=Family(JOINT_TESTS, key["model"], across=across), note=fit.note,
    ))  # fmt: skip
    return rows


def _finish_models(rows: list[dict[str, object]], correction: str) -> pd.DataFrame:
    return adjust_by_family(pd.DataFrame(rows, columns=list(MODEL_COLUMNS)), correction)


def largest_fit(frame: pd.DataFrame, keys: Sequence[str]) -> int:
    """The number of rows of the largest fit (one fit per level of ``keys``)."""
    return int(frame.groupby(list(keys)).size().max()) if len(frame) else 0


def _cells(frame: pd.DataFrame, columns: Sequence[str]) -> list[tuple]:
    keys = frame[list(columns)].drop_duplicates()
    rank = {p: i for i, p in enumerate(PARAMETERS)}
    if "method" in frame.columns:  # the study's method order
        rank |= {m: i for i, m in enumerate(levels(frame["method"]))}
    return sorted(
        (tuple(k) for k in keys.itertuples(index=False)),
        key=lambda k: tuple((rank.get(v, len(rank)), str(v)) for v in k),
    )


def linear_models(
    frame: pd.DataFrame,
    outcome: Callable[[pd.DataFrame], np.ndarray],
    model: str,
    subjects: pd.DataFrame | None,
    order: Sequence[str],
    covariates: Sequence[str],
    kind: str,
    why: str,
    correction: str,
    level: float,
) -> pd.DataFrame:
    """One linear fit per parameter and method of ``frame``; ``outcome(part)`` gives y.

    ``kind`` is the path (``"mixed"`` or ``"subject-means"``) and ``why`` the reason it was
    chosen (added to each joint row's note). The rows of :func:`group_models`.
    """
    info = subject_info(subjects, covariates, frame)
    rows: list[dict[str, object]] = []
    with one_warning_per_reason():
        for parameter, method in _cells(frame, ("parameter", "method")):
            part = frame[frame["parameter"].eq(parameter) & frame["method"].eq(method)]
            unit = PARAMETERS[parameter].unit if parameter in PARAMETERS else ""
            name = "difference in mean" + (" test - reference" if model == METHOD_BY_GROUP else "")
            key = {"parameter": parameter, "method": method, "model": model}
            rows += _fit_rows(
                part, outcome(part), info, order, covariates, kind, key, level,
                f"{name} ({unit})" if unit else name,
            )  # fmt: skip
    table = _finish_models(rows, correction)
    joint = table["term"].eq(JOINT_GROUP)
    table.loc[joint, "note"] = [join_notes(n, why) for n in table.loc[joint, "note"]]
    return table


def segment_values(part: pd.DataFrame) -> np.ndarray:
    """The outcome of :func:`group_models`: the segment values."""
    return part["value"].to_numpy(dtype=float)


def method_differences(part: pd.DataFrame) -> np.ndarray:
    """The outcome of :func:`method_group_interaction`: test minus reference per segment."""
    return part["test_value"].to_numpy(dtype=float) - part["reference_value"].to_numpy(dtype=float)


def group_models(
    values: pd.DataFrame,
    subjects: pd.DataFrame,
    group_order: Sequence[str] | None = None,
    *,
    covariates: Sequence[str] = (),
    path: str = "auto",
    max_mixed_observations: int = MIXED_MODEL_MAX_OBSERVATIONS,
    correction: str = HOLM,
    confidence_level: float = 0.95,
) -> pd.DataFrame:
    """Segment values by group: ``value ~ C(group) [+ covariates] + (1 | subject)``, REML.

    One statsmodels ``MixedLM`` fit per parameter and method (Wald z tests and intervals),
    or, on the large-cohort path, OLS of the subject means on the same subject-level design
    (t tests, F for the joint test); :func:`~cohort.stats.models.choose_model_path`
    decides, and the ``path`` column and the joint row's note say which ran and why. Rows:
    each group term (difference from the first group), each covariate term, and the joint
    Wald test of the group terms. Families: the group terms of one fit; the joint tests
    over every parameter x method. Validated against a direct
    ``statsmodels.formula.api.mixedlm`` fit and, for the large path, against the mixed
    model on a balanced design.

    Examples
    --------
    >>> values = pd.DataFrame({"subject": list("uuvvwwxxyyzz"), "method": "m",
    ...     "parameter": "ff", "value": [1.0, 1.2, 2.0, 2.2, 1.5, 1.9, 3.1, 2.9, 2.5, 2.8,
    ...     3.6, 3.2]})
    >>> subjects = pd.DataFrame({"subject": list("uvwxyz"), "group": list("aaabbb")})
    >>> table = group_models(values, subjects, path="subject-means")
    >>> for row in table.itertuples():
    ...     print(f"{row.term}: {row.statistic_name} = {row.statistic:.2f}, p = {row.p_value:.3f}")
    group[b]: t = 3.82, p = 0.019
    joint: group: F = 14.56, p = 0.019
    """
    values = require_columns(values, "values", ("subject", "method", "parameter", "value"))
    return _checked_linear_models(
        values, segment_values, GROUP_DIFFERENCE, subjects, group_order, covariates, path,
        max_mixed_observations, correction, confidence_level,
    )  # fmt: skip


def method_group_interaction(
    paired: pd.DataFrame,
    subjects: pd.DataFrame | None = None,
    group_order: Sequence[str] | None = None,
    *,
    covariates: Sequence[str] = (),
    path: str = "auto",
    max_mixed_observations: int = MIXED_MODEL_MAX_OBSERVATIONS,
    correction: str = HOLM,
    confidence_level: float = 0.95,
) -> pd.DataFrame:
    """Does the difference between methods depend on the group?

    Per parameter and test method: ``(test - reference) ~ C(group) [+ covariates] +
    (1 | subject)`` on the segments of :attr:`Study.paired` (REML), or OLS of the subject
    mean differences on the large-cohort path; the joint Wald test of the group terms
    answers the question (a method x group interaction). Paths and families as in
    :func:`group_models`. Validated against a direct statsmodels ``mixedlm`` fit.

    Examples
    --------
    >>> paired = pd.DataFrame({"parameter": "ff", "method": "m", "subject": list("uuvvwwxxyyzz"),
    ...     "group": list("aaaaaabbbbbb"), "reference_value": 1.0,
    ...     "test_value": [1.0, 1.2, 1.1, 0.9, 1.0, 1.1, 2.0, 1.8, 1.6, 1.9, 2.1, 1.7]})
    >>> table = method_group_interaction(paired, path="subject-means")
    >>> joint = table[table["term"].eq("joint: group")].iloc[0]
    >>> print(f"F = {joint['statistic']:.1f}, p = {joint['p_value']:.4f}")
    F = 192.0, p = 0.0002
    """
    columns = ("parameter", "method", "subject", "group", "reference_value", "test_value")
    paired = require_columns(paired, "paired", columns)
    return _checked_linear_models(
        paired, method_differences, METHOD_BY_GROUP, subjects, group_order, covariates, path,
        max_mixed_observations, correction, confidence_level,
    )  # fmt: skip


def _checked_linear_models(
    frame, response, label, subjects, group_order, covariates, path, max_mixed, correction, level
) -> pd.DataFrame:
    """The options checked, the group order and model path chosen, then :func:`linear_models`
    (what :func:`group_models` and :func:`method_group_interaction` share)."""
    correction = check_correction(correction)
    check_confidence_level(level)
    info = subject_info(subjects, covariates, frame)
    order = ordered_groups(info["group"], group_order, "subjects")
    kind, why = choose_model_path(largest_fit(frame, ["parameter", "method"]), path, max_mixed)
    return linear_models(
        frame, response, label, subjects, order, covariates, kind, why, correction, level
    )


def finding_models(
    segment_findings: pd.DataFrame,
    subjects: pd.DataFrame | None = None,
    group_order: Sequence[str] | None = None,
    *,
    covariates: Sequence[str] = (),
    correction: str = HOLM,
    confidence_level: float = 0.95,
    workers: int = 1,
) -> pd.DataFrame:
    """Segment findings by group: GEE logistic ``positive ~ C(group) [+ covariates]``.

    ``segment_findings`` has one row per subject, method, finding and segment (``subject,
    group, method, finding, segment, positive``). Exchangeable working correlation within
    subject, robust (sandwich) standard errors (Liang KY, Zeger SL. Longitudinal data
    analysis using generalized linear models. Biometrika 1986;73:13-22). Estimates are log
    odds ratios against the first group. Not estimable, with the reason, under separation
    (a group whose segments all have the same outcome: log odds ratios infinite); the
    subject-level Fisher tests of
    :func:`~cohort.analysis.finding_proportions.compare_proportions` still answer then.
    Validated against a direct ``statsmodels.formula.api.gee`` fit. The fits (one per
    method and finding) run in ``workers`` processes (:func:`cohort.parallel.map_shared`),
    with the same results.

    Examples
    --------
    >>> import warnings
    >>> findings = pd.DataFrame({"subject": np.repeat(list("uvwxyz"), 3),
    ...     "group": np.repeat(list("aaabbb"), 3), "method": "m", "finding": "f",
    ...     "segment": [1, 2, 3] * 6,
    ...     "positive": [0, 0, 0, 0, 1, 0, 0, 0, 0, 1, 1, 0, 0, 1, 1, 1, 1, 0]})
    >>> with warnings.catch_warnings():
    ...     warnings.simplefilter("ignore")  # statsmodels on 18 segments
    ...     table = finding_models(findings)
    >>> row = table.iloc[0]
    >>> print(f"{row['term']}: log OR {row['estimate']:.2f}, p = {row['p_value']:.3f}")
    group[b]: log OR 2.77, p = 0.003
    """
    segment_findings = require_columns(
        segment_findings,
        "segment_findings",
        ("subject", "group", "method", "finding", "segment", "positive"),
    )
    correction = check_correction(correction)
    check_confidence_level(confidence_level)
    data, n_missing = positive_flags(segment_findings, "segment_findings")
    info = subject_info(subjects, covariates, data)
    order = ordered_groups(info["group"], group_order, "subjects")
    cells = list(_cells(data, ("method", "finding")))
    shared = (data, cells, info, order, tuple(covariates), confidence_level)
    with one_warning_per_reason():
        fits = map_shared(_finding_fit, shared, len(cells), workers)
    table = _finish_models([row for rows in fits for row in rows], correction)
    if n_missing:
        left_out = f"{n_missing} rows without a positive flag left out"
        table["note"] = [join_notes(n, left_out) for n in table["note"]]
    return table


def _finding_fit(shared, index: int) -> list[dict[str, object]]:
    """The GEE rows of one (method, finding) of :func:`finding_models`."""
    data, cells, info, order, covariates, confidence_level = shared
    method, finding = cells[index]
    part = data[data["method"].eq(method) & data["finding"].eq(finding)]
    key = {"method": method, "finding": finding, "model": FINDING_BY_GROUP}
    y = part["positive"].to_numpy(dtype=float)
    return _fit_rows(
        part, y, info, order, covariates, "gee", key, confidence_level, "log odds ratio"
    )
