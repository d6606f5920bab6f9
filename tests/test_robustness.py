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
    rounding of a well-conditioned problem: 1e-9 relative."""
    X, y = _problem(*shape, seed=1)
    ref = fit_path(X, y, standardize=False, n_lambdas=20)
    res = fit_path(X * s, y, ref.lambdas * s**2, standardize=False)
    _finite(res)
    assert_allclose(res.coef * s, ref.coef, rtol=1e-9, atol=1e-9 * np.abs(ref.coef).max())
    for name in ("df", "train_mse", "gcv", "loo_mse"):
        assert_allclose(getattr(res, name), getattr(ref, name), rtol=1e-9, err_msg=name)
    assert_allclose(res.min_norm.coef * s, ref.min_norm.coef, rtol=1e-8,
                    atol=1e-8 * np.abs(ref.min_norm.coef).max())
    assert_allclose(res.min_norm.gcv, ref.min_norm.gcv, rtol=1e-8)
    assert_allclose(res.min_norm.loo_mse, ref.min_norm.loo_mse, rtol=1e-8)


@pytest.mark.parametrize("s", [1e-150, 1e150])
def test_response_scale(s):
    """Scaling y by s scales coefficients by s and errors by s^2 (same grid)."""
    X, y = _problem(12, 25, seed=2)
    ref = fit_path(X, y, n_lambdas=15)
    res = fit_path(X, y * s, ref.lambdas)
    _finite(res)
    assert_allclose(res.coef / s, ref.coef, rtol=1e-9, atol=1e-9 * np.abs(ref.coef).max())
    assert_allclose(res.gcv / s**2, ref.gcv, rtol=1e-9)
    assert_allclose(res.loo_mse / s**2, ref.loo_mse, rtol=1e-9)


@pytest.mark.parametrize("shape", [(20, 5), (10, 30)], ids=["n>p", "p>n"])
def test_mixed_column_scales_with_standardization(shape):
    """Columns scaled from 1e-150 to 1e150, standardized: the same fit as unscaled columns
    (standardization undoes the scaling; coefficients scale back by 1/s_j)."""
    X, y = _problem(*shape, seed=3)
    sc = np.logspace(-150, 150, shape[1])
    ref = fit_path(X, y, n_lambdas=20)
    res = fit_path(X * sc, y, n_lambdas=20)
    _finite(res)
    assert_allclose(res.lambdas, ref.lambdas, rtol=1e-9)
    assert_allclose(res.coef * sc, ref.coef, rtol=1e-8, atol=1e-8 * np.abs(ref.coef).max())
    assert_allclose(res.loo_mse, ref.loo_mse, rtol=1e-8)
    assert_allclose(res.predict(X * sc, ref.lambdas[::5]), ref.predict(X, ref.lambdas[::5]),
                    rtol=1e-9, atol=1e-9 * np.abs(y).max())


def test_mixed_column_scales_without_standardization_vs_mpmath():
    """Unstandardized columns from 1e-150 to 1e150: the fitted values at grid penalties
    equal mpmath's (60 digits) to 1e-8 of ||y||; everything finite."""
    X, y = _problem(15, 6, seed=4)
    X = X * np.logspace(-150, 150, 6)
    res = fit_path(X, y, n_lambdas=10, standardize=False)
    _finite(res)
    for k in (0, 5, 9):
        _, fit = _mp_ridge(X, y, res.lambdas[k])
        assert_allclose(res.predict(X, res.lambdas[k]), fit, rtol=0,
                        atol=1e-8 * np.linalg.norm(y))


# ------------------------------------------------------- ill-conditioning, rank


def test_condition_number_1e14_vs_mpmath():
    """kappa(X) = 1e14 (no intercept, no scaling): coefficients and fitted values at
    penalties from 1e-2 down to 1e-26 agree with mpmath within c * eps * kappa_lam,
    kappa_lam = sqrt((d1^2 + lam)/(dr^2 + lam)) the condition number of the ridge
    least-squares problem [X; sqrt(lam) I] (first-order perturbation theory of a
    backward-stable solve, Higham 2002, *Accuracy and Stability of Numerical
    Algorithms*, 2nd ed., Thm 20.1; c = 100 covers the size-dependent constants,
    the measured c is below 10)."""
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
    assert_allclose(res.condition_number, 1e14, rtol=1e-2)
    for k, lam in enumerate(lams):
        beta, fit = _mp_ridge(X, y, lam, intercept=False)
        kap = np.sqrt((d[0] ** 2 + lam) / (d[-1] ** 2 + lam))
        tol = 100 * EPS * kap
        assert np.linalg.norm(res.coef[k] - beta) <= tol * np.linalg.norm(beta), lam
        assert np.linalg.norm(X @ res.coef[k] - fit) <= tol * np.linalg.norm(y), lam


def test_exactly_collinear_columns():
    """x4 = 2 x1 - x2 exactly (small integers, exact in binary): rank p - 1; ridge at
    lam > 0 equals scikit-learn Ridge (svd solver) to 1e-8; the min-norm limit equals
    numpy.linalg.pinv on the centered design to 1e-8."""
    rng = np.random.default_rng(6)
    A = rng.integers(-5, 6, size=(25, 3)).astype(float)
    X = np.column_stack([A, 2 * A[:, 0] - A[:, 1]])
    y = A @ [1.0, -2.0, 0.5] + rng.standard_normal(25)
    res = fit_path(X, y, [0.1, 1.0, 10.0], standardize=False)
    _finite(res)
    assert res.rank == 3
    for k, lam in enumerate(res.lambdas):
        sk = Ridge(alpha=lam, solver="svd").fit(X, y)
        assert_allclose(res.coef[k], sk.coef_, rtol=1e-8, atol=1e-10)
        assert_allclose(res.intercept[k], sk.intercept_, rtol=1e-8)
    Xc = X - X.mean(0)
    assert_allclose(res.min_norm.coef, np.linalg.pinv(Xc) @ (y - y.mean()), rtol=1e-8,
                    atol=1e-10)


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
        assert_allclose(res.coef[k][[0, 1, 3, 4]], sk.coef_ / sd, rtol=1e-9)


