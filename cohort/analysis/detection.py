"""Finding-level agreement of each test method with the reference: 2x2 tables and their statistics.

A finding (see :mod:`cohort.analysis.findings`) classifies *units* as positive or negative:
segments,
territories (positive if any segment is) or subjects (positive with at least
``min_segments`` positive segments). Units are compared only where both methods classified
them; territory and subject units are built from the segments that both methods measured
and classified, so a segment one method lacks is never counted as a miss.

For each test method, finding, level and stratum (``all`` and ``group=<name>``):

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
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike
from scipy import stats

from cohort.analysis.findings import SEGMENT_COLUMNS, FindingsResult, summarise
from cohort.domain.segments import SEGMENTS
from cohort.domain.thresholds import FAT, FIELD_PERTURBATION, HEMORRHAGE
from cohort.stats.bootstrap import (
    DEFAULT_N_BOOT,
    DEFAULT_SEED,
    bootstrap_method,
    check_options,
    percentile_interval,
    resample_counts,
)
from cohort.stats.proportions import wilson_interval as _wilson
from cohort.stats.results import (
    CohortWarning,
    ConfidenceInterval,
    NotEstimableWarning,
    warn_not_estimable,
)

LEVELS: tuple[str, ...] = ("segment", "territory", "subject")
CLUSTERED_LEVELS: tuple[str, ...] = ("segment", "territory")
"""Levels whose units are clustered in subjects (they get cluster bootstrap intervals)."""

PROPORTIONS: tuple[str, ...] = ("sensitivity", "specificity", "ppv", "npv")
_STATISTICS = (*PROPORTIONS, "kappa")

WILSON_METHOD = "Wilson score (Wilson 1927; Newcombe 1998), units treated as independent"
KAPPA_METHOD = "asymptotic SE (Fleiss, Cohen & Everitt 1969)"

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


# --- single-table statistics -------------------------------------------------------------


def _z(confidence_level: float) -> float:
    return float(stats.norm.ppf(0.5 + confidence_level / 2.0))


def wilson_interval(successes: int, n: int, confidence_level: float = 0.95) -> ConfidenceInterval:
    """Wilson score interval (:func:`cohort.stats.proportions.wilson_interval`), labelled for units
    treated as independent."""
    check_options(confidence_level, 0)
    return _wilson(successes, n, confidence_level, method=WILSON_METHOD)


@dataclass(frozen=True)
class Kappa:
    """Cohen's kappa of a k x k agreement table, with its asymptotic interval."""

    kappa: float
    se: float
    ci: ConfidenceInterval
    observed_agreement: float
    chance_agreement: float
    n: int
    note: str = ""

    def to_frame(self) -> pd.DataFrame:
        return pd.DataFrame(
            [
                {
                    "kappa": self.kappa,
                    "se": self.se,
                    "ci_low": self.ci.low,
                    "ci_high": self.ci.high,
                    "ci_method": self.ci.method,
                    "confidence_level": self.ci.level,
                    "observed_agreement": self.observed_agreement,
                    "chance_agreement": self.chance_agreement,
                    "n": self.n,
                    "note": self.note,
                }
            ]
        )


