"""Reference checks for :mod:`paths.core.grid` (effective df and the default grid).

References: effective degrees of freedom df(lam) = sum_j d_j^2/(d_j^2 + lam)
(Hastie, Tibshirani & Friedman, *The Elements of Statistical Learning*, 2nd ed.,
2009, eq. 3.50), checked against the trace of explicitly formed hat matrices
(numpy); root finding checked by evaluating the function at the root, not by
re-running a solver.
"""
from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings, strategies as st
from numpy.testing import assert_allclose

from error_bounds import U, backward_eps, explicit_hat_bound, gamma, ridge_bounds
from paths import fit_path
from paths.core.grid import default_grid, effective_df, lambda_for_df

# numerical reference checks against outside references: CI reruns them under a
# forced OpenBLAS kernel (.ci/run)
pytestmark = pytest.mark.reference


def test_effective_df_is_trace_of_penalized_hat_matrix():
    """effective_df(d, lam) equals tr[Xc (Xc^T Xc + lam I)^-1 Xc^T] (numpy, explicit
    hat matrix of the centered design; ESL eq. 3.50).  Tolerance: Weyl's bound on
    numpy's singular values carried through df (as in error_bounds.ridge_bounds) plus
    the explicit solve's error on each of the n diagonal entries (explicit_hat_bound)."""
    rng = np.random.default_rng(1)
    Xc = rng.standard_normal((30, 8)) * np.geomspace(0.1, 10, 8)
    Xc -= Xc.mean(axis=0)
    d = np.linalg.svd(Xc, compute_uv=False)
    lams = np.geomspace(1e-2, 1e4, 9)
    got = effective_df(d, lams)
    assert got.shape == (9,)
    for lam, g in zip(lams, got):
        H = Xc @ np.linalg.solve(Xc.T @ Xc + lam * np.eye(8), Xc.T)
        # bound: docstring
        dd = backward_eps(30, 8) * d[0]
        weyl = np.sum(2 * lam * d / (d**2 + lam) ** 2 * dd) + 2 * gamma(8) * g
        assert_allclose(g, np.trace(H), rtol=0,
                        atol=weyl + 30 * explicit_hat_bound(Xc, np.full(8, lam)))
    assert np.ndim(effective_df(d, 3.0)) == 0
    # exact: d^2 / (d^2 + 0) is exactly 1 for every term, and 8 ones sum exactly
    assert_allclose(effective_df(d, 0.0), 8.0, rtol=0)


def _brent_df_atol(d, lam):
    """|df(lam) - target| for lam from paths.core.grid.lambda_for_df: brentq's stopping
    tolerance on log lam (xtol 1e-12, rtol 4 eps; Brent stops within twice it) times
    |d df / d log lam|, plus the rounding of df's evaluation (gamma_{r+2} df) on both sides
    (the root finder sees a rounded df too)."""
    slope = np.sum(d**2 * lam / (d**2 + lam) ** 2)
    df = np.sum(d**2 / (d**2 + lam))
    return slope * 2 * (1e-12 + 8 * U * abs(np.log(lam))) + 2 * gamma(d.size + 2) * df


@pytest.mark.parametrize("target_frac", [0.01, 0.3, 0.5, 0.9, 0.999])
def test_lambda_for_df_inverts_effective_df(target_frac):
    """lambda_for_df(d, t) returns lam with effective_df(d, lam) = t (checked by
    evaluating df at the result, no second root finder).  Tolerance: Brent's
    method stops within twice its tolerance (xtol 1e-12 + rtol 4 eps |log lam|) of the
    root in log(lam), which moves df by |d df / d log lam| = sum d^2 lam / (d^2 + lam)^2
    times that; df's own evaluation rounds by gamma_r df on each side (_brent_df_atol)."""
    rng = np.random.default_rng(2)
    d = np.sort(rng.uniform(0.01, 100, 12))[::-1]
    t = target_frac * d.size
    lam = lambda_for_df(d, t)
    assert lam > 0
    # spec + bound: docstring
    assert_allclose(effective_df(d, lam), t, rtol=0, atol=_brent_df_atol(d, lam))
    with pytest.raises(ValueError):
        lambda_for_df(d, d.size)
    with pytest.raises(ValueError):
        lambda_for_df(d, 0.0)


