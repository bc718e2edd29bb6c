"""Finding-level agreement of each test method with the reference: 2x2 tables and missed findings.

A finding (see :mod:`cohort.analysis.findings`) classifies *units* as positive or negative:
segments, territories (positive if any segment is) or subjects (positive with at least
``min_segments`` positive segments). Units are compared only where both methods classified
them; territory and subject units are built from the segments that both methods measured
and classified, so a segment one method lacks is never counted as a miss.

For each test method, finding, level and stratum (``all`` and ``group=<name>``), the
statistics of :func:`cohort.stats.classification.diagnostic_accuracy`:

- counts ``tp, fp, fn, tn`` with the reference as truth (rows reference, columns test);
- sensitivity, specificity, PPV, NPV with Wilson score intervals (Wilson 1927; Newcombe
  1998), which treat units as independent;
- Cohen's kappa (Cohen 1960) with the asymptotic standard error of Fleiss, Cohen & Everitt
  (1969);
- the exact McNemar test (binomial test of the discordant pairs);
- at segment and territory level, where units are clustered in subjects, also subject
  cluster bootstrap percentile intervals (``*_cluster_ci_*`` columns): subjects are
  resampled with replacement, drawn as in :mod:`cohort.stats.bootstrap`, and each resample's
  2x2 table is the product of the subject counts with the per-subject tables. These are the
  intervals to report for segment-level accuracy; the Wilson intervals are too narrow when
  segments of one subject are correlated.

Not estimable quantities (e.g. sensitivity without reference positives) are NaN with a note
and a :class:`~cohort.stats.results.NotEstimableWarning`.
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike

from cohort.analysis.findings import SEGMENT_COLUMNS, FindingsResult, summarise
from cohort.domain.options import DEFAULT_N_BOOT, DEFAULT_SEED
from cohort.domain.segments import SEGMENTS
from cohort.io.method_order import levels
from cohort.stats.bootstrap import (
    bootstrap_method,
    check_options,
    percentile_interval,
    resample_counts,
)
from cohort.stats.classification import (
    KAPPA_METHOD,
    PROPORTIONS,
    STATISTICS,
    WILSON_METHOD,
    accuracy_of_counts,
    diagnostic_accuracy,
)
from cohort.stats.results import (
    ConfidenceInterval,
    NotEstimableWarning,
    Result,
    warn_not_estimable,
)

LEVELS: tuple[str, ...] = ("segment", "territory", "subject")
CLUSTERED_LEVELS: tuple[str, ...] = ("segment", "territory")
"""Levels whose units are clustered in subjects (they get cluster bootstrap intervals)."""

FINDINGS_AGREEMENT_COLUMNS: tuple[str, ...] = (
    "finding", "parameter", "method", "reference", "level", "stratum", "n_subjects",
    "n_units", "n_unclassified", "tp", "fp", "fn", "tn",
    "sensitivity", "sensitivity_ci_low", "sensitivity_ci_high",
    "specificity", "specificity_ci_low", "specificity_ci_high",
    "ppv", "ppv_ci_low", "ppv_ci_high",
    "npv", "npv_ci_low", "npv_ci_high",
    "kappa", "kappa_ci_low", "kappa_ci_high", "kappa_se",
    "mcnemar_p", "confidence_level", "ci_method",
    "sensitivity_cluster_ci_low", "sensitivity_cluster_ci_high",
    "specificity_cluster_ci_low", "specificity_cluster_ci_high",
    "ppv_cluster_ci_low", "ppv_cluster_ci_high",
    "npv_cluster_ci_low", "npv_cluster_ci_high",
    "kappa_cluster_ci_low", "kappa_cluster_ci_high", "cluster_ci_method",
    "note",
)  # fmt: skip
"""Columns of the ``findings_agreement`` table, in order."""

MISSED_COLUMNS: tuple[str, ...] = (
    "finding", "parameter", "method", "reference", "kind", "level", "subject", "group",
    "segment", "segment_name", "territory", "reference_value", "test_value",
    "reference_threshold", "test_threshold",
)  # fmt: skip
"""Columns of :func:`missed_findings`; ``kind`` is ``missed`` (reference only) or ``extra``
(test only). At subject level the values are each method's extreme value."""


# --- cluster bootstrap -----------------------------------------------------------------------


