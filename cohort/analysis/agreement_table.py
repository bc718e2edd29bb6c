"""The method-agreement table: every agreement statistic per parameter, method and stratum.

One tidy row per (parameter, test method, stratum) with bias and limits of agreement (Bland &
Altman 2007), per-subject-means limits (Bland & Altman 1986), proportional bias, ratio-scale
limits for ratio parameters, correlations, Lin's CCC, ICC(A,1), Passing-Bablok and Deming
regression. Default intervals are subject cluster bootstrap percentile intervals; all
statistics of a row share the same resampled subjects, and every row uses the same seed, so
a row can be reproduced by calling the statistic's own function with that seed on the
row's pairs. Column names and meanings: :data:`COLUMN_DESCRIPTIONS`.
"""

from __future__ import annotations

import functools
import math
import warnings
from collections.abc import Callable, Iterable, Mapping, Sequence

import numpy as np
import pandas as pd

from cohort.analysis.agreement_columns import (
    AGREEMENT_COLUMNS,
    COLUMN_DESCRIPTIONS,
    regression_columns,
)
from cohort.domain.options import DEFAULT_N_BOOT, DEFAULT_SEED, PB_MAX_PAIRS, STRATA
from cohort.domain.segments import RINGS, TERRITORIES
from cohort.domain.units import PARAMETERS
from cohort.io.method_order import levels
from cohort.parallel import ordered_map
from cohort.stats.agreement import (
    PROPORTIONAL,
    LimitsOfAgreement,
    ba2007_analysis,
    subject_mean_analysis,
)
from cohort.stats.bootstrap import (
    EstimationContext,
    PairedValues,
    ResampleCounts,
    bootstrap_method,
    check_options,
    context,
    run_analyses,
)
from cohort.stats.concordance import CCC_ANALYSIS, ICC_ANALYSIS
from cohort.stats.correlation import PEARSON_ANALYSIS, RM_CORR_ANALYSIS, SPEARMAN_ANALYSIS
from cohort.stats.regression import MethodRegression, deming, passing_bablok
from cohort.stats.regression_limits import REGRESSION_LIMIT_NAMES, regression_based_limits
from cohort.stats.results import Estimate, NotEstimableWarning, SingleQuantity

__all__ = ["AGREEMENT_COLUMNS", "COLUMN_DESCRIPTIONS", "PB_TABLE_MAX_PAIRS", "agreement_table"]

PB_TABLE_MAX_PAIRS = PB_MAX_PAIRS
"""Rows of more pairs get no Passing-Bablok fit unless ``pb_max_pairs`` is raised: its exact
slope selection took 12 to 27 s for one row of 1.7 million pairs on a 2-core machine
(benchmarks/README.md), and its rank-based interval, which then ignores the clustering, is
narrow to the point of misleading; Deming and the limits of agreement keep their cluster
bootstrap at any size. The number lives in :mod:`cohort.domain.options`."""

_REQUIRED = ("parameter", "method", "reference", "subject", "reference_value", "test_value")
_REGRESSION_LIMIT_KEYS = tuple(c for c in AGREEMENT_COLUMNS if c in REGRESSION_LIMIT_NAMES)
"""The regression-based limits' coefficients the table shows (not the absolute residuals')."""
_RATIO_COLUMNS = tuple(c for c in AGREEMENT_COLUMNS if c.startswith(("ratio_", "sd_log")))


def _ordered(values: Iterable[object], order: Sequence[str]) -> list[object]:
    present = set(values)
    known = [v for v in order if v in present]
    return known + sorted((v for v in present if v not in order), key=str)


def _strata_masks(
    paired: pd.DataFrame, strata: Sequence[str], extra: Mapping[str, object] | None
) -> list[tuple[str, np.ndarray]]:
    masks: list[tuple[str, np.ndarray]] = []
    orders = {"group": (), "ring": RINGS, "territory": TERRITORIES}
    for stratum in strata:
        if stratum == "all":
            masks.append(("all", np.ones(len(paired), dtype=bool)))
            continue
        codes, levels = pd.factorize(paired[stratum].astype(str))
        position = {level: j for j, level in enumerate(levels)}
        for level in _ordered(levels, orders[stratum]):
            masks.append((f"{stratum}={level}", codes == position[level]))
    for name, mask in (extra or {}).items():
        values = np.asarray(mask)
        if values.dtype != bool or values.shape != (len(paired),):
            raise ValueError(
                f"extra_strata[{name!r}] must be a boolean mask with one value per row of "
                f"paired ({len(paired)}), got dtype {values.dtype} and shape {values.shape}"
            )
        masks.append((str(name), values))
    return masks


