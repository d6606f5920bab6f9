"""The workflows of ``paths/workflows/``: a case file and the command line give the same run.

A case file is another spelling of a command's options, so for explore,
threshold and simulate the two must write the same files with the same numbers
(compared exactly: the same code runs on the same data).  A test file whose
columns come in another order is aligned by name.  The numbers themselves are
checked against references outside the project: scikit-learn ``Ridge`` refits
(explore's test error) and ``numpy.linalg.pinv`` (the minimum-norm least-squares
fit of the threshold sweep, Penrose 1956).
"""
from __future__ import annotations

import csv
import json

import numpy as np
import pytest
from numpy.testing import assert_allclose
from typer.testing import CliRunner

from error_bounds import ridge_bounds
from paths.cli import app
from paths.workflows.cases import parse_case, run_case
from paths.workflows.options import DataOptions, FitOptions
from paths.workflows.prepare import prepare

runner = CliRunner()
EPS = np.finfo(float).eps


def _tables(tmp_path, n=40, n_test=30, p=12, seed=0):
    """A training CSV and a test CSV whose columns are in reversed order (seeded, synthetic)."""
    rng = np.random.default_rng(seed)
    beta = rng.standard_normal(p)
    names = [f"x{j}" for j in range(p)]

    def write(path, rows, order):
        X = rng.standard_normal((rows, p)) * (1 + np.arange(p))  # unequal scales
        y = X @ beta + rng.standard_normal(rows)
        cols = {**{nm: X[:, j] for j, nm in enumerate(names)}, "y": y}
        with open(path, "w", newline="") as fh:
            w = csv.writer(fh)
            w.writerow(order)
            for i in range(rows):
                w.writerow([repr(float(cols[c][i])) for c in order])
        return X, y

    train, test = tmp_path / "train.csv", tmp_path / "test.csv"
    Xtr, ytr = write(train, n, [*names, "y"])
    Xte, yte = write(test, n_test, ["y", *reversed(names)])
    return train, test, (Xtr, ytr, Xte, yte)


def _rows(path):
    with open(path, newline="") as fh:
        return list(csv.DictReader(fh))


def _json(path):
    s = json.loads(path.read_text())
    for k in ("command_line", "case", "title", "description", "synthetic", "versions"):
        s.pop(k, None)
    return s


def _invoke(args):
    res = runner.invoke(app, [str(a) for a in args])
    assert res.exit_code == 0, res.output
    return res


def test_prepare_aligns_test_columns_by_name(tmp_path):
    """The test file's columns (reversed on disk) come back in the training order."""
    train, test, (_, _, Xte, yte) = _tables(tmp_path)
    prep = prepare(DataOptions(file=train, target="y", test_file=test))
    # exact: the numbers were written with repr(): read back exactly (shortest repr round trip)
    assert_allclose(prep.test.X, Xte, rtol=0, atol=0)
    assert_allclose(prep.test.y, yte, rtol=0, atol=0)


def test_threshold_case_equals_command_line_and_pinv(tmp_path):
    """threshold: case file (test_file with reordered columns) == command line; the min-norm
    test MSE at p' = p equals numpy.linalg.pinv's on the centered design (standardize off)."""
    train, test, (Xtr, ytr, Xte, yte) = _tables(tmp_path, n=20, p=30)
    _invoke(["threshold", train, "-t", "y", "--test", test, "--no-standardize", "--n-points",
             "6", "--format", "svg", "--out", tmp_path / "cli"])
    case = f"""
[case]
name = "t"
analysis = "threshold"
[data]
file = "{train.name}"
target = "y"
test_file = "{test.name}"
[threshold]
standardize = false
n_points = 6
[figures]
formats = ["svg"]
"""
    (tmp_path / "t.toml").write_text(case)
    _invoke(["run", tmp_path / "t.toml", "--out", tmp_path / "case"])
    cli, cas = _rows(tmp_path / "cli" / "threshold.csv"), _rows(tmp_path / "case" / "threshold.csv")
    assert cli == cas
    assert _json(tmp_path / "cli" / "threshold.json") == _json(tmp_path / "case" / "threshold.json")
    assert sorted(p.name for p in (tmp_path / "cli").iterdir()) == \
        sorted(p.name for p in (tmp_path / "case").iterdir())
    full = [r for r in cli if r["method"] == "min_norm" and int(r["n_features"]) == 30]
    mean = Xtr.mean(axis=0)
    beta = np.linalg.pinv(Xtr - mean) @ (ytr - ytr.mean())
    pred = ytr.mean() + (Xte - mean) @ beta
    ref = np.mean((yte - pred) ** 2)
    # bound: p = 30 > n - 1 = 19 (the min-norm interpolator): two SVD-based solves within
    # Wedin's bound (ridge_bounds at 0), through the test MSE (test_mse_rtol)
    b = ridge_bounds(Xtr, ytr, 0.0, standardize=False)
    assert_allclose(float(full[0]["test_mse"]), ref, rtol=b.test_mse_rtol(Xte, yte, pred))


