"""REML for the penalty (paths/selection/reml.py and the ``reml`` rule).

References:

- the restricted log-likelihood with sigma^2 profiled out, evaluated densely on
  the n x n matrix H = I + Z Z^T / lambda with ``numpy.linalg.slogdet`` and
  ``numpy.linalg.solve`` (the formula of Patterson & Thompson 1971, as written
  in issue 14), and Harville's (1977) general REML form with the raw
  (uncentered) design and the intercept as the fixed effect;
- its maximum found by ``scipy.optimize.minimize_scalar`` on the dense form;
- the random-effects model itself: data simulated with known noise and signal
  variances, the estimates equal to the truth within their Monte Carlo
  standard errors, and the likelihood-ratio interval covering the true lambda
  about 95% of the time (Wilks' theorem).

Data are synthetic and seeded.
"""
from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.optimize import minimize_scalar

from error_bounds import U, gamma
from paths import fit_path, select_penalty
from paths.selection.reml import reml_estimate, reml_loglik
from paths.selection.rules import parse_rule

# numerical reference checks against outside references: CI reruns them under a
# forced OpenBLAS kernel (.ci/run)
pytestmark = pytest.mark.reference

EPS = np.finfo(float).eps


def _dense_loglik(Z, r, lam, m):
    """-1/2 [m log(r^T H^-1 r / m) + log det H], H = I + Z Z^T / lambda (n x n)."""
    n = Z.shape[0]
    H = np.eye(n) + Z @ Z.T / lam
    sign, logdet = np.linalg.slogdet(H)
    assert sign > 0
    q = r @ np.linalg.solve(H, r)
    return -0.5 * (m * np.log(q / m) + logdet)


def _dense_tol(Z, lam):
    """Backward-stable solve and LU log-determinant of H: relative error of
    r^T H^-1 r about n kappa(H) eps, absolute error of log det about n^2 eps
    kappa(H) (each log of a pivot to kappa eps; Higham 2002 Thm 9.3 and 7.2); times a
    modest constant 10 for the growth factor and the two terms."""
    n = Z.shape[0]
    kappa = 1.0 + np.linalg.norm(Z, 2) ** 2 / lam
    return 10 * n * n * kappa * EPS


CASES = {"tall": (60, 20), "wide": (40, 90)}


@pytest.mark.parametrize("case", list(CASES))
@pytest.mark.parametrize("standardize", [True, False])
@pytest.mark.parametrize("intercept", [True, False])
def test_profile_equals_dense(make_problem, case, standardize, intercept):
    """The closed form on the singular values equals the dense n x n formula."""
    n, p = CASES[case]
    X, y = make_problem(n, p, seed=2)
    path = fit_path(X, y, standardize=standardize, fit_intercept=intercept)
    Z = X - X.mean(axis=0) if intercept else X.copy()
    if standardize:
        Z = Z / X.std(axis=0)
    r = y - y.mean() if intercept else y
    m = n - 1 if intercept else n
    lams = np.geomspace(1e-3, 1e5, 9)
    ours = reml_loglik(path, lams)
    for lam, v in zip(lams, ours):
        assert abs(v - _dense_loglik(Z, r, lam, m)) <= _dense_tol(Z, lam)


