"""Reference checks for :mod:`paths.core.path` (the ridge path and its criteria).

Every test names its outside reference in its docstring: scikit-learn
(``Ridge``, ``RidgeCV``, ``StandardScaler``), numpy (explicit hat matrices,
``pinv``, ``lstsq``), mpmath (50-digit solves), or a published formula.
"""
from __future__ import annotations

import mpmath
import numpy as np
import pytest
from hypothesis import given, settings, strategies as st
from numpy.testing import assert_allclose
from sklearn.linear_model import Ridge, RidgeCV
from sklearn.preprocessing import StandardScaler

from error_bounds import (U, explicit_hat_bound, gamma, limit_gap, refit_errors, refit_loo_rtol,
                          reorder_bound, ridge_bounds)
from paths import fit_path
from paths.data.validation import InputError

# numerical reference checks (mpmath, scikit-learn, numpy, published bounds): CI reruns
# them under a forced OpenBLAS kernel (.ci/run)
pytestmark = pytest.mark.reference

EPS = np.finfo(np.float64).eps

# Shapes: p < n, p = n, p > n.  With an intercept the centered design has rank
# min(n - 1, p), so p = n is one past the interpolation threshold p = n - 1.
SHAPES = [(60, 15), (30, 30), (25, 70)]
SHAPE_IDS = ["p<n", "p=n", "p>n"]


# --------------------------------------------------------------------- helpers
def sk_reference(X, y, lam, *, fit_intercept=True, standardize=True):
    """scikit-learn Ridge at penalty ``lam`` in our convention.

    With standardization the reference is Ridge fitted on StandardScaler(X)
    (population SD, ddof=0); its coefficients are mapped back to the original
    scale by dividing by ``scaler.scale_`` and the intercept becomes
    ``intercept_ - mean_ @ coef``.  Without an intercept the scaler does not
    center (``with_mean=False``; it still divides by the population SD).
    Returns (coef (p,)[, t], intercept, fitted model, transform).
    """
    if standardize:
        scaler = StandardScaler(with_mean=fit_intercept).fit(X)
        Xs = scaler.transform(X)
    else:
        scaler, Xs = None, X
    model = Ridge(alpha=lam, fit_intercept=fit_intercept, solver="svd").fit(Xs, y)
    coef = model.coef_.T  # (p,) or (p, t)
    if scaler is None:
        return coef, model.intercept_, model, (lambda A: A)
    scale = scaler.scale_ if y.ndim == 1 else scaler.scale_[:, None]
    coef = coef / scale
    icpt = model.intercept_
    if fit_intercept:
        icpt = icpt - scaler.mean_ @ coef
    return coef, icpt, model, scaler.transform


def rel_err(a, ref):
    """Norm-wise relative error ||a - ref|| / ||ref||."""
    return np.linalg.norm(np.asarray(a) - ref) / np.linalg.norm(ref)


def hat_matrix(Xs, lam, fit_intercept=True):
    """Explicit hat matrix H = X1 (X1^T X1 + diag(0, lam I))^-1 X1^T, X1 = [1, Xs] (numpy)."""
    n, p = Xs.shape
    X1 = np.column_stack([np.ones(n), Xs]) if fit_intercept else Xs
    pen = np.full(X1.shape[1], float(lam))
    if fit_intercept:
        pen[0] = 0.0
    A = X1.T @ X1 + np.diag(pen)
    return X1 @ np.linalg.solve(A, X1.T)


def standardized(X):
    """Population-SD standardization (numpy, ddof=0) without centering; the
    intercept column of the hat matrix absorbs the mean."""
    return X / X.std(axis=0)


# ------------------------------------------------ coefficients against Ridge
@pytest.mark.parametrize("standardize", [False, True], ids=["raw", "std"])
@pytest.mark.parametrize("shape", SHAPES, ids=SHAPE_IDS)
def test_coef_intercept_match_sklearn_ridge(make_problem, shape, standardize):
    """Coefficients and intercepts at all 30 default-grid penalties (df from 0.5
    to 0.995 rank) equal scikit-learn ``Ridge(alpha=lam)`` (reference:
    scikit-learn; StandardScaler for the standardized objective), within the
    Wedin bound of two backward-stable solvers (error_bounds.ridge_bounds)."""
    n, p = shape
    X, y = make_problem(n, p, seed=n + p)
    res = fit_path(X, y, standardize=standardize, n_lambdas=30)
    assert res.lambdas.size >= 20
    for i, lam in enumerate(res.lambdas):
        coef, icpt, _, _ = sk_reference(X, y, lam, standardize=standardize)
        # bound: both solvers backward stable, Wedin / Higham Thm 20.1 with the
        # ridge condition number (ridge_bounds)
        b = ridge_bounds(X, y, lam, standardize=standardize)
        assert rel_err(res.coef[i], coef) <= b.coef, (i, lam)
        assert_allclose(res.intercept[i], icpt, rtol=0, atol=b.intercept)


@pytest.mark.parametrize("standardize", [False, True], ids=["raw", "std"])
@pytest.mark.parametrize("shape", [(50, 12), (20, 45)], ids=["p<n", "p>n"])
def test_multi_target_matches_sklearn_ridge_2d(make_problem, shape, standardize):
    """A response with t = 3 columns: every path array gains a target axis and
    each target's coefficients/intercepts equal scikit-learn ``Ridge`` fitted on
    the 2-D y (reference: scikit-learn), within ridge_bounds per target."""
    n, p = shape
    X, Y = make_problem(n + 10, p, seed=7, t=3)
    X, Xt, Y, Yt = X[:n], X[n:], Y[:n], Y[n:]
    lams = np.geomspace(1e3, 1e-3, 21)
    res = fit_path(X, Y, lams, standardize=standardize, X_test=Xt, y_test=Yt,
                   return_fitted=True)
    assert res.coef.shape == (21, p, 3) and res.intercept.shape == (21, 3)
    assert res.gcv.shape == res.loo_mse.shape == res.train_mse.shape == (21, 3)
    assert res.test_mse.shape == (21, 3) and res.fitted.shape == (21, n, 3)
    for i, lam in enumerate(lams):
        coef, icpt, model, tr = sk_reference(X, Y, lam, standardize=standardize)
        ptest = model.predict(tr(Xt))
        for j in range(3):
            # bound: two backward-stable solvers, Wedin (ridge_bounds) per target
            b = ridge_bounds(X, Y[:, j], lam, standardize=standardize)
            assert rel_err(res.coef[i, :, j], coef[:, j]) <= b.coef
            assert_allclose(res.intercept[i, j], icpt[j], rtol=0, atol=b.intercept)
            assert_allclose(res.fitted[i, :, j], model.predict(tr(X))[:, j], rtol=0,
                            atol=b.fitted)
            assert_allclose(res.test_mse[i, j], np.mean((Yt[:, j] - ptest[:, j]) ** 2),
                            rtol=b.test_mse_rtol(Xt, Yt[:, j], ptest[:, j]))
            assert_allclose(res.predict(Xt, lam)[:, j], ptest[:, j], rtol=0,
                            atol=b.predict_atol(Xt))
    # each target alone gives the same path as the joint fit (same factorization)
    single = fit_path(X, Y[:, 1], lams, standardize=standardize)
    # bound: the same factorization, so the same expressions up to the order of
    # BLAS reductions over n rows / p columns (reorder_bound, Higham 3.1) --
    # except that one joint factorization vs a single-column one may pick
    # another blocking: the factor itself then differs by one backward-stable
    # SVD, hence the Wedin bound of two solvers
    for i, lam in enumerate(lams):
        b = ridge_bounds(X, Y[:, 1], lam, standardize=standardize)
        assert rel_err(single.coef[i], res.coef[i, :, 1]) <= b.coef
        assert_allclose(single.gcv[i], res.gcv[i, 1], rtol=b.gcv)
        assert_allclose(single.loo_mse[i], res.loo_mse[i, 1], rtol=b.loo)


