"""Tests for paths.threshold.sweep and ``paths threshold`` against numpy, scikit-learn and pandas."""
import json

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose
from sklearn.linear_model import LinearRegression, Ridge
from typer.testing import CliRunner

from error_bounds import U, assert_within, gamma, ridge_bounds
from paths import InputError
from paths.cli import app
from paths.threshold.sweep import (CSV_COLUMNS, METHODS, random_feature_map, sweep_sizes,
                             threshold_sweep)

# numerical reference checks against outside references: CI reruns them under a
# forced OpenBLAS kernel (.ci/run)
pytestmark = pytest.mark.reference


@pytest.fixture(autouse=True, scope="module")
def _one_blas_thread():
    from threadpoolctl import threadpool_limits

    with threadpool_limits(limits=1, user_api="blas"):
        yield


def _data(n=40, p=70, n_test=25, seed=0, scale=True):
    """Synthetic Gaussian data with unequal column scales and a dense signal."""
    rng = np.random.default_rng(seed)
    X = rng.standard_normal((n + n_test, p))
    if scale:
        X = X * rng.uniform(0.5, 3.0, p) + rng.uniform(-2, 2, p)
    beta = rng.standard_normal(p) / np.sqrt(p)
    y = X @ beta + 0.5 * rng.standard_normal(n + n_test)
    return X[:n], y[:n], X[n:], y[n:]


def _std(Xtr, Xte):
    mu, sd = Xtr.mean(axis=0), Xtr.std(axis=0)
    return (Xtr - mu) / sd, (Xte - mu) / sd, mu, sd


CASES = [("features", "given"), ("features", "random"), ("features", "screening"),
         ("samples", "random")]


@pytest.mark.parametrize("over,order", CASES)
def test_min_norm_point_equals_numpy_pinv(over, order):
    """Each sweep point's min-norm fit equals numpy.linalg.pinv on that subset: the
    coefficients (original scale) and intercept of pinv on the column-centered,
    population-SD-scaled subset, and its training and test MSE.  Tolerance: two
    backward-stable SVD solvers on the subset (error_bounds.ridge_bounds at lam = 0: Wedin
    with kappa = d_1 / d_r, which grows near the threshold)."""
    Xtr, ytr, Xte, yte = _data(seed=3) if over == "features" else _data(n=60, p=25, seed=3)
    fits = []
    res = threshold_sweep(Xtr, ytr, Xte, yte, over=over, order=order,
                          repeats=2 if order == "random" else 1, seed=5, n_points=15,
                          on_point=fits.append)
    assert len(fits) == res.repeats * res.n_features.size
    j = METHODS.index("min_norm")
    for pt in fits:
        rows, cols = pt.rows, pt.columns
        A, B = Xtr[np.ix_(rows, cols)], Xte[:, cols]
        mu, sd = A.mean(axis=0), A.std(axis=0)
        yc = ytr[rows] - ytr[rows].mean()
        b_std = np.linalg.pinv((A - mu) / sd) @ yc
        coef = b_std / sd
        icpt = ytr[rows].mean() - mu @ coef
        got, got_icpt = pt.coef(0.0)
        # bound: ridge_bounds at lam = 0, two solvers (docstring)
        b = ridge_bounds(A, ytr[rows], 0.0)
        assert np.linalg.norm(got - coef) <= b.coef * np.linalg.norm(coef)
        assert_allclose(got_icpt, icpt, rtol=0, atol=b.intercept)
        pred = icpt + B @ coef
        test = np.mean((yte - pred) ** 2)
        train = np.mean((ytr[rows] - icpt - A @ coef) ** 2)
        assert_allclose(res.test_mse[pt.repeat, pt.index, j], test,
                        rtol=b.test_mse_rtol(B, yte, pred))
        assert_allclose(res.train_mse[pt.repeat, pt.index, j], train, rtol=2 * gamma(len(rows)),
                        atol=b.mse_abs)
        assert res.rank[pt.repeat, pt.index, j] == np.linalg.matrix_rank(A - mu)


