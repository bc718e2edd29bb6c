"""Group comparisons, checked against registry reference libraries and published values.

Sources named beside each check: scipy.stats (kruskal, mannwhitneyu, f_oneway with
equal_var=False, fisher_exact), pingouin 0.7 (welch_anova, pairwise_gameshowell,
compute_effsize, compute_esci, mwu), statsmodels 0.15 (mixedlm, gee, multipletests,
proportion_confint, confint_proportions_2indep), Newcombe 1998 worked examples, the AHA
territory assignment of Cerqueira et al. 2002. The demo cohort is used for integration
only; invented data only in property tests and simulations.
"""

from __future__ import annotations

import itertools
import math
import warnings
from unittest import mock

import numpy as np
import pandas as pd
import pingouin as pg
import pytest
import statsmodels.api as sm
import statsmodels.formula.api as smf
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats
from statsmodels.stats.multitest import multipletests
from statsmodels.stats.proportion import confint_proportions_2indep, proportion_confint
from statsmodels.tools.sm_exceptions import ConvergenceWarning

from cohort.analysis import groups as G
from cohort.demo import write_demo
from cohort.io.study import load_study
from cohort.parallel import can_fork
from cohort.stats.results import NotEstimableWarning

ORDER = ("control", "acute", "chronic")
# Cerqueira et al. 2002 recommended territories (DOMAIN.md), written out independently
LAD = (1, 2, 7, 8, 13, 14, 17)
RCA = (3, 4, 9, 10, 15)
LCX = (5, 6, 11, 12, 16)


def samples(seed: int = 3, sizes=(11, 9, 14), shifts=(0.0, 0.6, 1.1), scales=(1.0, 2.0, 0.7)):
    rng = np.random.default_rng(seed)
    return [rng.normal(m, s, n).round(1) for n, m, s in zip(sizes, shifts, scales, strict=True)]


def long_frame(arrays, labels=ORDER, parameter="ff", method="m", summary="mean"):
    rows = []
    for g, a in zip(labels, arrays, strict=True):
        for i, v in enumerate(a):
            rows.append((f"{g}-{i}", g, method, parameter, summary, float(v), 17, ""))
    return pd.DataFrame(rows, columns=list(G.SUMMARY_COLUMNS))


# --- demo cohort (integration) ------------------------------------------------------------


@pytest.fixture(scope="module")
def study(tmp_path_factory):
    return load_study(write_demo(tmp_path_factory.mktemp("demo")))


