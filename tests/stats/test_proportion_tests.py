"""Tests and effect sizes for proportions (cohort.stats.proportion_tests).

Sources named beside each check: scipy.stats.fisher_exact, statsmodels 0.15
(proportion_confint, confint_proportions_2indep), Newcombe 1998 worked examples (memory),
a brute-force enumeration with itertools.
"""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest
from scipy import stats
from statsmodels.stats.proportion import confint_proportions_2indep, proportion_confint

from cohort.stats.proportion_tests import (
    count_tables,
    fisher_exact_2x2,
    freeman_halton,
    risk_difference,
)
from cohort.stats.proportions import wilson_interval
from cohort.stats.results import NotEstimableWarning


def test_wilson_interval_matches_statsmodels_and_newcombe():
    # statsmodels proportion_confint(method='wilson'); Newcombe 1998 Table I (memory, DOMAIN.md)
    for (x, n), (low, high) in {
        (81, 263): (0.2553, 0.3662),
        (15, 148): (0.0624, 0.1605),
        (0, 20): (0.0, 0.1611),
        (1, 29): (0.0061, 0.1718),
    }.items():
        ci = wilson_interval(x, n)
        assert (ci.low, ci.high) == pytest.approx((low, high), abs=6e-5)
        assert (ci.low, ci.high) == pytest.approx(
            proportion_confint(x, n, method="wilson"), abs=1e-12
        )


def test_risk_difference_matches_statsmodels_and_newcombe_examples():
    # Newcombe 1998 (Stat Med 17:873) method 10 examples (memory): 56/70 - 48/80 -> 0.0524 to
    # 0.3339; 9/10 - 3/10 -> 0.1705 to 0.8090; and statsmodels confint_proportions_2indep
    assert (
        risk_difference(56, 70, 48, 80).ci.low,
        risk_difference(56, 70, 48, 80).ci.high,
    ) == (pytest.approx((0.0524, 0.3339), abs=6e-5))
    assert risk_difference(9, 10, 3, 10).ci.low == pytest.approx(0.1705, abs=6e-5)
    assert risk_difference(9, 10, 3, 10).ci.high == pytest.approx(0.8090, abs=6e-5)
    for counts in [(5, 56, 0, 29), (0, 10, 0, 20), (10, 10, 0, 20), (3, 16, 7, 16)]:
        got = risk_difference(*counts)
        want = confint_proportions_2indep(*counts, method="newcomb", compare="diff")
        assert (got.ci.low, got.ci.high) == pytest.approx(want, abs=1e-12)


def brute_force_fisher(x, n):
    """Sum of P(table) <= P(observed) over every table with the margins (itertools)."""
    k, total = sum(x), math.comb(sum(n), sum(x))

    def prob(xs):
        return math.prod(math.comb(a, b) for a, b in zip(n, xs, strict=True)) / total

    observed = prob(x)
    tables = [xs for xs in itertools.product(*[range(v + 1) for v in n]) if sum(xs) == k]
    return sum(prob(xs) for xs in tables if prob(xs) <= observed * (1 + 1e-7)), len(tables)


@pytest.mark.parametrize(("x", "n"), [((3, 1, 6), (8, 8, 8)), ((0, 2, 5, 1), (6, 7, 6, 9))])
def test_freeman_halton_matches_brute_force_enumeration(x, n):
    p, count = brute_force_fisher(x, n)
    got = freeman_halton(np.array(x), np.array(n))
    assert got.p_value == pytest.approx(p, rel=1e-10)
    assert count_tables(n, sum(x)) == count
    assert got.p_method.startswith(f"exact enumeration of {count} tables")


def test_freeman_halton_two_groups_is_fisher_2x2():
    # scipy.stats.fisher_exact on a 2x2 table is exact (no Monte Carlo)
    for x, n in [((2, 7), (10, 9)), ((0, 5), (12, 6)), ((4, 4), (8, 8))]:
        table = [[x[0], n[0] - x[0]], [x[1], n[1] - x[1]]]
        got = freeman_halton(np.array(x), np.array(n))
        assert got.p_value == pytest.approx(stats.fisher_exact(table).pvalue, rel=1e-10)


def test_freeman_halton_agrees_with_scipy_monte_carlo():
    # scipy.stats.fisher_exact on r x 2 is Monte Carlo only: fix 100,000 resamples and a
    # seed and allow 4 standard errors of a binomial proportion
    x, n = np.array([4, 11, 7]), np.array([20, 22, 25])
    got = freeman_halton(x, n)
    res = stats.fisher_exact(
        np.c_[x, n - x],
        method=stats.MonteCarloMethod(n_resamples=100_000, rng=np.random.default_rng(5)),
    )
    se = math.sqrt(got.p_value * (1 - got.p_value) / 100_000)
    assert abs(res.pvalue - got.p_value) < 4 * se


def test_freeman_halton_monte_carlo_above_budget_says_so_and_is_reproducible():
    x, n = np.array([4, 11, 7]), np.array([20, 22, 25])
    exact = freeman_halton(x, n).p_value
    mc = freeman_halton(x, n, max_tables=10, n_draws=50_000, seed=11)
    again = freeman_halton(x, n, max_tables=10, n_draws=50_000, seed=11)
    assert mc.p_method.startswith("Monte Carlo: 50,000 tables") and "seed=11" in mc.p_method
    assert mc.p_value == again.p_value
    assert abs(mc.p_value - exact) < 4 * math.sqrt(exact * (1 - exact) / 50_000)


@pytest.mark.parametrize("counts", [(7, 9, 2, 10), (0, 5, 0, 6), (3, 3, 0, 4), (1, 12, 4, 11)])
def test_fisher_exact_2x2_is_scipy(counts):
    # scipy.stats.fisher_exact on [[x1, n1 - x1], [x2, n2 - x2]] (exact on 2x2 tables)
    x1, n1, x2, n2 = counts
    want = stats.fisher_exact([[x1, n1 - x1], [x2, n2 - x2]])
    got = fisher_exact_2x2(*counts)
    assert got.p_value == pytest.approx(want.pvalue, rel=1e-12)
    assert got.statistic == pytest.approx(want.statistic, nan_ok=True)
    assert got.n_subjects == n1 + n2 and got.statistic_name == "odds ratio (sample)"


def test_input_errors_name_argument_rule_and_value():
    with pytest.raises(ValueError, match="positive must not exceed totals"):
        freeman_halton(np.array([3, 1]), np.array([2, 5]))
    with pytest.raises(ValueError, match="totals must hold at least 2 groups with subjects"):
        freeman_halton(np.array([0, 1]), np.array([0, 5]))
    with pytest.raises(ValueError, match="positive must not exceed total, got 4 > 3"):
        risk_difference(4, 3, 1, 5)
    with pytest.raises(ValueError, match=r"total must be a non-negative integer, got 2\.5"):
        fisher_exact_2x2(1, 2.5, 1, 3)


def test_risk_difference_without_subjects_is_not_estimable():
    with pytest.warns(NotEstimableWarning, match="a group has no subjects"):
        got = risk_difference(0, 0, 2, 5)
    assert math.isnan(got.estimate) and math.isnan(got.ci.low) and got.n_subjects == 5
