"""The columns of the method-agreement table, in order, each with its meaning.

The one place these column names are declared; :mod:`cohort.analysis.agreement_table`
fills them and re-exports :data:`COLUMN_DESCRIPTIONS` and :data:`AGREEMENT_COLUMNS`.
"""

from __future__ import annotations

from types import MappingProxyType

_BOOT = "subject cluster bootstrap percentile interval"


def _described(name: str, what: str, analytic: str | None = None) -> dict[str, str]:
    """Descriptions of a statistic, its bootstrap CI and (if given) its analytic CI columns."""
    out = {
        name: what,
        f"{name}_ci_low": f"lower limit of the {_BOOT} of {name}",
        f"{name}_ci_high": f"upper limit of the {_BOOT} of {name}",
    }
    if analytic is not None:
        out[f"{name}_analytic_ci_low"] = f"lower limit of the analytic CI of {name}: {analytic}"
        out[f"{name}_analytic_ci_high"] = f"upper limit of the analytic CI of {name}: {analytic}"
    return out


def regression_columns(prefix: str, procedure: str) -> dict[str, str]:
    out = {}
    for q in ("slope", "intercept"):
        out[f"{prefix}_{q}"] = f"{procedure} {q} (y = test, x = reference)"
        out[f"{prefix}_{q}_ci_low"] = f"lower limit of the CI of the {procedure} {q}"
        out[f"{prefix}_{q}_ci_high"] = f"upper limit of the CI of the {procedure} {q}"
    out[f"{prefix}_ci_method"] = (
        f"how the {procedure} CIs were obtained (subject cluster bootstrap when n_boot > 0)"
    )
    return out


_MOVER = "MOVER of Zou (2013) on the ANOVA variance components"
_EXACT = "exact, non-central t (Carkeet 2015), on the subject means"
_RATIO = "natural log of test/reference; NaN with a note for parameters not in ratio_parameters"

COLUMN_DESCRIPTIONS: MappingProxyType[str, str] = MappingProxyType(
    {
        "parameter": "parameter code: ff (%), r2star (1/s), field (Hz)",
        "method": "test method",
        "reference": "reference method",
        "stratum": "all, group=<name>, ring=<name>, territory=<name> or an extra stratum's name",
        "n_subjects": "subjects with at least one pair in the stratum",
        "n_pairs": "(subject, segment) pairs in the stratum",
        **_described(
            "bias",
            "mean difference test - reference over all pairs (Bland & Altman 2007)",
            "t, k-1 df, on the ANOVA variance components",
        ),
        **_described(
            "sd",
            "SD of a single difference, sqrt(s_between^2 + s_within^2) (Bland & Altman 2007)",
            "square root of the MOVER interval of the total variance (Zou 2013)",
        ),
        **_described(
            "sd_within",
            "within-subject SD of the differences (one-way ANOVA on subject)",
            "chi-square, N-k df",
        ),
        **_described(
            "sd_between",
            "between-subject SD of the differences, (MSB - MSW)/m0 set to 0 when negative",
        ),
        **_described("loa_low", "lower limit of agreement, bias - 1.96 sd", _MOVER),
        **_described("loa_high", "upper limit of agreement, bias + 1.96 sd", _MOVER),
        **_described(
            "subject_mean_bias",
            "mean of the per-subject mean differences (Bland & Altman 1986 on subject means)",
            "t, k-1 df",
        ),
        **_described(
            "subject_mean_sd", "SD of the per-subject mean differences", "chi-square, k-1 df"
        ),
        **_described("subject_mean_loa_low", "subject_mean_bias - 1.96 subject_mean_sd", _EXACT),
        **_described("subject_mean_loa_high", "subject_mean_bias + 1.96 subject_mean_sd", _EXACT),
        **_described(
            "prop_slope",
            "proportional bias: least-squares slope of the difference on the mean of the "
            "two methods (Bland & Altman 1999)",
            "cluster-robust sandwich (CR1), t with k-1 df",
        ),
        **_described(
            "prop_intercept",
            "intercept of that line (difference at a mean of 0)",
            "cluster-robust sandwich (CR1), t with k-1 df",
        ),
        **_described(
            "ratio_bias",
            f"geometric mean ratio test/reference, exp(mean log ratio); {_RATIO}",
            "back-transformed t interval as for bias",
        ),
        **_described(
            "ratio_loa_low",
            f"lower ratio limit of agreement (Bland & Altman 2007 on the log ratio); {_RATIO}",
            f"back-transformed {_MOVER}",
        ),
        **_described(
            "ratio_loa_high",
            f"upper ratio limit of agreement (Bland & Altman 2007 on the log ratio); {_RATIO}",
            f"back-transformed {_MOVER}",
        ),
        **_described(
            "sd_log",
            f"SD of a single log ratio (Bland & Altman 2007); {_RATIO}",
            "square root of the MOVER interval of the total variance (Zou 2013)",
        ),
        **_described(
            "pearson_r",
            "Pearson's r over all pairs",
            "Fisher z, SE 1/sqrt(N-3), pairs treated as independent",
        ),
        **_described(
            "spearman_rho",
            "Spearman's rho over all pairs; its bootstrap uses the full-sample mid-ranks "
            "(an approximation)",
            "Fisher z with the Bonett & Wright (2000) SE, pairs treated as independent",
        ),
        **_described(
            "rm_corr",
            "repeated-measures correlation (Bakdash & Marusich 2017; Bland & Altman 1995)",
            "Fisher z, SE 1/sqrt(N-k-2)",
        ),
        "rm_corr_df": "degrees of freedom of rm_corr, N - k - 1",
        "rm_corr_p_value": "two-sided p-value of rm_corr (t test on rm_corr_df df)",
        **_described(
            "ccc",
            "Lin's concordance correlation coefficient (Lin 1989)",
            "Lin's z transform, pairs treated as independent",
        ),
        **_described(
            "icc",
            "ICC(A,1): two-way, absolute agreement, single measurement (McGraw & Wong 1996; "
            "Shrout-Fleiss ICC(2,1)), each (subject, segment) pair a target",
            "F with Satterthwaite df (McGraw & Wong 1996), targets treated as independent",
        ),
        **regression_columns("pb", "Passing-Bablok"),
        **regression_columns("deming", "Deming"),
        "bias_intercept": "regression-based limits (Bland & Altman 1999): intercept of the "
        "mean difference line; NaN with a note unless regression_limits=True",
        "bias_slope": "slope of the mean difference line (equals prop_slope)",
        "loa_low_intercept": "intercept of the lower regression-based limit",
        "loa_low_slope": "slope of the lower regression-based limit",
        "loa_high_intercept": "intercept of the upper regression-based limit",
        "loa_high_slope": "slope of the upper regression-based limit",
        "confidence_level": "confidence level of every interval in the row",
        "ci_method": "how the default (_ci_low/_ci_high) intervals were obtained",
        "n_boot": "bootstrap resamples B",
        "seed": "seed of numpy.random.default_rng for the resampling",
        "note": "why values are NaN (not estimable: ...) and other remarks; empty if none",
    }
)
"""Every column of the agreement table, in order, with its meaning."""

AGREEMENT_COLUMNS: tuple[str, ...] = tuple(COLUMN_DESCRIPTIONS)
"""Column names of the agreement table, in order."""