def cohen_kappa(table: ArrayLike, confidence_level: float = 0.95) -> Kappa:
    """Cohen's kappa ``(p_o - p_e) / (1 - p_e)`` of a square table of counts.

    Standard error (not under the null) of Fleiss JL, Cohen J, Everitt BS. Large sample
    standard errors of kappa and weighted kappa. Psychol Bull 1969;72:323-327; the interval is
    ``kappa -/+ z SE``. Cohen J. A coefficient of agreement for nominal scales. Educ Psychol
    Meas 1960;20:37-46. Validated against Cohen's 1960 example and
    ``statsmodels.stats.inter_rater.cohens_kappa``.
    """
    check_options(confidence_level, 0)
    t = np.asarray(table, dtype=float)
    if t.ndim != 2 or t.shape[0] != t.shape[1] or t.shape[0] < 2:
        raise ValueError(f"table must be a square k x k table with k >= 2, got shape {t.shape}")
    if (t < 0).any() or not np.isfinite(t).all():
        raise ValueError("table must hold non-negative finite counts")
    n = float(t.sum())
    if n == 0:
        reason = "no units"
        note = warn_not_estimable("kappa", reason)
        ci = ConfidenceInterval.not_estimable(reason, confidence_level, KAPPA_METHOD)
        return Kappa(math.nan, math.nan, ci, math.nan, math.nan, 0, note)
    p = t / n
    rows, cols = p.sum(axis=1), p.sum(axis=0)
    po = float(np.trace(p))
    pe = float(rows @ cols)
    if pe >= 1.0:
        reason = "chance agreement is 1 (both methods put every unit in one category)"
        note = warn_not_estimable("kappa", reason)
        ci = ConfidenceInterval.not_estimable(reason, confidence_level, KAPPA_METHOD)
        return Kappa(math.nan, math.nan, ci, po, pe, int(n), note)
    kappa = (po - pe) / (1.0 - pe)
    diag = np.diag(p)
    term_a = float(np.sum(diag * (1.0 - (rows + cols) * (1.0 - kappa)) ** 2))
    off = p * (cols[:, None] + rows[None, :]) ** 2  # p_ij (p_.i + p_j.)^2
    np.fill_diagonal(off, 0.0)
    term_b = (1.0 - kappa) ** 2 * float(off.sum())
    term_c = (kappa - pe * (1.0 - kappa)) ** 2
    var = (term_a + term_b - term_c) / ((1.0 - pe) ** 2 * n)
    se = math.sqrt(max(var, 0.0))
    z = _z(confidence_level)
    ci = ConfidenceInterval(kappa - z * se, kappa + z * se, confidence_level, KAPPA_METHOD)
    return Kappa(kappa, se, ci, po, pe, int(n))


@dataclass(frozen=True)
class McNemar:
    """McNemar's test of a paired 2x2 table from its discordant counts ``b`` and ``c``."""

    statistic: float
    p_value: float
    b: int
    c: int
    method: str
    note: str = ""

    def to_frame(self) -> pd.DataFrame:
        return pd.DataFrame([vars(self)])


def mcnemar_test(b: int, c: int, *, exact: bool = True, correction: bool = False) -> McNemar:
    """McNemar's test for paired proportions from the discordant counts ``b`` and ``c``.

    ``exact=True``: two-sided binomial test of ``min(b, c)`` in ``b + c`` trials with p = 1/2,
    ``p = min(1, 2 P(X <= min(b, c)))``; the statistic is ``min(b, c)``. ``exact=False``:
    ``(|b - c| - corr)^2 / (b + c)`` on 1 df, ``corr = 1`` with continuity correction.
    McNemar Q. Note on the sampling error of the difference between correlated proportions or
    percentages. Psychometrika 1947;12:153-157. Validated against
    ``statsmodels.stats.contingency_tables.mcnemar`` and Agresti's presidential approval
    table (Agresti, Categorical Data Analysis; chi-square 17.36, memory).
    """
    for name, value in (("b", b), ("c", c)):
        if isinstance(value, bool) or int(value) != value or value < 0:
            raise ValueError(f"{name} must be a non-negative integer count, got {value!r}")
    b, c = int(b), int(c)
    m = b + c
    if exact:
        low = min(b, c)
        p = 1.0 if m == 0 else min(1.0, 2.0 * float(stats.binom.cdf(low, m, 0.5)))
        note = "no discordant pairs: p = 1" if m == 0 else ""
        return McNemar(float(low), p, b, c, "exact binomial on discordant pairs", note)
    method = "chi-square, 1 df" + (", continuity corrected" if correction else "")
    if m == 0:
        reason = "no discordant pairs"
        note = warn_not_estimable("McNemar chi-square", reason)
        return McNemar(math.nan, math.nan, b, c, method, note)
    stat = (abs(b - c) - (1.0 if correction else 0.0)) ** 2 / m
    return McNemar(stat, float(stats.chi2.sf(stat, 1)), b, c, method)


