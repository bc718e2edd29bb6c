"""Alerts: where the overall picture of agreement hides a problem a reader should see first.

The deceptive-agreement alert: a test method agrees well with the reference over all
segments (high Lin's CCC) yet misses a finding (low sensitivity) or is biased differently in
the segments the reference calls positive. Its thresholds default to the ``[analysis]``
options of the study file (:class:`cohort.domain.options.RunOptions`: ``ccc_min``,
``sensitivity_max``, ``bias_ratio``) and are checked with the same rules
(:data:`cohort.domain.options.ANALYSIS_RULES`).
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from typing import Any

import pandas as pd

from cohort.domain.options import ANALYSIS_RULES, RunOptions
from cohort.domain.thresholds import FAT, FIELD_PERTURBATION, HEMORRHAGE
from cohort.stats.results import CohortWarning


class DeceptiveAgreementWarning(CohortWarning):
    """Overall agreement looks good but the finding-level picture does not."""


DEFAULT_MIN_BIAS_DIFFERENCE: Mapping[str, float] = {
    "r2star": HEMORRHAGE.threshold_at(1.5).value / 10.0,
    "ff": FAT.threshold_at(1.5).value / 10.0,
    "field": FIELD_PERTURBATION.threshold_at(1.5).value / 10.0,
}
"""Smallest bias shift (canonical units) counted as marked: one tenth of the default
threshold at 1.5 T (5 1/s, 1 pp, 3 Hz). A convention of this package, configurable."""

_AGREEMENT_NEEDS = ("parameter", "method", "stratum", "ccc", "bias")
_DETECTION_NEEDS = ("finding", "parameter", "method", "level", "stratum", "sensitivity")


@dataclass(frozen=True)
class AgreementWarning:
    """A warning that overall agreement hides a finding-level problem."""

    kind: str
    """``"low-sensitivity"`` or ``"bias-shift"``."""
    parameter: str
    method: str
    finding: str
    ccc: float
    sensitivity: float
    bias_positive: float
    bias_negative: float
    message: str


@dataclass(frozen=True)
class _Rule:
    """The thresholds of one screen (see :func:`deceptive_agreement`)."""

    ccc_min: float
    sensitivity_max: float
    bias_ratio: float
    floor: Mapping[str, float]
    level: str
    label: Callable[[str], str] = str


def _check(agreement_rows: pd.DataFrame, detection: pd.DataFrame, **options: float) -> None:
    for name, value in options.items():
        rule = ANALYSIS_RULES[name]
        if not rule.accepts(value):
            raise ValueError(f"{name} must be {rule.expected}, got {value!r}")
    for what, frame, need in (
        ("agreement_rows", agreement_rows, _AGREEMENT_NEEDS),
        ("detection", detection, _DETECTION_NEEDS),
    ):
        missing = sorted(set(need) - set(frame.columns))
        if missing:
            raise ValueError(f"{what} must have columns {sorted(need)}; missing {missing}")


def _low_sensitivity(
    row: Any, ccc: float, biases: tuple[float, float], rule: _Rule
) -> list[AgreementWarning]:
    p, m, f, sens = row.parameter, row.method, row.finding, float(row.sensitivity)
    if not (math.isfinite(sens) and sens < rule.sensitivity_max):
        return []
    counts = ""
    if hasattr(row, "tp") and hasattr(row, "fn"):
        counts = f"{int(row.tp)} of {int(row.tp) + int(row.fn)} {rule.level}s, "
    message = (
        f"Deceptive agreement: {rule.label(m)} agrees well with the reference on {p} overall "
        f"(CCC {ccc:.3f}, at least {rule.ccc_min:g}) but shows only {counts}"
        f"{100 * sens:.0f} % (sensitivity {sens:.3f}, below {rule.sensitivity_max:g}) of the "
        f"{rule.level}s that the reference shows as positive for {f!r}; see "
        "tables/missed_findings.csv"
    )
    return [AgreementWarning("low-sensitivity", p, m, f, ccc, sens, *biases, message)]


def bias_shift(
    parameter: str, b_pos: float, b_neg: float, bias_ratio: float, floor: Mapping[str, float]
) -> tuple[float, float]:
    """The shift ``|b_pos - b_neg|`` and the least shift counted as marked,
    ``max(floor[parameter], (bias_ratio - 1) |b_neg|)`` (see :func:`deceptive_agreement`).

    Examples
    --------
    >>> bias_shift("r2star", -8.0, 0.5, 2.0, DEFAULT_MIN_BIAS_DIFFERENCE)
    (8.5, 5.0)
    """
    return abs(b_pos - b_neg), max(floor.get(parameter, 0.0), (bias_ratio - 1.0) * abs(b_neg))


def _bias_shift(
    row: Any, ccc: float, biases: tuple[float, float], rule: _Rule
) -> list[AgreementWarning]:
    p, m, f, sens = row.parameter, row.method, row.finding, float(row.sensitivity)
    b_pos, b_neg = biases
    if not (math.isfinite(b_pos) and math.isfinite(b_neg)):
        return []
    shift, limit = bias_shift(p, b_pos, b_neg, rule.bias_ratio, rule.floor)
    if shift < limit:
        return []
    message = (
        f"Deceptive agreement: {rule.label(m)} agrees well with the reference on {p} overall "
        f"(CCC {ccc:.3f}, at least {rule.ccc_min:g}) but reads lesions differently: in "
        f"segments the reference shows as positive for {f!r} the bias is {b_pos:.4g}, "
        f"against {b_neg:.4g} in the other segments (a shift of {shift:.4g}, at least "
        f"{limit:.4g})"
    )
    return [AgreementWarning("bias-shift", p, m, f, ccc, sens, b_pos, b_neg, message)]


def deceptive_agreement(
    agreement_rows: pd.DataFrame,
    detection: pd.DataFrame,
    *,
    ccc_min: float = RunOptions.ccc_min,
    sensitivity_max: float = RunOptions.sensitivity_max,
    bias_ratio: float = RunOptions.bias_ratio,
    min_bias_difference: Mapping[str, float] | None = None,
    level: str = "segment",
    label: Callable[[str], str] = str,
) -> list[AgreementWarning]:
    """Warn where high overall agreement hides poor agreement on a finding.

    For each finding, test method and its parameter, when the CCC in stratum ``all`` is at or
    above ``ccc_min``:

    - ``low-sensitivity``: sensitivity (``level``, stratum ``all``) below ``sensitivity_max``;
    - ``bias-shift``: the bias in reference-positive segments (stratum
      ``finding=<name>:positive``) differs *markedly* from the bias in reference-negative
      ones (``finding=<name>:negative``), defined as
      ``|b_pos - b_neg| >= max(min_bias_difference[parameter], (bias_ratio - 1) |b_neg|)``:
      the shift is at least the floor (default :data:`DEFAULT_MIN_BIAS_DIFFERENCE`) and the
      positive-stratum bias is outside ``b_neg -/+ (bias_ratio - 1) |b_neg|`` (with the
      default 2: at least double, or of the other sign, or near zero where b_neg is not).

    ``agreement_rows`` needs columns ``parameter, method, stratum, ccc, bias``; ``detection``
    is the ``findings_agreement`` table; ``label`` gives a method's display label in the
    messages. Each warning is returned and emitted as
    :class:`DeceptiveAgreementWarning`. Checked against the rule applied by hand to a
    simulated cohort with planted missed lesions (tests).

    Examples
    --------
    >>> agreement = pd.DataFrame({
    ...     "parameter": "r2star", "method": "fast",
    ...     "stratum": ["all", "finding=hemorrhage:positive", "finding=hemorrhage:negative"],
    ...     "ccc": [0.95, float("nan"), float("nan")], "bias": [0.1, -8.0, 0.5]})
    >>> detection = pd.DataFrame({
    ...     "finding": ["hemorrhage"], "parameter": "r2star", "method": "fast",
    ...     "level": "segment", "stratum": "all", "sensitivity": [0.6]})
    >>> with warnings.catch_warnings():
    ...     warnings.simplefilter("ignore", DeceptiveAgreementWarning)
    ...     found = deceptive_agreement(agreement, detection)
    >>> print([w.kind for w in found])
    ['low-sensitivity', 'bias-shift']
    """
    _check(
        agreement_rows,
        detection,
        ccc_min=ccc_min,
        sensitivity_max=sensitivity_max,
        bias_ratio=bias_ratio,
    )
    floor = {**DEFAULT_MIN_BIAS_DIFFERENCE, **(min_bias_difference or {})}
    rule = _Rule(ccc_min, sensitivity_max, bias_ratio, floor, level, label)
    agree = agreement_rows.set_index(["parameter", "method", "stratum"])
    if not agree.index.is_unique:
        raise ValueError("agreement_rows must have one row per parameter, method and stratum")

    def lookup(key: tuple[str, str, str], column: str) -> float:
        return float(agree.at[key, column]) if key in agree.index else math.nan

    det = detection[detection["level"].eq(level) & detection["stratum"].eq("all")]
    out: list[AgreementWarning] = []
    for row in det.itertuples(index=False):
        p, m, f = str(row.parameter), str(row.method), str(row.finding)
        ccc = lookup((p, m, "all"), "ccc")
        if not (math.isfinite(ccc) and ccc >= ccc_min):
            continue
        b_pos = lookup((p, m, f"finding={f}:positive"), "bias")
        b_neg = lookup((p, m, f"finding={f}:negative"), "bias")
        biases = (b_pos, b_neg)
        out += _low_sensitivity(row, ccc, biases, rule)
        out += _bias_shift(row, ccc, biases, rule)
    for w in out:
        warnings.warn(w.message, DeceptiveAgreementWarning, stacklevel=2)
    return out
