"""Numerical robustness of the whole path, and property-based checks (hypothesis).

Every result must be finite and close to an outside reference — mpmath at 50–60
significant digits, scikit-learn ``Ridge``, numpy's ``pinv``/``solve``, or the
same problem rescaled by a power of ten (ridge is scale-equivariant: with
:math:`X' = sX` and :math:`\\lambda' = s^2\\lambda`, :math:`\\beta' = \\beta/s`;
an identity of the normal equations) — or a clear error, never NaN.  pytest
turns every RuntimeWarning (overflow, 0/0) into a failure (pyproject.toml).
"""
from __future__ import annotations

import warnings

import mpmath as mp
import numpy as np
import pytest
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose
from sklearn.linear_model import Ridge

from error_bounds import U as UNIT, gamma, reorder_bound, ridge_bounds, solve_bound
from paths import fit_path

# numerical reference checks (mpmath, scikit-learn, numpy, published bounds): CI reruns
# them under a forced OpenBLAS kernel (.ci/run)
pytestmark = pytest.mark.reference

EPS = np.finfo(float).eps
HYP = settings(max_examples=25, deadline=None, derandomize=True,
               suppress_health_check=[HealthCheck.too_slow])


def _finite(res):
    for name in ("coef", "intercept", "df", "train_mse", "gcv", "loo_mse"):
        assert np.all(np.isfinite(getattr(res, name))), name
    mn = res.min_norm
    for name in ("coef", "intercept", "train_mse", "gcv", "loo_mse"):
        assert np.all(np.isfinite(getattr(mn, name))), f"min_norm.{name}"


def _rel(a, b):
    return np.linalg.norm(np.asarray(a) - b) / np.linalg.norm(b)


def _same_path(res, ref, X, y, lams, *, standardize, fit_intercept=True, crit=1.0):
    """``res`` and ``ref`` fit the same problem up to one rounding per entry of
    the data (a rescaling by a power of ten): each is within ridge_bounds of the
    exact fit (two solvers; the data's rounding is part of backward_eps's
    constant 4).  ``crit`` divides res's criteria (a response scale squared)."""
    for k, lam in enumerate(lams):
        # bound: ridge_bounds (Wedin), two backward-stable solves, plus the
        # rounding of the comparison's own product (2u)
        b = ridge_bounds(X, y, lam, standardize=standardize, fit_intercept=fit_intercept)
        assert_allclose(res.df[k], ref.df[k], rtol=0, atol=b.df)
        assert_allclose(res.train_mse[k] / crit, ref.train_mse[k], rtol=b.mse + 2 * UNIT)
        assert_allclose(res.gcv[k] / crit, ref.gcv[k], rtol=b.gcv + 2 * UNIT)
        assert_allclose(res.loo_mse[k] / crit, ref.loo_mse[k], rtol=b.loo + 2 * UNIT)
    return b


def _grid_rtol(X, y, lams, *, standardize):
    """How far two default grids of the same problem (to rounding) may differ:
    each end is a root of df(lam) = target found by brentq on log lam with
    xtol 1e-12 and rtol 4 eps (paths/core/grid.py; Brent's method stops within
    twice its tolerance), moved by the df error (ridge_bounds.df) over
    |lam df'(lam)| = sum d^2 lam / (d^2 + lam)^2; geomspace adds a few u."""
    Z = X - X.mean(axis=0)
    if standardize:
        Z = Z / X.std(axis=0)
    d = np.linalg.svd(Z, compute_uv=False)
    d = d[d > max(X.shape) * 2 * UNIT * d[0]]
    tol = 0.0
    for lam in (lams[0], lams[-1]):
        brent = 2 * (1e-12 + 4 * 2 * UNIT * abs(np.log(lam)))
        slope = np.sum(d**2 * lam / (d**2 + lam) ** 2)
        b = ridge_bounds(X, y, lam, standardize=standardize)
        tol = max(tol, 2 * brent + b.df / slope)
    return tol + 8 * UNIT


def _problem(n, p, seed):
    rng = np.random.default_rng(seed)
    X = rng.standard_normal((n, p)) + rng.standard_normal(p)
    y = X @ rng.standard_normal(p) + 0.5 * rng.standard_normal(n) + 2.0
    return X, y


