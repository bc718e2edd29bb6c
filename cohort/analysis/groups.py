"""Group comparisons: per-subject summaries, tests between groups, proportions, segment models.

Unit of analysis. Segments are clustered in subjects, so tests between groups run on
*per-subject summaries* (one value per subject, method and parameter: the mean over its
segments, its maximum segment, the mean over its culprit territory); subjects are
independent, so these tests and their intervals respect the clustering. Questions about
segments use models with a random intercept per subject (linear mixed model) or GEE
clustered by subject; above a documented size the linear models switch to the equivalent
subject-level analysis (see :data:`MIXED_MODEL_MAX_OBSERVATIONS`).

Tests between groups (on per-subject summaries):

- Kruskal-Wallis H (Kruskal & Wallis 1952) over all groups, then pairwise Mann-Whitney U
  (Mann & Whitney 1947; not Dunn's test) with Cliff's delta (Cliff 1993); pairwise p-values
  Holm-corrected within the pairs of one omnibus test.
- Welch's heteroscedastic one-way ANOVA (Welch 1951), then Games-Howell pairs (Games &
  Howell 1976), whose studentized-range p-value is already adjusted over the pairs, with
  Hedges' g (Hedges 1981).

Proportions of positive subjects per finding: Fisher's exact test (2x2), the
Fisher-Freeman-Halton exact test for r x 2 tables by enumeration (seeded Monte Carlo above
a budget, said in ``p_method``), pairwise Fisher tests and risk differences with Newcombe's
hybrid score interval (Newcombe 1998, method 10).

Segment-level models: a linear mixed model of the values on group (statsmodels MixedLM,
REML), GEE logistic models of segment findings (Liang & Zeger 1986), and a model of the
per-segment method difference on group (does the difference depend on the group?).

Multiplicity: :mod:`cohort.stats.multiplicity` (Holm by default); every table states the family.
Column names of every output table are the module-level ``*_COLUMNS`` constants. No I/O:
:func:`group_comparison_table` returns DataFrames for the caller to write.
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Iterator, Sequence
from contextlib import contextmanager
from dataclasses import dataclass
from itertools import combinations
from typing import Any

import numpy as np
import pandas as pd
import statsmodels.api as sm
from numpy.typing import ArrayLike
from scipy import optimize, special, stats
from statsmodels.tools.sm_exceptions import ConvergenceWarning, IterationLimitWarning

from cohort.domain.segments import SEGMENTS, TERRITORIES
from cohort.domain.units import PARAMETERS
from cohort.io.study import Study
from cohort.parallel import map_shared
from cohort.stats.bootstrap import DEFAULT_SEED
from cohort.stats.multiplicity import HOLM, adjust_table, check_correction
from cohort.stats.proportions import wilson_interval as _wilson
from cohort.stats.results import ConfidenceInterval, NotEstimableWarning, warn_not_estimable

# --- vocabulary ---------------------------------------------------------------------------

MEAN, MAX, CULPRIT_MEAN = "mean", "max", "culprit_mean"
SUMMARY_KINDS: tuple[str, ...] = (MEAN, MAX, CULPRIT_MEAN)
"""Per-subject summaries: mean over segments, maximum segment, mean over the culprit territory."""

KRUSKAL_WALLIS = "Kruskal-Wallis"
MANN_WHITNEY = "Mann-Whitney U"
WELCH_ANOVA = "Welch ANOVA"
GAMES_HOWELL = "Games-Howell"
FISHER_2X2 = "Fisher exact"
FREEMAN_HALTON = "Fisher-Freeman-Halton exact"
TESTS: tuple[str, ...] = ("kruskal-wallis", "welch-anova")
"""Test families of :func:`compare_summaries`: each runs its omnibus test and its pairs."""

HEDGES_G = "Hedges' g"
CLIFFS_DELTA = "Cliff's delta"
RISK_DIFFERENCE = "risk difference"
ALL_GROUPS = "all groups"

MIN_SUBJECTS_PER_GROUP = 2
"""Every test here needs a within-group spread, so at least 2 subjects per group."""

KRUSKAL_SMALL_GROUP = 5
"""Below 5 subjects in a group the chi-square approximation of H is rough (common practice)."""

MANN_WHITNEY_EXACT_MAX = 8
"""Exact U distribution when the smaller group has at most 8 subjects and there are no ties
(the rule of ``scipy.stats.mannwhitneyu(method='auto')``); normal approximation otherwise."""

FISHER_MAX_TABLES = 5_000_000
"""Budget of the exact r x 2 enumeration (tables with the observed margins, about 0.5 s)."""

FISHER_DRAWS = 100_000
"""Monte Carlo tables drawn when the exact enumeration would exceed the budget."""

MIXED_MODEL_MAX_OBSERVATIONS = 10_000
"""Above this many segment values in one fit, linear models run on subject means.