@pytest.mark.parametrize("standardize", [False, True], ids=["raw", "std"])
@pytest.mark.parametrize("shape", [(40, 10), (30, 30), (20, 50)], ids=SHAPE_IDS)
def test_no_intercept_matches_sklearn_ridge(make_problem, shape, standardize):
    """``fit_intercept=False`` equals scikit-learn ``Ridge(fit_intercept=False)``
    (on ``StandardScaler(with_mean=False)`` columns when standardizing), relative
    error <= 1e-8 at 25 penalties; the intercept is exactly 0."""
    n, p = shape
    X, y = make_problem(n, p, seed=3)
    lams = np.geomspace(1e4, 1e-4, 25)
    res = fit_path(X, y, lams, fit_intercept=False, standardize=standardize)
    assert np.all(res.intercept == 0.0)
    for i, lam in enumerate(lams):
        coef, _, _, _ = sk_reference(X, y, lam, fit_intercept=False, standardize=standardize)
        # bound: two backward-stable solvers (ridge_bounds, Wedin)
        b = ridge_bounds(X, y, lam, fit_intercept=False, standardize=standardize)
        assert rel_err(res.coef[i], coef) <= b.coef
    # df without an intercept: trace of the explicit hat matrix (no 1 added)
    Xs = standardized(X) if standardize else X
    for i in (0, 12, 24):
        H = hat_matrix(Xs, lams[i], fit_intercept=False)
        # bound: our df (Weyl, ridge_bounds.df) plus the explicit solve's error
        # on H (explicit_hat_bound) summed over the n diagonal entries
        b = ridge_bounds(X, y, lams[i], fit_intercept=False, standardize=standardize, solvers=1)
        dh = explicit_hat_bound(Xs, np.full(p, lams[i]))
        assert_allclose(res.df[i], np.trace(H), rtol=0, atol=b.df + n * dh)


# ---------------------------------------------- train / test / predict / coef_at
@pytest.mark.parametrize("standardize", [False, True], ids=["raw", "std"])
@pytest.mark.parametrize("shape", SHAPES, ids=SHAPE_IDS)
def test_train_test_mse_and_fitted_match_sklearn(make_problem, shape, standardize):
    """``train_mse``, ``test_mse`` and ``fitted`` equal the mean squared errors
    and predictions of scikit-learn ``Ridge`` on the training and a test set
    (reference: scikit-learn), within ridge_bounds."""
    n, p = shape
    X, y = make_problem(n + 40, p, seed=11)
    X, Xt, y, yt = X[:n], X[n:], y[:n], y[n:]
    lams = np.geomspace(1e3, 1e-3, 20)
    res = fit_path(X, y, lams, standardize=standardize, X_test=Xt, y_test=yt,
                   return_fitted=True)
    assert res.n_test == 40
    for i, lam in enumerate(lams):
        _, _, model, tr = sk_reference(X, y, lam, standardize=standardize)
        fit = model.predict(tr(X))
        # bound: two backward-stable solvers (ridge_bounds): fitted values
        # entrywise, the MSE from the residual's Wedin bound (relative to the
        # residual: near interpolation it is tiny, and so is what may move)
        b = ridge_bounds(X, y, lam, standardize=standardize)
        assert_allclose(res.fitted[i], fit, rtol=0, atol=b.fitted)
        mse = np.mean((y - fit) ** 2)
        assert_allclose(res.train_mse[i], mse, rtol=b.mse)
        ptest = model.predict(tr(Xt))
        assert_allclose(res.test_mse[i], np.mean((yt - ptest) ** 2),
                        rtol=b.test_mse_rtol(Xt, yt, ptest))


@pytest.mark.parametrize("standardize", [False, True], ids=["raw", "std"])
@pytest.mark.parametrize("shape", [(50, 12), (20, 45)], ids=["p<n", "p>n"])
def test_predict_and_coef_at_off_grid(make_problem, shape, standardize):
    """``predict(X, lam)`` and ``coef_at(lam)`` at penalties not on the grid
    equal scikit-learn ``Ridge(alpha=lam)`` (reference: scikit-learn), within
    ridge_bounds; scalar and sequence forms agree."""
    n, p = shape
    X, y = make_problem(n + 15, p, seed=5)
    X, Xnew, y = X[:n], X[n:], y[:n]
    res = fit_path(X, y, n_lambdas=30, standardize=standardize)
    off = np.sqrt(res.lambdas[3:-1:5] * res.lambdas[4::5])  # geometric midpoints
    assert not np.isin(off, res.lambdas).any()
    pred_seq = res.predict(Xnew, off)
    coef_seq = res.coef_at(off)
    assert pred_seq.shape == (15, off.size) and coef_seq.shape == (off.size, p)
    for i, lam in enumerate(off):
        coef, icpt, model, tr = sk_reference(X, y, lam, standardize=standardize)
        # bound: two backward-stable solvers (ridge_bounds, Wedin)
        b = ridge_bounds(X, y, lam, standardize=standardize)
        assert rel_err(res.coef_at(lam), coef) <= b.coef
        assert rel_err(coef_seq[i], coef) <= b.coef
        ref = model.predict(tr(Xnew))
        assert_allclose(res.predict(Xnew, lam), ref, rtol=0, atol=b.predict_atol(Xnew))
        assert_allclose(pred_seq[:, i], ref, rtol=0, atol=b.predict_atol(Xnew))
    # a pandas DataFrame works as well and names the features
    import pandas as pd

    frame = pd.DataFrame(X, columns=[f"g{j}" for j in range(p)])
    named = fit_path(frame, y, off, standardize=standardize)
    assert named.feature_names == list(frame.columns)
    # bound: the same problem, but the frame's array may have another memory
    # layout, so LAPACK may block the SVD differently: two backward-stable
    # factorizations (ridge_bounds, Wedin)
    for i, lam in enumerate(off):
        assert rel_err(named.coef[i], coef_seq[i]) <= ridge_bounds(X, y, lam,
                                                                   standardize=standardize).coef


