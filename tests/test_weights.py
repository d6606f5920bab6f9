"""Row weights, unpenalized columns and relative penalties (issue 15).

References (outside the project):
- scikit-learn ``Ridge(alpha=lambda).fit(X, y, sample_weight=w)``: the weighted
  objective sum_i w_i (y_i - b0 - x_i beta)^2 + lambda ||beta||^2;
- a direct numpy solve of the generalized normal equations, written as augmented
  least squares [W^1/2 [1 X]; sqrt(lambda) P] (P selects the penalized columns,
  scaled by the square roots of their relative penalties), ``numpy.linalg.lstsq``;
- brute-force refits without row i (leave-one-out) or without a fold (K-fold),
  the definition of those criteria.

Tolerances: the augmented least-squares solve is backward stable, so the two
solutions agree to about kappa * eps relative (Higham 2002, ch. 20), kappa the
condition number of the augmented matrix; sklearn's Cholesky solve of the
normal equations to about kappa^2 * eps.  We use 1e3 * n * kappa^2 * eps for
sklearn and 1e3 * n * kappa * eps for lstsq, relative to the largest coefficient.
"""
from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose
from sklearn.linear_model import Ridge

from error_bounds import (assert_within, backward_eps, gamma, ls_coef_bound, ridge_bounds,
                          weighted_ridge_bounds)
from paths import InputError, cross_validate, fit_path

# numerical reference checks against outside references: CI reruns them under a
# forced OpenBLAS kernel (.ci/run)
pytestmark = pytest.mark.reference

EPS = np.finfo(float).eps


def _data(n=40, p=12, seed=0, t=None):
    rng = np.random.default_rng(seed)
    X = rng.standard_normal((n, p)) * rng.uniform(0.5, 3.0, p) + rng.uniform(-2, 2, p)
    beta = rng.standard_normal((p,) if t is None else (p, t))
    y = 1.0 + X @ beta + rng.standard_normal((n,) if t is None else (n, t))
    w = rng.uniform(0.2, 3.0, n)
    return X, y, w


def _augmented(X, y, w, lam, *, unpen=(), factor=None, fit_intercept=True):
    """Coefficients (intercept, beta) of the weighted generalized ridge problem, by lstsq,
    and Wedin's normwise relative bound on the solution (intercept and beta together) of
    one backward-stable solver of this least-squares problem M (Higham 2002 Thm 20.1 with
    kappa = cond(M), error_bounds.ls_coef_bound).

    The penalty acts on the columns as given (standardize=False); ``factor`` holds
    relative penalties per column (1 default), 0 for unpenalized columns.
    """
    n, p = X.shape
    pen = np.ones(p) if factor is None else np.asarray(factor, float).copy()
    pen[list(unpen)] = 0.0
    A = np.hstack([np.ones((n, 1)), X]) if fit_intercept else X
    sw = np.sqrt(w)
    P = np.diag(np.sqrt(lam * pen))
    if fit_intercept:
        P = np.hstack([np.zeros((p, 1)), P])
    M = np.vstack([sw[:, None] * A, P])
    rhs = np.concatenate([sw * y, np.zeros(p)])
    sol = np.linalg.lstsq(M, rhs, rcond=None)[0]
    kappa = np.linalg.cond(M)
    rho = np.linalg.norm(rhs - M @ sol) / (np.linalg.norm(M, 2) * np.linalg.norm(sol))
    bound = ls_coef_bound(kappa, rho, backward_eps(*M.shape))
    return (sol[0], sol[1:], bound) if fit_intercept else (0.0, sol, bound)


def _both(X, y, w, lam, **kw):
    """Bounds for comparing our path with scikit-learn's weighted Ridge (Cholesky on the
    normal equations: the Gram bound) -- one solver each."""
    a = weighted_ridge_bounds(X, y, w, lam, solvers=1, **kw)
    b = weighted_ridge_bounds(X, y, w, lam, solvers=1, gram=True, **kw)
    return a, b


def test_weighted_coefficients_match_sklearn_along_the_grid():
    """Coefficients and intercepts against sklearn Ridge(alpha).fit(X, y, sample_weight=w)."""
    X, y, w = _data()
    path = fit_path(X, y, sample_weight=w, standardize=False, n_lambdas=15)
    for i, lam in enumerate(path.lambdas):
        ref = Ridge(alpha=lam).fit(X, y, sample_weight=w)
        # bound: ours (weighted_ridge_bounds) + scikit-learn's Cholesky (Gram bound)
        a, b = _both(X, y, w, lam, standardize=False)
        assert np.linalg.norm(path.coef[i] - ref.coef_) <= (a.coef + b.coef) * a.coef_norm
        assert_allclose(path.intercept[i], ref.intercept_, rtol=0,
                        atol=a.intercept + b.intercept)