A statsmodels MixedLM fit took 1-5 s at 600 subjects x 17 segments on the project machine
(2 shared cores; slowest when the random-intercept variance is at its boundary, 0) and
about 4 minutes at 10,000 subjects. With group and covariates at subject level and a
balanced design, generalised least squares of the random-intercept model equals ordinary
least squares on the subject means, with the same standard errors (a subject mean has
variance ``sigma_b^2 + sigma_w^2 / m``), so the large-cohort path answers the same
question; with unequal segment counts it weights subjects equally rather than by
precision, and its tests are t and F rather than Wald z and chi-square.
"""

MODEL_PATHS: tuple[str, ...] = ("auto", "mixed", "subject-means")
MIXED_PATH = "mixed model (REML)"
SUBJECT_MEANS_PATH = "subject means (OLS)"
GEE_PATH = "GEE (exchangeable, robust SE)"

SUMMARY_COLUMNS: tuple[str, ...] = (
    "subject", "group", "method", "parameter", "summary", "value", "n_segments", "note",
)  # fmt: skip
"""Columns of :func:`subject_summaries`."""

DESCRIPTIVE_COLUMNS: tuple[str, ...] = (
    "parameter", "unit", "method", "summary", "group", "n_subjects",
    "median", "q1", "q3", "mean", "sd", "note",
)  # fmt: skip
"""Columns of :func:`describe_groups` (quartiles: linear interpolation, numpy's default)."""

COMPARISON_COLUMNS: tuple[str, ...] = (
    "parameter", "method", "summary", "test", "comparison", "statistic", "statistic_name",
    "df", "df_denominator", "p_value", "p_method", "p_adjusted", "correction", "family",
    "effect_size", "effect_size_name", "effect_ci_low", "effect_ci_high", "effect_ci_method",
    "confidence_level", "n_subjects", "note",
)  # fmt: skip
"""Columns of the ``group_comparison`` table (:func:`compare_summaries`)."""

PROPORTION_COLUMNS: tuple[str, ...] = (
    "method", "finding", "group", "n_subjects", "n_positive", "proportion",
    "ci_low", "ci_high", "ci_method", "confidence_level", "note",
)  # fmt: skip
"""Columns of the per-group proportions of positive subjects."""

PROPORTION_TEST_COLUMNS: tuple[str, ...] = (
    "method", "finding", "test", "comparison", "counts", "statistic", "statistic_name",
    "p_value", "p_method", "p_adjusted", "correction", "family",
    "effect_size", "effect_size_name", "effect_ci_low", "effect_ci_high", "effect_ci_method",
    "confidence_level", "n_subjects", "note",
)  # fmt: skip
"""Columns of the tests of proportions (:func:`compare_proportions`)."""

MODEL_COLUMNS: tuple[str, ...] = (
    "parameter", "method", "finding", "model", "path", "term", "estimate", "estimate_name",
    "std_error", "ci_low", "ci_high", "ci_method", "statistic", "statistic_name", "df",
    "df_denominator", "p_value", "p_adjusted", "correction", "family", "confidence_level",
    "n_subjects", "n_observations", "note",
)  # fmt: skip
"""Columns of the segment-level model table (mixed model, GEE, method x group)."""

GROUP_DIFFERENCE = "group difference"
FINDING_BY_GROUP = "finding by group"
METHOD_BY_GROUP = "method x group interaction (test - reference)"
JOINT_GROUP = "joint: group"


# --- small helpers ------------------------------------------------------------------------


def _check_level(confidence_level: float) -> None:
    if not (isinstance(confidence_level, float | int) and 0.0 < confidence_level < 1.0):
        raise ValueError(f"confidence_level must be between 0 and 1, got {confidence_level!r}")


def _sample(values: ArrayLike, name: str) -> np.ndarray:
    x = np.asarray(values, dtype=float)
    if x.ndim != 1:
        raise ValueError(f"{name} must be one-dimensional, got shape {x.shape}")
    if not np.all(np.isfinite(x)):
        raise ValueError(f"{name} must hold finite values only, got {int((~np.isfinite(x)).sum())}")
    return x


def _samples(samples: Sequence[ArrayLike], labels: Sequence[str] | None) -> tuple:
    arrays = [_sample(s, f"samples[{i}]") for i, s in enumerate(samples)]
    if len(arrays) < 2:
        raise ValueError(f"samples must hold at least 2 groups, got {len(arrays)}")
    names = [str(i) for i in range(len(arrays))] if labels is None else [str(x) for x in labels]
    if len(names) != len(arrays):
        raise ValueError(f"labels must name each of the {len(arrays)} samples, got {len(names)}")
    return arrays, names


def _too_small(arrays: Sequence[np.ndarray], names: Sequence[str]) -> str:
    small = [f"{g} (n={a.size})" for a, g in zip(arrays, names, strict=True)]
    small = [s for s, a in zip(small, arrays, strict=True) if a.size < MIN_SUBJECTS_PER_GROUP]
    if small:
        return f"fewer than {MIN_SUBJECTS_PER_GROUP} subjects in {', '.join(small)}"
    return ""


def _require(frame: pd.DataFrame, name: str, columns: Sequence[str]) -> pd.DataFrame:
    """Check that ``frame`` is a DataFrame with ``columns``; return it."""
    if not isinstance(frame, pd.DataFrame):
        raise ValueError(f"{name} must be a pandas DataFrame, got {type(frame).__name__}")
    absent = [c for c in columns if c not in frame.columns]
    if absent:
        raise ValueError(f"{name} has no column(s) {absent}; columns are {list(frame.columns)}")
    return frame


def _order(present: Sequence[object], group_order: Sequence[str] | None, name: str) -> list[str]:
    if isinstance(present, pd.Series | pd.Index | np.ndarray):
        present = pd.unique(present)  # first appearances, before the Python-level pass
    seen = [str(g) for g in pd.unique(pd.Series(list(present), dtype=object))]
    if group_order is None:
        return seen
    order = [str(g) for g in group_order]
    if len(set(order)) != len(order):
        raise ValueError(f"group_order must not repeat a group, got {order}")
    absent = [g for g in seen if g not in order]
    if absent:
        raise ValueError(f"group_order must list every group of {name}, missing {absent}")
    return order


@contextmanager
def _unique_warnings() -> Iterator[None]:
    """Re-emit each distinct NotEstimableWarning once (tables repeat the same reason)."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", NotEstimableWarning)
        yield
    counts: dict[str, int] = {}
    others = []
    for w in caught:
        if issubclass(w.category, NotEstimableWarning):
            counts[str(w.message)] = counts.get(str(w.message), 0) + 1
        else:
            others.append(w)
    for w in others:
        warnings.warn_explicit(w.message, w.category, w.filename, w.lineno)
    for message, n in counts.items():
        suffix = f" ({n} rows)" if n > 1 else ""
        warnings.warn(message + suffix, NotEstimableWarning, stacklevel=3)


# --- results ------------------------------------------------------------------------------


@dataclass(frozen=True)
class GroupTest:
    """A test between groups: statistic, degrees of freedom, p-value and how it was obtained.

    ``df_denominator`` is NaN for tests with a single df (see ``statistic_name``); a NaN
    statistic or p-value comes with ``note`` saying why.
    """

    test: str
    statistic: float
    statistic_name: str
    df: float
    df_denominator: float
    p_value: float
    p_method: str
    n_subjects: int
    note: str = ""

    def row(self) -> dict[str, object]:
        return {
            "test": self.test,
            "statistic": self.statistic,
            "statistic_name": self.statistic_name,
            "df": self.df,
            "df_denominator": self.df_denominator,
            "p_value": self.p_value,
            "p_method": self.p_method,
            "n_subjects": self.n_subjects,
            "note": self.note,
        }

    def to_frame(self) -> pd.DataFrame:
        return pd.DataFrame([self.row()])


def _not_estimable_test(test, statistic_name, n, reason, p_method="") -> GroupTest:
    note = warn_not_estimable(test, reason, stacklevel=3)
    return GroupTest(
        test, math.nan, statistic_name, math.nan, math.nan, math.nan, p_method, n, note
    )


@dataclass(frozen=True)
class EffectSize:
    """A two-group effect size (first minus second group) with its interval."""

    name: str
    value: float
    ci: ConfidenceInterval
    n_subjects: int
    note: str = ""

    def row(self) -> dict[str, object]:
        return {
            "effect_size": self.value,
            "effect_size_name": self.name,
            "effect_ci_low": self.ci.low,
            "effect_ci_high": self.ci.high,
            "effect_ci_method": self.ci.method,
            "confidence_level": self.ci.level,
            "n_subjects": self.n_subjects,
            "note": "; ".join(n for n in (self.note, self.ci.note) if n),
        }

    def to_frame(self) -> pd.DataFrame:
        return pd.DataFrame([self.row()])


def _not_estimable_effect(name, n, reason, confidence_level, method) -> EffectSize:
    note = warn_not_estimable(name, reason, stacklevel=3)
    ci = ConfidenceInterval(math.nan, math.nan, confidence_level, method)
    return EffectSize(name, math.nan, ci, n, note)


@dataclass(frozen=True)
class PairTest:
    """One pair of a post hoc procedure: first minus second group.

    ``p_value`` is the unadjusted two-sided p of the pair's own statistic; ``p_adjusted`` is
    the procedure's adjusted p (Games-Howell: studentized range over all pairs).
    """

    first: str
    second: str
    test: str
    difference: float
    std_error: float
    statistic: float
    df: float
    p_value: float
    p_adjusted: float
    n_subjects: int
    note: str = ""

    @property
    def comparison(self) -> str:
        return f"{self.first} vs {self.second}"

    def to_frame(self) -> pd.DataFrame:
        return pd.DataFrame([{"comparison": self.comparison, **self.__dict__}])


# --- tests between groups -----------------------------------------------------------------


def _tie_sum(values: np.ndarray) -> float:
    _, counts = np.unique(values, return_counts=True)
    return float(np.sum(counts.astype(float) ** 3 - counts))


def kruskal_wallis(samples: Sequence[ArrayLike], labels: Sequence[str] | None = None) -> GroupTest:
    """Kruskal-Wallis H test with the tie correction, chi-square p with k - 1 df.

    ``H = [12 / (N (N + 1)) sum R_i^2 / n_i - 3 (N + 1)] / C`` with mid-ranks and
    ``C = 1 - sum(t^3 - t) / (N^3 - N)``. Kruskal WH, Wallis WA. Use of ranks in
    one-criterion variance analysis. J Am Stat Assoc 1952;47:583-621. Validated against
    ``scipy.stats.kruskal``.
    """
    arrays, names = _samples(samples, labels)
    n_total = int(sum(a.size for a in arrays))
    p_method = "chi-square approximation, tie-corrected"
    small = _too_small(arrays, names)
    if small:
        return _not_estimable_test(KRUSKAL_WALLIS, "H", n_total, small, p_method)
    pooled = np.concatenate(arrays)
    ties = 1.0 - _tie_sum(pooled) / (n_total**3 - n_total)
    if ties <= 0.0:
        return _not_estimable_test(KRUSKAL_WALLIS, "H", n_total, "all values tied", p_method)
    ranks = stats.rankdata(pooled)
    sizes = np.array([a.size for a in arrays])
    rank_sums = np.add.reduceat(ranks, np.r_[0, np.cumsum(sizes)[:-1]])
    h = 12.0 / (n_total * (n_total + 1)) * np.sum(rank_sums**2 / sizes) - 3.0 * (n_total + 1)
    h /= ties
    df = len(arrays) - 1
    note = ""
    if sizes.min() < KRUSKAL_SMALL_GROUP:
        note = (
            f"fewer than {KRUSKAL_SMALL_GROUP} subjects in a group: chi-square approximation rough"
        )
    return GroupTest(
        KRUSKAL_WALLIS,
        float(h),
        "H",
        df,
        math.nan,
        float(stats.chi2.sf(h, df)),
        p_method,
        n_total,
        note,
    )


def _u_distribution(m: int, n: int) -> np.ndarray:
    """Null probabilities of U = 0..m n without ties: the Gaussian binomial [m + n, m]_q.

    ``prod_{i=1..m} (1 - q^(n+i)) / (1 - q^i)``; each division is a strided cumulative sum.
    """
    m, n = min(m, n), max(m, n)
    c = np.zeros(m * n + m + 1)
    c[0] = 1.0
    for i in range(1, m + 1):
        a = n + i
        c[a:] = c[a:] - c[:-a].copy()
        for r in range(i):
            c[r::i] = np.cumsum(c[r::i])
    c = np.clip(c[: m * n + 1], 0.0, None)
    return c / c.sum()


def mann_whitney(
    x: ArrayLike, y: ArrayLike, *, method: str = "auto", labels: tuple[str, str] = ("x", "y")
) -> GroupTest:
    """Two-sided Mann-Whitney U test; the statistic is U of ``x`` (pairs with x > y, ties 1/2).

    ``method="auto"`` uses the exact null distribution when the smaller sample has at most
    :data:`MANN_WHITNEY_EXACT_MAX` values and there are no ties, else the normal
    approximation with tie and continuity corrections. Mann HB, Whitney DR. On a test of
    whether one of two random variables is stochastically larger than the other. Ann Math
    Stat 1947;18:50-60. Validated against ``scipy.stats.mannwhitneyu`` (method 'exact' and
    'asymptotic'). ``labels`` name the samples in not-estimable notes.
    """
    x, y = _sample(x, "x"), _sample(y, "y")
    if method not in ("auto", "exact", "asymptotic"):
        raise ValueError(f"method must be 'auto', 'exact' or 'asymptotic', got {method!r}")
    n1, n2 = x.size, y.size
    small = _too_small([x, y], labels)
    if small:
        return _not_estimable_test(MANN_WHITNEY, "U", n1 + n2, small)
    pooled = np.concatenate([x, y])
    ranks = stats.rankdata(pooled)
    u1 = float(ranks[:n1].sum() - n1 * (n1 + 1) / 2.0)
    tie_sum = _tie_sum(pooled)
    if method == "auto":
        method = (
            "exact" if (min(n1, n2) <= MANN_WHITNEY_EXACT_MAX and tie_sum == 0) else "asymptotic"
        )
    if method == "exact":
        dist = _u_distribution(n1, n2)
        upper = max(u1, n1 * n2 - u1)
        p = min(1.0, 2.0 * float(dist[round(upper) :].sum()))
        return GroupTest(MANN_WHITNEY, u1, "U", math.nan, math.nan, p, "exact, no ties", n1 + n2)
    n = n1 + n2
    sigma2 = n1 * n2 / 12.0 * ((n + 1) - tie_sum / (n * (n - 1)))
    if sigma2 <= 0.0:
        return _not_estimable_test(MANN_WHITNEY, "U", n, "all values tied")
    z = (abs(u1 - n1 * n2 / 2.0) - 0.5) / math.sqrt(sigma2)
    p = min(1.0, 2.0 * float(stats.norm.sf(z)))
    p_method = "normal approximation, tie and continuity corrected"
    return GroupTest(MANN_WHITNEY, u1, "U", math.nan, math.nan, p, p_method, n)


def _moments(arrays: Sequence[np.ndarray]) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    n = np.array([a.size for a in arrays], dtype=float)
    mean = np.array([a.mean() for a in arrays])
    var = np.array([a.var(ddof=1) if a.size > 1 else math.nan for a in arrays])
    return n, mean, var


def _zero_variance(arrays, names) -> str:
    flat = [g for a, g in zip(arrays, names, strict=True) if np.ptp(a) == 0.0]
    return f"zero variance in {', '.join(flat)}" if flat else ""


def welch_anova(samples: Sequence[ArrayLike], labels: Sequence[str] | None = None) -> GroupTest:
    """Welch's one-way ANOVA for unequal variances, F with (k - 1, df2) degrees of freedom.

    With ``w_i = n_i / s_i^2``, ``W = sum w_i``, weighted mean ``m = sum w_i y_i / W`` and
    ``L = sum (1 - w_i / W)^2 / (n_i - 1)``:
    ``F = [sum w_i (y_i - m)^2 / (k - 1)] / [1 + 2 (k - 2) L / (k^2 - 1)]``,
    ``df2 = (k^2 - 1) / (3 L)``. Welch BL. On the comparison of several mean values: an
    alternative approach. Biometrika 1951;38:330-336. Validated against
    ``scipy.stats.f_oneway(equal_var=False)``, ``pingouin.welch_anova`` and the formula
    written out in the test.
    """
    arrays, names = _samples(samples, labels)
    n_total = int(sum(a.size for a in arrays))
    reason = _too_small(arrays, names) or _zero_variance(arrays, names)
    if reason:
        return _not_estimable_test(WELCH_ANOVA, "F", n_total, reason, "F distribution")
    n, mean, var = _moments(arrays)
    k = len(arrays)
    w = n / var
    big_w = w.sum()
    centre = np.sum(w * mean) / big_w
    lam = np.sum((1.0 - w / big_w) ** 2 / (n - 1.0))
    f = (np.sum(w * (mean - centre) ** 2) / (k - 1)) / (1.0 + 2.0 * (k - 2) * lam / (k * k - 1))
    df2 = (k * k - 1) / (3.0 * lam)
    p = float(stats.f.sf(f, k - 1, df2))
    return GroupTest(WELCH_ANOVA, float(f), "F", k - 1, float(df2), p, "F distribution", n_total)


def games_howell(
    samples: Sequence[ArrayLike], labels: Sequence[str] | None = None
) -> tuple[PairTest, ...]:
    """Games-Howell pairs: Welch t per pair, p from the studentized range over all k groups.

    For groups ``a`` (later in ``labels``) and ``b``: ``t = (m_a - m_b) / se`` with
    ``se^2 = s_a^2 / n_a + s_b^2 / n_b`` and the Welch-Satterthwaite df; the adjusted
    p-value is ``P(Q > sqrt(2) |t|)`` for the studentized range ``Q`` with k groups. Games
    PA, Howell JF. Pairwise multiple comparison procedures with unequal n's and/or
    variances: a Monte Carlo study. J Educ Stat 1976;1:113-125. A pair needs 2 subjects and
    a spread in each of its two groups; other groups only set k. Validated against
    ``pingouin.pairwise_gameshowell``.
    """
    arrays, names = _samples(samples, labels)
    k = len(arrays)
    n, mean, var = _moments(arrays)
    out = []
    for i, j in combinations(range(k), 2):
        first, second = names[j], names[i]
        size = int(n[i] + n[j])
        two, two_names = [arrays[j], arrays[i]], [first, second]
        reason = _too_small(two, two_names) or _zero_variance(two, two_names)
        if reason:
            note = warn_not_estimable(f"{GAMES_HOWELL} {first} vs {second}", reason)
            out.append(PairTest(first, second, GAMES_HOWELL, *[math.nan] * 6, size, note))
            continue
        vi, vj = var[i] / n[i], var[j] / n[j]
        se = math.sqrt(vi + vj)
        diff = float(mean[j] - mean[i])
        t = diff / se
        df = (vi + vj) ** 2 / (vi**2 / (n[i] - 1) + vj**2 / (n[j] - 1))
        p_raw = float(2.0 * stats.t.sf(abs(t), df))
        p_adj = float(min(1.0, stats.studentized_range.sf(abs(t) * math.sqrt(2.0), k, df)))
        out.append(
            PairTest(first, second, GAMES_HOWELL, diff, se, t, float(df), p_raw, p_adj, size)
        )
    return tuple(out)


# --- effect sizes -------------------------------------------------------------------------


def _z(confidence_level: float) -> float:
    return float(stats.norm.ppf(0.5 + confidence_level / 2.0))


def hedges_g(
    x: ArrayLike,
    y: ArrayLike,
    *,
    confidence_level: float = 0.95,
    labels: tuple[str, str] = ("x", "y"),
) -> EffectSize:
    """Hedges' g of ``x`` minus ``y`` with its approximate standard-error interval.

    ``g = J d``, ``d = (mean_x - mean_y) / s_pooled`` (ddof 1), ``J = 1 - 3 / (4 (n_x + n_y)
    - 9)``; interval ``g -/+ t_{1-alpha/2, n_x+n_y-2} SE`` with the large-sample
    ``SE^2 = (n_x + n_y) / (n_x n_y) + g^2 / (2 (n_x + n_y))``. Hedges LV. Distribution
    theory for Glass's estimator of effect size and related estimators. J Educ Stat
    1981;6:107-128; SE of Hedges & Olkin, Statistical Methods for Meta-Analysis, 1985
    (memory). Validated against ``pingouin.compute_effsize(eftype='hedges')`` and
    ``pingouin.compute_esci``.
    """
    _check_level(confidence_level)
    x, y = _sample(x, "x"), _sample(y, "y")
    nx, ny = x.size, y.size
    method = "g -/+ t(n1+n2-2) x approximate SE (Hedges & Olkin 1985)"
    reason = _too_small([x, y], labels)
    pooled = 0.0
    if not reason:
        pooled = ((nx - 1) * x.var(ddof=1) + (ny - 1) * y.var(ddof=1)) / (nx + ny - 2)
        reason = "" if pooled > 0.0 else "zero pooled variance"
    if reason:
        return _not_estimable_effect(HEDGES_G, nx + ny, reason, confidence_level, method)
    g = (x.mean() - y.mean()) / math.sqrt(pooled) * (1.0 - 3.0 / (4.0 * (nx + ny) - 9.0))
    se = math.sqrt((nx + ny) / (nx * ny) + g * g / (2.0 * (nx + ny)))
    crit = float(stats.t.ppf(0.5 + confidence_level / 2.0, nx + ny - 2))
    ci = ConfidenceInterval(g - crit * se, g + crit * se, confidence_level, method)
    return EffectSize(HEDGES_G, float(g), ci, nx + ny)


def cliffs_delta(
    x: ArrayLike,
    y: ArrayLike,
    *,
    confidence_level: float = 0.95,
    labels: tuple[str, str] = ("x", "y"),
) -> EffectSize:
    """Cliff's delta ``P(x > y) - P(x < y)`` with Cliff's asymmetric interval.

    With ``d_ij = sign(x_i - y_j)``, row and column means ``d_i.``, ``d_.j`` and
    ``delta = mean(d_ij)``, the unbiased variance is
    ``s^2 = [n_y^2 sum (d_i. - delta)^2 + n_x^2 sum (d_.j - delta)^2 - sum (d_ij - delta)^2]
    / (n_x n_y (n_x - 1) (n_y - 1))``, floored at ``(1 - delta^2) / (n_x n_y - 1)``
    (memory), and the interval is
    ``(delta - delta^3 -/+ z s sqrt((1 - delta^2)^2 + z^2 s^2)) / (1 - delta^2 + z^2 s^2)``.
    Cliff N. Dominance statistics: ordinal analyses to answer ordinal questions. Psychol
    Bull 1993;114:494-509 (interval as in Feng & Cliff 2004, memory). At complete
    separation (|delta| = 1) that variance is 0; the interval then inverts the Hanley-McNeil
    variance (see :func:`_separated_interval`) and its ``method`` says so. Computed from
    sorted values in O(n log n). Validated: delta against pingouin's ``mwu`` (2 CLES - 1),
    the variance against the double sum written out, coverage by simulation.
    """
    _check_level(confidence_level)
    x, y = _sample(x, "x"), _sample(y, "y")
    nx, ny = x.size, y.size
    method = "Cliff 1993 asymmetric interval, normal quantile"
    small = _too_small([x, y], labels)
    if small:
        return _not_estimable_effect(CLIFFS_DELTA, nx + ny, small, confidence_level, method)
    ys, xs = np.sort(y), np.sort(x)
    below_y = np.searchsorted(ys, x, side="left")  # y_j < x_i
    above_y = ny - np.searchsorted(ys, x, side="right")  # y_j > x_i
    below_x = np.searchsorted(xs, y, side="left")  # x_i < y_j
    above_x = nx - np.searchsorted(xs, y, side="right")  # x_i > y_j
    row = (below_y - above_y) / ny
    col = (above_x - below_x) / nx
    delta = float(row.mean())
    ties = float(np.sum(ny - below_y - above_y))
    cells = nx * ny - ties - nx * ny * delta**2  # sum of (d_ij - delta)^2
    var = (ny**2 * np.sum((row - delta) ** 2) + nx**2 * np.sum((col - delta) ** 2) - cells) / (
        nx * ny * (nx - 1) * (ny - 1)
    )
    var = max(float(var), (1.0 - delta**2) / (nx * ny - 1))
    if abs(delta) == 1.0 or var <= 0.0:
        ci = _separated_interval(delta, nx, ny, confidence_level)
        return EffectSize(CLIFFS_DELTA, delta, ci, nx + ny)
    z = _z(confidence_level)
    s = math.sqrt(var)
    half = z * s * math.sqrt((1.0 - delta**2) ** 2 + z * z * var)
    denominator = 1.0 - delta**2 + z * z * var
    low = (delta - delta**3 - half) / denominator
    high = (delta - delta**3 + half) / denominator
    ci = ConfidenceInterval(max(-1.0, low), min(1.0, high), confidence_level, method)
    return EffectSize(CLIFFS_DELTA, delta, ci, nx + ny)


def _hanley_mcneil_gap(theta: float, m: int, n: int, z: float) -> float:
    """``(1 - theta) - z^2 V(theta) / (1 - theta)`` for the Hanley-McNeil variance ``V``."""
    return (1.0 - theta) - z * z * theta * (
        1.0 + (m - 1) * (1.0 - theta) / (2.0 - theta) + (n - 1) * theta / (1.0 + theta)
    ) / (m * n)


def _separated_interval(delta: float, nx: int, ny: int, level: float) -> ConfidenceInterval:
    """Interval for |delta| = 1, where Cliff's variance estimate is 0.

    With ``A = (delta + 1) / 2 = 1`` the limit is the root of ``(1 - A)^2 = z^2 V(A)`` for
    the Hanley-McNeil variance ``V(A) = A (1 - A) [1 + (m - 1)(1 - A)/(2 - A) + (n - 1) A /
    (1 + A)] / (m n)`` (Hanley JA, McNeil BJ. Radiology 1982;143:29-36), a score-type
    inversion like Wilson's; delta = -1 by symmetry with the samples swapped.
    """
    z = _z(level)
    m, n = (nx, ny) if delta > 0 else (ny, nx)
    root = optimize.brentq(_hanley_mcneil_gap, 0.0, 1.0, args=(m, n, z), xtol=1e-12)
    bound = 2.0 * root - 1.0
    low, high = (bound, 1.0) if delta > 0 else (-1.0, -bound)
    method = "score-type interval on the Hanley-McNeil variance (|delta| = 1)"
    return ConfidenceInterval(low, high, level, method, "complete separation of the samples")


# --- proportions --------------------------------------------------------------------------


def wilson_interval(
    positive: int, total: int, *, confidence_level: float = 0.95
) -> ConfidenceInterval:
    """Wilson score interval of a proportion (:func:`cohort.stats.proportions.wilson_interval`)."""
    _check_level(confidence_level)
    _check_counts(positive, total)
    return _wilson(positive, total, confidence_level)


def _check_counts(positive: int, total: int) -> None:
    for name, value in (("positive", positive), ("total", total)):
        if isinstance(value, bool) or not isinstance(value, int | np.integer) or value < 0:
            raise ValueError(f"{name} must be a non-negative integer, got {value!r}")
    if positive > total:
        raise ValueError(f"positive must not exceed total, got {positive} > {total}")


def risk_difference(
    positive_1: int, total_1: int, positive_2: int, total_2: int, *, confidence_level: float = 0.95
) -> EffectSize:
    """Difference of proportions ``p1 - p2`` with Newcombe's hybrid score interval.

    ``L = d - sqrt((p1 - l1)^2 + (u2 - p2)^2)``, ``U = d + sqrt((u1 - p1)^2 + (p2 - l2)^2)``
    from the Wilson limits ``(l_i, u_i)`` of each proportion. Newcombe RG. Interval
    estimation for the difference between independent proportions: comparison of eleven
    methods. Stat Med 1998;17:873-890, method 10. Validated against
    ``statsmodels.stats.proportion.confint_proportions_2indep(method='newcomb')`` and the
    paper's worked examples.
    """
    _check_level(confidence_level)
    method = "Newcombe hybrid score (1998, method 10)"
    if total_1 == 0 or total_2 == 0:
        _check_counts(positive_1, total_1)
        _check_counts(positive_2, total_2)
        return _not_estimable_effect(
            RISK_DIFFERENCE, total_1 + total_2, "a group has no subjects", confidence_level, method
        )
    a = wilson_interval(positive_1, total_1, confidence_level=confidence_level)
    b = wilson_interval(positive_2, total_2, confidence_level=confidence_level)
    p1, p2 = positive_1 / total_1, positive_2 / total_2
    d = p1 - p2
    low = d - math.sqrt((p1 - a.low) ** 2 + (b.high - p2) ** 2)
    high = d + math.sqrt((a.high - p1) ** 2 + (p2 - b.low) ** 2)
    ci = ConfidenceInterval(low, high, confidence_level, method)
    return EffectSize(RISK_DIFFERENCE, d, ci, total_1 + total_2)


def _log_choose(n: int) -> np.ndarray:
    k = np.arange(n + 1)
    return special.gammaln(n + 1) - special.gammaln(k + 1) - special.gammaln(n - k + 1)


def count_tables(totals: ArrayLike, positive_total: int) -> float:
    """Number of r x 2 tables with row totals ``totals`` and ``positive_total`` positives."""
    counts = np.zeros(positive_total + 1)
    counts[0] = 1.0
    for n in np.asarray(totals, dtype=int):
        cum = np.cumsum(counts)
        shifted = np.concatenate([np.zeros(n + 1), cum[: max(0, cum.size - n - 1)]])
        counts = cum - shifted[: cum.size]
    return float(counts[positive_total])


def freeman_halton(
    positive: ArrayLike,
    totals: ArrayLike,
    *,
    max_tables: int = FISHER_MAX_TABLES,
    n_draws: int = FISHER_DRAWS,
    seed: int | None = DEFAULT_SEED,
) -> GroupTest:
    """Fisher-Freeman-Halton exact test of an r x 2 table (positives and totals per group).

    Under fixed margins the table with ``x_i`` positives has probability
    ``prod C(n_i, x_i) / C(N, K)``; the p-value sums the probabilities of all tables no more
    probable than the observed one (relative tolerance 1e-7). Tables are enumerated
    exactly when there are at most ``max_tables``; otherwise ``n_draws`` tables are drawn
    from the multivariate hypergeometric null with ``numpy.random.default_rng(seed)`` and
    ``p = (1 + hits) / (1 + n_draws)``. ``p_method`` says which. Freeman GH, Halton JH.
    Note on an exact treatment of contingency, goodness of fit and other problems of
    significance. Biometrika 1951;38:141-149. Validated against ``scipy.stats.fisher_exact``
    (2x2 exactly; r x 2 with a seeded Monte Carlo) and a brute-force enumeration.
    """
    x = np.asarray(positive)
    n = np.asarray(totals)
    if x.shape != n.shape or x.ndim != 1:
        raise ValueError(f"positive and totals must be 1-d of one length, got {x.shape}, {n.shape}")
    for name, arr in (("positive", x), ("totals", n)):
        if not np.issubdtype(arr.dtype, np.integer) or (arr < 0).any():
            raise ValueError(f"{name} must hold non-negative integers, got {arr.tolist()}")
    if (x > n).any():
        raise ValueError(f"positive must not exceed totals, got {x.tolist()} > {n.tolist()}")
    if x.size < 2 or (n == 0).any():
        raise ValueError(f"totals must hold at least 2 groups with subjects, got {n.tolist()}")
    big_n, k = int(n.sum()), int(x.sum())
    logs = [_log_choose(int(v)) for v in n]
    log_total = float(_log_choose(big_n)[k])
    observed = sum(float(lc[int(v)]) for lc, v in zip(logs, x, strict=True)) - log_total
    limit = observed + math.log1p(1e-7)
    statistic = math.exp(observed)
    n_tables = count_tables(n, k)
    if n_tables <= max_tables:
        p = _enumerate_r_by_2(n, k, logs, log_total, limit)
        count = int(n_tables)
        p_method = (
            f"exact enumeration of {count:,} table{'' if count == 1 else 's'} "
            "with the observed margins"
        )
    else:
        rng = np.random.default_rng(seed)
        draws = rng.multivariate_hypergeometric(n.astype(np.int64), k, size=n_draws)
        lp = np.zeros(n_draws)
        for i, lc in enumerate(logs):
            lp += lc[draws[:, i]]
        hits = int(np.sum(lp - log_total <= limit))
        p = (1.0 + hits) / (1.0 + n_draws)
        p_method = (
            f"Monte Carlo: {n_draws:,} tables with the observed margins, numpy default_rng "
            f"seed={seed}, p = (1 + hits) / (1 + draws); exact enumeration needs "
            f"{n_tables:,.0f} tables > budget {max_tables:,}"
        )
    return GroupTest(
        FREEMAN_HALTON,
        statistic,
        "P(observed table)",
        math.nan,
        math.nan,
        min(1.0, p),
        p_method,
        big_n,
    )


def _enumerate_r_by_2(n, k, logs, log_total, limit) -> float:
    """Sum of null probabilities of tables at most as probable as the observed one."""
    r = n.size
    sums, lps = np.zeros(1, dtype=np.int64), np.zeros(1)
    capacity = np.concatenate([np.cumsum(n[::-1])[::-1], [0]])  # positives groups i.. can hold
    for i in range(r - 2):
        x = np.arange(n[i] + 1)
        sums = (sums[:, None] + x[None, :]).ravel()
        lps = (lps[:, None] + logs[i][None, :]).ravel()
        keep = (sums <= k) & (sums + capacity[i + 1] >= k)
        sums, lps = sums[keep], lps[keep]
    total = 0.0
    last, before = logs[r - 1], logs[r - 2]
    for x in range(int(n[r - 2]) + 1):
        rest = k - sums - x
        ok = (rest >= 0) & (rest <= n[r - 1])
        lp = lps[ok] + before[x] + last[rest[ok]] - log_total
        total += float(np.sum(np.exp(lp[lp <= limit])))
    return total


# --- per-subject summaries ----------------------------------------------------------------

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
    """
    values = _require(values, "values", ("subject", "method", "parameter", "segment", "value"))
    subjects = _require(subjects, "subjects", ("subject", "group"))
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
        territory = (
            values["territory"].astype(str).to_numpy()
            if "territory" in values.columns
            else v["segment"].map({s: seg.territory for s, seg in SEGMENTS.items()}).to_numpy()
        )
        named = v["subject"].map(culprit).to_numpy()
        inside = v[(territory == named) & (named != "")]
        agg = inside.groupby(keys, sort=True)["value"].agg(["mean", "count"]).reindex(base.index)
        part = agg.rename(columns={"mean": "value", "count": "n_segments"})
        part["n_segments"] = part["n_segments"].fillna(0).astype(int)
        has_name = base.index.get_level_values("subject").map(culprit).to_numpy() != ""
        part["note"] = np.where(
            has_name,
            np.where(part["n_segments"] > 0, "", "no segment of the culprit territory has a value"),
            _NO_CULPRIT,
        )
        parts.append(part.assign(summary=CULPRIT_MEAN))
        n_missing = int(part["value"].isna().sum())
        if n_missing:
            reasons = "; ".join(sorted(set(part.loc[part["value"].isna(), "note"])))
            warn_not_estimable(
                f"{CULPRIT_MEAN} of {n_missing} subject x method x parameter", reasons
            )
    out = pd.concat(parts).reset_index()
    out["group"] = out["subject"].map(group_of)
    out["n_segments"] = out["n_segments"].astype(int)
    rank = {p: i for i, p in enumerate(PARAMETERS)}
    # as plain text: a categorical column would map to a categorical and sort by its codes
    out["_p"] = out["parameter"].astype(str).map(rank).fillna(len(rank))
    out["_s"] = out["summary"].astype(str).map({s: i for i, s in enumerate(SUMMARY_KINDS)})
    out = out.sort_values(["_p", "parameter", "method", "_s", "subject"], kind="stable")
    return out[list(SUMMARY_COLUMNS)].reset_index(drop=True)


def _sorted_keys(frame: pd.DataFrame) -> list[tuple[str, str, str]]:
    keys = frame[["parameter", "method", "summary"]].drop_duplicates()
    rank = {p: i for i, p in enumerate(PARAMETERS)}
    srank = {s: i for i, s in enumerate(SUMMARY_KINDS)}
    return sorted(
        (tuple(k) for k in keys.itertuples(index=False)),
        key=lambda k: (rank.get(k[0], len(rank)), k[0], k[1], srank.get(k[2], len(srank)), k[2]),
    )


def _group_samples(part: pd.DataFrame, order: Sequence[str]) -> dict[str, np.ndarray]:
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
    """
    summaries = _require(
        summaries, "summaries", ("parameter", "method", "summary", "group", "value")
    )
    order = _order(summaries["group"], group_order, "summaries")
    rows = []
    with _unique_warnings():
        for parameter, method, summary in _sorted_keys(summaries):
            part = summaries[
                summaries["parameter"].eq(parameter)
                & summaries["method"].eq(method)
                & summaries["summary"].eq(summary)
            ]
            samples = _group_samples(part, order)
            for group in order:
                x = samples[group]
                row = {
                    "parameter": parameter,
                    "unit": PARAMETERS[parameter].unit if parameter in PARAMETERS else "",
                    "method": method,
                    "summary": summary,
                    "group": group,
                    "n_subjects": int(x.size),
                    "note": "",
                }
                if x.size == 0:
                    notes = part.loc[part["group"].eq(group), "note"] if "note" in part else []
                    shared = sorted(set(notes) - {""})
                    reason = (
                        shared[0] if len(shared) == 1 else "no subject of this group has a value"
                    )
                    row["note"] = warn_not_estimable(f"{summary} of group {group}", reason)
                    row.update(dict.fromkeys(("median", "q1", "q3", "mean", "sd"), math.nan))
                else:
                    q1, median, q3 = np.quantile(x, [0.25, 0.5, 0.75])
                    row.update(median=median, q1=q1, q3=q3, mean=float(x.mean()))
                    if x.size < 2:
                        row["sd"] = math.nan
                        row["note"] = warn_not_estimable(
                            f"SD of {summary} in group {group}", "a single subject"
                        )
                    else:
                        row["sd"] = float(x.std(ddof=1))
                rows.append(row)
    return pd.DataFrame(rows, columns=list(DESCRIPTIVE_COLUMNS))


# --- the group comparison table -----------------------------------------------------------


_COMPARISON_TEXT = (
    "test", "comparison", "statistic_name", "p_method", "correction", "family",
    "effect_size_name", "effect_ci_method", "note",
)  # fmt: skip


def _blank_row(**cells: object) -> dict[str, object]:
    """A comparison row: NaN numbers, empty texts, then ``cells``."""
    row: dict[str, object] = dict.fromkeys(COMPARISON_COLUMNS, math.nan)
    row.update(dict.fromkeys(_COMPARISON_TEXT, ""))
    row.update(cells)
    return row


def _join(*notes: str) -> str:
    return "; ".join(n for n in notes if n)


def _omnibus_label(included: Sequence[str], order: Sequence[str]) -> str:
    return ALL_GROUPS if list(included) == list(order) else "groups " + ", ".join(included)


def compare_summaries(
    summaries: pd.DataFrame,
    group_order: Sequence[str] | None = None,
    *,
    tests: Sequence[str] = TESTS,
    correction: str = HOLM,
    confidence_level: float = 0.95,
) -> pd.DataFrame:
    """Tests between groups on per-subject summaries: the ``group_comparison`` table.

    For each parameter, method and summary: ``"kruskal-wallis"`` runs Kruskal-Wallis over
    the groups, then Mann-Whitney U with Cliff's delta for each pair; ``"welch-anova"`` runs
    Welch's ANOVA, then Games-Howell with Hedges' g for each pair. Pairs read ``"later vs
    earlier"`` in ``group_order`` (e.g. ``"acute vs control"``); effect sizes are later minus
    earlier. A group with no value for a summary (controls have no culprit territory) is
    left out of that summary's tests, with a note on the omnibus row.

    Families (the ``family`` column): each omnibus test with the same summary over all
    parameters and methods of the table; the Mann-Whitney pairs of one omnibus test. Both
    corrected by ``correction`` (Holm by default). Games-Howell pairs are adjusted by the
    studentized range over their pairs (``correction`` says so) and not corrected again.
    Columns: :data:`COMPARISON_COLUMNS`. Rows validated against ``scipy.stats`` (kruskal,
    mannwhitneyu, f_oneway) and pingouin (compute_effsize) on the demo cohort; family
    corrections against ``statsmodels.stats.multitest.multipletests``.
    """
    summaries = _require(
        summaries, "summaries", ("parameter", "method", "summary", "group", "value")
    )
    correction = check_correction(correction)
    _check_level(confidence_level)
    unknown = [t for t in tests if t not in TESTS]
    if unknown or not tests:
        raise ValueError(f"tests must be a non-empty selection of {TESTS}, got {list(tests)}")
    order = _order(summaries["group"], group_order, "summaries")
    rows: list[dict[str, object]] = []
    with _unique_warnings():
        for parameter, method, summary in _sorted_keys(summaries):
            part = summaries[
                summaries["parameter"].eq(parameter)
                & summaries["method"].eq(method)
                & summaries["summary"].eq(summary)
            ]
            samples = _group_samples(part, order)
            included = [g for g in order if samples[g].size > 0]
            left_out = [g for g in order if samples[g].size == 0]
            key = {"parameter": parameter, "method": method, "summary": summary}
            note = f"left out (no value): {', '.join(left_out)}" if left_out else ""
            for name in tests:
                rows += _test_rows(key, samples, included, order, name, note, confidence_level)
    table = pd.DataFrame(rows, columns=list(COMPARISON_COLUMNS))
    table["confidence_level"] = table["confidence_level"].fillna(confidence_level)
    adjustable = table["correction"].eq("").to_numpy() & table["family"].ne("").to_numpy()
    table.loc[adjustable, "correction"] = correction
    return adjust_table(table, method=correction, rows=adjustable)


def _test_rows(key, samples, included, order, name, note, confidence_level) -> list[dict]:
    rank = name == "kruskal-wallis"
    test_name = KRUSKAL_WALLIS if rank else WELCH_ANOVA
    comparison = _omnibus_label(included, order)
    summary = key["summary"]
    family = f"{test_name} {ALL_GROUPS}, summary {summary}: every parameter x method"
    if len(included) < 2:
        reason = f"fewer than 2 groups with values ({', '.join(included) or 'none'})"
        cells = _blank_row(**key, test=test_name, comparison=comparison, n_subjects=0)
        cells["note"] = _join(note, warn_not_estimable(test_name, reason))
        return [cells]
    arrays = [samples[g] for g in included]
    result = (kruskal_wallis if rank else welch_anova)(arrays, included)
    omnibus = _blank_row(**key, **result.row(), comparison=comparison, family=family)
    omnibus["note"] = _join(note, result.note)
    omnibus["effect_size_name"] = "none for the omnibus test (see the pairs)"
    rows = [omnibus]
    pair_family = f"{MANN_WHITNEY if rank else GAMES_HOWELL} pairs: {key['parameter']}, " + (
        f"{key['method']}, {summary}"
    )
    if rank:
        for i, j in combinations(range(len(included)), 2):
            first, second = included[j], included[i]
            two = (samples[first], samples[second])
            test = mann_whitney(*two, labels=(first, second))
            effect = cliffs_delta(*two, confidence_level=confidence_level, labels=(first, second))
            row = _blank_row(**key, **test.row(), comparison=f"{first} vs {second}")
            row.update(effect.row())
            row.update(family=pair_family, note=_join(test.note, effect.row()["note"]))
            rows.append(row)
    else:
        for pair in games_howell(arrays, included):
            effect = hedges_g(
                samples[pair.first],
                samples[pair.second],
                confidence_level=confidence_level,
                labels=(pair.first, pair.second),
            )
            row = _blank_row(
                **key,
                test=GAMES_HOWELL,
                comparison=pair.comparison,
                statistic=pair.statistic,
                statistic_name="t (Welch)",
                df=pair.df,
                p_value=pair.p_value,
                p_method="t distribution, Welch df (unadjusted)",
                p_adjusted=pair.p_adjusted,
                correction="studentized range (Games-Howell)",
                family=pair_family,
                n_subjects=pair.n_subjects,
            )
            row.update(effect.row())
            row["note"] = _join(pair.note, effect.row()["note"])
            rows.append(row)
    return rows


# --- proportions of positive subjects -----------------------------------------------------


@dataclass(frozen=True)
class ProportionComparison:
    """Proportions of positive subjects per group and the tests between groups."""

    proportions: pd.DataFrame
    """Columns :data:`PROPORTION_COLUMNS`."""
    tests: pd.DataFrame
    """Columns :data:`PROPORTION_TEST_COLUMNS`."""

    def to_frame(self) -> pd.DataFrame:
        return self.tests


def _positive_flags(frame: pd.DataFrame, name: str) -> tuple[pd.DataFrame, int]:
    flags = frame["positive"]
    missing = flags.isna().to_numpy()
    known = frame[~missing]
    values = known["positive"]
    if values.dtype == bool or str(values.dtype) == "boolean":
        as_bool = values.astype(bool)
    else:
        numeric = pd.to_numeric(values, errors="coerce")
        if not numeric.isin([0, 1]).all():
            examples = sorted({str(v) for v in values[~numeric.isin([0, 1])]})[:5]
            raise ValueError(f"{name}['positive'] must be boolean (or 0/1), got {examples}")
        as_bool = numeric.astype(bool)
    return known.assign(positive=as_bool.to_numpy()), int(missing.sum())


def compare_proportions(
    subject_findings: pd.DataFrame,
    group_order: Sequence[str] | None = None,
    *,
    correction: str = HOLM,
    confidence_level: float = 0.95,
    max_tables: int = FISHER_MAX_TABLES,
    n_draws: int = FISHER_DRAWS,
    seed: int | None = DEFAULT_SEED,
) -> ProportionComparison:
    """Proportions of positive subjects per group, Fisher tests and risk differences.

    ``subject_findings`` holds one row per subject, method and finding (``subject, group,
    method, finding, positive``; missing ``positive`` is left out and counted in the note).
    Per method and finding: Wilson intervals per group; over all groups Fisher's exact test
    (two groups, ``scipy.stats.fisher_exact``) or the Fisher-Freeman-Halton test
    (:func:`freeman_halton`); for each pair, Fisher's exact 2x2 test and the risk difference
    (later minus earlier group) with Newcombe's hybrid score interval. Families: the
    omnibus tests over all methods x findings; the pairs of one method and finding; both
    corrected by ``correction``. Validated against ``scipy.stats.fisher_exact`` and
    ``statsmodels.stats.proportion.confint_proportions_2indep(method='newcomb')``.
    """
    subject_findings = _require(
        subject_findings, "subject_findings", ("subject", "group", "method", "finding", "positive")
    )
    correction = check_correction(correction)
    _check_level(confidence_level)
    data, n_missing = _positive_flags(subject_findings, "subject_findings")
    data = data.astype({"group": str})
    duplicated = data.duplicated(["subject", "method", "finding"])
    if duplicated.any():
        raise ValueError(
            "subject_findings must hold one row per subject, method and finding, got "
            f"{int(duplicated.sum())} repeated rows"
        )
    order = _order(subject_findings["group"].astype(str), group_order, "subject_findings")
    prop_rows, test_rows = [], []
    missing_note = f"{n_missing} rows without a positive flag left out" if n_missing else ""
    with _unique_warnings():
        for (method, finding), part in data.groupby(["method", "finding"], sort=True):
            counts = part.groupby("group")["positive"].agg(["sum", "count"])
            counts = counts.reindex(order).fillna(0).astype(int)
            key = {"method": method, "finding": finding}
            for group in order:
                x, n = int(counts.loc[group, "sum"]), int(counts.loc[group, "count"])
                ci = wilson_interval(x, n, confidence_level=confidence_level)
                note = ci.note
                if n == 0:
                    note = warn_not_estimable(
                        f"proportion {finding} in group {group}", "no subjects"
                    )
                prop_rows.append(
                    {
                        **key,
                        "group": group,
                        "n_subjects": n,
                        "n_positive": x,
                        "proportion": x / n if n else math.nan,
                        "ci_low": ci.low,
                        "ci_high": ci.high,
                        "ci_method": ci.method,
                        "confidence_level": confidence_level,
                        "note": note,
                    }
                )
            included = [g for g in order if counts.loc[g, "count"] > 0]
            test_rows += _proportion_tests(
                key,
                counts,
                included,
                order,
                confidence_level,
                max_tables,
                n_draws,
                seed,
                missing_note,
            )
    proportions = pd.DataFrame(prop_rows, columns=list(PROPORTION_COLUMNS))
    tests = pd.DataFrame(test_rows, columns=list(PROPORTION_TEST_COLUMNS))
    adjustable = tests["family"].ne("").to_numpy()
    tests.loc[adjustable, "correction"] = correction
    return ProportionComparison(
        proportions, adjust_table(tests, method=correction, rows=adjustable)
    )


def _counts_text(counts: pd.DataFrame, groups: Sequence[str]) -> str:
    return ", ".join(
        f"{g} {int(counts.loc[g, 'sum'])}/{int(counts.loc[g, 'count'])}" for g in groups
    )


def _proportion_tests(key, counts, included, order, level, max_tables, n_draws, seed, note):
    def blank(**cells):
        row = dict.fromkeys(PROPORTION_TEST_COLUMNS, math.nan)
        row.update(dict.fromkeys((*_COMPARISON_TEXT, "counts"), ""))
        row.update(key, confidence_level=level, **cells)
        return row

    rows = []
    label = _omnibus_label(included, order)
    family = "Fisher all-groups tests: every method x finding"
    if len(included) < 2:
        reason = f"fewer than 2 groups with subjects ({', '.join(included) or 'none'})"
        rows.append(
            blank(
                test=FISHER_2X2,
                comparison=label,
                n_subjects=0,
                note=_join(note, warn_not_estimable(FISHER_2X2, reason)),
            )
        )
        return rows
    x = counts.loc[included, "sum"].to_numpy(dtype=np.int64)
    n = counts.loc[included, "count"].to_numpy(dtype=np.int64)
    if len(included) == 2:
        res = stats.fisher_exact([[x[1], n[1] - x[1]], [x[0], n[0] - x[0]]])
        omnibus = GroupTest(
            FISHER_2X2,
            float(res.statistic),
            "odds ratio (sample)",
            math.nan,
            math.nan,
            float(res.pvalue),
            "exact (scipy.stats.fisher_exact, 2x2)",
            int(n.sum()),
        )
    else:
        omnibus = freeman_halton(x, n, max_tables=max_tables, n_draws=n_draws, seed=seed)
    row = blank(
        **omnibus.row(), comparison=label, counts=_counts_text(counts, included), family=family
    )
    left_out = [g for g in order if g not in included]
    row["note"] = _join(note, f"left out (no subjects): {', '.join(left_out)}" if left_out else "")
    row["effect_size_name"] = "none for the omnibus test (see the pairs)"
    rows.append(row)
    pair_family = f"Fisher pairs: {key['method']}, {key['finding']}"
    for i, j in combinations(range(len(included)), 2):
        first, second = included[j], included[i]
        a, na, b, nb = int(x[j]), int(n[j]), int(x[i]), int(n[i])
        res = stats.fisher_exact([[a, na - a], [b, nb - b]])
        effect = risk_difference(a, na, b, nb, confidence_level=level)
        odds = float(res.statistic)
        odds_note = "sample odds ratio undefined (0/0)" if math.isnan(odds) else ""
        row = blank(
            test=FISHER_2X2,
            comparison=f"{first} vs {second}",
            counts=_counts_text(counts, [first, second]),
            statistic=odds,
            statistic_name="odds ratio (sample)",
            p_value=float(res.pvalue),
            p_method="exact (scipy.stats.fisher_exact, 2x2)",
            family=pair_family,
        )
        row.update(effect.row())
        row["note"] = _join(odds_note, effect.row()["note"])
        rows.append(row)
    return rows


# --- segment-level models -----------------------------------------------------------------


def _check_path(path: str) -> None:
    if path not in MODEL_PATHS:
        raise ValueError(f"path must be one of {MODEL_PATHS}, got {path!r}")


def choose_model_path(
    n_observations: int,
    path: str = "auto",
    max_mixed_observations: int = MIXED_MODEL_MAX_OBSERVATIONS,
) -> tuple[str, str]:
    """The linear-model path (``"mixed"`` or ``"subject-means"``) and why it was chosen.

    ``"auto"`` picks the mixed model up to ``max_mixed_observations`` segment values in the
    largest fit (see :data:`MIXED_MODEL_MAX_OBSERVATIONS`), subject means above.
    """
    _check_path(path)
    if path != "auto":
        return path, f"{path} requested"
    if n_observations <= max_mixed_observations:
        return "mixed", f"auto: {n_observations:,} values per fit <= {max_mixed_observations:,}"
    return "subject-means", (
        f"auto, large cohort: {n_observations:,} values per fit > {max_mixed_observations:,}"
    )


def _subject_info(
    subjects: pd.DataFrame | None, covariates: Sequence[str], frame: pd.DataFrame
) -> pd.DataFrame:
    """Group and covariates per subject (covariates from ``subjects``)."""
    if covariates and subjects is None:
        raise ValueError("subjects must be given when covariates are requested")
    if subjects is not None:
        subjects = _require(subjects, "subjects", ("subject", "group", *covariates))
        info = subjects[["subject", "group", *covariates]].astype({"subject": str, "group": str})
        return info.drop_duplicates("subject").set_index("subject")
    info = frame[["subject", "group"]].astype(str).drop_duplicates("subject")
    return info.set_index("subject")


def _design(info: pd.DataFrame, order: Sequence[str], covariates: Sequence[str]):
    """Subject-level design: intercept, group dummies (first present group as reference),
    numeric covariates as they are, other covariates as dummies of their sorted levels."""
    present = [g for g in order if (info["group"] == g).any()]
    columns, names = [np.ones(len(info))], ["intercept"]
    for g in present[1:]:
        columns.append((info["group"] == g).to_numpy(dtype=float))
        names.append(f"group[{g}]")
    keep = np.ones(len(info), dtype=bool)
    for cov in covariates:
        raw = info[cov]
        text = raw.astype(object).where(raw.notna(), "").map(lambda v: str(v).strip())
        blank = (text == "").to_numpy()
        number = pd.to_numeric(text.where(~blank), errors="coerce").to_numpy(dtype=float)
        keep &= ~blank
        if np.all(np.isfinite(number[~blank])):
            columns.append(np.where(blank, 0.0, number))
            names.append(cov)
        else:
            levels = sorted(set(text[~blank]))
            for level in levels[1:]:
                columns.append((text == level).to_numpy(dtype=float))
                names.append(f"{cov}[{level}]")
    return np.column_stack(columns), names, present, keep


def _moment_variance(y: np.ndarray, x: np.ndarray, codes: np.ndarray) -> float:
    """One-way ANOVA (method of moments) between-subject variance of the OLS residuals."""
    resid = y - x @ np.linalg.lstsq(x, y, rcond=None)[0]
    m = np.bincount(codes).astype(float)
    k, n = m.size, y.size
    if k < 2 or n <= k:
        return math.nan
    means = np.bincount(codes, weights=resid) / m
    msb = np.sum(m * (means - resid.mean()) ** 2) / (k - 1)
    msw = np.sum((resid - means[codes]) ** 2) / (n - k)
    m0 = (n - np.sum(m * m) / n) / (k - 1)
    return float((msb - msw) / m0)


def _fit_mixed(y: np.ndarray, x: np.ndarray, codes: np.ndarray):
    """REML fit of a random intercept per subject; BFGS, then Powell if BFGS fails."""
    model = sm.MixedLM(y, x, groups=codes)
    tried = []
    # BFGS is fast inside the parameter space but searches long when the REML variance is
    # at its boundary (0); a method-of-moments estimate <= 0 predicts that, so start with
    # Powell then. The optimiser changes speed only, not the estimand.
    interior = _moment_variance(y, x, codes) > 0.0
    for optimiser in ("bfgs", "powell") if interior else ("powell", "bfgs"):
        with warnings.catch_warnings():
            # statsmodels warns while it searches; convergence is checked here instead
            warnings.simplefilter("ignore")
            try:
                result = model.fit(reml=True, method=[optimiser])
            except (np.linalg.LinAlgError, ValueError, FloatingPointError) as exc:
                tried.append(f"{optimiser} failed ({type(exc).__name__})")
                continue
        if result.converged:
            return result, _join(*tried, f"optimiser {optimiser}")
        tried.append(f"{optimiser} did not converge")
    return None, _join(*tried)


def _terms(estimates, cov, names, dist_df, level):
    """Wald rows for every term but the intercept; ``dist_df`` None means normal (z)."""
    se = np.sqrt(np.diag(cov))
    stat = estimates / se
    if dist_df is None:
        p = 2.0 * stats.norm.sf(np.abs(stat))
        crit, stat_name, method = _z(level), "z", "Wald, normal quantile"
    else:
        p = 2.0 * stats.t.sf(np.abs(stat), dist_df)
        crit = float(stats.t.ppf(0.5 + level / 2.0, dist_df))
        stat_name, method = "t", f"t quantile, {dist_df:g} df"
    for i, name in enumerate(names):
        if name == "intercept":
            continue
        yield {
            "term": name,
            "estimate": float(estimates[i]),
            "std_error": float(se[i]),
            "ci_low": float(estimates[i] - crit * se[i]),
            "ci_high": float(estimates[i] + crit * se[i]),
            "ci_method": method,
            "statistic": float(stat[i]),
            "statistic_name": stat_name,
            "df": math.nan if dist_df is None else float(dist_df),
            "p_value": float(p[i]),
        }


def _joint(estimates, cov, index, dist_df):
    b = estimates[index]
    v = cov[np.ix_(index, index)]
    wald = float(b @ np.linalg.solve(v, b))
    q = len(index)
    if dist_df is None:
        return {
            "statistic": wald,
            "statistic_name": "Wald chi2",
            "df": float(q),
            "p_value": float(stats.chi2.sf(wald, q)),
        }
    f = wald / q
    return {
        "statistic": f,
        "statistic_name": "F",
        "df": float(q),
        "df_denominator": float(dist_df),
        "p_value": float(stats.f.sf(f, q, dist_df)),
    }


_MODEL_TEXT = (
    "parameter", "method", "finding", "model", "path", "term", "estimate_name", "ci_method",
    "statistic_name", "correction", "family", "note",
)  # fmt: skip


def _model_row(**cells: object) -> dict[str, object]:
    """A model row: NaN numbers, empty texts, then ``cells``."""
    row: dict[str, object] = dict.fromkeys(MODEL_COLUMNS, math.nan)
    row.update(dict.fromkeys(_MODEL_TEXT, ""))
    row.update(cells)
    return row


class _NotEstimable(Exception):
    """Raised inside a fit to turn it into a not-estimable row (the message is the reason)."""


def _gee_fit(y, x, codes, groups_of_rows, present):
    flat = [g for g in present if np.ptp(y[groups_of_rows == g]) == 0]
    if flat:
        raise _NotEstimable(
            f"separation: every segment of group(s) {', '.join(flat)} has the same outcome"
        )
    family, cov_struct = sm.families.Binomial(), sm.cov_struct.Exchangeable()
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", ConvergenceWarning)
        warnings.simplefilter("always", IterationLimitWarning)
        result = sm.GEE(y, x, groups=codes, family=family, cov_struct=cov_struct).fit()
    if any(issubclass(w.category, (ConvergenceWarning, IterationLimitWarning)) for w in caught):
        raise _NotEstimable("GEE iterations did not converge")
    note = f"exchangeable correlation {float(result.cov_struct.dep_params):.3g}"
    return np.asarray(result.params), np.asarray(result.cov_params()), None, note


def _mixed_fit(y, x, codes):
    result, how = _fit_mixed(y, x, codes)
    if result is None:
        raise _NotEstimable(f"REML optimisation did not converge ({how})")
    p = x.shape[1]
    cov = np.asarray(result.cov_params())[:p, :p]
    if float(np.asarray(result.cov_re)[0, 0]) <= 1e-8 * float(result.scale):
        how = _join(how, "random-intercept variance at the boundary (0)")
    return np.asarray(result.fe_params), cov, None, how


def _subject_means_fit(y, x_s, codes):
    counts = np.bincount(codes).astype(float)
    means = np.bincount(codes, weights=y) / counts
    result = sm.OLS(means, x_s).fit()
    note = f"OLS of {means.size} subject means"
    if np.ptp(counts) > 0:
        note += f" (segments per subject {int(counts.min())}-{int(counts.max())})"
    cov = np.asarray(result.cov_params())
    return np.asarray(result.params), cov, float(result.df_resid), note


def _fit_rows(frame, y, info, order, covariates, kind, key, level, estimate_name):
    """One fit (kind "mixed", "subject-means" or "gee"): term rows and the joint row."""
    path = {"mixed": MIXED_PATH, "subject-means": SUBJECT_MEANS_PATH, "gee": GEE_PATH}[kind]
    base = {**key, "path": path, "confidence_level": level}
    label = ", ".join(str(key[c]) for c in ("parameter", "method", "finding") if key.get(c))
    codes, ids = pd.factorize(frame["subject"].astype(str), sort=True)
    unknown = sorted(set(ids) - set(info.index))
    if unknown:
        raise ValueError(f"subjects table lacks subjects of the model data: {unknown[:5]}")
    sub_info = info.loc[ids]
    keep = _design(sub_info, order, covariates)[3]
    notes = []
    if not keep.all():
        notes.append(f"{int((~keep).sum())} subjects without covariate values left out")
        rows_kept = keep[codes]
        y, codes = y[rows_kept], pd.factorize(codes[rows_kept], sort=True)[0]
        sub_info = sub_info[keep]
    x_s, names, present, _ = _design(sub_info, order, covariates)
    common = {"n_subjects": len(sub_info), "n_observations": int(y.size)}
    sizes = sub_info["group"].value_counts()
    small = [f"{g} (n={int(sizes[g])})" for g in present if sizes[g] < MIN_SUBJECTS_PER_GROUP]
    try:
        if len(present) < 2:
            raise _NotEstimable(
                f"fewer than 2 groups with subjects ({', '.join(present) or 'none'})"
            )
        if small:
            raise _NotEstimable(
                f"fewer than {MIN_SUBJECTS_PER_GROUP} subjects in {', '.join(small)}"
            )
        constant = [c for c in covariates if sub_info[c].astype(str).nunique() < 2]
        if constant:
            raise _NotEstimable(f"covariate(s) {', '.join(constant)} constant in this fit")
        if np.linalg.matrix_rank(x_s) < x_s.shape[1]:
            raise _NotEstimable("design matrix rank deficient (a covariate constant or collinear)")
        if kind == "gee":
            groups_of_rows = sub_info["group"].to_numpy()[codes]
            fit = _gee_fit(y, x_s[codes], codes, groups_of_rows, present)
        elif kind == "mixed":
            fit = _mixed_fit(y, x_s[codes], codes)
        else:
            fit = _subject_means_fit(y, x_s, codes)
    except _NotEstimable as reason:
        note = warn_not_estimable(f"{key['model']} ({label})", str(reason))
        return [_model_row(**base, **common, term=JOINT_GROUP, note=_join(*notes, note))]
    estimates, cov, dist_df, fit_note = fit
    reference = present[0]
    rows = []
    for cells in _terms(estimates, cov, names, dist_df, level):
        if cells["term"].startswith("group["):
            extra = {
                "estimate_name": f"{estimate_name} vs {reference}",
                "family": f"{key['model']} group terms vs {reference}: {label}",
            }
        else:
            per = "per unit" if cells["term"] in covariates else "vs first level"
            extra = {
                "estimate_name": f"{estimate_name} {per}",
                "correction": "none (covariate, not a group comparison)",
            }
        rows.append(_model_row(**base, **cells, **common, **extra))
    group_index = [i for i, n in enumerate(names) if n.startswith("group[")]
    over = "method x finding" if kind == "gee" else "parameter x method"
    rows.append(_model_row(
        **base, **_joint(estimates, cov, group_index, dist_df), **common, term=JOINT_GROUP,
        estimate_name=f"joint test of {len(group_index)} group terms",
        family=f"{key['model']} joint group tests: every {over}", note=_join(*notes, fit_note),
    ))  # fmt: skip
    return rows


def _finish_models(rows: list[dict[str, object]], correction: str) -> pd.DataFrame:
    table = pd.DataFrame(rows, columns=list(MODEL_COLUMNS))
    adjustable = table["family"].ne("").to_numpy() & table["correction"].eq("").to_numpy()
    table.loc[adjustable, "correction"] = correction
    return adjust_table(table, method=correction, rows=adjustable)


def _largest_fit(frame: pd.DataFrame, keys: Sequence[str]) -> int:
    return int(frame.groupby(list(keys)).size().max()) if len(frame) else 0


def _pairs(frame: pd.DataFrame, columns: Sequence[str]) -> list[tuple]:
    keys = frame[list(columns)].drop_duplicates()
    rank = {p: i for i, p in enumerate(PARAMETERS)}
    return sorted(
        (tuple(k) for k in keys.itertuples(index=False)),
        key=lambda k: tuple((rank.get(v, len(rank)), str(v)) for v in k),
    )


def _linear_models(
    frame, outcome, model, subjects, order, covariates, kind, why, correction, level
):
    """One linear fit per parameter and method of ``frame``; ``outcome(part)`` gives y."""
    info = _subject_info(subjects, covariates, frame)
    rows: list[dict[str, object]] = []
    with _unique_warnings():
        for parameter, method in _pairs(frame, ("parameter", "method")):
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
    table.loc[joint, "note"] = [_join(n, why) for n in table.loc[joint, "note"]]
    return table


def _segment_values(part: pd.DataFrame) -> np.ndarray:
    return part["value"].to_numpy(dtype=float)


def _method_differences(part: pd.DataFrame) -> np.ndarray:
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
    (t tests, F for the joint test); :func:`choose_model_path` decides, and the ``path``
    column and the joint row's note say which ran and why. Rows: each group term
    (difference from the first group), each covariate term, and the joint Wald test of the
    group terms. Families: the group terms of one fit; the joint tests over every parameter
    x method. Validated against a direct ``statsmodels.formula.api.mixedlm`` fit and, for
    the large path, against the mixed model on a balanced design.
    """
    values = _require(values, "values", ("subject", "method", "parameter", "value"))
    correction = check_correction(correction)
    _check_level(confidence_level)
    order = _order(_subject_info(subjects, covariates, values)["group"], group_order, "subjects")
    kind, why = choose_model_path(
        _largest_fit(values, ["parameter", "method"]), path, max_mixed_observations
    )
    return _linear_models(
        values, _segment_values, GROUP_DIFFERENCE, subjects, order, covariates, kind, why,
        correction, confidence_level,
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
    """
    columns = ("parameter", "method", "subject", "group", "reference_value", "test_value")
    paired = _require(paired, "paired", columns)
    correction = check_correction(correction)
    _check_level(confidence_level)
    order = _order(_subject_info(subjects, covariates, paired)["group"], group_order, "subjects")
    kind, why = choose_model_path(
        _largest_fit(paired, ["parameter", "method"]), path, max_mixed_observations
    )
    return _linear_models(
        paired, _method_differences, METHOD_BY_GROUP, subjects, order, covariates, kind, why,
        correction, confidence_level,
    )  # fmt: skip


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
    subject-level Fisher tests of :func:`compare_proportions` still answer then.
    Validated against a direct ``statsmodels.formula.api.gee`` fit. The fits (one per
    method and finding) run in ``workers`` processes (:func:`cohort.parallel.map_shared`),
    with the same results.
    """
    segment_findings = _require(
        segment_findings,
        "segment_findings",
        ("subject", "group", "method", "finding", "segment", "positive"),
    )
    correction = check_correction(correction)
    _check_level(confidence_level)
    data, n_missing = _positive_flags(segment_findings, "segment_findings")
    info = _subject_info(subjects, covariates, data)
    order = _order(info["group"], group_order, "subjects")
    pairs = list(_pairs(data, ("method", "finding")))
    shared = (data, pairs, info, order, tuple(covariates), confidence_level)
    with _unique_warnings():
        fits = map_shared(_finding_fit, shared, len(pairs), workers)
    table = _finish_models([row for rows in fits for row in rows], correction)
    if n_missing:
        left_out = f"{n_missing} rows without a positive flag left out"
        table["note"] = [_join(n, left_out) for n in table["note"]]
    return table


def _finding_fit(shared, index: int) -> list[dict[str, object]]:
    """The GEE rows of one (method, finding) of :func:`finding_models`."""
    data, pairs, info, order, covariates, confidence_level = shared
    method, finding = pairs[index]
    part = data[data["method"].eq(method) & data["finding"].eq(finding)]
    key = {"method": method, "finding": finding, "model": FINDING_BY_GROUP}
    y = part["positive"].to_numpy(dtype=float)
    return _fit_rows(
        part, y, info, order, covariates, "gee", key, confidence_level, "log odds ratio"
    )


# --- everything at once -------------------------------------------------------------------


@dataclass(frozen=True)
class GroupComparison:
    """All group-comparison tables of a study (tidy DataFrames; columns in the constants)."""

    comparisons: pd.DataFrame
    """The ``group_comparison`` table, :data:`COMPARISON_COLUMNS`."""
    descriptives: pd.DataFrame
    """:data:`DESCRIPTIVE_COLUMNS`."""
    models: pd.DataFrame
    """Mixed model, GEE and method x group rows, :data:`MODEL_COLUMNS`."""
    proportions: pd.DataFrame
    """:data:`PROPORTION_COLUMNS` (empty without ``subject_findings``)."""
    proportion_tests: pd.DataFrame
    """:data:`PROPORTION_TEST_COLUMNS` (empty without ``subject_findings``)."""
    summaries: pd.DataFrame
    """Per-subject summaries, :data:`SUMMARY_COLUMNS`."""
    model_path: str
    """Which linear-model path ran and why (also in each model row's ``path`` and note)."""

    def to_frame(self) -> pd.DataFrame:
        return self.comparisons

    def tables(self) -> dict[str, pd.DataFrame]:
        """The tables by name, for writing out at the edge."""
        return {
            "group_comparison": self.comparisons,
            "group_descriptives": self.descriptives,
            "group_models": self.models,
            "finding_proportions": self.proportions,
            "finding_group_tests": self.proportion_tests,
            "subject_summaries": self.summaries,
        }


def group_comparison_table(
    values: pd.DataFrame,
    subjects: pd.DataFrame,
    group_order: Sequence[str] | None = None,
    *,
    paired: pd.DataFrame | None = None,
    subject_findings: pd.DataFrame | None = None,
    segment_findings: pd.DataFrame | None = None,
    covariates: Sequence[str] = (),
    tests: Sequence[str] = TESTS,
    correction: str = HOLM,
    confidence_level: float = 0.95,
    model_path: str = "auto",
    max_mixed_observations: int = MIXED_MODEL_MAX_OBSERVATIONS,
    fisher_max_tables: int = FISHER_MAX_TABLES,
    fisher_draws: int = FISHER_DRAWS,
    seed: int | None = DEFAULT_SEED,
    workers: int = 1,
) -> GroupComparison:
    """The whole group comparison of a study: summaries, descriptives, tests, models.

    ``values`` and ``subjects`` as in :class:`~cohort.io.study.Study`; ``paired`` (its
    ``paired`` table) adds the method x group interaction models; ``subject_findings``
    (``subject, group, method, finding, positive``) adds proportions and Fisher tests;
    ``segment_findings`` (the same per segment) adds GEE models. Each part is corrected
    within its stated families by ``correction`` (see :func:`compare_summaries`,
    :func:`compare_proportions`, :func:`group_models`). One linear-model path is chosen
    for all fits (:func:`choose_model_path` on the largest fit); ``model_path`` of the
    result says which and why. ``workers``: processes for the GEE fits (same results).
    """
    correction = check_correction(correction)
    _check_level(confidence_level)
    _check_path(model_path)
    values = _require(values, "values", ("subject", "method", "parameter", "segment", "value"))
    subjects = _require(subjects, "subjects", ("subject", "group"))
    if paired is not None:
        paired = _require(paired, "paired", ("parameter", "method", "subject", "group"))
    with _unique_warnings():
        summaries = subject_summaries(values, subjects)
        order = _order(subjects["group"].astype(str), group_order, "subjects")
        descriptives = describe_groups(summaries, order)
        comparisons = compare_summaries(
            summaries, order, tests=tests, correction=correction, confidence_level=confidence_level
        )
        largest = _largest_fit(values, ["parameter", "method"])
        if paired is not None:
            largest = max(largest, _largest_fit(paired, ["parameter", "method"]))
        kind, why = choose_model_path(largest, model_path, max_mixed_observations)
        linear = (subjects, order, covariates, kind, why, correction, confidence_level)
        parts = [_linear_models(values, _segment_values, GROUP_DIFFERENCE, *linear)]
        if paired is not None:
            parts.append(_linear_models(paired, _method_differences, METHOD_BY_GROUP, *linear))
        if segment_findings is not None:
            parts.append(
                finding_models(
                    segment_findings, subjects, order, covariates=covariates,
                    correction=correction, confidence_level=confidence_level, workers=workers,
                )
            )  # fmt: skip
        models = pd.concat(parts, ignore_index=True)
        if subject_findings is not None:
            found = compare_proportions(
                subject_findings,
                order,
                correction=correction,
                confidence_level=confidence_level,
                max_tables=fisher_max_tables,
                n_draws=fisher_draws,
                seed=seed,
            )
            proportions, proportion_tests = found.proportions, found.tests
        else:
            proportions = pd.DataFrame(columns=list(PROPORTION_COLUMNS))
            proportion_tests = pd.DataFrame(columns=list(PROPORTION_TEST_COLUMNS))
    path_text = {"mixed": MIXED_PATH, "subject-means": SUBJECT_MEANS_PATH}[kind]
    return GroupComparison(
        comparisons,
        descriptives,
        models,
        proportions,
        proportion_tests,
        summaries,
        f"{path_text} ({why})",
    )


def study_group_comparison(study: Study, **options: Any) -> GroupComparison:
    """:func:`group_comparison_table` of a :class:`~cohort.io.study.Study` (its values,
    subjects, group order and paired table); ``options`` as there (findings included)."""
    return group_comparison_table(
        study.values, study.subjects, study.groups, paired=study.paired, **options
    )
