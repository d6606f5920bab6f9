"""`paths explore` and `paths demo` through typer's CliRunner.

The numbers written are checked against scikit-learn ``Ridge`` refits (an
outside reference); the file layout and the summary.json keys against the
contract of issue 2.
"""
from __future__ import annotations

import csv
import json

import numpy as np
import pytest
from numpy.testing import assert_allclose
from sklearn.linear_model import Ridge
from sklearn.preprocessing import StandardScaler
from typer.testing import CliRunner

from error_bounds import U as UNIT, reorder_bound, ridge_bounds
from paths.cli import app

runner = CliRunner()

SUMMARY_KEYS = {"n_samples", "n_features", "rank", "solver", "penalty_convention", "lambdas",
                "df", "train_mse", "gcv", "loo_mse", "test_mse", "selected", "min_norm",
                "versions", "input_sha256"}


@pytest.fixture()
def wide_csv(tmp_path):
    """A small wide dataset (n = 30, p = 45) written as CSV, with a separate test file."""
    rng = np.random.default_rng(7)
    n, p = 40, 45
    X = rng.standard_normal((n, p)) * rng.uniform(0.5, 3.0, p) + rng.uniform(-2, 2, p)
    y = X[:, :3] @ np.array([1.0, -0.5, 0.25]) + 0.3 * rng.standard_normal(n)
    cols = [f"f{j}" for j in range(p)]

    def write(path, rows, yy):
        with open(path, "w", newline="") as fh:
            w = csv.writer(fh)
            w.writerow(cols + ["resp"])
            for row, v in zip(rows, yy):
                w.writerow([repr(float(a)) for a in row] + [repr(float(v))])

    write(tmp_path / "train.csv", X[:30], y[:30])
    write(tmp_path / "test.csv", X[30:], y[30:])
    return tmp_path, X, y


def _read_csv(path):
    with open(path, newline="") as fh:
        rows = list(csv.reader(fh))
    return rows[0], np.array([[float(v) if v else np.nan for v in r] for r in rows[1:]])


def test_explore_writes_contract_files_matching_sklearn(wide_csv):
    """path.csv / coefficients.csv / summary.json against scikit-learn Ridge on scaled data.

    Reference: scikit-learn ``Ridge(alpha=lambda)`` on ``StandardScaler``-scaled
    features (same objective; see the README's penalty convention).  Tolerance
    1e-8 relative: both solve the same well-conditioned linear system.
    """
    tmp, X, y = wide_csv
    out = tmp / "out"
    res = runner.invoke(app, ["explore", str(tmp / "train.csv"), "--target", "resp",
                              "--test", str(tmp / "test.csv"), "--n-lambdas", "25",
                              "--out", str(out)])
    assert res.exit_code == 0, res.output
    summary = json.loads((out / "summary.json").read_text())
    assert SUMMARY_KEYS <= set(summary)
    assert summary["n_samples"] == 30 and summary["n_features"] == 45
    assert set(summary["selected"]) >= {"gcv", "loo"}
    assert {"lambda", "df", "index"} <= set(summary["selected"]["gcv"])
    assert {"train_mse", "test_mse", "coef_norm"} <= set(summary["min_norm"])
    assert len(summary["input_sha256"]) == 2

    header, table = _read_csv(out / "path.csv")
    assert header == ["lambda", "df", "train_mse", "gcv", "loo_mse", "test_mse", "coef_norm",
                      "reml_loglik"]
    assert table.shape == (25, 8)
    cheader, coefs = _read_csv(out / "coefficients.csv")
    assert cheader[:2] == ["lambda", "intercept"] and len(cheader) == 2 + 45

    scaler = StandardScaler().fit(X[:30])
    for i in (0, 12, 24):
        lam = table[i, 0]
        m = Ridge(alpha=lam).fit(scaler.transform(X[:30]), y[:30])
        coef = m.coef_ / scaler.scale_
        # bound: two solvers that may both go through a Gram matrix (ours "auto", Ridge's
        # Cholesky): ridge_bounds with the Gram term; CSV floats round-trip (repr)
        b = ridge_bounds(X[:30], y[:30], lam, gram=True)
        assert np.linalg.norm(coefs[i, 2:] - coef) <= b.coef * np.linalg.norm(coef)
        pred_tr = m.predict(scaler.transform(X[:30]))
        pred_te = m.predict(scaler.transform(X[30:]))
        assert_allclose(table[i, 2], np.mean((y[:30] - pred_tr) ** 2), rtol=b.mse)
        assert_allclose(table[i, 5], np.mean((y[30:] - pred_te) ** 2),
                        rtol=b.test_mse_rtol(X[30:], y[30:], pred_te))


def test_explore_refuses_non_empty_out_without_force(wide_csv):
    """No data loss (house rule): an existing non-empty --out is refused, exit status 2."""
    tmp, _, _ = wide_csv
    out = tmp / "out"
    out.mkdir()
    keep = out / "mine.txt"
    keep.write_text("user data")
    args = ["explore", str(tmp / "train.csv"), "-t", "resp", "--out", str(out)]
    res = runner.invoke(app, args)
    assert res.exit_code == 2
    assert "--force" in res.output and "Traceback" not in res.output
    assert keep.read_text() == "user data"
    res = runner.invoke(app, args + ["--force"])
    assert res.exit_code == 0, res.output
    assert keep.read_text() == "user data" and (out / "summary.json").exists()


