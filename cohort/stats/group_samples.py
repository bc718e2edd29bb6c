"""Checked samples for tests between groups: one finite array of per-subject values per group.

Shared by :mod:`cohort.stats.group_tests` and :mod:`cohort.stats.effect_sizes`: the input
checks (each names the argument, the rule and the value received) and the smallest group a
test accepts.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
from numpy.typing import ArrayLike

MIN_SUBJECTS_PER_GROUP = 2
"""Every test here needs a within-group spread, so at least 2 subjects per group."""


def check_confidence_level(confidence_level: float) -> None:
    """ValueError unless ``confidence_level`` is a number strictly between 0 and 1.

    Examples
    --------
    >>> check_confidence_level(0.95)
    >>> check_confidence_level(95)
    Traceback (most recent call last):
    ...
    ValueError: confidence_level must be between 0 and 1, got 95
    """
    if not (isinstance(confidence_level, float | int) and 0.0 < confidence_level < 1.0):
        raise ValueError(f"confidence_level must be between 0 and 1, got {confidence_level!r}")


def finite_sample(values: ArrayLike, name: str) -> np.ndarray:
    """``values`` as a one-dimensional float array; ValueError naming ``name`` otherwise.

    Examples
    --------
    >>> finite_sample([1, 2.5], "x").tolist()
    [1.0, 2.5]
    >>> finite_sample([1.0, float("nan")], "x")
    Traceback (most recent call last):
    ...
    ValueError: x must hold finite values only, got 1
    """
    x = np.asarray(values, dtype=float)
    if x.ndim != 1:
        raise ValueError(f"{name} must be one-dimensional, got shape {x.shape}")
    if not np.all(np.isfinite(x)):
        raise ValueError(f"{name} must hold finite values only, got {int((~np.isfinite(x)).sum())}")
    return x


def group_samples(
    samples: Sequence[ArrayLike], labels: Sequence[str] | None
) -> tuple[list[np.ndarray], list[str]]:
    """Checked samples (at least 2) and their labels (``"0"``, ``"1"`` ... when not given).

    Examples
    --------
    >>> arrays, names = group_samples([[1, 2], [3, 4, 5]], None)
    >>> [a.size for a in arrays], names
    ([2, 3], ['0', '1'])
    """
    arrays = [finite_sample(s, f"samples[{i}]") for i, s in enumerate(samples)]
    if len(arrays) < 2:
        raise ValueError(f"samples must hold at least 2 groups, got {len(arrays)}")
    names = [str(i) for i in range(len(arrays))] if labels is None else [str(x) for x in labels]
    if len(names) != len(arrays):
        raise ValueError(f"labels must name each of the {len(arrays)} samples, got {len(names)}")
    return arrays, names


def too_few_subjects(arrays: Sequence[np.ndarray], names: Sequence[str]) -> str:
    """The reason a test is not estimable because a group is too small, else ``""``.

    Examples
    --------
    >>> too_few_subjects([np.ones(3), np.ones(1)], ["control", "acute"])
    'fewer than 2 subjects in acute (n=1)'
    """
    small = [f"{g} (n={a.size})" for a, g in zip(arrays, names, strict=True)]
    small = [s for s, a in zip(small, arrays, strict=True) if a.size < MIN_SUBJECTS_PER_GROUP]
    if small:
        return f"fewer than {MIN_SUBJECTS_PER_GROUP} subjects in {', '.join(small)}"
    return ""