def _mp_ridge(X, y, lam, *, intercept=True, dps=60):
    """High-precision ridge (mpmath): fitted values and coefficients of
    min ||y - b0 - X b||^2 + lam ||b||^2, by solving the normal equations."""
    with mp.workdps(dps):
        n, p = X.shape
        Xm = mp.matrix(X.tolist())
        ym = mp.matrix(y.tolist())
        if intercept:
            for j in range(p):
                mu = mp.fsum(Xm[i, j] for i in range(n)) / n
                for i in range(n):
                    Xm[i, j] -= mu
            my = mp.fsum(ym) / n
            for i in range(n):
                ym[i] -= my
        else:
            my = mp.mpf(0)
        beta = mp.lu_solve(Xm.T * Xm + mp.mpf(float(lam)) * mp.eye(p), Xm.T * ym)
        fit = Xm * beta
        return (np.array([float(v) for v in beta]),
                np.array([float(fit[i] + my) for i in range(n)]))


# ------------------------------------------------------------- extreme scales

SCALES = [1e-150, 1e-100, 1e-50, 1e50, 1e100, 1e150]


@pytest.mark.parametrize("shape", [(20, 5), (10, 30)], ids=["n>p", "p>n"])
@pytest.mark.parametrize("s", SCALES)
def test_uniform_scale_equivariance_without_standardization(shape, s):
    """X -> sX with lambda -> s^2 lambda gives beta/s and identical df, MSE, GCV, LOO
    (rescaled reference).  Powers of ten are not exact in binary, so agreement is to
    rounding: ridge_bounds of the problem (bound: see _same_path)."""
    X, y = _problem(*shape, seed=1)
    ref = fit_path(X, y, standardize=False, n_lambdas=20)
    res = fit_path(X * s, y, ref.lambdas * s**2, standardize=False)
    _finite(res)
    _same_path(res, ref, X, y, ref.lambdas, standardize=False)
    for k, lam in enumerate(ref.lambdas):
        # bound: two solves (ridge_bounds) + the rounding of lam s^2 (u, relative
        # change of the solution at most u) and of coef * s (u)
        b = ridge_bounds(X, y, lam, standardize=False)
        assert _rel(res.coef[k] * s, ref.coef[k]) <= b.coef + 2 * UNIT
    # bound: the lam -> 0+ limits, ridge_bounds at 0
    b = ridge_bounds(X, y, 0.0, standardize=False)
    assert _rel(res.min_norm.coef * s, ref.min_norm.coef) <= b.coef + UNIT
    assert_allclose(res.min_norm.gcv, ref.min_norm.gcv, rtol=b.gcv)
    assert_allclose(res.min_norm.loo_mse, ref.min_norm.loo_mse, rtol=b.loo)


@pytest.mark.parametrize("s", [1e-150, 1e150])
def test_response_scale(s):
    """Scaling y by s scales coefficients by s and errors by s^2 (same grid)."""
    X, y = _problem(12, 25, seed=2)
    ref = fit_path(X, y, n_lambdas=15)
    res = fit_path(X, y * s, ref.lambdas)
    _finite(res)
    # bound: ridge_bounds (see _same_path) + the roundings of y s and / s
    _same_path(res, ref, X, y, ref.lambdas, standardize=True, crit=s**2)
    for k, lam in enumerate(ref.lambdas):
        assert _rel(res.coef[k] / s, ref.coef[k]) <= ridge_bounds(X, y, lam).coef + 2 * UNIT


@pytest.mark.parametrize("shape", [(20, 5), (10, 30)], ids=["n>p", "p>n"])
def test_mixed_column_scales_with_standardization(shape):
    """Columns scaled from 1e-150 to 1e150, standardized: the same fit as unscaled columns
    (standardization undoes the scaling; coefficients scale back by 1/s_j)."""
    X, y = _problem(*shape, seed=3)
    sc = np.logspace(-150, 150, shape[1])
    ref = fit_path(X, y, n_lambdas=20)
    res = fit_path(X * sc, y, n_lambdas=20)
    _finite(res)
    # bound: the grid's root-finding tolerance and df error (_grid_rtol)
    gtol = _grid_rtol(X, y, ref.lambdas, standardize=True)
    assert_allclose(res.lambdas, ref.lambdas, rtol=gtol)
    for k, lam in enumerate(ref.lambdas):
        # bound: ridge_bounds (two solves of the same problem to rounding) plus
        # the penalties' difference gtol (a relative change of lam moves the
        # solution by at most as much, relative: d/dlam of d/(d^2 + lam))
        b = ridge_bounds(X, y, lam)
        assert _rel(res.coef[k] * sc, ref.coef[k]) <= b.coef + gtol + UNIT
        assert_allclose(res.loo_mse[k], ref.loo_mse[k], rtol=b.loo + 2 * gtol)
    for lam in ref.lambdas[::5]:
        # bound: predictions at the same penalty, ridge_bounds.predict_atol
        b = ridge_bounds(X, y, lam)
        assert_allclose(res.predict(X * sc, lam), ref.predict(X, lam), rtol=0,
                        atol=b.predict_atol(X))