def demo_findings(values: pd.DataFrame) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Per segment: hemorrhage (R2* > 50 1/s at 1.5 T, > 79 1/s at 3 T: O'Regan 2009 and
    the Storey 2007 scaling, DOMAIN.md) and |field| > 20 Hz (an invented finding present in
    every group, so that GEE is estimable); per subject: any positive segment."""
    r2 = values[values["parameter"].eq("r2star")]
    cut = np.where(r2["field_strength"] > 2.0, 79.0, 50.0)
    fld = values[values["parameter"].eq("field")]
    cols = ["subject", "group", "method", "segment"]
    segment = pd.concat(
        [
            r2[cols].assign(finding="hemorrhage", positive=r2["value"].to_numpy() > cut),
            fld[cols].assign(finding="field shift", positive=fld["value"].abs().to_numpy() > 20),
        ],
        ignore_index=True,
    )
    subject = segment.groupby(["subject", "group", "method", "finding"], as_index=False)[
        "positive"
    ].any()
    return segment, subject


@pytest.fixture(scope="module")
def result(study):
    segment, subject = demo_findings(study.values)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", NotEstimableWarning)
        return G.study_group_comparison(study, subject_findings=subject, segment_findings=segment)


# --- Kruskal-Wallis, Mann-Whitney, Welch, Games-Howell --------------------------------------


def test_kruskal_wallis_matches_scipy_with_ties():
    # scipy.stats.kruskal (tie-corrected H, chi-square p); values rounded to create ties
    a, b, c = samples()
    got = G.kruskal_wallis([a, b, c])
    want = stats.kruskal(a, b, c)
    assert got.statistic == pytest.approx(want.statistic, rel=1e-12)
    assert got.p_value == pytest.approx(want.pvalue, rel=1e-10)
    assert got.df == 2


@pytest.mark.parametrize("sizes", [(3, 7), (8, 8), (5, 40), (2, 2), (1 + 1, 30)])
def test_mann_whitney_exact_matches_scipy(sizes):
    # scipy.stats.mannwhitneyu(method='exact'), continuous values (no ties)
    rng = np.random.default_rng(sum(sizes))
    x, y = rng.normal(0.4, 1, sizes[0]), rng.normal(0, 1, sizes[1])
    got = G.mann_whitney(x, y, method="exact")
    want = stats.mannwhitneyu(x, y, method="exact")
    assert got.statistic == pytest.approx(want.statistic)
    assert got.p_value == pytest.approx(want.pvalue, rel=1e-9)


def test_mann_whitney_asymptotic_and_auto_match_scipy():
    # scipy.stats.mannwhitneyu: asymptotic (tie + continuity corrected) and its 'auto' rule
    a, b, _ = samples()
    got = G.mann_whitney(b, a)
    want = stats.mannwhitneyu(b, a)  # ties present: scipy's auto picks the normal approximation
    assert got.p_method.startswith("normal approximation")
    assert got.statistic == pytest.approx(want.statistic)
    assert got.p_value == pytest.approx(want.pvalue, rel=1e-12)
    x, y = np.array([1.1, 2.3, 3.2, 4.8]), np.linspace(2.0, 9.0, 12)
    assert G.mann_whitney(x, y).p_method == "exact, no ties"
    assert G.mann_whitney(x, y).p_value == pytest.approx(stats.mannwhitneyu(x, y).pvalue)


def test_welch_anova_matches_scipy_pingouin_and_formula():
    # scipy.stats.f_oneway(equal_var=False) and pingouin.welch_anova (reference libraries),
    # and Welch 1951's formula written out here
    arrays = samples()
    got = G.welch_anova(arrays)
    want = stats.f_oneway(*arrays, equal_var=False)
    assert got.statistic == pytest.approx(want.statistic, rel=1e-12)
    assert got.p_value == pytest.approx(want.pvalue, rel=1e-10)
    frame = pd.DataFrame(
        {"v": np.concatenate(arrays), "g": np.repeat(ORDER, [a.size for a in arrays])}
    )
    ping = pg.welch_anova(frame, dv="v", between="g")
    assert got.df_denominator == pytest.approx(ping["ddof2"].iloc[0], rel=1e-10)
    assert got.statistic == pytest.approx(ping["F"].iloc[0], rel=1e-10)
    n = np.array([a.size for a in arrays])
    m = np.array([a.mean() for a in arrays])
    w = n / np.array([a.var(ddof=1) for a in arrays])
    mw = (w * m).sum() / w.sum()
    lam = ((1 - w / w.sum()) ** 2 / (n - 1)).sum()
    f = ((w * (m - mw) ** 2).sum() / 2) / (1 + 2 * 1 * lam / 8)
    assert got.statistic == pytest.approx(f, rel=1e-12)
    assert got.df_denominator == pytest.approx(8 / (3 * lam), rel=1e-12)


def test_games_howell_matches_pingouin():
    # pingouin.pairwise_gameshowell; pingouin orders pairs A < B alphabetically and reports
    # mean(A) - mean(B); ours read "later vs earlier" in the given order
    arrays = samples()
    labels = ("a", "b", "c")
    pairs = G.games_howell(arrays, labels)
    frame = pd.DataFrame(
        {"v": np.concatenate(arrays), "g": np.repeat(labels, [a.size for a in arrays])}
    )
    ref = pg.pairwise_gameshowell(frame, dv="v", between="g").set_index(["A", "B"])
    assert [p.comparison for p in pairs] == ["b vs a", "c vs a", "c vs b"]
    for pair in pairs:
        row = ref.loc[(pair.second, pair.first)]
        assert pair.statistic == pytest.approx(-row["T"], rel=1e-10)
        assert pair.df == pytest.approx(row["df"], rel=1e-10)
        assert pair.p_adjusted == pytest.approx(row["pval"], rel=1e-6)
        # the unadjusted p is the Welch t-test's: scipy.stats.ttest_ind(equal_var=False)
        i, j = labels.index(pair.first), labels.index(pair.second)
        welch = stats.ttest_ind(arrays[i], arrays[j], equal_var=False)
        assert pair.p_value == pytest.approx(welch.pvalue, rel=1e-10)


# --- effect sizes ---------------------------------------------------------------------------


def test_hedges_g_and_interval_match_pingouin():
    # pingouin.compute_effsize(eftype='hedges') and compute_esci (t quantile, n1+n2-2 df)
    a, b, _ = samples()
    got = G.hedges_g(b, a)
    g = pg.compute_effsize(b, a, eftype="hedges")
    low, high = pg.compute_esci(g, nx=b.size, ny=a.size, eftype="hedges", decimals=12)
    assert got.value == pytest.approx(g, rel=1e-12)
    assert (got.ci.low, got.ci.high) == pytest.approx((low, high), rel=1e-10)
    assert "Hedges & Olkin" in got.ci.method


def test_cliffs_delta_matches_pingouin_cles():
    # pingouin.mwu CLES = P(x > y) + P(x = y) / 2, so delta = 2 CLES - 1
    a, b, _ = samples()
    got = G.cliffs_delta(b, a)
    assert got.value == pytest.approx(2 * pg.mwu(b, a)["CLES"].iloc[0] - 1, abs=1e-12)


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
    got = G.cliffs_delta(b, a)
    assert got.ci.low == pytest.approx(low, rel=1e-10)


@pytest.mark.parametrize(("nx", "ny", "shift"), [(12, 15, 0.8), (6, 6, 3.0)])
def test_cliffs_interval_covers_the_true_delta(nx, ny, shift):
    # simulation (invented normal data): true delta = 2 Phi(shift / sqrt 2) - 1; with
    # shift 3 and 6 + 6 subjects most samples are completely separated (fallback interval)
    rng = np.random.default_rng(20261202)
    true = 2 * stats.norm.cdf(shift / math.sqrt(2)) - 1
    covered = 0
    for _ in range(300):
        e = G.cliffs_delta(rng.normal(shift, 1, nx), rng.normal(0, 1, ny))
        covered += e.ci.low <= true <= e.ci.high
    assert 0.91 <= covered / 300 <= 0.98


def test_cliffs_interval_at_complete_separation_solves_the_score_equation():
    # Hanley & McNeil 1982 variance at A = theta, written out: (1 - A)^2 = z^2 V(A)
    x, y = np.array([5.0, 6, 7, 8]), np.array([1.0, 2, 3])
    got = G.cliffs_delta(x, y)
    assert got.value == 1.0 and got.ci.high == 1.0 and "Hanley-McNeil" in got.ci.method
    a, m, n, z = (got.ci.low + 1) / 2, 4, 3, stats.norm.ppf(0.975)
    v = (
        a * (1 - a) + (m - 1) * (a / (2 - a) - a * a) + (n - 1) * (2 * a * a / (1 + a) - a * a)
    ) / (m * n)
    assert (1 - a) ** 2 == pytest.approx(z * z * v, rel=1e-8)
    mirrored = G.cliffs_delta(y, x)
    assert (mirrored.ci.low, mirrored.ci.high) == pytest.approx((-1.0, -got.ci.low))


# --- proportions ----------------------------------------------------------------------------


def test_wilson_interval_matches_statsmodels_and_newcombe():
    # statsmodels proportion_confint(method='wilson'); Newcombe 1998 Table I (memory, DOMAIN.md)
    for (x, n), (low, high) in {
        (81, 263): (0.2553, 0.3662),
        (15, 148): (0.0624, 0.1605),
        (0, 20): (0.0, 0.1611),
        (1, 29): (0.0061, 0.1718),
    }.items():
        ci = G.wilson_interval(x, n)
        assert (ci.low, ci.high) == pytest.approx((low, high), abs=6e-5)
        assert (ci.low, ci.high) == pytest.approx(
            proportion_confint(x, n, method="wilson"), abs=1e-12
        )


def test_risk_difference_matches_statsmodels_and_newcombe_examples():
    # Newcombe 1998 (Stat Med 17:873) method 10 examples (memory): 56/70 - 48/80 -> 0.0524 to
    # 0.3339; 9/10 - 3/10 -> 0.1705 to 0.8090; and statsmodels confint_proportions_2indep
    assert (
        G.risk_difference(56, 70, 48, 80).ci.low,
        G.risk_difference(56, 70, 48, 80).ci.high,
    ) == (pytest.approx((0.0524, 0.3339), abs=6e-5))
    assert G.risk_difference(9, 10, 3, 10).ci.low == pytest.approx(0.1705, abs=6e-5)
    assert G.risk_difference(9, 10, 3, 10).ci.high == pytest.approx(0.8090, abs=6e-5)
    for counts in [(5, 56, 0, 29), (0, 10, 0, 20), (10, 10, 0, 20), (3, 16, 7, 16)]:
        got = G.risk_difference(*counts)
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
    got = G.freeman_halton(np.array(x), np.array(n))
    assert got.p_value == pytest.approx(p, rel=1e-10)
    assert G.count_tables(n, sum(x)) == count
    assert got.p_method.startswith(f"exact enumeration of {count} tables")


def test_freeman_halton_two_groups_is_fisher_2x2():
    # scipy.stats.fisher_exact on a 2x2 table is exact (no Monte Carlo)
    for x, n in [((2, 7), (10, 9)), ((0, 5), (12, 6)), ((4, 4), (8, 8))]:
        table = [[x[0], n[0] - x[0]], [x[1], n[1] - x[1]]]
        got = G.freeman_halton(np.array(x), np.array(n))
        assert got.p_value == pytest.approx(stats.fisher_exact(table).pvalue, rel=1e-10)


def test_freeman_halton_agrees_with_scipy_monte_carlo():
    # scipy.stats.fisher_exact on r x 2 is Monte Carlo only: fix 100,000 resamples and a
    # seed and allow 4 standard errors of a binomial proportion
    x, n = np.array([4, 11, 7]), np.array([20, 22, 25])
    got = G.freeman_halton(x, n)
    res = stats.fisher_exact(
        np.c_[x, n - x],
        method=stats.MonteCarloMethod(n_resamples=100_000, rng=np.random.default_rng(5)),
    )
    se = math.sqrt(got.p_value * (1 - got.p_value) / 100_000)
    assert abs(res.pvalue - got.p_value) < 4 * se


def test_freeman_halton_monte_carlo_above_budget_says_so_and_is_reproducible():
    x, n = np.array([4, 11, 7]), np.array([20, 22, 25])
    exact = G.freeman_halton(x, n).p_value
    mc = G.freeman_halton(x, n, max_tables=10, n_draws=50_000, seed=11)
    again = G.freeman_halton(x, n, max_tables=10, n_draws=50_000, seed=11)
    assert mc.p_method.startswith("Monte Carlo: 50,000 tables") and "seed=11" in mc.p_method
    assert mc.p_value == again.p_value
    assert abs(mc.p_value - exact) < 4 * math.sqrt(exact * (1 - exact) / 50_000)


def test_compare_proportions_pairs_match_scipy_and_holm(result, study):
    tests = result.proportion_tests
    props = result.proportions
    _, subject = demo_findings(study.values)
    part = subject[subject["method"].eq("reference-fit") & subject["finding"].eq("hemorrhage")]
    counts = part.groupby("group")["positive"].agg(["sum", "count"])
    rows = tests[tests["method"].eq("reference-fit") & tests["finding"].eq("hemorrhage")]
    pair = rows[rows["comparison"].eq("acute vs control")].iloc[0]
    a, na = int(counts.loc["acute", "sum"]), int(counts.loc["acute", "count"])
    c, nc = int(counts.loc["control", "sum"]), int(counts.loc["control", "count"])
    # scipy.stats.fisher_exact 2x2 and statsmodels' Newcombe interval
    assert pair["p_value"] == pytest.approx(stats.fisher_exact([[a, na - a], [c, nc - c]]).pvalue)
    assert pair["effect_size"] == pytest.approx(a / na - c / nc)
    want = confint_proportions_2indep(a, na, c, nc, method="newcomb", compare="diff")
    assert (pair["effect_ci_low"], pair["effect_ci_high"]) == pytest.approx(want)
    pairs = rows[rows["comparison"].ne(G.ALL_GROUPS)]
    with mock.patch("gc.collect", return_value=0):  # statsmodels' Holm calls gc.collect()
        holm = multipletests(pairs["p_value"], method="holm")[1]
    np.testing.assert_allclose(pairs["p_adjusted"], holm)  # statsmodels multipletests
    omnibus = rows[rows["comparison"].eq(G.ALL_GROUPS)].iloc[0]
    x = counts.loc[list(ORDER), "sum"].to_numpy()
    n = counts.loc[list(ORDER), "count"].to_numpy()
    assert omnibus["p_value"] == pytest.approx(G.freeman_halton(x, n).p_value)
    assert omnibus["p_method"].startswith("exact enumeration")
    assert set(tests.columns) == set(G.PROPORTION_TEST_COLUMNS)
    share = props[props["method"].eq("reference-fit") & props["finding"].eq("hemorrhage")]
    assert share.set_index("group")["n_positive"].to_dict() == counts["sum"].to_dict()


# --- summaries and descriptives -------------------------------------------------------------


def test_subject_summaries_match_direct_pandas(study, result):
    s = result.summaries
    v = study.values
    assert tuple(s.columns) == G.SUMMARY_COLUMNS
    direct = v.groupby(["subject", "method", "parameter"])["value"].agg(["mean", "max", "count"])
    for kind in ("mean", "max"):
        part = s[s["summary"].eq(kind)].set_index(["subject", "method", "parameter"])
        np.testing.assert_allclose(part["value"], direct.loc[part.index, kind])
        np.testing.assert_array_equal(part["n_segments"], direct.loc[part.index, "count"])


def test_culprit_mean_uses_the_aha_territory_and_is_nan_for_controls(study, result):
    # territories of Cerqueira et al. 2002 (LAD/RCA/LCx segment lists above)
    s = result.summaries[result.summaries["summary"].eq(G.CULPRIT_MEAN)]
    subjects = study.subjects.set_index("subject")
    patient = subjects[subjects["culprit_territory"].ne("")].index[0]
    territory = subjects.loc[patient, "culprit_territory"]
    segments = {"LAD": LAD, "RCA": RCA, "LCx": LCX}[territory]
    v = study.values
    part = v[v["subject"].eq(patient) & v["parameter"].eq("ff") & v["segment"].isin(segments)]
    for method, values in part.groupby("method")["value"]:
        row = s[s["subject"].eq(patient) & s["method"].eq(method) & s["parameter"].eq("ff")].iloc[0]
        assert row["value"] == pytest.approx(values.mean())
        assert row["n_segments"] == values.size
    controls = s[s["group"].eq("control")]
    assert controls["value"].isna().all() and controls["note"].str.contains("no culprit").all()


def test_subject_summaries_warn_for_missing_culprit_and_reject_unknown_territory(study):
    with pytest.warns(NotEstimableWarning, match="no culprit territory"):
        G.subject_summaries(study.values, study.subjects)
    bad = study.subjects.assign(culprit_territory="LM")
    with pytest.raises(ValueError, match=r"culprit_territory.*must be blank or one of"):
        G.subject_summaries(study.values, bad)
    without = G.subject_summaries(study.values, study.subjects.drop(columns="culprit_territory"))
    assert set(without["summary"]) == {"mean", "max"}


def test_describe_groups_matches_numpy(result):
    d = result.descriptives
    s = result.summaries
    row = d[d["parameter"].eq("r2star") & d["method"].eq("quickmap") & d["summary"].eq("max")]
    row = row.set_index("group").loc["acute"]
    x = s[
        s["parameter"].eq("r2star")
        & s["method"].eq("quickmap")
        & s["summary"].eq("max")
        & s["group"].eq("acute")
    ]["value"].to_numpy()
    # numpy quantile (linear, Hyndman & Fan type 7) and ddof=1 SD
    assert (row["q1"], row["median"], row["q3"]) == pytest.approx(
        tuple(np.quantile(x, [0.25, 0.5, 0.75]))
    )
    assert row["sd"] == pytest.approx(np.std(x, ddof=1)) and row["n_subjects"] == x.size
    assert row["unit"] == "1/s"
    control = d[d["summary"].eq(G.CULPRIT_MEAN) & d["group"].eq("control")]
    assert (control["n_subjects"] == 0).all() and control["note"].str.contains(
        "not estimable"
    ).all()


# --- the group comparison table -------------------------------------------------------------


def test_group_comparison_rows_match_scipy_and_pingouin(result):
    table = result.comparisons
    assert tuple(table.columns) == G.COMPARISON_COLUMNS
    s = result.summaries
    part = s[s["parameter"].eq("r2star") & s["method"].eq("reference-fit") & s["summary"].eq("max")]
    by = {g: part.loc[part["group"].eq(g), "value"].to_numpy() for g in ORDER}
    rows = table[
        table["parameter"].eq("r2star")
        & table["method"].eq("reference-fit")
        & table["summary"].eq("max")
    ]
    kw = rows[rows["test"].eq(G.KRUSKAL_WALLIS)].iloc[0]
    assert kw["comparison"] == G.ALL_GROUPS
    assert kw["p_value"] == pytest.approx(stats.kruskal(*by.values()).pvalue)  # scipy
    mw = rows[rows["test"].eq(G.MANN_WHITNEY) & rows["comparison"].eq("acute vs control")].iloc[0]
    want = stats.mannwhitneyu(by["acute"], by["control"])  # scipy, its 'auto' rule
    assert (mw["statistic"], mw["p_value"]) == pytest.approx((want.statistic, want.pvalue))
    welch = rows[rows["test"].eq(G.WELCH_ANOVA)].iloc[0]
    assert welch["p_value"] == pytest.approx(stats.f_oneway(*by.values(), equal_var=False).pvalue)
    gh = rows[rows["test"].eq(G.GAMES_HOWELL) & rows["comparison"].eq("chronic vs acute")].iloc[0]
    assert gh["effect_size"] == pytest.approx(
        pg.compute_effsize(by["chronic"], by["acute"], eftype="hedges")
    )
    assert gh["correction"].startswith("studentized range")


def test_group_comparison_families_are_holm_corrected(result):
    # statsmodels multipletests(method='holm') over each stated family
    table = result.comparisons
    for _, family in table[table["correction"].eq("holm")].groupby("family"):
        finite = family["p_value"].notna()
        with mock.patch("gc.collect", return_value=0):  # statsmodels' Holm calls gc.collect()
            holm = multipletests(family.loc[finite, "p_value"], method="holm")[1]
        np.testing.assert_allclose(family.loc[finite, "p_adjusted"], holm)
    omnibus = table[table["test"].eq(G.KRUSKAL_WALLIS) & table["summary"].eq("mean")]
    assert omnibus["family"].nunique() == 1 and len(omnibus) == 3 * 2  # parameters x methods


def test_culprit_summary_leaves_controls_out_with_a_note(result):
    table = result.comparisons
    rows = table[table["summary"].eq(G.CULPRIT_MEAN) & table["test"].eq(G.KRUSKAL_WALLIS)]
    assert (rows["comparison"] == "groups acute, chronic").all()
    assert rows["note"].str.contains("left out \\(no value\\): control").all()


def test_bh_correction_option(study):
    summaries = G.subject_summaries(study.values, study.subjects.drop(columns="culprit_territory"))
    table = G.compare_summaries(summaries, ORDER, tests=("kruskal-wallis",), correction="fdr_bh")
    omnibus = table[table["comparison"].eq(G.ALL_GROUPS)]
    assert omnibus["family"].nunique() == 2  # one family per summary (mean, max)
    for _, family in omnibus.groupby("family"):  # statsmodels multipletests(method='fdr_bh')
        expected = multipletests(family["p_value"], method="fdr_bh")[1]
        np.testing.assert_allclose(family["p_adjusted"], expected)
    assert (table["correction"] == "benjamini-hochberg").all()


def test_too_few_subjects_gives_not_estimable_rows_not_a_crash():
    arrays = [np.array([1.0, 2.0, 3.0, 2.5]), np.array([4.0]), np.array([5.0, 6.5, 7.0])]
    with pytest.warns(NotEstimableWarning) as record:
        table = G.compare_summaries(long_frame(arrays))
    messages = [str(w.message) for w in record]
    assert any(
        "Kruskal-Wallis not estimable: fewer than 2 subjects in acute" in m for m in messages
    )
    assert any("Hedges' g not estimable: fewer than 2 subjects in acute" in m for m in messages)
    omnibus = table[table["comparison"].eq(G.ALL_GROUPS)]
    assert omnibus["p_value"].isna().all() and omnibus["note"].str.contains("not estimable").all()
    pairs = table[table["comparison"].eq("chronic vs control")]
    assert pairs["p_value"].notna().all()  # pairs without the small group are still tested
    small = table[table["comparison"].eq("acute vs control")]
    assert small["p_value"].isna().all() and small["note"].str.contains("not estimable").all()


def test_zero_variance_is_not_estimable_for_welch():
    with pytest.warns(NotEstimableWarning, match="zero variance in b"):
        got = G.welch_anova([np.array([1.0, 2.0, 3.0]), np.array([2.0, 2.0])], ["a", "b"])
    assert math.isnan(got.p_value) and "not estimable" in got.note


group_sizes = st.tuples(st.integers(3, 7), st.integers(3, 7), st.integers(3, 7))


@settings(max_examples=15, deadline=None)
@given(group_sizes, st.integers(0, 10_000), st.permutations(["x1", "x2", "x3"]))
def test_consistent_relabelling_keeps_every_p_value(sizes, seed, names):
    # invented data; renaming groups consistently (data and order) cannot change a test
    arrays = samples(seed, sizes)
    mapping = dict(zip(ORDER, names, strict=True))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", NotEstimableWarning)
        before = G.compare_summaries(long_frame(arrays))
        after = G.compare_summaries(long_frame(arrays, names), [mapping[g] for g in ORDER])
    np.testing.assert_allclose(after["p_value"], before["p_value"], equal_nan=True)
    np.testing.assert_allclose(after["p_adjusted"], before["p_adjusted"], equal_nan=True)
    pairs = itertools.permutations(ORDER, 2)
    renamed = before["comparison"].replace(
        {f"{a} vs {b}": f"{mapping[a]} vs {mapping[b]}" for a, b in pairs}
    )
    assert list(after["comparison"]) == list(renamed)


@settings(max_examples=10, deadline=None)
@given(group_sizes, st.integers(0, 10_000))
def test_reversed_group_order_flips_effects_not_p_values(sizes, seed):
    arrays = samples(seed, sizes)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", NotEstimableWarning)
        forward = G.compare_summaries(long_frame(arrays)).set_index(["test", "comparison"])
        back = G.compare_summaries(long_frame(arrays), ORDER[::-1]).set_index(
            ["test", "comparison"]
        )
    for (test, comparison), row in forward.iterrows():
        if comparison == G.ALL_GROUPS:
            assert back.loc[(test, comparison), "p_value"] == pytest.approx(row["p_value"])
            continue
        first, second = comparison.split(" vs ")
        other = back.loc[(test, f"{second} vs {first}")]
        assert other["p_value"] == pytest.approx(row["p_value"], rel=1e-9)
        assert other["effect_size"] == pytest.approx(-row["effect_size"], abs=1e-12)
        assert other["effect_ci_low"] == pytest.approx(-row["effect_ci_high"], abs=1e-9)


# --- segment-level models -------------------------------------------------------------------


def joint_wald(res, names):
    r = np.zeros((len(names), len(res.params)))
    for i, name in enumerate(names):
        r[i, list(res.params.index).index(name)] = 1.0
    return float(np.squeeze(res.wald_test(r, scalar=True).statistic))


def test_mixed_model_matches_a_direct_statsmodels_fit(study, result):
    # statsmodels formula mixedlm, REML, random intercept per subject (reference library)
    v = study.values
    part = v[v["parameter"].eq("r2star") & v["method"].eq("reference-fit")]
    fit = smf.mixedlm("value ~ C(group, Treatment('control'))", part, groups=part["subject"]).fit(
        reml=True
    )
    rows = result.models[
        result.models["model"].eq(G.GROUP_DIFFERENCE)
        & result.models["parameter"].eq("r2star")
        & result.models["method"].eq("reference-fit")
    ].set_index("term")
    assert (rows["path"] == G.MIXED_PATH).all()
    for g in ("acute", "chronic"):
        name = f"C(group, Treatment('control'))[T.{g}]"
        assert rows.loc[f"group[{g}]", "estimate"] == pytest.approx(fit.fe_params[name], rel=1e-5)
        assert rows.loc[f"group[{g}]", "std_error"] == pytest.approx(fit.bse_fe[name], rel=1e-4)
        assert rows.loc[f"group[{g}]", "p_value"] == pytest.approx(fit.pvalues[name], rel=1e-3)
    names = [f"C(group, Treatment('control'))[T.{g}]" for g in ("acute", "chronic")]
    assert rows.loc[G.JOINT_GROUP, "statistic"] == pytest.approx(joint_wald(fit, names), rel=1e-4)
    assert rows.loc[G.JOINT_GROUP, "df"] == 2


def test_method_group_interaction_matches_a_direct_fit(study, result):
    # statsmodels mixedlm on test - reference per segment (reference library), fitted with
    # Nelder-Mead: its default BFGS stops short here (REML variance at the boundary, 0)
    p = study.paired
    part = p[p["parameter"].eq("r2star")].assign(
        diff=lambda f: f["test_value"] - f["reference_value"]
    )
    model = smf.mixedlm("diff ~ C(group, Treatment('control'))", part, groups=part["subject"])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)  # "MLE may be on the boundary"
        fit = model.fit(reml=True, method=["nm"])
    assert fit.converged
    names = [f"C(group, Treatment('control'))[T.{g}]" for g in ("acute", "chronic")]
    rows = result.models[
        result.models["model"].eq(G.METHOD_BY_GROUP) & result.models["parameter"].eq("r2star")
    ]
    joint = rows[rows["term"].eq(G.JOINT_GROUP)].iloc[0]
    assert joint["statistic"] == pytest.approx(joint_wald(fit, names), rel=1e-4)
    assert joint["p_value"] == pytest.approx(stats.chi2.sf(joint_wald(fit, names), 2), rel=1e-3)
    # the planted truth of the demo: quickmap compresses hemorrhagic R2* (acute only)
    assert rows.set_index("term").loc["group[acute]", "estimate"] < 0


def test_gee_matches_a_direct_statsmodels_fit(study, result):
    # statsmodels formula gee, binomial, exchangeable, clustered by subject (reference library)
    segment, _ = demo_findings(study.values)
    part = segment[segment["method"].eq("reference-fit") & segment["finding"].eq("field shift")]
    part = part.assign(y=part["positive"].astype(float))
    fit = smf.gee(
        "y ~ C(group, Treatment('control'))", groups="subject", data=part,
        family=sm.families.Binomial(), cov_struct=sm.cov_struct.Exchangeable(),
    ).fit()  # fmt: skip
    rows = result.models[
        result.models["model"].eq(G.FINDING_BY_GROUP)
        & result.models["method"].eq("reference-fit")
        & result.models["finding"].eq("field shift")
    ].set_index("term")
    for g in ("acute", "chronic"):
        name = f"C(group, Treatment('control'))[T.{g}]"
        assert rows.loc[f"group[{g}]", "estimate"] == pytest.approx(fit.params[name], rel=1e-6)
        assert rows.loc[f"group[{g}]", "std_error"] == pytest.approx(fit.bse[name], rel=1e-6)
    names = [f"C(group, Treatment('control'))[T.{g}]" for g in ("acute", "chronic")]
    assert rows.loc[G.JOINT_GROUP, "statistic"] == pytest.approx(joint_wald(fit, names), rel=1e-6)


@pytest.mark.skipif(not can_fork(), reason="worker processes are forked on Linux only")
def test_gee_fits_in_worker_processes_give_the_same_table(study, result):
    segment, _ = demo_findings(study.values)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        forked = G.finding_models(segment, study.subjects, ORDER, workers=2)
    serial = result.models[result.models["model"].eq(G.FINDING_BY_GROUP)].reset_index(drop=True)
    pd.testing.assert_frame_equal(forked, serial, check_exact=True)
    assert any("separation" in str(w.message) for w in caught)  # repeated from the workers


def test_gee_separation_is_not_estimable_with_the_reason(result):
    rows = result.models[result.models["finding"].eq("hemorrhage")]
    assert (rows["term"] == G.JOINT_GROUP).all() and rows["p_value"].isna().all()
    assert rows["note"].str.contains("separation: every segment of group\\(s\\) control").all()


def test_subject_means_path_equals_the_mixed_model_on_a_balanced_design(study):
    # balanced (every subject 17 segments): GLS of the random-intercept model = OLS on the
    # subject means (algebra; see MIXED_MODEL_MAX_OBSERVATIONS), statsmodels MixedLM fit
    v = study.values
    part = v[v["parameter"].eq("r2star") & v["method"].eq("reference-fit")]
    # the demo leaves a few test values blank, so their reference partners are excluded:
    # keep the subjects with all 17 segments
    part = part[part.groupby("subject")["segment"].transform("size").eq(17)]
    assert part.groupby("subject").size().nunique() == 1 and part["subject"].nunique() > 40
    mixed = G.group_models(part, study.subjects, ORDER, path="mixed").set_index("term")
    means = G.group_models(part, study.subjects, ORDER, path="subject-means").set_index("term")
    assert (means["path"] == G.SUBJECT_MEANS_PATH).all()
    for term in ("group[acute]", "group[chronic]"):
        assert means.loc[term, "estimate"] == pytest.approx(mixed.loc[term, "estimate"], rel=1e-6)
        assert means.loc[term, "std_error"] == pytest.approx(mixed.loc[term, "std_error"], rel=1e-3)
    # statsmodels OLS on the subject means, F test of the group terms
    subject_means = part.groupby(["subject", "group"], as_index=False)["value"].mean()
    ols = smf.ols("value ~ C(group, Treatment('control'))", subject_means).fit()
    f = ols.f_test(
        "C(group, Treatment('control'))[T.acute] = 0, C(group, Treatment('control'))[T.chronic] = 0"
    )
    assert means.loc[G.JOINT_GROUP, "statistic"] == pytest.approx(float(np.squeeze(f.fvalue)))
    assert means.loc[G.JOINT_GROUP, "df_denominator"] == ols.df_resid


def test_path_is_chosen_by_size_and_stated(study):
    assert G.choose_model_path(10_000)[0] == "mixed"
    assert G.choose_model_path(10_001)[0] == "subject-means"
    assert G.choose_model_path(10, "subject-means") == ("subject-means", "subject-means requested")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", NotEstimableWarning)
        out = G.group_comparison_table(study.values, study.subjects, max_mixed_observations=100)
    assert out.model_path.startswith(G.SUBJECT_MEANS_PATH) and "large cohort" in out.model_path
    joint = out.models[out.models["term"].eq(G.JOINT_GROUP)]
    # each fit states its own size: the used values of its parameter and method
    sizes = (
        study.values.astype({"parameter": str, "method": str})
        .groupby(["parameter", "method"])
        .size()
    )
    for row in joint.itertuples():
        n = sizes[(str(row.parameter), str(row.method))]
        assert f"{n} values per fit > 100" in row.note
    assert set(out.tables()) >= {"group_comparison", "group_descriptives", "group_models"}


def test_covariates_enter_the_model_and_constant_ones_are_not_estimable(study):
    v = study.values
    part = v[v["parameter"].eq("r2star") & v["method"].eq("reference-fit")]
    rows = G.group_models(
        part, study.subjects, ORDER, covariates=("age", "sex"), path="subject-means"
    )
    assert {"age", "sex[M]"} <= set(rows["term"])
    age = rows.set_index("term").loc["age"]
    assert math.isnan(age["p_adjusted"]) and age["correction"].startswith("none")
    constant = study.subjects.assign(site="A", coil=8.0)
    for covariate in ("site", "coil"):
        with pytest.warns(NotEstimableWarning, match=f"covariate\\(s\\) {covariate} constant"):
            out = G.group_models(part, constant, ORDER, covariates=(covariate,), path="mixed")
        assert out["p_value"].isna().all()
    collinear = study.subjects.assign(
        dose=study.subjects["group"].map({"control": 0, "acute": 1, "chronic": 1})
    )
    with pytest.warns(NotEstimableWarning, match="rank deficient"):
        G.group_models(part, collinear, ORDER, covariates=("dose",), path="subject-means")


# --- input errors ---------------------------------------------------------------------------


def test_input_errors_name_argument_rule_and_value(study):
    summaries = long_frame(samples())
    with pytest.raises(ValueError, match="tests must be a non-empty selection"):
        G.compare_summaries(summaries, tests=("anova",))
    with pytest.raises(ValueError, match="correction must be one of"):
        G.compare_summaries(summaries, correction="bonferroni")
    with pytest.raises(
        ValueError, match=r"group_order must list every group .* missing \['chronic'\]"
    ):
        G.compare_summaries(summaries, ("control", "acute"))
    with pytest.raises(ValueError, match="confidence_level must be between 0 and 1, got 95"):
        G.hedges_g([1, 2, 3], [2, 3, 4], confidence_level=95)
    with pytest.raises(ValueError, match="summaries has no column\\(s\\) \\['value'\\]"):
        G.compare_summaries(summaries.drop(columns="value"))
    with pytest.raises(ValueError, match="path must be one of"):
        G.group_models(study.values, study.subjects, path="fast")
    with pytest.raises(ValueError, match=r"positive.*must be boolean"):
        frame = pd.DataFrame(
            {
                "subject": ["a"],
                "group": ["g"],
                "method": ["m"],
                "finding": ["f"],
                "positive": ["yes"],
            }
        )
        G.compare_proportions(frame)
    with pytest.raises(ValueError, match="positive must not exceed totals"):
        G.freeman_halton(np.array([3, 1]), np.array([2, 5]))
    with pytest.raises(ValueError, match="samples\\[1\\] must hold finite values"):
        G.kruskal_wallis([[1.0, 2.0], [np.nan, 1.0]])