def test_harville_form_with_raw_design(make_problem):
    """Harville (1977): l_R = -1/2 [log det V + log(1^T V^-1 1) + y^T P y / s2] with
    V = s2 (I + X X^T / lambda) on the RAW design and the intercept as the fixed
    effect; with s2 profiled out it differs from our profile by a constant
    (log n / 2: det K V K^T = det V * 1^T V^-1 1 / n for an orthonormal basis K of
    the contrasts), so differences between penalties agree."""
    n, p = 45, 70
    X, y = make_problem(n, p, seed=3)
    path = fit_path(X, y, standardize=False)
    one = np.ones(n)

    def harville(lam):
        V = np.eye(n) + X @ X.T / lam
        Vi1, Viy = np.linalg.solve(V, one), np.linalg.solve(V, y)
        yPy = y @ Viy - (one @ Viy) ** 2 / (one @ Vi1)
        return -0.5 * ((n - 1) * np.log(yPy / (n - 1)) + np.linalg.slogdet(V)[1]
                       + np.log(one @ Vi1))

    lams = np.geomspace(0.1, 1e4, 7)
    ours = reml_loglik(path, lams)
    theirs = np.array([harville(lam) for lam in lams])
    # bound: _dense_tol; V has raw columns (means ~3): kappa(V) <= 1 + |X|_2^2 / lambda
    tol = max(_dense_tol(X, lam) for lam in lams)
    assert_allclose(np.diff(ours), np.diff(theirs), rtol=0, atol=2 * tol)
    assert_allclose(ours - theirs, 0.5 * np.log(n), rtol=0, atol=tol)


def test_maximum_matches_scipy_on_dense(make_problem):
    """The rule's lambda maximizes the dense likelihood: scipy's bounded search on
    the dense form reaches no higher value (to the dense form's error bound), and
    the two maximizers agree to the optimizers' tolerance in log lambda."""
    n, p = 50, 80
    X, y = make_problem(n, p, seed=4)
    path = fit_path(X, y, standardize=False)
    Z, r = X - X.mean(axis=0), y - y.mean()
    res = minimize_scalar(lambda t: -_dense_loglik(Z, r, np.exp(t), n - 1),
                          bounds=(np.log(1e-3), np.log(1e6)), method="bounded",
                          options={"xatol": 1e-9})
    sel = select_penalty(path).rules["reml"]
    tol = _dense_tol(Z, sel.lam)  # bound: _dense_tol
    assert _dense_loglik(Z, r, sel.lam, n - 1) >= -res.fun - tol
    assert abs(sel.loglik - _dense_loglik(Z, r, sel.lam, n - 1)) <= tol
    # bound: near a smooth maximum a value error delta moves the argmax by at most
    # sqrt(2 delta / |l''|) in log lambda (second-order Taylor); the two searches stop
    # within their xatol (1e-9 here, 1e-8 in paths/selection/reml.py); the curvature
    # from the dense form by central differences (h = 0.05)
    t, h = res.x, 0.05
    f = [_dense_loglik(Z, r, np.exp(t + k * h), n - 1) for k in (-1, 0, 1)]
    curv = abs(f[0] - 2 * f[1] + f[2]) / h**2
    assert abs(np.log(sel.lam) - res.x) <= 2 * np.sqrt(2 * 2 * tol / curv) + 2e-8 + 2e-9


def test_limits_without_overflow(make_problem):
    """lambda -> infinity: -1/2 m log(|r|^2 / m) (the intercept-only model, H -> I);
    lambda -> 0 at full row rank: the finite limit, approached by the dense form at
    a tiny lambda to first order; no overflow warnings at extreme penalties
    (RuntimeWarning is an error in the suite)."""
    n, p = 30, 60
    X, y = make_problem(n, p, seed=5)
    path = fit_path(X, y, standardize=False)
    r = y - y.mean()
    ll = reml_loglik(path, [0.0, 1e-300, 1e-30, 1e300, np.inf])
    assert np.all(np.isfinite(ll))
    # bound: two evaluations of -m/2 log(q / m) with q an n-term sum (gamma_n) and the
    # log's own rounding (rnd, _ll_rounding)
    rnd = _ll_rounding(path)
    assert_allclose(ll[-1], -0.5 * (n - 1) * np.log(r @ r / (n - 1)), rtol=0, atol=rnd)
    # bound: H = I + O(|Z|^2 / 1e300) plus the rounding
    assert_allclose(ll[3], ll[-1], rtol=0, atol=rnd)
    d2min = path.singular_values[-1] ** 2
    lam = 1e-7 * d2min  # dense form at lambda -> 0+: first-order error ~ n lam / d_r^2
    Z = X - X.mean(axis=0)
    # bound: |l(lam) - l(0)| <= n lam / d_r^2 (each log(1 + lam / d_j^2) term, and
    # q's), twice for the two parts, plus the rounding of both sides
    assert abs(reml_loglik(path, [lam])[0] - ll[0]) <= 2 * n * 1e-7 + 2 * rnd
    # bound: the rounding of both sides (_ll_rounding)
    assert abs(ll[1] - ll[0]) <= 2 * rnd
    # the dense matrix at lam is too ill-conditioned to compare; compare at 1e-3 d_r^2;
    # bound: the first-order gap plus _dense_tol
    lam = 1e-3 * d2min
    assert abs(_dense_loglik(Z, r, lam, n - 1) - ll[0]) <= 2 * n * 1e-3 + _dense_tol(Z, lam)
    tall = fit_path(*make_problem(40, 10, seed=6), standardize=False)
    assert reml_loglik(tall, [0.0])[0] == -np.inf  # response outside the span: det H -> inf


