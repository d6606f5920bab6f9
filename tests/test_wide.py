"""Wide engine (paths/wide.py): n x n Gram over column blocks, against outside references.

References named per test: scikit-learn ``Ridge`` (alpha = lambda, same
objective), numpy's SVD, the in-memory engine ``fit_path`` (itself checked
against NIST and scikit-learn in its own tests), and the randomized range
finder's exactness on matrices of rank <= K (Halko, Martinsson & Tropp 2011,
*SIAM Review* 53, sec. 1.3).  All data are synthetic, generated here with seeds.
"""
from __future__ import annotations

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from numpy.testing import assert_allclose
from sklearn.linear_model import Ridge

from error_bounds import (TargetView, check_same_min_norm, check_same_path, gamma, ridge_bounds)
from paths import InputError, fit_path
from paths.engines.wide import wide_path

# numerical reference checks against outside references: CI reruns them under a
# forced OpenBLAS kernel (.ci/run)
pytestmark = pytest.mark.reference

FIELDS = ["lambdas", "coef", "intercept", "df", "train_mse", "gcv", "loo_mse", "test_mse",
          "singular_values", "coef_norm"]
MN_FIELDS = ["coef", "intercept", "gcv", "loo_mse", "test_mse", "coef_norm"]


def problem(n=60, p=1500, *, t=None, seed=0):
    """Synthetic wide design: shifted, unequally scaled Gaussian columns, one constant column."""
    rng = np.random.default_rng(seed)
    X = rng.standard_normal((n, p)) * rng.uniform(0.5, 3.0, p) + rng.uniform(-5, 5, p)
    X[:, 7] = 2.5
    shape = (30,) if t is None else (30, t)
    y = 3.0 + X[:, :30] @ rng.standard_normal(shape) + rng.standard_normal(
        (n,) if t is None else (n, t))
    return X, y


def relerr(a, b):
    a, b = np.asarray(a, float), np.asarray(b, float)
    scale = np.max(np.abs(b))
    return float(np.max(np.abs(a - b)) / scale) if scale > 0 else float(np.max(np.abs(a)))


CASES = [dict(), dict(accurate=True), dict(standardize=False), dict(fit_intercept=False),
         dict(accurate=True, fit_intercept=False), dict(t=2)]


@pytest.mark.parametrize("case", CASES, ids=lambda c: "-".join(f"{k}={v}" for k, v in c.items()) or "default")
def test_equals_in_memory_engine(case):
    """Every path field (coefficients, criteria, test error, min-norm limit)
    equals the in-memory ``fit_path`` on data that fit, within the Gram route's bounds
    (error_bounds.check_same_path / check_same_min_norm: ridge_bounds with the kappa^2 term;
    the min-norm training error is 0 up to rounding at full row rank and is compared
    absolutely)."""
    case = dict(case)
    t = case.pop("t", None)
    X, y = problem(t=t)
    Xt, yt = problem(n=25, t=t, seed=9)
    kw = {k: case[k] for k in ("fit_intercept", "standardize") if k in case}
    ref = fit_path(X, y, X_test=Xt, y_test=yt, **kw)
    res = wide_path(X, y, X_test=Xt, y_test=yt, block_columns=400, **case)
    assert res.rank == ref.rank
    # bound: docstring, per target
    for j in ([None] if t is None else range(t)):
        yj = y if j is None else y[:, j]
        ytj = yt if j is None else yt[:, j]
        r_j, f_j = TargetView(res, j), TargetView(ref, j)
        check_same_path(r_j, f_j, X, yj, FIELDS, Xt=Xt, yt=ytj, **kw)
        check_same_min_norm(r_j, f_j, X, yj, Xt=Xt, yt=ytj, **kw)
        got = np.asarray(res.predict(Xt))
        want = np.asarray(ref.predict(Xt, ref.lambdas))
        for i, lam in enumerate(ref.lambdas):
            b = ridge_bounds(X, yj, lam, gram=True, **kw)
            gi = got[:, i] if j is None else got[:, i, j]
            wi = want[:, i] if j is None else want[:, i, j]
            assert_allclose(gi, wi, rtol=0, atol=b.predict_atol(Xt))
    assert res.factorization.vt.shape == (res.rank, 0)  # the p x n factor was never formed


def test_coefficients_against_sklearn_ridge():
    """Coefficients and intercepts equal scikit-learn ``Ridge(alpha=lambda)``
    on a wide design (unscaled): within ridge_bounds (the wide Gram route's term plus Ridge's
    SVD)."""
    X, y = problem(n=40, p=900, seed=1)
    lams = np.array([500.0, 5.0, 0.05])
    res = wide_path(X, y, lams, standardize=False, block_columns=256)
    for i, lam in enumerate(lams):
        sk = Ridge(alpha=lam, solver="svd").fit(X, y)
        # bound: docstring
        bg = ridge_bounds(X, y, lam, standardize=False, solvers=1, gram=True)
        bs = ridge_bounds(X, y, lam, standardize=False, solvers=1)
        assert np.linalg.norm(res.coef[i] - sk.coef_) <= (bg.coef + bs.coef) * bs.coef_norm
        assert_allclose(res.intercept[i], sk.intercept_, rtol=0, atol=bg.intercept + bs.intercept)