def test_mixed_column_scales_without_standardization_vs_mpmath():
    """Unstandardized columns from 1e-150 to 1e150: the fitted values at grid penalties
    equal mpmath's (60 digits) within ridge_bounds.fitted; everything finite."""
    X, y = _problem(15, 6, seed=4)
    X = X * np.logspace(-150, 150, 6)
    res = fit_path(X, y, n_lambdas=10, standardize=False)
    _finite(res)
    for k in (0, 5, 9):
        _, fit = _mp_ridge(X, y, res.lambdas[k])
        # bound: one solver against an exact reference (ridge_bounds at the
        # penalty: the grid's penalties are of the order of d_1^2, so kappa_lam
        # is small although kappa(X) is astronomical)
        b = ridge_bounds(X, y, res.lambdas[k], standardize=False, solvers=1)
        assert_allclose(res.predict(X, res.lambdas[k]), fit, rtol=0, atol=b.fitted)


# ------------------------------------------------------- ill-conditioning, rank


def test_condition_number_1e14_vs_mpmath():
    """kappa(X) = 1e14 (no intercept, no scaling): coefficients and fitted values at
    penalties from 1e-2 down to 1e-26 agree with mpmath within c * eps * kappa_lam,
    kappa_lam = sqrt((d1^2 + lam)/(dr^2 + lam)) the condition number of the ridge
    least-squares problem [X; sqrt(lam) I] (first-order perturbation theory of a
    backward-stable solve, Higham 2002, *Accuracy and Stability of Numerical
    Algorithms*, 2nd ed., Thm 20.1: error_bounds.ridge_bounds, one solver
    against the 60-digit reference)."""
    rng = np.random.default_rng(5)
    n, p = 30, 8
    U, _ = np.linalg.qr(rng.standard_normal((n, p)))
    V, _ = np.linalg.qr(rng.standard_normal((p, p)))
    d = np.geomspace(1.0, 1e-14, p)
    X = U @ np.diag(d) @ V.T
    y = rng.standard_normal(n)
    lams = np.array([1e-2, 1e-6, 1e-10, 1e-14, 1e-20, 1e-26])
    res = fit_path(X, y, lams, fit_intercept=False, standardize=False)
    _finite(res)
    assert res.rank == p
    # bound: Weyl, each singular value within backward_eps d_1 (Golub & Van
    # Loan Cor. 8.6.2): d_r = 1e-14 within 1e-14 * (d_r + eps_b d_1) relative
    from error_bounds import backward_eps, singular_value_bound
    assert_allclose(res.condition_number, 1e14,
                    rtol=2 * float(singular_value_bound(1e14, backward_eps(n, p))))
    for k, lam in enumerate(lams):
        beta, fit = _mp_ridge(X, y, lam, intercept=False)
        # bound: Wedin with kappa_lam, one solver (ridge_bounds); fitted values
        # through the residual bound (1 + 2 kappa) eps ||y|| (Higham Thm 20.1)
        b = ridge_bounds(X, y, lam, fit_intercept=False, standardize=False, solvers=1)
        assert np.linalg.norm(res.coef[k] - beta) <= b.coef * np.linalg.norm(beta), lam
        assert np.linalg.norm(X @ res.coef[k] - fit) <= b.resid + gamma(p) * np.linalg.norm(
            np.abs(X) @ np.abs(res.coef[k])), lam


