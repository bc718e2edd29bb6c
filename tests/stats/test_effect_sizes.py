"""Hedges' g and Cliff's delta (cohort.stats.effect_sizes), checked against references.

Sources named beside each check: pingouin 0.7 (compute_effsize, compute_esci, mwu), Cliff
1993's variance written out, Hanley & McNeil 1982's variance written out; coverage by
simulation on invented normal data.
"""

from __future__ import annotations

import math

import numpy as np
import pingouin as pg
import pytest
from scipy import stats

from cohort.stats.effect_sizes import EffectSize, cliffs_delta, hedges_g
from cohort.stats.results import NotEstimableWarning, Result

from .group_data import samples


def test_hedges_g_and_interval_match_pingouin():
    # pingouin.compute_effsize(eftype='hedges') and compute_esci (t quantile, n1+n2-2 df)
    a, b, _ = samples()
    got = hedges_g(b, a)
    g = pg.compute_effsize(b, a, eftype="hedges")
    low, high = pg.compute_esci(g, nx=b.size, ny=a.size, eftype="hedges", decimals=12)
    assert got.estimate == pytest.approx(g, rel=1e-12)
    assert (got.ci.low, got.ci.high) == pytest.approx((low, high), rel=1e-10)
    assert "Hedges & Olkin" in got.ci.method


def test_cliffs_delta_matches_pingouin_cles():
    # pingouin.mwu CLES = P(x > y) + P(x = y) / 2, so delta = 2 CLES - 1
    a, b, _ = samples()
    got = cliffs_delta(b, a)
    assert got.estimate == pytest.approx(2 * pg.mwu(b, a)["CLES"].iloc[0] - 1, abs=1e-12)


def test_cliffs_variance_against_the_double_sum():
    # Cliff 1993's unbiased variance, computed here directly from the n_x x n_y sign matrix
    a, b, _ = samples()
    d = np.sign(b[:, None] - a[None, :])
    delta, nx, ny = d.mean(), b.size, a.size
    s2 = (
        ny**2 * ((d.mean(1) - delta) ** 2).sum()
        + nx**2 * ((d.mean(0) - delta) ** 2).sum()
        - ((d - delta) ** 2).sum()
    ) / (nx * ny * (nx - 1) * (ny - 1))
    z = stats.norm.ppf(0.975)
    half = z * math.sqrt(s2) * math.sqrt((1 - delta**2) ** 2 + z * z * s2)
    low = (delta - delta**3 - half) / (1 - delta**2 + z * z * s2)
    got = cliffs_delta(b, a)
    assert got.ci.low == pytest.approx(low, rel=1e-10)


@pytest.mark.parametrize(("nx", "ny", "shift"), [(12, 15, 0.8), (6, 6, 3.0)])
def test_cliffs_interval_covers_the_true_delta(nx, ny, shift):
    # simulation (invented normal data): true delta = 2 Phi(shift / sqrt 2) - 1; with
    # shift 3 and 6 + 6 subjects most samples are completely separated (fallback interval)
    rng = np.random.default_rng(20261202)
    true = 2 * stats.norm.cdf(shift / math.sqrt(2)) - 1
    covered = 0
    for _ in range(300):
        e = cliffs_delta(rng.normal(shift, 1, nx), rng.normal(0, 1, ny))
        covered += e.ci.low <= true <= e.ci.high
    assert 0.91 <= covered / 300 <= 0.98


def test_cliffs_interval_at_complete_separation_solves_the_score_equation():
    # Hanley & McNeil 1982 variance at A = theta, written out: (1 - A)^2 = z^2 V(A)
    x, y = np.array([5.0, 6, 7, 8]), np.array([1.0, 2, 3])
    got = cliffs_delta(x, y)
    assert got.estimate == 1.0 and got.ci.high == 1.0 and "Hanley-McNeil" in got.ci.method
    a, m, n, z = (got.ci.low + 1) / 2, 4, 3, stats.norm.ppf(0.975)
    v = (
        a * (1 - a) + (m - 1) * (a / (2 - a) - a * a) + (n - 1) * (2 * a * a / (1 + a) - a * a)
    ) / (m * n)
    assert (1 - a) ** 2 == pytest.approx(z * z * v, rel=1e-8)
    mirrored = cliffs_delta(y, x)
    assert (mirrored.ci.low, mirrored.ci.high) == pytest.approx((-1.0, -got.ci.low))


def test_input_errors_name_argument_rule_and_value():
    with pytest.raises(ValueError, match="confidence_level must be between 0 and 1, got 95"):
        hedges_g([1, 2, 3], [2, 3, 4], confidence_level=95)
    with pytest.raises(ValueError, match="y must hold finite values only, got 1"):
        cliffs_delta([1.0, 2.0], [np.inf, 3.0])


def test_effect_sizes_follow_the_vocabulary_of_results():
    # project rule (cohort.stats.results.Result): a single quantity has estimate and ci
    a, b, _ = samples()
    g = hedges_g(b, a)
    assert isinstance(g, EffectSize) and isinstance(g, Result)
    assert not hasattr(g, "value") and g.n_subjects == a.size + b.size
    row = g.to_frame().iloc[0]  # the words of every result, not the group table's
    assert (row["quantity"], row["estimate"]) == ("Hedges' g", g.estimate)
    assert (row["ci_low"], row["ci_high"]) == (g.ci.low, g.ci.high)
    assert "effect_size" not in row and g.row()["effect_ci_low"] == g.ci.low  # table cells
    assert repr(g).startswith('EffectSize(name="Hedges\' g", estimate=')
    with pytest.warns(NotEstimableWarning, match="zero pooled variance"):
        flat = hedges_g([2.0, 2.0], [3.0, 3.0])
    assert math.isnan(flat.estimate) and "not estimable" in flat.note