@pytest.mark.parametrize("n,p", [(2, 1), (2, 5), (3, 1)])
def test_tiny_problems_match_sklearn(n, p):
    """n = 2 or p = 1: coefficients equal scikit-learn Ridge (rtol 1e-10)."""
    X, y = _problem(n, p, seed=8)
    res = fit_path(X, y, [1e-3, 1.0, 1e3], standardize=False)
    _finite(res)
    for k, lam in enumerate(res.lambdas):
        sk = Ridge(alpha=lam).fit(X, y)
        assert_allclose(res.coef[k], sk.coef_, rtol=1e-10, atol=1e-14)
        assert_allclose(res.intercept[k], sk.intercept_, rtol=1e-10)


def test_two_rows_leave_one_out_is_the_other_value():
    """n = 2: leaving one row out leaves a single row, whose centered design is zero, so
    the prediction is that row's response: LOO MSE = (y1 - y2)^2 at every lam (direct
    from the definition)."""
    X, y = np.array([[0.3, -1.0], [2.0, 4.0]]), np.array([1.0, 4.0])
    res = fit_path(X, y, n_lambdas=7)
    _finite(res)
    assert_allclose(res.loo_mse, (y[0] - y[1]) ** 2, rtol=1e-12)
    assert_allclose(res.min_norm.loo_mse, (y[0] - y[1]) ** 2, rtol=1e-12)


def test_tall_n_100000_p_2():
    """n = 100 000, p = 2: coefficients equal scikit-learn Ridge and LOO equals the
    explicit hat-diagonal formula e_i / (1 - h_ii) (Allen 1974) to 1e-9."""
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
        assert_allclose(res.coef[k], sk.coef_ / sd, rtol=1e-9)
        e = y - sk.predict(Z)
        h = 1.0 / n + np.einsum("ij,jk,ik->i", Z, np.linalg.inv(G + lam * np.eye(2)), Z)
        assert_allclose(res.loo_mse[k], np.mean((e / (1 - h)) ** 2), rtol=1e-9)


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
    scale = np.abs(a.coef).max() + 1e-300
    assert_allclose(b.coef, a.coef[:, perm], rtol=1e-7, atol=1e-9 * scale)
    assert_allclose(b.loo_mse, a.loo_mse, rtol=1e-8)


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
    assert_allclose(b.predict(Xs, LAMS), a.predict(X, LAMS), rtol=1e-8,
                    atol=1e-8 * np.abs(y).max())
    assert_allclose(b.coef[:, j] * c, a.coef[:, j], rtol=1e-6,
                    atol=1e-8 * (np.abs(a.coef).max() + 1e-300))


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
    scale = np.abs(res.coef).max() + 1e-300
    assert_allclose(res.coef[:, j], res.coef[:, p], rtol=1e-7, atol=1e-9 * scale)
    Z = (X - X.mean(0)) / sd
    w = np.ones(p)
    w[j] = 0.5
    for k, lam in enumerate(LAMS):
        total = np.linalg.solve(Z.T @ Z + lam * np.diag(w), Z.T @ (y - y.mean()))
        assert_allclose((res.coef[k, j] + res.coef[k, p]) * sd[j], total[j], rtol=1e-6,
                        atol=1e-8 * np.abs(total).max())
        keep = [i for i in range(p) if i != j]
        assert_allclose(res.coef[k, keep] * sd[keep], total[keep], rtol=1e-6,
                        atol=1e-8 * np.abs(total).max())


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
    scale = np.abs(y).max()
    assert_allclose(res.predict(X, 0.0), y, rtol=0, atol=1e-8 * scale * res.condition_number)
    tiny = res.singular_values[-1] ** 2 * 1e-10
    assert_allclose(res.predict(X, tiny), y, rtol=0, atol=1e-8 * scale * res.condition_number)
    assert res.min_norm.train_mse <= 1e-12 * np.var(y) * res.condition_number ** 2


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
    intercepts by fy, criteria by fy^2.  Tolerances: the well-conditioned fit's
    rounding, 1e-12 (kappa ~ 2, eps-level errors, times 1e3 for the rescaled means);
    for the subnormal column, its own precision 2^-44 = 5.7e-14 amplified by n-term
    sums, 1e-11."""
    X, y = _range_problem()
    lams = [0.0, 1.0, 10.0]
    ref = fit_path(X, y, lams)
    X2 = X.copy()
    X2[:, 2] *= f
    res = fit_path(X2, y * fy, lams)
    tol = 1e-11 if f < 1e-300 else 1e-12
    assert_allclose(res.coef[:, 2] * f / fy, ref.coef[:, 2], rtol=tol)
    assert_allclose(res.intercept / fy, ref.intercept, rtol=tol)
    for name in ("gcv", "loo_mse", "train_mse"):
        assert_allclose(getattr(res, name) / fy**2, getattr(ref, name), rtol=tol, err_msg=name)
