"""Head to head: test methods compared with each other against the same reference.

For every pair of test methods (``method_a`` before ``method_b`` in the study's order), or
every method against a baseline, one row per target and statistic with the difference
``estimate_a - estimate_b``:

- per parameter (``kind = "parameter"``, ``target`` the parameter code; stratum all, pairs
  pooled over segments): ``abs_bias`` = ``|bias_a| - |bias_b|`` and ``loa_width`` = width of
  the limits of agreement of a minus that of b (Bland & Altman 2007, lower is better);
  ``ccc`` = Lin's CCC of a minus that of b (higher is better). Each method's estimate is
  the one of the agreement table (the same functions on the same pairs);
- per finding (``kind = "finding"``, ``target`` the finding name; segment level):
  ``sensitivity`` and ``specificity`` of a minus those of b (higher is better), on the
  segments that the reference and both methods classified.

Intervals: subject cluster bootstrap percentile, each resample drawing subjects once for
both methods (Field CA, Welsh AH. J R Stat Soc B 2007;69:369-390 (memory)). p-values: for
sensitivity and specificity the clustered test of Obuchowski (1998) with the exact McNemar
test beside it; for the parameter statistics a Wald test with the bootstrap standard error
(:func:`bootstrap_p_value`).
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Sequence
from dataclasses import replace
from itertools import combinations

import numpy as np
import pandas as pd
from scipy import stats

from cohort.domain.options import DEFAULT_N_BOOT, DEFAULT_SEED
from cohort.domain.units import PARAMETERS
from cohort.stats._agreement_core import _key, ba2007_statistic
from cohort.stats.agreement import ba2007_analysis
from cohort.stats.bootstrap import (
    PairedValues,
    ResampleCounts,
    SubjectSums,
    bootstrap_method,
    check_options,
    cluster_bootstrap,
    context,
    paired_sums,
    paired_values,
    percentile_interval,
    run_analyses,
)
from cohort.stats.concordance import CCC_ANALYSIS, ccc_statistic
from cohort.stats.multiplicity import adjust_p, check_correction
from cohort.stats.paired_proportions import OBUCHOWSKI_P_METHOD, clustered_paired_proportions
from cohort.stats.results import ConfidenceInterval, NotEstimableWarning

__all__ = [
    "BETTER",
    "FINDING_STATISTICS",
    "METHOD_DIFFERENCE_COLUMNS",
    "PARAMETER_STATISTICS",
    "bootstrap_p_value",
    "method_differences",
]

METHOD_DIFFERENCE_COLUMNS: tuple[str, ...] = (
    "method_a", "method_b", "reference", "kind", "target", "statistic", "better",
    "estimate_a", "estimate_b", "difference", "ci_low", "ci_high", "confidence_level",
    "ci_method", "p_value", "p_method", "p_adjusted", "correction", "family", "mcnemar_p",
    "n_subjects", "note",
)  # fmt: skip
"""Columns of :func:`method_differences`, in order."""

PARAMETER_STATISTICS: tuple[str, ...] = ("abs_bias", "loa_width", "ccc")
FINDING_STATISTICS: tuple[str, ...] = ("sensitivity", "specificity")
BETTER = {
    "abs_bias": "lower",
    "loa_width": "lower",
    "ccc": "higher",
    "sensitivity": "higher",
    "specificity": "higher",
}
"""Which direction of each statistic is better: a negative ``difference`` of a "lower"
statistic, or a positive one of a "higher" statistic, favours ``method_a``."""

SAME_SUBJECTS = "same subjects for both methods"
BOOTSTRAP_P_METHOD = (
    "Wald test with the subject cluster bootstrap standard error, z = difference / SD of "
    "the resampled differences, two-sided normal (Efron & Tibshirani 1993)"
)
NO_BOOTSTRAP_P = "bootstrap test not computed: no bootstrap requested (n_boot=0)"
_PAIRED_REQUIRED = ("parameter", "method", "reference", "subject", "reference_value", "test_value")
_FINDINGS_REQUIRED = ("finding", "method", "subject", "segment", "positive")


def bootstrap_p_value(estimate: float, draws: np.ndarray) -> float:
    """Two-sided p-value of "no difference" from the bootstrap standard error.

    ``z = d / sd(d*)`` with ``d`` the observed difference and ``sd(d*)`` the standard
    deviation of the finite resampled differences; ``p = 2 (1 - Phi(|z|))``: the normal
    approximation with a bootstrap standard error (Efron & Tibshirani 1993, An Introduction
    to the Bootstrap, ch. 6 and 12 (memory)); no floor at ``2/(B + 1)``, unlike a count of
    resamples. NaN with fewer than 2 finite draws; 1 when ``d`` and every draw are 0.

    Examples
    --------
    >>> round(bootstrap_p_value(1.0, np.array([0.5, 1.0, 1.5])), 4)  # z = 1 / 0.5 = 2
    0.0455
    >>> bootstrap_p_value(0.0, np.zeros(5))
    1.0
    """
    finite = draws[np.isfinite(draws)]
    if finite.size < 2 or not math.isfinite(estimate):
        return math.nan
    se = float(np.std(finite, ddof=1))
    if se == 0.0:
        return 1.0 if estimate == 0.0 else 0.0
    return float(2.0 * stats.norm.sf(abs(estimate) / se))


# --- input ------------------------------------------------------------------------------------


def _check_frame(frame: object, name: str, required: Sequence[str]) -> None:
    if not isinstance(frame, pd.DataFrame):
        raise ValueError(f"{name} must be a pandas DataFrame, got {type(frame).__name__}")
    missing = [c for c in required if c not in frame.columns]
    if missing:
        raise ValueError(f"{name} lacks the columns {missing} (see the data contract)")


def _check_methods(
    paired: pd.DataFrame,
    findings: pd.DataFrame | None,
    reference: str,
    methods: Sequence[str],
    baseline: str | None,
) -> list[str]:
    if isinstance(methods, str) or not all(isinstance(m, str) for m in methods):
        raise ValueError(f"methods must be a sequence of method names, got {methods!r}")
    chosen = list(methods)
    repeated = sorted({m for m in chosen if chosen.count(m) > 1})
    if repeated:
        raise ValueError(f"methods must name each test method once, got {repeated} twice")
    if reference in chosen:
        raise ValueError(f"methods must be test methods, not the reference {reference!r}")
    present = set(paired["method"].astype(str).unique())
    if findings is not None:
        present |= set(findings["method"].astype(str).unique())
    unknown = [m for m in chosen if m not in present]
    if unknown:
        raise ValueError(
            f"methods must have pairs or classified segments, got {unknown} (present: "
            f"{sorted(present - {reference})})"
        )
    references = sorted(paired["reference"].astype(str).unique())
    if references and references != [reference]:
        raise ValueError(f"paired must hold pairs with reference {reference!r}, got {references}")
    if baseline is not None and baseline not in chosen:
        raise ValueError(f"baseline must be one of methods {chosen}, got {baseline!r}")
    return chosen


def _pairs(methods: list[str], baseline: str | None) -> list[tuple[str, str]]:
    """(a, b) in the methods' order; with a baseline every other method against it."""
    if baseline is None:
        return list(combinations(methods, 2))
    return [(m, baseline) for m in methods if m != baseline]