def _check(paired, strata, extra_strata, ratio_parameters, error_ratio) -> None:
    if not isinstance(paired, pd.DataFrame):
        raise ValueError(f"paired must be a pandas DataFrame, got {type(paired).__name__}")
    if isinstance(strata, str):
        raise ValueError(f"strata must be a sequence of names, got the string {strata!r}")
    unknown = [s for s in strata if s not in STRATA]
    if unknown:
        raise ValueError(f"strata must be among {STRATA}, got {unknown}")
    needed = _REQUIRED + tuple(s for s in strata if s != "all")
    missing = [c for c in needed if c not in paired.columns]
    if missing:
        raise ValueError(f"paired lacks the columns {missing} (see the data contract)")
    if isinstance(ratio_parameters, str):
        raise ValueError(
            f"ratio_parameters must be a sequence of parameter codes, got {ratio_parameters!r}"
        )
    if not (
        isinstance(error_ratio, float | int) and math.isfinite(error_ratio) and error_ratio > 0
    ):
        raise ValueError(f"error_ratio must be a positive finite number, got {error_ratio!r}")
    if extra_strata is not None and not isinstance(extra_strata, Mapping):
        raise ValueError(
            f"extra_strata must map stratum names to boolean masks, got {type(extra_strata)}"
        )
    for name in extra_strata or {}:
        if not str(name) or str(name) == "all" or str(name).split("=")[0] in STRATA[1:]:
            raise ValueError(
                f"extra_strata names must be new and non-empty (e.g. 'finding=hemorrhage:"
                f"positive'), got {name!r}"
            )


def _cells(
    prefix: str, estimate: Estimate | SingleQuantity, analytic: bool = True
) -> dict[str, float]:
    out = {
        prefix: estimate.estimate,
        f"{prefix}_ci_low": estimate.ci.low,
        f"{prefix}_ci_high": estimate.ci.high,
    }
    if analytic:
        out[f"{prefix}_analytic_ci_low"] = estimate.analytic_ci.low
        out[f"{prefix}_analytic_ci_high"] = estimate.analytic_ci.high
    return out


def _loa_cells(result: LimitsOfAgreement, prefix: str = "") -> dict[str, float]:
    """Bias, limits and SD under their estimates' names (``ratio_bias``, ``sd_log`` ... on
    the ratio scale) after ``prefix``; the SD components of the difference scale only."""
    out = {}
    for estimate in (result.bias, result.lower, result.upper, result.sd):
        out.update(_cells(prefix + estimate.name, estimate))
    if result.scale == "difference" and result.components:
        within, between = result.components
        out.update(_cells(prefix + within.name, within))
        out.update(_cells(prefix + between.name, between, analytic=False))
    return out


def _regression_cells(prefix: str, fit: MethodRegression) -> dict[str, object]:
    out: dict[str, object] = {}
    for estimate in (fit.slope, fit.intercept):
        out.update(_cells(f"{prefix}_{estimate.name}", estimate, analytic=False))
    out[f"{prefix}_ci_method"] = fit.slope.ci.method
    return out


def _nan_cells(columns: Iterable[str]) -> dict[str, float]:
    return dict.fromkeys(columns, math.nan)


def _row(
    data: PairedValues,
    *,
    ratio: bool,
    confidence_level: float,
    n_boot: int,
    seed: int | None,
    error_ratio: float,
    regression_limits: bool,
    regression_n_boot: int,
    pb_max_pairs: int,
    counts: ResampleCounts,
) -> tuple[dict[str, object], list[str]]:
    """The statistics cells of one row and its remarks (not-estimable reasons first)."""
    ctx = context(data, confidence_level, n_boot, seed, counts)
    cells, remarks = _bootstrap_cells(data, ctx, ratio)
    fit_options = {
        "subject": data.codes,
        "confidence_level": confidence_level,
        "n_boot": regression_n_boot,
        "seed": seed,
    }
    fits = {
        # refitting Passing-Bablok per resample above the weighted-slope limit costs minutes
        # per row: there the rank-based interval is given, with a note (regression.py)
        "pb": lambda: passing_bablok(
            data.reference, data.test, max_pair_resamples=0, **fit_options
        ),
        "deming": lambda: deming(
            data.reference,
            data.test,
            error_ratio=error_ratio,
            resample_counts=counts if regression_n_boot == n_boot else None,
            **fit_options,
        ),
    }
    if data.n_pairs > pb_max_pairs and data.n_subjects >= 2:
        del fits["pb"]
        cells.update(_nan_cells(regression_columns("pb", "")))
        remarks.append(
            f"Passing-Bablok not computed: {data.n_pairs:,} pairs exceed pb_max_pairs = "
            f"{pb_max_pairs:,} (raise it to compute the fit, 10 to 20 s per million pairs)"
        )
    _regression_fit_cells(fits, data, cells, remarks)
    if regression_limits:
        lines = regression_based_limits(
            data.reference,
            data.test,
            subject=data.codes,
            confidence_level=confidence_level,
            n_boot=n_boot,
            seed=seed,
        )
        cells.update({key: getattr(lines, key).estimate for key in _REGRESSION_LIMIT_KEYS})
    return cells, remarks


