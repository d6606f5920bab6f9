"""Issue 12 items 8, 9, 13 (Python API): one number syntax, no silent loss of information.

References: Python's ``float`` accepts PEP 515 underscores (``float("1_000") == 1000.0``)
and non-ASCII digits, which a data file must not be read with (a fact of the trade);
NumPy's cast of complex to float drops the imaginary part with only a ComplexWarning
(numpy documentation of ``ndarray.astype``); scipy.sparse matrices and numpy masked arrays
convert to dense arrays without their structure / mask under ``np.asarray``.
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import scipy.sparse as sp

from paths import InputError, fit_path
from paths.data.tables import is_number_text, load_dataset, number_problem, parse_number


def _one_line(info):
    msg = str(info.value)
    assert msg and "\n" not in msg, msg
    return msg


@pytest.mark.parametrize("cell, kind", [("1_5", "underscore"), ("1_000", "underscore"),
                                        ("1+2j", "complex"), ("(1-2j)", "complex"),
                                        ("3j", "complex"), ("1,200", "thousands"),
                                        ("1,5", "decimal")])
def test_number_problems_named(tmp_path, cell, kind):
    assert not is_number_text(cell) and number_problem(cell) == kind
    f = tmp_path / "d.csv"
    f.write_text(f'a,b,y\n"{cell}",2,3\n"{cell}",3,4\n"{cell}",1,2\n')
    with pytest.raises(InputError) as info:
        load_dataset(f, "y")
    msg = _one_line(info)
    assert "'a'" in msg and "line 2" in msg


def test_underscore_in_target_refused_not_read_as_thousand(tmp_path):
    f = tmp_path / "d.csv"
    f.write_text("a,y\n1,2\n2,3\n3,1_000\n")
    assert float("1_000") == 1000.0  # what the reader used to do (PEP 515)
    with pytest.raises(InputError) as info:
        load_dataset(f, "y")
    assert "underscores" in _one_line(info) and "'y'" in str(info.value)


@pytest.mark.parametrize("text", ["1.5", "-2", "+3e-4", ".5", "5.", "inf", "-Infinity", "nan"])
def test_plain_numbers_still_read(text):
    # exact: both parse decimal text correctly rounded (IEEE 754, Python's float())
    assert parse_number(text) == pytest.approx(float(text), nan_ok=True, rel=0, abs=0)


def test_non_ascii_digits_are_not_numbers():
    assert float("\u0663") == 3.0 and not is_number_text("\u0663")


def test_fit_path_refuses_complex_instead_of_dropping_the_imaginary_part():
    rng = np.random.default_rng(0)
    X = rng.standard_normal((10, 3))
    y = X[:, 0].copy()
    for args in ((X + 1j, y), (X, y + 0.5j), (X.astype(object) + 1j, y)):
        with pytest.raises(InputError) as info:
            fit_path(*args)
        assert "complex" in _one_line(info)


def test_python_api_errors_have_the_right_type():
    rng = np.random.default_rng(1)
    X = rng.standard_normal((12, 3))
    y = X[:, 1] + 0.1 * rng.standard_normal(12)
    with pytest.raises(InputError, match="whole number"):
        fit_path(X, y, n_lambdas=2.5)
    with pytest.raises(InputError, match="duplicate column"):
        fit_path(pd.DataFrame(X, columns=["a", "a", "b"]), y)
    with pytest.raises(InputError, match="sparse"):
        fit_path(sp.csr_matrix(X), y)
    masked = np.ma.masked_array(X, mask=np.zeros_like(X, dtype=bool))
    masked.mask[3, 1] = True
    with pytest.raises(InputError, match="masked"):
        fit_path(masked, y)
    ok = fit_path(np.ma.masked_array(X), y, n_lambdas=5)  # nothing masked: the data
    np.testing.assert_array_equal(ok.coef, fit_path(X, y, n_lambdas=5).coef)
