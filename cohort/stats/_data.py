"""Paired inputs as arrays or as columns of a DataFrame: one mechanism for every estimator.

Every paired estimator of :mod:`cohort.stats` takes ``reference`` and ``test`` values (and
``subject`` labels) as arrays. Decorated with :func:`accepts_data`, it also takes
``data=``, a DataFrame, and then ``reference``, ``test`` and ``subject`` name its columns,
as in seaborn or pingouin::

    limits_of_agreement(ref_values, test_values, subject=subject_ids)
    limits_of_agreement(data=df, reference="ref", test="test", subject="subject")

The two calls give the same result: the columns are taken as numpy arrays and handed to the
estimator exactly as arrays would be. :func:`paired_arrays` is the one check of paired
values (one-dimensional, finite, equal lengths) and :func:`subject_labels` the one check of
their subject labels, which the estimators share.
"""

from __future__ import annotations

import functools
import inspect
from collections.abc import Callable
from typing import TypeVar

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike

__all__ = ["COLUMN_ROLES", "accepts_data", "columns_of", "paired_arrays", "subject_labels"]

COLUMN_ROLES: tuple[str, ...] = ("reference", "test", "subject")
"""The arguments that name columns of ``data`` when it is given."""

F = TypeVar("F", bound=Callable[..., object])


def columns_of(data: pd.DataFrame, **roles: object) -> dict[str, np.ndarray | None]:
    """The columns of ``data`` that ``roles`` name, as numpy arrays (None stays None).

    Raises ValueError when ``data`` is not a DataFrame, a role's argument is not a column
    name (a string), or the column does not exist (the message lists the columns).

    Examples
    --------
    >>> df = pd.DataFrame({"ref": [1.0, 2.0], "new": [1.5, 2.5]})
    >>> columns_of(df, reference="ref", test="new", subject=None)["test"].tolist()
    [1.5, 2.5]
    >>> columns_of(df, reference="reff")
    Traceback (most recent call last):
    ...
    ValueError: reference: data has no column 'reff'; its columns are ['ref', 'new']
    """
    if not isinstance(data, pd.DataFrame):
        raise ValueError(f"data must be a pandas DataFrame, got {type(data).__name__}")
    out: dict[str, np.ndarray | None] = {}
    for role, name in roles.items():
        if name is None:
            out[role] = None
            continue
        if not isinstance(name, str):
            raise ValueError(
                f"{role} must be a column name (str) when data is given, got {type(name).__name__}"
            )
        if name not in data.columns:
            raise ValueError(
                f"{role}: data has no column {name!r}; its columns are "
                f"{[str(c) for c in data.columns]}"
            )
        out[role] = data[name].to_numpy()
    return out


def accepts_data(func: F) -> F:
    """Let a paired estimator take ``data=DataFrame`` with column names for its arrays.

    The decorated function keeps its signature and adds a keyword ``data`` (default None).
    With ``data=None`` the call goes through unchanged. With a DataFrame, the arguments
    among ``reference``, ``test`` and ``subject`` that the function has are read as column
    names (see :func:`columns_of`) and replaced by the columns' values.

    Examples
    --------
    >>> @accepts_data
    ... def mean_difference(reference, test, *, subject=None):
    ...     return float(np.mean(np.asarray(test) - np.asarray(reference)))
    >>> df = pd.DataFrame({"ref": [1.0, 2.0, 3.0], "new": [1.5, 2.5, 3.0]})
    >>> mean_difference(data=df, reference="ref", test="new")
    0.333...
    >>> mean_difference(df["ref"], df["new"])
    0.333...
    """
    signature = inspect.signature(func)
    roles = [r for r in COLUMN_ROLES if r in signature.parameters]

    @functools.wraps(func)
    def wrapper(*args, data: pd.DataFrame | None = None, **kwargs):
        if data is None:
            return func(*args, **kwargs)
        bound = signature.bind(*args, **kwargs)
        named = {r: bound.arguments[r] for r in roles if r in bound.arguments}
        bound.arguments.update(columns_of(data, **named))
        return func(*bound.args, **bound.kwargs)

    data_parameter = inspect.Parameter(
        "data", inspect.Parameter.KEYWORD_ONLY, default=None, annotation="pd.DataFrame | None"
    )
    parameters = list(signature.parameters.values())
    keyword_only = [p.kind == inspect.Parameter.KEYWORD_ONLY for p in parameters]
    at = keyword_only.index(True) if any(keyword_only) else len(parameters)
    parameters.insert(at, data_parameter)
    wrapper.__signature__ = signature.replace(parameters=parameters)  # type: ignore[attr-defined]
    return wrapper  # type: ignore[return-value]


def paired_arrays(reference: ArrayLike, test: ArrayLike) -> tuple[np.ndarray, np.ndarray]:
    """Reference and test values as float arrays, checked: one-dimensional, finite, equal
    lengths (ValueError naming the argument otherwise).

    Examples
    --------
    >>> x, y = paired_arrays([1, 2, 3], [1.5, 2.5, 3.5])
    >>> y.tolist()
    [1.5, 2.5, 3.5]
    >>> paired_arrays([1, 2, 3], [1, 2])
    Traceback (most recent call last):
    ...
    ValueError: reference and test must have the same length, got 3 and 2
    """
    series = [v.index for v in (reference, test) if isinstance(v, pd.Series)]
    if len(series) == 2 and not series[0].equals(series[1]):
        raise ValueError(
            "reference and test are pandas Series with different indexes; values are paired "
            "by position, so align them first (or give data= a DataFrame and column names)"
        )
    x = np.asarray(reference, dtype=float)
    y = np.asarray(test, dtype=float)
    for name, v in (("reference", x), ("test", y)):
        if v.ndim != 1:
            raise ValueError(f"{name} must be one-dimensional, got shape {v.shape}")
        if not np.all(np.isfinite(v)):
            bad = int(np.sum(~np.isfinite(v)))
            raise ValueError(f"{name} must hold finite values only, got {bad} non-finite")
    if x.size != y.size:
        raise ValueError(f"reference and test must have the same length, got {x.size} and {y.size}")
    return x, y


def subject_labels(subject: ArrayLike, n_pairs: int) -> np.ndarray:
    """Subject labels checked: one per pair, none missing (ValueError otherwise).

    Labels of any type that compares (text, integers); the estimators code them into
    subjects themselves.

    Examples
    --------
    >>> subject_labels(["a", "a", "b"], 3).tolist()
    ['a', 'a', 'b']
    >>> subject_labels(True, 3)
    Traceback (most recent call last):
    ...
    ValueError: subject must have one label per pair (3), got shape ()
    >>> subject_labels(["a", None, "b"], 3)
    Traceback (most recent call last):
    ...
    ValueError: subject must not be missing, got 1 missing
    """
    labels = np.asarray(subject)
    if labels.shape != (n_pairs,):
        raise ValueError(
            f"subject must have one label per pair ({n_pairs}), got shape {labels.shape}"
        )
    missing = int(pd.isna(labels).sum())
    if missing:
        raise ValueError(f"subject must not be missing, got {missing} missing")
    return labels