def test_weighted_standardized_uses_weighted_population_scaling():
    """standardize=True scales by the weighted population SD (sklearn on pre-scaled columns)."""
    X, y, w = _data(seed=1)
    mu = np.average(X, axis=0, weights=w)
    sd = np.sqrt(np.average((X - mu) ** 2, axis=0, weights=w))
    path = fit_path(X, y, sample_weight=w, lambdas=[0.5, 5.0])
    for i, lam in enumerate(path.lambdas):
        ref = Ridge(alpha=lam).fit((X - mu) / sd, y, sample_weight=w)
        # bound: on the scaled columns, ours + scikit-learn's Cholesky (coef_std each)
        a, b = _both(X, y, w, lam)
        assert np.linalg.norm(path.coef[i] * sd - ref.coef_) <= (
            (a.coef_std + b.coef_std) * a.coef_std_norm)


def test_unit_weights_equal_unweighted():
    """w = 1 gives the unweighted path (same objective)."""
    X, y, _ = _data(seed=2)
    a = fit_path(X, y, lambdas=[0.1, 1.0, 10.0])
    b = fit_path(X, y, lambdas=[0.1, 1.0, 10.0], sample_weight=np.ones(len(y)))
    for k, lam in enumerate([0.1, 1.0, 10.0]):
        # bound: two backward-stable computations of one problem (ridge_bounds)
        bd = ridge_bounds(X, y, lam)
        assert np.linalg.norm(b.coef[k] - a.coef[k]) <= bd.coef * bd.coef_norm
        assert_allclose(b.intercept[k], a.intercept[k], rtol=0, atol=bd.intercept)
        assert_allclose(b.df[k], a.df[k], rtol=0, atol=bd.df)
        for key, tol in (("train_mse", bd.mse), ("gcv", bd.gcv), ("loo_mse", bd.loo)):
            assert_allclose(getattr(b, key)[k], getattr(a, key)[k], rtol=tol)


def _weighted_refit(X, y, w, lam, keep, unpen=(), factor=None):
    b0, beta, _ = _augmented(X[keep], y[keep], w[keep], lam, unpen=unpen, factor=factor)
    return b0, beta


def _held_out_rtol(X, y, w, lam, folds, unpen=()):
    """Relative error of a weighted held-out MSE sum w e^2 / sum w from refits: each refit's
    held-out errors within ||[1, x]|| times its Wedin bound times ||solution|| (Cauchy-Schwarz);
    then |a^2 - b^2| = |a - b| |a + b|; twice (ours and the refits: the held-out errors are
    functions of the data, which a backward-stable method perturbs by no more)."""
    n = len(y)
    err, de = np.empty(n), np.empty(n)
    for te in folds:
        keep = np.ones(n, bool)
        keep[te] = False
        b0, beta, bound = _augmented(X[keep], y[keep], w[keep], lam, unpen=unpen)
        rows = np.column_stack([np.ones(len(te)), X[te]])
        err[te] = y[te] - rows @ np.r_[b0, beta]
        de[te] = np.linalg.norm(rows, axis=1) * bound * np.linalg.norm(np.r_[b0, beta])
    rms = np.sqrt(np.sum(w * err**2) / w.sum())
    q = 2 * de.max() / rms
    return 2 * q + q * q + 2 * gamma(n)


@pytest.mark.parametrize("shape", [(25, 8), (20, 30)])
def test_weighted_loo_against_brute_force(shape):
    """LOO = sum_i w_i e_(-i)^2 / sum_i w_i, e_(-i) from the weighted refit without row i."""
    n, p = shape
    X, y, w = _data(n, p, seed=3)
    lams = [0.3, 3.0]
    path = fit_path(X, y, sample_weight=w, standardize=False, lambdas=lams)
    for k, lam in enumerate(lams):
        errs = []
        for i in range(n):
            keep = np.arange(n) != i
            b0, beta = _weighted_refit(X, y, w, lam, keep)
            errs.append(y[i] - b0 - X[i] @ beta)
        ref = np.sum(w * np.square(errs)) / w.sum()
        # bound: _held_out_rtol
        assert_allclose(path.loo_mse[k], ref, rtol=_held_out_rtol(X, y, w, lam,
                                                                  [[i] for i in range(n)]))