def test_ridge_methods_match_scikit_learn_and_explicit_gcv():
    """ridge_fixed, ridge_gcv and ridge_oracle at their recorded penalties equal
    scikit-learn Ridge(alpha=lambda) on the standardized subset (train and test MSE, within
    ridge_bounds); the GCV choice minimizes n RSS/(n - tr H)^2 computed from the explicit hat
    matrix (Golub, Heath & Wahba 1979) over the documented grid and guard; the oracle's test MSE is
    the grid minimum, so no grid penalty (min-norm included) beats it."""
    Xtr, ytr, Xte, yte = _data(seed=4)
    fits = []
    res = threshold_sweep(Xtr, ytr, Xte, yte, n_points=9, ridge_lambda=3.0,
                          on_point=fits.append)
    n = Xtr.shape[0]
    for pt in fits[::2]:
        A, Bt, mu, sd = _std(Xtr[:, pt.columns], Xte[:, pt.columns])
        for meth in ("ridge_fixed", "ridge_gcv", "ridge_oracle"):
            j = METHODS.index(meth)
            lam = res.lam[0, pt.index, j]
            if lam == 0:
                continue
            model = Ridge(alpha=lam, solver="svd").fit(A, ytr)
            # bound: two backward-stable solvers (ridge_bounds on the subset)
            b = ridge_bounds(Xtr[:, pt.columns], ytr, lam)
            pred = model.predict(Bt)
            assert_allclose(res.test_mse[0, pt.index, j], np.mean((yte - pred) ** 2),
                            rtol=b.test_mse_rtol(Xte[:, pt.columns], yte, pred))
            assert_allclose(res.train_mse[0, pt.index, j],
                            np.mean((ytr - model.predict(A)) ** 2), rtol=b.mse)
        assert res.lam[0, pt.index, METHODS.index("ridge_fixed")] == 3.0
        # explicit GCV over the grid
        Ac = A - A.mean(axis=0)
        grid = (n - 1) * res.lambda_n_grid
        gcv = []
        for lam in grid:
            H = np.full((n, n), 1.0 / n) + Ac @ np.linalg.solve(
                Ac.T @ Ac + lam * np.eye(Ac.shape[1]), Ac.T)
            r = ytr - H @ ytr
            resid_df = n - np.trace(H)
            # the documented guard (docs/threshold.md, Li 1987): only penalties leaving
            # at least max(1, m/10) residual degrees of freedom, m = n - 1
            ok = resid_df >= max(1.0, 0.1 * (n - 1))
            gcv.append(n * (r @ r) / resid_df ** 2 if ok else np.inf)
        best = grid[int(np.argmin(gcv))]
        got = res.lam[0, pt.index, METHODS.index("ridge_gcv")]
        if got > 0:
            # bound: the same grid point, (n - 1) * lambda_n formed once on each side
            assert_allclose(got, best, rtol=2 * U)
        j_or = METHODS.index("ridge_oracle")
        # exact: the oracle's test MSE is the minimum over a set holding the min-norm value
        assert res.test_mse[0, pt.index, j_or] <= res.test_mse[0, pt.index,
                                                               METHODS.index("min_norm")]