def test_exactly_collinear_columns():
    """x4 = 2 x1 - x2 exactly (small integers, exact in binary): rank p - 1; ridge at
    lam > 0 equals scikit-learn Ridge (svd solver) and the min-norm limit equals
    numpy.linalg.pinv on the centered design, within ridge_bounds (the exact
    collinearity is preserved by rounding-free integer data; the rank-r problem's
    kappa = d_1 / d_r)."""
    rng = np.random.default_rng(6)
    A = rng.integers(-5, 6, size=(25, 3)).astype(float)
    X = np.column_stack([A, 2 * A[:, 0] - A[:, 1]])
    y = A @ [1.0, -2.0, 0.5] + rng.standard_normal(25)
    res = fit_path(X, y, [0.1, 1.0, 10.0], standardize=False)
    _finite(res)
    assert res.rank == 3
    for k, lam in enumerate(res.lambdas):
        sk = Ridge(alpha=lam, solver="svd").fit(X, y)
        # bound: two backward-stable solvers (ridge_bounds)
        b = ridge_bounds(X, y, lam, standardize=False)
        assert _rel(res.coef[k], sk.coef_) <= b.coef
        assert_allclose(res.intercept[k], sk.intercept_, rtol=0, atol=b.intercept)
    Xc = X - X.mean(0)
    # bound: ridge_bounds at lam = 0 (two SVD-based minimum-norm solvers)
    assert _rel(res.min_norm.coef, np.linalg.pinv(Xc) @ (y - y.mean())) <= ridge_bounds(
        X, y, 0.0, standardize=False).coef


def test_constant_columns_dropped_before_standardization():
    """A constant column (and an all-zero one) gets coefficient exactly 0 with no division
    by zero; the rest equals scikit-learn Ridge on the design without them."""
    X, y = _problem(15, 4, seed=7)
    Xc = np.column_stack([X[:, :2], np.full(15, 3.5), X[:, 2:], np.zeros(15)])
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        res = fit_path(Xc, y, [0.5, 5.0])
    assert np.all(res.coef[:, [2, 5]] == 0.0)
    assert list(res.design.constant) == [2, 5]
    sd = X.std(axis=0)
    for k, lam in enumerate(res.lambdas):
        sk = Ridge(alpha=lam).fit(X / sd, y)
        # bound: two backward-stable solvers (ridge_bounds, standardized)
        assert _rel(res.coef[k][[0, 1, 3, 4]], sk.coef_ / sd) <= ridge_bounds(X, y, lam).coef


@pytest.mark.parametrize("n,p", [(2, 1), (2, 5), (3, 1)])
def test_tiny_problems_match_sklearn(n, p):
    """n = 2 or p = 1: coefficients equal scikit-learn Ridge (within ridge_bounds)."""
    X, y = _problem(n, p, seed=8)
    res = fit_path(X, y, [1e-3, 1.0, 1e3], standardize=False)
    _finite(res)
    for k, lam in enumerate(res.lambdas):
        sk = Ridge(alpha=lam).fit(X, y)
        # bound: two backward-stable solvers (ridge_bounds)
        b = ridge_bounds(X, y, lam, standardize=False)
        assert _rel(res.coef[k], sk.coef_) <= b.coef
        assert_allclose(res.intercept[k], sk.intercept_, rtol=0, atol=b.intercept)


def test_two_rows_leave_one_out_is_the_other_value():
    """n = 2: leaving one row out leaves a single row, whose centered design is zero, so
    the prediction is that row's response: LOO MSE = (y1 - y2)^2 at every lam (direct
    from the definition)."""
    X, y = np.array([[0.3, -1.0], [2.0, 4.0]]), np.array([1.0, 4.0])
    res = fit_path(X, y, n_lambdas=7)
    _finite(res)
    # bound: each LOO residual is y_i - y_j up to the rounding of the centered
    # design's (zero-leverage) terms: ridge_bounds.loo at each penalty, one solver
    for k, lam in enumerate(res.lambdas):
        assert_allclose(res.loo_mse[k], (y[0] - y[1]) ** 2,
                        rtol=ridge_bounds(X, y, lam, solvers=1).loo)
    assert_allclose(res.min_norm.loo_mse, (y[0] - y[1]) ** 2,
                    rtol=ridge_bounds(X, y, 0.0, solvers=1).loo)