# --- bootstrap pieces -------------------------------------------------------------------------


class _Bootstrap:
    """The resample counts shared by every row, and how rows say what they were."""

    def __init__(self, n_boot: int, seed: int | None, confidence_level: float) -> None:
        self.n_boot, self.seed, self.level = n_boot, seed, confidence_level
        # without a seed, one drawn seed serves every row, so that both methods of a row
        # (and all rows) see the same resampled subjects
        self.drawn_seed = seed if seed is not None else int(np.random.SeedSequence().entropy)
        self.counts = ResampleCounts(n_boot, self.drawn_seed)

    def interval(self, draws: np.ndarray | None, n_subjects: int) -> ConfidenceInterval:
        if draws is None and self.n_boot > 0:
            reason = f"fewer than 2 subjects (n={n_subjects})"
            return ConfidenceInterval.not_estimable(reason, self.level, self.method)
        return percentile_interval(draws, self.level, self.n_boot, self.seed, detail=SAME_SUBJECTS)

    @property
    def method(self) -> str:
        return f"{bootstrap_method(self.n_boot, self.seed)}, {SAME_SUBJECTS}"


def _union_sums(x: np.ndarray, y: np.ndarray, codes: np.ndarray, k: int) -> SubjectSums:
    """Per-subject sums over ``k`` subjects, zero for subjects without pairs of this method
    (so a resample counts, per method, only the drawn subjects that have its pairs)."""
    sums = paired_sums(PairedValues(x, y, codes, k))
    present = np.bincount(codes, minlength=k) > 0
    return replace(sums, values=np.where(present[:, None], sums.values, 0.0))


