"""Verdicts against acceptance criteria set in advance: the rule of one verdict, and the
``method_verdicts`` table built from hand-made agreement and detection tables.

Sources of the rules:
- Bland & Altman, Stat Methods Med Res 1999;8:135-160: the limits of agreement are judged
  against a clinically acceptable difference decided in advance (both limits within -L..+L).
- Stöckl, Rodríguez Cabaleiro, Van Uytfanghe & Thienpont, Clin Chem 2004;50:2216-2218
  (memory): a method is accepted only when the outer confidence bounds of the limits lie
  within the acceptance limits; an estimate outside them fails; otherwise undecided.
- The same reading for a minimum (CCC, sensitivity): the lower confidence bound at or above
  the minimum (common practice for non-inferiority-style criteria).
Every expected value below is a hand computation written beside its check.
"""

from __future__ import annotations

import math

import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from cohort.analysis.verdicts import (
    VERDICT_COLUMNS,
    method_verdicts,
    overall_verdict,
    rule_text,
)
from cohort.domain.acceptance import (
    DEFAULT_MIN_SENSITIVITY,
    FAILS,
    INCONCLUSIVE,
    MEETS,
    NOT_ASSESSED,
    STATISTICS,
    VERDICT_RULES,
    VERDICTS,
    Acceptance,
    verdict,
)
from cohort.domain.units import PARAMETERS

NAN = math.nan

# --- verdict(): the truth table ------------------------------------------------------------

UPPER = [
    # (estimate, low, high, criterion, expected): acceptable values at or below the criterion
    (2.0, 1.5, 2.9, 3.0, MEETS),  # whole interval below +3
    (2.0, 1.5, 3.0, 3.0, MEETS),  # upper bound equal to the criterion counts as acceptable
    (3.0, 3.0, 3.0, 3.0, MEETS),  # estimate and interval equal to the criterion
    (2.0, 1.5, 3.0001, 3.0, INCONCLUSIVE),  # bound just beyond: the interval crosses
    (3.0, 2.5, 3.5, 3.0, INCONCLUSIVE),  # estimate on the criterion, interval straddles
    (3.0001, 2.5, 3.5, 3.0, FAILS),  # estimate beyond although the interval straddles
    (4.0, 3.5, 4.5, 3.0, FAILS),  # everything beyond
    (NAN, 1.0, 2.0, 3.0, INCONCLUSIVE),  # no estimate
    (2.0, 1.5, NAN, 3.0, INCONCLUSIVE),  # no upper bound: cannot show the criterion is met
    (2.0, NAN, NAN, 3.0, INCONCLUSIVE),  # no interval
    (4.0, NAN, NAN, 3.0, FAILS),  # no interval, but the estimate itself is beyond
    (2.0, 1.5, math.inf, 3.0, INCONCLUSIVE),  # an unbounded interval crosses any criterion
]
LOWER = [
    # acceptable values at or above the criterion (-L for a lower limit, a minimum CCC or
    # sensitivity)
    (-2.0, -2.9, -1.5, -3.0, MEETS),
    (-2.0, -3.0, -1.5, -3.0, MEETS),  # lower bound equal to -L counts as acceptable
    (0.8, 0.8, 0.9, 0.8, MEETS),  # sensitivity and its lower bound equal to the minimum
    (0.85, 0.7999, 0.9, 0.8, INCONCLUSIVE),
    (0.8, 0.7, 0.9, 0.8, INCONCLUSIVE),  # estimate on the criterion, interval straddles
    (0.7999, 0.7, 0.9, 0.8, FAILS),  # estimate below although the interval straddles
    (0.75, 0.6, 0.85, 0.8, FAILS),  # the module's own example
    (-3.5, -4.0, -3.1, -3.0, FAILS),
    (NAN, 0.9, 0.95, 0.8, INCONCLUSIVE),
    (0.9, NAN, 0.95, 0.8, INCONCLUSIVE),  # no lower bound
    (0.9, -math.inf, 0.95, 0.8, INCONCLUSIVE),
]