# ------------------------------------------------------------------ df and GCV
@pytest.mark.parametrize("standardize", [False, True], ids=["raw", "std"])
@pytest.mark.parametrize("shape", [(40, 10), (30, 30), (20, 50)], ids=SHAPE_IDS)
def test_df_and_gcv_against_explicit_hat_matrix(make_problem, shape, standardize):
    """df = tr H and GCV = n RSS / (n - tr H)^2 (Golub, Heath & Wahba 1979,
    Technometrics 21) with H = X1 (X1^T X1 + diag(0, lam I))^-1 X1^T formed
    explicitly in numpy (X1 = [1, X]); the intercept's 1 is part of tr H."""
    n, p = shape
    X, y = make_problem(n, p, seed=21)
    lams = np.geomspace(1e3, 1e-2, 22)
    res = fit_path(X, y, lams, standardize=standardize)
    Xs = standardized(X) if standardize else X
    for i, lam in enumerate(lams):
        H = hat_matrix(Xs, lam)
        trH = np.trace(H)
        e = y - H @ y
        # bound: ours (ridge_bounds, one solver) plus the explicit solve's
        # error on H (explicit_hat_bound): n entries in the trace, ||dH|| ||y||
        # in the residual, 2 |d tr H| / (n - tr H) in GCV's denominator
        b = ridge_bounds(X, y, lam, standardize=standardize, solvers=1)
        dh = explicit_hat_bound(np.column_stack([np.ones(n), Xs]), np.r_[0.0, np.full(p, lam)])
        q = dh * np.linalg.norm(y) / np.linalg.norm(e)
        assert_allclose(res.df[i], trH, rtol=0, atol=b.df + n * dh)
        gcv = n * (e @ e) / (n - trH) ** 2
        assert_allclose(res.gcv[i], gcv, rtol=b.gcv + 2 * q + q * q + 2 * (b.df + n * dh) / (n - trH))
        assert_allclose(res.train_mse[i], (e @ e) / n, rtol=b.mse + 2 * q + q * q)
    assert np.all(np.diff(res.df) > 0)  # descending lambdas -> df increasing
    # bound: the same sum of r same-sign terms up to order (reorder_bound,
    # one division per term) -- the 1 of the intercept is exact
    assert_allclose(res.df[-1] - 1, np.sum(res.singular_values**2 /
                                           (res.singular_values**2 + lams[-1])),
                    rtol=reorder_bound(res.rank, ops=2) + 2 * U * res.df[-1] / (res.df[-1] - 1))


def test_gcv_against_sklearn_fitted_values(make_problem):
    """GCV from scikit-learn ``Ridge`` fitted values and the explicit trace:
    GCV = n RSS / (n - df)^2 (Golub, Heath & Wahba 1979) with RSS from Ridge's
    predictions, within ridge_bounds plus the explicit hat's error."""
    X, y = make_problem(35, 80, seed=4)
    res = fit_path(X, y, n_lambdas=25)
    Xs = standardized(X)
    for i, lam in enumerate(res.lambdas):
        _, _, model, tr = sk_reference(X, y, lam)
        rss = np.sum((y - model.predict(tr(X))) ** 2)
        trH = np.trace(hat_matrix(Xs, lam))
        # bound: ridge_bounds (two solvers: ours and Ridge's residual) plus the
        # explicit trace's error (explicit_hat_bound, n diagonal entries)
        b = ridge_bounds(X, y, lam)
        dt = b.df + 35 * explicit_hat_bound(np.column_stack([np.ones(35), Xs]),
                                            np.r_[0.0, np.full(80, lam)])
        assert_allclose(res.gcv[i], 35 * rss / (35 - trH) ** 2, rtol=b.gcv + 2 * dt / (35 - trH))


# ------------------------------------------------------------ leave-one-out
def brute_force_loo(X, y, lam, standardize):
    """Mean squared LOO error from n refits of scikit-learn Ridge on n - 1 rows.

    The preprocessing that is not part of the fitted model stays fixed: the
    column scales come from all n rows (as in our closed form, which is exact for
    a linear smoother with fixed preprocessing); the intercept (centering) is
    re-estimated on every n - 1 subset by Ridge itself.
    """
    Xs = standardized(X) if standardize else X
    n = X.shape[0]
    err = np.empty(n)
    for i in range(n):
        keep = np.arange(n) != i
        m = Ridge(alpha=lam, solver="svd").fit(Xs[keep], y[keep])
        err[i] = y[i] - m.predict(Xs[i:i + 1])[0]
    return np.mean(err**2)


@pytest.mark.parametrize("standardize", [False, True], ids=["raw", "std"])
@pytest.mark.parametrize("shape", [(20, 6), (15, 40)], ids=["p<n", "p>n"])
def test_loo_against_brute_force_refits(make_problem, shape, standardize):
    """Leave-one-out MSE equals n brute-force refits of scikit-learn ``Ridge``
    on n - 1 rows (reference: scikit-learn), within the bound of the closed
    form (ridge_bounds.loo) plus that of the refits (refit_loo_rtol)."""
    n, p = shape
    X, y = make_problem(n, p, seed=13)
    lams = np.geomspace(1e2, 1e-3, 6)
    res = fit_path(X, y, lams, standardize=standardize)
    Xs = standardized(X) if standardize else X
    for i, lam in enumerate(lams):
        # bound: closed form (one solver) + n backward-stable refits
        tol = ridge_bounds(X, y, lam, standardize=standardize, solvers=1).loo
        tol += refit_loo_rtol(Xs, y, lam)
        assert_allclose(res.loo_mse[i], brute_force_loo(X, y, lam, standardize), rtol=tol)


def test_min_norm_loo_against_brute_force_pinv_refits(make_problem):
    """At p > n the lam -> 0+ limit of the LOO MSE equals the LOO error of the
    minimum-norm interpolant refitted on each n - 1 subset (numpy ``pinv`` on
    the centered subset, intercept = mean(y) - mean(x)^T beta): ridge converges
    to the minimum-norm fit for every design as lam -> 0+ (Hoerl & Kennard
    1970; a fact of linear algebra)."""
    n, p = 14, 30
    X, y = make_problem(n, p, seed=17)
    res = fit_path(X, y, [1.0], standardize=False)
    err = np.empty(n)
    for i in range(n):
        k = np.arange(n) != i
        xm, ym = X[k].mean(axis=0), y[k].mean()
        beta = np.linalg.pinv(X[k] - xm) @ (y[k] - ym)
        err[i] = y[i] - (ym + (X[i] - xm) @ beta)
    # bound: the closed-form limit (ridge_bounds at lam = 0, one solver) plus
    # n backward-stable minimum-norm refits (refit_loo_rtol at lam = 0)
    tol = ridge_bounds(X, y, 0.0, standardize=False, solvers=1).loo + refit_loo_rtol(X, y, 0.0)
    assert_allclose(res.min_norm.loo_mse, np.mean(err**2), rtol=tol)


@pytest.mark.parametrize("shape", [(12, 30), (20, 5)], ids=["p>n", "p<n-rank-deficient"])
def test_min_norm_loo_without_intercept_against_pinv_refits(shape):
    """Without an intercept, the lam -> 0+ LOO limit equals the LOO error of
    numpy ``pinv`` minimum-norm refits on each n - 1 subset (p > n, and p < n
    with an exactly collinear column), within ridge_bounds + refit_loo_rtol."""
    n, p = shape
    rng = np.random.default_rng(2)
    X = rng.standard_normal((n, p))
    if p < n:
        X = np.column_stack([X, X[:, 0] + X[:, 1]])
    y = rng.standard_normal(n)
    res = fit_path(X, y, [0.0], fit_intercept=False, standardize=False)
    err = np.empty(n)
    for i in range(n):
        k = np.arange(n) != i
        err[i] = y[i] - X[i] @ (np.linalg.pinv(X[k]) @ y[k])
    # bound: the closed-form limit (one solver) plus n minimum-norm refits
    tol = (ridge_bounds(X, y, 0.0, standardize=False, fit_intercept=False, solvers=1).loo
           + refit_loo_rtol(X, y, 0.0, fit_intercept=False))
    assert_allclose(res.min_norm.loo_mse, np.mean(err**2), rtol=tol)
    # exact: the grid's lam = 0 is documented as the lam -> 0+ limit and is
    # filled from the same min_norm arrays (a copy, no arithmetic)
    assert_allclose(res.loo_mse[0], res.min_norm.loo_mse, rtol=0, atol=0)