def subject_tables(
    reference_positive: ArrayLike, test_positive: ArrayLike, subject: ArrayLike
) -> tuple[np.ndarray, np.ndarray]:
    """Per-subject 2x2 counts: (labels in sorted order, array (k, 4) of tp, fp, fn, tn).

    Examples
    --------
    >>> labels, tables = subject_tables([1, 1, 0, 0], [1, 0, 1, 0], ["b", "a", "a", "b"])
    >>> print(labels.tolist(), tables.astype(int).tolist())
    ['a', 'b'] [[0, 1, 1, 0], [1, 0, 0, 1]]
    """
    ref = np.asarray(reference_positive, dtype=bool)
    test = np.asarray(test_positive, dtype=bool)
    labels, codes = np.unique(np.asarray(subject), return_inverse=True)
    codes = codes.reshape(-1)
    k = labels.size
    cells = (ref & test, ~ref & test, ref & ~test, ~ref & ~test)
    table = np.column_stack([np.bincount(codes, weights=c, minlength=k) for c in cells])
    return labels, table.reshape(k, 4)


def cluster_bootstrap_draws(
    tables: np.ndarray, *, n_boot: int, seed: int | None
) -> dict[str, np.ndarray]:
    """Bootstrap distributions of sensitivity, specificity, PPV, NPV and kappa.

    ``tables`` has one row of ``tp, fp, fn, tn`` per subject (sorted label order). Each
    resample's 2x2 table is ``w @ tables`` with ``w`` the subject counts of
    :func:`cohort.stats.bootstrap.resample_counts` (multinomial draws of ``k`` subjects), so no
    loop over subjects or units runs per resample (Field & Welsh, J R Stat Soc B 2007).
    Checked against a direct per-resample computation on the same drawn subjects in the tests.

    Examples
    --------
    >>> tables = np.array([[2, 0, 1, 10], [1, 1, 0, 12], [0, 0, 1, 11]])
    >>> draws = cluster_bootstrap_draws(tables, n_boot=50, seed=1)
    >>> print(sorted(draws), draws["kappa"].shape)
    ['kappa', 'npv', 'ppv', 'sensitivity', 'specificity'] (50,)
    """
    k = tables.shape[0]
    parts: dict[str, list[np.ndarray]] = {name: [] for name in STATISTICS}
    for counts in resample_counts(k, n_boot, seed):
        totals = counts @ tables
        for name, value in accuracy_of_counts(*totals.T).items():
            parts[name].append(value)
    return {name: np.concatenate(chunks) for name, chunks in parts.items()}


# --- units of a level ------------------------------------------------------------------------


_RENAME = {
    "value_ref": "reference_value",
    "value_test": "test_value",
    "threshold_ref": "reference_threshold",
    "threshold_test": "test_threshold",
    "positive_ref": "reference_positive",
    "positive_test": "test_positive",
}
_PER_METHOD = ("value", "threshold", "derived", "positive")
"""Columns of a segment row that belong to one method (suffixed ``_ref``/``_test`` when
the two methods' rows are merged)."""


def _level_units(
    findings: FindingsResult, reference: str, method: str, level: str
) -> tuple[pd.DataFrame, pd.Series]:
    """Units of one level classified by both methods, and per finding and group the number of
    units both methods measured but did not both classify (remote threshold not estimable)."""
    seg = findings.segments
    keys = ["finding", "parameter", "subject", "segment"]
    ref = seg[seg["method"].eq(reference)]
    test = seg[seg["method"].eq(method)][[*keys, *_PER_METHOD]]
    both = ref.merge(test, on=keys, how="inner", suffixes=("_ref", "_test"))
    both["_classified"] = (both["positive_ref"].notna() & both["positive_test"].notna()).to_numpy()
    unit_keys = {"segment": ["finding", "subject", "segment"], "subject": ["finding", "subject"]}
    unit_keys["territory"] = ["finding", "subject", "territory"]
    any_classified = both.groupby([*unit_keys[level], "group"])["_classified"].any()
    unclassified = (~any_classified).groupby(level=["finding", "group"]).sum()
    both = both[both["_classified"]].drop(columns="_classified").reset_index(drop=True)
    if level == "segment":
        units = both.rename(columns=_RENAME)
        units["segment"] = units["segment"].astype("Int64")
        return units, unclassified
    return _summarised_units(findings, both, reference, method, level), unclassified