def _proportions(tp, fp, fn, tn) -> dict[str, np.ndarray]:
    """Sensitivity, specificity, PPV, NPV and kappa of 2x2 counts (arrays, vectorised)."""
    tp, fp, fn, tn = (np.asarray(v, dtype=float) for v in (tp, fp, fn, tn))
    n = tp + fp + fn + tn
    with np.errstate(invalid="ignore", divide="ignore"):
        po = (tp + tn) / n
        pe = ((tp + fn) * (tp + fp) + (fp + tn) * (fn + tn)) / (n * n)
        kappa = np.where(pe < 1.0, (po - pe) / (1.0 - pe), np.nan)
        return {
            "sensitivity": tp / (tp + fn),
            "specificity": tn / (tn + fp),
            "ppv": tp / (tp + fp),
            "npv": tn / (tn + fn),
            "kappa": kappa,
        }


_DENOMINATOR_REASON = {
    "sensitivity": "no reference-positive units",
    "specificity": "no reference-negative units",
    "ppv": "no test-positive units",
    "npv": "no test-negative units",
}


@dataclass(frozen=True)
class Proportion:
    """A proportion (sensitivity, ...) with its Wilson interval and counts."""

    name: str
    value: float
    successes: int
    n: int
    ci: ConfidenceInterval
    note: str = ""


@dataclass(frozen=True)
class DiagnosticAccuracy:
    """Accuracy of a test classification against the reference from one 2x2 table."""

    tp: int
    fp: int
    fn: int
    tn: int
    sensitivity: Proportion
    specificity: Proportion
    ppv: Proportion
    npv: Proportion
    kappa: Kappa
    mcnemar: McNemar

    def to_frame(self) -> pd.DataFrame:
        """One row per statistic: estimate, interval and its method, note."""
        rows = [
            {
                "statistic": p.name,
                "estimate": p.value,
                "ci_low": p.ci.low,
                "ci_high": p.ci.high,
                "ci_method": p.ci.method,
                "note": p.note,
            }
            for p in (self.sensitivity, self.specificity, self.ppv, self.npv)
        ]
        k = self.kappa
        rows.append(
            {
                "statistic": "kappa",
                "estimate": k.kappa,
                "ci_low": k.ci.low,
                "ci_high": k.ci.high,
                "ci_method": k.ci.method,
                "note": k.note,
            }
        )
        return pd.DataFrame(rows)


def diagnostic_accuracy(
    tp: int, fp: int, fn: int, tn: int, confidence_level: float = 0.95
) -> DiagnosticAccuracy:
    """Sensitivity, specificity, PPV, NPV (Wilson intervals), kappa and exact McNemar of a 2x2.

    The reference is truth: ``tp`` both positive, ``fn`` reference only, ``fp`` test only.
    References as :func:`wilson_interval`, :func:`cohen_kappa`, :func:`mcnemar_test`.
    """
    check_options(confidence_level, 0)
    counts = {"tp": tp, "fp": fp, "fn": fn, "tn": tn}
    for name, value in counts.items():
        if isinstance(value, bool) or int(value) != value or value < 0:
            raise ValueError(f"{name} must be a non-negative integer count, got {value!r}")
    tp, fp, fn, tn = (int(v) for v in (tp, fp, fn, tn))
    parts = {
        "sensitivity": (tp, tp + fn),
        "specificity": (tn, tn + fp),
        "ppv": (tp, tp + fp),
        "npv": (tn, tn + fn),
    }
    props = {}
    for name, (x, n) in parts.items():
        if n == 0:
            reason = _DENOMINATOR_REASON[name]
            note = warn_not_estimable(name, reason)
            ci = ConfidenceInterval.not_estimable(reason, confidence_level, WILSON_METHOD)
            props[name] = Proportion(name, math.nan, x, n, ci, note)
        else:
            props[name] = Proportion(name, x / n, x, n, wilson_interval(x, n, confidence_level))
    kappa = cohen_kappa([[tp, fn], [fp, tn]], confidence_level)
    return DiagnosticAccuracy(tp, fp, fn, tn, **props, kappa=kappa, mcnemar=mcnemar_test(fn, fp))


