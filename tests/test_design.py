"""Reference checks for :mod:`paths.core.design` (centering by a Householder
reflector, scaling, constant columns).

References: numpy (column means, ``std`` with ddof=0, inner products of the
explicitly centered design) and the algebra of Householder reflectors
(Golub & Van Loan, *Matrix Computations*, 4th ed., sec. 5.1: Q = I - 2vv^T/v^Tv
is symmetric and orthogonal).
"""
from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings, strategies as st
from numpy.testing import assert_allclose

from error_bounds import (U, assert_within, backward_eps, centering_atol, explicit_hat_bound,
                          gamma, gram_atol, orthonormality_bound, ridge_bounds)
from paths import fit_path
from paths.core.design import prepare, to_sample_space

# numerical reference checks (numpy, mpmath, scikit-learn, published bounds): CI reruns
# them under a forced OpenBLAS kernel (.ci/run)
pytestmark = pytest.mark.reference

EPS = np.finfo(np.float64).eps


def _data(n, p, seed=0, t=1):
    rng = np.random.default_rng(seed)
    X = rng.standard_normal((n, p)) * np.geomspace(0.01, 100, p) + rng.uniform(-50, 50, p)
    Y = rng.standard_normal((n, t)) + 10.0
    return X, Y


@pytest.mark.parametrize("shape", [(50, 7), (9, 30), (2, 3)])
@pytest.mark.parametrize("standardize", [False, True], ids=["raw", "std"])
def test_reduction_preserves_inner_products(shape, standardize):
    """The reduced design z (m = n - 1 rows) has the inner products of the
    centered design: z^T z = Xc^T Xc and z^T zy = Xc^T yc (numpy, explicit
    centering).  Tolerance: gram_atol (two centerings, each within
    gamma_6n of the raw columns' norms, and two n-term inner products)."""
    n, p = shape
    X, Y = _data(n, p, seed=n)
    design, z = prepare(X, Y, fit_intercept=True, standardize=standardize)
    scale = X.std(axis=0) if standardize else np.ones(p)
    Xc = (X - X.mean(axis=0)) / scale
    yc = Y - Y.mean(axis=0)
    assert z.shape == (n - 1, p) and design.zy.shape == (n - 1, 1)
    G, Gref = z.T @ z, Xc.T @ Xc
    # bound: gram_atol on the scaled columns (scaling: one rounding per entry,
    # u relative, inside gamma_6n's constant)
    Xs = X / scale
    assert_within(G, Gref, gram_atol(Xs))
    c, cref = z.T @ design.zy, Xc.T @ yc
    assert_within(c, cref, gram_atol(Xs, Y))
    assert_within(design.zy.T @ design.zy, yc.T @ yc, gram_atol(Y))
    # bound: means are n-term sums, within gamma_n of the mean of |x| on each side
    assert_within(design.x_mean, X.mean(axis=0),
                    atol=2 * gamma(n) * np.abs(X).mean(axis=0))
    assert_within(design.y_mean, Y.mean(axis=0),
                    atol=2 * gamma(n) * np.abs(Y).mean(axis=0))
    # bound: the SD is ||xc|| / sqrt(n) with xc within centering_atol per entry
    # (relative to the raw column's size, not to the SD), plus gamma_n for the
    # sum of squares and its square root, on each side
    if standardize:
        assert np.all(np.abs(design.x_scale - scale)
                      <= 2 * (centering_atol(X) + gamma(n + 2) * scale))
    else:
        assert np.all(design.x_scale == 1.0)