def _summarised_units(
    findings: FindingsResult, both: pd.DataFrame, reference: str, method: str, level: str
) -> pd.DataFrame:
    """Territory or subject units from the segments both methods classified (``both``)."""

    def side(suffix: str, name: str) -> pd.DataFrame:
        frame = both.rename(columns={f"{c}{suffix}": c for c in _PER_METHOD})
        frame["method"] = name
        return frame[list(SEGMENT_COLUMNS)]

    keys_level = ["finding", "parameter", "subject", "group", "field_strength"]
    if level == "territory":
        keys_level.append("territory")
    parts = []
    for suffix, name in (("_ref", reference), ("_test", method)):
        summary = summarise(side(suffix, name), findings.definitions, level)  # type: ignore[arg-type]
        summary = summary.rename(columns={"extreme_value": "value"})
        parts.append(summary[[*keys_level, "value", "threshold", "positive", "extreme_segment"]])
    units = parts[0].merge(parts[1], on=keys_level, suffixes=("_ref", "_test"))
    return units.rename(columns=_RENAME)


def _count(unclassified: pd.Series, finding: str, group: str | None) -> int:
    """Units of ``finding`` (in ``group``; None: all) left out as not classified by both."""
    if finding not in unclassified.index.get_level_values("finding"):
        return 0
    part = unclassified.xs(finding, level="finding")
    return int(part.sum() if group is None else part.get(group, 0))


# --- one row of the table --------------------------------------------------------------------


def _point_columns(
    ref: np.ndarray, test: np.ndarray, confidence_level: float, notes: list[str]
) -> dict[str, object]:
    """Counts, point estimates and analytic intervals of one 2x2 table; notes appended."""
    tp, fp = int(np.sum(ref & test)), int(np.sum(~ref & test))
    fn, tn = int(np.sum(ref & ~test)), int(np.sum(~ref & ~test))
    acc = diagnostic_accuracy(tp, fp, fn, tn, confidence_level)
    row: dict[str, object] = {"tp": tp, "fp": fp, "fn": fn, "tn": tn}
    row["confidence_level"] = confidence_level
    row["ci_method"] = f"proportions: {WILSON_METHOD}; kappa: {KAPPA_METHOD}"
    for name in PROPORTIONS:
        p = getattr(acc, name)
        row[name] = p.estimate
        row[f"{name}_ci_low"], row[f"{name}_ci_high"] = p.ci.low, p.ci.high
        if p.note:
            notes.append(p.note)
    row["kappa"], row["kappa_se"] = acc.kappa.estimate, acc.kappa.se
    row["kappa_ci_low"], row["kappa_ci_high"] = acc.kappa.ci.low, acc.kappa.ci.high
    if acc.kappa.note:
        notes.append(acc.kappa.note)
    row["mcnemar_p"] = acc.mcnemar.p_value
    if acc.n_units == 0:
        row["mcnemar_p"] = math.nan
        notes.append(warn_not_estimable("McNemar p", "no units"))
    elif acc.mcnemar.note:
        notes.append(f"McNemar: {acc.mcnemar.note}")
    return row


def _cluster_columns(
    row: dict[str, object],
    units: pd.DataFrame,
    *,
    n_boot: int,
    seed: int | None,
    confidence_level: float,
    notes: list[str],
) -> dict[str, object]:
    """Subject cluster bootstrap intervals of the statistics in ``row``; notes appended."""
    n_subjects = int(units["subject"].nunique())
    out: dict[str, object] = {"cluster_ci_method": bootstrap_method(n_boot, seed)}
    draws = None
    if n_subjects >= 2 and n_boot > 0:
        # integer codes in sorted label order give the same table rows as the labels
        codes, _ = pd.factorize(units["subject"], sort=True)
        ref = units["reference_positive"].to_numpy(dtype=bool)
        test = units["test_positive"].to_numpy(dtype=bool)
        _, tables = subject_tables(ref, test, codes)
        draws = cluster_bootstrap_draws(tables, n_boot=n_boot, seed=seed)
    for name in STATISTICS:
        if not np.isfinite(row[name]):  # type: ignore[arg-type]
            # the point estimate's note already says why
            ci = ConfidenceInterval.not_estimable("point estimate not estimable")
        elif n_subjects < 2:
            ci = ConfidenceInterval.not_estimable("fewer than 2 subjects")
            notes.append(warn_not_estimable(f"{name} cluster interval", "fewer than 2 subjects"))
        else:
            ci = percentile_interval(
                None if draws is None else draws[name], confidence_level, n_boot, seed
            )
            if not ci.estimable:
                reason = ci.note.removeprefix("not estimable: ")
                notes.append(warn_not_estimable(f"{name} cluster interval", reason))
            elif ci.note:
                notes.append(f"{name} cluster interval: {ci.note}")
        out[f"{name}_cluster_ci_low"], out[f"{name}_cluster_ci_high"] = ci.low, ci.high
    return out


