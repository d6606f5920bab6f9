"""Prediction intervals (paths/selection/intervals.py) against brute-force refits and theory.

References:

- endpoints: scikit-learn ``Ridge`` refitted without row i (jackknife+), without
  each fold (CV+) or on the proper training rows (split), intercept refitted,
  column scales learned once on all rows and held fixed (the estimator the
  closed forms compute); at lambda = 0, numpy ``lstsq`` minimum-norm refits;
  the quantiles taken by sorting, as defined in Barber, Candès, Ramdas &
  Tibshirani (2021), Ann. Statist. 49, eq. (6), and Lei et al. (2018), JASA 113;
- coverage: the finite-sample guarantees of those papers (jackknife+ >= 1 - 2 alpha,
  Barber et al. Thm 1; split conformal between 1 - alpha and
  1 - alpha + 1/(n_cal + 1), Lei et al. Thm 2.2) over repeated simulated datasets.

Data are synthetic and seeded (the ``make_problem`` fixture and local generators).
"""
from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose
from sklearn.linear_model import Ridge

from error_bounds import U, ridge_bounds
from paths import InputError, fit_path, prediction_intervals
from paths.selection.cv import make_folds
from paths.selection.intervals import conformal_ranks

# numerical reference checks against outside references: CI reruns them under a
# forced OpenBLAS kernel (.ci/run)
pytestmark = pytest.mark.reference

LEVEL = 0.8


def _refit_atol(X, y, Xn, lam, groups, scale):
    """How far a computed interval endpoint may lie from the exact one: each endpoint is an
    order statistic of mu_g(x) -+ R_i, and order statistics move by at most the largest
    move of their arguments (they are 1-Lipschitz in the sup norm); each refit's
    predictions at the new rows and at its left-out rows are within Wedin's bound
    (error_bounds.ridge_bounds.predict_atol, one backward-stable solver).  A method
    backward stable on the whole data stays within the same bound, hence twice it for
    two computations."""
    n = X.shape[0]
    Xs, Xns = X / scale, Xn / scale
    worst = 0.0
    for g in groups:
        keep = np.setdiff1d(np.arange(n), g)
        b = ridge_bounds(Xs[keep], y[keep], lam, standardize=False, solvers=1)
        worst = max(worst, b.predict_atol(Xns) + b.predict_atol(Xs[g]))
    return 2 * worst


def _refit_intervals(X, y, Xn, lam, groups, level, scale):
    """Brute-force jackknife+/CV+ endpoints: one refit per left-out group."""
    n = X.shape[0]
    Xs, Xns = X / scale, Xn / scale
    mus, R = np.empty((Xn.shape[0], n)), np.empty(n)
    for g in groups:
        keep = np.setdiff1d(np.arange(n), g)
        if lam == 0:  # minimum-norm least squares on the centered rows
            xm, ym = Xs[keep].mean(axis=0), y[keep].mean()
            beta = np.linalg.lstsq(Xs[keep] - xm, y[keep] - ym, rcond=None)[0]
            predict = lambda A: ym + (A - xm) @ beta  # noqa: E731
        else:
            predict = Ridge(alpha=lam, solver="svd").fit(Xs[keep], y[keep]).predict
        mus[:, g] = predict(Xns)[:, None]
        R[g] = np.abs(y[g] - predict(Xs[g]))
    k_lo, k_hi = conformal_ranks(n, level)
    return np.sort(mus - R, axis=1)[:, k_lo - 1], np.sort(mus + R, axis=1)[:, k_hi - 1]


CASES = {"tall": (50, 12, 2.0), "wide": (30, 70, 5.0), "wide, lambda=0": (30, 70, 0.0)}


@pytest.mark.parametrize("case", list(CASES))
@pytest.mark.parametrize("standardize", [False, True])
@pytest.mark.parametrize("method", ["jackknife+", "cv+"])
def test_endpoints_equal_refits(make_problem, case, standardize, method):
    """Jackknife+ and CV+ endpoints equal scikit-learn refits (within _refit_atol)."""
    n, p, lam = CASES[case]
    X, y = make_problem(n, p, seed=4)
    Xn = make_problem(7, p, seed=5)[0]
    path = fit_path(X, y, standardize=standardize)
    pi = prediction_intervals(path, Xn, lam, level=LEVEL, method=method, n_folds=6, seed=2)
    if method == "jackknife+":
        groups = [[i] for i in range(n)]
    else:
        labels = make_folds(n, 6, seed=2)
        groups = [np.flatnonzero(labels == f) for f in range(6)]
    scale = X.std(axis=0) if standardize else np.ones(p)
    lo, up = _refit_intervals(X, y, Xn, lam, groups, LEVEL, scale)
    width = pi.upper - pi.lower
    assert np.all(width > 0)
    # bound: _refit_atol (Wedin per refit, order statistics 1-Lipschitz)
    tol = _refit_atol(X, y, Xn, lam, groups, scale)
    assert_allclose(pi.lower, lo, rtol=0, atol=tol)
    assert_allclose(pi.upper, up, rtol=0, atol=tol)
    assert pi.method == method and pi.level == LEVEL and pi.lam == lam