# --- cluster bootstrap -------------------------------------------------------------------


def subject_tables(
    reference_positive: ArrayLike, test_positive: ArrayLike, subject: ArrayLike
) -> tuple[np.ndarray, np.ndarray]:
    """Per-subject 2x2 counts: (labels in sorted order, array (k, 4) of tp, fp, fn, tn)."""
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
    """
    k = tables.shape[0]
    parts: dict[str, list[np.ndarray]] = {name: [] for name in _STATISTICS}
    for counts in resample_counts(k, n_boot, seed):
        totals = counts @ tables
        for name, value in _proportions(*totals.T).items():
            parts[name].append(value)
    return {name: np.concatenate(chunks) for name, chunks in parts.items()}


# --- the agreement table -----------------------------------------------------------------


_RENAME = {
    "value_ref": "reference_value",
    "value_test": "test_value",
    "threshold_ref": "reference_threshold",
    "threshold_test": "test_threshold",
    "positive_ref": "reference_positive",
    "positive_test": "test_positive",
}


def _level_units(
    findings: FindingsResult, reference: str, method: str, level: str
) -> tuple[pd.DataFrame, pd.Series]:
    """Units of one level classified by both methods, and per finding and group the number of
    units both methods measured but did not both classify (remote threshold not estimable)."""
    seg = findings.segments
    keys = ["finding", "parameter", "subject", "segment"]
    ref = seg[seg["method"].eq(reference)]
    test = seg[seg["method"].eq(method)][[*keys, "value", "threshold", "derived", "positive"]]
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

    def side(suffix: str, name: str) -> pd.DataFrame:
        frame = both.rename(
            columns={f"{c}{suffix}": c for c in ("value", "threshold", "derived", "positive")}
        )
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
    return units.rename(columns=_RENAME), unclassified


def _count(unclassified: pd.Series, finding: str, group: str | None) -> int:
    """Units of ``finding`` (in ``group``; None: all) left out as not classified by both."""
    if finding not in unclassified.index.get_level_values("finding"):
        return 0
    part = unclassified.xs(finding, level="finding")
    return int(part.sum() if group is None else part.get(group, 0))


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
    tp, fp = int(np.sum(ref & test)), int(np.sum(~ref & test))
    fn, tn = int(np.sum(ref & ~test)), int(np.sum(~ref & ~test))
    n_subjects = int(units["subject"].nunique())
    notes: list[str] = []
    acc = diagnostic_accuracy(tp, fp, fn, tn, confidence_level)
    row: dict[str, object] = {
        "n_subjects": n_subjects,
        "n_units": len(units),
        "n_unclassified": unclassified,
        "tp": tp,
        "fp": fp,
        "fn": fn,
        "tn": tn,
        "confidence_level": confidence_level,
        "ci_method": f"proportions: {WILSON_METHOD}; kappa: {KAPPA_METHOD}",
    }
    for name in PROPORTIONS:
        p: Proportion = getattr(acc, name)
        row[name] = p.value
        row[f"{name}_ci_low"], row[f"{name}_ci_high"] = p.ci.low, p.ci.high
        if p.note:
            notes.append(p.note)
    row["kappa"], row["kappa_se"] = acc.kappa.kappa, acc.kappa.se
    row["kappa_ci_low"], row["kappa_ci_high"] = acc.kappa.ci.low, acc.kappa.ci.high
    if acc.kappa.note:
        notes.append(acc.kappa.note)
    row["mcnemar_p"] = acc.mcnemar.p_value
    if len(units) == 0:
        row["mcnemar_p"] = math.nan
        notes.append(warn_not_estimable("McNemar p", "no units"))
    elif acc.mcnemar.note:
        notes.append(f"McNemar: {acc.mcnemar.note}")
    if unclassified:
        notes.append(f"{unclassified} unit(s) not classified by both methods, left out")
    if not clustered:
        row["cluster_ci_method"] = "not applicable: one unit per subject"
        for name in _STATISTICS:
            row[f"{name}_cluster_ci_low"] = row[f"{name}_cluster_ci_high"] = math.nan
    else:
        row["cluster_ci_method"] = bootstrap_method(n_boot, seed)
        draws = None
        if n_subjects >= 2 and n_boot > 0:
            # integer codes in sorted label order give the same table rows as the labels
            codes, _ = pd.factorize(units["subject"], sort=True)
            _, tables = subject_tables(ref, test, codes)
            draws = cluster_bootstrap_draws(tables, n_boot=n_boot, seed=seed)
        for name in _STATISTICS:
            point = row[name]
            if not np.isfinite(point):  # type: ignore[arg-type]
                # the point estimate's note already says why
                ci = ConfidenceInterval.not_estimable("point estimate not estimable")
            elif n_subjects < 2:
                ci = ConfidenceInterval.not_estimable("fewer than 2 subjects")
                notes.append(
                    warn_not_estimable(f"{name} cluster interval", "fewer than 2 subjects")
                )
            else:
                ci = percentile_interval(
                    None if draws is None else draws[name], confidence_level, n_boot, seed
                )
                if not ci.estimable:
                    reason = ci.note.removeprefix("not estimable: ")
                    notes.append(warn_not_estimable(f"{name} cluster interval", reason))
                elif ci.note:
                    notes.append(f"{name} cluster interval: {ci.note}")
            row[f"{name}_cluster_ci_low"], row[f"{name}_cluster_ci_high"] = ci.low, ci.high
    row["note"] = "; ".join(notes)
    return row


@dataclass(frozen=True)
class FindingsAgreement:
    """The ``findings_agreement`` table (columns :data:`FINDINGS_AGREEMENT_COLUMNS`)."""

    table: pd.DataFrame
    n_boot: int
    seed: int | None
    confidence_level: float

    def to_frame(self) -> pd.DataFrame:
        return self.table


def _groups(findings: FindingsResult, groups: Sequence[str] | None) -> list[str]:
    present = list(pd.unique(findings.segments["group"]))
    if groups is None:
        return present
    return [g for g in groups if g in present]


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
    per-resample computation on the same resampled subjects (checked in the tests).
    """
    check_options(confidence_level, n_boot)
    bad = [lv for lv in levels if lv not in LEVELS]
    if bad:
        raise ValueError(f"levels must be among {list(LEVELS)}, got {bad}")
    present = list(pd.unique(findings.segments["method"]))
    if reference not in present:
        raise ValueError(f"reference must be a method of the findings {present}, got {reference!r}")
    tests = [m for m in present if m != reference] if methods is None else list(methods)
    unknown = [m for m in tests if m not in present or m == reference]
    if unknown:
        raise ValueError(f"methods must be test methods among {present}, got {unknown}")
    strata = [("all", None)] + [(f"group={g}", g) for g in _groups(findings, groups)]
    parameter_of = {d.name: d.parameter for d in findings.definitions}
    rows = []
    # one summary warning instead of one per row and quantity (the note column has each)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", NotEstimableWarning)
        for method in tests:
            for level in levels:
                units, unclassified = _level_units(findings, reference, method, level)
                for finding in parameter_of:
                    part = units[units["finding"].eq(finding)]
                    for stratum, group in strata:
                        sub = part if group is None else part[part["group"].eq(group)]
                        row = _row(
                            sub,
                            clustered=level in CLUSTERED_LEVELS,
                            n_boot=n_boot,
                            seed=seed,
                            confidence_level=confidence_level,
                            unclassified=_count(unclassified, finding, group),
                        )
                        row.update(
                            finding=finding,
                            parameter=parameter_of[finding],
                            method=method,
                            reference=reference,
                            level=level,
                            stratum=stratum,
                        )
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


