"""Tests of cohort.stats.regression against independent computations and published output."""

from __future__ import annotations

import math
import warnings

import numpy as np
import pandas as pd
import pytest
from hypothesis import assume, given, settings
from hypothesis import strategies as st
from scipy import stats

from cohort.stats import _pb_fit, _slopes
from cohort.stats.regression import MethodRegression, deming, passing_bablok
from cohort.stats.results import NotEstimableWarning

# ------------------------------------------------------------------ independent references


def brute_slopes(x, y):
    """Pairwise slopes by the rules of Passing & Bablok 1983 (J Clin Chem Clin Biochem
    21:709-720, section 2): i < j; identical points ignored; x_i = x_j gives +-inf by the sign
    of y_j - y_i; S_ij = -1 discarded. Plain Python, written apart from the library."""
    s = []
    for i in range(len(x)):
        for j in range(i + 1, len(x)):
            dx, dy = x[j] - x[i], y[j] - y[i]
            if dx == 0 and dy == 0:
                continue
            if dx == 0:
                s.append(math.inf if dy > 0 else -math.inf)
            elif dy / dx != -1.0:
                s.append(dy / dx + 0.0)
    return sorted(s)


def brute_pb(x, y, cl=0.95):
    """(slope, intercept, slope_ci, intercept_ci) per Passing & Bablok 1983, 1-based ranks."""
    s = brute_slopes(list(x), list(y))
    n, big_n = len(x), len(s)
    k = sum(v < -1 for v in s)
    if big_n % 2:
        b = s[(big_n + 1) // 2 + k - 1]
    else:
        b = 0.5 * (s[big_n // 2 + k - 1] + s[big_n // 2 + k])
    a = float(np.median(np.asarray(y) - b * np.asarray(x)))
    c = stats.norm.ppf(0.5 + cl / 2) * math.sqrt(n * (n - 1) * (2 * n + 5) / 18)
    m1 = math.floor((big_n - c) / 2 + 0.5)
    m2 = big_n - m1 + 1
    lo, hi = s[m1 + k - 1], s[m2 + k - 1]
    a_ci = (float(np.median(y - hi * x)), float(np.median(y - lo * x)))
    return b, a, (lo, hi), a_ci


def textbook_deming(x, y, ratio=1.0):
    """Deming (1943) slope in its usual textbook form with sample (co)variances (e.g.
    Cornbleet & Gochman, Clin Chem 1979;25:432 (memory)), written here for
    lambda = var(error y) / var(error x); intercept ybar - b xbar."""
    c = np.cov(x, y)
    sxx, syy, sxy = c[0, 0], c[1, 1], c[0, 1]
    b = (syy - ratio * sxx + math.sqrt((syy - ratio * sxx) ** 2 + 4 * ratio * sxy**2)) / (2 * sxy)
    return b, float(np.mean(y) - b * np.mean(x))


def tied_data(rng, n, kind):
    """Invented data with the ties real exports have (demo data, not a reference)."""
    if kind == "int":
        x = rng.integers(0, 12, n).astype(float)
        return x, x + rng.integers(-3, 4, n)
    if kind == "decimal":
        x = np.round(rng.normal(10, 3, n), 1)
        return x, np.round(1.05 * x + rng.normal(0, 1, n), 1)
    if kind == "duplicated":
        base = rng.integers(0, n // 4, n)
        x0 = np.round(rng.normal(10, 3, n // 4), 2)
        return x0[base], np.round(x0[base] + rng.normal(0, 0.5, n // 4)[base], 2)
    x = rng.gamma(2.0, 5.0, n)
    return x, 0.9 * x + 1.0 + rng.normal(0, 1, n)


def pb_tuple(fit):
    return (fit.slope, fit.intercept, fit.slope_ci, fit.intercept_ci, fit.reason, fit.ci_reason)


# ------------------------------------------------------------------------ Passing-Bablok


@pytest.mark.parametrize("seed", range(12))
def test_pb_equals_brute_force_with_ties_vertical_and_minus_one(seed):
    # independent brute force above (Passing & Bablok 1983 rules); integer data make
    # identical points, vertical pairs and slopes of exactly -1 common
    rng = np.random.default_rng(seed)
    n = int(rng.integers(12, 45))
    x = rng.integers(0, 6, n).astype(float)
    y = x + rng.integers(-2, 3, n)
    fit = passing_bablok(x, y, n_boot=0)  # the rank-based interval as the interval itself
    b, a, s_ci, a_ci = brute_pb(x, y)
    assert (fit.slope.estimate, fit.intercept.estimate) == (b, a)
    assert (fit.slope.ci.low, fit.slope.ci.high) == s_ci
    assert (fit.intercept.ci.low, fit.intercept.ci.high) == a_ci
    fast = _pb_fit.pb_fit(x, y, 0.95, "fast")
    assert (fast.slope, fast.intercept, fast.slope_ci, fast.intercept_ci) == (b, a, s_ci, a_ci)


@pytest.mark.parametrize(
    ("n", "kind"), [(2000, "decimal"), (2000, "int"), (1500, "duplicated"), (1800, "cont")]
)
def test_fast_selection_equals_direct_enumeration_exactly(n, kind):
    # the O(n log n) selection must return the very float64 order statistics that the
    # O(n^2) enumeration sorts (invented data with ties; exact equality, no tolerance)
    rng = np.random.default_rng(n + len(kind))
    x, y = tied_data(rng, n, kind)
    direct = _pb_fit.pb_fit(x, y, 0.95, "direct")
    fast = _pb_fit.pb_fit(x, y, 0.95, "fast")
    assert pb_tuple(fast) == pb_tuple(direct)
    assert fast.notes == ()


@pytest.mark.parametrize("kind", ["decimal", "int", "cont"])
def test_fast_selection_exact_through_merge_and_retry_paths(kind):
    # a small enumeration cap forces the merge enumeration, many narrowing rounds and retries
    # (and, for integer data whose tied slopes are equal floats, the tie-cluster path); the
    # result must still equal the direct enumeration
    rng = np.random.default_rng(11)
    x, y = tied_data(rng, 700, kind)
    x, y = x + 0.0, y + 0.0
    direct = _slopes.DirectSlopes(x, y)
    fast = _slopes.FastSlopes(x, y, cap=3000)
    assert (fast.v_minus, fast.v_plus, fast.n_finite) == (
        direct.v_minus,
        direct.v_plus,
        direct.n_finite,
    )
    assert fast.minus_one_counts() == direct.minus_one_counts()
    ks = [1, 17, direct.n_finite // 3, direct.n_finite // 2, direct.n_finite - 5]
    assert fast.select(ks) == direct.select(ks)


def test_fast_selection_within_cluster_width_when_ties_exceed_the_cap(monkeypatch):
    # documented semantics (_slopes.FastSlopes): when more tied slopes than `cap` sit at a
    # wanted rank, exact counts either side place the rank in the cluster and one of its
    # slopes is returned, equal to the direct value to the cluster's width (~2e-9 relative);
    # decimal data make such clusters (slopes equal in decimal, apart by binary rounding)
    calls = []
    member = _slopes.FastSlopes._member
    monkeypatch.setattr(
        _slopes.FastSlopes, "_member", lambda self, a, b: calls.append(1) or member(self, a, b)
    )
    rng = np.random.default_rng(5)
    x, y = tied_data(rng, 800, "decimal")
    x, y = x + 0.0, y + 0.0
    direct = _slopes.DirectSlopes(x, y)
    fast = _slopes.FastSlopes(x, y, cap=500)
    ks = [direct.n_finite // 3, direct.n_finite // 2, 2 * direct.n_finite // 3]
    assert fast.select(ks) == pytest.approx(direct.select(ks), rel=2e-9)
    assert calls  # the cluster path was taken


def test_pb_creatinine_example_of_the_mcr_package():
    # Data: serum (x) and plasma (y) creatinine, mg/dL, 110 patients (108 complete), the
    # `creatinine` data set of the R package mcr, as listed with mcr's printed Passing-Bablok
    # output (analytical CI) by Wicklin R, "Passing-Bablok regression", The DO Loop blog,
    # 14 Feb 2022: intercept -0.1171729 (-0.2001149, -0.020000), slope 1.0880089
    # (1.0000000, 1.173005).
    x, y = creatinine()
    fit = passing_bablok(x, y, n_boot=0)  # mcr's analytical CI: the rank-based interval
    assert fit.n_pairs == 108
    assert fit.slope.estimate == pytest.approx(1.0880089, abs=5e-8)
    assert fit.intercept.estimate == pytest.approx(-0.1171729, abs=5e-8)
    assert fit.slope.ci.low == pytest.approx(1.0, abs=5e-8)
    assert fit.intercept.ci.high == pytest.approx(-0.02, abs=5e-8)
    # mcr's upper limits differ by design: its source (R/mcPaBa.r) says the CI index is
    # taken "in analogy to the median" (mean of two angles at an even index) instead of
    # the paper's rounded rank, and it puts every vertical slope at +pi/2. Rebuilding that
    # documented rule on the same slopes reproduces the printed numbers, which confirms
    # the data listing; the paper's rule gives the order statistic S_(M2+K) instead.
    s = np.array(brute_slopes_with_minus_one(x, y, vertical=math.pi / 2))
    n, big_n = x.size, s.size
    offset = int(np.sum(s <= -math.pi / 4) + np.sum(s < -math.pi / 4))
    conf = stats.norm.ppf(0.975) * math.sqrt(n * (n - 1) * (2 * n + 5) / 18)

    def at(index2):
        half = (index2 + 1) // 2
        return math.tan(s[half - 1] if index2 % 2 else np.mean(s[half - 1 : half + 1]))

    upper = at(round(big_n + conf + offset))
    assert upper == pytest.approx(1.173005, abs=5e-7)  # printed with six decimals
    assert float(np.median(y - upper * x)) == pytest.approx(-0.2001149, abs=5e-8)
    assert fit.slope.ci.high == brute_pb(x, y)[2][1] == pytest.approx(1.1730769, abs=5e-8)


def brute_slopes_with_minus_one(x, y, vertical):
    """Sorted pair angles atan(S_ij), keeping S_ij = -1 (for the mcr cross-check only)."""
    out = []
    for i in range(len(x)):
        for j in range(i + 1, len(x)):
            dx, dy = x[j] - x[i], y[j] - y[i]
            if dx == 0 and dy == 0:
                continue
            out.append(vertical if dx == 0 else math.atan(dy / dx))
    return sorted(out)


def creatinine():
    # mcr `creatinine` data as listed by Wicklin (2022); "." = missing (2 rows dropped)
    rows = """0.82 0.79 1.83 1.62 1.39 1.36 0.81 1.3 1.72 1.88 3.23 3.35 1.23 1.06 1.37 1.34
    1.72 1.56 0.96 0.94 0.76 0.69 1.15 1.16 0.95 0.71 1 0.83 1.52 1.44 1.56 1.26 2.45 2.36
    1.85 1.9 0.89 0.95 0.82 0.77 1.01 0.82 0.96 0.88 3.38 3.42 1.31 1.15 1.1 0.96 1.26 1.12
    1.15 1.02 1.2 1.29 1.01 0.87 1.33 1.13 0.87 0.82 1.66 1.33 1.41 1.14 1.08 0.93 1.17 1.09
    0.82 . 1.77 1.89 1.33 1.57 1.23 1.29 1.21 1.13 1.2 1.11 1.49 1.61 0.89 0.79 1.09 1.19
    1.03 0.96 1.07 1.25 0.89 0.87 1.39 1.36 0.96 0.86 1.06 1.03 1.17 0.86 0.9 0.8 1.39 1.22
    0.91 0.86 2.28 2.25 0.9 0.87 0.83 . 1.34 1.3 1.32 1.04 1.02 0.92 1.04 1.01 1.27 1.21
    1.08 1.11 1.1 1.21 1.39 1.54 1.07 0.99 0.79 0.79 1.02 1.06 0.94 1.02 1.99 2.15 0.7 0.56
    0.84 1.01 0.66 0.59 1.1 1.17 0.9 0.82 2.06 2.09 1.31 1.44 1.03 1.22 1.61 1.77 1.52 1.6
    1.11 1.13 0.85 1.06 1.2 1.38 1.09 1.24 1.27 1.29 2.06 2.08 1.21 1.31 0.77 0.82 1.06 1.28
    1.02 1.15 1 1.04 1.47 1.51 0.97 1.13 1.7 1.84 1.78 1.94 0.93 1.32 0.92 1.36 1.59 1.88
    0.68 0.73 0.7 0.78 1.08 1.01 0.83 0.9 1.17 1.3 0.98 0.96 0.77 0.61 0.91 1.27 1.1 1.05
    0.8 1.12 0.85 0.72 0.82 0.87""".split()
    pairs = [(a, b) for a, b in zip(rows[0::2], rows[1::2], strict=True) if "." not in (a, b)]
    return np.array([float(a) for a, _ in pairs]), np.array([float(b) for _, b in pairs])


def test_pb_exact_line_gives_its_slope_and_intercept():
    # y = 3 + 2x exactly (common practice: an estimator of a line recovers it); tied x make
    # identical points. n = 3000 exceeds the direct limit: N = 4.5e6 equal slopes form one
    # tie cluster larger than the enumeration cap.
    rng = np.random.default_rng(5)
    for n in (40, 3000):
        x = rng.integers(0, 500, n).astype(float)
        fit = passing_bablok(x, 3.0 + 2.0 * x)
        assert (fit.slope.estimate, fit.intercept.estimate) == (2.0, 3.0)
        assert (fit.slope.ci.low, fit.slope.ci.high) == (2.0, 2.0)
        assert (fit.intercept.ci.low, fit.intercept.ci.high) == (3.0, 3.0)
        assert fit.note == ""


small_ints = st.lists(st.integers(-20, 20), min_size=3, max_size=25)


@settings(max_examples=60, deadline=None)
@given(st.data())
def test_pb_swapping_methods_inverts_the_slope(data):
    # Passing & Bablok 1983: "the result does not depend on the assignment of the methods to
    # X and Y"; the shifted median of the angles is symmetric about the line y = x, so the
    # swapped slope is 1/b for odd N and the inverse of a value between the two middle
    # slopes for even N (invariant; invented integer data)
    xs = data.draw(small_ints)
    ys = data.draw(st.lists(st.integers(-20, 20), min_size=len(xs), max_size=len(xs)))
    x, y = np.array(xs, float), np.array(ys, float)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", NotEstimableWarning)
        fwd = _pb_fit.pb_fit(x, y, None)
        back = _pb_fit.pb_fit(y, x, None)
    assume(not fwd.reason and not back.reason and fwd.slope != 0 and back.slope != 0)
    s = brute_slopes(xs, ys)
    big_n, k = len(s), sum(v < -1 for v in s)
    first = (big_n + 1) // 2 + k - 1 if big_n % 2 else big_n // 2 + k - 1  # 0-based
    mid = s[first : first + 2 - big_n % 2]
    lo, hi = min(mid), max(mid)
    assert lo - 1e-12 * abs(lo) <= 1.0 / back.slope <= hi + 1e-12 * abs(hi)
    if big_n % 2:
        assert 1.0 / back.slope == pytest.approx(fwd.slope, rel=1e-12)


@settings(max_examples=60, deadline=None)
@given(small_ints, st.integers(-1000, 1000), st.randoms(use_true_random=False))
def test_pb_common_shift_keeps_the_slope(xs, shift, rnd):
    # adding c to both methods leaves every pairwise difference, hence every slope, unchanged;
    # the intercept moves by c (1 - b) (invariant; integers keep the differences exact)
    x = np.array(xs, float)
    y = x + np.array([rnd.randint(-3, 3) for _ in xs], float)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", NotEstimableWarning)
        a = _pb_fit.pb_fit(x, y, 0.95)
        b = _pb_fit.pb_fit(x + shift, y + shift, 0.95)
    assert a.reason == b.reason
    assume(not a.reason)
    assert b.slope == a.slope and b.slope_ci == a.slope_ci
    assert b.intercept == pytest.approx(a.intercept + shift * (1 - a.slope), abs=1e-9)


@pytest.mark.parametrize(
    ("x", "y", "reason"),
    [
        ([1.0, 2.0], [1.0, 2.0], "fewer than 3 pairs"),
        ([4.0, 4.0, 4.0, 4.0], [1.0, 2.0, 3.0, 5.0], "all reference values identical"),
        ([1.0, 2.0, 3.0], [-1.0, -2.0, -3.0], "no slopes left"),
        ([1.0, 2.0, 3.0, 4.0], [8.0, 4.0, 0.0, -4.0], "not positively related"),
    ],
)
def test_pb_not_estimable_is_nan_with_reason_and_warning(x, y, reason):
    with pytest.warns(NotEstimableWarning, match=reason):
        fit = passing_bablok(x, y)
    assert math.isnan(fit.slope.estimate) and math.isnan(fit.intercept.estimate)
    assert reason in fit.note and reason in fit.slope.ci.note
    assert not fit.slope.ci.estimable and not fit.intercept.ci.estimable


def test_pb_rank_interval_not_estimable_for_tiny_samples():
    # n = 3 gives N = 3 slopes but C = 1.96 sqrt(3*2*11/18) = 3.75, so M1 < 1 (paper's ranks)
    with pytest.warns(NotEstimableWarning, match="rank-based interval"):
        fit = passing_bablok([1.0, 2.0, 3.0], [1.0, 2.5, 2.9], n_boot=0)
    assert fit.slope.estimate == 0.95 and not fit.slope.ci.estimable
    assert "rank-based interval" in fit.slope.ci.note


def cohort_data(n_subjects=12, seed=0):
    """Invented subject x segment data (17 segments per subject), for bootstrap tests."""
    rng = np.random.default_rng(seed)
    subject = np.repeat([f"S{i:03d}" for i in range(n_subjects)], 17)
    truth = np.repeat(rng.normal(8, 3, n_subjects), 17) + rng.normal(0, 1, 17 * n_subjects)
    x = np.round(truth + rng.normal(0, 0.4, truth.size), 1)
    y = np.round(0.5 + 0.95 * truth + rng.normal(0, 0.4, truth.size), 1)
    return x, y, subject


def test_pb_cluster_bootstrap_resamples_subjects_as_documented():
    # replay the documented draws (default_rng(seed).integers(0, S, S) per resample, pairs of
    # the drawn subjects in order) with the brute-force estimator, percentile via numpy
    x, y, subject = cohort_data(n_subjects=6)
    b, seed = 25, 7
    fit = passing_bablok(x, y, subject=subject, n_boot=b, seed=seed)
    codes, _ = pd.factorize(subject)
    rng = np.random.default_rng(seed)
    boot = []
    for _ in range(b):
        draw = rng.integers(0, 6, 6)
        idx = np.concatenate([np.flatnonzero(codes == c) for c in draw])
        sl, ic, _, _ = brute_pb(x[idx], y[idx])
        boot.append((sl, ic))
    lo, hi = np.quantile(np.array(boot), [0.025, 0.975], axis=0)
    assert (fit.slope.ci.low, fit.slope.ci.high) == pytest.approx((lo[0], hi[0]), abs=1e-12)
    assert (fit.intercept.ci.low, fit.intercept.ci.high) == pytest.approx((lo[1], hi[1]), abs=1e-12)
    assert fit.slope.ci.method == "subject cluster bootstrap, percentile, B=25, seed=7"
    assert (fit.slope.estimate, fit.intercept.estimate) == brute_pb(x, y)[:2]


def test_bootstrap_reproducible_with_seed_and_different_with_another():
    x, y, subject = cohort_data()
    for fn in (passing_bablok, deming):
        one = fn(x, y, subject=subject, n_boot=60, seed=123)
        two = fn(x, y, subject=subject, n_boot=60, seed=123)
        other = fn(x, y, subject=subject, n_boot=60, seed=124)
        assert one == two
        assert (one.slope.ci.low, one.slope.ci.high) != (other.slope.ci.low, other.slope.ci.high)
        assert (
            one.slope.estimate == other.slope.estimate
        )  # the point estimate does not depend on the seed


def test_bootstrap_without_seed_records_the_seed_it_used():
    x, y, subject = cohort_data()
    fit = deming(x, y, subject=subject, n_boot=40)
    seed = int(fit.slope.ci.method.rsplit("seed=", 1)[1])
    again = deming(x, y, subject=subject, n_boot=40, seed=seed)
    assert again.slope.ci == fit.slope.ci


def test_pb_bootstrap_budget_reduces_b_and_says_so(monkeypatch):
    import cohort.stats.regression

    # the refit budget applies above the weighted-slope limit; lower the limit to reach it
    monkeypatch.setattr(cohort.stats.regression, "PB_WEIGHTED_MAX_N", 0)
    x, y, subject = cohort_data()  # 204 pairs
    budget = 204 * 250
    fit = passing_bablok(x, y, subject=subject, n_boot=1000, seed=1, max_pair_resamples=budget)
    assert "B=250," in fit.slope.ci.method
    assert "reduced from B=1000 to B=250" in fit.note
    # below PB_BOOTSTRAP_MIN_B resamples: no bootstrap, the analytic interval and a note
    few = passing_bablok(x, y, subject=subject, n_boot=1000, seed=1, max_pair_resamples=204 * 50)
    assert few.slope.ci.method.startswith("rank-based")
    assert "cluster bootstrap not run" in few.note and "B=50" in few.note


def test_bootstrap_needs_two_subjects():
    x, y, _ = cohort_data(n_subjects=1)
    with pytest.warns(NotEstimableWarning, match="fewer than 2 subjects"):
        fit = deming(x, y, subject=["S000"] * x.size, n_boot=50, seed=1)
    assert not fit.slope.ci.estimable and math.isfinite(fit.slope.estimate)


def test_analytic_interval_with_subjects_says_it_ignores_clustering():
    x, y, subject = cohort_data()
    for fn in (passing_bablok, deming):
        assert "ignores the clustering" in fn(x, y, subject=subject, n_boot=0).note


def test_pb_and_deming_default_to_the_subject_cluster_bootstrap_of_every_estimator():
    # project rule (cohort.domain.options): every paired estimator defaults to the subject
    # cluster bootstrap with DEFAULT_N_BOOT resamples and DEFAULT_SEED; the textbook interval
    # is beside it. Same resampled subjects as limits_of_agreement, so the same method text.
    from cohort.domain.options import DEFAULT_N_BOOT, DEFAULT_SEED
    from cohort.stats import limits_of_agreement

    x, y, subject = cohort_data(n_subjects=8)
    expected = limits_of_agreement(x, y, subject=subject).bias.ci.method
    assert (
        expected
        == f"subject cluster bootstrap, percentile, B={DEFAULT_N_BOOT}, seed={DEFAULT_SEED}"
    )
    for fn in (passing_bablok, deming):
        fit = fn(x, y, subject=subject)
        assert fit.slope.ci.method == fit.intercept.ci.method == expected
        assert fit.slope.ci != fit.slope.analytic_ci and fit.slope.ci.estimable
        explicit = fn(x, y, subject=subject, n_boot=DEFAULT_N_BOOT, seed=DEFAULT_SEED)
        assert explicit.slope.ci == fit.slope.ci
        assert "ignores the clustering" not in fit.note


def test_to_frame_is_one_tidy_row_per_quantity():
    x, y, subject = cohort_data()
    fit = passing_bablok(x, y)
    frame = fit.to_frame()
    assert list(frame.columns) == [
        "procedure",
        "quantity",
        "estimate",
        "ci_low",
        "ci_high",
        "ci_method",
        "analytic_ci_low",
        "analytic_ci_high",
        "analytic_ci_method",
        "confidence_level",
        "n_subjects",
        "n_pairs",
        "note",
    ]
    assert frame["quantity"].tolist() == ["slope", "intercept"]
    assert (frame["procedure"] == "Passing-Bablok").all()
    assert frame.loc[0, "n_pairs"] == x.size and frame.loc[0, "confidence_level"] == 0.95
    assert frame.loc[0, "estimate"] == fit.slope.estimate
    boot = deming(x, y, subject=subject, n_boot=30, seed=2)
    frame = boot.to_frame()
    assert frame.loc[0, "ci_method"] == "subject cluster bootstrap, percentile, B=30, seed=2"
    assert frame.loc[0, "n_subjects"] == len(set(subject)) and frame.loc[0, "n_pairs"] == x.size
    # with the bootstrap, the jackknife interval (Linnet 1990) is still given beside it
    assert "jackknife" in boot.slope.analytic_ci.method
    assert boot.slope.analytic_ci == deming(x, y, n_boot=0).slope.ci


def test_repr_and_summary_show_estimate_and_interval():
    fit = deming(*deming_data())
    text = repr(fit)
    assert text.startswith("MethodRegression(procedure='Deming', slope=")
    low, high = fit.slope.ci.low, fit.slope.ci.high
    assert f"slope={fit.slope.estimate:.4g} [{low:.4g}, {high:.4g}]" in text
    summary = fit.summary()
    assert "slope" in summary and "intercept" in summary and "jackknife" in summary


@pytest.mark.parametrize(
    ("kwargs", "match"),
    [
        ({"reference": [1, 2, 3], "test": [1, 2]}, "same length"),
        (
            {"reference": [1, 2, np.nan], "test": [1, 2, 3]},
            "reference must hold finite values only",
        ),
        ({"reference": [[1, 2]], "test": [[1, 2]]}, "one-dimensional"),
        ({"confidence_level": 1.0}, "confidence_level"),
        ({"n_boot": -1}, "n_boot"),
        ({"n_boot": 20, "subject": ["a", "b"]}, r"subject must have one label per pair \(4\)"),
        ({"n_boot": 20, "subject": ["a", None, "b", "c"]}, "subject must not be missing, got 1"),
        # a bool is no subject labels: the shared check's ValueError (was a TypeError here)
        ({"n_boot": 20, "subject": True}, r"subject must have one label per pair \(4\)"),
        ({"n_boot": 19}, "n_boot must be 0 .* from 20 to"),  # the study file's rule
    ],
)
def test_invalid_input_raises(kwargs, match):
    args = {"reference": [1.0, 2.0, 3.0, 4.0], "test": [1.1, 2.0, 3.2, 3.9], **kwargs}
    for fn in (passing_bablok, deming):
        with pytest.raises(ValueError, match=match):
            fn(**args)
    with pytest.raises(ValueError, match="error_ratio"):
        deming([1.0, 2.0, 3.0], [1.0, 2.0, 3.5], error_ratio=0.0)
    with pytest.raises(ValueError, match="max_pair_resamples"):
        passing_bablok([1.0, 2.0, 3.0], [1.0, 2.0, 3.5], max_pair_resamples=-1)


# ------------------------------------------------------------------------------ Deming


def deming_data(n=80, seed=3):
    rng = np.random.default_rng(seed)
    truth = rng.uniform(2, 30, n)
    return truth + rng.normal(0, 1.0, n), 0.7 + 1.1 * truth + rng.normal(0, 1.5, n)


@pytest.mark.parametrize("ratio", [0.25, 1.0, 2.25, 40.0])
def test_deming_equals_textbook_closed_form(ratio):
    # independent textbook formula (Deming 1943; Cornbleet & Gochman 1979 (memory))
    x, y = deming_data()
    fit = deming(x, y, error_ratio=ratio)
    b, a = textbook_deming(x, y, ratio)
    assert fit.slope.estimate == pytest.approx(b, rel=1e-12)
    assert fit.intercept.estimate == pytest.approx(a, rel=1e-11)


@pytest.mark.parametrize("ratio", [1.0, 3.0])
def test_deming_equals_first_principal_component(ratio):
    # orthogonal regression = major axis = first principal component (Pearson 1901, common
    # practice); with var(e_y) = ratio var(e_x), scaling y by 1/sqrt(ratio) makes the errors
    # equal, so b = sqrt(ratio) * slope of the scaled major axis (numpy SVD)
    x, y = deming_data(seed=8)
    ys = y / math.sqrt(ratio)
    _, _, vt = np.linalg.svd(np.column_stack([x - x.mean(), ys - ys.mean()]))
    b = math.sqrt(ratio) * vt[0, 1] / vt[0, 0]
    assert deming(x, y, error_ratio=ratio).slope.estimate == pytest.approx(b, rel=1e-10)


def test_deming_equals_scipy_odr_while_it_imports():
    # scipy.odr (ODRPACK, Boggs et al.) fits the same model; deprecated in scipy 1.17 and to
    # be removed in 1.19, so only an independent check while present. Weights 1/sd^2 with
    # sd_y / sd_x = sqrt(ratio).
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DeprecationWarning)
        odr = pytest.importorskip("scipy.odr")
        x, y = deming_data(seed=9)
        ratio = 2.0
        data = odr.RealData(x, y, sx=np.ones_like(x), sy=np.full_like(y, math.sqrt(ratio)))
        # tight tolerances: ODRPACK's default sum-of-squares stop leaves ~1e-6 in the slope
        out = odr.ODR(data, odr.unilinear, beta0=[1.0, 0.0], sstol=1e-15, partol=1e-15).run()
    fit = deming(x, y, error_ratio=ratio)
    assert fit.slope.estimate == pytest.approx(out.beta[0], rel=1e-7)
    assert fit.intercept.estimate == pytest.approx(out.beta[1], rel=1e-6)


def test_deming_limits_of_the_error_ratio():
    # with ratio = var(e_y)/var(e_x): ratio -> infinity (all error in y) gives OLS of y on x,
    # s_xy / s_xx; ratio -> 0 (all error in x) gives the inverse of OLS of x on y,
    # s_yy / s_xy (limits of the closed form, derived in the docstring). Not the reverse.
    x, y = deming_data(seed=4)
    c = np.cov(x, y)
    ols_y_on_x = c[0, 1] / c[0, 0]
    inverse_ols_x_on_y = c[1, 1] / c[0, 1]
    assert deming(x, y, error_ratio=1e12).slope.estimate == pytest.approx(ols_y_on_x, rel=1e-9)
    assert deming(x, y, error_ratio=1e-12).slope.estimate == pytest.approx(
        inverse_ols_x_on_y, rel=1e-9
    )
    slopes = [deming(x, y, error_ratio=r).slope.estimate for r in (1e-3, 0.1, 1, 10, 1e3)]
    assert slopes == sorted(slopes, reverse=True)  # moves monotonically between the two


def test_deming_jackknife_interval_equals_a_leave_one_out_loop():
    # jackknife SE (Linnet 1990 Stat Med (memory)) recomputed by refitting n times with the
    # textbook formula; CI = estimate -+ t(0.975, n - 2) SE
    x, y = deming_data(n=40, seed=6)
    n = x.size
    fit = deming(x, y, error_ratio=1.5, n_boot=0)
    loo = np.array([textbook_deming(np.delete(x, i), np.delete(y, i), 1.5) for i in range(n)])
    se = np.sqrt((n - 1) / n * np.sum((loo - loo.mean(axis=0)) ** 2, axis=0))
    t = stats.t.ppf(0.975, n - 2)
    assert fit.slope.ci.low == pytest.approx(fit.slope.estimate - t * se[0], rel=1e-10)
    assert fit.slope.ci.high == pytest.approx(fit.slope.estimate + t * se[0], rel=1e-10)
    assert fit.intercept.ci.low == pytest.approx(fit.intercept.estimate - t * se[1], rel=1e-9)
    assert fit.intercept.ci.high == pytest.approx(fit.intercept.estimate + t * se[1], rel=1e-9)
    assert "jackknife" in fit.slope.ci.method


def test_deming_cluster_bootstrap_equals_refits_on_resampled_subjects():
    # the per-subject-sums shortcut must equal refitting each documented resample
    x, y, subject = cohort_data(n_subjects=9, seed=4)
    fit = deming(x, y, error_ratio=0.5, subject=subject, n_boot=40, seed=99)
    codes, _ = pd.factorize(subject)
    rng = np.random.default_rng(99)
    boot = []
    for _ in range(40):
        idx = np.concatenate([np.flatnonzero(codes == c) for c in rng.integers(0, 9, 9)])
        boot.append(textbook_deming(x[idx], y[idx], 0.5))
    lo, hi = np.quantile(np.array(boot), [0.025, 0.975], axis=0)
    assert (fit.slope.ci.low, fit.slope.ci.high) == pytest.approx((lo[0], hi[0]), rel=1e-9)
    assert (fit.intercept.ci.low, fit.intercept.ci.high) == pytest.approx((lo[1], hi[1]), rel=1e-9)


@pytest.mark.parametrize(
    ("x", "y", "reason"),
    [
        ([1.0, 2.0], [1.0, 2.0], "fewer than 3 pairs"),
        ([2.0, 2.0, 2.0], [1.0, 2.0, 3.0], "all reference values identical"),
        ([1.0, 2.0, 3.0, 4.0], [3.0, 3.0, 3.0, 3.0], "zero covariance"),
    ],
)
def test_deming_not_estimable_is_nan_with_reason_and_warning(x, y, reason):
    with pytest.warns(NotEstimableWarning, match=reason):
        fit = deming(x, y)
    assert math.isnan(fit.slope.estimate) and reason in fit.note
    assert not fit.slope.ci.estimable and reason in fit.intercept.ci.note


def test_result_is_frozen():
    fit = deming(*deming_data())
    assert isinstance(fit, MethodRegression)
    with pytest.raises(AttributeError):
        fit.slope.estimate = 1.0  # type: ignore[misc]