def _not_clustered() -> dict[str, object]:
    out: dict[str, object] = {"cluster_ci_method": "not applicable: one unit per subject"}
    for name in STATISTICS:
        out[f"{name}_cluster_ci_low"] = out[f"{name}_cluster_ci_high"] = math.nan
    return out


def _row(
    units: pd.DataFrame,
    *,
    clustered: bool,
    n_boot: int,
    seed: int | None,
    confidence_level: float,
    unclassified: int,
) -> dict[str, object]:
    ref = units["reference_positive"].to_numpy(dtype=bool)
    test = units["test_positive"].to_numpy(dtype=bool)
    notes: list[str] = []
    row: dict[str, object] = {
        "n_subjects": int(units["subject"].nunique()),
        "n_units": len(units),
        "n_unclassified": unclassified,
    }
    row.update(_point_columns(ref, test, confidence_level, notes))
    if unclassified:
        notes.append(f"{unclassified} unit(s) not classified by both methods, left out")
    if clustered:
        options = {"n_boot": n_boot, "seed": seed, "confidence_level": confidence_level}
        row.update(_cluster_columns(row, units, **options, notes=notes))
    else:
        row.update(_not_clustered())
    row["note"] = "; ".join(notes)
    return row


# --- the table -------------------------------------------------------------------------------


@dataclass(frozen=True, repr=False)
class FindingsAgreement(Result):
    """The ``findings_agreement`` table (columns :data:`FINDINGS_AGREEMENT_COLUMNS`) and the
    interval settings it was computed with."""

    table: pd.DataFrame
    n_boot: int
    seed: int | None
    confidence_level: float

    def to_frame(self) -> pd.DataFrame:
        return self.table


def _check_levels(levels: Sequence[str]) -> None:
    bad = [lv for lv in levels if lv not in LEVELS]
    if bad:
        raise ValueError(f"levels must be among {list(LEVELS)}, got {bad}")


def _test_methods(
    findings: FindingsResult, reference: str, methods: Sequence[str] | None
) -> list[str]:
    """The test methods to compare with ``reference`` (default: every other method)."""
    present = [str(m) for m in levels(findings.segments["method"])]
    if reference not in present:
        raise ValueError(f"reference must be a method of the findings {present}, got {reference!r}")
    tests = [m for m in present if m != reference] if methods is None else list(methods)
    unknown = [m for m in tests if m not in present or m == reference]
    if unknown:
        raise ValueError(f"methods must be test methods among {present}, got {unknown}")
    return tests


def _strata(findings: FindingsResult, groups: Sequence[str] | None) -> list[tuple[str, str | None]]:
    """``("all", None)`` then ``("group=<name>", name)`` for each group present."""
    present = list(pd.unique(findings.segments["group"]))
    chosen = present if groups is None else [g for g in groups if g in present]
    return [("all", None)] + [(f"group={g}", g) for g in chosen]