def test_explore_case_equals_command_line_and_sklearn(tmp_path):
    """explore: case file == command line (reordered test file); the test MSE of path.csv at
    every fifth penalty equals a scikit-learn Ridge refit on the standardized training design."""
    from sklearn.linear_model import Ridge
    from sklearn.preprocessing import StandardScaler

    train, test, (Xtr, ytr, Xte, yte) = _tables(tmp_path, n=40, p=12, seed=1)
    _invoke(["explore", train, "-t", "y", "--test", test, "--n-lambdas", "20", "--n-folds", "4",
             "--seed", "3", "--format", "svg", "--out", tmp_path / "cli"])
    case = f"""
[data]
file = "{train.name}"
target = "y"
test_file = "{test.name}"
[fit]
n_lambdas = 20
n_folds = 4
seed = 3
[figures]
formats = ["svg"]
"""
    (tmp_path / "e.toml").write_text(case)
    _invoke(["run", tmp_path / "e.toml", "--out", tmp_path / "case"])
    for name in ("path.csv", "coefficients.csv"):
        assert _rows(tmp_path / "cli" / name) == _rows(tmp_path / "case" / name)
    cli, cas = _json(tmp_path / "cli" / "summary.json"), _json(tmp_path / "case" / "summary.json")
    cli.pop("report"), cas.pop("report")
    assert cli == cas
    assert sorted(p.name for p in (tmp_path / "cli").iterdir()) == \
        sorted(p.name for p in (tmp_path / "case").iterdir())
    scaler = StandardScaler().fit(Xtr)  # population SD, as the package's convention
    for row in _rows(tmp_path / "cli" / "path.csv")[::5]:
        ref = Ridge(alpha=float(row["lambda"])).fit(scaler.transform(Xtr), ytr)
        pred = ref.predict(scaler.transform(Xte))
        mse = np.mean((yte - pred) ** 2)
        # bound: ours ("auto") and Ridge's Cholesky: ridge_bounds with the Gram term
        b = ridge_bounds(Xtr, ytr, float(row["lambda"]), gram=True)
        assert_allclose(float(row["test_mse"]), mse, rtol=b.test_mse_rtol(Xte, yte, pred))


def test_simulate_case_equals_command_line(tmp_path):
    """simulate: the command line and a case file with the same options write the same numbers,
    and the min-norm test MSE at p' = p of the first draw equals numpy.linalg.pinv's."""
    from paths.threshold.simulate import draw, make_truth

    _invoke(["simulate", "--n-train", "20", "-p", "30", "--n-test", "25", "--n-points", "5",
             "--seed", "4", "--no-standardize", "--format", "svg", "--out", tmp_path / "cli"])
    case = """
[case]
analysis = "simulate"
[truth]
n_features = 30
seed = 4
[simulate]
n_train = 20
n_test = 25
[threshold]
n_points = 5
seed = 4
standardize = false
[figures]
formats = ["svg"]
"""
    run_case(parse_case(case), tmp_path / "case")
    for name in ("threshold.csv", "bias_variance.csv"):
        assert _rows(tmp_path / "cli" / name) == _rows(tmp_path / "case" / name)
    assert _json(tmp_path / "cli" / "threshold.json") == _json(tmp_path / "case" / "threshold.json")
    truth = make_truth(30, seed=4)
    rng = np.random.default_rng(4)
    X, y = draw(truth, 20, rng)
    Xt, yt = draw(truth, 25, rng)
    m = X.mean(axis=0)
    beta = np.linalg.pinv(X - m) @ (y - y.mean())
    pred = y.mean() + (Xt - m) @ beta
    ref = np.mean((yt - pred) ** 2)
    row = [r for r in _rows(tmp_path / "cli" / "threshold.csv")
           if r["method"] == "min_norm" and int(r["n_features"]) == 30][0]
    # bound: p = 30 > n - 1 = 19: pinv's rank cut and the package's agree on a Gaussian
    # design; two SVD solves within Wedin's bound (ridge_bounds at 0) in the test MSE
    b = ridge_bounds(X, y, 0.0, standardize=False)
    assert_allclose(float(row["test_mse"]), ref, rtol=b.test_mse_rtol(Xt, yt, pred))


@pytest.mark.parametrize("command", ["threshold", "explore"])
def test_one_text_column_can_be_excluded_or_encoded(tmp_path, command):
    """A table with one text column: refused by default, usable with --exclude or --encode
    (the same preparation for every command that reads a table)."""
    rng = np.random.default_rng(2)
    path = tmp_path / "mixed.csv"
    rows = ["a,b,c,site,y"] + [f"{rng.normal()},{rng.normal()},{rng.normal()},"
                               f"{'north' if i % 2 else 'south'},{rng.normal()}" for i in range(30)]
    path.write_text("\n".join(rows) + "\n")
    extra = ["--n-points", "4", "--random-features", "40"] if command == "threshold" else []
    bad = runner.invoke(app, [command, str(path), "-t", "y", "--out", str(tmp_path / "x"), *extra])
    assert bad.exit_code == 2
    for opts in (["--exclude", "site"], ["--encode", "onehot"]):
        out = tmp_path / f"{command}-{opts[0][2:]}"
        _invoke([command, path, "-t", "y", *opts, "--no-report", "--format", "",
                 "--out", out, *extra])


def test_progress_has_one_signature(tmp_path):
    """Every workflow reports progress(stage, done, total): stages are names, done <= total."""
    from paths.workflows.options import DrawOptions, FigureOptions, OutputOptions, \
        ThresholdOptions, TruthOptions
    from paths.workflows.threshold import run_simulate, run_threshold

    train, test, _ = _tables(tmp_path, n=20, p=30)
    calls = []

    def progress(stage, done, total):
        calls.append((stage, done, total))

    none = FigureOptions(formats=(), report=False)
    run_threshold(DataOptions(file=train, target="y", test_file=test),
                  ThresholdOptions(n_points=4), none, OutputOptions(out_dir=tmp_path / "t"),
                  progress=progress)
    run_simulate(TruthOptions(n_features=12), DrawOptions(n_train=10, n_test=10),
                 ThresholdOptions(n_points=4, repeats=2), none,
                 OutputOptions(out_dir=tmp_path / "s"), progress=progress)
    assert {"sweep", "simulate"} <= {c[0] for c in calls}
    assert all(0 <= done <= total for _, done, total in calls)
    assert calls[-1][1] == calls[-1][2]  # the last call says the simulation is done