# --- missed and extra findings -----------------------------------------------------------


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
    method's for an extra one), the values are the extreme values.
    """
    bad = [lv for lv in levels if lv not in LEVELS]
    if bad:
        raise ValueError(f"levels must be among {list(LEVELS)}, got {bad}")
    present = list(pd.unique(findings.segments["method"]))
    if reference not in present:
        raise ValueError(f"reference must be a method of the findings {present}, got {reference!r}")
    tests = [m for m in present if m != reference] if methods is None else list(methods)
    frames = []
    for method in tests:
        for level in levels:
            units, _ = _level_units(findings, reference, method, level)
            ref = units["reference_positive"].to_numpy(dtype=bool)
            test = units["test_positive"].to_numpy(dtype=bool)
            kind = np.where(ref & ~test, "missed", np.where(~ref & test, "extra", ""))
            hit = units[kind != ""].copy()
            hit["kind"] = kind[kind != ""]
            hit["method"], hit["reference"], hit["level"] = method, reference, level
            if level != "segment":
                seg = np.where(
                    hit["kind"].eq("missed"),
                    hit["extreme_segment_ref"],
                    hit["extreme_segment_test"],
                )
                hit["segment"] = pd.array(seg, dtype="Int64")
                hit["segment_name"] = [SEGMENTS[int(n)].name for n in seg]
                if level == "subject":
                    hit["territory"] = ""
            frames.append(hit.reindex(columns=list(MISSED_COLUMNS)))
    if not frames:
        return pd.DataFrame(columns=list(MISSED_COLUMNS))
    out = pd.concat(frames, ignore_index=True)
    out["segment"] = out["segment"].astype("Int64")
    for column in ("segment_name", "territory"):
        out[column] = out[column].fillna("")
    return out


# --- strata for the agreement table ------------------------------------------------------


def finding_strata(paired: pd.DataFrame, findings_result: FindingsResult) -> dict[str, np.ndarray]:
    """Masks over ``paired`` rows of reference-positive and reference-negative segments.

    For each finding, ``finding=<name>:positive`` selects the rows (of every parameter)
    whose segment the *reference* method classifies as positive, ``:negative`` those it
    classifies as negative (unclassified segments are in neither), so that, say, fat-fraction
    agreement in hemorrhagic segments can be read beside R2* agreement there. Pass the
    result as ``extra_strata`` to the agreement table.
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


