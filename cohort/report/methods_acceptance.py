"""The methods text on several test methods: acceptance criteria, verdicts, alerts and the
head-to-head comparison, each rule as the code applies it (:mod:`cohort.analysis.verdicts`,
:mod:`cohort.analysis.alerts`, :mod:`cohort.analysis.lesion_alerts`)."""

from __future__ import annotations

from cohort.analysis.alerts import DEFAULT_MIN_BIAS_DIFFERENCE
from cohort.analysis.lesion_alerts import MIN_TEST_POSITIVE
from cohort.analysis.pipeline import Analysis
from cohort.domain.acceptance import (
    DEFAULT_MIN_PPV,
    DEFAULT_MIN_SENSITIVITY,
    VERDICT_RULES,
)
from cohort.domain.units import PARAMETERS

REFERENCES: dict[str, str] = {
    "stockl2004": "Stöckl D, Rodríguez Cabaleiro D, Van Uytfanghe K, Thienpont LM. "
    "Interpreting method comparison studies by use of the Bland-Altman plot: reflecting the "
    "importance of sample size by incorporating confidence limits and predefined error "
    "limits in the graphic. Clin Chem 2004;50:2216-2218.",
    "obuchowski1998": "Obuchowski NA. On the comparison of correlated proportions for "
    "clustered data. Stat Med 1998;17:1495-1507.",
    "efron1993": "Efron B, Tibshirani RJ. An introduction to the bootstrap. New York: "
    "Chapman & Hall; 1993.",
}
"""References cited only by these paragraphs (appended to the methods text's list)."""

CORRECTIONS: dict[str, str] = {
    "holm": "Holm's step-down procedure [holm1979]",
    "fdr_bh": "the Benjamini-Hochberg procedure [bh1995]",
}
"""The multiple-testing corrections of ``[analysis] correction`` as the methods text names
them (the group comparisons and the head-to-head paragraph)."""


def difference_unit(parameter: str) -> str:
    """The unit of a difference of ``parameter`` (fat fraction: percentage points)."""
    unit = PARAMETERS[parameter].unit
    return "percentage points" if unit == "%" else unit


def _criteria(analysis: Analysis) -> list[str]:
    a = analysis.study.settings.acceptance
    items = [
        f"both limits of agreement of {PARAMETERS[p].label} within ±{v:g} {difference_unit(p)}"
        for p, v in a.limits.items()
    ]
    items += [f"Lin's CCC of {PARAMETERS[p].label} at least {v:g}" for p, v in a.ccc.items()]
    items += [f"segment-level sensitivity for {f} at least {v:g}" for f, v in a.findings.items()]
    return items


def _interval_source(analysis: Analysis) -> str:
    """Which intervals the verdicts used, as the verdicts table records per row."""
    if analysis.options.n_boot == 0:
        return (
            "no bootstrap ran, so the analytic intervals of the limits and CCC and the Wilson "
            "intervals of sensitivity were used; they treat the segments of a subject as "
            "independent and are too narrow when segments are correlated"
        )
    return (
        "the subject cluster bootstrap interval; where it collapsed to a single value (a "
        "sensitivity of 0 or 1 in every resample) or could not be computed, the Wilson or "
        "analytic interval, which treats the segments of a subject as independent, as the "
        "verdicts table states per row"
    )


def acceptance_lines(analysis: Analysis) -> list[str]:
    """The paragraph on acceptance criteria and verdicts (empty without criteria)."""
    if "method_verdicts" not in analysis.tables:
        return []
    rules = "; ".join(f"*{word}*: {text}" for word, text in VERDICT_RULES.items())
    return [
        "",
        "## Acceptance criteria",
        "The acceptance criteria declared for the analysis (limits of agreement compared with "
        "a clinically acceptable difference [bland1999]) were: "
        + "; ".join(_criteria(analysis))
        + ". Each test method received a verdict per criterion from the estimate and its "
        f"confidence interval ({_interval_source(analysis)}); for limits of agreement the "
        "outer confidence bounds of both limits were compared with the acceptable difference "
        f"[stockl2004]. Verdicts: {rules}.",
    ]


