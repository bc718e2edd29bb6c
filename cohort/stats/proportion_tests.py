"""Tests and effect sizes for proportions of positive subjects in groups.

Counts of positive subjects per group, as an r x 2 table: Fisher's exact test of a 2x2
table (:func:`fisher_exact_2x2`), the Fisher-Freeman-Halton exact test of an r x 2 table by
enumeration (seeded Monte Carlo above a budget, said in ``p_method``;
:func:`freeman_halton`), and the risk difference with Newcombe's hybrid score interval
(:func:`risk_difference`). The Wilson interval of one proportion lives in
:mod:`cohort.stats.proportions`.
"""

from __future__ import annotations

import math

import numpy as np
from numpy.typing import ArrayLike
from scipy import special, stats

from cohort.domain.options import DEFAULT_SEED
from cohort.stats.effect_sizes import EffectSize
from cohort.stats.group_samples import check_confidence_level
from cohort.stats.group_tests import GroupTest
from cohort.stats.proportions import wilson_interval
from cohort.stats.results import ConfidenceInterval

FISHER_2X2 = "Fisher exact"
FREEMAN_HALTON = "Fisher-Freeman-Halton exact"
RISK_DIFFERENCE = "risk difference"

FISHER_MAX_TABLES = 5_000_000
"""Budget of the exact r x 2 enumeration (tables with the observed margins, about 0.5 s)."""

FISHER_DRAWS = 100_000
"""Monte Carlo tables drawn when the exact enumeration would exceed the budget."""


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

    Examples
    --------
    Newcombe's (1998) example 56/70 against 48/80 (memory):

    >>> rd = risk_difference(56, 70, 48, 80)
    >>> print(f"{rd.estimate:.2f} [{rd.ci.low:.4f}, {rd.ci.high:.4f}]")
    0.20 [0.0524, 0.3339]
    """
    check_confidence_level(confidence_level)
    method = "Newcombe hybrid score (1998, method 10)"
    if total_1 == 0 or total_2 == 0:
        _check_counts(positive_1, total_1)
        _check_counts(positive_2, total_2)
        return EffectSize.not_estimable(
            RISK_DIFFERENCE, total_1 + total_2, "a group has no subjects", confidence_level, method
        )
    _check_counts(positive_1, total_1)
    _check_counts(positive_2, total_2)
    a = wilson_interval(positive_1, total_1, confidence_level)
    b = wilson_interval(positive_2, total_2, confidence_level)
    p1, p2 = positive_1 / total_1, positive_2 / total_2
    d = p1 - p2
    low = d - math.sqrt((p1 - a.low) ** 2 + (b.high - p2) ** 2)
    high = d + math.sqrt((a.high - p1) ** 2 + (p2 - b.low) ** 2)
    ci = ConfidenceInterval(low, high, confidence_level, method)
    return EffectSize(RISK_DIFFERENCE, d, ci, total_1 + total_2)


def fisher_exact_2x2(positive_1: int, total_1: int, positive_2: int, total_2: int) -> GroupTest:
    """Fisher's exact test of two groups' positives; the statistic is the sample odds ratio
    of group 1 against group 2 (NaN when 0/0).

    Fisher RA. The logic of inductive inference. J R Stat Soc 1935;98:39-82 (memory).
    Computed by ``scipy.stats.fisher_exact`` on ``[[x1, n1 - x1], [x2, n2 - x2]]``, which is
    exact on 2x2 tables.

    Examples
    --------
    >>> res = fisher_exact_2x2(7, 9, 2, 10)
    >>> print(f"OR = {res.statistic:.2f}, p = {res.p_value:.4f}")
    OR = 14.00, p = 0.0230
    """
    for positive, total in ((positive_1, total_1), (positive_2, total_2)):
        _check_counts(positive, total)
    res = stats.fisher_exact(
        [[positive_1, total_1 - positive_1], [positive_2, total_2 - positive_2]]
    )
    return GroupTest(
        FISHER_2X2,
        float(res.statistic),
        "odds ratio (sample)",
        math.nan,
        math.nan,
        float(res.pvalue),
        "exact (scipy.stats.fisher_exact, 2x2)",
        int(total_1 + total_2),
    )


def _log_choose(n: int) -> np.ndarray:
    k = np.arange(n + 1)
    return special.gammaln(n + 1) - special.gammaln(k + 1) - special.gammaln(n - k + 1)


def count_tables(totals: ArrayLike, positive_total: int) -> float:
    """Number of r x 2 tables with row totals ``totals`` and ``positive_total`` positives.

    Examples
    --------
    >>> count_tables([2, 2], 2)  # (0, 2), (1, 1), (2, 0)
    3.0
    """
    counts = np.zeros(positive_total + 1)
    counts[0] = 1.0
    for n in np.asarray(totals, dtype=int):
        cum = np.cumsum(counts)
        shifted = np.concatenate([np.zeros(n + 1), cum[: max(0, cum.size - n - 1)]])
        counts = cum - shifted[: cum.size]
    return float(counts[positive_total])


def _check_table(x: np.ndarray, n: np.ndarray) -> None:
    if x.shape != n.shape or x.ndim != 1:
        raise ValueError(f"positive and totals must be 1-d of one length, got {x.shape}, {n.shape}")
    for name, arr in (("positive", x), ("totals", n)):
        if not np.issubdtype(arr.dtype, np.integer) or (arr < 0).any():
            raise ValueError(f"{name} must hold non-negative integers, got {arr.tolist()}")
    if (x > n).any():
        raise ValueError(f"positive must not exceed totals, got {x.tolist()} > {n.tolist()}")
    if x.size < 2 or (n == 0).any():
        raise ValueError(f"totals must hold at least 2 groups with subjects, got {n.tolist()}")


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

    Examples
    --------
    >>> res = freeman_halton(np.array([3, 1, 6]), np.array([8, 8, 8]))
    >>> print(f"p = {res.p_value:.4f}; {res.p_method}")
    p = 0.0562; exact enumeration of 57 tables with the observed margins
    """
    x = np.asarray(positive)
    n = np.asarray(totals)
    _check_table(x, n)
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
    name = "P(observed table)"
    return GroupTest(
        FREEMAN_HALTON, statistic, name, math.nan, math.nan, min(1.0, p), p_method, big_n
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