def test_tall_n_100000_p_2():
    """n = 100 000, p = 2: coefficients equal scikit-learn Ridge and LOO equals the
    explicit hat-diagonal formula e_i / (1 - h_ii) (Allen 1974), within
    ridge_bounds plus the explicit 2 x 2 inverse's error (solve_bound)."""
    rng = np.random.default_rng(9)
    n = 100_000
    X = rng.standard_normal((n, 2)) * [1.0, 1e3] + [5.0, -2e3]
    y = X @ [0.5, 2e-3] + rng.standard_normal(n)
    lams = np.array([1.0, 1e4, 1e7])
    res = fit_path(X, y, lams)
    _finite(res)
    mu, sd = X.mean(0), X.std(0)
    Z = (X - mu) / sd
    G = Z.T @ Z
    for k, lam in enumerate(lams):
        sk = Ridge(alpha=lam).fit(Z, y)
        # bound: two backward-stable solvers (ridge_bounds)
        b = ridge_bounds(X, y, lam)
        assert _rel(res.coef[k], sk.coef_ / sd) <= b.coef
        e = y - sk.predict(Z)
        A = G + lam * np.eye(2)
        h = 1.0 / n + np.einsum("ij,jk,ik->i", Z, np.linalg.inv(A), Z)
        # bound: ours and Ridge's residual (ridge_bounds.loo, two solvers) plus the
        # explicit inverse: |dh_i| <= ||z_i||^2 ||A^-1|| (solve_bound(A) + gamma_n)
        # (Gram matrix formed by n-term sums), over min(1 - h)
        dh = (np.max(np.sum(Z * Z, axis=1)) / np.linalg.eigvalsh(A)[0]
              * (solve_bound(A) + gamma(n) * np.linalg.cond(A)))
        tol = b.loo + 2 * dh / np.min(1 - h) + 2 * gamma(n)
        assert_allclose(res.loo_mse[k], np.mean((e / (1 - h)) ** 2), rtol=tol)


# ------------------------------------------------------------ property-based

shapes = st.tuples(st.integers(3, 12), st.integers(1, 16), st.integers(0, 2**31 - 1),
                   st.booleans())


def _design(n, p, seed, low_rank):
    rng = np.random.default_rng(seed)
    if low_rank and min(n, p) > 2:
        k = int(rng.integers(1, min(n, p) - 1))
        X = rng.standard_normal((n, k)) @ rng.standard_normal((k, p))
    else:
        X = rng.standard_normal((n, p))
    X = X * rng.uniform(0.1, 10.0, p) + rng.uniform(-3, 3, p)
    y = rng.standard_normal(n) + 1.0
    return X, y, rng


LAMS = np.array([1e-2, 1.0, 1e2])


@HYP
@given(shapes)
def test_permuting_columns_permutes_coefficients(case):
    """Ridge is equivariant under column permutations (the penalty ||b||^2 and the fit are
    invariant under relabelling): coef(X[:, perm]) = coef(X)[:, perm]."""
    n, p, seed, low = case
    X, y, rng = _design(n, p, seed, low)
    perm = rng.permutation(p)
    a = fit_path(X, y, LAMS)
    b = fit_path(X[:, perm], y, LAMS)
    for k, lam in enumerate(LAMS):
        # bound: the same problem with relabelled columns, two backward-stable
        # solves (ridge_bounds; the permutation itself is exact)
        bd = ridge_bounds(X, y, lam)
        assert np.linalg.norm(b.coef[k] - a.coef[k, perm]) <= bd.coef * bd.coef_norm
        assert_allclose(b.loo_mse[k], a.loo_mse[k], rtol=bd.loo)


@HYP
@given(shapes, st.floats(-6, 6), st.booleans())
def test_rescaling_a_column_leaves_standardized_predictions(case, log_c, negative):
    """With standardization, multiplying a column by c != 0 leaves every prediction
    unchanged (the standardized design is the same up to the column's sign)."""
    n, p, seed, low = case
    X, y, rng = _design(n, p, seed, low)
    j = int(rng.integers(p))
    c = (-1.0 if negative else 1.0) * 10.0 ** log_c
    Xs = X.copy()
    Xs[:, j] *= c
    a = fit_path(X, y, LAMS)
    b = fit_path(Xs, y, LAMS)
    sd = X.std(axis=0)
    for k, lam in enumerate(LAMS):
        # bound: the same standardized problem up to one rounding per entry of
        # column j (part of backward_eps): ridge_bounds, two solves; entry j
        # of the coefficients within coef_std * ||gamma|| / s_j, plus the
        # rounding of the product by c (u)
        bd = ridge_bounds(X, y, lam)
        assert_allclose(b.predict(Xs, lam), a.predict(X, lam), rtol=0,
                        atol=bd.predict_atol(X))
        assert_allclose(b.coef[k, j] * c, a.coef[k, j], rtol=2 * UNIT,
                        atol=bd.coef_std * bd.coef_std_norm / sd[j])


