"""The explore workflow on the out-of-memory engines (``paths/workflows/engines.py``): the
streaming engine writes the same report.

Reference: scikit-learn ``Ridge`` on ``StandardScaler``-scaled features (the
same objective as the README's penalty convention) for the written
coefficients; the report's numbers are checked against ``summary.json``.
"""
from __future__ import annotations

import csv
import json

import numpy as np
import pandas as pd
from numpy.testing import assert_allclose
from sklearn.linear_model import Ridge
from sklearn.preprocessing import StandardScaler
from typer.testing import CliRunner

from error_bounds import ridge_bounds
from paths.cli import app


def test_stream_engine_writes_figures_and_report(tmp_path):
    """``--engine stream --n-folds 5`` writes the path, the figures and the report; the
    coefficients equal scikit-learn ``Ridge`` (rtol 1e-8: the streamed Gram route on a
    condition number ~1 design is accurate to ~1e-13), and the report states the
    K-fold CV error and its SE at the reported choice exactly as summary.json has them."""
    rng = np.random.default_rng(11)
    X = rng.standard_normal((3000, 12))
    y = X[:, :3] @ np.array([1.0, -2.0, 0.5]) + rng.standard_normal(3000)
    frame = pd.DataFrame(X, columns=[f"c{j}" for j in range(12)]).assign(resp=y)
    data = tmp_path / "tall.parquet"
    frame.to_parquet(data)
    out = tmp_path / "out"
    res = CliRunner().invoke(app, ["explore", str(data), "-t", "resp", "--engine", "stream",
                                   "--n-folds", "5", "--n-lambdas", "20", "--out", str(out)])
    assert res.exit_code == 0, res.output
    for name in ("path.csv", "coefficients.csv", "summary.json", "report.md", "report.html",
                 "fig-path.svg", "fig-spectrum.svg"):
        assert (out / name).is_file(), name
    summary = json.loads((out / "summary.json").read_text())
    nums = summary["report"]
    assert nums["rule"] == "cv"
    assert nums["est_mse"] == summary["selected"]["cv"]["est_mse"]
    assert nums["est_se"] == summary["selected"]["cv"]["est_se"]
    assert f"{nums['est_mse']:.4g}" in (out / "report.md").read_text()

    with open(out / "coefficients.csv", newline="") as fh:
        rows = list(csv.reader(fh))
    coefs = np.array([[float(v) for v in r] for r in rows[1:]])
    scaler = StandardScaler().fit(X)
    for k in (0, 10, 19):
        m = Ridge(alpha=coefs[k, 0]).fit(scaler.transform(X), y)
        # bound: the engine and Ridge's Cholesky, ridge_bounds with the Gram term
        ref = m.coef_ / scaler.scale_
        tol = ridge_bounds(X, y, coefs[k, 0], gram=True).coef
        assert np.linalg.norm(coefs[k, 2:] - ref) <= tol * np.linalg.norm(ref)