def _ll_rounding(path):
    """Rounding of the closed-form log-likelihood: n terms log(d_j^2 + lam) of size at most
    L = max |log d_j^2| + 1 summed (gamma_n n L, Higham 2002 section 3.1) and m/2 log q with
    q an n-term sum of positive terms (relative gamma_n, so m/2 gamma_n absolute), plus the
    logs' own ulps."""
    n = path.n_samples
    L = 2 * np.abs(np.log(path.singular_values)).max() + 1
    return gamma(n) * n * L + n * gamma(n) + 4 * n * U * L


def test_estimates_recover_known_variances():
    """Simulated from the random-effects model (known sigma^2 = 1 and signal
    variance tau^2 n p / (n - 1)): across 80 datasets the mean REML noise and
    signal variances equal the truth within 4 Monte Carlo SEs (REML is
    asymptotically unbiased; Harville 1977), and the 95% likelihood-ratio interval
    covers the true lambda = sigma^2 / tau^2 at a rate within 4 binomial SEs of
    0.95 (Wilks' theorem)."""
    rng = np.random.default_rng(7)
    n, p, tau2, reps = 150, 300, 1.0 / 300, 80
    X = rng.standard_normal((n, p))
    X = (X - X.mean(axis=0)) / X.std(axis=0)
    true_signal = tau2 * n * p / (n - 1)
    Y = X @ (np.sqrt(tau2) * rng.standard_normal((p, reps))) + rng.standard_normal((n, reps))
    path = fit_path(X, Y, [1.0])  # one factorization, the datasets as targets
    noise, signal, covered = np.empty(reps), np.empty(reps), 0
    for j in range(reps):
        est = reml_estimate(path, j)
        noise[j], signal[j] = est.noise_variance, est.signal_variance
        lo, hi = est.lam_interval
        covered += lo <= 1.0 / tau2 <= hi
    # sampling: 4 Monte Carlo SEs over 80 datasets (two-sided normal: false failure
    # 6.3e-5 per check); the coverage rate within 4 binomial SEs likewise
    for est, truth in ((noise, 1.0), (signal, true_signal)):
        assert abs(est.mean() - truth) <= 4 * est.std(ddof=1) / np.sqrt(reps)
    rate = covered / reps
    assert abs(rate - 0.95) <= 4 * np.sqrt(0.95 * 0.05 / reps)


