"""The order and display labels of a study's methods: one place for both.

Outputs show the reference first, then the test methods in the order ``[study] methods``
gives (default: their order of first appearance in the values table). Display labels come
from ``[study.method_labels]``; a method without a label is shown by its name. Tables keep
the names of the values table (a label is for reading, a name for joining).
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping

import pandas as pd

from cohort.domain.problems import Problem
from cohort.domain.rules import did_you_mean


def method_order(present: Iterable[object], reference: str, listed: Iterable[str] = ()) -> tuple:
    """The reference, then the test methods of ``present`` in ``listed`` order, then any
    not listed in their order of first appearance.

    Examples
    --------
    >>> method_order(["b", "ref", "a", "b"], "ref")
    ('ref', 'b', 'a')
    >>> method_order(["b", "ref", "a"], "ref", ["a", "b"])
    ('ref', 'a', 'b')
    """
    seen = [str(m) for m in dict.fromkeys(present) if str(m) != reference]
    listed = [m for m in listed if m in seen]
    return (reference, *listed, *[m for m in seen if m not in listed])


def method_problems(
    present: Iterable[object],
    reference: str,
    listed: tuple[str, ...],
    labels: Mapping[str, str],
    baseline: str | None,
    file: str,
) -> list[Problem]:
    """Problems of ``[study] methods``, ``[study.method_labels]`` and ``[acceptance]
    baseline`` against the test methods of the values table: a listed method that is
    absent, a test method that is not listed (when a list is given), a label or baseline
    naming no method."""
    tests = [str(m) for m in dict.fromkeys(present) if str(m) != reference]
    problems: list[Problem] = []

    def add(message: str, value: object, expected: str, column: str) -> None:
        problems.append(
            Problem(
                "study-option", message, file=file, column=column, value=str(value),
                expected=expected,
            )
        )  # fmt: skip

    for method in listed:
        if method not in tests:
            add(
                f"[study] methods names a method that is not a test method of the values "
                f"table{did_you_mean(method, tests)}",
                method, f"one of {tests}", "methods",
            )  # fmt: skip
    if listed:
        for method in tests:
            if method not in listed:
                add(
                    "[study] methods does not list a test method of the values table; list "
                    "every test method (in the order outputs should show them)",
                    method, "listed in [study] methods", "methods",
                )  # fmt: skip
    for method in labels:
        if method not in tests and method != reference and not listed:
            add(
                f"[study.method_labels] labels a method that is not in the values table"
                f"{did_you_mean(method, tests)}",
                method, f"one of {[reference, *tests]}", "method_labels",
            )  # fmt: skip
    if baseline is not None and baseline not in tests:
        add(
            f"[acceptance] baseline is not a test method of the values table"
            f"{did_you_mean(baseline, tests)}",
            baseline, f"one of {tests}", "baseline",
        )  # fmt: skip
    return problems


def ordered_methods(frame: pd.DataFrame, order: tuple, column: str = "method") -> None:
    """Make ``frame[column]`` a categorical whose categories follow ``order`` (in place), so
    that sorting and grouping give the study's order."""
    if column in frame.columns:
        kept = [m for m in order if m in set(frame[column].astype(str))]
        frame[column] = pd.Categorical(frame[column].astype(str), categories=kept)


def levels(column: pd.Series) -> list:
    """The values of ``column`` in the study's order: a categorical's categories that occur
    (the study's method order, :func:`ordered_methods`), else the order of first appearance.

    Examples
    --------
    >>> levels(pd.Series(pd.Categorical(["b", "a", "b"], categories=["b", "c", "a"])))
    ['b', 'a']
    >>> levels(pd.Series(["z", "a", "z"]))
    ['z', 'a']
    """
    if isinstance(column.dtype, pd.CategoricalDtype):
        present = set(column.dropna().unique())
        return [c for c in column.cat.categories if c in present]
    return list(pd.unique(column))
