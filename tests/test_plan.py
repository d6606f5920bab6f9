"""Tests for paths.threshold.plan and ``paths plan`` against the published formulas and Monte Carlo."""
import json

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose
from scipy.linalg import toeplitz
from typer.testing import CliRunner

from error_bounds import gamma, ridge_bounds
from paths import InputError
from paths.threshold import theory as T
from paths.cli import app
from paths.threshold.plan import PLAN_COLUMNS, plan


@pytest.fixture(autouse=True, scope="module")
def _one_blas_thread():
    from threadpoolctl import threadpool_limits

    with threadpool_limits(limits=1, user_api="blas"):
        yield


def _published_gap(n, p, snr):
    """Least squares over optimal ridge, minus 1, re-derived in the test from the papers:
    OLS excess sigma^2 g/(1-g) (Hastie et al. 2022, Thm 1) and the optimum sigma^2 g m(-l*),
    l* = g/snr, with m(z) = [1 - g - z - sqrt((1 - g - z)^2 - 4 g z)]/(2 g z) as printed
    (Dobriban & Wager 2018), at g = p/(n - 1) (centered rows; the intercept's factor
    1 + 1/n cancels in the ratio); sigma^2 = 1."""
    g = p / (n - 1)
    z = -g / snr
    m = (1 - g - z - np.sqrt((1 - g - z) ** 2 - 4 * g * z)) / (2 * g * z)
    return (1 + g / (1 - g)) / (1 + g * m) - 1


def _gap_atol(n, p, snr):
    """Rounding of the published gap: m has a cancellation in b - sqrt(b^2 - 4 g z),
    b = 1 - g - z, amplifying its 8 roundings by (|b| + sqrt(disc)) / |b - sqrt(disc)|
    (Higham 2002 section 1.8); the gap = ratio - 1 then errs by the ratio's relative error
    times the ratio; on both sides (ours and the test's)."""
    g = p / (n - 1)
    z = -g / snr
    b = 1 - g - z
    disc = np.sqrt(b * b - 4 * g * z)
    canc = (abs(b) + disc) / abs(b - disc)
    m = (b - disc) / (2 * g * z)
    ratio = (1 + g / (1 - g)) / (1 + g * m)
    rel = gamma(8) * canc * abs(g * m) / abs(1 + g * m) + gamma(6)
    return 2 * rel * abs(ratio)


@pytest.mark.parametrize("p,snr,tol", [(50, 1.0, 0.05), (200, 4.0, 0.10), (30, 0.5, 0.01)])
def test_n_within_is_the_first_size_within_tolerance(p, snr, tol):
    """The reported n is the smallest n > p + 1 whose published-formula gap is within the
    tolerance: gap(n) <= tol < gap(n - 1) (unless n - 1 is at the threshold)."""
    r = plan(p, snr=snr, tolerance=tol)
    n = r.n_within
    # bound: _gap_atol (the rounding of the two evaluations)
    assert _published_gap(n, p, snr) <= tol + _gap_atol(n, p, snr)
    if n - 1 > p + 1:
        assert _published_gap(n - 1, p, snr) > tol
    i = int(np.flatnonzero(r.n == n)[0])
    assert_allclose(r.relative_gap[i], _published_gap(n, p, snr), rtol=0,
                    atol=_gap_atol(n, p, snr))  # bound: _gap_atol
    # the min-norm curve has its spike at the threshold n = p + 1 (gamma = 1)
    assert np.isinf(r.min_norm_test_mse[r.n == p + 1]).all()


def _ar1_beta(S, r2, rng):
    """beta with E[beta beta'] = (r2 / tr S) I: the signal spread evenly over directions."""
    p = S.shape[0]
    return rng.standard_normal(p) * np.sqrt(r2 / np.trace(S))