def test_baselines_match_numpy_and_scikit_learn():
    """baseline_mean: test MSE of the training mean (numpy); baseline_best_feature: the
    single-feature scikit-learn LinearRegression with the smallest training RSS among all
    columns (chosen on training rows), its train and test MSE, within the bounds below."""
    Xtr, ytr, Xte, yte = _data(seed=6)
    res = threshold_sweep(Xtr, ytr, Xte, yte, n_points=6)
    jm, jb = METHODS.index("baseline_mean"), METHODS.index("baseline_best_feature")
    n = ytr.size
    # bound: the training mean differs by at most 2 gamma_n mean|y| between two
    # summations, which moves the test MSE by 2 rms dmean; the test mean by reorder
    dm = 2 * gamma(n) * np.abs(ytr).mean()
    rms = np.sqrt(np.mean((yte - ytr.mean()) ** 2))
    assert_allclose(res.test_mse[0, :, jm], rms**2, rtol=2 * dm / rms + 4 * gamma(yte.size))
    # bound: a variance's relative condition number is ||y||^2 / (n var) (Chan & Lewis
    # 1979, Comm. ACM 22, 526); two evaluations within gamma_{n+3} of it each
    kv = np.sum(ytr**2) / (n * np.var(ytr))
    assert_allclose(res.train_mse[0, :, jm], np.var(ytr), rtol=2 * gamma(n + 3) * kv)
    rss = [np.sum((ytr - LinearRegression().fit(Xtr[:, [k]], ytr).predict(Xtr[:, [k]])) ** 2)
           for k in range(Xtr.shape[1])]
    k = int(np.argmin(rss))
    lr = LinearRegression().fit(Xtr[:, [k]], ytr)
    # bound: two backward-stable least-squares solvers on one column (ridge_bounds at 0)
    b = ridge_bounds(Xtr[:, [k]], ytr, 0.0, standardize=False)
    pred = lr.predict(Xte[:, [k]])
    assert_allclose(res.train_mse[0, :, jb], rss[k] / ytr.size, rtol=b.mse)
    assert_allclose(res.test_mse[0, :, jb], np.mean((yte - pred) ** 2),
                    rtol=b.test_mse_rtol(Xte[:, [k]], yte, pred))


def test_sweep_sizes_dense_around_threshold():
    """Grid (common practice, no source): the requested number of distinct increasing
    integers, the ends and the threshold included, spacing finer near the threshold
    than at the ends."""
    g = sweep_sizes(1, 800, 199, 40)
    assert g.size == 40 and np.all(np.diff(g) > 0)
    assert {1, 199, 800} <= set(g.tolist())
    i = int(np.flatnonzero(g == 199)[0])
    assert g[i + 1] - g[i] < g[-1] - g[-2]
    assert g[i] - g[i - 1] < g[1] - g[0] + 200


def test_fourier_features_approximate_gaussian_kernel():
    """Rahimi & Recht (2007): random Fourier features sqrt(2) cos(w'x + b), w ~ N(0, I/d),
    satisfy E[phi(x) phi(x')] = exp(-||x - x'||^2 / (2 d)) for the standardized inputs;
    with 40000 features the sample mean of the products is within 5 of its standard errors
    (estimated from the products themselves, bounded by 2 so the CLT applies)."""
    rng = np.random.default_rng(8)
    X = rng.standard_normal((50, 3))
    fmap = random_feature_map(X, 40000, kind="fourier", seed=9)
    F = fmap.transform(X[:5])
    Z = (X[:5] - fmap.x_mean) / fmap.x_scale
    K = np.exp(-np.sum((Z[:, None] - Z[None]) ** 2, axis=2) / (2 * 3))
    # sampling: 5 standard errors per entry: a false failure has probability 5.7e-7 per
    # entry, below 1.5e-5 for the 25 entries (union bound); the seed fixes the draw
    prod = F[:, None, :] * F[None, :, :]
    se = prod.std(axis=2, ddof=1) / np.sqrt(F.shape[1])
    assert_within(F @ F.T / F.shape[1], K, 5 * se)
    relu = random_feature_map(X, 7, kind="relu", seed=1)
    Zr = (X - relu.x_mean) / relu.x_scale
    # bound: the same 3-term products, possibly in another order, on each side:
    # 2 gamma_5 |Z| |W| absolute (Higham 2002 section 3.1); relu is exact
    assert_within(relu.transform(X), np.maximum(Zr @ relu.weights, 0.0),
                  2 * gamma(5) * (np.abs(Zr) @ np.abs(relu.weights)))


def test_random_features_run_past_n_and_theory_is_withheld():
    """Random-features mode: p' runs to the requested count (several times n), the
    interpolation peak sits at p' = n - 1 (full row rank of the centered design, common
    practice), and no isotropic theory overlay is claimed."""
    Xtr, ytr, Xte, yte = _data(n=30, p=5, seed=2)
    res = threshold_sweep(Xtr, ytr, Xte, yte, random_features=120, repeats=2, n_points=20)
    assert res.n_features.max() == 120 and res.ratio.max() == 4.0
    assert res.theory is None
    assert abs(res.peak["n_features"] - 29) <= 1