@pytest.mark.parametrize("standardize", [False, True], ids=["raw", "std"])
@pytest.mark.parametrize("shape", [(40, 12), (30, 30), (25, 60)], ids=SHAPE_IDS)
def test_loo_against_sklearn_ridgecv(make_problem, shape, standardize):
    """Leave-one-out MSE per penalty equals scikit-learn ``RidgeCV(alphas=...,
    store_cv_results=True)``: with ``scoring=None`` its ``cv_results_`` holds the
    squared LOO errors per sample and alpha, computed in closed form with the
    intercept unpenalized and re-estimated (our convention), on the columns
    pre-scaled by the full-data population SD when standardizing; within our
    bound plus that of RidgeCV's route (an SVD of X when n > p, an eigen-
    decomposition of X X^T otherwise: the Gram bound)."""
    n, p = shape
    X, y = make_problem(n, p, seed=29)
    lams = np.geomspace(1e3, 1e-2, 24)
    res = fit_path(X, y, lams, standardize=standardize)
    Xs = standardized(X) if standardize else X
    cv = RidgeCV(alphas=lams, store_cv_results=True).fit(Xs, y)
    loo = cv.cv_results_.mean(axis=0)  # (n_alphas,)
    assert cv.cv_results_.shape == (n, lams.size)
    for i, lam in enumerate(lams):
        # bound: ours (ridge_bounds, one solver) + RidgeCV's (Gram route bound,
        # which covers its SVD route too)
        tol = (ridge_bounds(X, y, lam, standardize=standardize, solvers=1).loo
               + ridge_bounds(Xs, y, lam, standardize=False, solvers=1, gram=True).loo)
        assert_allclose(res.loo_mse[i], loo[i], rtol=tol)
    # the selected penalty agrees
    assert lams[res.index_min("loo")] == cv.alpha_


def test_loo_multi_target_against_sklearn_ridgecv(make_problem):
    """Multi-target LOO equals ``RidgeCV(store_cv_results=True)`` with a 2-D y
    (``cv_results_`` of shape (n, t, n_alphas)), within our bound plus
    RidgeCV's (Gram route, p > n)."""
    X, Y = make_problem(30, 50, seed=31, t=2)
    lams = np.geomspace(1e2, 1e-2, 20)
    res = fit_path(X, Y, lams, standardize=False)
    cv = RidgeCV(alphas=lams, store_cv_results=True).fit(X, Y)
    ref = cv.cv_results_.mean(axis=0).T
    for i, lam in enumerate(lams):
        for j in range(2):
            # bound: ours (one solver) + RidgeCV's eigendecomposition of X X^T
            tol = (ridge_bounds(X, Y[:, j], lam, standardize=False, solvers=1).loo
                   + ridge_bounds(X, Y[:, j], lam, standardize=False, solvers=1, gram=True).loo)
            assert_allclose(res.loo_mse[i, j], ref[i, j], rtol=tol)


@pytest.mark.parametrize("fit_intercept", [True, False], ids=["intercept", "no-intercept"])
def test_loo_across_row_blocks_against_sklearn_ridgecv(fit_intercept):
    """n = 4100 rows, more than one block of the blocked LOO computation: the LOO
    MSE still equals scikit-learn ``RidgeCV(store_cv_results=True)`` (with and
    without an intercept), within our bound plus RidgeCV's."""
    rng = np.random.default_rng(37)
    X = rng.standard_normal((4100, 6)) + 1.0
    y = X @ rng.standard_normal(6) + 2.0 + rng.standard_normal(4100)
    lams = np.geomspace(1e4, 1e-2, 8)
    res = fit_path(X, y, lams, standardize=False, fit_intercept=fit_intercept)
    cv = RidgeCV(alphas=lams, store_cv_results=True, fit_intercept=fit_intercept).fit(X, y)
    ref = cv.cv_results_.mean(axis=0)
    for i, lam in enumerate(lams):
        # bound: ours (one solver) + RidgeCV's (Gram bound covers its SVD route)
        tol = sum(ridge_bounds(X, y, lam, standardize=False, fit_intercept=fit_intercept,
                               solvers=1, gram=g).loo for g in (False, True))
        assert_allclose(res.loo_mse[i], ref[i], rtol=tol)


def test_loo_with_a_leverage_one_sample(make_problem):
    """A rank-deficient p < n design with a sample of leverage one (a column
    that is non-zero on that sample only): the LOO MSE equals brute-force
    scikit-learn ``Ridge`` refits at lam > 0 and, at the lam -> 0+ limit,
    minimum-norm refits by numpy ``pinv`` on each n - 1 subset (within
    ridge_bounds + refit_loo_rtol)."""
    X, y = make_problem(15, 4, seed=39)
    X = np.column_stack([X, np.r_[1.0, np.zeros(14)]])
    lams = np.array([1.0, 1e-3, 0.0])
    res = fit_path(X, y, lams, standardize=False)
    for i, lam in enumerate(lams[:2]):
        # bound: closed form (one solver) + n backward-stable refits
        tol = ridge_bounds(X, y, lam, standardize=False, solvers=1).loo + refit_loo_rtol(X, y, lam)
        assert_allclose(res.loo_mse[i], brute_force_loo(X, y, lam, False), rtol=tol)
    err = np.empty(15)
    for i in range(15):
        k = np.arange(15) != i
        xm, ym = X[k].mean(axis=0), y[k].mean()
        beta = np.linalg.pinv(X[k] - xm) @ (y[k] - ym)
        err[i] = y[i] - ym - (X[i] - xm) @ beta
    # bound: the closed-form limit (one solver) + n minimum-norm refits
    tol = ridge_bounds(X, y, 0.0, standardize=False, solvers=1).loo + refit_loo_rtol(X, y, 0.0)
    assert_allclose(res.min_norm.loo_mse, np.mean(err**2), rtol=tol)
    # exact: the grid's lam = 0 entry is filled from the min_norm limit (a copy)
    assert_allclose(res.loo_mse[2], res.min_norm.loo_mse, rtol=0, atol=0)


