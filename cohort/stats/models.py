"""Models of segment values clustered in subjects, with a group factor: the fitting engine.

One fit answers "does the outcome differ between groups?" for values of several segments
per subject, with group and covariates at subject level:

- linear mixed model with a random intercept per subject (statsmodels MixedLM, REML);
- ordinary least squares on the subject means (the large-cohort path; see
  :data:`MIXED_MODEL_MAX_OBSERVATIONS` for why it answers the same question);
- GEE logistic model of a binary outcome, exchangeable working correlation, robust
  standard errors (Liang KY, Zeger SL. Longitudinal data analysis using generalized linear
  models. Biometrika 1986;73:13-22).

:func:`fit_group_model` returns a :class:`GroupModelFit`: the estimates of the group terms
(difference from the first group) and covariates with their covariance, Wald tests and the
joint test of the group terms. Tables of fits, their wording and families live in
:mod:`cohort.analysis.group_models`.
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Iterator, Sequence
from dataclasses import dataclass
from types import SimpleNamespace

import numpy as np
import pandas as pd
import statsmodels.api as sm
from numpy.typing import ArrayLike
from scipy import stats
from statsmodels.tools.sm_exceptions import ConvergenceWarning, IterationLimitWarning

from cohort.stats.group_samples import MIN_SUBJECTS_PER_GROUP
from cohort.stats.results import ConfidenceInterval, Estimate, Result, warn_not_estimable

MIXED_MODEL_MAX_OBSERVATIONS = 10_000
"""Above this many segment values in one fit, linear models run on subject means.