@pytest.mark.parametrize("n,p", [(200, 100), (100, 200)])
def test_spectrum_risk_monte_carlo_ar1(n, p):
    """Deterministic equivalent for a general spectrum (Bach 2024, sec. 3; from memory) against
    Monte Carlo on AR(1) Gaussian designs (rho = 0.6, no intercept, sigma^2 = 1, r^2 = 2,
    50 designs): the mean excess risk (beta_hat - beta)' Sigma (beta_hat - beta) of ridge at
    the formula's optimal penalty and of the min-norm fit lie within 3 SE of the prediction,
    with a 2/n relative finite-n allowance (O(1/n) corrections; Bai & Silverstein 2004)."""
    rng = np.random.default_rng(n + p)
    S = toeplitz(0.6 ** np.arange(p))
    w, V = np.linalg.eigh(S)
    root = V * np.sqrt(w)
    s2, r2 = 1.0, 2.0
    energy = r2 / np.trace(S)
    best = T.spectrum_optimal_ridge_risk(n, w, s2, energy)
    mn = T.spectrum_ridge_risk(0.0, n, w, s2, energy)
    lam = n * best.lam
    rd_vals, mn_vals = [], []
    for _ in range(50):
        X = rng.standard_normal((n, p)) @ root.T
        beta = _ar1_beta(S, r2, rng)
        y = X @ beta + rng.normal(0.0, np.sqrt(s2), n)
        if p <= n:
            br = np.linalg.solve(X.T @ X + lam * np.eye(p), X.T @ y)
        else:
            br = X.T @ np.linalg.solve(X @ X.T + lam * np.eye(n), y)
        bm = np.linalg.pinv(X) @ y
        rd_vals.append((br - beta) @ S @ (br - beta))
        mn_vals.append((bm - beta) @ S @ (bm - beta))
    for vals, pred in ((np.array(rd_vals), best.risk), (np.array(mn_vals), mn.risk)):
        se = vals.std(ddof=1) / np.sqrt(vals.size)
        assert abs(vals.mean() - pred) <= 3 * se + 2 * pred / n, (vals.mean(), pred, se)
    # ridge at its optimum is at most the min-norm risk (both from the formula)
    assert best.risk <= mn.risk


def test_isotropic_spectrum_gives_the_isotropic_answer():
    """A spectrum of ones must give the same n as the isotropic closed forms (Hastie et al.
    2022; Dobriban & Wager 2018), within one sample (root-finding tolerance)."""
    a = plan(60, snr=2.0)
    b = plan(60, snr=2.0, spectrum=np.ones(60))
    assert abs(a.n_within - b.n_within) <= 1


def test_bad_input_one_line():
    """Bad input: SNR <= 0, tolerance <= 0, a spectrum of the wrong length or non-positive:
    one-line InputError naming the fix."""
    for call in (lambda: plan(10, snr=0.0), lambda: plan(10, snr=-2.0),
                 lambda: plan(10, snr=1.0, tolerance=0.0),
                 lambda: plan(10, snr=1.0, spectrum=np.ones(9)),
                 lambda: plan(10, snr=1.0, spectrum=np.r_[np.ones(9), 0.0]),
                 lambda: plan(10)):
        with pytest.raises(InputError) as exc:
            call()
        assert "\n" not in str(exc.value)


def test_cli_plan_and_pilot(tmp_path):
    """`paths plan` (typer CliRunner): plan.csv has the documented columns and plan.json the
    same n_within as the library; with a pilot file (n > p) the noise variance is the OLS
    residual variance RSS/(n - p - 1) of numpy.linalg.lstsq with an intercept; --snr 0 and
    --snr -1 exit 2 with one line."""
    runner = CliRunner()
    out = tmp_path / "p1"
    r = runner.invoke(app, ["plan", "--n-features", "80", "--snr", "1.5", "--tolerance", "0.05",
                            "--out", str(out)])
    assert r.exit_code == 0, r.output
    df = pd.read_csv(out / "plan.csv")
    assert tuple(df.columns) == PLAN_COLUMNS
    rec = json.loads((out / "plan.json").read_text())
    assert rec["n_within"] == plan(80, snr=1.5, tolerance=0.05).n_within
    rng = np.random.default_rng(0)
    n, p = 300, 20
    X = rng.standard_normal((n, p))
    y = X @ rng.standard_normal(p) + rng.normal(0.0, 1.5, n)
    pilot = tmp_path / "pilot.csv"
    pd.DataFrame(X, columns=[f"f{j}" for j in range(p)]).assign(y=y).to_csv(pilot, index=False)
    r = runner.invoke(app, ["plan", "--pilot", str(pilot), "--target", "y",
                            "--out", str(tmp_path / "p2")])
    assert r.exit_code == 0, r.output
    rec = json.loads((tmp_path / "p2" / "plan.json").read_text())
    A = np.column_stack([np.ones(n), X])
    res = y - A @ np.linalg.lstsq(A, y, rcond=None)[0]
    # bound: two backward-stable least-squares residuals (ridge_bounds at 0: mse)
    assert_allclose(rec["noise_variance"], res @ res / (n - p - 1),
                    rtol=ridge_bounds(X, y, 0.0, standardize=False).mse)
    assert rec["n_features"] == p
    for snr in ("0", "-1"):
        bad = runner.invoke(app, ["plan", "--n-features", "10", "--snr", snr,
                                  "--out", str(tmp_path / f"b{snr}")])
        assert bad.exit_code == 2
        err = bad.stderr if hasattr(bad, "stderr") else bad.output
        assert err.startswith("error:") and err.strip().count("\n") == 0
