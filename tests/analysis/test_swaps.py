"""Fat-water swap screen: the swap rule, the 0-50 % limit of magnitude-only methods, and the
explicit exclusion step."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from cohort.analysis.swaps import (
    COUNT_COLUMNS,
    FLAG_COLUMNS,
    exclude_flagged,
    swap_screen,
    swap_screen_with,
)
from cohort.demo import write_demo
from cohort.domain.thresholds import MAGNITUDE_ONLY_FF_LIMIT
from cohort.io.findings_table import parse_swap_options
from cohort.io.study import load_study


def paired_ff(pairs, method="fast", parameter="ff", start=1):
    """Paired rows from (reference, test) fat fractions in %, one segment each (invented)."""
    n = len(pairs)
    return pd.DataFrame(
        {
            "parameter": parameter,
            "method": method,
            "reference": "ref",
            "subject": [f"s{i // 17:02d}" for i in range(start - 1, start - 1 + n)],
            "group": "patient",
            "segment": [i % 17 + 1 for i in range(start - 1, start - 1 + n)],
            "segment_name": "",
            "reference_value": [float(x) for x, _ in pairs],
            "test_value": [float(y) for _, y in pairs],
        }
    )


def test_swap_rule_with_margin():
    # a swapped region reads about 100 - f (common practice): 5 % read as 95 %
    paired = paired_ff([(5, 95), (5, 8), (45, 55), (50, 50), (20, 75), (2, 1)])
    screen = swap_screen(paired)  # margin 10 pp
    assert tuple(screen.flags.columns) == FLAG_COLUMNS
    assert screen.flags["segment"].tolist() == [1, 5]
    row = screen.flags.iloc[0]
    assert row["swapped_reference"] == 95.0 and row["distance_to_swapped"] == 0.0
    assert row["distance_to_reference"] == 90.0 and row["reason"] == "swap-suspect"
    # (45, 55): 0 closer to 55 than to 45 by 10, not by more than the 10 pp margin
    assert swap_screen(paired, margin=5.0).flags["segment"].tolist() == [1, 3, 5]
    # (20, 75): |75 - 80| + 10 = 15 < 55; without margin (45, 55) is flagged too
    assert swap_screen(paired, margin=0.0).flags["segment"].tolist() == [1, 3, 5]


def test_magnitude_only_methods_cannot_exceed_fifty_percent():
    # magnitude-only fat fractions are confined to 0-50 % (Hussain et al., Radiology 2005
    # (memory); common practice): reference above 50 % is not comparable
    assert MAGNITUDE_ONLY_FF_LIMIT == 50.0
    mag = paired_ff([(70, 30), (40, 40), (49, 48), (20, 60)], method="mag")
    other = paired_ff([(70, 30), (40, 40)], method="fast", start=5)
    screen = swap_screen(pd.concat([mag, other]), magnitude_only_methods=["mag"])
    flags = screen.flags.set_index(["method", "segment"])["reason"]
    assert flags.to_dict() == {
        ("mag", 1): "not-comparable",
        ("mag", 4): "above-magnitude-limit",
        ("fast", 5): "swap-suspect",  # |30 - 30| + 10 < 40 for a method that can exceed 50 %
    }
    counts = screen.counts.set_index("method")
    assert tuple(screen.counts.columns) == COUNT_COLUMNS
    assert counts.loc["mag", "n_pairs"] == 4 and counts.loc["mag", "n_flagged"] == 2
    assert counts.loc["mag", "n_not_comparable"] == 1 and counts.loc["mag", "magnitude_only"]
    assert counts.loc["fast", "n_swap_suspect"] == 1 and not counts.loc["fast", "magnitude_only"]


@settings(max_examples=60, deadline=None)
@given(st.lists(st.floats(0.0, 100.0, allow_nan=False), min_size=1, max_size=40))
def test_a_magnitude_only_method_is_flagged_exactly_where_the_reference_exceeds_50(truth):
    # magnitude-only reconstruction cannot tell f from 100 - f: it reports min(f, 100 - f)
    # (Hussain et al. 2005 (memory)); the reference reads the truth
    f = np.asarray(truth)
    paired = paired_ff(list(zip(f, np.minimum(f, 100 - f), strict=True)), method="mag")
    screen = swap_screen(paired, magnitude_only_methods=["mag"])
    flagged = set(screen.flags["subject"] + "/" + screen.flags["segment"].astype(str))
    expected = paired[f > 50]
    assert flagged == set(expected["subject"] + "/" + expected["segment"].astype(str))
    assert set(screen.flags["reason"]) <= {"not-comparable"}


def test_screen_does_not_change_paired_and_exclusion_is_explicit():
    ff = paired_ff([(5, 95), (5, 8), (70, 30)])
    r2 = paired_ff([(30, 31), (28, 29), (25, 26)], parameter="r2star")
    paired = pd.concat([ff, r2], ignore_index=True)
    before = paired.copy()
    screen = swap_screen(paired)
    pd.testing.assert_frame_equal(paired, before)
    out = exclude_flagged(paired, screen)
    assert len(out.removed) == 2 and len(out.paired) == len(paired) - 2
    assert set(out.removed["parameter"]) == {"ff"} and set(out.removed["segment"]) == {1, 3}
    assert out.summary().startswith("removed 2 paired rows (ff) of 1 subjects")
    both = exclude_flagged(paired, screen.flags, parameters=("ff", "r2star"))
    assert len(both.removed) == 4
    none = exclude_flagged(paired, screen, reasons=("not-comparable",))
    assert none.removed.empty and none.summary() == "removed no paired rows (ff)"


def test_options_from_the_study_file_and_input_errors():
    paired = paired_ff([(70, 30)], method="mag")
    opts = parse_swap_options({"magnitude_only_methods": ["mag"], "swap_margin": 5.0})
    assert swap_screen_with(paired, opts).flags["reason"].tolist() == ["not-comparable"]
    with pytest.raises(ValueError, match=r"must name test methods of paired \['mag'\]"):
        swap_screen(paired, magnitude_only_methods=["magg"])
    with pytest.raises(ValueError, match="must be a list of method names"):
        swap_screen(paired, magnitude_only_methods="mag")
    with pytest.raises(ValueError, match="margin must be a number >= 0"):
        swap_screen(paired, margin=-1.0)
    with pytest.raises(ValueError, match="reasons must be among"):
        exclude_flagged(paired, swap_screen(paired), reasons=("odd",))


def test_demo_has_no_swaps(tmp_path):
    # integration only: the demo plants no swap, and its fat fractions stay below 50 %
    study = load_study(write_demo(tmp_path, n_subjects=12, seed=2))
    screen = swap_screen(study.paired)
    assert screen.flags.empty and screen.counts["n_pairs"].sum() == (
        study.paired["parameter"].eq("ff").sum()
    )
