"""Tests of cohort.stats.bootstrap: the sufficient-statistics cluster bootstrap.

The central check: on a small cohort, the fast bootstrap (per-subject sums, counts, matrix
products) gives the same numbers as a straightforward per-resample implementation that
rebuilds each resampled data set with pandas and recomputes every statistic from its
textbook definition, on the same resampled subjects. ``naive_bootstrap`` is also the
baseline of benchmarks/agreement_speed.py.
"""

from __future__ import annotations

from collections import defaultdict

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats

from cohort.stats import bootstrap
from cohort.stats.agreement import ba2007_statistic, proportional_statistic, subject_mean_statistic
from cohort.stats.bootstrap import (
    cluster_bootstrap,
    paired_sums,
    paired_values,
    percentile_interval,
    resample_counts,
    resample_subjects,
)
from cohort.stats.concordance import ccc_statistic, icc_statistic
from cohort.stats.correlation import pearson_statistic, rm_corr_statistic, spearman_statistic


def invented_cohort(n_subjects: int = 12, seed: int = 5, positive: bool = True) -> pd.DataFrame:
    """Invented paired values, unequal numbers of segments per subject (tests only)."""
    rng = np.random.default_rng(seed)
    m = rng.integers(3, 18, n_subjects)
    subject = np.repeat([f"S{i:03d}" for i in range(n_subjects)], m)
    level = np.repeat(rng.normal(30.0, 6.0, n_subjects), m)
    truth = level + rng.normal(0.0, 4.0, m.sum())
    reference = truth + rng.normal(0.0, 1.5, m.sum())
    test = 1.0 + 1.04 * truth + np.repeat(rng.normal(0, 1.0, n_subjects), m)
    test = test + rng.normal(0.0, 2.0, m.sum())
    if not positive:
        reference = reference - 40.0
    return pd.DataFrame({"subject": subject, "reference_value": reference, "test_value": test})


def _ba2007_naive(d: pd.Series, cluster: pd.Series) -> dict[str, float]:
    """One-way ANOVA of d on cluster, Bland & Altman (2007), from the definitions."""
    groups = d.groupby(cluster)
    m, means = groups.size(), groups.mean()
    n, k = len(d), len(m)
    bias = d.mean()
    ssw = ((d - means.loc[cluster].to_numpy()) ** 2).sum()
    ssb = (m * (means - bias) ** 2).sum()
    msb, msw = ssb / (k - 1), ssw / (n - k)
    m0 = (n**2 - (m**2).sum()) / ((k - 1) * n)
    var_b = max((msb - msw) / m0, 0.0)
    sd = np.sqrt(var_b + msw)
    return {
        "bias": bias,
        "sd": sd,
        "loa_low": bias - 1.96 * sd,
        "loa_high": bias + 1.96 * sd,
        "sd_within": np.sqrt(msw),
        "sd_between": np.sqrt(var_b),
    }


def naive_statistics(sample: pd.DataFrame) -> dict[str, float]:
    """Every agreement statistic of one (resampled) data set, recomputed from scratch."""
    x, y = sample["reference_value"], sample["test_value"]
    cluster = sample["cluster"]
    d = y - x
    out = {f"ba_{k}": v for k, v in _ba2007_naive(d, cluster).items()}
    log_ratio = np.log(y / x)
    out.update({f"log_ba_{k}": v for k, v in _ba2007_naive(log_ratio, cluster).items()})
    subject_means = d.groupby(cluster).mean()
    sm_bias, sm_sd = subject_means.mean(), subject_means.std(ddof=1)
    out.update(
        {
            "sm_bias": sm_bias,
            "sm_sd": sm_sd,
            "sm_loa_low": sm_bias - 1.96 * sm_sd,
            "sm_loa_high": sm_bias + 1.96 * sm_sd,
        }
    )
    slope, intercept = np.polyfit((x + y) / 2, d, 1)
    out.update({"prop_slope": slope, "prop_intercept": intercept})
    out["pearson_r"] = np.corrcoef(x, y)[0, 1]
    out["spearman_rho"] = np.corrcoef(sample["rank_x"], sample["rank_y"])[0, 1]
    # Lin (1989): moments with divisor n.
    out["ccc"] = (
        2
        * np.cov(x, y, ddof=0)[0, 1]
        / (x.var(ddof=0) + y.var(ddof=0) + (x.mean() - y.mean()) ** 2)
    )
    # ICC(A,1), McGraw & Wong (1996): two-way ANOVA with the pairs as targets.
    table = np.column_stack([x, y])
    n = len(table)
    grand = table.mean()
    msr = 2 * ((table.mean(axis=1) - grand) ** 2).sum() / (n - 1)
    msc = n * ((table.mean(axis=0) - grand) ** 2).sum()
    sse = ((table - table.mean(axis=1, keepdims=True) - table.mean(axis=0) + grand) ** 2).sum()
    mse = sse / (n - 1)
    out["icc"] = (msr - mse) / (msr + mse + 2 * (msc - mse) / n)
    # Repeated-measures correlation: centre on cluster means (Bland & Altman 1995).
    xc = x - x.groupby(cluster).transform("mean")
    yc = y - y.groupby(cluster).transform("mean")
    out["rm_corr"] = (xc * yc).sum() / np.sqrt((xc**2).sum() * (yc**2).sum())
    return out