def test_parquet_column_blocks_with_target(tmp_path):
    """A wide Parquet file read a column group at a time (target column named,
    test file with the same columns) gives the array result (pyarrow as the reference
    reader): the bytes are read exactly, so within the Gram route's bounds of one problem."""
    X, y = problem(n=30, p=700, seed=2)
    Xt, yt = problem(n=10, p=700, seed=3)
    names = [f"g{j:04d}" for j in range(700)]

    def write(path, A, b):
        pq.write_table(pa.table({**{nm: A[:, j] for j, nm in enumerate(names)}, "resp": b}), path)

    write(tmp_path / "w.parquet", X, y)
    write(tmp_path / "t.parquet", Xt, yt)
    ref = wide_path(X, y, X_test=Xt, y_test=yt, block_columns=128)
    res = wide_path(tmp_path / "w.parquet", target="resp", X_test=tmp_path / "t.parquet",
                    block_columns=128)
    assert res.feature_names == names
    # bound: check_same_path (docstring)
    check_same_path(res, ref, X, y, ("coef", "gcv", "loo_mse", "test_mse", "singular_values"),
                    Xt=Xt, yt=yt)


def test_randomized_rank_exact_for_low_rank_design():
    """On a design of exact rank 12 the randomized range finder with K = 12 is
    exact (Halko et al. 2011, sec. 1.3): the path equals the full fit within the Gram route's
    bounds (check_same_path) and the captured share of ||Z||_F^2 is 1 up to the rounding
    of two sums of squares (reorder); the approximation warning is still issued."""
    rng = np.random.default_rng(4)
    X = rng.standard_normal((50, 12)) @ rng.standard_normal((12, 800))
    y = X[:, :5].sum(axis=1) + rng.standard_normal(50)
    ref = fit_path(X, y, standardize=False)
    with pytest.warns(UserWarning, match="approximations"):
        res = wide_path(X, y, ref.lambdas, rank=12, standardize=False, block_columns=300)
    assert res.rank == ref.rank == 12
    # bound: a ratio of two sums of squares of the same ~50 x 800 numbers, the numerator
    # through a rank-12 projection: gamma_n on each and Weyl's backward error of the range
    # finder's factorization (2 eps_b)
    from error_bounds import backward_eps
    assert_allclose(res.captured_share, 1.0, rtol=4 * gamma(X.size) + 2 * backward_eps(50, 800))
    check_same_path(res, ref, X, y, ("coef", "gcv", "loo_mse", "singular_values"),
                    standardize=False)
    assert res.approximate and any("approximations" in n for n in res.notes)


def test_randomized_rank_captured_share_against_numpy_svd():
    """With a decaying spectrum, the randomized top-K singular values and the
    captured share of ||Z||_F^2 agree with numpy's SVD of the centered scaled
    design to 1e-3 relative (two power iterations; Halko et al. 2011, Thm 10.6
    bound the error by the tail spectrum, here ~1e-6 of the top)."""
    rng = np.random.default_rng(5)
    n, p = 60, 1200
    X = (rng.standard_normal((n, 40)) * np.geomspace(30, 0.01, 40)) @ rng.standard_normal((40, p))
    X += 1e-4 * rng.standard_normal((n, p))
    y = X[:, 0] + rng.standard_normal(n)
    with pytest.warns(UserWarning):
        res = wide_path(X, y, rank=10, standardize=False, block_columns=500)
    Z = X - X.mean(axis=0)
    s = np.linalg.svd(Z, compute_uv=False)
    # spec: the randomized range finder's accuracy (Halko et al. 2011, Thm 10.6: bounded by
    # the tail spectrum, ~1e-6 of the top here); 1e-3 is the stated allowance of the route
    assert_allclose(res.singular_values, s[:10], rtol=1e-3)
    assert_allclose(res.captured_share, np.sum(s[:10] ** 2) / np.sum(s ** 2), rtol=1e-3)


@pytest.mark.parametrize("rank", [0, 60, 10_000])
def test_rank_outside_range_is_refused(rank):
    """--rank outside [1, min(n - 1, p)] raises a one-line InputError naming the range (issue 7)."""
    X, y = problem(n=60, p=300)
    with pytest.raises(InputError, match=r"\[1, 59\]") as ei:
        wide_path(X, y, rank=rank)
    assert "\n" not in str(ei.value)


def test_no_coefficient_pass():
    """``coefficients=False`` skips the pass: coef is None, the closed-form
    coefficient norm still equals the in-memory engine's (check_same_path)."""
    X, y = problem()
    ref = fit_path(X, y)
    res = wide_path(X, y, coefficients=False, block_columns=500)
    assert res.coef is None and len(res.passes) == 1
    check_same_path(res, ref, X, y, ("coef_norm",))  # bound: Gram route's bounds
    with pytest.raises(InputError, match="coefficients"):
        res.predict(X)