def _bootstrap_cells(
    data: PairedValues, ctx: EstimationContext, ratio: bool
) -> tuple[dict[str, object], list[str]]:
    """Cells of the statistics that share one pass of the subject cluster bootstrap, and
    their remarks."""
    analyses = [
        ba2007_analysis("difference"),
        subject_mean_analysis("difference"),
        PROPORTIONAL,
        PEARSON_ANALYSIS,
        SPEARMAN_ANALYSIS,
        RM_CORR_ANALYSIS,
        CCC_ANALYSIS,
        ICC_ANALYSIS,
    ]
    if ratio:
        analyses.append(ba2007_analysis("ratio"))
    results = run_analyses(data, tuple(analyses), ctx)
    ba, sm, prop, pearson, spearman, rm, ccc, icc = results[:8]
    cells: dict[str, object] = {}
    cells.update(_loa_cells(ba))
    cells.update(_loa_cells(sm, "subject_mean_"))
    cells.update(_cells("prop_slope", prop.slope))
    cells.update(_cells("prop_intercept", prop.intercept))
    for single in (pearson, spearman, rm):
        cells.update(_cells(single.quantity, single))
    cells.update({"rm_corr_df": rm.df, "rm_corr_p_value": rm.p_value})
    for single in (ccc, icc):
        cells.update(_cells(single.quantity, single))
    remarks = [r.note for r in results if r.note and "not estimable" not in r.note]
    if ratio:
        cells.update(_loa_cells(results[8]))
    return cells, remarks


def _regression_fit_cells(
    fits: Mapping[str, Callable[[], MethodRegression]],
    data: PairedValues,
    cells: dict[str, object],
    remarks: list[str],
) -> None:
    """Add the cells of each method-comparison fit (NaN when refused) and its remarks."""
    for prefix, fit in fits.items():
        if data.n_subjects < 2:
            cells.update(_nan_cells(regression_columns(prefix, "")))
            continue
        try:
            result = fit()
        except ValueError as error:  # degenerate input the regression refuses: say why
            cells.update(_nan_cells(regression_columns(prefix, "")))
            remarks.append(f"{prefix} not estimable: {error}")
            continue
        cells.update(_regression_cells(prefix, result))
        if result.note:
            remarks.append(f"{result.procedure}: {result.note}")