@HYP
@given(shapes)
def test_duplicated_column_splits_its_coefficient(case):
    """Adding an exact copy of column j (standardized): the two copies get equal
    coefficients at every lam — for a fixed total c, a^2 + b^2 is smallest at a = b — and
    their total is the ridge solution with that column's penalty halved, computed here by
    numpy.linalg.solve of (Z'Z + lam W) b = Z'y, W = diag(1, ..., 1/2, ..., 1)."""
    n, p, seed, low = case
    X, y, rng = _design(n, p, seed, low)
    sd = X.std(axis=0)
    assume(np.all(sd > 1e-8 * np.abs(X).max(axis=0)))
    j = int(rng.integers(p))
    res = fit_path(np.column_stack([X, X[:, j]]), y, LAMS)
    Xd = np.column_stack([X, X[:, j]])
    Z = (X - X.mean(0)) / sd
    w = np.ones(p)
    w[j] = 0.5
    for k, lam in enumerate(LAMS):
        # bound: equal in exact arithmetic; each within the duplicated problem's
        # ridge_bounds (one solver) on the standardized scale
        bd = ridge_bounds(Xd, y, lam, solvers=1)
        atol = bd.coef_std * bd.coef_std_norm
        assert_allclose(res.coef[k, j] * sd[j], res.coef[k, p] * sd[j], rtol=0, atol=2 * atol)
        A = Z.T @ Z + lam * np.diag(w)
        total = np.linalg.solve(A, Z.T @ (y - y.mean()))
        # bound: ours (atol per entry, twice for the sum) + numpy's solve of the
        # normal equations (solve_bound plus cond(A) gamma_n for forming them)
        ref_err = (solve_bound(A) + gamma(n) * np.linalg.cond(A)) * np.linalg.norm(total)
        assert_allclose((res.coef[k, j] + res.coef[k, p]) * sd[j], total[j], rtol=0,
                        atol=2 * atol + ref_err)
        keep = [i for i in range(p) if i != j]
        assert_allclose(res.coef[k, keep] * sd[keep], total[keep], rtol=0, atol=atol + ref_err)


@HYP
@given(st.integers(3, 12), st.integers(0, 3), st.integers(0, 2**31 - 1))
def test_interpolation_at_lambda_to_zero_when_p_ge_n(n, extra, seed):
    """p >= n with full row rank of the centered design (rank n - 1, checked with
    numpy.linalg.matrix_rank): the lam -> 0+ fit interpolates the training data
    (minimum-norm interpolation; e.g. Hastie, Montanari, Rosset & Tibshirani 2022,
    Ann. Statist. 50, 949-986)."""
    p = n + extra
    X, y, _ = _design(n, p, seed, False)
    assume(np.linalg.matrix_rank(X - X.mean(0)) == n - 1)
    res = fit_path(X, y, n_lambdas=5)
    # bound: the exact fit is y; one solver's fitted-value error (ridge_bounds);
    # at tiny = 1e-10 d_r^2 the exact residual is at most tau ||c|| (limit_gap)
    from error_bounds import limit_gap
    b0 = ridge_bounds(X, y, 0.0, solvers=1)
    assert_allclose(res.predict(X, 0.0), y, rtol=0, atol=b0.fitted)
    tiny = res.singular_values[-1] ** 2 * 1e-10
    gap = np.sqrt(n * limit_gap(X, y, tiny).mse)
    assert_allclose(res.predict(X, tiny), y, rtol=0,
                    atol=ridge_bounds(X, y, tiny, solvers=1).fitted + gap)
    assert res.min_norm.train_mse <= b0.mse_abs


# ------------------------------------------------------- range of the data (issue 11)