@pytest.mark.parametrize(("estimate", "low", "high", "criterion", "expected"), UPPER)
def test_verdict_against_an_upper_criterion(estimate, low, high, criterion, expected):
    # Bland & Altman 1999 (limit against +L set in advance); Stöckl et al. 2004 (memory)
    assert verdict(estimate, low, high, criterion, upper=True) == expected


@pytest.mark.parametrize(("estimate", "low", "high", "criterion", "expected"), LOWER)
def test_verdict_against_a_lower_criterion(estimate, low, high, criterion, expected):
    assert verdict(estimate, low, high, criterion, upper=False) == expected


def test_the_direction_decides_which_bound_counts():
    # the same numbers judged both ways: 2.0 in (1.5, 2.5) against 2.2
    assert verdict(2.0, 1.5, 2.5, 2.2, upper=True) == INCONCLUSIVE  # 2.5 > 2.2
    assert verdict(2.0, 1.5, 2.5, 2.2, upper=False) == FAILS  # 2.0 < 2.2
    assert verdict(2.0, 1.5, 2.5, 1.0, upper=True) == FAILS  # 2.0 > 1.0
    assert verdict(2.0, 1.5, 2.5, 1.0, upper=False) == MEETS  # 1.5 >= 1.0


def test_an_interval_with_a_missing_far_bound_is_at_best_inconclusive():
    # verdict's own contract (its docstring): an interval that is not finite -> at best
    # inconclusive; here the lower bound is missing
    assert verdict(2.1, NAN, 2.5, 3.0, upper=True) == INCONCLUSIVE
    assert verdict(0.9, 0.85, NAN, 0.8, upper=False) == INCONCLUSIVE


finite = st.floats(min_value=-1e6, max_value=1e6, allow_nan=False, allow_infinity=False)
width = st.floats(min_value=0.0, max_value=1e6, allow_nan=False, allow_infinity=False)


@settings(max_examples=300, deadline=None)
@given(finite, width, width, width, width, finite, st.booleans())
def test_widening_the_interval_never_makes_a_method_meet(est, a, b, c, d, criterion, upper):
    # Stöckl et al. 2004 (memory): meeting needs the whole interval on the acceptable side,
    # so more uncertainty can only lose 'meets'; 'fails' depends on the estimate alone
    narrow = verdict(est, est - a, est + b, criterion, upper=upper)
    wide = verdict(est, est - a - c, est + b + d, criterion, upper=upper)
    if narrow == FAILS:
        assert wide == FAILS
    if narrow == INCONCLUSIVE:
        assert wide == INCONCLUSIVE
    if wide == MEETS:
        assert narrow == MEETS


@settings(max_examples=200, deadline=None)
@given(finite, width, width, finite)
def test_a_lower_limit_against_minus_l_mirrors_an_upper_limit_against_plus_l(est, a, b, limit):
    # the two limits of agreement against -L and +L (Bland & Altman 1999): reflecting every
    # number about zero swaps the sides
    high = verdict(est, est - a, est + b, limit, upper=True)
    low = verdict(-est, -est - b, -est + a, -limit, upper=False)
    assert high == low


def test_verdict_words_and_rules_are_one_vocabulary():
    assert VERDICTS == (MEETS, FAILS, INCONCLUSIVE, NOT_ASSESSED)
    assert set(VERDICT_RULES) == set(VERDICTS)
    assert tuple(STATISTICS) == ("loa_low", "loa_high", "ccc", "sensitivity")


def test_acceptance_defaults():
    # DEFAULT_MIN_SENSITIVITY: a convention of this package (four lesions in five)
    assert DEFAULT_MIN_SENSITIVITY == 0.8
    none = Acceptance()
    assert not none.declared and none.baseline is None
    assert none.min_sensitivity("hemorrhage") == 0.8
    only_baseline = Acceptance(baseline="a")
    assert not only_baseline.declared  # a baseline alone is no criterion
    declared = Acceptance(ccc={"ff": 0.9}, findings={"fat": 0.6})
    assert declared.declared
    assert declared.min_sensitivity("fat") == 0.6
    assert declared.min_sensitivity("hemorrhage") == 0.8
    assert declared.to_dict() == {
        "limits": {},
        "findings": {"fat": 0.6},
        "ccc": {"ff": 0.9},
        "baseline": None,
    }


