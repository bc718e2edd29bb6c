"""Proportions of positive subjects per group and the tests between groups.

The ``finding_proportions`` table (Wilson intervals per group) and the
``finding_group_tests`` table (Fisher tests and risk differences), one row set per method
and finding. Estimators: :mod:`cohort.stats.proportion_tests`.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from itertools import combinations

import numpy as np
import pandas as pd

from cohort.analysis.group_tables import (
    OMNIBUS_PER_TABLE,
    PAIRS,
    Family,
    adjust_by_family,
    blank_row,
    join_notes,
    omnibus_label,
    one_warning_per_reason,
    ordered_groups,
    positive_flags,
    require_columns,
)
from cohort.domain.options import DEFAULT_SEED
from cohort.stats.group_samples import check_confidence_level
from cohort.stats.multiplicity import HOLM, check_correction
from cohort.stats.proportion_tests import (
    FISHER_2X2,
    FISHER_DRAWS,
    FISHER_MAX_TABLES,
    fisher_exact_2x2,
    freeman_halton,
    risk_difference,
)
from cohort.stats.proportions import wilson_interval
from cohort.stats.results import Result, warn_not_estimable

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

_TEST_TEXT = (
    "test", "comparison", "counts", "statistic_name", "p_method", "correction", "family",
    "effect_size_name", "effect_ci_method", "note",
)  # fmt: skip


@dataclass(frozen=True, repr=False)
class ProportionComparison(Result):
    """Proportions of positive subjects per group and the tests between groups."""

    proportions: pd.DataFrame
    """Columns :data:`PROPORTION_COLUMNS`."""
    tests: pd.DataFrame
    """Columns :data:`PROPORTION_TEST_COLUMNS`."""

    def to_frame(self) -> pd.DataFrame:
        return self.tests


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
    (:func:`~cohort.stats.proportion_tests.freeman_halton`); for each pair, Fisher's exact
    2x2 test and the risk difference (later minus earlier group) with Newcombe's hybrid
    score interval. Families: the omnibus tests over all methods x findings; the pairs of
    one method and finding; both corrected by ``correction``. Validated against
    ``scipy.stats.fisher_exact`` and
    ``statsmodels.stats.proportion.confint_proportions_2indep(method='newcomb')``.

    Examples
    --------
    >>> findings = pd.DataFrame({"subject": [f"s{i}" for i in range(12)], "method": "m",
    ...     "finding": "f", "group": ["control"] * 6 + ["acute"] * 6,
    ...     "positive": [0, 0, 0, 0, 0, 1, 1, 1, 1, 1, 0, 1]})
    >>> result = compare_proportions(findings, ["control", "acute"])
    >>> result.proportions[["group", "n_positive", "n_subjects"]]
         group  n_positive  n_subjects
    0  control           1           6
    1    acute           5           6
    >>> pair = result.tests.iloc[1]
    >>> print(f"{pair['comparison']}: {pair['effect_size']:.3f}, p = {pair['p_value']:.4f}")
    acute vs control: 0.667, p = 0.0801
    """
    subject_findings = require_columns(
        subject_findings, "subject_findings", ("subject", "group", "method", "finding", "positive")
    )
    correction = check_correction(correction)
    check_confidence_level(confidence_level)
    data, n_missing = positive_flags(subject_findings, "subject_findings")
    data = data.astype({"group": str})
    duplicated = data.duplicated(["subject", "method", "finding"])
    if duplicated.any():
        raise ValueError(
            "subject_findings must hold one row per subject, method and finding, got "
            f"{int(duplicated.sum())} repeated rows"
        )
    order = ordered_groups(subject_findings["group"].astype(str), group_order, "subject_findings")
    fisher = {"max_tables": max_tables, "n_draws": n_draws, "seed": seed}
    prop_rows, test_rows = [], []
    missing_note = f"{n_missing} rows without a positive flag left out" if n_missing else ""
    with one_warning_per_reason():
        for (method, finding), part in data.groupby(["method", "finding"], sort=True):
            counts = part.groupby("group")["positive"].agg(["sum", "count"])
            counts = counts.reindex(order).fillna(0).astype(int)
            key = {"method": method, "finding": finding}
            prop_rows += _proportion_rows(key, counts, order, confidence_level)
            included = [g for g in order if counts.loc[g, "count"] > 0]
            level = confidence_level
            test_rows += _proportion_tests(
                key, counts, included, order, level, fisher, missing_note
            )
    proportions = pd.DataFrame(prop_rows, columns=list(PROPORTION_COLUMNS))
    tests = pd.DataFrame(test_rows, columns=list(PROPORTION_TEST_COLUMNS))
    return ProportionComparison(proportions, adjust_by_family(tests, correction))