def test_split_equals_refit_on_training_rows(make_problem):
    """Split conformal: the proper-training refit plus/minus the calibration quantile."""
    n, p, lam = 41, 60, 3.0
    X, y = make_problem(n, p, seed=6)
    Xn = make_problem(5, p, seed=7)[0]
    pi = prediction_intervals(fit_path(X, y, standardize=False), Xn, lam, level=LEVEL,
                              method="split", calibration=0.4, seed=3)
    cal = np.random.default_rng(3).permutation(n)[:round(0.4 * n)]
    train = np.setdiff1d(np.arange(n), cal)
    model = Ridge(alpha=lam, solver="svd").fit(X[train], y[train])
    q = np.sort(np.abs(y[cal] - model.predict(X[cal])))[conformal_ranks(cal.size, LEVEL)[1] - 1]
    centre = model.predict(Xn)
    assert pi.n_calibration == cal.size
    # bound: two backward-stable solves of the proper-training fit (ridge_bounds): the
    # centre within predict_atol(Xn), the quantile (an order statistic of the
    # calibration residuals, 1-Lipschitz) within predict_atol(X[cal])
    b = ridge_bounds(X[train], y[train], lam, standardize=False)
    dc, dq = b.predict_atol(Xn), b.predict_atol(X[cal])
    assert_allclose(pi.prediction, centre, rtol=0, atol=dc)
    assert_allclose(pi.lower, centre - q, rtol=0, atol=dc + dq + 2 * U * np.abs(centre - q).max())
    assert_allclose(pi.upper, centre + q, rtol=0, atol=dc + dq + 2 * U * np.abs(centre + q).max())


def test_prediction_is_full_fit_and_blocks_do_not_matter(make_problem):
    """The point prediction is the full-data fit (RidgePath.predict); a tiny memory
    budget (one row per block) gives the same endpoints (BLAS may block a one-row
    product differently): both within the refits' bound of the exact endpoints."""
    X, y = make_problem(40, 90, seed=8)
    Xn = make_problem(9, 90, seed=9)[0]
    path = fit_path(X, y)
    big = prediction_intervals(path, Xn, 4.0)
    small = prediction_intervals(path, Xn, 4.0, max_block_bytes=1)
    # bound: the full fit's prediction computed twice (ridge_bounds.predict_atol)
    assert_allclose(big.prediction, path.predict(Xn, 4.0), rtol=0,
                    atol=ridge_bounds(X, y, 4.0).predict_atol(Xn))
    # bound: _refit_atol (jackknife+, the default: one group per row)
    tol = _refit_atol(X, y, Xn, 4.0, [[i] for i in range(40)], X.std(axis=0))
    assert_allclose(big.lower, small.lower, rtol=0, atol=tol)
    assert_allclose(big.upper, small.upper, rtol=0, atol=tol)


def test_several_targets_equal_one_at_a_time(make_problem):
    """With several targets (and a penalty per target) each column equals its own run."""
    X, Y = make_problem(35, 50, seed=10, t=2)
    Xn = make_problem(4, 50, seed=11)[0]
    both = prediction_intervals(fit_path(X, Y), Xn, [2.0, 20.0], method="cv+", n_folds=5)
    for j, lam in enumerate([2.0, 20.0]):
        one = prediction_intervals(fit_path(X, Y[:, j]), Xn, lam, method="cv+", n_folds=5)
        # bound: both within the refits' bound (_refit_atol) on the same folds
        # (make_folds with the default seed 0)
        labels = make_folds(35, 5, seed=0)
        groups = [np.flatnonzero(labels == f) for f in range(5)]
        tol = _refit_atol(X, Y[:, j], Xn, lam, groups, X.std(axis=0))
        assert_allclose(both.lower[:, j], one.lower, rtol=0, atol=tol)
        assert_allclose(both.upper[:, j], one.upper, rtol=0, atol=tol)
    # exact: the penalties are passed through
    assert_allclose(both.lam, [2.0, 20.0], rtol=0)


