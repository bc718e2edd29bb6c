"""Tests between groups of independent values: Kruskal-Wallis, Mann-Whitney, Welch, Games-Howell.

Each group is an array of per-subject values (subjects are independent; segments are
summarised per subject before they get here). A test returns a :class:`GroupTest` (one
statistic and its p-value, with how the p-value was obtained); a post hoc procedure returns
one :class:`PairTest` per pair, the first named group minus the second. A group with fewer
than :data:`~cohort.stats.group_samples.MIN_SUBJECTS_PER_GROUP` subjects (or no spread, for
Welch) gives a not-estimable result with the reason and a ``NotEstimableWarning``.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from itertools import combinations

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike
from scipy import stats

from cohort.stats.group_samples import finite_sample, group_samples, too_few_subjects
from cohort.stats.results import Result, warn_not_estimable

KRUSKAL_WALLIS = "Kruskal-Wallis"
MANN_WHITNEY = "Mann-Whitney U"
WELCH_ANOVA = "Welch ANOVA"
GAMES_HOWELL = "Games-Howell"
GAMES_HOWELL_WORDS = {
    "statistic_name": "t (Welch)",
    "p_method": "t distribution, Welch df, unadjusted",
    "p_adjusted_method": "studentized range over all groups",
}
"""What a Games-Howell :class:`PairTest` states about its statistic and p-values."""

KRUSKAL_SMALL_GROUP = 5
"""Below 5 subjects in a group the chi-square approximation of H is rough (common practice)."""

MANN_WHITNEY_EXACT_MAX = 8
"""Exact U distribution when the smaller group has at most 8 subjects and there are no ties
(the rule of ``scipy.stats.mannwhitneyu(method='auto')``); normal approximation otherwise."""


@dataclass(frozen=True, repr=False)
class GroupTest(Result):
    """A test between groups: statistic, degrees of freedom, p-value and how it was obtained.

    ``df_denominator`` is NaN for tests with a single df (see ``statistic_name``); a NaN
    statistic or p-value comes with ``note`` saying why. ``n_subjects`` counts the subjects
    of every group tested.
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

    @classmethod
    def not_estimable(
        cls, test: str, statistic_name: str, n_subjects: int, reason: str, p_method: str = ""
    ) -> GroupTest:
        """A NaN test with ``reason`` in its note (and a ``NotEstimableWarning``)."""
        note = warn_not_estimable(test, reason, stacklevel=3)
        nan = math.nan
        return cls(test, nan, statistic_name, nan, nan, nan, p_method, n_subjects, note)

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


@dataclass(frozen=True, repr=False)
class PairTest(Result):
    """One pair of a post hoc procedure: first minus second group.

    ``p_value`` is the unadjusted two-sided p of the pair's own statistic; ``p_adjusted`` is
    the procedure's adjusted p (Games-Howell: studentized range over all pairs).
    ``n_subjects`` counts the subjects of the two groups.
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
    statistic_name: str = ""
    p_method: str = ""
    """How ``p_value`` was obtained (unadjusted)."""
    p_adjusted_method: str = ""
    """How ``p_adjusted`` was obtained."""

    @property
    def comparison(self) -> str:
        return f"{self.first} vs {self.second}"

    def to_frame(self) -> pd.DataFrame:
        return pd.DataFrame([{"comparison": self.comparison, **self.__dict__}])


def _tie_sum(values: np.ndarray) -> float:
    _, counts = np.unique(values, return_counts=True)
    return float(np.sum(counts.astype(float) ** 3 - counts))


def kruskal_wallis(samples: Sequence[ArrayLike], labels: Sequence[str] | None = None) -> GroupTest:
    """Kruskal-Wallis H test with the tie correction, chi-square p with k - 1 df.

    ``H = [12 / (N (N + 1)) sum R_i^2 / n_i - 3 (N + 1)] / C`` with mid-ranks and
    ``C = 1 - sum(t^3 - t) / (N^3 - N)``. Kruskal WH, Wallis WA. Use of ranks in
    one-criterion variance analysis. J Am Stat Assoc 1952;47:583-621. Validated against
    ``scipy.stats.kruskal``.

    Examples
    --------
    >>> res = kruskal_wallis([[1.0, 2, 3, 4, 5], [3.0, 5, 6, 7, 8], [6.0, 8, 9, 10, 11]])
    >>> print(f"H = {res.statistic:.3f}, df = {res.df}, p = {res.p_value:.4f}")
    H = 9.750, df = 2, p = 0.0076
    """
    arrays, names = group_samples(samples, labels)
    n_total = int(sum(a.size for a in arrays))
    p_method = "chi-square approximation, tie-corrected"
    small = too_few_subjects(arrays, names)
    if small:
        return GroupTest.not_estimable(KRUSKAL_WALLIS, "H", n_total, small, p_method)
    pooled = np.concatenate(arrays)
    ties = 1.0 - _tie_sum(pooled) / (n_total**3 - n_total)
    if ties <= 0.0:
        return GroupTest.not_estimable(KRUSKAL_WALLIS, "H", n_total, "all values tied", p_method)
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
    p = float(stats.chi2.sf(h, df))
    return GroupTest(KRUSKAL_WALLIS, float(h), "H", df, math.nan, p, p_method, n_total, note)


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

    Examples
    --------
    >>> res = mann_whitney([1.1, 2.3, 3.2, 4.8], [2.0, 5.1, 6.3, 7.7, 9.0])
    >>> print(f"U = {res.statistic:g}, p = {res.p_value:.4f} ({res.p_method})")
    U = 3, p = 0.1111 (exact, no ties)
    """
    x, y = finite_sample(x, "x"), finite_sample(y, "y")
    if method not in ("auto", "exact", "asymptotic"):
        raise ValueError(f"method must be 'auto', 'exact' or 'asymptotic', got {method!r}")
    n1, n2 = x.size, y.size
    small = too_few_subjects([x, y], labels)
    if small:
        return GroupTest.not_estimable(MANN_WHITNEY, "U", n1 + n2, small)
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
        return GroupTest.not_estimable(MANN_WHITNEY, "U", n, "all values tied")
    z = (abs(u1 - n1 * n2 / 2.0) - 0.5) / math.sqrt(sigma2)
    p = min(1.0, 2.0 * float(stats.norm.sf(z)))
    p_method = "normal approximation, tie and continuity corrected"
    return GroupTest(MANN_WHITNEY, u1, "U", math.nan, math.nan, p, p_method, n)