def _range_problem():
    rng = np.random.default_rng(0)
    X = rng.standard_normal((40, 5))
    return X, X @ rng.standard_normal(5) + rng.standard_normal(40)


@pytest.mark.parametrize("case, match", [
    ("y*1e170", r"y spans .*leave the float64 range; rescale it \(e\.g\. divide by 1e"),
    ("y*1e-160", r"y spans only .*underflow float64; rescale it \(e\.g\. multiply by 1e"),
    ("y near 1e308", r"y is constant up to rounding"),
    ("y one ulp", r"y is constant up to rounding"),
    ("x 1.5e308 unstandardized", r"feature column 4 spans .*pass standardize=True"),
    ("x 1.5e308", r"feature column 4 spans .*coefficient.*rescale the column"),
    ("x subnormal unstandardized", r"feature column 4 spans .*pass standardize=True"),
])
def test_values_outside_the_float64_range_are_refused_in_one_line(case, match):
    """Issue 11 item 6, IEEE 754 double range (largest finite 1.8e308, smallest normal
    2.2e-308): criteria are mean squares of the response's spread s, so n s^2 must stay
    finite and s^2 a normal number; a response whose spread is within n eps of its size
    is constant to rounding (the scale-relative test the columns use); without
    standardization the penalty acts on squared column sizes.  One-line InputError
    naming the column and the fix, no RuntimeWarning (errors in this suite)."""
    from paths.data.validation import InputError

    X, y = _range_problem()
    std = "unstandardized" not in case
    if case.startswith("x"):
        X = X.copy()
        X[:, 4] = X[:, 4] / np.abs(X[:, 4]).max() * (1.5e308 if "1.5e308" in case else 1e-310)
    y = {"y*1e170": y * 1e170, "y*1e-160": y * 1e-160,
         "y near 1e308": 1e308 + y * 1e292,
         "y one ulp": np.where(np.arange(40) % 2 == 0, 1.0, np.nextafter(1.0, 2.0))}.get(case, y)
    with pytest.raises(InputError, match=match) as info:
        fit_path(X, y, standardize=std)
    assert "\n" not in str(info.value)


@pytest.mark.parametrize("f, fy", [(1e250, 1.0), (1e-250, 1.0), (1e-310, 1e-140)])
def test_extreme_standardized_columns_are_rescaled_exactly(f, fy):
    """A column of size 1e250, 1e-250 or subnormal (1e-310, 44 significant bits left,
    IEEE 754) is rescaled internally by a power of two before centering (exact), so the
    standardized fit is the one of the unscaled column: coefficients scale by fy/f,
    intercepts by fy, criteria by fy^2.  Tolerances: ridge_bounds of the fit (two
    solves of the same problem: y * fy rounds once per entry, a backward error
    Wedin's theorem covers); for the subnormal column its own precision (half a
    subnormal spacing per entry, 2.5e-324, normwise relative to the column) is an
    extra backward error."""
    X, y = _range_problem()
    lams = [0.0, 1.0, 10.0]
    ref = fit_path(X, y, lams)
    X2 = X.copy()
    X2[:, 2] *= f
    res = fit_path(X2, y * fy, lams)
    extra = 0.0
    if f < 1e-300:  # bits lost to the subnormal range, normwise on the column
        up = 2.0**600  # exact power-of-two lift out of the subnormal range
        extra = np.sqrt(40) * 0.5 * (np.nextafter(0.0, 1.0) * up) / np.linalg.norm(X2[:, 2] * up)
    sd = X.std(axis=0)
    for k, lam in enumerate(lams):
        # bound: ridge_bounds (two solves, the subnormal's precision as extra_eps),
        # plus the comparison's own roundings (* f / fy: 2u)
        b = ridge_bounds(X, y, lam, extra_eps=extra)
        assert_allclose(res.coef[k, 2] * f / fy, ref.coef[k, 2], rtol=2 * UNIT,
                        atol=b.coef_std * b.coef_std_norm / sd[2])
        assert_allclose(res.intercept[k] / fy, ref.intercept[k], rtol=UNIT, atol=b.intercept)
        for name, tol in (("gcv", b.gcv), ("loo_mse", b.loo), ("train_mse", b.mse)):
            assert_allclose(getattr(res, name)[k] / fy**2, getattr(ref, name)[k],
                            rtol=tol + 2 * UNIT, err_msg=name)