def _proportion_rows(key, counts, order, level) -> list[dict[str, object]]:
    """One row per group: positives, subjects, proportion and its Wilson interval."""
    rows = []
    for group in order:
        x, n = int(counts.loc[group, "sum"]), int(counts.loc[group, "count"])
        ci = wilson_interval(x, n, level)
        note = ci.note
        if n == 0:
            note = warn_not_estimable(
                f"proportion {key['finding']} in group {group}", "no subjects"
            )
        rows.append(
            {
                **key,
                "group": group,
                "n_subjects": n,
                "n_positive": x,
                "proportion": x / n if n else math.nan,
                "ci_low": ci.low,
                "ci_high": ci.high,
                "ci_method": ci.method,
                "confidence_level": level,
                "note": note,
            }
        )
    return rows


def _counts_text(counts: pd.DataFrame, groups: Sequence[str]) -> str:
    return ", ".join(
        f"{g} {int(counts.loc[g, 'sum'])}/{int(counts.loc[g, 'count'])}" for g in groups
    )


def _proportion_tests(key, counts, included, order, level, fisher, note) -> list[dict]:
    """The omnibus row of one method and finding, then its pairs."""

    def blank(**cells):
        return blank_row(
            PROPORTION_TEST_COLUMNS, _TEST_TEXT, **key, confidence_level=level, **cells
        )

    label = omnibus_label(included, order)
    if len(included) < 2:
        reason = f"fewer than 2 groups with subjects ({', '.join(included) or 'none'})"
        note = join_notes(note, warn_not_estimable(FISHER_2X2, reason))
        return [blank(test=FISHER_2X2, comparison=label, n_subjects=0, note=note)]
    x = counts.loc[included, "sum"].to_numpy(dtype=np.int64)
    n = counts.loc[included, "count"].to_numpy(dtype=np.int64)
    if len(included) == 2:
        omnibus = fisher_exact_2x2(int(x[1]), int(n[1]), int(x[0]), int(n[0]))
    else:
        omnibus = freeman_halton(x, n, **fisher)
    family = Family(OMNIBUS_PER_TABLE, "Fisher", across=("method", "finding"))
    counts_text = _counts_text(counts, included)
    row = blank(**omnibus.row(), comparison=label, counts=counts_text, family=family)
    left_out = [g for g in order if g not in included]
    row["note"] = join_notes(
        note, f"left out (no subjects): {', '.join(left_out)}" if left_out else ""
    )
    row["effect_size_name"] = "none for the omnibus test (see the pairs)"
    return [row, *_pair_rows(key, counts, included, level, blank)]


def _pair_rows(key, counts, included, level, blank) -> list[dict]:
    """Fisher's 2x2 test and the risk difference of each pair (later minus earlier)."""
    x = counts.loc[included, "sum"].to_numpy(dtype=np.int64)
    n = counts.loc[included, "count"].to_numpy(dtype=np.int64)
    family = Family(PAIRS, "Fisher", cell=(str(key["method"]), str(key["finding"])))
    rows = []
    for i, j in combinations(range(len(included)), 2):
        first, second = included[j], included[i]
        a, na, b, nb = int(x[j]), int(n[j]), int(x[i]), int(n[i])
        test = fisher_exact_2x2(a, na, b, nb)
        effect = risk_difference(a, na, b, nb, confidence_level=level)
        odds_note = "sample odds ratio undefined (0/0)" if math.isnan(test.statistic) else ""
        row = blank(
            test=FISHER_2X2,
            comparison=f"{first} vs {second}",
            counts=_counts_text(counts, [first, second]),
            statistic=test.statistic,
            statistic_name=test.statistic_name,
            p_value=test.p_value,
            p_method=test.p_method,
            family=family,
        )
        row.update(effect.row())
        row["note"] = join_notes(odds_note, effect.row()["note"])
        rows.append(row)
    return rows