@pytest.mark.parametrize("far", [1e2, 1e4])
def test_loo_with_a_high_leverage_sample(far):
    """One sample far from the others (leverage 1 - O(1/far^2)): LOO against
    brute-force scikit-learn ``Ridge`` refits at lam = 1e-6 and min-norm
    (numpy ``lstsq``) refits at the lam -> 0+ limit.  Any closed form
    e_i/(1 - H_ii) must resolve 1 - H_ii, which a backward error perturbs by
    ~2 kappa eps: the bound (ridge_bounds.loo) divides by min(1 - H_ii);
    the refits add their own (refit_loo_rtol).  (scikit-learn's RidgeCV loses
    1.5e-3 at far = 1e4 on the same data.)"""
    rng = np.random.default_rng(3)
    n = 20
    X = rng.standard_normal((n, 3))
    y = rng.standard_normal(n)
    X[0] = far * np.array([1.0, -0.5, 0.3])
    y[0] = 0.1 * far
    res = fit_path(X, y, [1e-6, 0.0], standardize=False, solver="svd")
    # bound: closed form (one solver) + n refits, both through 1/min(1 - H_ii)
    tol = ridge_bounds(X, y, 1e-6, standardize=False, solvers=1).loo + refit_loo_rtol(X, y, 1e-6)
    assert_allclose(res.loo_mse[0], brute_force_loo(X, y, 1e-6, False), rtol=tol)
    err = np.empty(n)
    for i in range(n):
        k = np.arange(n) != i
        xm, ym = X[k].mean(axis=0), y[k].mean()
        beta = np.linalg.lstsq(X[k] - xm, y[k] - ym, rcond=None)[0]
        err[i] = y[i] - ym - (X[i] - xm) @ beta
    # bound: as above at the lam -> 0+ limit
    tol = ridge_bounds(X, y, 0.0, standardize=False, solvers=1).loo + refit_loo_rtol(X, y, 0.0)
    assert_allclose(res.min_norm.loo_mse, np.mean(err**2), rtol=tol)


@pytest.mark.parametrize("solver", ["svd", "gram", "auto"])
@pytest.mark.parametrize("shape", [(60, 15), (25, 70)], ids=["p<n", "p>n"])
def test_every_route_matches_sklearn_ridge(make_problem, shape, solver):
    """Each factorization route gives scikit-learn ``Ridge`` coefficients and
    LOO (``RidgeCV``) on well-conditioned designs (cond <= ~30, so even the Gram
    route's cond^2 eps error is small), within ridge_bounds."""
    n, p = shape
    X, y = make_problem(n, p, seed=33)
    res = fit_path(X, y, n_lambdas=20, solver=solver)
    Xs = standardized(X)
    cv = RidgeCV(alphas=res.lambdas, store_cv_results=True).fit(Xs, y)
    gram = solver != "svd"  # "auto" may take the Gram route: its bound covers both
    ref = cv.cv_results_.mean(axis=0)
    for i, lam in enumerate(res.lambdas):
        # bound: ours (one solver, Gram bound where the route may be Gram) +
        # RidgeCV's (Gram bound covers its SVD and eigen routes)
        tol = (ridge_bounds(X, y, lam, solvers=1, gram=gram).loo
               + ridge_bounds(Xs, y, lam, standardize=False, solvers=1, gram=True).loo)
        assert_allclose(res.loo_mse[i], ref[i], rtol=tol)
    for i in (0, 7, 19):
        coef, icpt, _, _ = sk_reference(X, y, res.lambdas[i])
        # bound: ours (Gram bound when the route may be Gram) + Ridge's SVD
        b = ridge_bounds(X, y, res.lambdas[i], solvers=1, gram=gram)
        b2 = ridge_bounds(X, y, res.lambdas[i], solvers=1)
        assert rel_err(res.coef[i], coef) <= b.coef + b2.coef
        assert_allclose(res.intercept[i], icpt, rtol=0, atol=b.intercept + b2.intercept)


# -------------------------------------------------------- minimum-norm fit
def pinv_fit(X, y, standardize, rcond=None):
    """Minimum-norm least squares with an intercept (numpy ``pinv`` on the
    centered, optionally population-SD-scaled design): beta = pinv(Xc) yc on the
    original scale, intercept = mean(y) - mean(x)^T beta."""
    xm = X.mean(axis=0)
    scale = X.std(axis=0) if standardize else np.ones(X.shape[1])
    Xc = (X - xm) / scale
    if rcond is None:  # our documented rank tolerance, max(n, p) eps
        rcond = max(X.shape) * EPS
    b = np.linalg.pinv(Xc, rcond=rcond) @ (y - y.mean())
    coef = b / (scale if y.ndim == 1 else scale[:, None])
    return coef, y.mean(axis=0) - xm @ coef, b


def _rank_deficient(make_problem):
    X, y = make_problem(40, 8, seed=41)
    # duplicate column, exact collinear combination, and a rescaled copy
    X = np.column_stack([X, X[:, 2], X[:, 0] - 2.0 * X[:, 1], 3.0 * X[:, 5]])
    return X, y


MIN_NORM_CASES = {
    "p>n": lambda mk: mk(20, 55, seed=43),
    "p=n": lambda mk: mk(25, 25, seed=44),
    "p<n-rank-deficient": _rank_deficient,
}


@pytest.mark.parametrize("standardize", [False, True], ids=["raw", "std"])
@pytest.mark.parametrize("case", list(MIN_NORM_CASES))
def test_min_norm_against_pinv_and_lstsq(make_problem, case, standardize):
    """The lam -> 0+ limit equals the minimum-norm least-squares solution of the
    centered (scaled) design from numpy ``pinv`` and ``lstsq`` (intercept =
    mean(y) - mean(x)^T beta), for p > n, p = n and rank-deficient p < n."""
    X, y = MIN_NORM_CASES[case](make_problem)
    n, p = X.shape
    res = fit_path(X, y, [1.0], standardize=standardize)
    coef, icpt, b = pinv_fit(X, y, standardize)
    # bound: two backward-stable SVD solvers on the retained rank (ridge_bounds
    # at lam = 0: Wedin with kappa = d_1 / d_r; the ranks agree, checked below)
    bd = ridge_bounds(X, y, 0.0, standardize=standardize)
    assert rel_err(res.min_norm.coef, coef) <= bd.coef
    assert_allclose(res.min_norm.intercept, icpt, rtol=0, atol=bd.intercept)
    assert res.min_norm.rank == res.rank == np.linalg.matrix_rank(X - X.mean(axis=0))
    assert_allclose(res.min_norm.coef_norm, np.linalg.norm(b), rtol=bd.coef)
    xm = X.mean(axis=0)
    scale = X.std(axis=0) if standardize else np.ones(p)
    sol = np.linalg.lstsq((X - xm) / scale, y - y.mean(), rcond=max(n, p) * EPS)[0]
    assert rel_err(res.min_norm.coef, sol / scale) <= bd.coef
    # residual / interpolation: bound: Wedin's residual bound, absolute
    # (the residual is 0 at full row rank)
    fit = icpt + X @ coef
    assert_allclose(res.min_norm.train_mse, np.mean((y - fit) ** 2), rtol=0,
                    atol=bd.mse_abs + np.mean((y - fit) ** 2) * 2 * gamma(n))
    assert res.min_norm.df == res.rank + 1
    if case == "p<n-rank-deficient":
        assert res.rank == 8
        # the duplicated column shares its weight equally with its copy (min norm)
        # bound: equal in exact arithmetic; each entry is within the coefficient
        # bound (two solvers' worth: the two entries err independently)
        assert_allclose(res.min_norm.coef[2], res.min_norm.coef[8], rtol=0,
                        atol=bd.coef * np.linalg.norm(res.min_norm.coef))