def findings_agreement(
    findings: FindingsResult,
    reference: str,
    *,
    methods: Sequence[str] | None = None,
    levels: Sequence[str] = LEVELS,
    groups: Sequence[str] | None = None,
    n_boot: int = DEFAULT_N_BOOT,
    seed: int | None = DEFAULT_SEED,
    confidence_level: float = 0.95,
) -> FindingsAgreement:
    """Finding-level agreement of each test method with ``reference``, overall and per group.

    One row per finding, method, level and stratum; see the module docstring for the
    statistics and :data:`FINDINGS_AGREEMENT_COLUMNS` for the columns. Cluster bootstrap
    intervals (segment and territory level) are reproducible with ``seed`` and equal a direct
    per-resample computation on the same resampled subjects (checked in the tests); the
    counts follow a simulated cohort with planted detected, missed and extra lesions.

    Examples
    --------
    Three subjects: the test method finds subject a's lesion, misses b's; c has none.

    >>> from cohort.analysis.findings import evaluate_findings
    >>> from cohort.domain.thresholds import FAT
    >>> values = pd.DataFrame({
    ...     "subject": list("aaaabbbbcccc"), "method": ["ref", "ref", "new", "new"] * 3,
    ...     "segment": [1, 2] * 6, "parameter": "ff",
    ...     "value": [12, 3, 11, 2, 15, 4, 8, 3, 4, 3, 5, 2], "group": "all",
    ...     "field_strength": 1.5, "segment_name": "", "ring": "", "territory": ""})
    >>> subjects = pd.DataFrame({"subject": ["a", "b", "c"]})
    >>> found = evaluate_findings(values, subjects, (FAT,))
    >>> result = findings_agreement(found, "ref", levels=("subject",), n_boot=0)
    >>> row = result.table.iloc[0]
    >>> print(row["level"], row["tp"], row["fn"], row["fp"], row["tn"])
    subject 1 1 0 1
    >>> print(row["sensitivity"], row["specificity"], round(row["kappa"], 3))
    0.5 1.0 0.4
    """
    check_options(confidence_level, n_boot)
    _check_levels(levels)
    tests = _test_methods(findings, reference, methods)
    strata = _strata(findings, groups)
    parameter_of = {d.name: d.parameter for d in findings.definitions}
    options = {"n_boot": n_boot, "seed": seed, "confidence_level": confidence_level}
    rows = []
    # one summary warning instead of one per row and quantity (the note column has each)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", NotEstimableWarning)
        for method in tests:
            for level in levels:
                units, unclassified = _level_units(findings, reference, method, level)
                for finding, parameter in parameter_of.items():
                    part = units[units["finding"].eq(finding)]
                    for stratum, group in strata:
                        sub = part if group is None else part[part["group"].eq(group)]
                        row = _row(
                            sub,
                            clustered=level in CLUSTERED_LEVELS,
                            unclassified=_count(unclassified, finding, group),
                            **options,
                        )
                        row.update(finding=finding, parameter=parameter, method=method)
                        row.update(reference=reference, level=level, stratum=stratum)
                        rows.append(row)
    _rewarn(caught, "findings agreement")
    table = pd.DataFrame(rows, columns=list(FINDINGS_AGREEMENT_COLUMNS))
    return FindingsAgreement(table, n_boot, seed, confidence_level)


def _rewarn(caught: list[warnings.WarningMessage], what: str) -> None:
    """Re-emit caught warnings; NotEstimableWarnings as one summary."""
    not_estimable = [w for w in caught if issubclass(w.category, NotEstimableWarning)]
    for w in caught:
        if not issubclass(w.category, NotEstimableWarning):
            warnings.warn(w.message, w.category, stacklevel=3)
    if not_estimable:
        kinds = sorted({str(w.message) for w in not_estimable})
        warnings.warn(
            f"{what}: {len(not_estimable)} quantities not estimable (see the note column): "
            + "; ".join(kinds),
            NotEstimableWarning,
            stacklevel=3,
        )


# --- missed and extra findings ---------------------------------------------------------------


def _missed_of_level(units: pd.DataFrame, level: str) -> pd.DataFrame:
    """The units of one level that only one method flags, with ``kind`` and the segment."""
    ref = units["reference_positive"].to_numpy(dtype=bool)
    test = units["test_positive"].to_numpy(dtype=bool)
    kind = np.where(ref & ~test, "missed", np.where(~ref & test, "extra", ""))
    hit = units[kind != ""].copy()
    hit["kind"] = kind[kind != ""]
    if level != "segment":
        seg = np.where(
            hit["kind"].eq("missed"), hit["extreme_segment_ref"], hit["extreme_segment_test"]
        )
        hit["segment"] = pd.array(seg, dtype="Int64")
        hit["segment_name"] = [SEGMENTS[int(n)].name for n in seg]
        if level == "subject":
            hit["territory"] = ""
    return hit