def naive_bootstrap(frame: pd.DataFrame, n_boot: int, seed: int) -> dict[str, np.ndarray]:
    """Straightforward cluster bootstrap: rebuild each resample with pandas, recompute all.

    Uses the same resampled subjects as the fast implementation
    (:func:`cohort.stats.bootstrap.resample_subjects`, subjects in sorted label order); Spearman's
    rho uses the full-sample mid-ranks, as the fast implementation documents.
    """
    frame = frame.assign(
        rank_x=stats.rankdata(frame["reference_value"]),
        rank_y=stats.rankdata(frame["test_value"]),
    )
    labels = np.unique(frame["subject"].to_numpy())
    blocks = dict(tuple(frame.groupby("subject")))
    draws: dict[str, list[float]] = defaultdict(list)
    for drawn in resample_subjects(len(labels), n_boot, seed):
        sample = pd.concat(
            [blocks[labels[i]].assign(cluster=j) for j, i in enumerate(drawn)], ignore_index=True
        )
        for name, value in naive_statistics(sample).items():
            draws[name].append(value)
    return {name: np.asarray(values) for name, values in draws.items()}


def fast_statistic(t):
    """All moment statistics of the engine, as one function of totals."""
    out = {}
    for statistic in (
        ba2007_statistic,
        subject_mean_statistic,
        proportional_statistic,
        pearson_statistic,
        spearman_statistic,
        rm_corr_statistic,
        ccc_statistic,
        icc_statistic,
    ):
        out.update(statistic(t))
    out.update(ba2007_statistic(t, scale="ratio"))
    return out


def fast_bootstrap(frame: pd.DataFrame, n_boot: int, seed: int) -> dict[str, np.ndarray]:
    data = paired_values(frame["reference_value"], frame["test_value"], frame["subject"])
    return cluster_bootstrap(paired_sums(data), fast_statistic, n_boot=n_boot, seed=seed)


def test_sufficient_statistics_bootstrap_equals_per_resample_recomputation():
    # Source of truth: the textbook definitions recomputed per resample (naive_statistics).
    frame = invented_cohort()
    fast = fast_bootstrap(frame, n_boot=60, seed=11)
    naive = naive_bootstrap(frame, n_boot=60, seed=11)
    assert set(naive) <= set(fast)
    for name, values in naive.items():
        np.testing.assert_allclose(fast[name], values, rtol=1e-9, atol=1e-9, err_msg=name)
    # The draws vary between resamples (a constant would pass the comparison trivially).
    assert np.std(fast["ba_bias"]) > 0.01


def test_point_estimate_uses_the_same_function_as_the_resamples():
    frame = invented_cohort()
    data = paired_values(frame["reference_value"], frame["test_value"], frame["subject"])
    point = bootstrap.point_estimates(paired_sums(data), fast_statistic)
    frame = frame.assign(
        cluster=frame["subject"],
        rank_x=stats.rankdata(frame["reference_value"]),
        rank_y=stats.rankdata(frame["test_value"]),
    )
    for name, value in naive_statistics(frame).items():
        assert point[name] == pytest.approx(value, rel=1e-9, abs=1e-12), name


def test_counts_are_the_drawn_subjects_and_sum_to_k():
    drawn = list(resample_subjects(7, 5, seed=3))
    counts = np.concatenate(list(resample_counts(7, 5, seed=3)))
    assert counts.shape == (5, 7)
    np.testing.assert_array_equal(counts.sum(axis=1), 7)
    for row, indices in zip(counts, drawn, strict=True):
        np.testing.assert_array_equal(row, np.bincount(indices, minlength=7))


