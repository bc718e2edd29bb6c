"""Verdicts of each test method against the acceptance criteria set in advance.

One row per test method, target (a parameter code or a finding name) and statistic: the
estimate and its interval from the report's own tables (``agreement``, stratum ``all``;
``findings_agreement``, segment level, stratum ``all``), the criterion and the verdict
(:func:`cohort.domain.acceptance.verdict`; rules in
:data:`cohort.domain.acceptance.VERDICT_RULES`). The intervals are those the tables report
first: the subject cluster bootstrap where it ran, else the analytic interval (limits of
agreement, CCC) or the Wilson interval (sensitivity), as ``ci_method`` says per row.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import pandas as pd

from cohort.domain.acceptance import NOT_ASSESSED, STATISTICS, Acceptance, verdict
from cohort.domain.units import PARAMETERS

VERDICT_COLUMNS = (
    "method", "target", "kind", "statistic", "estimate", "ci_low", "ci_high", "criterion",
    "verdict", "unit", "confidence_level", "ci_method", "rule", "note",
)  # fmt: skip
"""Columns of the ``method_verdicts`` table, in order."""

_RULE = {
    "loa_low": "lower limit of agreement >= -{L}: meets if its lower confidence bound >= -{L}",
    "loa_high": "upper limit of agreement <= {L}: meets if its upper confidence bound <= {L}",
    "ccc": "CCC >= {L}: meets if its lower confidence bound >= {L}",
    "sensitivity": "sensitivity >= {L}: meets if its lower confidence bound >= {L}",
}


def rule_text(statistic: str, criterion: float) -> str:
    """The rule applied to ``statistic`` in words, e.g. for the methods text and tables.

    Examples
    --------
    >>> rule_text("loa_high", 3.0)
    'upper limit of agreement <= 3: meets if its upper confidence bound <= 3'
    """
    return _RULE[statistic].format(L=f"{abs(criterion):g}")


def _interval(row: pd.Series, name: str, cluster: str) -> tuple[float, float, str]:
    lo, hi, how, _ = preferred_interval(row, name, cluster)
    return lo, hi, how


COLLAPSED = (
    "the subject cluster bootstrap interval has zero width (every resample gives the same "
    "proportion), so the Wilson score interval, units treated as independent, is used"
)


def preferred_interval(row: pd.Series, name: str, cluster: str) -> tuple[float, float, str, bool]:
    """The interval the verdicts, the overview and the alerts use for ``name``: the first
    finite one of :func:`cluster_columns` (the subject cluster bootstrap, else the analytic
    or Wilson interval), how it was obtained, and whether it is the first. A cluster
    bootstrap interval of a proportion with zero width (a proportion of 0 or 1 in every
    resample) is skipped for the Wilson interval: it would claim certainty.

    Examples
    --------
    >>> row = pd.Series({"sensitivity_cluster_ci_low": 1.0, "sensitivity_cluster_ci_high": 1.0,
    ...                  "sensitivity_ci_low": 0.57, "sensitivity_ci_high": 1.0})
    >>> preferred_interval(row, "sensitivity", "findings")[:2]
    (0.57, 1.0)
    """
    for k, (low, high, how) in enumerate(cluster_columns(name, cluster)):
        lo, hi = float(row.get(low, math.nan)), float(row.get(high, math.nan))
        if not (math.isfinite(lo) and math.isfinite(hi)):
            continue
        if cluster == "findings" and k == 0 and lo == hi:
            continue
        text = str(row.get(how, "")) if how in row.index else how
        if (
            cluster == "findings"
            and k == 1
            and math.isfinite(float(row.get(f"{name}_cluster_ci_low", math.nan)))
        ):
            text = COLLAPSED
        return lo, hi, text, k == 0
    return math.nan, math.nan, "no interval could be computed", True


def cluster_columns(name: str, cluster: str) -> list[tuple[str, str, str]]:
    """The interval columns of ``name`` in the order they are preferred."""
    if cluster == "agreement":
        return [
            (f"{name}_ci_low", f"{name}_ci_high", "ci_method"),
            (f"{name}_analytic_ci_low", f"{name}_analytic_ci_high", "analytic interval"),
        ]
    return [
        (f"{name}_cluster_ci_low", f"{name}_cluster_ci_high", "cluster_ci_method"),
        (f"{name}_ci_low", f"{name}_ci_high", "Wilson score, units treated as independent"),
    ]


def _row(method, target, kind, statistic, estimate, interval, criterion, unit, level, note=""):
    low, high, how = interval
    if criterion is None:
        judged, rule, crit = NOT_ASSESSED, "", math.nan
    else:
        upper = statistic == "loa_high"
        judged = verdict(estimate, low, high, criterion, upper=upper)
        rule, crit = rule_text(statistic, criterion), criterion
    if not math.isfinite(estimate):
        note = note or f"{STATISTICS[statistic]} not estimable"
    return {
        "method": method, "target": target, "kind": kind, "statistic": statistic,
        "estimate": estimate, "ci_low": low, "ci_high": high, "criterion": crit,
        "verdict": judged, "unit": unit, "confidence_level": level, "ci_method": how,
        "rule": rule, "note": note,
    }  # fmt: skip


def _parameter_rows(agreement: pd.DataFrame, acceptance: Acceptance, methods: Sequence[str]):
    rows = []
    overall = agreement[agreement["stratum"].astype(str).eq("all")]
    for method in methods:
        for parameter in PARAMETERS:
            found = overall[
                overall["method"].astype(str).eq(method)
                & overall["parameter"].astype(str).eq(parameter)
            ]
            if found.empty:
                continue
            row = found.iloc[0]
            unit, level = PARAMETERS[parameter].unit, float(row["confidence_level"])
            limit = acceptance.limits.get(parameter)
            for statistic, sign in (("loa_low", -1.0), ("loa_high", 1.0)):
                rows.append(
                    _row(method, parameter, "parameter", statistic, float(row[statistic]),
                         _interval(row, statistic, "agreement"),
                         None if limit is None else sign * limit, unit, level)
                )  # fmt: skip
            rows.append(
                _row(method, parameter, "parameter", "ccc", float(row["ccc"]),
                     _interval(row, "ccc", "agreement"), acceptance.ccc.get(parameter), "",
                     level)
            )  # fmt: skip
    return rows


def segment_overall(detection: pd.DataFrame, method: str | None = None) -> pd.DataFrame:
    """The rows of a ``findings_agreement`` table that verdicts, alerts and the overview
    read: segment level over the whole cohort (stratum ``all``), of one method if given."""
    keep = detection["level"].eq("segment") & detection["stratum"].eq("all")
    if method is not None:
        keep &= detection["method"].astype(str).eq(method)
    return detection[keep]


def _finding_rows(detection: pd.DataFrame, acceptance: Acceptance, methods: Sequence[str]):
    rows = []
    overall = segment_overall(detection)
    for method in methods:
        for row in overall[overall["method"].astype(str).eq(method)].itertuples(index=False):
            series = pd.Series(row._asdict())
            criterion = acceptance.findings.get(str(row.finding))
            rows.append(
                _row(method, str(row.finding), "finding", "sensitivity", float(row.sensitivity),
                     _interval(series, "sensitivity", "findings"), criterion, "",
                     float(row.confidence_level), "")
            )  # fmt: skip
    return rows


def method_verdicts(
    agreement: pd.DataFrame,
    detection: pd.DataFrame,
    acceptance: Acceptance,
    methods: Sequence[str],
) -> pd.DataFrame:
    """The verdict of every test method on every declared criterion (and the limits and
    sensitivities without a criterion, as ``not-assessed``).

    ``agreement`` is the agreement table, ``detection`` the ``findings_agreement`` table,
    ``methods`` the test methods in the study's order. Verdict rules: Bland & Altman, Stat
    Methods Med Res 1999 (limits against a difference set in advance); the confidence bounds
    of the limits against the criterion as Stöckl et al., Clin Chem 2004 propose (memory).
    Checked by hand on planted cohorts in the tests.

    Examples
    --------
    >>> agreement = pd.DataFrame({"parameter": "ff", "method": "fast", "stratum": "all",
    ...     "loa_low": -1.5, "loa_low_ci_low": -1.9, "loa_low_ci_high": -1.2,
    ...     "loa_high": 2.5, "loa_high_ci_low": 2.2, "loa_high_ci_high": 3.4, "ccc": 0.95,
    ...     "confidence_level": 0.95, "ci_method": "bootstrap"}, index=[0])
    >>> detection = pd.DataFrame(columns=["finding", "method", "level", "stratum"])
    >>> table = method_verdicts(agreement, detection, Acceptance(limits={"ff": 3.0}), ["fast"])
    >>> table[["statistic", "criterion", "verdict"]].values.tolist()
    [['loa_low', -3.0, 'meets'], ['loa_high', 3.0, 'inconclusive'], ['ccc', nan, 'not-assessed']]
    """
    rows = _parameter_rows(agreement, acceptance, methods)
    rows += _finding_rows(detection, acceptance, methods)
    return pd.DataFrame(rows, columns=list(VERDICT_COLUMNS))


def overall_verdict(verdicts: pd.DataFrame, method: str) -> str:
    """One word for a method over its assessed criteria: ``fails`` if any fails, else
    ``inconclusive`` if any is, else ``meets`` (``not-assessed`` without criteria).

    Examples
    --------
    >>> t = pd.DataFrame({"method": ["a", "a"], "verdict": ["meets", "inconclusive"]})
    >>> overall_verdict(t, "a")
    'inconclusive'
    """
    words = set(verdicts.loc[verdicts["method"].astype(str).eq(method), "verdict"])
    words.discard(NOT_ASSESSED)
    for word in ("fails", "inconclusive", "meets"):
        if word in words:
            return word
    return NOT_ASSESSED