A statsmodels MixedLM fit took 1-5 s at 600 subjects x 17 segments on the project machine
(2 shared cores; slowest when the random-intercept variance is at its boundary, 0) and
about 4 minutes at 10,000 subjects. With group and covariates at subject level and a
balanced design, generalised least squares of the random-intercept model equals ordinary
least squares on the subject means, with the same standard errors (a subject mean has
variance ``sigma_b^2 + sigma_w^2 / m``), so the large-cohort path answers the same
question; with unequal segment counts it weights subjects equally rather than by
precision, and its tests are t and F rather than Wald z and chi-square.
"""

MODEL_PATHS: tuple[str, ...] = ("auto", "mixed", "subject-means")
MIXED_PATH = "mixed model (REML)"
SUBJECT_MEANS_PATH = "subject means (OLS)"
GEE_PATH = "GEE (exchangeable, robust SE)"
PATHS = {"mixed": MIXED_PATH, "subject-means": SUBJECT_MEANS_PATH, "gee": GEE_PATH}
"""The kinds of fit of :func:`fit_group_model` and how tables name them."""
JOINT_GROUP = "joint: group"
"""The term name of the joint test of all group terms of a fit."""


def _join(*notes: str) -> str:
    return "; ".join(n for n in notes if n)


def check_model_path(path: str) -> None:
    """ValueError unless ``path`` is one of :data:`MODEL_PATHS`.

    Examples
    --------
    >>> check_model_path("fast")
    Traceback (most recent call last):
    ...
    ValueError: path must be one of ('auto', 'mixed', 'subject-means'), got 'fast'
    """
    if path not in MODEL_PATHS:
        raise ValueError(f"path must be one of {MODEL_PATHS}, got {path!r}")


def choose_model_path(
    n_observations: int,
    path: str = "auto",
    max_mixed_observations: int = MIXED_MODEL_MAX_OBSERVATIONS,
) -> tuple[str, str]:
    """The linear-model path (``"mixed"`` or ``"subject-means"``) and why it was chosen.

    ``"auto"`` picks the mixed model up to ``max_mixed_observations`` segment values in the
    largest fit (see :data:`MIXED_MODEL_MAX_OBSERVATIONS`), subject means above.

    Examples
    --------
    >>> choose_model_path(1_020)
    ('mixed', 'auto: largest fit 1,020 values <= 10,000')
    >>> choose_model_path(170_000)[0]
    'subject-means'
    """
    check_model_path(path)
    if path != "auto":
        return path, f"{path} requested"
    if n_observations <= max_mixed_observations:
        return "mixed", f"auto: largest fit {n_observations:,} values <= {max_mixed_observations:,}"
    return "subject-means", (
        f"auto, large cohort: largest fit {n_observations:,} values > {max_mixed_observations:,}"
    )


def subject_design(info: pd.DataFrame, order: Sequence[str], covariates: Sequence[str]):
    """Subject-level design: intercept, group dummies (first present group as reference),
    numeric covariates as they are, other covariates as dummies of their sorted levels.

    Returns the design matrix, its column names, the groups present (in ``order``) and a
    mask of the subjects with every covariate given.

    Examples
    --------
    >>> info = pd.DataFrame({"group": ["a", "b", "b"], "age": ["50", "61", ""]})
    >>> x, names, present, keep = subject_design(info, ["a", "b"], ["age"])
    >>> names, present, keep.tolist()
    (['intercept', 'group[b]', 'age'], ['a', 'b'], [True, True, False])
    """
    present = [g for g in order if (info["group"] == g).any()]
    columns, names = [np.ones(len(info))], ["intercept"]
    for g in present[1:]:
        columns.append((info["group"] == g).to_numpy(dtype=float))
        names.append(f"group[{g}]")
    keep = np.ones(len(info), dtype=bool)
    for cov in covariates:
        raw = info[cov]
        text = raw.astype(object).where(raw.notna(), "").map(lambda v: str(v).strip())
        blank = (text == "").to_numpy()
        number = pd.to_numeric(text.where(~blank), errors="coerce").to_numpy(dtype=float)
        keep &= ~blank
        if np.all(np.isfinite(number[~blank])):
            columns.append(np.where(blank, 0.0, number))
            names.append(cov)
        else:
            levels = sorted(set(text[~blank]))
            for level in levels[1:]:
                columns.append((text == level).to_numpy(dtype=float))
                names.append(f"{cov}[{level}]")
    return np.column_stack(columns), names, present, keep


def _moment_variance(y: np.ndarray, x: np.ndarray, codes: np.ndarray) -> float:
    """One-way ANOVA (method of moments) between-subject variance of the OLS residuals."""
    resid = y - x @ np.linalg.lstsq(x, y, rcond=None)[0]
    m = np.bincount(codes).astype(float)
    k, n = m.size, y.size
    if k < 2 or n <= k:
        return math.nan
    means = np.bincount(codes, weights=resid) / m
    msb = np.sum(m * (means - resid.mean()) ** 2) / (k - 1)
    msw = np.sum((resid - means[codes]) ** 2) / (n - k)
    m0 = (n - np.sum(m * m) / n) / (k - 1)
    return float((msb - msw) / m0)


def _fit_mixed(y: np.ndarray, x: np.ndarray, codes: np.ndarray):
    """REML fit of a random intercept per subject; BFGS, then Powell if BFGS fails."""
    model = sm.MixedLM(y, x, groups=codes)
    tried = []
    # BFGS is fast inside the parameter space but searches long when the REML variance is
    # at its boundary (0); a method-of-moments estimate <= 0 predicts that, so start with
    # Powell then. The optimiser changes speed only, not the estimand.
    interior = _moment_variance(y, x, codes) > 0.0
    for optimiser in ("bfgs", "powell") if interior else ("powell", "bfgs"):
        with warnings.catch_warnings():
            # statsmodels warns while it searches; convergence is checked here instead
            warnings.simplefilter("ignore")
            try:
                result = model.fit(reml=True, method=[optimiser])
            except (np.linalg.LinAlgError, ValueError, FloatingPointError) as exc:
                tried.append(f"{optimiser} failed ({type(exc).__name__})")
                continue
        if result.converged:
            return result, _join(*tried, f"optimiser {optimiser}")
        tried.append(f"{optimiser} did not converge")
    return None, _join(*tried)


class _NotEstimable(Exception):
    """Raised inside a fit to turn it into a not-estimable result (the message is the reason)."""


def _gee_fit(y, x, codes, groups_of_rows, present):
    flat = [g for g in present if np.ptp(y[groups_of_rows == g]) == 0]
    if flat:
        raise _NotEstimable(
            f"separation: every segment of group(s) {', '.join(flat)} has the same outcome"
        )
    family, cov_struct = sm.families.Binomial(), sm.cov_struct.Exchangeable()
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", ConvergenceWarning)
        warnings.simplefilter("always", IterationLimitWarning)
        result = sm.GEE(y, x, groups=codes, family=family, cov_struct=cov_struct).fit()
    if any(issubclass(w.category, (ConvergenceWarning, IterationLimitWarning)) for w in caught):
        raise _NotEstimable("GEE iterations did not converge")
    note = f"exchangeable correlation {float(result.cov_struct.dep_params):.3g}"
    return np.asarray(result.params), np.asarray(result.cov_params()), None, note


def _mixed_fit(y, x, codes):
    result, how = _fit_mixed(y, x, codes)
    if result is None:
        raise _NotEstimable(f"REML optimisation did not converge ({how})")
    p = x.shape[1]
    cov = np.asarray(result.cov_params())[:p, :p]
    if float(np.asarray(result.cov_re)[0, 0]) <= 1e-8 * float(result.scale):
        how = _join(how, "random-intercept variance at the boundary (0)")
    return np.asarray(result.fe_params), cov, None, how


def _subject_means_fit(y, x_s, codes):
    counts = np.bincount(codes).astype(float)
    means = np.bincount(codes, weights=y) / counts
    result = sm.OLS(means, x_s).fit()
    note = f"OLS of {means.size} subject means"
    if np.ptp(counts) > 0:
        note += f" (segments per subject {int(counts.min())}-{int(counts.max())})"
    cov = np.asarray(result.cov_params())
    return np.asarray(result.params), cov, float(result.df_resid), note


@dataclass(frozen=True, repr=False, eq=False)
class GroupModelFit(Result):
    """One fit of :func:`fit_group_model`: estimates of every term and their covariance.

    ``terms`` name the design columns (``intercept``, ``group[<g>]`` against
    ``groups[0]``, covariates); ``t_df`` is the residual df of the subject-means path (t and
    F tests) and None for the Wald z and chi-square tests of the mixed model and GEE.
    ``n_subjects`` and ``n_observations`` count what the fit used. Not estimable: no
    ``terms``, and ``note`` says why.
    """

    path: str
    terms: tuple[str, ...]
    estimates: np.ndarray
    covariance: np.ndarray
    t_df: float | None
    groups: tuple[str, ...]
    n_subjects: int
    n_observations: int
    note: str = ""

    @property
    def estimable(self) -> bool:
        return bool(self.terms)

    def term_tests(self, confidence_level: float = 0.95) -> Iterator[dict[str, object]]:
        """Wald estimate, interval and test of every term but the intercept."""
        se = np.sqrt(np.diag(self.covariance))
        stat = self.estimates / se
        if self.t_df is None:
            p = 2.0 * stats.norm.sf(np.abs(stat))
            crit = float(stats.norm.ppf(0.5 + confidence_level / 2.0))
            stat_name, method = "z", "Wald, normal quantile"
        else:
            p = 2.0 * stats.t.sf(np.abs(stat), self.t_df)
            crit = float(stats.t.ppf(0.5 + confidence_level / 2.0, self.t_df))
            stat_name, method = "t", f"t quantile, {self.t_df:g} df"
        for i, name in enumerate(self.terms):
            if name == "intercept":
                continue
            yield {
                "term": name,
                "estimate": float(self.estimates[i]),
                "std_error": float(se[i]),
                "ci_low": float(self.estimates[i] - crit * se[i]),
                "ci_high": float(self.estimates[i] + crit * se[i]),
                "ci_method": method,
                "statistic": float(stat[i]),
                "statistic_name": stat_name,
                "df": math.nan if self.t_df is None else float(self.t_df),
                "p_value": float(p[i]),
            }

    def group_terms(self) -> list[int]:
        """Positions of the group terms among :attr:`terms`."""
        return [i for i, n in enumerate(self.terms) if n.startswith("group[")]

    def joint_group_test(self) -> dict[str, object]:
        """Joint Wald test of the group terms: chi-square, or F on the subject-means path."""
        index = self.group_terms()
        b = self.estimates[index]
        v = self.covariance[np.ix_(index, index)]
        wald = float(b @ np.linalg.solve(v, b))
        q = len(index)
        if self.t_df is None:
            p = float(stats.chi2.sf(wald, q))
            return {"statistic": wald, "statistic_name": "Wald chi2", "df": float(q), "p_value": p}
        f = wald / q
        return {
            "statistic": f,
            "statistic_name": "F",
            "df": float(q),
            "df_denominator": float(self.t_df),
            "p_value": float(stats.f.sf(f, q, self.t_df)),
        }

    def _summary_parts(self):
        """Each term's estimate and Wald interval (named by the term), its test, then the
        joint test of the group terms (:data:`JOINT_GROUP`), for :meth:`summary`."""
        if not self.estimable:
            return [], []
        quantities, tests = [], []
        for row in self.term_tests():
            ci = ConfidenceInterval(row["ci_low"], row["ci_high"], 0.95, row["ci_method"])
            estimate = Estimate(row["term"], row["estimate"], ci, ci, self.n_subjects, 0)
            quantities.append((row["term"], estimate))
            tests.append((row["term"], SimpleNamespace(**row)))
        tests.append((JOINT_GROUP, SimpleNamespace(**self.joint_group_test())))
        return quantities, tests

    def to_frame(self) -> pd.DataFrame:
        """One row per term but the intercept (``term``, estimate, interval, test), then the
        joint test of the group terms (``term`` = :data:`JOINT_GROUP`)."""
        if not self.estimable:
            return pd.DataFrame([{"term": "", "p_value": math.nan, "note": self.note}])
        rows = [*self.term_tests(), {"term": JOINT_GROUP, **self.joint_group_test()}]
        return pd.DataFrame(rows)


def _fit_checks(sub_info, present, covariates, x_s) -> None:
    """Raise :class:`_NotEstimable` when the design cannot answer the question."""
    sizes = sub_info["group"].value_counts()
    small = [f"{g} (n={int(sizes[g])})" for g in present if sizes[g] < MIN_SUBJECTS_PER_GROUP]
    if len(present) < 2:
        raise _NotEstimable(f"fewer than 2 groups with subjects ({', '.join(present) or 'none'})")
    if small:
        raise _NotEstimable(f"fewer than {MIN_SUBJECTS_PER_GROUP} subjects in {', '.join(small)}")
    constant = [c for c in covariates if sub_info[c].astype(str).nunique() < 2]
    if constant:
        raise _NotEstimable(f"covariate(s) {', '.join(constant)} constant in this fit")
    if np.linalg.matrix_rank(x_s) < x_s.shape[1]:
        raise _NotEstimable("design matrix rank deficient (a covariate constant or collinear)")


def fit_group_model(
    kind: str,
    outcome: ArrayLike,
    subject: ArrayLike,
    info: pd.DataFrame,
    order: Sequence[str],
    covariates: Sequence[str] = (),
    *,
    what: str = "group model",
) -> GroupModelFit:
    """Fit ``outcome ~ C(group) [+ covariates]`` with observations clustered in subjects.

    ``kind``: ``"mixed"`` (random intercept per subject, REML, Wald z), ``"subject-means"``
    (OLS of the subject means on the subject-level design, t and F) or ``"gee"`` (binary
    outcome, logit link, exchangeable correlation, robust SE). ``subject`` labels each
    observation; ``info`` (indexed by subject) holds ``group`` and the ``covariates``;
    labels are matched to its index as text, so integer IDs work. ``order`` lists the
    groups, the first present being the reference. An unknown ``kind`` is a ValueError
    listing the kinds. Subjects without a covariate value are left out (the note says how
    many). Not estimable, with a ``NotEstimableWarning`` naming ``what``: fewer than 2
    groups or 2 subjects in a group, a constant covariate, a rank-deficient design,
    non-convergence, separation (GEE).
    Validated (in the tests of :mod:`cohort.analysis.group_models`) against direct
    statsmodels formula fits (``mixedlm``, ``gee``, ``ols``).

    Examples
    --------
    >>> info = pd.DataFrame({"group": ["a", "a", "a", "b", "b", "b"]}, index=list("uvwxyz"))
    >>> y = [1.0, 1.2, 2.0, 2.2, 1.5, 1.9, 3.1, 2.9, 2.5, 2.8, 3.6, 3.2]
    >>> fit = fit_group_model("subject-means", y, list("uuvvwwxxyyzz"), info, ["a", "b"])
    >>> term = next(fit.term_tests())
    >>> print(f"{term['term']}: {term['estimate']:.3f} (SE {term['std_error']:.3f})")
    group[b]: 1.383 (SE 0.362)
    """
    if kind not in PATHS:
        raise ValueError(f"kind must be one of {tuple(PATHS)}, got {kind!r}")
    path = PATHS[kind]
    y = np.asarray(outcome, dtype=float)
    # labels are matched as text on both sides, so integer IDs (or IDs read as text from
    # one file and as numbers from another) find their subjects
    codes, ids = pd.factorize(pd.Series(subject).astype(str), sort=True)
    rows = pd.Index(info.index.map(str)).get_indexer(ids)
    unknown = sorted(ids[rows < 0])
    if unknown:
        raise ValueError(f"subjects table lacks subjects of the model data: {unknown[:5]}")
    sub_info = info.iloc[rows]
    keep = subject_design(sub_info, order, covariates)[3]
    left_out = ""
    if not keep.all():
        left_out = f"{int((~keep).sum())} subjects without covariate values left out"
        rows_kept = keep[codes]
        y, codes = y[rows_kept], pd.factorize(codes[rows_kept], sort=True)[0]
        sub_info = sub_info[keep]
    x_s, names, present, _ = subject_design(sub_info, order, covariates)
    counts = (len(sub_info), int(y.size))
    try:
        _fit_checks(sub_info, present, covariates, x_s)
        if kind == "gee":
            groups_of_rows = sub_info["group"].to_numpy()[codes]
            fit = _gee_fit(y, x_s[codes], codes, groups_of_rows, present)
        elif kind == "mixed":
            fit = _mixed_fit(y, x_s[codes], codes)
        else:
            fit = _subject_means_fit(y, x_s, codes)
    except _NotEstimable as reason:
        note = _join(left_out, warn_not_estimable(what, str(reason)))
        empty = np.zeros(0)
        return GroupModelFit(path, (), empty, empty, None, tuple(present), *counts, note)
    estimates, cov, t_df, fit_note = fit
    note = _join(left_out, fit_note)
    return GroupModelFit(path, tuple(names), estimates, cov, t_df, tuple(present), *counts, note)