def test_chunk_size_does_not_change_the_draws(monkeypatch):
    frame = invented_cohort()
    k = frame["subject"].nunique()
    whole_counts = np.concatenate(list(resample_counts(k, 50, seed=2)))
    whole = fast_bootstrap(frame, n_boot=50, seed=2)
    monkeypatch.setattr(bootstrap, "_CHUNK_ELEMENTS", 3 * k)
    chunks = list(resample_counts(k, 50, seed=2))
    assert len(chunks) == 17  # 3 resamples per chunk
    np.testing.assert_array_equal(np.concatenate(chunks), whole_counts)
    chunked = fast_bootstrap(frame, n_boot=50, seed=2)
    for name in whole:
        # Same resamples; matrix products of other shapes may differ in the last bit.
        np.testing.assert_allclose(whole[name], chunked[name], rtol=1e-12, err_msg=name)


@settings(max_examples=15, deadline=None)
@given(seed=st.integers(min_value=0, max_value=2**32 - 1))
def test_bootstrap_reproducible_with_the_same_seed(seed):
    # Property: numpy's default_rng(seed) makes the resampling, hence every draw, reproducible.
    frame = invented_cohort(n_subjects=6)
    first = fast_bootstrap(frame, n_boot=20, seed=seed)
    second = fast_bootstrap(frame, n_boot=20, seed=seed)
    for name in first:
        np.testing.assert_array_equal(first[name], second[name])
    other = fast_bootstrap(frame, n_boot=20, seed=seed + 1)
    assert not np.array_equal(first["ba_bias"], other["ba_bias"])


def test_cluster_bootstrap_se_of_mean_matches_cluster_theory():
    # Theory (common practice): the cluster bootstrap SE of a mean over clusters of equal size
    # m is sqrt((k-1)/k) * SD(cluster means) / sqrt(k); with a random intercept it is far larger
    # than the naive SD / sqrt(N) that treats segments as independent.
    rng = np.random.default_rng(8)
    k, m = 60, 17
    subject = np.repeat(np.arange(k), m)
    d = np.repeat(rng.normal(0, 2.0, k), m) + rng.normal(0, 1.0, k * m)
    data = paired_values(np.zeros(k * m), d, subject)
    draws = cluster_bootstrap(paired_sums(data), ba2007_statistic, n_boot=2000, seed=1)["ba_bias"]
    cluster_means = d.reshape(k, m).mean(axis=1)
    expected = np.sqrt((k - 1) / k) * cluster_means.std(ddof=1) / np.sqrt(k)
    assert draws.std() == pytest.approx(expected, rel=0.08)
    assert draws.std() > 2.5 * d.std(ddof=1) / np.sqrt(k * m)


def test_percentile_interval_excludes_and_counts_non_finite_draws():
    draws = np.r_[np.arange(100.0), np.nan, np.inf]
    ci = percentile_interval(draws, 0.9, n_boot=102, seed=4)
    low, high = np.quantile(np.arange(100.0), [0.05, 0.95])
    assert (ci.low, ci.high) == (pytest.approx(low), pytest.approx(high))
    assert ci.note == "2 of 102 resamples not estimable and excluded"
    assert ci.method == "subject cluster bootstrap, percentile, B=102, seed=4"


def test_percentile_interval_without_bootstrap_says_why():
    ci = percentile_interval(None, 0.95, n_boot=0, seed=1)
    assert not ci.estimable
    assert ci.note == "not estimable: no bootstrap requested (n_boot=0)"


def test_paired_values_codes_subjects_in_sorted_label_order():
    data = paired_values([1.0, 2.0, 3.0], [1.5, 2.5, 3.5], ["b", "a", "b"])
    np.testing.assert_array_equal(data.codes, [1, 0, 1])
    assert data.n_subjects == 2
    assert paired_values([1.0, 2.0], [1.0, 2.0]).n_subjects == 2  # None: one subject per pair