# Long: the numpydoc Parameters and Examples of the table's entry point (the body is ~20 lines)
def agreement_table(
    paired: pd.DataFrame,
    *,
    strata: Sequence[str] = ("all", "group", "ring", "territory"),
    n_boot: int = DEFAULT_N_BOOT,
    seed: int | None = DEFAULT_SEED,
    confidence_level: float = 0.95,
    ratio_parameters: Sequence[str] = ("r2star",),
    error_ratio: float = 1.0,
    extra_strata: Mapping[str, object] | None = None,
    regression_limits: bool = False,
    regression_n_boot: int | None = None,
    pb_max_pairs: int = PB_TABLE_MAX_PAIRS,
    workers: int = 1,
) -> pd.DataFrame:
    """Agreement of every test method with the reference, per parameter and stratum.

    Parameters
    ----------
    paired
        ``Study.paired`` (data contract): one row per (parameter, method, subject, segment).
    strata
        Any of ``"all"``, ``"group"``, ``"ring"``, ``"territory"``; a row per level.
    n_boot, seed
        Subject cluster bootstrap resamples and seed of ``numpy.random.default_rng``
        (``n_boot=0``: analytic intervals only, bootstrap columns NaN with a note). Also
        passed to Passing-Bablok and Deming regression.
    confidence_level
        Of every interval.
    ratio_parameters
        Parameters also analysed on the ratio scale (log of test/reference).
    error_ratio
        Ratio of the error variances (test over reference) for Deming regression.
    extra_strata
        Further strata as ``{name: boolean mask over the rows of paired}``, e.g.
        ``{"finding=hemorrhage:positive": mask}``.
    regression_limits
        Add the regression-based limits of Bland & Altman (1999) (line coefficients).
    regression_n_boot
        Bootstrap resamples for Passing-Bablok and Deming (None: ``n_boot``). The
        Passing-Bablok bootstrap refits the estimator per resample, about 0.5 s per resample
        at 170,000 pairs (cohort.stats.regression caps it by a budget and says so); 0 gives their
        analytic intervals, which treat pairs as independent (their note says so).
    pb_max_pairs
        Rows with more pairs get no Passing-Bablok fit; their note says so
        (:data:`PB_TABLE_MAX_PAIRS`).
    workers
        Processes computing rows (:func:`cohort.parallel.ordered_map`; 0 = one per core):
        the table is the same for any number.

    Returns
    -------
    pandas.DataFrame
        Columns :data:`AGREEMENT_COLUMNS` (meanings in :data:`COLUMN_DESCRIPTIONS`), one row
        per (parameter, method, stratum); a stratum without pairs still has a row.
        Deterministic: the same inputs and seed give an identical table. Values that cannot
        be estimated are NaN, the row's ``note`` says why, and one
        :class:`~cohort.stats.results.NotEstimableWarning` per such row is emitted.

    Each statistic's reference and validation are in its own function's docstring
    (:mod:`cohort.stats.agreement`, :mod:`cohort.stats.correlation`,
    :mod:`cohort.stats.concordance`, :mod:`cohort.stats.regression`);
    tests/analysis/test_agreement_table.py checks that the rows equal those functions' results.

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> truth = rng.normal(20, 4, 24)
    >>> paired = pd.DataFrame({
    ...     "parameter": "ff", "method": "quick", "reference": "fit",
    ...     "subject": np.repeat(["s1", "s2", "s3", "s4"], 6),
    ...     "reference_value": truth + rng.normal(0, 0.5, 24),
    ...     "test_value": truth + 1.0 + rng.normal(0, 0.5, 24),
    ... })
    >>> table = agreement_table(paired, strata=("all",), n_boot=100, seed=1)
    >>> row = table.iloc[0]
    >>> print(row["stratum"], row["n_subjects"], row["n_pairs"])
    all 4 24
    >>> f"{row['bias']:.2f} [{row['bias_ci_low']:.2f}, {row['bias_ci_high']:.2f}]"
    '0.94 [0.76, 1.10]'
    """
    check_options(confidence_level, n_boot)
    if regression_n_boot is None:
        regression_n_boot = n_boot
    _check_counts(regression_n_boot, pb_max_pairs)
    _check(paired, strata, extra_strata, ratio_parameters, error_ratio)
    options = {
        "confidence_level": confidence_level,
        "n_boot": n_boot,
        "seed": seed,
        "error_ratio": error_ratio,
        "regression_limits": regression_limits,
        "regression_n_boot": regression_n_boot,
        "pb_max_pairs": pb_max_pairs,
    }
    jobs = _jobs(paired, _strata_masks(paired, strata, extra_strata), ratio_parameters)
    try:
        rows = ordered_map(functools.partial(_row_job, options=options), jobs, workers)
    finally:
        _PROCESS_COUNTS.clear()
    return pd.DataFrame(rows, columns=list(AGREEMENT_COLUMNS))


def _check_counts(regression_n_boot: object, pb_max_pairs: object) -> None:
    if not _is_count(regression_n_boot):
        raise ValueError(
            f"regression_n_boot must be a non-negative integer or None, got {regression_n_boot!r}"
        )
    if not _is_count(pb_max_pairs):
        raise ValueError(f"pb_max_pairs must be a non-negative integer, got {pb_max_pairs!r}")


