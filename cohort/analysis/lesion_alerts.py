"""Alerts for every test method that misses or over-calls lesions, whatever its overall
agreement.

Rules (stated in the methods text exactly as applied here; thresholds from
:mod:`cohort.domain.acceptance`):

- ``missed-lesions``: segment-level sensitivity (stratum ``all``) below the study's criterion
  for the finding (``[acceptance.findings]``), else below
  :data:`~cohort.domain.acceptance.DEFAULT_MIN_SENSITIVITY`;
- ``bias-shift``: the bias in segments the reference calls positive differs markedly from
  the bias in negative ones, by the rule of the deceptive-agreement screen
  (:func:`cohort.analysis.alerts.deceptive_agreement`: the floor per parameter and the
  factor ``bias_ratio``);
- ``over-calling``: positive predictive value below
  :data:`~cohort.domain.acceptance.DEFAULT_MIN_PPV`, judged only with at least
  :data:`MIN_TEST_POSITIVE` segments the method calls positive.

Where the deceptive-agreement screen (high overall CCC) already warns about the same method,
finding and kind, that stronger alert stands alone.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass

import pandas as pd

from cohort.analysis.alerts import DEFAULT_MIN_BIAS_DIFFERENCE, AgreementWarning, bias_shift
from cohort.analysis.verdicts import COLLAPSED, preferred_interval, segment_overall
from cohort.domain.acceptance import DEFAULT_MIN_PPV, Acceptance
from cohort.domain.wording import percent_level

MIN_TEST_POSITIVE = 5
"""Fewest segments a method calls positive before its PPV is judged (a floor of this
package: below it one false positive decides the alert)."""


@dataclass(frozen=True)
class LesionAlert:
    """An alert that a method misses (or over-calls) lesions of one finding."""

    kind: str
    """``"missed-lesions"``, ``"bias-shift"`` or ``"over-calling"``."""
    method: str
    finding: str
    parameter: str
    estimate: float
    criterion: float
    message: str


def _percent(value: float) -> str:
    return f"{100 * value:.0f} %" if math.isfinite(value) else "not estimable"


def _interval_text(row: pd.Series, statistic: str) -> str:
    """``"95 % CI 26 to 55 %; subject cluster bootstrap"`` (or the Wilson interval)."""
    lo, hi, how, _ = preferred_interval(row, statistic, "findings")
    if not (math.isfinite(lo) and math.isfinite(hi)):
        return "no interval could be computed"
    level = percent_level(float(row["confidence_level"])).replace("%", " %")
    method = "Wilson score" if how == COLLAPSED else how.split(",")[0]
    return f"{level} CI {100 * lo:.0f} to {100 * hi:.0f} %, {method}"


def _subjects_missed(segments: pd.DataFrame, reference: str, method: str, finding: str):
    """(subjects with a missed reference-positive segment, subjects with any)."""
    rows = segments[segments["finding"].astype(str).eq(finding)]
    ref = rows[rows["method"].astype(str).eq(reference)]
    test = rows[rows["method"].astype(str).eq(method)]
    keys = ["subject", "segment"]
    both = ref[[*keys, "positive"]].merge(
        test[[*keys, "positive"]], on=keys, suffixes=("_ref", "_test")
    )
    positive = both[both["positive_ref"].astype(bool)]
    missed = positive[~positive["positive_test"].astype(bool)]
    return missed["subject"].nunique(), positive["subject"].nunique()


def missed_lesion_alerts(
    detection: pd.DataFrame,
    segments: pd.DataFrame,
    acceptance: Acceptance,
    *,
    reference: str,
    methods: Sequence[str],
    label: Callable[[str], str] = str,
    finding_labels: Mapping[str, str] | None = None,
) -> list[LesionAlert]:
    """``missed-lesions`` and ``over-calling`` alerts of every test method (rules: module
    docstring), in the order of ``methods`` then findings.

    ``detection`` is the ``findings_agreement`` table, ``segments`` the segment findings
    (``findings_segment``); ``label`` gives a method's display label. Checked by hand on a
    planted cohort with a method that misses most lesions (tests).

    Examples
    --------
    >>> detection = pd.DataFrame({"finding": "hemorrhage", "parameter": "r2star",
    ...     "method": "fast", "level": "segment", "stratum": "all", "tp": 3, "fp": 0,
    ...     "fn": 7, "sensitivity": 0.3, "sensitivity_ci_low": 0.1,
    ...     "sensitivity_ci_high": 0.6, "ppv": 1.0, "confidence_level": 0.95}, index=[0])
    >>> segments = pd.DataFrame({"finding": "hemorrhage", "method": ["ref", "fast"],
    ...     "subject": "s1", "segment": 1, "positive": [True, False]})
    >>> alert, = missed_lesion_alerts(detection, segments, Acceptance(), reference="ref",
    ...                               methods=["fast"])
    >>> print(alert.message)  # doctest: +ELLIPSIS
    Missed lesions: fast shows 3 of 10 segments that the reference shows as positive for
    hemorrhage (30 %, 95 % CI 10 to 60 %, Wilson score), below the 80 % it should reach; it
    misses at least one in 1 of 1 subjects with such segments
    """
    names = dict(finding_labels or {})
    rows = segment_overall(detection)
    out: list[LesionAlert] = []
    for method in methods:
        for _, row in rows[rows["method"].astype(str).eq(method)].iterrows():
            finding = str(row["finding"])
            what = names.get(finding, finding)
            out += _missed(row, method, finding, what, acceptance, segments, reference, label)
            out += _over_called(row, method, finding, what, label)
    return out


def _missed(row, method, finding, what, acceptance, segments, reference, label):
    sens, criterion = float(row["sensitivity"]), acceptance.min_sensitivity(finding)
    if not (math.isfinite(sens) and sens < criterion):
        return []
    message = "Missed lesions: " + shown_text(
        row, label(method), what, criterion, segments, reference, method
    )
    return [
        LesionAlert("missed-lesions", method, finding, str(row["parameter"]), sens, criterion,
                    message)
    ]  # fmt: skip


def shown_text(
    row: pd.Series,
    shown: str,
    what: str,
    criterion: float,
    segments: pd.DataFrame,
    reference: str,
    method: str,
) -> str:
    """``"<shown> shows 5 of 49 segments that the reference shows as positive for <what>
    (10 %, 95 % CI ...), below the 80 % it should reach; it misses at least one in 15 of 16
    subjects with such segments"``: the words of a missed-lesion alert."""
    sens, tp, fn = float(row["sensitivity"]), int(row["tp"]), int(row["fn"])
    with_missed, with_any = _subjects_missed(segments, reference, method, str(row["finding"]))
    return (
        f"{shown} shows {tp} of {tp + fn} segments that the reference shows as positive for "
        f"{what} ({_percent(sens)}, {_interval_text(row, 'sensitivity')}), below the "
        f"{_percent(criterion)} it should reach; it misses at least one in {with_missed} of "
        f"{with_any} subjects with such segments"
    )