@pytest.mark.parametrize("shape", [(20, 55), (25, 24), (25, 25)], ids=["p>n", "p=n-1", "p=n"])
def test_min_norm_interpolates_at_full_row_rank(make_problem, shape):
    """When the centered design has full row rank (p >= n - 1) the minimum-norm
    fit interpolates: training MSE ~ 0 (a fact of linear algebra) and the
    interpolant reproduces y through ``predict(X, 0)``."""
    n, p = shape
    X, y = make_problem(n, p, seed=47)
    res = fit_path(X, y, [1.0])
    assert res.rank == n - 1
    # bound: the exact residual is 0, so what remains is Wedin's residual
    # bound (ridge_bounds, one solver) and the fitted values' bound
    b = ridge_bounds(X, y, 0.0, solvers=1)
    assert res.min_norm.train_mse <= b.mse_abs
    assert_allclose(res.predict(X, 0.0), y, rtol=0, atol=b.fitted)


@pytest.mark.parametrize("shape", [(40, 10), (25, 25), (20, 50)], ids=SHAPE_IDS)
def test_min_norm_criteria_are_limits_of_the_path(make_problem, shape):
    """``min_norm.gcv`` / ``loo_mse`` / ``train_mse`` equal the lam -> 0+ limit
    of the path criteria (their definition; reference: the path formulas of
    Golub, Heath & Wahba 1979 and the exact LOO identity), compared with
    ``criteria_at(lam)`` at lam = 1e-6 d_r^2.

    Tolerance: the exact-arithmetic gap between the criteria at lam and their
    limits (error_bounds.limit_gap: every shrinkage complement lies in
    [0, lam / d_r^2]) plus the rounding of both evaluations (ridge_bounds at
    lam, one solver each).  With lam = 0 in a user grid the path returns
    exactly the min-norm criteria."""
    n, p = shape
    X, y = make_problem(n, p, seed=53)
    res = fit_path(X, y, [10.0, 0.0, 1.0])
    small = 1e-6 * res.singular_values[-1] ** 2
    c = res.criteria_at([small])
    mn = res.min_norm
    # bound: limit_gap (exact arithmetic) + ridge_bounds (rounding, 2 solvers)
    gap = limit_gap(X, y, small)
    b = ridge_bounds(X, y, small)
    assert_allclose(c.gcv[0], mn.gcv, rtol=gap.gcv + b.gcv)
    assert_allclose(c.loo_mse[0], mn.loo_mse, rtol=gap.loo + b.loo)
    assert_allclose(c.train_mse[0], mn.train_mse, rtol=0, atol=gap.mse + b.mse_abs)
    assert_allclose(c.df[0], mn.df, rtol=0, atol=gap.df + b.df)
    # lambda = 0 in the grid: exact: the min-norm values are copied, bit for
    # bit (same expression, no arithmetic between them)
    assert res.gcv[1] == mn.gcv
    assert res.train_mse[1] == mn.train_mse
    assert res.df[1] == mn.df
    # bound: LOO sums the same n squares in another order (reorder_bound);
    # coefficients use the gains d/(d^2 + 0) on the path vs 1/d in the min-norm
    # fit: two roundings apart per gain (relative 3u), carried through V and the
    # back-scaling (gamma_r per entry, |V_kj| <= 1, Cauchy-Schwarz)
    assert_allclose(res.loo_mse[1], mn.loo_mse, rtol=reorder_bound(n, ops=2))
    scale = X.std(axis=0)
    atol = (3 * U + 2 * gamma(res.rank)) * np.linalg.norm(mn.coef * scale) / scale.min()
    assert_allclose(res.coef[1], mn.coef, rtol=0, atol=atol)
    # bound: b0 = ybar - xbar^T beta: |xbar|^T |d beta| (Cauchy-Schwarz) plus
    # gamma_{p+1} of the terms
    xbar = X.mean(axis=0)
    assert_allclose(res.intercept[1], mn.intercept, rtol=0,
                    atol=np.linalg.norm(xbar) * np.sqrt(p) * atol
                    + gamma(p + 1) * (abs(y.mean()) + np.abs(xbar) @ np.abs(mn.coef)))
    for v in (mn.gcv, mn.loo_mse, mn.train_mse):
        assert np.isfinite(v)


def _mp_criteria(X, y, lam, dps=50):
    """GCV and LOO MSE at 50 digits (mpmath) from the explicit hat matrix
    H = X1 (X1^T X1 + diag(0, lam I))^-1 X1^T, X1 = [1, X] (see ``_mp_ridge``)."""
    return _mp_ridge(X, y, lam, dps)[2:]


@pytest.mark.parametrize("k", [8, 10, 12])
def test_loo_gcv_near_interpolation_against_mpmath(make_problem, k):
    """At full row rank (p >= n - 1) and tiny penalties lam = 10^-k d_r^2, LOO
    and GCV against a 50-digit mpmath evaluation of the explicit hat matrix.
    Both criteria converge to the (well-conditioned) min-norm limits, so a
    backward-stable evaluation keeps ~cond * eps accuracy (ridge_bounds at full
    row rank: the inverse form; mpmath's 50 digits add nothing at float
    precision)."""
    X, y = make_problem(25, 25, seed=53)
    res = fit_path(X, y, [1.0], standardize=False, solver="svd")
    lam = 10.0**-k * res.singular_values[-1] ** 2
    gcv, loo = _mp_criteria(X, y, lam)
    c = res.criteria_at([lam])
    # bound: ridge_bounds (one solver: the reference is exact to 1e-50 times
    # cond(A) ~ 1e30, still far below float64 rounding)
    b = ridge_bounds(X, y, lam, standardize=False, solvers=1)
    assert_allclose(c.gcv[0], gcv, rtol=b.gcv)
    assert_allclose(c.loo_mse[0], loo, rtol=b.loo)


def test_min_norm_test_mse_against_pinv(make_problem):
    """``min_norm.test_mse`` equals the test MSE of the numpy ``pinv``
    minimum-norm fit (reference: numpy)."""
    X, y = make_problem(60, 50, seed=59)
    Xtr, Xte, ytr, yte = X[:20], X[20:], y[:20], y[20:]
    res = fit_path(Xtr, ytr, [1.0], X_test=Xte, y_test=yte)
    coef, icpt, _ = pinv_fit(Xtr, ytr, True)
    # bound: two SVD solvers' predictions (ridge_bounds at lam = 0) in the MSE
    pred = icpt + Xte @ coef
    b = ridge_bounds(Xtr, ytr, 0.0)
    assert_allclose(res.min_norm.test_mse, np.mean((yte - pred) ** 2),
                    rtol=b.test_mse_rtol(Xte, yte, pred))


# ---------------------------------------- ill-conditioned problem vs mpmath
def _mp_ridge(X, y, lam, dps=50):
    """50-digit solve of the penalized normal equations with the intercept
    unpenalized: (X1^T X1 + diag(0, lam I)) b = X1^T y, X1 = [1, X] (mpmath
    ``lu_solve``), and the explicit hat matrix for GCV and LOO."""
    with mpmath.workdps(dps):
        n, p = X.shape
        X1 = mpmath.matrix([[1] + [mpmath.mpf(float(v)) for v in row] for row in X])
        Y = mpmath.matrix([mpmath.mpf(float(v)) for v in y])
        A = X1.T * X1
        for j in range(1, p + 1):
            A[j, j] += mpmath.mpf(float(lam))
        b = mpmath.lu_solve(A, X1.T * Y)
        Ainv = mpmath.inverse(A)
        H = X1 * Ainv * X1.T
        e = Y - H * Y
        trH = sum(H[i, i] for i in range(n))
        rss = sum(e[i] ** 2 for i in range(n))
        gcv = n * rss / (n - trH) ** 2
        loo = sum((e[i] / (1 - H[i, i])) ** 2 for i in range(n)) / n
        return (float(b[0]), np.array([float(b[j]) for j in range(1, p + 1)]),
                float(gcv), float(loo))


