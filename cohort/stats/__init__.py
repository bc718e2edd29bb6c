"""Estimators over paired values: one flat public namespace (as ``scipy.stats``).

Every paired estimator takes ``reference`` and ``test`` values and ``subject`` labels as
arrays, or ``data=`` a DataFrame with those arguments naming its columns. It returns a
frozen result with ``to_frame()``, ``summary()`` and a one-line repr; default intervals are
subject cluster bootstrap percentile intervals, with the textbook interval beside them.

Agreement (Bland & Altman)
    :func:`limits_of_agreement`, :func:`bias`, :func:`subject_mean_limits`,
    :func:`proportional_bias`, :func:`regression_based_limits`; results
    :class:`LimitsOfAgreement`, :class:`ProportionalBias`, :class:`RegressionLimits`
Concordance
    :func:`concordance_correlation` (Lin's CCC), :func:`icc_agreement` (ICC(A,1)),
    :func:`icc_forms` (all six forms); results :class:`Concordance`,
    :class:`IntraclassCorrelation`, :class:`IccForm`, :class:`IccForms`
Correlation
    :func:`pearson`, :func:`spearman`, :func:`repeated_measures_correlation`; result
    :class:`Correlation`
Method-comparison regression
    :func:`passing_bablok`, :func:`deming`; result :class:`MethodRegression`
Proportions and classification (2x2 tables)
    :func:`wilson_interval`, :func:`proportion`, :func:`cohen_kappa`, :func:`mcnemar_test`,
    :func:`diagnostic_accuracy`, :func:`clustered_paired_proportions` (two methods' paired
    proportions with units clustered in subjects); results :class:`Proportion`,
    :class:`Kappa`, :class:`McNemar`, :class:`DiagnosticAccuracy`, :class:`PairedProportions`
Groups (independent samples of subjects)
    :func:`kruskal_wallis`, :func:`mann_whitney`, :func:`welch_anova`, :func:`games_howell`,
    :func:`hedges_g`, :func:`cliffs_delta`, :func:`risk_difference`,
    :func:`fisher_exact_2x2`, :func:`freeman_halton`; models :func:`fit_group_model`,
    :func:`choose_model_path`; results :class:`GroupTest`, :class:`PairTest`,
    :class:`EffectSize`, :class:`GroupModelFit`
Multiple comparisons
    :func:`holm`, :func:`benjamini_hochberg`, :func:`adjust_p`,
    :func:`adjust_within_families`
Shared vocabulary
    :class:`Result`, :class:`Estimate`, :class:`ConfidenceInterval`,
    :class:`CohortWarning`, :class:`NotEstimableWarning`
"""

from cohort.stats.agreement import (
    LimitsOfAgreement,
    ProportionalBias,
    bias,
    limits_of_agreement,
    proportional_bias,
    subject_mean_limits,
)
from cohort.stats.classification import (
    DiagnosticAccuracy,
    Kappa,
    McNemar,
    Proportion,
    cohen_kappa,
    diagnostic_accuracy,
    mcnemar_test,
    proportion,
)
from cohort.stats.concordance import (
    Concordance,
    IccForm,
    IccForms,
    IntraclassCorrelation,
    concordance_correlation,
    icc_agreement,
    icc_forms,
)
from cohort.stats.correlation import (
    Correlation,
    pearson,
    repeated_measures_correlation,
    spearman,
)
from cohort.stats.effect_sizes import EffectSize, cliffs_delta, hedges_g
from cohort.stats.group_tests import (
    GroupTest,
    PairTest,
    games_howell,
    kruskal_wallis,
    mann_whitney,
    welch_anova,
)
from cohort.stats.models import GroupModelFit, choose_model_path, fit_group_model
from cohort.stats.multiplicity import adjust_p, adjust_within_families, benjamini_hochberg, holm
from cohort.stats.paired_proportions import PairedProportions, clustered_paired_proportions
from cohort.stats.proportion_tests import fisher_exact_2x2, freeman_halton, risk_difference
from cohort.stats.proportions import wilson_interval
from cohort.stats.regression import MethodRegression, deming, passing_bablok
from cohort.stats.regression_limits import RegressionLimits, regression_based_limits
from cohort.stats.results import (
    CohortWarning,
    ConfidenceInterval,
    Estimate,
    NotEstimableWarning,
    Result,
)

# Sorted (ruff RUF022); the module docstring lists the names by topic.
__all__ = [
    "CohortWarning",
    "Concordance",
    "ConfidenceInterval",
    "Correlation",
    "DiagnosticAccuracy",
    "EffectSize",
    "Estimate",
    "GroupModelFit",
    "GroupTest",
    "IccForm",
    "IccForms",
    "IntraclassCorrelation",
    "Kappa",
    "LimitsOfAgreement",
    "McNemar",
    "MethodRegression",
    "NotEstimableWarning",
    "PairTest",
    "PairedProportions",
    "Proportion",
    "ProportionalBias",
    "RegressionLimits",
    "Result",
    "adjust_p",
    "adjust_within_families",
    "benjamini_hochberg",
    "bias",
    "choose_model_path",
    "cliffs_delta",
    "clustered_paired_proportions",
    "cohen_kappa",
    "concordance_correlation",
    "deming",
    "diagnostic_accuracy",
    "fisher_exact_2x2",
    "fit_group_model",
    "freeman_halton",
    "games_howell",
    "hedges_g",
    "holm",
    "icc_agreement",
    "icc_forms",
    "kruskal_wallis",
    "limits_of_agreement",
    "mann_whitney",
    "mcnemar_test",
    "passing_bablok",
    "pearson",
    "proportion",
    "proportional_bias",
    "regression_based_limits",
    "repeated_measures_correlation",
    "risk_difference",
    "spearman",
    "subject_mean_limits",
    "welch_anova",
    "wilson_interval",
]