def test_weighted_kfold_against_brute_force():
    """K-fold: sum over folds of w_i e_(-f),i^2 / sum w, from weighted refits without the fold."""
    X, y, w = _data(30, 10, seed=4)
    lams = np.array([0.5, 5.0])
    path = fit_path(X, y, sample_weight=w, standardize=False, lambdas=lams)
    cv = cross_validate(X, y, path=path, n_folds=5, seed=1, sample_weight=w)
    labels = cv.folds[0] if hasattr(cv, "folds") else None
    from paths import make_folds

    labels = make_folds(30, 5, seed=1)
    for k, lam in enumerate(lams):
        num = 0.0
        for f in range(5):
            keep = labels != f
            b0, beta = _weighted_refit(X, y, w, lam, keep)
            e = y[~keep] - b0 - X[~keep] @ beta
            num += np.sum(w[~keep] * e ** 2)
        # bound: _held_out_rtol over the folds
        folds = [np.flatnonzero(labels == f) for f in range(5)]
        assert_allclose(np.asarray(cv.mse)[k], num / w.sum(),
                        rtol=_held_out_rtol(X, y, w, lam, folds))


def test_weighted_gcv_train_and_df():
    """df = 1 + sum d^2/(d^2+lam) of the weighted design; train = sum w e^2 / sum w;
    GCV = train / (1 - df/n)^2 (Golub, Heath & Wahba 1979, on W^1/2-transformed data)."""
    X, y, w = _data(seed=5)
    lam = 2.0
    path = fit_path(X, y, sample_weight=w, standardize=False, lambdas=[lam])
    ref = Ridge(alpha=lam).fit(X, y, sample_weight=w)
    e = y - ref.predict(X)
    train = np.sum(w * e ** 2) / w.sum()
    mu = np.average(X, axis=0, weights=w)
    Xt = np.sqrt(w)[:, None] * (X - mu)
    d2 = np.linalg.svd(Xt, compute_uv=False) ** 2
    df = 1 + np.sum(d2 / (d2 + lam))
    n = len(y)
    # bound: Weyl through df (two SVDs), the residual's Wedin bound for ours and
    # scikit-learn's Cholesky (Gram bound), GCV's denominator 2 |d df| / (n - df)
    a, b = _both(X, y, w, lam, standardize=False)
    assert_allclose(path.df[0], df, rtol=0, atol=2 * a.df)
    assert_allclose(path.train_mse[0], train, rtol=a.mse + b.mse)
    assert_allclose(path.gcv[0], train / (1 - df / n) ** 2,
                    rtol=a.mse + b.mse + 2 * 2 * a.df / (n - df) + gamma(4))


def test_weighted_test_error_with_test_weights():
    X, y, w = _data(50, 10, seed=6)
    Xt, yt, wt = X[40:], y[40:], w[40:]
    path = fit_path(X[:40], y[:40], sample_weight=w[:40], standardize=False, lambdas=[1.0],
                    X_test=Xt, y_test=yt, test_weight=wt)
    ref = Ridge(alpha=1.0).fit(X[:40], y[:40], sample_weight=w[:40])
    e = yt - ref.predict(Xt)
    # bound: predictions within ours + scikit-learn's Cholesky (predict_atol), through
    # |a^2 - b^2| = |a - b| |a + b| into the weighted mean
    a, b = _both(X[:40], y[:40], w[:40], 1.0, standardize=False)
    dp = a.predict_atol(Xt) + b.predict_atol(Xt)
    rms = np.sqrt(np.sum(wt * e**2) / wt.sum())
    assert_allclose(path.test_mse[0], rms**2, rtol=2 * dp / rms + (dp / rms) ** 2 + 2 * gamma(10))


def test_weights_refused():
    X, y, w = _data()
    for bad, pattern in [(w[:-1], "39|one weight per row"), (-w, "positive"),
                         (np.where(np.arange(40) == 3, np.nan, w), "NaN")]:
        with pytest.raises(InputError, match=pattern):
            fit_path(X, y, sample_weight=bad)