@pytest.mark.parametrize(
    ("reference", "test", "subject", "match"),
    [
        ([1.0, 2.0], [1.0], None, "reference and test must have the same length, got 2 and 1"),
        ([1.0, np.nan], [1.0, 2.0], None, "reference must hold finite values only, got 1"),
        ([1.0, 2.0], [1.0, np.inf], None, "test must hold finite values only"),
        ([[1.0, 2.0]], [[1.0, 2.0]], None, "reference must be one-dimensional"),
        ([1.0, 2.0], [1.0, 2.0], ["a"], r"subject must have one label per pair \(2\)"),
        ([1.0, 2.0], [1.0, 2.0], ["a", None], "subject must not be missing, got 1 missing"),
    ],
)
def test_paired_values_errors(reference, test, subject, match):
    with pytest.raises(ValueError, match=match):
        paired_values(reference, test, subject)


@pytest.mark.parametrize(
    ("confidence_level", "n_boot", "match"),
    [
        (1.0, 100, "confidence_level must be between 0 and 1, got 1.0"),
        (0.0, 100, "confidence_level must be between 0 and 1"),
        (0.95, -1, r"n_boot must be 0 \(no bootstrap\) or an integer from 20 to 1000000, got -1"),
        (0.95, 2.5, "n_boot must be 0 .* got 2.5"),
        (0.95, True, "n_boot must be 0 .* got True"),
        (0.95, 1, "n_boot must be 0 .* got 1"),
        (0.95, 19, "n_boot must be 0 .* got 19"),
        (0.95, 1_000_001, "n_boot must be 0 .* got 1000001"),
    ],
)
def test_check_options_errors(confidence_level, n_boot, match):
    with pytest.raises(ValueError, match=match):
        bootstrap.check_options(confidence_level, n_boot)


def test_estimators_follow_the_study_file_rule_for_n_boot():
    # One rule in one place (cohort.domain.options): 0, or MIN_N_BOOT to MAX_N_BOOT; the
    # study file refuses 19 resamples, so an estimator must too, and accept the bounds.
    from cohort.domain.options import MAX_N_BOOT, MIN_N_BOOT
    from cohort.stats import deming, limits_of_agreement, passing_bablok

    for n_boot in (0, MIN_N_BOOT, MAX_N_BOOT):
        bootstrap.check_options(0.95, n_boot)
    x, y, subject = [1.0, 2.0, 3.5, 4.0], [1.1, 2.2, 3.3, 4.4], [1, 1, 2, 2]
    for estimator in (limits_of_agreement, passing_bablok, deming):
        with pytest.raises(ValueError, match=f"from {MIN_N_BOOT} to {MAX_N_BOOT}, got 19"):
            estimator(x, y, subject=subject, n_boot=MIN_N_BOOT - 1)


def test_ratio_scale_is_left_out_with_the_count_of_non_positive_pairs():
    frame = invented_cohort(positive=False)
    data = paired_values(frame["reference_value"], frame["test_value"], frame["subject"])
    sums = paired_sums(data)
    n_bad = int(((frame["reference_value"] <= 0) | (frame["test_value"] <= 0)).sum())
    assert n_bad > 0
    assert (
        sums.ratio_reason
        == f"{n_bad} of {len(frame)} pairs have a value <= 0 (log ratio undefined)"
    )
    assert "l" not in sums.names


@settings(max_examples=50, deadline=None)
@given(
    values=st.lists(
        st.floats(min_value=-5, max_value=5, allow_nan=False).map(lambda v: round(v, 1)),
        max_size=40,
    )
)
def test_midranks_equal_scipy_rankdata(values):
    # scipy.stats.rankdata (method "average") is the reference for mid-ranks with ties.
    array = np.asarray(values, dtype=float)
    np.testing.assert_array_equal(bootstrap.midranks(array), stats.rankdata(array))


def test_shared_resample_counts_give_the_same_draws():
    frame = invented_cohort()
    data = paired_values(frame["reference_value"], frame["test_value"], frame["subject"])
    sums = paired_sums(data)
    shared = bootstrap.ResampleCounts(40, seed=6)
    first = cluster_bootstrap(sums, fast_statistic, n_boot=40, seed=6, counts=shared)
    again = cluster_bootstrap(sums, fast_statistic, n_boot=40, seed=6, counts=shared)
    alone = cluster_bootstrap(sums, fast_statistic, n_boot=40, seed=6)
    for name in alone:
        np.testing.assert_array_equal(first[name], alone[name])
        np.testing.assert_array_equal(again[name], alone[name])
    with pytest.raises(ValueError, match="counts were drawn for n_boot=40, seed=6"):
        cluster_bootstrap(sums, fast_statistic, n_boot=40, seed=7, counts=shared)