# --- method_verdicts on hand-made tables ---------------------------------------------------

BOOT = "subject cluster bootstrap, percentile, B=2000, seed=1"


def agreement_row(method, parameter, *, boot=True, **numbers):
    """One agreement row (stratum all) with bootstrap and analytic intervals."""
    row = {
        "parameter": parameter,
        "method": method,
        "stratum": "all",
        "confidence_level": 0.95,
        "ci_method": BOOT if boot else "analytic (no bootstrap: B = 0)",
    }
    for name in ("loa_low", "loa_high", "ccc"):
        estimate, boot_ci, analytic_ci = numbers[name]
        row[name] = estimate
        row[f"{name}_ci_low"], row[f"{name}_ci_high"] = boot_ci if boot else (NAN, NAN)
        row[f"{name}_analytic_ci_low"], row[f"{name}_analytic_ci_high"] = analytic_ci
    return row


def detection_row(method, finding, sensitivity, wilson, cluster, *, level="segment"):
    return {
        "finding": finding,
        "parameter": "r2star" if finding == "hemorrhage" else "ff",
        "method": method,
        "level": level,
        "stratum": "all",
        "sensitivity": sensitivity,
        "sensitivity_ci_low": wilson[0],
        "sensitivity_ci_high": wilson[1],
        "sensitivity_cluster_ci_low": cluster[0],
        "sensitivity_cluster_ci_high": cluster[1],
        "cluster_ci_method": BOOT,
        "confidence_level": 0.95,
        "note": "",
    }


@pytest.fixture
def tables():
    agreement = pd.DataFrame(
        [
            # method "b": fat fraction, bootstrap intervals present
            agreement_row(
                "b", "ff",
                loa_low=(-2.5, (-3.2, -1.9), (-2.8, -2.2)),
                loa_high=(2.0, (1.5, 2.6), (1.8, 2.2)),
                ccc=(0.93, (0.91, 0.95), (0.92, 0.94)),
            ),
            # method "b", R2*: no criterion declared for it
            agreement_row(
                "b", "r2star",
                loa_low=(-9.0, (-11.0, -7.0), (-10.0, -8.0)),
                loa_high=(8.0, (6.0, 10.0), (7.0, 9.0)),
                ccc=(0.8, (0.7, 0.9), (0.75, 0.85)),
            ),
            # method "a": fat fraction, B = 0: only analytic intervals
            agreement_row(
                "a", "ff", boot=False,
                loa_low=(-1.0, None, (-1.4, -0.6)),
                loa_high=(3.5, None, (3.1, 3.9)),
                ccc=(0.88, None, (0.85, 0.91)),
            ),
            # a stratum that must not be judged
            {**agreement_row(
                "a", "ff",
                loa_low=(-9.0, (-9.5, -8.5), (-9.5, -8.5)),
                loa_high=(9.0, (8.5, 9.5), (8.5, 9.5)),
                ccc=(0.1, (0.0, 0.2), (0.0, 0.2)),
            ), "stratum": "group=acute"},
        ]
    )  # fmt: skip
    detection = pd.DataFrame(
        [
            detection_row("b", "hemorrhage", 0.85, (0.70, 0.93), (0.81, 0.92)),
            detection_row("a", "hemorrhage", 0.90, (0.78, 0.96), (NAN, NAN)),
            detection_row("a", "fat", 0.5, (0.3, 0.7), (0.25, 0.75)),
            detection_row("a", "hemorrhage", 0.1, (0.0, 0.2), (0.0, 0.2), level="subject"),
        ]
    )
    return agreement, detection


ACCEPT = Acceptance(limits={"ff": 3.0}, findings={"hemorrhage": 0.8}, ccc={"ff": 0.9})