def alert_lines(analysis: Analysis) -> list[str]:
    """The alert rules, exactly as applied (thresholds and floors included)."""
    o = analysis.options
    a = analysis.study.settings.acceptance
    declared = ", ".join(f"{f}: {v:g}" for f, v in a.findings.items())
    others = [d.name for d in analysis.study.settings.findings if d.name not in a.findings]
    otherwise = f"; {', '.join(others)}: {DEFAULT_MIN_SENSITIVITY:g}" if others else ""
    criterion = (
        f"the sensitivity criterion declared for the finding ({declared}{otherwise})"
        if a.findings
        else f"{DEFAULT_MIN_SENSITIVITY:g}"
    )
    floors = ", ".join(
        f"{PARAMETERS[p].label} {v:g} {difference_unit(p)}"
        for p, v in DEFAULT_MIN_BIAS_DIFFERENCE.items()
    )
    return [
        "",
        "## Alerts",
        "Every test method was screened for lesions it misses, whatever its overall "
        "agreement. A missed-lesion alert was raised when its segment-level sensitivity for a "
        f"finding was below {criterion}. A bias-shift alert was raised when the bias in "
        "segments the reference called positive (b+) differed from the bias in the other "
        f"segments (b-) by |b+ - b-| >= max(floor, ({o.bias_ratio:g} - 1) |b-|), with floors "
        f"of {floors} (one tenth of the default thresholds at 1.5 T; a convention of this "
        "analysis). Where Lin's CCC (whole cohort) of the parameter that defines the finding "
        f"was at least {o.ccc_min:g}, a segment-level sensitivity below "
        f"{o.sensitivity_max:g} or such a bias shift was reported as deceptive agreement "
        "(good overall agreement that hides missed lesions), and the missed-lesion or "
        "bias-shift alert of the same method and finding was not repeated. An over-calling "
        "alert was raised when the positive predictive value was "
        f"below {DEFAULT_MIN_PPV:g}, judged only where the method called at least "
        f"{MIN_TEST_POSITIVE} segments positive.",
    ]


def difference_lines(analysis: Analysis) -> list[str]:
    """The head-to-head comparison of test methods (with two or more of them)."""
    table = analysis.tables.get("method_differences")
    if table is None:
        return []
    o = analysis.options
    baseline = analysis.study.settings.acceptance.baseline
    pairs = (
        f"each other test method was compared with {analysis.study.method_label(baseline)}"
        if baseline
        else "every pair of test methods was compared"
    )
    correction = CORRECTIONS[o.correction]
    intervals = (
        f"subject cluster bootstrap percentile intervals (B = {o.n_boot}, seed {o.seed}) with "
        "both methods evaluated on the same resampled subjects in every resample"
        if o.n_boot
        else "not computed, since no bootstrap ran (B = 0)"
    )
    bootstrap_test = (
        "differences in agreement statistics were tested with a two-sided Wald test using the "
        "standard deviation of the resampled differences as standard error [efron1993]"
        if o.n_boot
        else "differences in agreement statistics were not tested (no bootstrap)"
    )
    return [
        "",
        "## Test methods head to head",
        f"Against the same reference, {pairs}: per parameter the difference (first minus "
        "second method) in absolute bias, in the width of the limits of agreement and in "
        "Lin's CCC; per finding the difference in segment-level sensitivity and specificity, "
        "on the segments classified by the reference and both methods. Confidence intervals "
        f"of the differences are {intervals}. Differences in sensitivity (on "
        "reference-positive segments) and specificity (on reference-negative segments) were "
        "tested with Obuchowski's test for correlated proportions of clustered data "
        "[obuchowski1998], the exact McNemar test ignoring the clustering reported beside "
        f"it; {bootstrap_test}. P-values were adjusted with {correction} over all "
        "comparisons of the table as one family.",
    ]
