"""Group comparisons of a study: tests between groups on per-subject summaries, and every
group table at once.

Tests between groups run on per-subject summaries
(:mod:`cohort.analysis.subject_summaries`), so they respect the clustering of segments in
subjects:

- Kruskal-Wallis H (Kruskal & Wallis 1952) over all groups, then pairwise Mann-Whitney U
  (Mann & Whitney 1947; not Dunn's test) with Cliff's delta (Cliff 1993); pairwise p-values
  Holm-corrected within the pairs of one omnibus test.
- Welch's heteroscedastic one-way ANOVA (Welch 1951), then Games-Howell pairs (Games &
  Howell 1976), whose studentized-range p-value is already adjusted over the pairs, with
  Hedges' g (Hedges 1981).

:func:`group_comparison_table` adds the proportions of positive subjects
(:mod:`cohort.analysis.finding_proportions`) and the segment-level models
(:mod:`cohort.analysis.group_models`). Multiplicity: :mod:`cohort.stats.multiplicity` (Holm
by default); every table states the family. Column names of every output table are the
``*_COLUMNS`` constants of these modules. No I/O: the tables are DataFrames for the caller
to write.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from itertools import combinations
from typing import Any

import pandas as pd

from cohort.analysis.finding_proportions import (
    PROPORTION_COLUMNS,
    PROPORTION_TEST_COLUMNS,
    compare_proportions,
)
from cohort.analysis.group_models import (
    GROUP_DIFFERENCE,
    METHOD_BY_GROUP,
    finding_models,
    largest_fit,
    linear_models,
    method_differences,
    segment_values,
)
from cohort.analysis.group_tables import (
    OMNIBUS_PER_SUMMARY,
    PAIRS,
    Family,
    adjust_by_family,
    blank_row,
    join_notes,
    omnibus_label,
    one_warning_per_reason,
    ordered_groups,
    require_columns,
)
from cohort.analysis.subject_summaries import (
    describe_groups,
    subject_summaries,
    summary_keys,
    values_by_group,
)
from cohort.domain.options import DEFAULT_SEED
from cohort.io.study import Study
from cohort.stats.effect_sizes import cliffs_delta, hedges_g
from cohort.stats.group_samples import check_confidence_level
from cohort.stats.group_tests import (
    GAMES_HOWELL,
    KRUSKAL_WALLIS,
    MANN_WHITNEY,
    WELCH_ANOVA,
    games_howell,
    kruskal_wallis,
    mann_whitney,
    welch_anova,
)
from cohort.stats.models import (
    MIXED_MODEL_MAX_OBSERVATIONS,
    MIXED_PATH,
    SUBJECT_MEANS_PATH,
    check_model_path,
    choose_model_path,
)
from cohort.stats.multiplicity import HOLM, check_correction
from cohort.stats.proportion_tests import FISHER_DRAWS, FISHER_MAX_TABLES
from cohort.stats.results import Result, warn_not_estimable

TESTS: tuple[str, ...] = ("kruskal-wallis", "welch-anova")
"""Test families of :func:`compare_summaries`: each runs its omnibus test and its pairs."""

COMPARISON_COLUMNS: tuple[str, ...] = (
    "parameter", "method", "summary", "test", "comparison", "statistic", "statistic_name",
    "df", "df_denominator", "p_value", "p_method", "p_adjusted", "correction", "family",
    "effect_size", "effect_size_name", "effect_ci_low", "effect_ci_high", "effect_ci_method",
    "confidence_level", "n_subjects", "note",
)  # fmt: skip
"""Columns of the ``group_comparison`` table (:func:`compare_summaries`)."""

_COMPARISON_TEXT = (
    "test", "comparison", "statistic_name", "p_method", "correction", "family",
    "effect_size_name", "effect_ci_method", "note",
)  # fmt: skip


def _blank_row(**cells: object) -> dict[str, object]:
    """A comparison row: NaN numbers, empty texts, then ``cells``."""
    return blank_row(COMPARISON_COLUMNS, _COMPARISON_TEXT, **cells)


def compare_summaries(
    summaries: pd.DataFrame,
    group_order: Sequence[str] | None = None,
    *,
    tests: Sequence[str] = TESTS,
    correction: str = HOLM,
    confidence_level: float = 0.95,
) -> pd.DataFrame:
    """Tests between groups on per-subject summaries: the ``group_comparison`` table.

    For each parameter, method and summary: ``"kruskal-wallis"`` runs Kruskal-Wallis over
    the groups, then Mann-Whitney U with Cliff's delta for each pair; ``"welch-anova"`` runs
    Welch's ANOVA, then Games-Howell with Hedges' g for each pair. Pairs read ``"later vs
    earlier"`` in ``group_order`` (e.g. ``"acute vs control"``); effect sizes are later minus
    earlier. A group with no value for a summary (controls have no culprit territory) is
    left out of that summary's tests, with a note on the omnibus row.

    Families (the ``family`` column): each omnibus test with the same summary over all
    parameters and methods of the table; the Mann-Whitney pairs of one omnibus test. Both
    corrected by ``correction`` (Holm by default). Games-Howell pairs are adjusted by the
    studentized range over their pairs (``correction`` says so) and not corrected again.
    Columns: :data:`COMPARISON_COLUMNS`. Rows validated against ``scipy.stats`` (kruskal,
    mannwhitneyu, f_oneway) and pingouin (compute_effsize) on the demo cohort; family
    corrections against ``statsmodels.stats.multitest.multipletests``.

    Examples
    --------
    >>> summaries = pd.DataFrame({"parameter": "ff", "method": "m", "summary": "mean",
    ...     "group": ["control"] * 5 + ["acute"] * 5,
    ...     "value": [1.0, 2, 3, 4, 5, 3, 5, 6, 7, 8]})
    >>> table = compare_summaries(summaries, ["control", "acute"], tests=("kruskal-wallis",))
    >>> for row in table.itertuples():
    ...     print(f"{row.test}, {row.comparison}: p = {row.p_value:.4f}")
    Kruskal-Wallis, all groups: p = 0.0459
    Mann-Whitney U, acute vs control: p = 0.0586
    """
    summaries = require_columns(
        summaries, "summaries", ("parameter", "method", "summary", "group", "value")
    )
    correction = check_correction(correction)
    check_confidence_level(confidence_level)
    unknown = [t for t in tests if t not in TESTS]
    if unknown or not tests:
        raise ValueError(f"tests must be a non-empty selection of {TESTS}, got {list(tests)}")
    order = ordered_groups(summaries["group"], group_order, "summaries")
    rows: list[dict[str, object]] = []
    with one_warning_per_reason():
        for parameter, method, summary in summary_keys(summaries):
            part = summaries[
                summaries["parameter"].eq(parameter)
                & summaries["method"].eq(method)
                & summaries["summary"].eq(summary)
            ]
            samples = values_by_group(part, order)
            included = [g for g in order if samples[g].size > 0]
            left_out = [g for g in order if samples[g].size == 0]
            key = {"parameter": parameter, "method": method, "summary": summary}
            note = f"left out (no value): {', '.join(left_out)}" if left_out else ""
            for name in tests:
                rows += _test_rows(key, samples, included, order, name, note, confidence_level)
    table = pd.DataFrame(rows, columns=list(COMPARISON_COLUMNS))
    table["confidence_level"] = table["confidence_level"].fillna(confidence_level)
    return adjust_by_family(table, correction)


def _test_rows(key, samples, included, order, name, note, confidence_level) -> list[dict]:
    """The omnibus row of one test and summary cell, then its pairs."""
    rank = name == "kruskal-wallis"
    test_name = KRUSKAL_WALLIS if rank else WELCH_ANOVA
    comparison = omnibus_label(included, order)
    if len(included) < 2:
        reason = f"fewer than 2 groups with values ({', '.join(included) or 'none'})"
        cells = _blank_row(**key, test=test_name, comparison=comparison, n_subjects=0)
        cells["note"] = join_notes(note, warn_not_estimable(test_name, reason))
        return [cells]
    arrays = [samples[g] for g in included]
    result = (kruskal_wallis if rank else welch_anova)(arrays, included)
    family = Family(OMNIBUS_PER_SUMMARY, test_name, (key["summary"],), ("parameter", "method"))
    omnibus = _blank_row(**key, **result.row(), comparison=comparison, family=family)
    omnibus["note"] = join_notes(note, result.note)
    omnibus["effect_size_name"] = "none for the omnibus test (see the pairs)"
    cell = (str(key["parameter"]), str(key["method"]), str(key["summary"]))
    pairs = _rank_pairs if rank else _welch_pairs
    return [omnibus, *pairs(key, samples, included, cell, confidence_level)]


def _rank_pairs(key, samples, included, cell, level) -> list[dict]:
    """Mann-Whitney U and Cliff's delta of each pair (later minus earlier group)."""
    family = Family(PAIRS, MANN_WHITNEY, cell)
    rows = []
    for i, j in combinations(range(len(included)), 2):
        first, second = included[j], included[i]
        two = (samples[first], samples[second])
        test = mann_whitney(*two, labels=(first, second))
        effect = cliffs_delta(*two, confidence_level=level, labels=(first, second))
        row = _blank_row(**key, **test.row(), comparison=f"{first} vs {second}")
        row.update(effect.row())
        row.update(family=family, note=join_notes(test.note, effect.row()["note"]))
        rows.append(row)
    return rows