def _agreement_statistic(t) -> dict[str, np.ndarray]:
    """The parameter statistics of one method from totals (the agreement table's functions)."""
    ba = ba2007_statistic(t, "difference")
    low, high = ba[_key("difference", "ba", "loa_low")], ba[_key("difference", "ba", "loa_high")]
    return {
        "abs_bias": np.abs(ba[_key("difference", "ba", "bias")]),
        "loa_width": high - low,
        "ccc": ccc_statistic(t)["ccc"],
    }


# --- parameters -------------------------------------------------------------------------------


class _Sample:
    """One method's pairs of one parameter, its point estimates and why any is missing."""

    def __init__(self, x: np.ndarray, y: np.ndarray, labels: np.ndarray) -> None:
        self.x, self.y, self.labels = x, y, labels
        self.estimates = dict.fromkeys(PARAMETER_STATISTICS, math.nan)
        self.notes = dict.fromkeys(PARAMETER_STATISTICS, "not estimable: no pairs")
        if x.size == 0:
            return
        data = paired_values(x, y, labels)
        # the agreement table's analyses, without its bootstrap (n_boot = 0)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", NotEstimableWarning)
            loa, ccc = run_analyses(
                data, (ba2007_analysis("difference"), CCC_ANALYSIS), context(data, 0.95, 0, None)
            )
        self.estimates = {
            "abs_bias": abs(loa.bias.estimate),
            "loa_width": loa.upper.estimate - loa.lower.estimate,
            "ccc": ccc.estimate,
        }
        reasons = {
            "abs_bias": (loa.bias.note, loa.note),
            "loa_width": (loa.upper.note, loa.lower.note, loa.note),
            "ccc": (ccc.note,),
        }
        for name, value in self.estimates.items():
            found = [r for r in reasons[name] if r]
            self.notes[name] = "" if math.isfinite(value) else (found or ["not estimable"])[0]


def _parameter_samples(paired: pd.DataFrame, methods: list[str]) -> dict[tuple[str, str], _Sample]:
    """Every (parameter, method) sample of the given methods, parameters in canonical order."""
    keys = paired[["parameter", "method"]].astype(str)
    groups = keys.groupby(["parameter", "method"], sort=True).indices
    x_all = paired["reference_value"].to_numpy(dtype=float)
    y_all = paired["test_value"].to_numpy(dtype=float)
    labels = paired["subject"].astype(str).to_numpy()
    present = {p for p, m in groups if m in methods}
    order = [p for p in PARAMETERS if p in present] + sorted(present - set(PARAMETERS))
    samples = {}
    for parameter in order:
        for method in methods:
            rows = groups.get((parameter, method), np.zeros(0, dtype=int))
            samples[parameter, method] = _Sample(x_all[rows], y_all[rows], labels[rows])
    return samples


# Long: one row per statistic of a pair from two samples: estimates, notes, draws, intervals
def _parameter_rows(
    parameter: str,
    pair: tuple[str, str],
    samples: dict[tuple[str, str], _Sample],
    boot: _Bootstrap,
    cache: dict,
) -> list[dict[str, object]]:
    a, b = (samples[parameter, m] for m in pair)
    union = np.union1d(a.labels, b.labels)
    k = int(union.size)
    draws: list[dict[str, np.ndarray] | None] = []
    for method, sample in zip(pair, (a, b), strict=True):
        key = (parameter, method, union.tobytes(), union.size)
        if key not in cache:
            cache[key] = None
            if boot.n_boot > 0 and k >= 2 and sample.x.size:
                codes = np.searchsorted(union, sample.labels)
                sums = _union_sums(sample.x, sample.y, codes, k)
                cache[key] = cluster_bootstrap(
                    sums,
                    _agreement_statistic,
                    n_boot=boot.n_boot,
                    seed=boot.drawn_seed,
                    counts=boot.counts,
                )
        draws.append(cache[key])
    rows = []
    for statistic in PARAMETER_STATISTICS:
        notes = [f"{m}: {s.notes[statistic]}" for m, s in zip(pair, (a, b), strict=True)]
        notes = [n for n, s in zip(notes, (a, b), strict=True) if s.notes[statistic]]
        ea, eb = a.estimates[statistic], b.estimates[statistic]
        diff = ea - eb
        p = math.nan
        if not math.isfinite(diff):
            ci = ConfidenceInterval.not_estimable("point estimate not estimable", boot.level)
        else:
            both = None if None in draws else draws[0][statistic] - draws[1][statistic]
            ci = boot.interval(both, k)
            if both is not None:
                p = bootstrap_p_value(diff, both)
            elif boot.n_boot == 0:
                notes.append(NO_BOOTSTRAP_P)
            else:
                notes.append(f"bootstrap test not computed: fewer than 2 subjects (n={k})")
            if ci.note:
                notes.append(f"interval {ci.note}")
        rows.append(
            {
                "method_a": pair[0],
                "method_b": pair[1],
                "target": parameter,
                "statistic": statistic,
                "estimate_a": ea,
                "estimate_b": eb,
                "difference": diff,
                "ci_low": ci.low,
                "ci_high": ci.high,
                "p_value": p,
                "mcnemar_p": math.nan,
                "n_subjects": k,
                "note": "; ".join(dict.fromkeys(notes)),
            }
        )
    return rows