def test_columns_and_rows_in_the_order_of_methods(tables):
    table = method_verdicts(*tables, ACCEPT, ["a", "b"])
    assert tuple(table.columns) == VERDICT_COLUMNS
    assert VERDICT_COLUMNS == (
        "method", "target", "kind", "statistic", "estimate", "ci_low", "ci_high",
        "criterion", "verdict", "unit", "confidence_level", "ci_method", "rule", "note",
    )  # fmt: skip
    keys = list(zip(table.method, table.target, table.statistic, strict=True))
    assert keys == [
        # parameters first (method order, parameters in PARAMETERS order), then findings;
        # only stratum "all" and segment level are judged
        ("a", "ff", "loa_low"), ("a", "ff", "loa_high"), ("a", "ff", "ccc"),
        ("b", "ff", "loa_low"), ("b", "ff", "loa_high"), ("b", "ff", "ccc"),
        ("b", "r2star", "loa_low"), ("b", "r2star", "loa_high"), ("b", "r2star", "ccc"),
        ("a", "hemorrhage", "sensitivity"), ("a", "fat", "sensitivity"),
        ("b", "hemorrhage", "sensitivity"),
    ]  # fmt: skip
    assert list(table.kind) == ["parameter"] * 9 + ["finding"] * 3
    reversed_order = method_verdicts(*tables, ACCEPT, ["b", "a"])
    assert list(reversed_order.method[:3]) == ["b", "b", "b"]
    assert list(method_verdicts(*tables, ACCEPT, ["b"]).method.unique()) == ["b"]


def test_limits_against_minus_and_plus_l_with_bootstrap_intervals(tables):
    table = method_verdicts(*tables, ACCEPT, ["a", "b"]).set_index(
        ["method", "target", "statistic"]
    )
    low = table.loc[("b", "ff", "loa_low")]
    # criterion -3 (Bland & Altman 1999: both limits within -L..+L); estimate -2.5 >= -3 but
    # the bootstrap lower bound -3.2 < -3 -> inconclusive (Stöckl et al. 2004, memory)
    assert (low.criterion, low.estimate, low.ci_low, low.ci_high) == (-3.0, -2.5, -3.2, -1.9)
    assert low.verdict == INCONCLUSIVE and low.ci_method == BOOT
    high, ccc = table.loc[("b", "ff", "loa_high")], table.loc[("b", "ff", "ccc")]
    # +3: upper bound 2.6 <= 3 -> meets
    assert (high.criterion, high.verdict, high.ci_high) == (3.0, MEETS, 2.6)
    assert high.unit == PARAMETERS["ff"].unit and ccc.unit == ""  # CCC has no unit
    # minimum 0.9: lower bound 0.91 >= 0.9 -> meets
    assert (ccc.criterion, ccc.verdict, ccc.ci_low) == (0.9, MEETS, 0.91)
    assert low.rule == rule_text("loa_low", -3.0)
    assert "-3" in low.rule and "lower confidence bound" in low.rule
    assert high.rule == "upper limit of agreement <= 3: meets if its upper confidence bound <= 3"


def test_analytic_intervals_when_no_bootstrap_ran(tables):
    table = method_verdicts(*tables, ACCEPT, ["a", "b"]).set_index(
        ["method", "target", "statistic"]
    )
    low, high, ccc = (table.loc[("a", "ff", s)] for s in ("loa_low", "loa_high", "ccc"))
    # bootstrap columns are NaN: the analytic interval is used and ci_method says so
    assert (low.ci_low, low.ci_high, low.ci_method) == (-1.4, -0.6, "analytic interval")
    assert low.verdict == MEETS  # -1.4 >= -3
    assert high.verdict == FAILS  # estimate 3.5 > 3, whatever the interval
    assert (ccc.ci_low, ccc.verdict) == (0.85, FAILS)  # 0.88 < 0.9