def _welch_pairs(key, samples, included, cell, level) -> list[dict]:
    """Games-Howell and Hedges' g of each pair (later minus earlier group)."""
    family = Family(PAIRS, GAMES_HOWELL, cell)
    rows = []
    for pair in games_howell([samples[g] for g in included], included):
        effect = hedges_g(
            samples[pair.first],
            samples[pair.second],
            confidence_level=level,
            labels=(pair.first, pair.second),
        )
        row = _blank_row(
            **key,
            test=GAMES_HOWELL,
            comparison=pair.comparison,
            statistic=pair.statistic,
            statistic_name="t (Welch)",
            df=pair.df,
            p_value=pair.p_value,
            p_method="t distribution, Welch df (unadjusted)",
            p_adjusted=pair.p_adjusted,
            correction="studentized range (Games-Howell)",
            family=family,
            n_subjects=pair.n_subjects,
        )
        row.update(effect.row())
        row["note"] = join_notes(pair.note, effect.row()["note"])
        rows.append(row)
    return rows


# --- everything at once -------------------------------------------------------------------


@dataclass(frozen=True, repr=False)
class GroupComparison(Result):
    """All group-comparison tables of a study (tidy DataFrames; columns in the constants)."""

    comparisons: pd.DataFrame
    """The ``group_comparison`` table, :data:`COMPARISON_COLUMNS`."""
    descriptives: pd.DataFrame
    """:data:`~cohort.analysis.subject_summaries.DESCRIPTIVE_COLUMNS`."""
    models: pd.DataFrame
    """Mixed model, GEE and method x group rows,
    :data:`~cohort.analysis.group_models.MODEL_COLUMNS`."""
    proportions: pd.DataFrame
    """:data:`~cohort.analysis.finding_proportions.PROPORTION_COLUMNS` (empty without
    ``subject_findings``)."""
    proportion_tests: pd.DataFrame
    """:data:`~cohort.analysis.finding_proportions.PROPORTION_TEST_COLUMNS` (empty without
    ``subject_findings``)."""
    summaries: pd.DataFrame
    """Per-subject summaries, :data:`~cohort.analysis.subject_summaries.SUMMARY_COLUMNS`."""
    model_path: str
    """Which linear-model path ran and why (also in each model row's ``path`` and note)."""

    def to_frame(self) -> pd.DataFrame:
        return self.comparisons

    def tables(self) -> dict[str, pd.DataFrame]:
        """The tables by name, for writing out at the edge."""
        return {
            "group_comparison": self.comparisons,
            "group_descriptives": self.descriptives,
            "group_models": self.models,
            "finding_proportions": self.proportions,
            "finding_group_tests": self.proportion_tests,
            "subject_summaries": self.summaries,
        }