# --- deceptive agreement -----------------------------------------------------------------


class DeceptiveAgreementWarning(CohortWarning):
    """Overall agreement looks good but the finding-level picture does not."""


DEFAULT_MIN_BIAS_DIFFERENCE: Mapping[str, float] = {
    "r2star": HEMORRHAGE.threshold_at(1.5).value / 10.0,
    "ff": FAT.threshold_at(1.5).value / 10.0,
    "field": FIELD_PERTURBATION.threshold_at(1.5).value / 10.0,
}
"""Smallest bias shift (canonical units) counted as marked: one tenth of the default
threshold at 1.5 T (5 1/s, 1 pp, 3 Hz). A convention of this package, configurable."""


@dataclass(frozen=True)
class AgreementWarning:
    """A warning that overall agreement hides a finding-level problem."""

    kind: str
    """``"low-sensitivity"`` or ``"bias-shift"``."""
    parameter: str
    method: str
    finding: str
    ccc: float
    sensitivity: float
    bias_positive: float
    bias_negative: float
    message: str


def deceptive_agreement(
    agreement_rows: pd.DataFrame,
    detection: pd.DataFrame,
    *,
    ccc_min: float = 0.9,
    sensitivity_max: float = 0.8,
    bias_ratio: float = 2.0,
    min_bias_difference: Mapping[str, float] | None = None,
    level: str = "segment",
) -> list[AgreementWarning]:
    """Warn where high overall agreement hides poor agreement on a finding.

    For each finding, test method and its parameter, when the CCC in stratum ``all`` is at or
    above ``ccc_min``:

    - ``low-sensitivity``: sensitivity (``level``, stratum ``all``) below ``sensitivity_max``;
    - ``bias-shift``: the bias in reference-positive segments (stratum
      ``finding=<name>:positive``) differs *markedly* from the bias in reference-negative
      ones (``finding=<name>:negative``), defined as
      ``|b_pos - b_neg| >= max(min_bias_difference[parameter], (bias_ratio - 1) |b_neg|)``:
      the shift is at least the floor (default :data:`DEFAULT_MIN_BIAS_DIFFERENCE`) and the
      positive-stratum bias is outside ``b_neg -/+ (bias_ratio - 1) |b_neg|`` (with the
      default 2: at least double, or of the other sign, or near zero where b_neg is not).

    ``agreement_rows`` needs columns ``parameter, method, stratum, ccc, bias``; ``detection``
    is the ``findings_agreement`` table. Each warning is returned and emitted as
    :class:`DeceptiveAgreementWarning`.
    """
    for name, value in (("ccc_min", ccc_min), ("sensitivity_max", sensitivity_max)):
        if not 0.0 <= value <= 1.0:
            raise ValueError(f"{name} must be between 0 and 1, got {value!r}")
    if not bias_ratio >= 1.0:
        raise ValueError(f"bias_ratio must be >= 1, got {bias_ratio!r}")
    need = {"parameter", "method", "stratum", "ccc", "bias"}
    missing = sorted(need - set(agreement_rows.columns))
    if missing:
        raise ValueError(f"agreement_rows must have columns {sorted(need)}; missing {missing}")
    need_det = {"finding", "parameter", "method", "level", "stratum", "sensitivity"}
    missing = sorted(need_det - set(detection.columns))
    if missing:
        raise ValueError(f"detection must have columns {sorted(need_det)}; missing {missing}")
    floor = dict(DEFAULT_MIN_BIAS_DIFFERENCE)
    floor.update(min_bias_difference or {})
    agree = agreement_rows.set_index(["parameter", "method", "stratum"])
    if not agree.index.is_unique:
        raise ValueError("agreement_rows must have one row per parameter, method and stratum")
    det = detection[detection["level"].eq(level) & detection["stratum"].eq("all")]
    out: list[AgreementWarning] = []

    def lookup(key: tuple[str, str, str], column: str) -> float:
        return float(agree.at[key, column]) if key in agree.index else math.nan

    for row in det.itertuples(index=False):
        p, m, f = row.parameter, row.method, row.finding
        ccc = lookup((p, m, "all"), "ccc")
        if not (math.isfinite(ccc) and ccc >= ccc_min):
            continue
        sens = float(row.sensitivity)
        b_pos = lookup((p, m, f"finding={f}:positive"), "bias")
        b_neg = lookup((p, m, f"finding={f}:negative"), "bias")
        if math.isfinite(sens) and sens < sensitivity_max:
            message = (
                f"{m} against the reference, {p}: overall CCC {ccc:.3f} >= {ccc_min:g}, "
                f"but {level}-level sensitivity for finding {f!r} is {sens:.3f} "
                f"< {sensitivity_max:g}"
            )
            out.append(
                AgreementWarning("low-sensitivity", p, m, f, ccc, sens, b_pos, b_neg, message)
            )
        if math.isfinite(b_pos) and math.isfinite(b_neg):
            shift = abs(b_pos - b_neg)
            limit = max(floor.get(p, 0.0), (bias_ratio - 1.0) * abs(b_neg))
            if shift >= limit:
                message = (
                    f"{m}, {p}: overall CCC {ccc:.3f} >= {ccc_min:g}, but the bias in "
                    f"segments the reference calls {f!r} positive is {b_pos:.4g} against "
                    f"{b_neg:.4g} in negative ones (shift {shift:.4g} >= {limit:.4g})"
                )
                out.append(
                    AgreementWarning("bias-shift", p, m, f, ccc, sens, b_pos, b_neg, message)
                )
    for w in out:
        warnings.warn(w.message, DeceptiveAgreementWarning, stacklevel=2)
    return out
