"""Arrays or a DataFrame with column names: one mechanism for every paired estimator."""

from __future__ import annotations

import inspect

import numpy as np
import pandas as pd
import pytest

from cohort import stats as cs
from cohort.stats._data import accepts_data, columns_of, paired_arrays

PAIRED = {
    "limits_of_agreement": {"n_boot": 50, "seed": 3},
    "bias": {"n_boot": 50, "seed": 3},
    "subject_mean_limits": {"n_boot": 50, "seed": 3},
    "proportional_bias": {"n_boot": 50, "seed": 3, "regression_limits": True},
    "regression_based_limits": {"n_boot": 50, "seed": 3},
    "concordance_correlation": {"n_boot": 50, "seed": 3},
    "icc_agreement": {"n_boot": 50, "seed": 3},
    "pearson": {"n_boot": 50, "seed": 3},
    "spearman": {"n_boot": 50, "seed": 3},
    "repeated_measures_correlation": {"n_boot": 50, "seed": 3},
    "passing_bablok": {"n_boot": 50, "seed": 3},
    "deming": {"n_boot": 50, "seed": 3},
}


def frame() -> pd.DataFrame:
    """Invented cohort: 8 subjects x 4 segments, subject labels as text (common practice)."""
    rng = np.random.default_rng(12)
    subject = np.repeat([f"P{i:02d}" for i in range(8)], 4)
    truth = np.repeat(rng.normal(10, 2, 8), 4) + rng.normal(0, 1, 32)
    return pd.DataFrame(
        {
            "ref": np.round(truth + rng.normal(0, 0.3, 32), 2),
            "new": np.round(0.4 + 1.05 * truth + rng.normal(0, 0.3, 32), 2),
            "who": subject,
        }
    )


@pytest.mark.parametrize("name", sorted(PAIRED))
def test_dataframe_call_equals_array_call_exactly(name):
    df = frame()
    fn = getattr(cs, name)
    options = PAIRED[name]
    by_arrays = fn(df["ref"].to_numpy(), df["new"].to_numpy(), subject=df["who"], **options)
    by_columns = fn(data=df, reference="ref", test="new", subject="who", **options)
    positional = fn("ref", "new", data=df, subject="who", **options)
    assert by_columns == by_arrays == positional
    pd.testing.assert_frame_equal(by_columns.to_frame(), by_arrays.to_frame())


@pytest.mark.parametrize("name", sorted(PAIRED))
def test_every_paired_estimator_shows_data_in_its_signature(name):
    parameters = inspect.signature(getattr(cs, name)).parameters
    assert parameters["data"].default is None
    assert parameters["data"].kind is inspect.Parameter.KEYWORD_ONLY
    assert list(parameters)[:2] == ["reference", "test"]


@pytest.mark.parametrize("name", sorted(PAIRED))
def test_unknown_column_is_named_with_the_columns(name):
    fn = getattr(cs, name)
    with pytest.raises(ValueError, match=r"test: data has no column 'nwe'; its columns are \["):
        fn(data=frame(), reference="ref", test="nwe", subject="who", n_boot=0)


@pytest.mark.parametrize("name", sorted(PAIRED))
def test_with_data_a_column_argument_must_be_a_name(name):
    df = frame()
    fn = getattr(cs, name)
    with pytest.raises(ValueError, match=r"subject must be a column name \(str\) when data is"):
        fn(data=df, reference="ref", test="new", subject=df["who"].to_numpy(), n_boot=0)


@pytest.mark.parametrize("name", sorted(PAIRED))
def test_arrays_of_different_lengths_are_refused(name):
    fn = getattr(cs, name)
    x = np.arange(1.0, 9.0)
    with pytest.raises(ValueError, match="reference and test must have the same length, got 8"):
        fn(x, x[:-1], subject=np.repeat([1, 2], 4), n_boot=0)
    with pytest.raises(ValueError, match="subject must have one"):
        fn(x, x + 0.5, subject=[1, 2, 3], n_boot=0)


def test_data_must_be_a_dataframe():
    with pytest.raises(ValueError, match="data must be a pandas DataFrame, got dict"):
        cs.pearson(data={"ref": [1, 2, 3]}, reference="ref", test="ref")


def test_columns_of_keeps_none_and_returns_numpy_arrays():
    df = frame()
    got = columns_of(df, reference="ref", test="new", subject=None)
    assert got["subject"] is None
    np.testing.assert_array_equal(got["reference"], df["ref"].to_numpy())
    assert isinstance(got["test"], np.ndarray)


def test_decorator_passes_array_calls_through_unchanged():
    calls = []

    @accepts_data
    def estimator(reference, test, *, subject=None, option=1):
        calls.append((reference, test, subject, option))
        return option

    marker = object()
    assert estimator(marker, marker, option=2) == 2
    assert calls[-1] == (marker, marker, None, 2)  # the very objects, not converted
    df = pd.DataFrame({"a": [1.0], "b": [2.0]})
    estimator(data=df, reference="a", test="b")
    assert calls[-1][0].tolist() == [1.0] and calls[-1][2] is None


@pytest.mark.parametrize(
    ("reference", "test", "match"),
    [
        ([1.0, np.nan], [1.0, 2.0], "reference must hold finite values only, got 1 non-finite"),
        ([1.0, 2.0], [1.0, np.inf], "test must hold finite values only"),
        ([[1.0, 2.0]], [[1.0, 2.0]], "reference must be one-dimensional"),
        ([1.0, 2.0], [1.0], "reference and test must have the same length, got 2 and 1"),
    ],
)
def test_paired_arrays_errors_name_the_argument(reference, test, match):
    with pytest.raises(ValueError, match=match):
        paired_arrays(reference, test)


def test_series_with_different_indexes_are_refused_not_paired_by_position():
    """pandas users expect alignment by index; pairing by position would silently pair the
    wrong values, so differing indexes are an error (equal ones are fine)."""
    import pandas as pd

    from cohort.stats import bias

    ref = pd.Series([1.0, 2.0, 3.0, 4.0], index=[0, 1, 2, 3])
    test = pd.Series([1.5, 2.5, 3.0, 4.5], index=[3, 2, 1, 0])
    with pytest.raises(ValueError, match="different indexes"):
        bias(ref, test, n_boot=0)
    same = bias(ref, test.sort_index(), n_boot=0)
    assert same.estimate == pytest.approx(float((test.sort_index() - ref).mean()))