# ------------------------------------------------ unpenalized columns, relative penalties
@pytest.mark.parametrize("weighted", [False, True])
def test_unpenalized_against_augmented_least_squares(weighted):
    X, y, w = _data(30, 20, seed=7)
    w = w if weighted else np.ones(30)
    lams = [0.1, 2.0, 50.0]
    path = fit_path(X, y, lambdas=lams, standardize=False, unpenalized=[0, 3],
                    sample_weight=w if weighted else None)
    for k, lam in enumerate(lams):
        b0, beta, bound = _augmented(X, y, w, lam, unpen=[0, 3])
        # bound: Wedin on the augmented problem, ours and lstsq (normwise on (b0, beta))
        tol = 2 * bound * np.linalg.norm(np.r_[b0, beta])
        assert np.linalg.norm(np.r_[path.intercept[k] - b0, path.coef[k] - beta]) <= tol


def test_unpenalized_df_and_loo_brute_force():
    """df counts the unpenalized columns; LOO from refits without each row."""
    X, y, w = _data(24, 30, seed=8)
    lam = 1.5
    path = fit_path(X, y, lambdas=[lam], standardize=False, unpenalized=["x1", "x2"],
                    sample_weight=w)
    assert path.df[0] > 3.0
    errs = []
    for i in range(24):
        keep = np.arange(24) != i
        b0, beta = _weighted_refit(X, y, w, lam, keep, unpen=[1, 2])
        errs.append(y[i] - b0 - X[i] @ beta)
    # bound: _held_out_rtol
    assert_allclose(path.loo_mse[0], np.sum(w * np.square(errs)) / w.sum(),
                    rtol=_held_out_rtol(X, y, w, lam, [[i] for i in range(24)], unpen=[1, 2]))
    # min-norm limit: the limit of the augmented solution as lambda -> 0; bound: the
    # penalized columns, residualized on [1, unpenalized] in the weighted metric
    # (Frisch-Waugh), shrink each component by d^2/(d^2 + lam) in [1 - tau, 1],
    # tau = lam / d_r^2; the unpenalized part follows by a projection of norm
    # ||A_u^+|| ||X_p||; plus Wedin for both solvers
    b0, beta, bound = _augmented(X, y, w, 1e-9, unpen=[1, 2])
    sw = np.sqrt(w)[:, None]
    Au = sw * np.column_stack([np.ones(24), X[:, [1, 2]]])
    Xp = sw * np.delete(X, [1, 2], axis=1)
    Xr = Xp - Au @ np.linalg.lstsq(Au, Xp, rcond=None)[0]
    dr = np.linalg.svd(Xr, compute_uv=False)
    dr = dr[dr > max(Xr.shape) * 2 * np.finfo(float).eps * dr[0]][-1]
    tau = 1e-9 / dr**2
    amp = 1 + np.linalg.norm(np.linalg.pinv(Au), 2) * np.linalg.norm(Xp, 2)
    tol = (tau * amp + 2 * bound) * np.linalg.norm(np.r_[b0, beta])
    assert np.linalg.norm(path.min_norm.coef - beta) <= tol
    assert path.min_norm.df == 3 + path.rank


def test_relative_penalty_against_augmented_least_squares():
    X, y, w = _data(30, 10, seed=9)
    factor = np.ones(10)
    factor[[2, 5]] = [4.0, 0.25]
    lams = [0.5, 8.0]
    path = fit_path(X, y, lambdas=lams, standardize=False,
                    relative_penalty={"x2": 4.0, "x5": 0.25})
    for k, lam in enumerate(lams):
        b0, beta, bound = _augmented(X, y, np.ones(30), lam, factor=factor)
        # bound: Wedin on the augmented problem, ours and lstsq
        tol = 2 * bound * np.linalg.norm(np.r_[b0, beta])
        assert np.linalg.norm(path.coef[k] - beta) <= tol


def test_unpenalized_glob_and_refusals():
    import pandas as pd

    X, y, _ = _data(30, 6, seed=10)
    frame = pd.DataFrame(X, columns=["age", "sex", "g1", "g2", "g3", "g4"])
    path = fit_path(frame, y, unpenalized=["age", "s*"], lambdas=[1.0])
    assert path.unpenalized == ["age", "sex"]
    with pytest.raises(InputError, match="matches no column"):
        fit_path(frame, y, unpenalized=["nope*"])
    with pytest.raises(InputError, match="relative penalty.*positive|> 0"):
        fit_path(frame, y, relative_penalty={"g1": 0.0})
    dup = frame.assign(age2=frame["age"] * 2)
    with pytest.raises(InputError, match="collinear"):
        fit_path(dup, y, unpenalized=["age", "age2"])