def _coverage_runs(method, level, *, reps, n=60, p=100, m=100, seed=0):
    """Per dataset: the share of m fresh test points inside their interval."""
    rng = np.random.default_rng(seed)
    cover = np.empty(reps)
    for r in range(reps):
        beta = rng.standard_normal(p) / np.sqrt(p)
        X = rng.standard_normal((n + m, p))
        y = X @ beta + 0.7 * rng.standard_normal(n + m)
        path = fit_path(X[:n], y[:n], [0.5 * p])  # near the optimum p sigma^2 / |beta|^2
        pi = prediction_intervals(path, X[n:], 0.5 * p, level=level, method=method,
                                  seed=r, n_folds=5)
        cover[r] = pi.coverage(y[n:])
    return cover.mean(), cover.std(ddof=1) / np.sqrt(reps)


def test_jackknife_plus_coverage():
    """Over 150 simulated datasets, jackknife+ coverage is never below 1 - 2 alpha
    (Barber et al. 2021, Thm 1) beyond 4 Monte Carlo SEs, and near the nominal
    level: within 0.05 + 4 SE (the paper's simulations show jackknife+ close to
    1 - alpha for stable fits such as ridge; their Thm 5 under stability)."""
    level = 0.8
    mean, se = _coverage_runs("jackknife+", level, reps=150)
    # sampling: 4 Monte Carlo SEs over 150 datasets: a false failure has probability
    # 3.2e-5 (one-sided normal); spec: the 0.05 allowance is the paper's "close to"
    assert mean >= 1 - 2 * (1 - level) - 4 * se
    assert abs(mean - level) <= 0.05 + 4 * se


def test_split_conformal_coverage_bounds():
    """Split conformal coverage lies in [1 - alpha, 1 - alpha + 1/(n_cal + 1)]
    (Lei et al. 2018, Thm 2.2; continuous residuals) within 4 Monte Carlo SEs."""
    level = 0.8
    mean, se = _coverage_runs("split", level, reps=150)
    n_cal = 30
    # sampling: 4 Monte Carlo SEs (false failure 3.2e-5 per side, normal approximation)
    assert level - 4 * se <= mean <= level + 1 / (n_cal + 1) + 4 * se


def test_cv_plus_coverage():
    """CV+ coverage >= 1 - 2 alpha - min(2(1 - 1/K)/(n/K + 1), (1 - K/n)/(K + 1))
    (Barber et al. 2021, Thm 4) within 4 Monte Carlo SEs."""
    level, K, n = 0.8, 5, 60
    mean, se = _coverage_runs("cv+", level, reps=100)
    slack = min(2 * (1 - 1 / K) / (n / K + 1), (1 - K / n) / (K + 1))
    # sampling: 4 Monte Carlo SEs (false failure 3.2e-5, one-sided normal)
    assert mean >= 1 - 2 * (1 - level) - slack - 4 * se


def test_conformal_ranks_definition():
    """floor(alpha (n + 1)) and ceil((1 - alpha)(n + 1)) (Barber et al. 2021, eq. 6),
    exact at the integer boundary alpha (n + 1) = 10."""
    assert conformal_ranks(99, 0.9) == (10, 90)
    assert conformal_ranks(100, 0.9) == (10, 91)
    assert conformal_ranks(19, 0.5) == (10, 10)


def test_bad_input(make_problem):
    """One-line InputErrors naming the fix (common practice)."""
    X, y = make_problem(30, 10, seed=1)
    path = fit_path(X, y)
    with pytest.raises(InputError, match="at least 99"):
        prediction_intervals(path, X, 1.0, level=0.99)
    with pytest.raises(InputError, match="strictly between"):
        prediction_intervals(path, X, 1.0, level=1.0)
    with pytest.raises(InputError, match="columns"):
        prediction_intervals(path, X[:, :5], 1.0)
    with pytest.raises(InputError, match="method"):
        prediction_intervals(path, X, 1.0, method="bootstrap")
    with pytest.raises(InputError, match="fold labels"):
        prediction_intervals(path, X, 1.0, method="cv+", folds=np.zeros(3, dtype=int))
    with pytest.raises(InputError, match="calibration"):
        prediction_intervals(path, X, 1.0, method="split", calibration=1.5)
    with pytest.raises(InputError, match="lambdas"):
        prediction_intervals(path, X, -1.0)