@pytest.mark.parametrize("args, needle", [
    (["--target", "nope"], "nope"),
    (["--target", "resp", "--holdout", "1.5"], "holdout"),
])
def test_explore_user_errors_exit_2(wide_csv, args, needle):
    """User errors: one line on stderr naming the problem, exit status 2 (house rule)."""
    tmp, _, _ = wide_csv
    res = runner.invoke(app, ["explore", str(tmp / "train.csv"), *args,
                              "--out", str(tmp / "o2")])
    assert res.exit_code == 2
    assert needle in res.output and "Traceback" not in res.output


def test_explore_holdout_split_is_seeded(wide_csv):
    """--holdout FRAC --seed S: the same seed gives the same split (summary records it)."""
    tmp, _, _ = wide_csv
    outs = []
    for k in range(2):
        out = tmp / f"h{k}"
        res = runner.invoke(app, ["explore", str(tmp / "train.csv"), "-t", "resp",
                                  "--holdout", "0.2", "--seed", "3", "--out", str(out)])
        assert res.exit_code == 0, res.output
        outs.append(json.loads((out / "summary.json").read_text()))
    assert outs[0]["n_test"] == 6 and outs[0]["split"]["seed"] == 3
    assert outs[0]["test_mse"] == outs[1]["test_mse"]


def test_explore_intervals_contract(wide_csv):
    """``--intervals`` writes intervals.csv (row, prediction, lower, upper) for the test
    rows and summary.json["intervals"]; the endpoints equal scikit-learn refits without
    each training row (jackknife+, Barber et al. 2021, eq. 6) at the reported penalty,
    and the recorded coverage is the share of test responses inside their interval."""
    tmp, X, y = wide_csv
    out = tmp / "iv"
    res = runner.invoke(app, ["explore", str(tmp / "train.csv"), "-t", "resp", "--test",
                              str(tmp / "test.csv"), "--intervals", "0.8", "--rule", "df=8",
                              "--format", "svg", "--no-report", "-o", str(out)])
    assert res.exit_code == 0, res.output
    summary = json.loads((out / "summary.json").read_text())
    rec = summary["intervals"]
    assert {"level", "method", "lambda", "coverage", "mean_width"} <= set(rec)
    assert rec["method"] == "jackknife+" and rec["level"] == 0.8
    lam = summary["selected"]["df"]["lambda"]
    assert rec["lambda"] == lam
    header, table = _read_csv(out / "intervals.csv")
    assert header == ["row", "prediction", "lower", "upper"]
    assert_allclose(table[:, 0], np.arange(10), rtol=0)  # exact: small integers
    Xtr, ytr, Xte, yte = X[:30], y[:30], X[30:], y[30:]
    scale = Xtr.std(axis=0)  # scales learned on all training rows, held fixed
    mus, R = np.empty((10, 30)), np.empty(30)
    worst = 0.0
    for i in range(30):
        keep = np.arange(30) != i
        model = Ridge(alpha=lam, solver="svd").fit(Xtr[keep] / scale, ytr[keep])
        mus[:, i] = model.predict(Xte / scale)
        R[i] = abs(ytr[i] - model.predict(Xtr[i:i + 1] / scale)[0])
        bd = ridge_bounds(Xtr[keep] / scale, ytr[keep], lam, standardize=False, solvers=1)
        worst = max(worst, bd.predict_atol(Xte / scale) + bd.predict_atol(Xtr[i:i + 1] / scale))
    lo, up = np.sort(mus - R, axis=1)[:, 5], np.sort(mus + R, axis=1)[:, 24]  # ranks 6, 25 of 30
    # bound: order statistics of mu -+ R are 1-Lipschitz in the sup norm; each refit's
    # predictions within Wedin's bound (ridge_bounds.predict_atol), ours within the same:
    # twice the worst; the CSV round trip by repr is exact
    tol = 2 * worst
    assert_allclose(table[:, 2], lo, rtol=0, atol=tol)
    assert_allclose(table[:, 3], up, rtol=0, atol=tol)
    inside = (table[:, 2] <= yte) & (yte <= table[:, 3])
    # exact: a count over 10, the same division; JSON floats round-trip
    assert rec["coverage"] == inside.mean()
    # bound: a mean of 10 differences (reorder_bound), each difference one rounding
    widths = table[:, 3] - table[:, 2]
    assert_allclose(rec["mean_width"], widths.mean(), rtol=reorder_bound(10),
                    atol=2 * UNIT * np.abs(table[:, 2:4]).max())
    path_header, _ = _read_csv(out / "path.csv")
    assert path_header[-1] == "reml_loglik"
    # the saved fit carries what the intervals need: the same endpoints from fit.npz
    from paths import load_fit, prediction_intervals

    again = prediction_intervals(load_fit(out / "fit.npz").path, Xte, lam, level=0.8)
    # bound: both within the refits' bound of the exact endpoints (tol above)
    assert_allclose(again.lower, table[:, 2], rtol=0, atol=tol)
    assert_allclose(again.upper, table[:, 3], rtol=0, atol=tol)


def test_explore_intervals_need_test_rows(wide_csv):
    """Without --test/--holdout, --intervals is refused with exit 2 and the fix named."""
    tmp, _, _ = wide_csv
    res = runner.invoke(app, ["explore", str(tmp / "train.csv"), "-t", "resp", "--intervals",
                              "0.9", "-o", str(tmp / "x")])
    assert res.exit_code == 2
    assert "--holdout" in res.output