def group_comparison_table(
    values: pd.DataFrame,
    subjects: pd.DataFrame,
    group_order: Sequence[str] | None = None,
    *,
    paired: pd.DataFrame | None = None,
    subject_findings: pd.DataFrame | None = None,
    segment_findings: pd.DataFrame | None = None,
    covariates: Sequence[str] = (),
    tests: Sequence[str] = TESTS,
    correction: str = HOLM,
    confidence_level: float = 0.95,
    model_path: str = "auto",
    max_mixed_observations: int = MIXED_MODEL_MAX_OBSERVATIONS,
    fisher_max_tables: int = FISHER_MAX_TABLES,
    fisher_draws: int = FISHER_DRAWS,
    seed: int | None = DEFAULT_SEED,
    workers: int = 1,
) -> GroupComparison:
    """The whole group comparison of a study: summaries, descriptives, tests, models.

    ``values`` and ``subjects`` as in :class:`~cohort.io.study.Study`; ``paired`` (its
    ``paired`` table) adds the method x group interaction models; ``subject_findings``
    (``subject, group, method, finding, positive``) adds proportions and Fisher tests;
    ``segment_findings`` (the same per segment) adds GEE models. Each part is corrected
    within its stated families by ``correction`` (see :func:`compare_summaries`,
    :func:`~cohort.analysis.finding_proportions.compare_proportions`,
    :func:`~cohort.analysis.group_models.group_models`). One linear-model path is chosen
    for all fits (:func:`~cohort.stats.models.choose_model_path` on the largest fit);
    ``model_path`` of the result says which and why. ``workers``: processes for the GEE
    fits (same results).

    Examples
    --------
    >>> values = pd.DataFrame({"subject": list("uuvvwwxxyyzz"), "method": "m",
    ...     "parameter": "ff", "segment": [1, 2] * 6,
    ...     "value": [1.0, 1.2, 2.0, 2.2, 1.5, 1.9, 3.1, 2.9, 2.5, 2.8, 3.6, 3.2]})
    >>> subjects = pd.DataFrame({"subject": list("uvwxyz"), "group": list("aaabbb")})
    >>> result = group_comparison_table(values, subjects, model_path="subject-means")
    >>> result.model_path
    'subject means (OLS) (subject-means requested)'
    >>> sorted(result.tables())[:3]
    ['finding_group_tests', 'finding_proportions', 'group_comparison']
    """
    correction = check_correction(correction)
    check_confidence_level(confidence_level)
    check_model_path(model_path)
    values = require_columns(
        values, "values", ("subject", "method", "parameter", "segment", "value")
    )
    subjects = require_columns(subjects, "subjects", ("subject", "group"))
    if paired is not None:
        paired = require_columns(paired, "paired", ("parameter", "method", "subject", "group"))
    with one_warning_per_reason():
        summaries = subject_summaries(values, subjects)
        order = ordered_groups(subjects["group"].astype(str), group_order, "subjects")
        descriptives = describe_groups(summaries, order)
        comparisons = compare_summaries(
            summaries, order, tests=tests, correction=correction, confidence_level=confidence_level
        )
        models, kind, why = _model_tables(
            values, paired, segment_findings, subjects, order, covariates,
            (model_path, max_mixed_observations), correction, confidence_level, workers,
        )  # fmt: skip
        fisher = {"max_tables": fisher_max_tables, "n_draws": fisher_draws, "seed": seed}
        options = {"correction": correction, "confidence_level": confidence_level}
        proportions, proportion_tests = _proportion_tables(subject_findings, order, options, fisher)
    path_text = {"mixed": MIXED_PATH, "subject-means": SUBJECT_MEANS_PATH}[kind]
    return GroupComparison(
        comparisons,
        descriptives,
        models,
        proportions,
        proportion_tests,
        summaries,
        f"{path_text} ({why})",
    )


