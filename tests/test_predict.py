"""``paths explore`` writes fit.npz; ``paths predict`` applies it to new rows.

References: scikit-learn ``Ridge(alpha=lambda)`` on population-SD-scaled features
(the same objective) for the predicted values; the contract of issue 15 for the
columns, the id carried through and the one-line refusals.
"""
from __future__ import annotations

import csv

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose
from sklearn.linear_model import Ridge
from typer.testing import CliRunner

from error_bounds import ridge_bounds
from paths.cli import app
from paths.present.fitfile import load_fit

runner = CliRunner()
EPS = np.finfo(float).eps


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    """Training table with an id and a categorical column; new rows in another column order."""
    tmp_path = tmp_path_factory.mktemp("predict")
    rng = np.random.default_rng(11)
    n, p = 45, 20
    X = rng.standard_normal((n, p)) * rng.uniform(0.5, 3.0, p) + rng.uniform(-2, 2, p)
    site = rng.choice(["north", "south", "east"], n)
    y = X[:, :3] @ np.array([1.0, -0.5, 0.25]) + (site == "south") + 0.3 * rng.standard_normal(n)
    cols = [f"f{j}" for j in range(p)]
    train = pd.DataFrame(X[:35], columns=cols).assign(site=site[:35], resp=y[:35],
                                                      sid=[f"s{i}" for i in range(35)])
    new = pd.DataFrame(X[35:], columns=cols).assign(site=site[35:], extra=7.0,
                                                    sid=[f"n{i}" for i in range(10)])
    new = new[new.columns[::-1]]
    train.to_csv(tmp_path / "train.csv", index=False)
    new.to_csv(tmp_path / "new.csv", index=False)
    result = runner.invoke(app, ["explore", str(tmp_path / "train.csv"), "-t", "resp", "--id",
                                 "sid", "--encode", "onehot", "--no-report", "--format", "svg",
                                 "--out", str(tmp_path / "out")])
    assert result.exit_code == 0, result.output
    return tmp_path, train, new


def _read(path):
    with open(path, newline="") as fh:
        rows = list(csv.reader(fh))
    return rows[0], rows[1:]


def _design(frame):
    cols = [c for c in frame.columns if c.startswith("f")]
    cols = sorted(cols, key=lambda c: int(c[1:]))
    X = frame[cols].to_numpy(float)
    # one-hot, reference level (first in sorted order: east) dropped, as the reader documents
    return np.column_stack([X, (frame["site"] == "north"), (frame["site"] == "south")]).astype(float)


def test_predict_matches_sklearn_with_columns_reordered(files):
    """Predictions at --lambda against scikit-learn Ridge on the scaled one-hot design.

    Tolerance: sklearn's Cholesky solve has relative error about kappa * eps
    (Higham 2002, ch. 10); 10 n kappa eps of the largest prediction.
    """
    tmp, train, new = files
    lam = 2.0
    r = runner.invoke(app, ["predict", str(tmp / "out" / "fit.npz"), str(tmp / "new.csv"),
                            "--out", str(tmp / "pred.csv"), "--lambda", str(lam)])
    assert r.exit_code == 0, r.output
    assert "ignored 1 column(s) the fit does not use: extra" in r.output
    header, rows = _read(tmp / "pred.csv")
    assert header == ["sid", "prediction"]
    assert [row[0] for row in rows] == list(new["sid"])
    Xtr, Xn = _design(train), _design(new)
    mu, sd = Xtr.mean(0), Xtr.std(0)
    ref = Ridge(alpha=lam).fit((Xtr - mu) / sd, train["resp"]).predict((Xn - mu) / sd)
    got = np.array([float(row[1]) for row in rows])
    # bound: ours ("auto": Gram bound) and Ridge's Cholesky (Gram bound), predictions at the
    # new rows; the CSV holds repr() floats
    b = ridge_bounds(Xtr, train["resp"].to_numpy(float), lam, gram=True)
    assert_allclose(got, ref, rtol=0, atol=b.predict_atol(Xn))


def test_predict_default_is_reported_rule(files):
    """Without --lambda/--rule: the reported (GCV) penalty of summary.json."""
    import json

    tmp, train, new = files
    summary = json.loads((tmp / "out" / "summary.json").read_text())
    saved = load_fit(tmp / "out" / "fit.npz")
    assert saved.header["reported"]["rule"] == summary["reported"] == "gcv"
    # exact: the same float written to JSON (repr round trip) and to fit.npz
    assert_allclose(saved.reported_lambda[0], summary["selected"]["gcv"]["lambda"], rtol=0)
    assert saved.header["input_sha256"]
    r = runner.invoke(app, ["predict", str(tmp / "out" / "fit.npz"), str(tmp / "new.csv"),
                            "-o", str(tmp / "p.csv"), "--rule", "loo"])
    assert r.exit_code == 0, r.output
    _, rows = _read(tmp / "p.csv")
    lam = summary["selected"]["loo"]["lambda"]
    expect = saved.predict(_design(new), lam)
    assert np.array_equal(np.array([float(row[1]) for row in rows]), expect)


