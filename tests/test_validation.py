"""Boundary validation (paths/_validation.py).

Reference: the contract of the project's house rules — every bad input raises
``InputError`` (a ``ValueError``, as numpy/scikit-learn raise for bad values),
with one line naming the problem and the fix; good input passes unchanged
(compared with ``numpy.asarray(..., dtype=float64)``).
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_array_equal

from paths.data.validation import InputError, as_design, as_lambdas, as_response, feature_names_of


def _msg(fn, *args):
    with pytest.raises(InputError) as info:
        fn(*args)
    assert isinstance(info.value, ValueError)
    m = str(info.value)
    assert m and "\n" not in m
    return m


def test_good_input_passes_unchanged():
    X = np.arange(6.0).reshape(3, 2)
    assert_array_equal(as_design(X), np.asarray(X, dtype=np.float64))
    assert_array_equal(as_design(X.astype(np.int32)), X)
    assert_array_equal(as_response([1, 2, 3], 3), [1.0, 2.0, 3.0])
    assert as_response(np.ones((3, 2)), 3).shape == (3, 2)
    assert_array_equal(as_lambdas(0.5), [0.5])
    assert_array_equal(as_lambdas([0.0, 2.0]), [0.0, 2.0])


@pytest.mark.parametrize("bad,needle", [
    (np.arange(3.0), "1-D"),
    (np.zeros((0, 3)), "no rows"),
    (np.zeros((3, 0)), "no columns"),
    (np.zeros((2, 2, 2)), "2-D"),
    (np.array([[1.0, np.nan], [2.0, 3.0]]), "NaN"),
    (np.array([[1.0, np.inf], [2.0, 3.0]]), "infinite"),
    ([["a", "b"], ["c", "d"]], "not numeric"),
])
def test_as_design_rejects(bad, needle):
    assert needle in _msg(as_design, bad)


def test_as_design_names_dataframe_columns():
    df = pd.DataFrame({"good": [1.0, 2.0], "bad": [np.nan, 1.0]})
    assert "bad" in _msg(as_design, df)
    assert feature_names_of(df) == ["good", "bad"]
    assert feature_names_of(np.zeros((2, 2))) is None


@pytest.mark.parametrize("bad,n,needle", [
    (np.ones(4), 3, "4 rows"),
    (np.ones((3, 0)), 3, "no columns"),
    (np.ones((3, 1, 1)), 3, "1-D"),
    ([1.0, np.nan, 2.0], 3, "NaN"),
])
def test_as_response_rejects(bad, n, needle):
    assert needle in _msg(as_response, bad, n)


@pytest.mark.parametrize("bad,needle", [
    ([], "non-empty"),
    ([[1.0]], "1-D"),
    ([-1.0], ">= 0"),
    ([np.inf], "finite"),
    ([np.nan], "NaN"),
    ([1.0, np.nan], "NaN"),
    (["abc"], "numeric"),
])
def test_as_lambdas_rejects(bad, needle):
    assert needle in _msg(as_lambdas, bad)


@pytest.mark.parametrize("n,k,ok", [(4, 4, True), (5, 2, True), (3, 3, True), (4, 10, False),
                                    (2, 2, False), (3, 2, False)])
def test_check_rows_for_cv(n, k, ok):
    """K folds need K rows and, with an intercept, 2 training rows outside the largest fold
    (ceil(n/K) rows, as numpy.array_split makes them)."""
    from paths.data.validation import check_rows_for_cv

    largest = max(len(c) for c in np.array_split(np.arange(n), k)) if k <= n else n
    assert ok == (k <= n and n - largest >= 2)
    if ok:
        check_rows_for_cv(n, k, "f.csv")
    else:
        assert "f.csv" in _msg(check_rows_for_cv, n, k, "f.csv")