def test_theory_overlay_uses_effective_variances():
    """The overlay (Hastie et al. 2022, Thm 1 and sec. 5) on the same ratios: with the true
    sigma^2, r^2 given, the per-point effective variances are sigma^2 + r^2(1 - p'/p) and
    r^2 p'/p, and the training-error law is sigma_eff^2 (n - p' - 1)/n (by hand)."""
    from paths.threshold.sweep import VarianceEstimate

    Xtr, ytr, Xte, yte = _data(seed=1, scale=False)
    v = VarianceEstimate(0.25, 1.0, "truth", "truth")
    res = threshold_sweep(Xtr, ytr, Xte, yte, n_points=10, variances=v)
    th = res.theory
    p, n = Xtr.shape[1], Xtr.shape[0]
    # bound: the same few operations on positive numbers (no cancellation: 1 - p'/p is
    # formed from exact integers' quotient), possibly in another order: gamma_4 / gamma_6
    assert_allclose(th.ratio, res.ratio, rtol=gamma(4))
    assert_allclose(th.noise_variance, 0.25 + 1.0 * (1 - res.n_features / p), rtol=gamma(4))
    assert_allclose(th.signal_variance, res.n_features / p, rtol=gamma(4))
    assert_allclose(th.ls_train_mse, th.noise_variance
                    * np.maximum(n - res.n_features - 1, 0) / n, rtol=gamma(6))


def _bad(call, *words):
    with pytest.raises(InputError) as exc:
        call()
    msg = str(exc.value)
    assert "\n" not in msg
    for w in words:
        assert w in msg
    return msg


def test_bad_input_one_line_errors():
    """Bad input (house rule): one-line InputError naming the problem and the fix."""
    Xtr, ytr, Xte, yte = _data(n=40, p=20)
    _bad(lambda: threshold_sweep(Xtr, ytr, Xte, yte), "reaches p' = 1..20",
         "random_features=N")  # the parameter; the CLI says --random-features N
    _bad(lambda: threshold_sweep(Xtr, ytr, Xte[:1], yte[:1], random_features=80),
         "at least 2")
    _bad(lambda: threshold_sweep(Xtr, ytr, Xte, yte, random_features=0), ">= 1")
    _bad(lambda: random_feature_map(Xtr, 0), ">= 1")
    X2, y2, X2t, y2t = _data(n=40, p=70)
    _bad(lambda: threshold_sweep(X2, y2, X2t, y2t, over="samples"), "reaches n' = 3..40")


def _write(tmp_path, n=60, p=90, name="d.csv", seed=0):
    rng = np.random.default_rng(seed)
    X = rng.standard_normal((n, p))
    y = X[:, :10].sum(axis=1) + rng.standard_normal(n)
    df = pd.DataFrame(X, columns=[f"x{j}" for j in range(p)])
    df["y"] = y
    path = tmp_path / name
    df.to_csv(path, index=False)
    return path