def test_population_sd_scaling_and_transform():
    """Scales are numpy's population SD (``std(ddof=0)``, as scikit-learn's
    ``StandardScaler``); ``transform`` maps new rows exactly as the training
    rows; without an intercept the columns are not centered but still scaled by
    the population SD (StandardScaler(with_mean=False) convention)."""
    from sklearn.preprocessing import StandardScaler

    X, Y = _data(40, 6, seed=3)
    d, z = prepare(X, Y, fit_intercept=True, standardize=True)
    sc = StandardScaler().fit(X)
    # bound: two computations of the SD, each within centering_atol + gamma_n
    # (see test_reduction_preserves_inner_products)
    sd = X.std(axis=0)
    sd_tol = 2 * (centering_atol(X) + gamma(42) * sd)
    assert_within(d.x_scale, sc.scale_, sd_tol)
    assert_within(d.x_scale, X.std(axis=0, ddof=0), sd_tol)
    Xn = np.random.default_rng(4).standard_normal((5, 6))
    # bound: (x - mean) / sd with the mean within 2 gamma_n mean|x| and the SD
    # within sd_tol: |dz| <= (2u (|x| + |mean|) + dmean) / sd + |z| (dsd / sd + u)
    zn = sc.transform(Xn)
    dmean = 2 * gamma(40) * np.abs(X).mean(axis=0)
    atol = ((2 * U * (np.abs(Xn) + np.abs(sc.mean_)) + dmean) / sd
            + np.abs(zn) * (sd_tol / sd + U))
    assert_within(d.transform(Xn), zn, atol)
    # bound: |z_j|^2 = n up to the centered column's error relative to its norm
    # (centering_atol / ||xc||, twice for the square) and gamma_n for the sums
    m = np.sqrt(40) * sd
    assert_within(np.sum(z**2, axis=0), 40.0,
                    atol=40.0 * (4 * np.sqrt(40) * centering_atol(X) / m + 4 * gamma(42)))
    d0, z0 = prepare(X, Y, fit_intercept=False, standardize=True)
    assert np.all(d0.x_mean == 0) and np.all(d0.y_mean == 0)
    # bound: without centering, sqrt(mean of squares): gamma_{n+2} on each side
    assert_allclose(d0.x_scale, StandardScaler(with_mean=False).fit(X).scale_,
                    rtol=2 * gamma(42))
    # bound: one correctly rounded division per entry on each side (IEEE 754)
    assert_allclose(z0, X / d0.x_scale, rtol=2 * U)
    # exact: without an intercept y is neither centered nor scaled (a copy)
    assert_allclose(d0.zy, Y, rtol=0)
    d1, z1 = prepare(X, Y, fit_intercept=True, standardize=False)
    assert np.all(d1.x_scale == 1.0)


def test_constant_columns_detected_and_dropped():
    """Exactly constant columns (any magnitude, including 0 and 1e12) are
    detected (numpy: max == min), left out of z, keep scale 1, and get
    coefficient exactly 0 on the whole path and in the min-norm fit; a column
    that merely has a large mean and small spread is kept."""
    rng = np.random.default_rng(5)
    n = 25
    X = np.column_stack([rng.standard_normal(n), np.zeros(n), np.full(n, 1e12),
                         rng.standard_normal(n), np.full(n, -3.3),
                         1e6 + 1e-3 * rng.standard_normal(n)])
    y = X[:, 0] - X[:, 3] + rng.standard_normal(n)
    design, z = prepare(X, y[:, None], fit_intercept=True, standardize=True)
    assert list(design.constant) == [1, 2, 4]
    assert np.array_equal(design.active, np.ptp(X, axis=0) > 0)
    assert z.shape == (n - 1, 3)
    assert np.all(design.x_scale[[1, 2, 4]] == 1.0)
    res = fit_path(X, y)
    assert np.all(res.coef[:, [1, 2, 4]] == 0.0)
    assert np.all(res.min_norm.coef[[1, 2, 4]] == 0.0)
    assert res.rank == 3
    # without an intercept a constant column is an ordinary regressor
    d0, z0 = prepare(X, y[:, None], fit_intercept=False, standardize=False)
    assert d0.active.all() and z0.shape == (n, 6)