@pytest.mark.parametrize("shape", [(60, 15), (30, 30), (25, 200)], ids=["p<n", "p=n", "p>n"])
def test_default_grid_spans_df_from_below_one_to_rank(make_problem, shape):
    """The default grid (issue 2: df from below 1 to within 1% of the rank):
    100 log-spaced penalties, largest first; the total df (tr H with the
    intercept's 1, checked at both ends against the explicit numpy hat matrix)
    starts at <= 1.5 (penalized part below one parameter) and ends within 1%
    of rank + 1 (penalized part >= 0.99 rank)."""
    n, p = shape
    X, y = make_problem(n, p, seed=3)
    res = fit_path(X, y)
    lam = res.lambdas
    assert lam.size == 100 and np.all(np.diff(lam) < 0)
    # log-spaced: constant ratio; bound: geomspace forms exp(x_k) with x_k rounded
    # (relative error |x_k| u after exp, plus an ulp), a division: 2 (|x| + 2) u + u
    ratios = lam[1:] / lam[:-1]
    x = np.abs(np.log(lam)).max()
    assert_allclose(ratios, ratios[0], rtol=2 * (2 * (x + 2) * U + U))
    # spec + bound: the largest penalty leaves penalized df 0.5 to brentq's tolerance
    d = res.singular_values
    assert res.df[0] <= 1.5 + _brent_df_atol(d, lam[0]) and res.df[0] > 1.0
    assert res.df[-1] - 1 >= 0.99 * res.rank
    assert res.df[-1] - 1 < res.rank
    # the ends against the explicit hat matrix trace (numpy)
    Xs = X / X.std(axis=0)
    X1 = np.column_stack([np.ones(n), Xs])
    for i in (0, -1):
        A = X1.T @ X1 + np.diag(np.r_[0.0, np.full(p, lam[i])])
        trH = np.trace(X1 @ np.linalg.solve(A, X1.T))
        # bound: ours (ridge_bounds.df, one solver) + the explicit solve's n entries
        atol = (ridge_bounds(X, y, lam[i], solvers=1).df
                + n * explicit_hat_bound(X1, np.r_[0.0, np.full(p, lam[i])]))
        assert_allclose(res.df[i], trH, rtol=0, atol=atol)
    # direct use of default_grid with a chosen size
    g = default_grid(res.singular_values, 7)
    assert g.size == 7
    # exact: the same root finder on the same singular values; geomspace keeps its ends
    assert_allclose(g[[0, -1]], lam[[0, -1]], rtol=0)


def test_default_grid_rank_one():
    """A single non-zero singular value: df runs from 0.5 to 0.995 (ESL eq. 3.50
    with r = 1, df = d^2/(d^2 + lam) solved in closed form: lam = d^2 (1/df - 1))."""
    d = np.array([3.0])
    g = default_grid(d, 5)
    # closed form inverse; spec + bound: Brent's stopping tolerance on log(lam) plus the
    # root's displacement by df's rounding (gamma_3 df / slope), plus the closed form's 3 u
    for lam, t in ((g[0], 0.5), (g[-1], 0.995)):
        slope = 9.0 * lam / (9.0 + lam) ** 2
        tol = 2 * (1e-12 + 8 * U * abs(np.log(lam))) + 2 * gamma(3) * t / slope + 3 * U
        assert_allclose(lam, 9.0 * (1 / t - 1), rtol=tol)


@settings(max_examples=30, deadline=None)
@given(r=st.integers(1, 40), seed=st.integers(0, 2**16), spread=st.floats(0, 8),
       frac=st.floats(0.001, 0.999))
def test_property_lambda_for_df(r, seed, spread, frac):
    """For random spectra spanning up to 8 decades, lambda_for_df returns a
    penalty whose df (evaluated directly) is the target within _brent_df_atol."""
    rng = np.random.default_rng(seed)
    d = np.sort(10.0 ** rng.uniform(-spread / 2, spread / 2, r))[::-1]
    t = frac * r
    lam = lambda_for_df(d, t)
    assert np.isfinite(lam) and lam > 0
    # spec + bound: _brent_df_atol
    assert abs(float(effective_df(d, lam)) - t) <= _brent_df_atol(d, lam)