# --- findings ---------------------------------------------------------------------------------


def _wide(findings: pd.DataFrame, finding: str) -> pd.DataFrame:
    """``positive`` of one finding per (subject, segment) and method (NA: not classified)."""
    part = findings[findings["finding"].astype(str).eq(finding)]
    index = pd.MultiIndex.from_arrays(
        [
            part["subject"].astype(str).to_numpy(),
            part["segment"].to_numpy(dtype=int),
            part["method"].astype(str).to_numpy(),
        ],
        names=["subject", "segment", "method"],
    )
    if index.has_duplicates:
        raise ValueError(
            f"segment_findings must hold one row per finding, method, subject and segment; "
            f"finding {finding!r} has {int(index.duplicated().sum())} repeated rows"
        )
    positive = pd.Series(part["positive"].astype("boolean").to_numpy(), index=index)
    return positive.unstack("method")


def _finding_units(
    wide: pd.DataFrame, reference: str, pair: tuple[str, str]
) -> tuple[dict[str, np.ndarray] | None, str]:
    """Reference, a and b classifications and subjects of the segments all three classified;
    or None and why not."""
    absent = [m for m in (reference, *pair) if m not in wide.columns]
    if absent:
        return None, f"no classified segments of {', '.join(absent)}"
    cols = wide[[reference, *pair]]
    classified = cols.notna().to_numpy()
    every = classified.all(axis=1)
    partly = classified[:, 0] & (classified[:, 1] != classified[:, 2])
    note = ""
    if partly.any():
        note = (
            f"{int(partly.sum())} segment(s) classified by only one of the two methods left "
            "out (both methods are compared on the same segments)"
        )
    units = {
        name: cols[column].to_numpy()[every].astype(bool)
        for name, column in zip(("ref", "a", "b"), (reference, *pair), strict=True)
    }
    units["subject"] = wide.index.get_level_values("subject").to_numpy()[every]
    return units, note


def _proportion_draws(
    codes: np.ndarray, k: int, a: np.ndarray, b: np.ndarray, boot: _Bootstrap
) -> np.ndarray | None:
    """Resampled ``p_a - p_b`` (subject counts times per-subject counts: the 2x2 weights
    trick of :func:`cohort.analysis.finding_agreement.cluster_bootstrap_draws`)."""
    if boot.n_boot == 0 or k < 2:
        return None
    table = np.column_stack(
        [np.bincount(codes, weights=w, minlength=k) for w in (np.ones(a.size), a, b)]
    )
    parts = []
    with np.errstate(invalid="ignore", divide="ignore"):
        for chunk in boot.counts.chunks(k):
            n, x, y = (chunk @ table).T
            parts.append((x - y) / n)
    return np.concatenate(parts)