def _over_called(row, method, finding, what, label):
    ppv, tp, fp = float(row["ppv"]), int(row["tp"]), int(row["fp"])
    if not (math.isfinite(ppv) and ppv < DEFAULT_MIN_PPV and tp + fp >= MIN_TEST_POSITIVE):
        return []
    message = (
        f"Over-calling: {label(method)} calls {tp + fp} segments positive for {what}, of which the "
        f"reference shows {tp} ({_percent(ppv)} positive predictive value, "
        f"{_interval_text(row, 'ppv')}): {fp} segments are called positive that the "
        "reference shows as negative"
    )
    return [
        LesionAlert("over-calling", method, finding, str(row["parameter"]), ppv,
                    DEFAULT_MIN_PPV, message)
    ]  # fmt: skip


def bias_shift_alerts(
    agreement: pd.DataFrame,
    detection: pd.DataFrame,
    *,
    methods: Sequence[str],
    bias_ratio: float,
    label: Callable[[str], str] = str,
    finding_labels: Mapping[str, str] | None = None,
    min_bias_difference: Mapping[str, float] | None = None,
) -> list[LesionAlert]:
    """``bias-shift`` alerts of every test method whatever its CCC: the rule of
    :func:`cohort.analysis.alerts.deceptive_agreement` without its CCC condition.

    Examples
    --------
    >>> agreement = pd.DataFrame({"parameter": "r2star", "method": "fast",
    ...     "stratum": ["finding=hemorrhage:positive", "finding=hemorrhage:negative"],
    ...     "bias": [-12.0, 0.5]})
    >>> detection = pd.DataFrame({"finding": ["hemorrhage"], "parameter": "r2star",
    ...     "method": "fast", "level": "segment", "stratum": "all"})
    >>> [a.kind for a in bias_shift_alerts(agreement, detection, methods=["fast"],
    ...                                    bias_ratio=2.0)]
    ['bias-shift']
    """
    names = dict(finding_labels or {})
    floor = {**DEFAULT_MIN_BIAS_DIFFERENCE, **(min_bias_difference or {})}
    bias = agreement.set_index(["parameter", "method", "stratum"])["bias"]
    bias.index = bias.index.map(lambda k: tuple(str(x) for x in k))
    rows = segment_overall(detection)
    out: list[LesionAlert] = []
    for method in methods:
        for row in rows[rows["method"].astype(str).eq(method)].itertuples(index=False):
            p, f = str(row.parameter), str(row.finding)
            b_pos = float(bias.get((p, method, f"finding={f}:positive"), math.nan))
            b_neg = float(bias.get((p, method, f"finding={f}:negative"), math.nan))
            if not (math.isfinite(b_pos) and math.isfinite(b_neg)):
                continue
            shift, limit = bias_shift(p, b_pos, b_neg, bias_ratio, floor)
            if shift < limit:
                continue
            message = (
                f"Bias shift in lesions: {label(method)}, {p}: in segments the reference shows "
                "as positive for "
                f"{names.get(f, f)} the bias is {b_pos:.3g}, against {b_neg:.3g} in the "
                f"other segments (a shift of {shift:.3g}, at least {limit:.3g}): the "
                "method reads lesions differently from healthy myocardium"
            )
            out.append(LesionAlert("bias-shift", method, f, p, shift, limit, message))
    return out


def without_stronger(
    alerts: list[LesionAlert], deceptive: Sequence[AgreementWarning]
) -> list[LesionAlert]:
    """``alerts`` less those the deceptive-agreement screen already gives in its stronger
    form (same method, finding and kind: low sensitivity or bias shift)."""
    kinds = {"low-sensitivity": "missed-lesions", "bias-shift": "bias-shift"}
    stronger = {(w.method, w.finding, kinds[w.kind]) for w in deceptive}
    return [a for a in alerts if (a.method, a.finding, a.kind) not in stronger]