@pytest.mark.parametrize("args,pattern", [
    (["--lambda", "1", "--rule", "gcv"], "either --lambda or --rule"),
    (["--rule", "cv"], "rule cv was not computed"),
    (["--id", "f3"], "is a feature of the fit"),
    (["--id", "nope"], "not found"),
    (["--intervals", "1.5"], "level in"),
])
def test_predict_refusals(files, args, pattern):
    tmp, _, _ = files
    r = runner.invoke(app, ["predict", str(tmp / "out" / "fit.npz"), str(tmp / "new.csv"),
                            "-o", str(tmp / "x.csv"), *args])
    assert r.exit_code == 2
    assert len(r.output.strip().splitlines()) == 1 and pattern in r.output


def test_predict_missing_columns_and_files(files):
    tmp, _, new = files
    new.drop(columns=["f2", "f7"]).to_csv(tmp / "short.csv", index=False)
    fit = str(tmp / "out" / "fit.npz")
    r = runner.invoke(app, ["predict", fit, str(tmp / "short.csv"), "-o", str(tmp / "x.csv")])
    assert r.exit_code == 2 and "'f2', 'f7'" in r.output
    r = runner.invoke(app, ["predict", str(tmp / "out" / "summary.json"), str(tmp / "new.csv"),
                            "-o", str(tmp / "x.csv")])
    assert r.exit_code == 2 and "not a saved paths fit" in r.output
    r = runner.invoke(app, ["predict", fit, str(tmp / "new.csv"), "-o", str(tmp / "new.csv"),
                            "--force"])
    assert r.exit_code == 2 and "input file" in r.output
    (tmp / "keep.csv").write_text("keep me")
    r = runner.invoke(app, ["predict", fit, str(tmp / "new.csv"), "-o", str(tmp / "keep.csv")])
    assert r.exit_code == 2 and "--force" in r.output
    assert (tmp / "keep.csv").read_text() == "keep me"


def test_stream_engine_writes_a_predict_only_fit(tmp_path):
    """explore --engine stream writes fit.npz; predict from it matches the in-memory fit's
    predictions to the Gram route's accuracy; --intervals is refused in one line."""
    rng = np.random.default_rng(5)
    X = rng.standard_normal((200, 6))
    y = X[:, 0] + rng.standard_normal(200)
    pd.DataFrame(X, columns=[f"c{j}" for j in range(6)]).assign(y=y).to_csv(
        tmp_path / "t.csv", index=False)
    for engine, out in (("stream", "os"), ("memory", "om")):
        r = runner.invoke(app, ["explore", str(tmp_path / "t.csv"), "-t", "y", "--engine", engine,
                                "--no-report", "--format", "svg", "-o", str(tmp_path / out)])
        assert r.exit_code == 0, r.output
        r = runner.invoke(app, ["predict", str(tmp_path / out / "fit.npz"), str(tmp_path / "t.csv"),
                                "-o", str(tmp_path / f"{out}.csv"), "--lambda", "3"])
        assert r.exit_code == 0, r.output
    got = np.array([float(r[1]) for r in _read(tmp_path / "os.csv")[1]])
    ref = np.array([float(r[1]) for r in _read(tmp_path / "om.csv")[1]])
    # bound: the streamed Gram route and the in-memory route (Gram bound covers both)
    assert_allclose(got, ref, rtol=0, atol=ridge_bounds(X, y, 3.0, gram=True).predict_atol(X))
    r = runner.invoke(app, ["predict", str(tmp_path / "os" / "fit.npz"), str(tmp_path / "t.csv"),
                            "-o", str(tmp_path / "x.csv"), "--intervals", "0.9"])
    assert r.exit_code == 2 and "predict-only" in r.output


def test_predict_intervals_equal_the_library(files):
    """--intervals writes paths.prediction_intervals of the rebuilt path (jackknife+), bit for
    bit (issue 15: predict equals the library's own prediction)."""
    import paths

    if "prediction_intervals" not in paths.__all__:
        pytest.skip("this version has no paths.prediction_intervals (issue 14)")
    tmp, _, new = files
    r = runner.invoke(app, ["predict", str(tmp / "out" / "fit.npz"), str(tmp / "new.csv"),
                            "-o", str(tmp / "pi.csv"), "--intervals", "0.8"])
    assert r.exit_code == 0, r.output
    header, rows = _read(tmp / "pi.csv")
    assert header == ["sid", "prediction", "lower", "upper"]
    fit = load_fit(tmp / "out" / "fit.npz")
    ref = paths.prediction_intervals(fit.path, _design(new), float(fit.reported_lambda[0]),
                                     level=0.8)
    got = np.array([[float(v) for v in row[1:]] for row in rows])
    assert np.array_equal(got[:, 0], ref.prediction)
    assert np.array_equal(got[:, 1], ref.lower) and np.array_equal(got[:, 2], ref.upper)