def _finding_row(
    statistic: str, units: dict[str, np.ndarray], boot: _Bootstrap
) -> dict[str, object]:
    """One sensitivity or specificity row of a pair from the commonly classified segments."""
    positive = statistic == "sensitivity"
    domain = units["ref"] if positive else ~units["ref"]
    success_a = units["a"][domain] if positive else ~units["a"][domain]
    success_b = units["b"][domain] if positive else ~units["b"][domain]
    labels, codes = np.unique(units["subject"], return_inverse=True)
    k = int(labels.size)
    notes: list[str] = []
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", NotEstimableWarning)
        test = clustered_paired_proportions(
            success_a, success_b, subject=units["subject"][domain], confidence_level=boot.level
        )
    if not domain.any():
        side = "positive" if positive else "negative"
        notes.append(f"not estimable: no reference-{side} segments classified by both methods")
        ci = ConfidenceInterval.not_estimable("no units", boot.level)
    else:
        draws = _proportion_draws(
            codes.reshape(-1)[domain], k, success_a.astype(float), success_b.astype(float), boot
        )
        ci = boot.interval(draws, k)
        notes += [test.note] if test.note else []
        notes += [f"interval {ci.note}"] if ci.note else []
    return {
        "statistic": statistic,
        "estimate_a": test.first,
        "estimate_b": test.second,
        "difference": test.estimate,
        "ci_low": ci.low,
        "ci_high": ci.high,
        "p_value": test.p_value,
        "mcnemar_p": test.mcnemar.p_value if domain.any() else math.nan,
        "n_subjects": test.n_subjects,
        "note": "; ".join(notes),
    }


def _missing_finding_row(statistic: str, reason: str) -> dict[str, object]:
    values = ("estimate_a", "estimate_b", "difference", "ci_low", "ci_high", "p_value")
    nan = dict.fromkeys((*values, "mcnemar_p"), math.nan)
    return {"statistic": statistic, **nan, "n_subjects": 0, "note": f"not estimable: {reason}"}


def _finding_rows(
    findings: pd.DataFrame, reference: str, pairs: list[tuple[str, str]], boot: _Bootstrap
) -> list[dict[str, object]]:
    rows = []
    for finding in pd.unique(findings["finding"].astype(str)):
        wide = _wide(findings, finding)
        by_pair = {}
        for pair in pairs:
            units, note = _finding_units(wide, reference, pair)
            by_pair[pair] = {}
            for statistic in FINDING_STATISTICS:
                if units is None:
                    row = _missing_finding_row(statistic, note)
                else:
                    row = _finding_row(statistic, units, boot)
                    row["note"] = "; ".join(n for n in (row["note"], note) if n)
                row.update(method_a=pair[0], method_b=pair[1], target=finding)
                by_pair[pair][statistic] = row
        rows += [by_pair[pair][s] for s in FINDING_STATISTICS for pair in pairs]
    return rows


# --- the table --------------------------------------------------------------------------------