def test_not_assessed_where_no_criterion_is_declared(tables):
    table = method_verdicts(*tables, ACCEPT, ["a", "b"]).set_index(
        ["method", "target", "statistic"]
    )
    for key in [("b", "r2star", "loa_low"), ("b", "r2star", "loa_high"),
                ("b", "r2star", "ccc"), ("a", "fat", "sensitivity")]:  # fmt: skip
        row = table.loc[key]
        assert row.verdict == NOT_ASSESSED, key
        assert math.isnan(row.criterion) and row.rule == ""
        assert math.isfinite(row.estimate)  # the estimate is still reported
    # only the limits criterion for ff: its CCC is not assessed
    only_limits = method_verdicts(*tables, Acceptance(limits={"ff": 3.0}), ["b"])
    ff = only_limits[only_limits.target.eq("ff")].set_index("statistic").verdict
    assert ff.to_dict() == {"loa_low": INCONCLUSIVE, "loa_high": MEETS, "ccc": NOT_ASSESSED}


def test_sensitivity_prefers_the_cluster_bootstrap_then_wilson(tables):
    table = method_verdicts(*tables, ACCEPT, ["a", "b"]).set_index(
        ["method", "target", "statistic"]
    )
    b = table.loc[("b", "hemorrhage", "sensitivity")]
    # cluster interval (0.81, 0.92) preferred over Wilson (0.70, 0.93): 0.81 >= 0.8 -> meets
    assert (b.ci_low, b.ci_high, b.ci_method, b.verdict) == (0.81, 0.92, BOOT, MEETS)
    a = table.loc[("a", "hemorrhage", "sensitivity")]
    # no cluster interval: Wilson (0.78, 0.96), units treated as independent; 0.78 < 0.8
    assert (a.ci_low, a.ci_high, a.verdict) == (0.78, 0.96, INCONCLUSIVE)
    assert "Wilson" in a.ci_method and "independent" in a.ci_method
    assert a.criterion == 0.8 and a.unit == ""


def test_not_estimable_rows_are_inconclusive_with_a_note(tables):
    agreement, detection = tables
    agreement = agreement.copy()
    agreement.loc[0, ["loa_high", "loa_high_ci_low", "loa_high_ci_high"]] = NAN
    agreement.loc[0, ["loa_high_analytic_ci_low", "loa_high_analytic_ci_high"]] = NAN
    table = method_verdicts(agreement, detection, ACCEPT, ["b"]).set_index("statistic")
    row = table.loc["loa_high"].iloc[0]
    assert row.verdict == INCONCLUSIVE
    assert row.ci_method == "no interval could be computed"
    assert row.note == "upper limit of agreement not estimable"


def test_a_method_without_rows_gives_no_rows(tables):
    table = method_verdicts(*tables, ACCEPT, ["absent"])
    assert table.empty and tuple(table.columns) == VERDICT_COLUMNS


def test_categorical_methods_are_matched_as_text(tables):
    agreement, detection = (t.copy() for t in tables)
    for frame in (agreement, detection):
        frame["method"] = pd.Categorical(frame["method"], categories=["b", "a"])
    table = method_verdicts(agreement, detection, ACCEPT, ["a", "b"])
    assert len(table) == 12


@pytest.mark.parametrize(
    ("words", "expected"),
    [
        (["meets", "meets"], MEETS),
        (["meets", "inconclusive", "not-assessed"], INCONCLUSIVE),
        (["inconclusive", "fails", "meets"], FAILS),
        (["not-assessed", "not-assessed"], NOT_ASSESSED),
        ([], NOT_ASSESSED),
    ],
)
def test_overall_verdict_takes_the_worst_assessed_word(words, expected):
    frame = pd.DataFrame({"method": ["m"] * len(words) + ["other"], "verdict": [*words, "fails"]})
    assert overall_verdict(frame, "m") == expected


def test_overall_verdict_on_the_hand_made_tables(tables):
    table = method_verdicts(*tables, ACCEPT, ["a", "b"])
    # a: loa_high fails (3.5 > 3) -> fails; b: loa_low inconclusive, rest meets -> inconclusive
    assert overall_verdict(table, "a") == FAILS
    assert overall_verdict(table, "b") == INCONCLUSIVE
    assert overall_verdict(method_verdicts(*tables, Acceptance(), ["a"]), "a") == NOT_ASSESSED