@pytest.mark.parametrize("solver", ["svd", "auto"])
@pytest.mark.parametrize("standardize", [False, True], ids=["raw", "std"])
def test_ill_conditioned_against_mpmath(solver, standardize):
    """A 12 x 8 monomial (Vandermonde-like) design on [1, 2] (cond ~ 3.5e9 after
    centering, 5e8 standardized) at five penalties, against a 50-digit mpmath
    solve of the penalized normal equations with an unpenalized intercept
    (``mpmath.lu_solve``) and its explicit hat matrix: coefficients, intercept,
    GCV and LOO.

    Tolerance: a backward-stable factorization perturbs the design by ~eps |Z|,
    which moves the ridge solution, the residual and the leverages by the
    Wedin bounds of the regularized problem (error_bounds.ridge_bounds, one
    solver: the 50-digit reference loses at most cond(A) ~ 1e19 of its digits).
    """
    x = np.linspace(1.0, 2.0, 12)
    X = np.column_stack([x**k for k in range(1, 9)])
    y = np.cos(3 * x) + 0.01 * np.sin(40 * x)  # synthetic, smooth plus wiggle
    lams = np.array([1e-12, 1e-9, 1e-6, 1e-3, 1.0])
    res = fit_path(X, y, lams, standardize=standardize, solver=solver)
    d = res.singular_values
    assert res.rank == 8 and 1e8 <= res.condition_number <= 1e10
    assert res.solver.startswith("svd")  # "auto" must not take the Gram route here
    scale = X.std(axis=0) if standardize else np.ones(8)
    for i, lam in enumerate(lams):
        b0, b, gcv, loo = _mp_ridge(X / scale, y, lam)
        b = b / scale
        # bound: ridge_bounds, one solver (the reference is exact here)
        bd = ridge_bounds(X, y, lam, standardize=standardize, solvers=1)
        assert rel_err(res.coef[i], b) <= bd.coef, (lam, rel_err(res.coef[i], b), bd.coef)
        assert_allclose(res.intercept[i], b0, rtol=0, atol=bd.intercept)
        assert_allclose(res.gcv[i], gcv, rtol=bd.gcv)
        assert_allclose(res.loo_mse[i], loo, rtol=bd.loo)


# ------------------------------------------------------- Monte Carlo law
def test_training_error_law_monte_carlo():
    """E[train MSE] = sigma^2 (n - p - 1)/n for least squares with an intercept
    and full column rank, any fixed design (the projection argument: RSS is a
    squared norm of the noise projected onto a space of dimension n - p - 1;
    common practice, no source).  Monte Carlo: 4 designs x 100 noise draws
    (seeded), passed as a 100-column response; the mean is within 3 standard
    errors of the law."""
    rng = np.random.default_rng(2024)
    n, p, sigma, reps = 30, 8, 1.3, 100
    draws = []
    for _ in range(4):
        X = rng.standard_normal((n, p)) @ rng.standard_normal((p, p)) + 2.0
        beta = rng.standard_normal(p)
        Y = (0.5 + X @ beta)[:, None] + sigma * rng.standard_normal((n, reps))
        res = fit_path(X, Y, [0.0], standardize=False)
        draws.append(res.min_norm.train_mse)
        # exact: the grid value at lam = 0 is the limit, copied
        assert_allclose(res.train_mse[0], res.min_norm.train_mse, rtol=0, atol=0)
    draws = np.concatenate(draws)
    law = sigma**2 * (n - p - 1) / n
    se = draws.std(ddof=1) / np.sqrt(draws.size)
    # sampling: 3 standard errors of a mean of 400 draws (CLT): a correct law
    # fails with probability 0.27 % (the seed is fixed, so it is decided once)
    assert abs(draws.mean() - law) <= 3 * se, (draws.mean(), law, se)


# ------------------------------------------------------- finiteness
def test_negligible_singular_values_never_give_inf_or_nan():
    """Designs with exactly dependent columns, a zero column, duplicated rows and
    p >> n: every array of the result is finite (the rank tolerance drops
    negligible singular values; numpy ``matrix_rank`` gives the same rank)."""
    rng = np.random.default_rng(61)
    base = rng.standard_normal((12, 3))
    X = np.column_stack([base, base @ rng.standard_normal((3, 40)), np.zeros(12)])
    X = np.vstack([X, X[:3]])  # duplicated rows
    y = rng.standard_normal(15)
    for fi in (True, False):
        res = fit_path(X, y, np.r_[np.geomspace(1e3, 1e-12, 30), 0.0], fit_intercept=fi,
                       return_fitted=True, X_test=X[:4] + 0.1, y_test=y[:4])
        Xc = X - X.mean(axis=0) if fi else X
        assert res.rank == np.linalg.matrix_rank(Xc / np.where(X.std(axis=0) > 0, X.std(axis=0), 1))
        for name in ("coef", "intercept", "df", "train_mse", "gcv", "loo_mse", "test_mse",
                     "fitted", "singular_values"):
            assert np.all(np.isfinite(getattr(res, name))), name
        for name in ("coef", "intercept", "train_mse", "gcv", "loo_mse", "test_mse", "coef_norm"):
            assert np.all(np.isfinite(getattr(res.min_norm, name))), name
        assert np.isfinite(res.condition_number)


@pytest.mark.parametrize("scale", [1e200, 1e-200])
def test_extreme_scale_without_standardization(make_problem, scale):
    """A design of magnitude 1e200 or 1e-200 (squares outside the float64 range,
    IEEE 754) with standardize=False either fits with finite results or raises a
    one-line InputError; never a RuntimeWarning or a solver's ValueError
    (common practice, no source)."""
    X, y = make_problem(20, 5, seed=73)
    try:
        res = fit_path(X * scale, y, standardize=False)
    except InputError as exc:
        assert "\n" not in str(exc)
        return
    for name in ("coef", "gcv", "loo_mse", "df", "train_mse"):
        assert np.all(np.isfinite(getattr(res, name)))


def test_constant_column_gets_coefficient_exactly_zero(make_problem):
    """A constant column is left out (coefficient exactly 0) and the other
    coefficients equal scikit-learn ``Ridge`` on the design without it."""
    X, y = make_problem(30, 6, seed=67)
    Xk = np.column_stack([X[:, :3], np.full(30, 7.25), X[:, 3:]])
    lams = np.geomspace(10, 0.1, 5)
    res = fit_path(Xk, y, lams)
    assert np.all(res.coef[:, 3] == 0.0) and res.min_norm.coef[3] == 0.0
    for i, lam in enumerate(lams):
        coef, icpt, _, _ = sk_reference(X, y, lam)
        # bound: two backward-stable solvers (ridge_bounds)
        b = ridge_bounds(X, y, lam)
        assert rel_err(np.delete(res.coef[i], 3), coef) <= b.coef
        assert_allclose(res.intercept[i], icpt, rtol=0, atol=b.intercept)
    # predict drops the constant column consistently; bound: ridge_bounds
    assert_allclose(res.predict(Xk, lams[2]), Ridge(alpha=lams[2]).fit(
        StandardScaler().fit_transform(X), y).predict(StandardScaler().fit(X).transform(X)),
        rtol=0, atol=ridge_bounds(X, y, lams[2]).fitted)