@pytest.mark.parametrize("n", [2, 3, 17, 100])
def test_to_sample_space_is_orthonormal_and_orthogonal_to_ones(n):
    """to_sample_space maps an orthonormal basis of the reduced coordinates to
    orthonormal columns orthogonal to the ones vector (Householder reflector Q
    with Q 1 = -sqrt(n) e_1, symmetric and orthogonal: Golub & Van Loan 5.1);
    together with 1/sqrt(n) they form an orthogonal matrix (numpy check).
    atol: one reflector's entries, each within gamma_{n+4} (its norm, a product
    and a quotient; Higham 2002 section 19.3), on each side of an n-term inner
    product (gamma_n)."""
    a = np.eye(n - 1)
    Q = to_sample_space(a, fit_intercept=True)  # columns 2..n of Q
    assert Q.shape == (n, n - 1)
    # bound: docstring
    tol = 2 * gamma(n + 4) + gamma(n)
    assert_allclose(Q.T @ Q, np.eye(n - 1), atol=tol)
    assert_allclose(np.ones(n) @ Q, 0.0, atol=np.sqrt(n) * tol)
    full = np.column_stack([np.ones(n) / np.sqrt(n), Q])
    assert_allclose(full @ full.T, np.eye(n), atol=tol + 2 * U)
    # and it inverts the reduction: Q [0; z] = Xc (numpy centering); bound: two
    # reflector applications and numpy's centering, centering_atol each
    X, Y = _data(n, 4, seed=n)
    _, z = prepare(X, Y, fit_intercept=True, standardize=False)
    assert_within(to_sample_space(z, True), X - X.mean(axis=0),
                    atol=3 * centering_atol(X))
    # without an intercept the map is the identity
    assert to_sample_space(a, False) is a


def test_reduced_response_of_factor_basis_in_sample_space():
    """The sample-space left singular vectors U_n = to_sample_space(U) are
    orthonormal, orthogonal to 1, and span the centered columns: the hat matrix
    11^T/n + U_n diag(f) U_n^T equals the explicit numpy hat matrix."""
    rng = np.random.default_rng(8)
    X = rng.standard_normal((15, 6)) + 4.0
    y = rng.standard_normal(15)
    res = fit_path(X, y, [0.7], standardize=False)
    Un = to_sample_space(res.factorization.u, True)
    # bound: the SVD's orthonormality (orthonormality_bound) plus the
    # reflector's (2 gamma_{n+4} + gamma_n, as above)
    tol = orthonormality_bound(14, 6, res.condition_number) + 2 * gamma(19) + gamma(15)
    assert_allclose(Un.T @ Un, np.eye(res.rank), atol=tol)
    assert_allclose(Un.sum(axis=0), 0.0, atol=np.sqrt(15) * tol)
    d2 = res.singular_values**2
    H = np.full((15, 15), 1 / 15) + (Un * (d2 / (d2 + 0.7))) @ Un.T
    X1 = np.column_stack([np.ones(15), X])
    Href = X1 @ np.linalg.solve(X1.T @ X1 + np.diag([0.0] + [0.7] * 6), X1.T)
    # bound: the explicit solve (explicit_hat_bound) plus ours: a projector-type
    # matrix moving by 2 kappa_lam eps_b (Wedin, as in ridge_bounds) and tol
    kap = ridge_bounds(X, y, 0.7, standardize=False).kappa
    assert_allclose(H, Href, atol=explicit_hat_bound(X1, [0.0] + [0.7] * 6)
                    + 2 * kap * backward_eps(15, 6) + 2 * tol)


@settings(max_examples=25, deadline=None)
@given(n=st.integers(2, 30), p=st.integers(1, 12), seed=st.integers(0, 2**16),
       loc=st.floats(-1e6, 1e6), log_scale=st.floats(-6, 6))
def test_property_centering_matches_numpy(n, p, seed, loc, log_scale):
    """For any location and scale of the columns, z^T z equals the Gram matrix
    of the numpy-centered design (gram_atol: the centered design is computed
    from data of magnitude |X|, so its rounding is relative to |X|, not to the
    spread)."""
    rng = np.random.default_rng(seed)
    X = loc + 10.0**log_scale * rng.standard_normal((n, p))
    _, z = prepare(X, np.ones((n, 1)), fit_intercept=True, standardize=False)
    Xc = X - X.mean(axis=0)
    # bound: gram_atol (docstring)
    assert_within(z.T @ z, Xc.T @ Xc, gram_atol(X))