def _jobs(
    paired: pd.DataFrame,
    masks: list[tuple[str, np.ndarray]],
    ratio_parameters: Sequence[str],
) -> list[tuple[dict[str, str], PairedValues, bool]]:
    """One job per row: (identity columns, the row's pairs, ratio scale or not), in the
    table's order (parameters, then methods, then strata)."""
    # Codes in sorted label order, as the statistics' own functions number subjects.
    subject_codes, subjects = pd.factorize(paired["subject"].astype(str), sort=True)
    x_all = paired["reference_value"].to_numpy(dtype=float)
    y_all = paired["test_value"].to_numpy(dtype=float)
    reference_all = paired["reference"].astype(str).to_numpy()
    keys = paired[["parameter", "method"]].astype(str)
    combos = keys.groupby(["parameter", "method"], sort=True).indices
    method_levels = [str(m) for m in levels(paired["method"])]  # the study's order
    jobs = []
    for parameter in _ordered({p for p, _ in combos}, tuple(PARAMETERS)):
        for method in [m for m in method_levels if (parameter, m) in combos]:
            positions = combos[(parameter, method)]
            identity = {
                "parameter": parameter,
                "method": method,
                "reference": ", ".join(sorted(set(reference_all[positions]))),
            }
            for stratum, mask in masks:
                selected = positions[mask[positions]]
                data = _stratum_values(
                    x_all[selected], y_all[selected], subject_codes[selected], len(subjects)
                )
                jobs.append(({**identity, "stratum": stratum}, data, parameter in ratio_parameters))
    return jobs


def _is_count(value: object) -> bool:
    """A non-negative whole number (not a bool)."""
    return not isinstance(value, bool) and isinstance(value, int | np.integer) and value >= 0


_PROCESS_COUNTS: dict[tuple[int, int | None], ResampleCounts] = {}


def _process_counts(n_boot: int, seed: int | None) -> ResampleCounts:
    """Resample counts shared by the rows computed in this process: rows with as many
    subjects share their counts (same seed, same draws), whichever process computes them."""
    key = (n_boot, seed)
    if key not in _PROCESS_COUNTS:
        _PROCESS_COUNTS.clear()
        _PROCESS_COUNTS[key] = ResampleCounts(n_boot, seed)
    return _PROCESS_COUNTS[key]


def _row_job(
    job: tuple[dict[str, str], PairedValues, bool], options: Mapping[str, object]
) -> dict[str, object]:
    """One row of the table (in this process or a worker)."""
    identity, data, ratio = job
    counts = _process_counts(options["n_boot"], options["seed"])
    return _table_row(identity, data, ratio=ratio, counts=counts, **options)


def _stratum_values(x, y, codes: np.ndarray, n_labels: int) -> PairedValues:
    """Paired values with subjects renumbered 0..k-1 in sorted label order (as
    :func:`cohort.stats.bootstrap.paired_values` numbers them)."""
    present = np.zeros(n_labels, dtype=bool)
    present[codes] = True
    renumber = np.cumsum(present) - 1
    return PairedValues(x, y, renumber[codes], int(present.sum()))


def _table_row(
    identity: Mapping[str, str], data: PairedValues, *, ratio: bool, **options
) -> dict[str, object]:
    """One table row: statistics, not-estimable reasons (one warning) and remarks."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        cells, remarks = _row(data, ratio=ratio, **options)
    reasons = []
    for w in caught:
        if issubclass(w.category, NotEstimableWarning):
            reasons.append(str(w.message))
        else:
            warnings.warn_explicit(w.message, w.category, w.filename, w.lineno)
    if data.n_pairs == 0:
        reasons = ["not estimable: no pairs in this stratum"]
    elif data.n_subjects < 2:
        reasons = [f"not estimable: fewer than 2 subjects (n={data.n_subjects})"]
    if options["n_boot"] == 0:
        remarks.append("bootstrap not requested (n_boot=0): the _ci_low/_ci_high columns are NaN")
    not_requested = []
    if not ratio:
        cells.update(_nan_cells(_RATIO_COLUMNS))
        not_requested.append("ratio scale")
    if not options["regression_limits"]:
        cells.update(_nan_cells(_REGRESSION_LIMIT_KEYS))
        not_requested.append("regression-based limits")
    if not_requested:
        remarks.append(f"not requested: {', '.join(not_requested)}")
    if reasons:
        where = f"{identity['parameter']} {identity['method']} vs {identity['reference']}"
        warnings.warn(
            f"{where}, {identity['stratum']}: {'; '.join(reasons)}",
            NotEstimableWarning,
            stacklevel=3,
        )
    return {
        **identity,
        "n_subjects": data.n_subjects,
        "n_pairs": data.n_pairs,
        **cells,
        "confidence_level": options["confidence_level"],
        "ci_method": bootstrap_method(options["n_boot"], options["seed"]),
        "n_boot": options["n_boot"],
        "seed": options["seed"],
        "note": "; ".join(dict.fromkeys(reasons + remarks)),
    }