# ------------------------------------------------------- bad input
def _ok(make_problem):
    return make_problem(10, 3, seed=71)


BAD_INPUTS = {
    "non-numeric X": lambda X, y: dict(X=[["a", "b"], ["c", "d"], ["e", "f"]], y=[1.0, 2.0, 3.0]),
    "non-numeric y": lambda X, y: dict(X=X, y=["u"] * len(y)),
    "NaN in X": lambda X, y: dict(X=np.where(np.eye(*X.shape, dtype=bool), np.nan, X), y=y),
    "inf in y": lambda X, y: dict(X=X, y=np.r_[y[:-1], np.inf]),
    "empty X": lambda X, y: dict(X=np.empty((0, 3)), y=np.empty(0)),
    "no columns": lambda X, y: dict(X=np.empty((10, 0)), y=y),
    "single row": lambda X, y: dict(X=X[:1], y=y[:1]),
    "constant target": lambda X, y: dict(X=X, y=np.full(len(y), 4.0)),
    "constant target column": lambda X, y: dict(X=X, y=np.column_stack([y, np.ones(len(y))])),
    "mismatched rows": lambda X, y: dict(X=X, y=y[:-1]),
    "1-D X": lambda X, y: dict(X=X[:, 0], y=y),
    "3-D X": lambda X, y: dict(X=X[None], y=y),
    "negative lambda": lambda X, y: dict(X=X, y=y, lambdas=[1.0, -0.5]),
    "inf lambda": lambda X, y: dict(X=X, y=y, lambdas=[np.inf]),
    "empty lambdas": lambda X, y: dict(X=X, y=y, lambdas=[]),
    "X_test columns": lambda X, y: dict(X=X, y=y, X_test=X[:, :2], y_test=y),
    "NaN in X_test": lambda X, y: dict(X=X, y=y, X_test=np.where(X > 1, np.nan, X), y_test=y),
    "y_test targets": lambda X, y: dict(X=X, y=y, X_test=X, y_test=np.column_stack([y, y])),
    "y_test without X_test": lambda X, y: dict(X=X, y=y, y_test=y),
    "X_test without y_test": lambda X, y: dict(X=X, y=y, X_test=X),
    "y_test rows": lambda X, y: dict(X=X, y=y, X_test=X, y_test=y[:-2]),
    "all constant columns": lambda X, y: dict(X=np.ones((10, 3)), y=y),
    "unknown solver": lambda X, y: dict(X=X, y=y, solver="qr-magic"),
    "n_lambdas 0": lambda X, y: dict(X=X, y=y, n_lambdas=0),
}


@pytest.mark.parametrize("case", list(BAD_INPUTS))
def test_bad_input_raises_one_line_input_error(make_problem, case):
    """Bad input raises ``InputError`` (a ``ValueError`` subclass) with a
    one-line message, never a traceback from deep inside or a silent NaN
    (common practice, no source)."""
    X, y = _ok(make_problem)
    kw = BAD_INPUTS[case](X, y)
    with pytest.raises(InputError) as info:
        fit_path(kw.pop("X"), kw.pop("y"), **kw)
    assert isinstance(info.value, ValueError)
    msg = str(info.value)
    assert msg and "\n" not in msg


@pytest.mark.parametrize("lambdas", [[np.nan], [1.0, np.nan], ["abc"]],
                         ids=["all-NaN", "one-NaN", "non-numeric"])
def test_bad_lambdas_raise_input_error(make_problem, lambdas):
    """A NaN or non-numeric penalty grid raises ``InputError`` (a one-line
    ``ValueError``), not a numpy warning or a bare conversion error, and the
    message names the offending value (common practice, no source)."""
    X, y = _ok(make_problem)
    with pytest.raises(InputError) as info:
        fit_path(X, y, lambdas)
    msg = str(info.value)
    assert "\n" not in msg
    assert ("nan" in msg.lower()) or ("numeric" in msg.lower())


def test_predict_bad_input(make_problem):
    """``predict`` validates its rows like ``fit_path`` (one-line InputError)."""
    X, y = _ok(make_problem)
    res = fit_path(X, y, [1.0])
    for bad in (X[:, :2], X[:, 0], np.where(X > 0, np.nan, X)):
        with pytest.raises(InputError):
            res.predict(bad, 1.0)
    with pytest.raises(InputError):
        res.predict(X, -1.0)
    with pytest.raises(InputError):
        res.index_min("aic")
    with pytest.raises(InputError):
        res.index_min("test")  # no test set


# ------------------------------------------------------- property check


@settings(max_examples=25, deadline=None)
@given(n=st.integers(3, 14), p=st.integers(1, 20), seed=st.integers(0, 2**16),
       log_lam=st.floats(-3, 3), standardize=st.booleans(), fit_intercept=st.booleans())
def test_property_random_shapes_match_sklearn(n, p, seed, log_lam, standardize, fit_intercept):
    """Random shapes around and across p = n: coefficients, intercept and LOO
    match scikit-learn ``Ridge`` and brute-force leave-one-out refits (numpy
    ``lstsq``), and df lies in (0, rank + 1]; within ridge_bounds."""
    rng = np.random.default_rng(seed)
    X = rng.standard_normal((n, p)) + rng.standard_normal(p)
    y = X @ rng.standard_normal(p) + rng.standard_normal(n)
    lam = 10.0**log_lam
    res = fit_path(X, y, [lam], standardize=standardize, fit_intercept=fit_intercept)
    coef, icpt, _, _ = sk_reference(X, y, lam, fit_intercept=fit_intercept,
                                    standardize=standardize)
    # bound: two backward-stable solvers (ridge_bounds)
    b = ridge_bounds(X, y, lam, fit_intercept=fit_intercept, standardize=standardize)
    assert rel_err(res.coef[0], coef) <= b.coef
    assert_allclose(res.intercept[0], icpt, rtol=0, atol=b.intercept)
    # bound: df's rounding (ridge_bounds.df) above the exact upper end
    assert 0 < res.df[0] <= res.rank + fit_intercept + b.df
    if fit_intercept:
        Xs = standardized(X) if standardize else X
        # reference: brute-force leave-one-out refits (numpy lstsq on the augmented problem,
        # error_bounds.refit_errors), not RidgeCV: its Gram-eigen route with an intercept
        # isolates the constant eigenvector by angle, which is not backward stable when an
        # eigenvalue of X X^T lies near n (seen 2.3e-12 off on n = 3, p = 12, kappa = 1.5)
        err, _ = refit_errors(Xs, y, lam)
        # bound: twice refit_loo_rtol (ours and the refits, each backward stable)
        tol = 2 * refit_loo_rtol(Xs, y, lam)
        assert_allclose(res.loo_mse[0], np.mean(err**2), rtol=tol)