def _moments(arrays: Sequence[np.ndarray]) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    n = np.array([a.size for a in arrays], dtype=float)
    mean = np.array([a.mean() for a in arrays])
    var = np.array([a.var(ddof=1) if a.size > 1 else math.nan for a in arrays])
    return n, mean, var


def _zero_variance(arrays: Sequence[np.ndarray], names: Sequence[str]) -> str:
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

    Examples
    --------
    >>> res = welch_anova([[1.0, 2, 3, 4, 5], [3.0, 5, 6, 7, 8], [6.0, 8, 9, 10, 11]])
    >>> print(f"F = {res.statistic:.3f}, df2 = {res.df_denominator:.2f}, p = {res.p_value:.4f}")
    F = 12.606, df2 = 7.92, p = 0.0035
    """
    arrays, names = group_samples(samples, labels)
    n_total = int(sum(a.size for a in arrays))
    reason = too_few_subjects(arrays, names) or _zero_variance(arrays, names)
    if reason:
        return GroupTest.not_estimable(WELCH_ANOVA, "F", n_total, reason, "F distribution")
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

    Examples
    --------
    >>> groups = [[1.0, 2, 3, 4, 5], [3.0, 5, 6, 7, 8], [6.0, 8, 9, 10, 11]]
    >>> for pair in games_howell(groups, ["a", "b", "c"]):
    ...     print(f"{pair.comparison}: {pair.difference:.2f}, p_adj = {pair.p_adjusted:.4f}")
    b vs a: 2.80, p_adj = 0.0848
    c vs a: 5.80, p_adj = 0.0023
    c vs b: 3.00, p_adj = 0.0889
    """
    arrays, names = group_samples(samples, labels)
    k = len(arrays)
    n, mean, var = _moments(arrays)
    out = []
    for i, j in combinations(range(k), 2):
        first, second = names[j], names[i]
        size = int(n[i] + n[j])
        two, two_names = [arrays[j], arrays[i]], [first, second]
        reason = too_few_subjects(two, two_names) or _zero_variance(two, two_names)
        if reason:
            note = warn_not_estimable(f"{GAMES_HOWELL} {first} vs {second}", reason)
            nan = [math.nan] * 6
            out.append(
                PairTest(first, second, GAMES_HOWELL, *nan, size, note, **GAMES_HOWELL_WORDS)
            )
            continue
        vi, vj = var[i] / n[i], var[j] / n[j]
        se = math.sqrt(vi + vj)
        diff = float(mean[j] - mean[i])
        t = diff / se
        df = (vi + vj) ** 2 / (vi**2 / (n[i] - 1) + vj**2 / (n[j] - 1))
        p_raw = float(2.0 * stats.t.sf(abs(t), df))
        p_adj = float(min(1.0, stats.studentized_range.sf(abs(t) * math.sqrt(2.0), k, df)))
        values = (diff, se, t, float(df), p_raw, p_adj)
        out.append(PairTest(first, second, GAMES_HOWELL, *values, size, **GAMES_HOWELL_WORDS))
    return tuple(out)