def _model_tables(
    values, paired, segment_findings, subjects, order, covariates, path, correction, level,
    workers,
):  # fmt: skip
    """The ``group_models`` table (one linear-model path for every fit, chosen on the
    largest), the path and why it was chosen."""
    largest = largest_fit(values, ["parameter", "method"])
    if paired is not None:
        largest = max(largest, largest_fit(paired, ["parameter", "method"]))
    kind, why = choose_model_path(largest, *path)
    linear = (subjects, order, covariates, kind, why, correction, level)
    parts = [linear_models(values, segment_values, GROUP_DIFFERENCE, *linear)]
    if paired is not None:
        parts.append(linear_models(paired, method_differences, METHOD_BY_GROUP, *linear))
    if segment_findings is not None:
        parts.append(
            finding_models(
                segment_findings, subjects, order, covariates=covariates,
                correction=correction, confidence_level=level, workers=workers,
            )
        )  # fmt: skip
    return pd.concat(parts, ignore_index=True), kind, why


def _proportion_tables(subject_findings, order, options, fisher):
    """The proportions and their tests, or the two empty tables without findings."""
    if subject_findings is None:
        empty = pd.DataFrame(columns=list(PROPORTION_COLUMNS))
        return empty, pd.DataFrame(columns=list(PROPORTION_TEST_COLUMNS))
    found = compare_proportions(subject_findings, order, **options, **fisher)
    return found.proportions, found.tests


def study_group_comparison(study: Study, **options: Any) -> GroupComparison:
    """:func:`group_comparison_table` of a :class:`~cohort.io.study.Study` (its values,
    subjects, group order and paired table); ``options`` as there (findings included).

    Examples
    --------
    >>> import tempfile, warnings
    >>> from cohort.demo import write_demo
    >>> from cohort.io.study import load_study
    >>> with tempfile.TemporaryDirectory() as folder, warnings.catch_warnings():
    ...     warnings.simplefilter("ignore")  # not-estimable rows of the demo carry notes
    ...     study = load_study(write_demo(folder))
    ...     result = study_group_comparison(study, model_path="subject-means")
    >>> list(result.comparisons["comparison"].unique()[:2])
    ['all groups', 'acute vs control']
    """
    return group_comparison_table(
        study.values, study.subjects, study.groups, paired=study.paired, **options
    )