def missed_findings(
    findings: FindingsResult,
    reference: str,
    *,
    methods: Sequence[str] | None = None,
    levels: Sequence[str] = LEVELS,
) -> pd.DataFrame:
    """Every unit the reference flags and a test method does not (``missed``), and every unit
    only the test method flags (``extra``), with both values and thresholds.

    Units as in :func:`findings_agreement` (classified by both methods). Columns
    :data:`MISSED_COLUMNS`; at territory and subject level ``segment`` and
    ``segment_name`` are those of the reference's extreme segment of a missed unit (the test
    method's for an extra one), the values are the extreme values. Checked against planted
    misses in a simulated cohort and against a direct threshold comparison of the demo.

    Examples
    --------
    >>> from cohort.analysis.findings import evaluate_findings
    >>> from cohort.domain.thresholds import FAT
    >>> values = pd.DataFrame({
    ...     "subject": "a", "method": ["ref", "ref", "new", "new"], "segment": [1, 2, 1, 2],
    ...     "parameter": "ff", "value": [12.0, 3.0, 8.0, 2.0], "group": "all",
    ...     "field_strength": 1.5, "segment_name": "basal anterior", "ring": "basal",
    ...     "territory": "LAD"})
    >>> found = evaluate_findings(values, pd.DataFrame({"subject": ["a"]}), (FAT,))
    >>> missed = missed_findings(found, "ref", levels=("segment",))
    >>> print(missed[["kind", "segment", "reference_value", "test_value"]].to_string(index=False))
      kind  segment  reference_value  test_value
    missed        1             12.0         8.0
    """
    _check_levels(levels)
    tests = _test_methods(findings, reference, methods)
    frames = []
    for method in tests:
        for level in levels:
            units, _ = _level_units(findings, reference, method, level)
            hit = _missed_of_level(units, level)
            hit["method"], hit["reference"], hit["level"] = method, reference, level
            frames.append(hit.reindex(columns=list(MISSED_COLUMNS)))
    if not frames:
        return pd.DataFrame(columns=list(MISSED_COLUMNS))
    out = pd.concat(frames, ignore_index=True)
    out["segment"] = out["segment"].astype("Int64")
    for column in ("segment_name", "territory"):
        out[column] = out[column].fillna("")
    return out


# --- strata for the agreement table ----------------------------------------------------------


def finding_strata(paired: pd.DataFrame, findings_result: FindingsResult) -> dict[str, np.ndarray]:
    """Masks over ``paired`` rows of reference-positive and reference-negative segments.

    For each finding, ``finding=<name>:positive`` selects the rows (of every parameter)
    whose segment the *reference* method classifies as positive, ``:negative`` those it
    classifies as negative (unclassified segments are in neither), so that, say, fat-fraction
    agreement in hemorrhagic segments can be read beside R2* agreement there. Pass the
    result as ``extra_strata`` to the agreement table. Checked against planted lesions of a
    simulated cohort and a direct threshold comparison of the demo (tests).

    Examples
    --------
    >>> from cohort.analysis.findings import evaluate_findings
    >>> from cohort.domain.thresholds import FAT
    >>> values = pd.DataFrame({
    ...     "subject": "a", "method": ["ref", "ref", "new", "new"], "segment": [1, 2, 1, 2],
    ...     "parameter": "ff", "value": [12.0, 3.0, 8.0, 2.0], "group": "all",
    ...     "field_strength": 1.5, "segment_name": "", "ring": "", "territory": ""})
    >>> found = evaluate_findings(values, pd.DataFrame({"subject": ["a"]}), (FAT,))
    >>> paired = pd.DataFrame({"parameter": ["ff", "r2star", "ff"], "reference": "ref",
    ...                        "subject": "a", "segment": [1, 1, 2]})
    >>> print(finding_strata(paired, found)["finding=fat:positive"].tolist())
    [True, True, False]
    """
    for column in ("parameter", "reference", "subject", "segment"):
        if column not in paired.columns:
            raise ValueError(f"paired must have column {column!r}")
    references = pd.unique(paired["reference"])
    if len(references) > 1:
        raise ValueError(f"paired must have one reference method, got {list(references)}")
    seg = findings_result.segments
    out: dict[str, np.ndarray] = {}
    key = pd.MultiIndex.from_arrays(
        [paired["subject"].to_numpy(), paired["segment"].to_numpy(dtype=int)]
    )
    for d in findings_result.definitions:
        ref = seg[seg["finding"].eq(d.name)]
        if len(references):
            ref = ref[ref["method"].eq(references[0])]
        else:
            ref = ref.iloc[:0]
        positive = pd.Series(
            ref["positive"].to_numpy(),
            index=pd.MultiIndex.from_arrays(
                [ref["subject"].to_numpy(), ref["segment"].to_numpy(dtype=int)]
            ),
            dtype="boolean",
        )
        status = positive.reindex(key)
        out[f"finding={d.name}:positive"] = status.eq(True).fillna(False).to_numpy(dtype=bool)
        out[f"finding={d.name}:negative"] = status.eq(False).fillna(False).to_numpy(dtype=bool)
    return out
