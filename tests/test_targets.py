"""Many targets: per-target criteria, choices and coefficients without a dense
penalties x features x targets array (issue 16, item 6).

References are scikit-learn (``Ridge`` with one alpha per target,
``RidgeCV(alpha_per_target=True)``, ``RidgeCV(store_cv_results=True)``) and the
hat matrix formed explicitly with numpy.
"""
from __future__ import annotations

import tracemalloc

import numpy as np
import pytest
from numpy.testing import assert_allclose
from sklearn.linear_model import Ridge, RidgeCV

from paths import fit_path
from paths.core import algebra
from paths.core import path as path_module
from paths.data.validation import InputError


def rel_err(a, b):
    return float(np.linalg.norm(np.asarray(a) - b) / max(np.linalg.norm(b), 1e-300))


def _problem(n, p, t, seed=0):
    rng = np.random.default_rng(seed)
    X = rng.standard_normal((n, p)) + rng.standard_normal(p)
    B = rng.standard_normal((p, t)) / np.sqrt(p) * rng.uniform(0.0, 2.0, t)
    Y = 1.0 + X @ B + rng.standard_normal((n, t))
    return X, Y


@pytest.mark.reference
@pytest.mark.parametrize("shape", [(40, 15), (30, 60)], ids=["p<n", "p>n"])
def test_coef_per_target_matches_sklearn_ridge_alpha_array(shape):
    """Each target at its own penalty equals scikit-learn ``Ridge(alpha=array)``
    (one alpha per target), norm-wise relative error <= 1e-8: both are backward
    stable (SVD) solves and these designs have cond <= ~1e2, so the agreement
    expected is ~1e-13; 1e-8 is the package's agreed bound with Ridge."""
    n, p = shape
    X, Y = _problem(n, p, 7, seed=3)
    lams = np.geomspace(1e-2, 1e2, 7)
    path = fit_path(X, Y, lams, standardize=False)
    coef = path.coef_per_target(lams[::-1])  # target j at lams[::-1][j]
    ref = Ridge(alpha=lams[::-1], solver="svd").fit(X, Y)
    for j in range(7):
        assert rel_err(coef[:, j], ref.coef_[j]) <= 1e-8
    # one target's whole path, against Ridge at every penalty
    c2 = path.coef_of(2)
    for i, lam in enumerate(lams):
        assert rel_err(c2[i], Ridge(alpha=lam, solver="svd").fit(X, Y[:, 2]).coef_) <= 1e-8
    # intercepts from the factors (no coefficients formed), against Ridge
    for i, lam in enumerate(lams):
        m = Ridge(alpha=lam, solver="svd").fit(X, Y)
        assert_allclose(path.intercept[i], m.intercept_, rtol=1e-8, atol=1e-8 * abs(Y).max())


@pytest.mark.reference
def test_blocked_loo_over_targets_matches_ridgecv(monkeypatch):
    """Leave-one-out computed in blocks of a few targets (budget forced down to
    force 20+ blocks) equals ``RidgeCV(store_cv_results=True)``, rtol 1e-8 (the
    LOO bound of tests/test_path.py: residuals of size lam/d^2 divided by
    leverages of the same size, ~1e-10 relative)."""
    X, Y = _problem(35, 50, 23, seed=5)
    lams = np.geomspace(1e3, 1e-2, 12)
    monkeypatch.setattr(algebra, "LOO_BLOCK_ELEMS", 50 * 13)  # one target per block
    assert algebra.loo_blocks(34, 13, 23, 35)[0] == 1
    res = fit_path(X, Y, lams, standardize=False)
    cv = RidgeCV(alphas=lams, store_cv_results=True).fit(X, Y)
    assert_allclose(res.loo_mse, cv.cv_results_.mean(axis=0).T, rtol=1e-8)


@pytest.mark.reference
@pytest.mark.parametrize("shape", [(40, 15), (30, 60)], ids=["p<n", "p>n"])
def test_paired_criteria_match_explicit_hat_matrix(shape):
    """GCV and leave-one-out of target j at penalty lam[j] equal the textbook
    formulas on the explicit hat matrix H = 11'/n + Xc (Xc'Xc + lam I)^-1 Xc'
    (numpy ``solve``): GCV n RSS/(n - tr H)^2 (Golub, Heath & Wahba 1979) and
    LOO mean of (e_i/(1 - H_ii))^2; rtol 1e-8 (cond(Xc'Xc + lam I) <= 1e6 here,
    so the explicit solve is good to ~1e-10)."""
    n, p = shape
    X, Y = _problem(n, p, 5, seed=11)
    path = fit_path(X, Y, [1.0], standardize=False)
    lams = np.array([0.3, 3.0, 30.0, 1.5, 300.0])
    Xc = X - X.mean(axis=0)
    gcv = algebra.gcv_paired(path.state, lams)
    loo, se = algebra.loo_paired(path.state, lams)
    for j, lam in enumerate(lams):
        H = 1.0 / n + Xc @ np.linalg.solve(Xc.T @ Xc + lam * np.eye(p), Xc.T)
        e = Y[:, j] - H @ Y[:, j]
        assert_allclose(gcv[j], n * (e @ e) / (n - np.trace(H)) ** 2, rtol=1e-8)
        e_loo = e / (1.0 - np.diag(H))
        assert_allclose(loo[j], np.mean(e_loo ** 2), rtol=1e-8)
        assert_allclose(se[j], np.std(e_loo ** 2, ddof=1) / np.sqrt(n), rtol=1e-6)
    sub = algebra.loo_paired(path.state, lams[[3, 1]], targets=[3, 1])[0]
    assert_allclose(sub, loo[[3, 1]], rtol=1e-12)  # same arithmetic, a subset


def test_dense_coefficients_refused_above_the_limit(monkeypatch):
    """Asking for the dense (k, p, t) array above the limit is a one-line
    InputError naming the two methods that avoid it (common practice: refuse
    before allocating, say the fix)."""
    X, Y = _problem(20, 30, 4)
    path = fit_path(X, Y, n_lambdas=10)
    monkeypatch.setattr(path_module, "DENSE_COEF_LIMIT", 8.0 * 10 * 30 * 4 - 1)
    with pytest.raises(InputError, match="coef_per_target") as info:
        path.coef
    assert "\n" not in str(info.value)
    assert path.coef_of(1).shape == (10, 30)  # one target's path is still there


def test_fit_path_never_forms_the_dense_coefficient_array():
    """fit_path on 40 x 2000 with 300 targets and 100 penalties: the dense
    coefficient array would be 100 x 2000 x 300 floats (458 MiB); the traced peak
    (tracemalloc counts numpy buffers) stays below a quarter of it — the
    leave-one-out blocks are bounded by algebra.LOO_BLOCK_ELEMS (32 MiB) and a few
    of them are alive at once."""
    X, Y = _problem(40, 2000, 300, seed=2)
    dense = 8.0 * 100 * 2000 * 300
    tracemalloc.start()
    try:
        tracemalloc.reset_peak()
        path = fit_path(X, Y, n_lambdas=100)
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert path.loo_mse.shape == (100, 300)
    assert peak < dense / 4, (peak / 2**20, dense / 2**20)