# Long: the numpydoc Parameters, Returns and Examples of the entry point (the body is ~35 lines)
def method_differences(
    paired: pd.DataFrame,
    segment_findings: pd.DataFrame | None,
    reference: str,
    methods: Sequence[str],
    *,
    baseline: str | None = None,
    n_boot: int = DEFAULT_N_BOOT,
    seed: int | None = DEFAULT_SEED,
    confidence_level: float = 0.95,
    correction: str = "holm",
) -> pd.DataFrame:
    """Differences between test methods in their agreement with the same reference.

    Parameters
    ----------
    paired
        ``Study.paired``: one row per (parameter, test method, subject, segment).
    segment_findings
        The ``findings_segment`` table (``FindingsResult.segments``: ``finding``, ``method``,
        ``subject``, ``segment``, ``positive``; reference rows included), or None.
    reference
        The reference method.
    methods
        The test methods in the study's order; a pair is ``(a, b)`` with a before b.
    baseline
        One of ``methods``: compare every other method (``method_a``) with it
        (``method_b``) instead of every pair.
    n_boot, seed
        Subject cluster bootstrap resamples (0: no bootstrap; intervals and the parameter
        p-values are then NaN and the note says so) and the seed of
        ``numpy.random.default_rng`` (None: one seed drawn for the whole table).
    confidence_level
        Of every interval.
    correction
        Multiple-testing correction (:func:`cohort.stats.multiplicity.adjust_p`).

    Returns
    -------
    pandas.DataFrame
        Columns :data:`METHOD_DIFFERENCE_COLUMNS`, rows by kind (parameters, then findings),
        target, statistic and pair. ``difference = estimate_a - estimate_b``; ``better``
        says which direction favours ``method_a`` (:data:`BETTER`). ``estimate_a`` is
        ``|bias|``, the width ``loa_high - loa_low`` or the CCC of the agreement table's
        row (stratum all) for that method, or its segment-level sensitivity or specificity
        (equal to ``findings_agreement`` when both methods classified the same segments;
        otherwise the note says how many segments were left out). ``n_subjects``: the
        subjects resampled (parameters: with pairs of either method), or those with units
        in the compared proportion (findings). ``mcnemar_p``: exact McNemar test of the
        discordant segments (segments as independent; findings only). The family of
        ``p_adjusted`` is every row of this table with a finite ``p_value`` (every pair,
        target and statistic), corrected together by ``correction``; ``family`` says so.
        A row that cannot be estimated (a method without pairs of a parameter, a finding
        without reference-positive segments, fewer than 2 subjects) has NaN and a ``note``;
        one :class:`~cohort.stats.results.NotEstimableWarning` sums them up.
        Fewer than two test methods: an empty table with these columns (there is no pair
        to compare).

    Validated in tests/analysis/test_method_differences.py: estimates equal the agreement
    table's and ``findings_agreement``'s, identical methods give exactly 0 with interval
    [0, 0], intervals cover a planted truth, ``p_adjusted`` equals statsmodels'
    ``multipletests(method="holm")``.

    Examples
    --------
    >>> rng = np.random.default_rng(0)
    >>> truth = rng.normal(20, 4, 40)
    >>> subject = np.repeat([f"s{i}" for i in range(8)], 5)
    >>> paired = pd.concat([pd.DataFrame({
    ...     "parameter": "ff", "method": name, "reference": "fit", "subject": subject,
    ...     "reference_value": truth, "test_value": truth + shift + rng.normal(0, sd, 40)})
    ...     for name, shift, sd in (("quick", 0.2, 0.5), ("rough", 2.0, 1.5))])
    >>> table = method_differences(paired, None, "fit", ["quick", "rough"], n_boot=200, seed=1)
    >>> row = table.set_index("statistic").loc["abs_bias"]
    >>> print(row["method_a"], row["method_b"], round(row["difference"], 2), row["better"])
    quick rough -1.65 lower
    >>> bool(row["ci_high"] < 0), bool(row["p_adjusted"] < 0.05)
    (True, True)
    """
    check_options(confidence_level, n_boot)
    correction = check_correction(correction)
    _check_frame(paired, "paired", _PAIRED_REQUIRED)
    if segment_findings is not None:
        _check_frame(segment_findings, "segment_findings", _FINDINGS_REQUIRED)
    chosen = _check_methods(paired, segment_findings, reference, methods, baseline)
    pairs = _pairs(chosen, baseline)
    if not pairs:
        return pd.DataFrame(columns=list(METHOD_DIFFERENCE_COLUMNS))
    boot = _Bootstrap(n_boot, seed, confidence_level)
    samples = _parameter_samples(paired, chosen)
    cache: dict = {}
    rows = []
    for parameter in dict.fromkeys(p for p, _ in samples):
        by_pair = {pair: _parameter_rows(parameter, pair, samples, boot, cache) for pair in pairs}
        rows += [by_pair[pair][i] for i in range(len(PARAMETER_STATISTICS)) for pair in pairs]
    if segment_findings is not None:
        rows += _finding_rows(segment_findings, reference, pairs, boot)
    return _table(rows, reference, boot, correction)


def _table(
    rows: list[dict[str, object]], reference: str, boot: _Bootstrap, correction: str
) -> pd.DataFrame:
    """The rows as the table: identity columns, the correction over the whole table, and one
    summary warning of the rows not estimable."""
    table = pd.DataFrame(rows)
    parameter = table["statistic"].isin(PARAMETER_STATISTICS).to_numpy()
    table["kind"] = np.where(parameter, "parameter", "finding")
    table["p_method"] = np.where(parameter, BOOTSTRAP_P_METHOD, OBUCHOWSKI_P_METHOD)
    table["reference"] = reference
    table["better"] = table["statistic"].map(BETTER)
    table["confidence_level"] = boot.level
    table["ci_method"] = boot.method
    p = table["p_value"].to_numpy(dtype=float)
    table["p_adjusted"] = adjust_p(p, correction)
    m = int(np.isfinite(p).sum())
    table["correction"] = correction
    table["family"] = f"every row of this table with a p-value ({m} tests)"
    table["n_subjects"] = table["n_subjects"].astype(int)
    lost = table["note"].str.contains("not estimable", regex=False) & table["difference"].isna()
    if lost.any():
        what = sorted(set(table.loc[lost, "statistic"] + " of " + table.loc[lost, "target"]))
        warnings.warn(
            f"method differences: {int(lost.sum())} row(s) not estimable ({', '.join(what)}); "
            "see the note column",
            NotEstimableWarning,
            stacklevel=3,
        )
    return table[list(METHOD_DIFFERENCE_COLUMNS)]