def test_rule_fields_and_targets(make_problem):
    """The rule's record: lambda inside its interval, df, variance share in (0, 1),
    noise + signal = the fitted decomposition; each target as if alone."""
    X, Y = make_problem(50, 80, seed=8, t=2)
    both = select_penalty(fit_path(X, Y))
    assert parse_rule("reml") == ("reml", None)
    for j in range(2):
        sel = both.per_target[j]["reml"]
        alone = select_penalty(fit_path(X, Y[:, j])).rules["reml"]
        # bound: the same search on likelihoods equal to rounding (2 _ll_rounding): the
        # argmax moves by sqrt(2 delta / |l''|) in log lambda, plus both searches' xatol
        # (1e-8, paths/selection/reml.py); curvature by central differences
        path = fit_path(X, Y[:, j])
        t, h = np.log(alone.lam), 0.05
        f = reml_loglik(path, np.exp(t + np.array([-h, 0.0, h])))
        curv = abs(f[0] - 2 * f[1] + f[2]) / h**2
        dt = np.sqrt(2 * 2 * _ll_rounding(path) / curv) + 2e-8
        assert_allclose(sel.lam, alone.lam, rtol=np.expm1(dt))
        assert sel.lam == reml_estimate(fit_path(X, Y), j).lam
        lo, hi = sel.lam_interval
        assert lo < sel.lam < hi
        assert 0 < sel.variance_explained < 1
        rec = sel.as_dict()
        assert {"noise_variance", "signal_variance", "variance_explained",
                "lambda_interval"} <= set(rec)


def test_maximum_at_interpolation_limit():
    """Nearly noise-free wide data: the likelihood can peak at lambda -> 0+ (full row
    rank, finite limit).  The variances are then the limits of the formulas (noise
    -> 0, signal finite), approached continuously from lambda > 0 (first order in
    lambda / d_r^2), the interval starts at 0, and the record is valid JSON."""
    import json

    from paths.core import algebra

    rng = np.random.default_rng(7)
    X = rng.standard_normal((30, 45)) * rng.uniform(0.5, 3.0, 45)
    y = X[:, :3] @ np.array([1.0, -0.5, 0.25]) + 1e-3 * rng.standard_normal(30)
    path = fit_path(X, y)
    sel = select_penalty(path).rules["reml"]
    assert sel.lam == 0.0 and sel.noise_variance == 0.0
    lam = 1e-9 * path.singular_values[-1] ** 2
    noise, signal = algebra.reml_variances(path.state, lam)
    # bound: first order in tau = lam / d_r^2 = 1e-9: each of the n = 30 terms moves by
    # at most 2 tau relative, plus the rounding of both sums (gamma_n each)
    assert abs(signal - sel.signal_variance) <= (2 * 30 * 1e-9 + 4 * gamma(30)) * signal
    assert sel.lam_interval[0] == 0.0 and sel.lam_interval[1] > 0
    json.dumps(sel.as_dict(), allow_nan=False)


def test_profile_figure_and_cut(make_problem):
    """The REML figure draws l(lambda) - l(lambda_hat) (<= 0, 0 at the marked choice) and
    the cut at -chi2_{1,0.95}/2 (scipy.stats.chi2.ppf); the cut constant is that quantile."""
    from scipy.stats import chi2

    from paths.present.figures import reml_figure
    from paths.selection.reml import CHI2_1_95

    # spec: the constant is scipy's value written to 16 digits; scipy's ppf (cephes, libm,
    # no BLAS) may differ between builds by a few dozen ulp: 1e-14
    assert_allclose(CHI2_1_95, chi2.ppf(0.95, 1), rtol=1e-14)
    X, y = make_problem(40, 60, seed=9)
    path = fit_path(X, y, n_lambdas=30)
    art = reml_figure(path).artists["a"]
    line = next(t for t in art.traces if t.kind == "line")
    est = reml_estimate(path)
    # bound: the same values up to the likelihood's rounding (_ll_rounding, both sides)
    rnd = _ll_rounding(path)
    assert_allclose(line.y, reml_loglik(path) - est.loglik, rtol=0, atol=2 * rnd)
    assert np.all(line.y <= 2 * rnd)  # the refined maximum is above every grid value
    cut = next(t for t in art.traces if t.kind == "reference")
    # spec: as for CHI2_1_95 above (the halving is exact)
    assert_allclose(cut.y, -chi2.ppf(0.95, 1) / 2, rtol=1e-14)
