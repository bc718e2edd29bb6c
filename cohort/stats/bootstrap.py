"""Subject cluster bootstrap on per-subject sufficient statistics.

Segments are clustered in subjects, so the default interval of every agreement statistic
resamples *subjects* with replacement and keeps each drawn subject's segments together
(cluster bootstrap; Field CA, Welsh AH. Bootstrapping clustered data. J R Stat Soc B
2007;69:369-390 (memory)). Treating segments as independent understates uncertainty (Aarts E et al.
Nat Neurosci 2014;17:491-496 (memory)).

Design. A resample is a vector of subject counts ``w`` (how often each subject was drawn;
multinomial with ``k`` trials and equal probabilities). Every statistic of the agreement
engine is a function of sums over pairs, and a sum over the pairs of a resample is
``w @ S`` where ``S`` holds the per-subject sums (counts, sums, squares and cross-products of
reference, test, difference, ...). So the per-subject sums are computed once, resamples are
processed in chunks as one matrix product each, and no group-by runs per resample.

Reproducibility. Resample ``b`` is ``default_rng(seed).integers(0, k, size=k)`` drawn in
order ``b = 0, 1, ...`` (subjects in sorted label order); :func:`resample_subjects` yields
exactly these draws so that a straightforward implementation can be checked against the
fast one on the same resampled subjects. Chunking does not change the resampled subjects.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Iterator, Mapping
from dataclasses import dataclass, field
from types import MappingProxyType

import numpy as np
from numpy.typing import ArrayLike
from scipy import stats

from cohort.domain.options import MAX_N_BOOT, MIN_N_BOOT
from cohort.stats._data import paired_arrays, subject_labels
from cohort.stats.results import ConfidenceInterval, Estimate

_CHUNK_ELEMENTS = 4_000_000
"""Resamples per chunk times subjects: bounds the count matrix to about 32 MB."""

Totals = Mapping[str, np.ndarray]
"""Weighted sums over the pairs of one or more resamples, by column name (arrays of shape (c,))."""

Statistic = Callable[[Totals], dict[str, np.ndarray]]


def bootstrap_method(n_boot: int, seed: int | None) -> str:
    """The ``ConfidenceInterval.method`` text of the default interval."""
    drawn = "not reproducible" if seed is None else f"seed={seed}"
    return f"subject cluster bootstrap, percentile, B={n_boot}, {drawn}"


@dataclass(frozen=True)
class PairedValues:
    """Validated paired values: reference ``x``, test ``y`` and subject codes.

    ``codes`` index the subjects ``0..n_subjects-1`` in sorted label order.
    """

    reference: np.ndarray
    test: np.ndarray
    codes: np.ndarray
    n_subjects: int

    @property
    def n_pairs(self) -> int:
        return int(self.reference.size)


def paired_values(
    reference: ArrayLike, test: ArrayLike, subject: ArrayLike | None = None
) -> PairedValues:
    """Check paired values and code their subjects (``subject=None``: one subject per pair)."""
    x, y = paired_arrays(reference, test)
    if subject is None:
        return PairedValues(x, y, np.arange(x.size), int(x.size))
    labels = subject_labels(subject, x.size)
    _, codes = np.unique(labels, return_inverse=True)
    codes = codes.reshape(-1)
    return PairedValues(x, y, codes, int(codes.max()) + 1 if codes.size else 0)


@dataclass(frozen=True)
class SubjectSums:
    """Per-subject sums of paired values: the sufficient statistics of the bootstrap.

    ``values[i, j]`` is the sum over subject ``i``'s pairs of column ``names[j]`` (or a
    per-subject quantity built from such sums); ``constants`` are centring offsets that the
    statistics add back. :meth:`totals` turns subject counts into totals over pairs.
    """

    names: tuple[str, ...]
    values: np.ndarray
    constants: Mapping[str, float] = field(default_factory=lambda: MappingProxyType({}))
    ratio_reason: str = ""
    """Why the ratio (log) scale is not estimable; empty when it is."""
    invariant: frozenset[str] = frozenset()
    """Quantities without any variation in the observed pairs: ``reference``, ``test``,
    ``mean`` (of the two methods), ``difference``, ``reference within subjects``,
    ``test within subjects`` (exact comparisons on the values, for not-estimable reasons)."""

    def column(self, name: str) -> np.ndarray:
        return self.values[:, self.names.index(name)]

    def totals(self, counts: np.ndarray) -> dict[str, np.ndarray]:
        """Totals over the pairs of each resample; ``counts`` has shape (c, n_subjects)."""
        summed = counts @ self.values
        out: dict[str, np.ndarray] = dict(zip(self.names, summed.T, strict=True))
        out.update(self.constants)
        return out

    def full_sample(self) -> dict[str, np.ndarray]:
        """Totals of the observed sample (every subject counted once)."""
        return self.totals(np.ones((1, self.values.shape[0])))

    def observed(self) -> dict[str, float]:
        """Totals of the observed sample as floats (constants included)."""
        return {k: float(np.asarray(v).reshape(-1)[0]) for k, v in self.full_sample().items()}


def midranks(values: np.ndarray) -> np.ndarray:
    """Ranks 1..n with ties given the mean of their ranks (as scipy.stats.rankdata).

    Mid-ranks do not depend on the order of tied values, so an unstable (faster) sort serves.
    """
    n = values.size
    order = np.argsort(values)
    ordered = values[order]
    starts_group = np.r_[True, ordered[1:] != ordered[:-1]] if n else np.zeros(0, bool)
    starts = np.flatnonzero(starts_group)
    ends = np.r_[starts[1:], n]
    ranks = np.empty(n)
    ranks[order] = ((starts + ends + 1) / 2.0)[np.cumsum(starts_group) - 1]
    return ranks


def paired_sums(data: PairedValues) -> SubjectSums:
    """Per-subject sufficient statistics of paired values, for all agreement statistics.

    Values are centred on a common constant (and differences on their mean) before squaring,
    which leaves every statistic unchanged and avoids cancellation; the statistics add the
    offsets back. Ranks are full-sample mid-ranks (for Spearman's rho). The log ratio
    ``ln(test / reference)`` is included only when every value is positive.
    """
    x, y, codes, k = data.reference, data.test, data.codes, data.n_subjects
    n = x.size
    centre = 0.5 * (x.mean() + y.mean()) if n else 0.0
    xc, yc = x - centre, y - centre
    d = y - x
    d_offset = d.mean() if n else 0.0
    dc = d - d_offset
    ac = 0.5 * (xc + yc)
    rx = midranks(x) - 0.5 * (n + 1)
    ry = midranks(y) - 0.5 * (n + 1)
    pair_columns = {
        "n": np.ones(n),
        "x": xc,
        "y": yc,
        "xx": xc * xc,
        "yy": yc * yc,
        "xy": xc * yc,
        "d": dc,
        "dd": dc * dc,
        "a": ac,
        "aa": ac * ac,
        "ad": ac * dc,
        "rx": rx,
        "ry": ry,
        "rxrx": rx * rx,
        "ryry": ry * ry,
        "rxry": rx * ry,
    }
    constants = {"centre": centre, "d_offset": d_offset}
    n_nonpositive = int(np.sum((x <= 0) | (y <= 0)))
    ratio_reason = ""
    if n_nonpositive:
        ratio_reason = f"{n_nonpositive} of {n} pairs have a value <= 0 (log ratio undefined)"
    elif n:
        lr = np.log(y) - np.log(x)
        l_offset = lr.mean()
        lc = lr - l_offset
        pair_columns.update({"l": lc, "ll": lc * lc})
        constants["l_offset"] = l_offset
    sums = {
        name: np.bincount(codes, weights=col, minlength=k) for name, col in pair_columns.items()
    }
    sums.update(_derived_sums(sums, k))
    names = tuple(sums)
    values = np.column_stack([sums[c] for c in names]) if k else np.zeros((0, len(names)))
    invariant = _invariant(x, y, codes, k)
    return SubjectSums(names, values, MappingProxyType(constants), ratio_reason, invariant)


def _derived_sums(sums: Mapping[str, np.ndarray], k: int) -> dict[str, np.ndarray]:
    """Per-subject quantities built from the per-subject sums (within-subject centred sums of
    squares and products; mean difference and mean log ratio of each subject)."""
    m = sums["n"]
    with np.errstate(invalid="ignore", divide="ignore"):
        derived = {
            "one": np.ones(k),
            "n2": m * m,
            "cxx": sums["xx"] - sums["x"] ** 2 / m,
            "cyy": sums["yy"] - sums["y"] ** 2 / m,
            "cxy": sums["xy"] - sums["x"] * sums["y"] / m,
        }
        for p in ("d", "l"):
            if p in sums:
                mean = sums[p] / m
                derived[f"{p}_sq_n"] = sums[p] * mean
                derived[f"{p}_bar"] = mean
                derived[f"{p}_bar2"] = mean * mean
    return derived


def _invariant(x: np.ndarray, y: np.ndarray, codes: np.ndarray, k: int) -> frozenset[str]:
    """The quantities without variation in the observed pairs (see :class:`SubjectSums`)."""
    n = x.size
    d = y - x
    invariant = {
        name
        for name, v in (("reference", x), ("test", y), ("mean", 0.5 * (x + y)), ("difference", d))
        if n == 0 or np.all(v == v[0])
    }
    for name, v in (("reference", x), ("test", y)):
        # Each subject's first value (reversed assignment: the first occurrence wins).
        first = np.empty(k)
        first[codes[::-1]] = v[::-1]
        if np.all(v == first[codes]):
            invariant.add(f"{name} within subjects")
    return frozenset(invariant)


def resample_subjects(n_subjects: int, n_boot: int, seed: int | None) -> Iterator[np.ndarray]:
    """Yield the drawn subject indices of each resample (``n_subjects`` draws each)."""
    rng = np.random.default_rng(seed)
    for _ in range(n_boot):
        yield rng.integers(0, n_subjects, size=n_subjects)


def resample_counts(
    n_subjects: int, n_boot: int, seed: int | None, row_size: int | None = None
) -> Iterator[np.ndarray]:
    """Yield subject counts of consecutive resamples in chunks of shape (c, n_subjects).

    Chunks hold about ``_CHUNK_ELEMENTS / row_size`` resamples (``row_size`` defaults to the
    number of subjects; pass the number of pairs when counts are expanded to pairs).
    """
    row = max(row_size if row_size is not None else n_subjects, 1)
    chunk = max(1, min(n_boot, _CHUNK_ELEMENTS // row))
    draws = resample_subjects(n_subjects, n_boot, seed)
    for start in range(0, n_boot, chunk):
        c = min(chunk, n_boot - start)
        counts = np.empty((c, n_subjects))
        for row in range(c):
            counts[row] = np.bincount(next(draws), minlength=n_subjects)
        yield counts


class ResampleCounts:
    """Subject counts of the resamples, drawn once per number of subjects and reused.

    For one ``n_boot`` and ``seed`` the counts depend only on the number of subjects, so
    analyses of many strata (parameters, methods, rings, territories with the same subjects)
    can share them. Rows equal those of :func:`resample_counts`. Up to ``max_elements``
    counts in all are kept, as one byte each (a subject is drawn at most 255 times in a
    resample of any realistic size; larger counts are kept as 8-byte floats): 1 GB at the
    default, 0.7 GB for every stratum of 100,000 subjects at B = 2000. Beyond that, counts
    are drawn afresh for each use. Chunks are handed out as floats, ready for the matrix
    products.
    """

    def __init__(self, n_boot: int, seed: int | None, max_elements: int = 1_000_000_000) -> None:
        self.n_boot = n_boot
        self.seed = seed
        self.max_elements = max_elements
        self._stored: dict[int, list[np.ndarray]] = {}

    def chunks(self, n_subjects: int) -> Iterator[np.ndarray]:
        """Counts of consecutive resamples as float chunks of shape (c, n_subjects)."""
        if n_subjects in self._stored:
            for chunk in self._stored[n_subjects]:
                yield chunk.astype(float)
            return
        held = sum(sum(c.size for c in chunks) for chunks in self._stored.values())
        if self.seed is None or held + self.n_boot * n_subjects > self.max_elements:
            yield from resample_counts(n_subjects, self.n_boot, self.seed)
            return
        stored = []
        for chunk in resample_counts(n_subjects, self.n_boot, self.seed):
            # counts are whole numbers: one byte holds them exactly up to 255
            stored.append(chunk.astype(np.uint8) if chunk.max(initial=0) <= 255 else chunk)
            yield chunk
        self._stored[n_subjects] = stored

    def rows(self, n_subjects: int) -> Iterator[np.ndarray]:
        """The counts of each resample in turn (float arrays of shape (n_subjects,))."""
        for chunk in self.chunks(n_subjects):
            yield from chunk


def cluster_bootstrap(
    sums: SubjectSums,
    statistic: Statistic,
    *,
    n_boot: int,
    seed: int | None,
    counts: ResampleCounts | None = None,
) -> dict[str, np.ndarray]:
    """Bootstrap distribution of ``statistic`` (arrays of shape (n_boot,) by name).

    ``statistic`` maps :class:`Totals` of shape (c,) to named arrays of shape (c,); it is the
    same function that gives the point estimate from :meth:`SubjectSums.full_sample`.
    ``counts`` (same ``n_boot`` and ``seed``) reuses counts drawn for earlier analyses.
    """
    k = sums.values.shape[0]
    if counts is not None and (counts.n_boot, counts.seed) != (n_boot, seed):
        raise ValueError(
            f"counts were drawn for n_boot={counts.n_boot}, seed={counts.seed}, "
            f"not n_boot={n_boot}, seed={seed}"
        )
    chunks = counts.chunks(k) if counts is not None else resample_counts(k, n_boot, seed)
    parts: dict[str, list[np.ndarray]] = {}
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        for counts_chunk in chunks:
            for name, value in statistic(sums.totals(counts_chunk)).items():
                shape = counts_chunk.shape[:1]
                parts.setdefault(name, []).append(np.broadcast_to(value, shape))
    return {name: np.concatenate(chunks) for name, chunks in parts.items()}


def centred_moments(t: Totals, x: str, y: str) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Centred sums of squares and products ``Sxx, Syy, Sxy`` of columns ``x`` and ``y``."""
    n = t["n"]
    sxx = t[x + x] - t[x] ** 2 / n
    syy = t[y + y] - t[y] ** 2 / n
    sxy = t[x + y] - t[x] * t[y] / n
    return sxx, syy, sxy


def point_estimates(sums: SubjectSums, statistic: Statistic) -> dict[str, float]:
    """The statistic on the observed sample, as floats."""
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        return {name: float(v[0]) for name, v in statistic(sums.full_sample()).items()}


def percentile_interval(
    draws: np.ndarray | None,
    confidence_level: float,
    n_boot: int,
    seed: int | None,
    transform: Callable[[np.ndarray], np.ndarray] | None = None,
    detail: str = "",
) -> ConfidenceInterval:
    """Percentile interval of bootstrap draws; non-finite draws are excluded and counted.

    ``transform`` (monotone increasing, e.g. ``np.exp``) is applied to the limits; ``detail``
    is appended to the method text.
    """
    method = bootstrap_method(n_boot, seed) + (f", {detail}" if detail else "")
    if draws is None or n_boot == 0:
        return ConfidenceInterval.not_estimable(
            "no bootstrap requested (n_boot=0)", confidence_level, method
        )
    finite = draws[np.isfinite(draws)]
    if finite.size < 2:
        return ConfidenceInterval.not_estimable(
            f"{n_boot - finite.size} of {n_boot} resamples not estimable", confidence_level, method
        )
    alpha = 1.0 - confidence_level
    low, high = np.quantile(finite, [alpha / 2, 1 - alpha / 2])
    if transform is not None:
        low, high = transform(np.array([low, high]))
    note = ""
    if finite.size < n_boot:
        note = f"{n_boot - finite.size} of {n_boot} resamples not estimable and excluded"
    return ConfidenceInterval(float(low), float(high), confidence_level, method, note)


def check_options(confidence_level: float, n_boot: int) -> None:
    """Raise ValueError for a confidence level outside (0, 1) or an ``n_boot`` that the study
    file would refuse: the rule is 0 (no bootstrap) or from
    :data:`~cohort.domain.options.MIN_N_BOOT` to :data:`~cohort.domain.options.MAX_N_BOOT`,
    defined once in :mod:`cohort.domain.options`.

    Examples
    --------
    >>> check_options(0.95, 0), check_options(0.95, 2000)
    (None, None)
    >>> check_options(0.95, 5)
    Traceback (most recent call last):
    ...
    ValueError: n_boot must be 0 (no bootstrap) or an integer from 20 to 1000000, got 5
    """
    if not (isinstance(confidence_level, float | int) and 0.0 < confidence_level < 1.0):
        raise ValueError(f"confidence_level must be between 0 and 1, got {confidence_level!r}")
    whole = not isinstance(n_boot, bool) and isinstance(n_boot, int | np.integer)
    if not whole or not (n_boot == 0 or MIN_N_BOOT <= n_boot <= MAX_N_BOOT):
        raise ValueError(
            f"n_boot must be 0 (no bootstrap) or an integer from {MIN_N_BOOT} to "
            f"{MAX_N_BOOT}, got {n_boot!r}"
        )


@dataclass(frozen=True)
class EstimationContext:
    """What every estimate of one analysis shares: sample sizes and interval settings."""

    n_subjects: int
    n_pairs: int
    confidence_level: float
    n_boot: int
    seed: int | None
    counts: ResampleCounts | None = field(default=None, compare=False, repr=False)
    """Resample counts shared with other analyses (same n_boot and seed), if any."""

    def estimate(
        self,
        name: str,
        value: float,
        draws: np.ndarray | None,
        analytic_ci: ConfidenceInterval,
        *,
        transform: Callable[[np.ndarray], np.ndarray] | None = None,
        detail: str = "",
    ) -> Estimate:
        """An estimate with the percentile interval of ``draws`` (None: no bootstrap)."""
        ci = percentile_interval(
            draws, self.confidence_level, self.n_boot, self.seed, transform, detail
        )
        return Estimate(name, value, ci, analytic_ci, self.n_subjects, self.n_pairs)

    def not_estimable(self, name: str, reason: str) -> Estimate:
        """A NaN estimate whose intervals and note say why."""
        ci = ConfidenceInterval.not_estimable(
            reason, self.confidence_level, bootstrap_method(self.n_boot, self.seed)
        )
        analytic = ConfidenceInterval.not_estimable(reason, self.confidence_level)
        return Estimate(
            name, math.nan, ci, analytic, self.n_subjects, self.n_pairs, f"not estimable: {reason}"
        )

    def analytic_not_available(self, reason: str) -> ConfidenceInterval:
        return ConfidenceInterval.not_estimable(reason, self.confidence_level)


def context(
    data: PairedValues,
    confidence_level: float,
    n_boot: int,
    seed: int | None,
    counts: ResampleCounts | None = None,
) -> EstimationContext:
    """The :class:`EstimationContext` of an analysis of ``data``."""
    return EstimationContext(data.n_subjects, data.n_pairs, confidence_level, n_boot, seed, counts)


def fisher_z_interval(
    r: float, se: float, confidence_level: float, method: str
) -> ConfidenceInterval:
    """``tanh(atanh(r) -/+ z se)``: the Fisher z interval for a correlation."""
    if not (math.isfinite(r) and math.isfinite(se)) or abs(r) >= 1.0:
        return ConfidenceInterval.not_estimable(
            "correlation of +/-1 or standard error undefined", confidence_level, method
        )
    q = stats.norm.ppf(0.5 + confidence_level / 2)
    z = math.atanh(r)
    return ConfidenceInterval(
        math.tanh(z - q * se), math.tanh(z + q * se), confidence_level, method
    )


Builder = Callable[
    [SubjectSums, Mapping[str, float], Mapping[str, np.ndarray] | None, EstimationContext], object
]
"""Makes a result from the sums, the point estimates, the bootstrap draws (or None), context."""


@dataclass(frozen=True)
class Analysis:
    """A statistic of totals and the builder that turns its values into a result object.

    Several analyses of the same pairs share one pass of the bootstrap
    (:func:`run_analyses`), so their intervals come from the same resampled subjects.
    """

    statistic: Statistic
    build: Builder


def bootstrap_draws(
    sums: SubjectSums, statistic: Statistic, ctx: EstimationContext
) -> dict[str, np.ndarray] | None:
    """Cluster bootstrap draws, or None when not requested or fewer than 2 subjects."""
    if ctx.n_boot == 0 or ctx.n_subjects < 2:
        return None
    return cluster_bootstrap(sums, statistic, n_boot=ctx.n_boot, seed=ctx.seed, counts=ctx.counts)


def run_analyses(
    data: PairedValues, analyses: tuple[Analysis, ...], ctx: EstimationContext
) -> list[object]:
    """Results of several analyses of the same pairs from one bootstrap pass."""
    sums = paired_sums(data)

    def combined(t: Totals) -> dict[str, np.ndarray]:
        out: dict[str, np.ndarray] = {}
        for analysis in analyses:
            out.update(analysis.statistic(t))
        return out

    point = point_estimates(sums, combined)
    draws = bootstrap_draws(sums, combined, ctx)
    return [analysis.build(sums, point, draws, ctx) for analysis in analyses]


def analyse(
    reference: ArrayLike,
    test: ArrayLike,
    subject: ArrayLike | None,
    analysis: Analysis,
    *,
    confidence_level: float,
    n_boot: int,
    seed: int | None,
):
    """Validate the pairs and run one analysis (the public functions' common path)."""
    check_options(confidence_level, n_boot)
    data = paired_values(reference, test, subject)
    return run_analyses(data, (analysis,), context(data, confidence_level, n_boot, seed))[0]