def test_cli_writes_contract_outputs(tmp_path):
    """`paths threshold` (typer CliRunner): threshold.csv has exactly the contract columns and
    methods, one row per point x repeat x method; threshold.json carries the contract keys,
    and its peak is the highest mean min-norm test MSE recomputed from the csv with pandas."""
    data = _write(tmp_path)
    out = tmp_path / "out"
    r = CliRunner().invoke(app, ["threshold", str(data), "--target", "y", "--order", "random",
                                 "--repeats", "3", "--n-points", "12", "--out", str(out)])
    assert r.exit_code == 0, r.output
    df = pd.read_csv(out / "threshold.csv")
    assert tuple(df.columns) == CSV_COLUMNS
    assert set(df["method"]) == set(METHODS)
    assert len(df) == 12 * 3 * len(METHODS)
    assert set(df["over"]) == {"features"}
    # bound: one division of integers on each side, CSV floats round-trip (repr)
    assert_allclose(df["ratio"], df["n_features"] / df["n_train"], rtol=2 * U)
    rec = json.loads((out / "threshold.json").read_text())
    for key in ("n_train", "n_test", "over", "peak", "best_ridge_test_mse", "noise_variance",
                "signal_variance", "theory"):
        assert key in rec
    assert set(rec["peak"]) >= {"ratio", "n_features", "test_mse"}
    curve = df[df.method == "min_norm"].groupby("n_features")["test_mse"].mean()
    # bound: a mean of 3 repeats in another order (2 gamma_3 + u); JSON/CSV round-trip
    assert_allclose(rec["peak"]["test_mse"], curve.max(), rtol=2 * gamma(3) + 2 * U)
    assert rec["peak"]["n_features"] == int(curve.idxmax())
    assert len(rec["theory"]["min_norm_test_mse"]) == 12
    assert rec["n_train"] + rec["n_test"] == 60
    # refuses a non-empty folder without --force
    r2 = CliRunner().invoke(app, ["threshold", str(data), "--target", "y", "--out", str(out)])
    assert r2.exit_code == 2


def test_cli_bad_input_exit_2(tmp_path):
    """CLI bad input: exit status 2 with a one-line message (house rule)."""
    narrow = _write(tmp_path, n=80, p=20, name="narrow.csv")
    wide = _write(tmp_path, n=40, p=90, name="wide.csv")
    one = _write(tmp_path, n=1, p=90, name="one.csv", seed=1)
    runner = CliRunner()
    cases = [
        ["threshold", str(narrow), "--target", "y", "--out", str(tmp_path / "a")],
        ["threshold", str(wide), "--target", "y", "--random-features", "0",
         "--out", str(tmp_path / "b")],
        ["threshold", str(wide), "--target", "y", "--test", str(one),
         "--out", str(tmp_path / "c")],
        ["threshold", str(wide), "--target", "y", "--over", "samples",
         "--out", str(tmp_path / "d")],
    ]
    for args in cases:
        r = runner.invoke(app, args)
        assert r.exit_code == 2, (args, r.output)
        err = r.stderr if hasattr(r, "stderr") else r.output
        assert err.strip().count("\n") == 0
        assert err.startswith("error:")


def test_df_fraction_rule_gives_that_df():
    """--ridge-df-fraction F: at every point the ridge_fixed penalty leaves effective df
    sum d^2/(d^2 + lambda) = F x rank (Hastie, Tibshirani & Friedman 2009, eq. 3.50), with d
    the singular values of the centered standardized subset from numpy.linalg.svd; within
    the root finder's tolerance (brentq on log lambda, xtol 1e-12 and rtol 4 eps,
    paths/core/grid.py) times |d df / d log lambda|, plus the df's rounding (two SVDs)."""
    Xtr, ytr, Xte, yte = _data(seed=9)
    fits = []
    res = threshold_sweep(Xtr, ytr, Xte, yte, n_points=8, ridge_df_fraction=0.4,
                          on_point=fits.append)
    j = METHODS.index("ridge_fixed")
    for pt in fits:
        A = Xtr[:, pt.columns]
        d = np.linalg.svd((A - A.mean(axis=0)) / A.std(axis=0), compute_uv=False)
        d = d[d > d[0] * 1e-10]
        lam = res.lam[0, pt.index, j]
        # spec + bound: docstring (Brent stops within twice its tolerance)
        slope = np.sum(d**2 * lam / (d**2 + lam) ** 2)
        brent = 2 * (1e-12 + 8 * U * abs(np.log(lam)))
        tol = slope * brent + ridge_bounds(A, ytr, lam).df
        assert_allclose(np.sum(d ** 2 / (d ** 2 + lam)), 0.4 * d.size, rtol=0, atol=tol)
        assert_allclose(res.df[0, pt.index, j], 1 + 0.4 * d.size, rtol=0, atol=tol)