def test_estimator_sample_weight_matches_sklearn():
    """RidgePathRegressor.fit(..., sample_weight=w) at its chosen penalty equals sklearn's
    weighted Ridge at that penalty (same objective)."""
    from paths import RidgePathRegressor

    X, y, w = _data(40, 8, seed=12)
    est = RidgePathRegressor(standardize=False).fit(X, y, sample_weight=w)
    ref = Ridge(alpha=est.lambda_).fit(X, y, sample_weight=w)
    # bound: ours (the Gram bound: "auto" may take that route) + scikit-learn's Cholesky
    b2 = weighted_ridge_bounds(X, y, w, est.lambda_, standardize=False, solvers=2, gram=True)
    assert np.linalg.norm(est.coef_ - ref.coef_) <= b2.coef * b2.coef_norm
    assert_allclose(est.predict(X), ref.predict(X), rtol=0, atol=b2.predict_atol(X))


# ------------------------------------------------------------------ command line
def test_cli_weights_unpenalized_and_refusals(tmp_path):
    """explore --weights/--unpenalized/--relative-penalty: coefficients at the reported penalty
    against the augmented least-squares solve on the weighted-standardized columns; engines and
    bad specs refused in one line (exit 2)."""
    import json

    import pandas as pd
    from typer.testing import CliRunner

    from paths.cli import app
    from paths.present.fitfile import load_fit

    runner = CliRunner()
    X, y, w = _data(40, 6, seed=13)
    cols = ["age", "g1", "g2", "g3", "g4", "g5"]
    pd.DataFrame(X, columns=cols).assign(y=y, w=w).to_csv(tmp_path / "d.csv", index=False)
    out = tmp_path / "o"
    r = runner.invoke(app, ["explore", str(tmp_path / "d.csv"), "-t", "y", "--weights", "w",
                            "--unpenalized", "age", "--relative-penalty", "g2=3",
                            "--no-report", "--format", "svg", "-o", str(out)])
    assert r.exit_code == 0, r.output
    s = json.loads((out / "summary.json").read_text())
    assert s["unpenalized"] == ["age"] and s["weighted"] and s["relative_penalty"] == {"g2": 3.0}
    fit = load_fit(out / "fit.npz")
    lam = float(fit.reported_lambda[0])
    mu = np.average(X, axis=0, weights=w)
    sd = np.sqrt(np.average((X - mu) ** 2, axis=0, weights=w))
    factor = np.array([1, 1, 3, 1, 1, 1.0])
    b0, beta, bound = _augmented(X / sd, y, w, lam, unpen=[0], factor=factor)
    # bound: Wedin on the augmented problem, ours and lstsq (the scaling by sd rounds once
    # per entry, inside backward_eps's constant)
    tol = 2 * bound * np.linalg.norm(np.r_[b0, beta])
    assert np.linalg.norm(fit.coef * sd - beta) <= tol
    r = runner.invoke(app, ["predict", str(out / "fit.npz"), str(tmp_path / "d.csv"), "-o",
                            str(tmp_path / "p.csv"), "--lambda", str(lam)])
    assert r.exit_code == 0, r.output
    got = np.array([float(line.split(",")[1]) for line in
                    (tmp_path / "p.csv").read_text().splitlines()[1:]])
    # bound: |[1, x] . d(b0, beta)| <= ||[1, x]|| tol (Cauchy-Schwarz), plus the product's
    # gamma_{p+1}; the CSV holds repr() floats (exact round trip)
    rows = np.column_stack([np.ones(40), X / sd])
    assert_within(got, b0 + (X / sd) @ beta, np.linalg.norm(rows, axis=1) * tol
                  + gamma(7) * np.abs(rows) @ np.abs(np.r_[b0, beta]))
    r = runner.invoke(app, ["predict", str(out / "fit.npz"), str(tmp_path / "d.csv"), "-o",
                            str(tmp_path / "p2.csv"), "--intervals", "0.9"])
    assert r.exit_code == 2 and "not available for a fit with row weights" in r.output
    for args, pattern in [(["--engine", "stream"], "not available with --engine stream"),
                          (["--relative-penalty", "g2=0"], "PATTERN=W"),
                          (["--unpenalized", "zzz"], "matches no column")]:
        r = runner.invoke(app, ["explore", str(tmp_path / "d.csv"), "-t", "y", "--weights", "w",
                                "-o", str(tmp_path / "x"), *args])
        assert r.exit_code == 2 and pattern in r.output
        assert len(r.output.strip().splitlines()) == 1
