"""Engine parity for wide data: ``paths explore --engine stream`` on a file with more feature
columns than rows (the column-blocked engine, Parquet or CSV) gives the in-memory engine's
errors, folds, holdout rows and choices, and its K-fold errors equal scikit-learn refits.

References: the in-memory engine (checked against scikit-learn refits in tests/test_cv.py)
and scikit-learn ``Ridge(alpha=lambda, solver="svd")`` refitted fold by fold (with
``StandardScaler`` inside each fold for per-fold scaling: population SD, the documented
convention).

Tolerances (tests/error_bounds.py).  Both engines evaluate the same closed forms on factors
of the same centered design: the wide engine through the n × n Gram matrix (eigh), the
in-memory engine through the thin SVD.  A held-out residual is the residual of a ridge refit
on the other folds (Liland, Skogholt & Indahl 2024), so its error relative to ‖y‖ is at most
the least-squares residual bound of Higham (2002) Thm 20.1 with the Gram-route term of
§20.4, ``ls_residual_bound(kappa, backward_eps(m, p), gram=True)``, with ``kappa`` the
largest condition number of the training designs of the folds (computed below with numpy's
SVD); a mean of squared residuals then moves by at most twice that times ‖y‖²/n (an
absolute tolerance; training errors tend to 0 at small λ).  Two engines: twice again.
Relative to the K-fold errors the bound is asserted below 1e-9 too (the parity the issue
asks for).
Selected penalties minimize smooth criteria known to a relative ``tol``: the minimizer is
determined to about ``sqrt(tol / curvature)`` (a fact of the trade: a minimum is flat to
second order), and Brent's refinement stops at 1e-7 in log λ, so choices are compared at
1e-5 relative.
"""
from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose
from sklearn.linear_model import Ridge
from typer.testing import CliRunner

from error_bounds import backward_eps, ls_residual_bound
from paths import InputError
from paths.cli import app
from paths.data.folds import holdout_mask
from paths.selection.cv import make_folds

N, P = 36, 90


def _data(seed=0):
    rng = np.random.default_rng(seed)
    X = rng.standard_normal((N, P)) * rng.uniform(0.5, 2.0, P) + rng.uniform(-3, 3, P)
    Z = (X - X.mean(axis=0)) / X.std(axis=0)
    y = Z[:, :12] @ rng.normal(0.0, 0.6, 12) + 0.8 * rng.standard_normal(N) + 5.0
    frame = pd.DataFrame(X, columns=[f"g{j}" for j in range(P)])
    frame.insert(0, "id", np.arange(500, 500 + N))
    frame["site"] = [f"s{k}" for k in rng.integers(0, 7, N)]
    frame["y"] = y
    return frame


def _files(tmp_path, seed=0):
    frame = _data(seed)
    frame.to_parquet(tmp_path / "w.parquet", index=False)
    frame.to_csv(tmp_path / "w.csv", index=False)
    return frame


def _run(tmp_path, name, args):
    out = tmp_path / name
    r = CliRunner().invoke(app, ["explore", *args, "--out", str(out), "--format", "none"])
    assert r.exit_code == 0, r.output
    return json.loads((out / "summary.json").read_text())


def _kappa_max(X, labels_list, standardize=True):
    """Largest condition number of the centered (scaled) training designs of every fold
    (and of all rows), from numpy's SVD."""
    def kappa(A):
        Z = A - A.mean(axis=0)
        if standardize:
            Z = Z / A.std(axis=0)
        d = np.linalg.svd(Z, compute_uv=False)
        d = d[d > d[0] * max(Z.shape) * np.finfo(float).eps]
        return d[0] / d[-1]
    ks = [kappa(X)] + [kappa(X[lab != f]) for lab in labels_list for f in np.unique(lab)]
    return max(ks)


def _tol(X, y, labels_list):
    """The absolute tolerance of the module notes for mean squared errors, and the bound
    ``beta`` on a residual relative to ‖y‖."""
    m, p = X.shape
    beta = ls_residual_bound(_kappa_max(X, labels_list), backward_eps(m, p), gram=True)
    yc = y - y.mean()
    return 2 * 2 * beta * float(yc @ yc) / m, beta


OPTION_SETS = {
    "cv-shuffled": (["--exclude", "site", "--id", "id", "--n-folds", "5", "--seed", "0"],
                    dict(K=5, seed=0)),
    "cv-blocked": (["--exclude", "site", "--id", "id", "--n-folds", "4", "--fold-scheme",
                    "blocked"], dict(K=4, scheme="blocked")),
    "repeats": (["--exclude", "site", "--id", "id", "--n-folds", "3", "--repeats", "3",
                 "--seed", "2"], dict(K=3, seed=2, repeats=3)),
    "holdout-cv": (["--exclude", "site", "--id", "id", "--holdout", "0.25", "--seed", "4",
                    "--n-folds", "5"], dict(K=5, seed=4, holdout=0.25)),
    "groups": (["--id", "id", "--groups", "site", "--n-folds", "4", "--seed", "1"],
               dict(K=4, seed=1, groups=True)),
    "groups-holdout": (["--id", "id", "--groups", "site", "--holdout", "0.2", "--seed", "6"],
                       dict(seed=6, holdout=0.2, groups=True)),
    "per-fold": (["--exclude", "site", "--id", "id", "--n-folds", "4", "--cv-scaling",
                  "per-fold"], dict(K=4, seed=0)),
    "rule-one-se": (["--exclude", "site", "--id", "id", "--n-folds", "4", "--rule", "one-se"],
                    dict(K=4, seed=0)),
    "rule-loo": (["--exclude", "site", "--id", "id", "--rule", "loo"], dict()),
    "no-standardize": (["--exclude", "site", "--id", "id", "--n-folds", "4",
                        "--no-standardize"], dict(K=4, seed=0, standardize=False)),
}


CSV_TOO = ("cv-shuffled", "groups-holdout", "per-fold")


def _labels(frame, spec):
    """The training rows and the fold labels the in-memory engine uses (paths.data.folds)."""
    X = frame[[f"g{j}" for j in range(P)]].to_numpy()
    y = frame["y"].to_numpy()
    train = np.ones(N, dtype=bool)
    if "holdout" in spec:
        train = ~holdout_mask(np.arange(N), N, spec["holdout"], seed=spec.get("seed", 0))
    X, y = X[train], y[train]
    groups = frame["site"].to_numpy()[train] if spec.get("groups") else None
    K = spec.get("K", None if groups is None else min(10, np.unique(groups).size))
    labels = [] if K is None else [
        make_folds(X.shape[0], K, scheme=spec.get("scheme", "shuffled"), seed=spec.get("seed", 0),
                   groups=groups, repeat=i) for i in range(spec.get("repeats", 1))]
    return X, y, labels


@pytest.mark.reference
@pytest.mark.parametrize("case", sorted(OPTION_SETS))
def test_wide_engine_equals_memory(tmp_path, case):
    """Every fold, holdout, group, repeat, scaling and rule option on wide data: the
    column-blocked engine (Parquet and CSV) gives the in-memory engine's errors and choices
    within the bound of the module notes."""
    flags, spec = OPTION_SETS[case]
    frame = _files(tmp_path)
    X, y, labels = _labels(frame, spec)
    mem = _run(tmp_path, "mem", [str(tmp_path / "w.parquet"), "-t", "y", *flags])
    atol, beta = _tol(X, y, labels)  # bound: _tol (module notes)
    # spec: relative to the K-fold errors, the bound implies the parity issue 7 asks for
    if mem.get("cv"):
        assert atol / np.min(mem["cv"]["mse"]) < 1e-9
    # the CSV reader is checked on its own below; here once per kind of option
    names = ("w.parquet", "w.csv") if case in CSV_TOO else ("w.parquet",)
    for name in names:
        eng = _run(tmp_path, f"wide-{name}", [str(tmp_path / name), "-t", "y", *flags,
                                              "--engine", "stream", "--chunk-rows", "17"])
        assert eng["engine"]["engine"] == "wide"
        assert eng["n_features"] == mem["n_features"] == P
        assert eng["n_samples"] == mem["n_samples"] and eng["n_test"] == mem["n_test"]
        for key in ("gcv", "loo_mse", "train_mse", "test_mse", "df"):  # bound: _tol
            if mem[key] is None:
                assert eng[key] is None
                continue
            assert_allclose(eng[key], mem[key], rtol=0, atol=N * beta if key == "df" else atol)
        assert bool(eng.get("cv")) == bool(mem.get("cv"))
        if mem.get("cv"):
            for key in ("n_folds", "repeats", "scheme", "scaling", "fold_sizes"):
                assert eng["cv"][key] == mem["cv"][key], key
            # bound: _tol (module notes)
            assert_allclose(eng["cv"]["mse"], mem["cv"]["mse"], rtol=0, atol=atol)
            assert_allclose(eng["cv"]["se"], mem["cv"]["se"], rtol=0, atol=atol)
        assert eng["reported"] == mem["reported"]
        for rule in ("gcv", "loo", "cv", "one-se", "test"):
            sel, got = mem["selected"].get(rule), eng["selected"].get(rule)
            if sel is None or sel.get("lambda") is None:
                continue
            assert got.get("index") == sel.get("index"), rule
            # spec: refined minimizers of flat criteria: Brent's xatol 1e-7 in log lambda plus
            # sqrt(criteria's bound / curvature) (as in tests/test_engine_parity.py)
            assert_allclose(got["lambda"], sel["lambda"], rtol=1e-5, atol=1e-12)


@pytest.mark.reference
@pytest.mark.parametrize("scaling", ["global", "per-fold"])
def test_wide_kfold_against_sklearn_refits(tmp_path, scaling):
    """K-fold CV of the wide engine after a seeded holdout equals scikit-learn ``Ridge``
    refitted on each training part: the scaling of all training rows held fixed (global),
    or ``StandardScaler`` learnt on each fold's training rows (per-fold)."""
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import StandardScaler

    frame = _files(tmp_path, seed=3)
    s = _run(tmp_path, "eng", [str(tmp_path / "w.csv"), "-t", "y", "--exclude", "site",
                               "--id", "id", "--holdout", "0.2", "--seed", "3", "--n-folds",
                               "4", "--cv-scaling", scaling, "--engine", "stream"])
    X, y, labels = _labels(frame, dict(K=4, seed=3, holdout=0.2))
    lab = labels[0]
    atol, _ = _tol(X, y, labels)
    Z = (X - X.mean(axis=0)) / X.std(axis=0)
    lams = np.asarray(s["lambdas"])
    for i in (0, len(lams) // 2, len(lams) - 1):
        sq = 0.0
        for f in range(4):
            te = lab == f
            if scaling == "global":
                fit = Ridge(alpha=lams[i], solver="svd").fit(Z[~te], y[~te])
                pred = fit.predict(Z[te])
            else:
                fit = make_pipeline(StandardScaler(), Ridge(alpha=lams[i], solver="svd"))
                pred = fit.fit(X[~te], y[~te]).predict(X[te])
            sq += np.sum(np.square(y[te] - pred))
        # bound: _tol (module notes)
        assert_allclose(s["cv"]["mse"][i], sq / X.shape[0], rtol=0, atol=atol)


@pytest.mark.reference
def test_wide_test_file_csv_columns_in_another_order(tmp_path):
    """A wide CSV test file whose columns come in another order: the test errors of the
    column-blocked engine equal the in-memory engine's (columns aligned by name)."""
    frame = _data(0)
    test = _data(7)
    frame.drop(columns=["site"]).to_csv(tmp_path / "w.csv", index=False)
    cols = list(test.drop(columns=["site"]).columns)[::-1]
    test[cols].to_csv(tmp_path / "t.csv", index=False)
    args = [str(tmp_path / "w.csv"), "-t", "y", "--id", "id", "--test", str(tmp_path / "t.csv")]
    mem = _run(tmp_path, "mem", args)
    eng = _run(tmp_path, "eng", [*args, "--engine", "stream"])
    X = frame[[f"g{j}" for j in range(P)]].to_numpy()
    atol, _ = _tol(X, frame["y"].to_numpy(), [])
    assert eng["n_test"] == mem["n_test"] == N
    # bound: _tol (module notes)
    assert_allclose(eng["test_mse"], mem["test_mse"], rtol=0, atol=atol)


@pytest.mark.parametrize("flags, want", [
    (["--weights", "g3"], "the column-blocked Gram is unweighted"),
    (["--encode", "onehot", "--test", "w.parquet"], "use --holdout, or --engine memory"),
    (["--engine", "dask"], "the dask engine splits rows"),
    (["--intervals", "0.9", "--holdout", "0.2"], "never forms"),
])
def test_wide_refusals_say_why(tmp_path, flags, want):
    """What the wide engine cannot do: exit 2, one line, the reason and the alternative
    (a fact of the trade, no source: a refusal names the cause and the fix)."""
    _files(tmp_path)
    flags = [str(tmp_path / f) if f.endswith(".parquet") else f for f in flags]
    engine = [] if "--engine" in flags else ["--engine", "stream"]
    r = CliRunner().invoke(app, ["explore", str(tmp_path / "w.parquet"), "-t", "y", "--exclude",
                                 "site", *engine, *flags, "--out", str(tmp_path / "o")])
    assert r.exit_code == 2, r.output
    assert want in r.output and "Traceback" not in r.output, r.output
    assert len(r.output.strip().splitlines()) == 1, r.output


def _explore(path, engine, **data):
    from paths.workflows.explore import run_explore
    from paths.workflows.options import (DataOptions, EngineOptions, FigureOptions, FitOptions,
                                         OutputOptions)

    fit = FitOptions(n_folds=data.pop("n_folds", None))
    return run_explore(DataOptions(file=path, target=("y",), **data), fit,
                       FigureOptions(formats="none"),
                       OutputOptions(out_dir=path.parent / f"out-{engine}", force=True),
                       engine=EngineOptions(engine=engine))


def _outcome(path, engine, **data):
    try:
        return _explore(path, engine, **data).summary
    except InputError as exc:
        return str(exc)


def _bad_frame(case):
    rng = np.random.default_rng(2)
    n, p = 12, 30
    frame = pd.DataFrame(rng.standard_normal((n, p)), columns=[f"g{j}" for j in range(p)])
    frame["y"] = rng.standard_normal(n)
    if case == "text-value":
        frame["g3"] = frame["g3"].astype(object)
        frame.loc[2, "g3"] = "abc"
    elif case == "missing":
        frame.loc[4, "g5"] = np.nan
        frame.loc[6, "g20"] = np.nan
    elif case == "infinite":
        frame.loc[4, "g25"] = -np.inf
    elif case == "categorical":
        frame["g7"] = ["a", "b", "c"] * 4
    elif case == "target-missing":
        frame.loc[3, "y"] = np.nan
    elif case == "target-constant":
        frame["y"] = 1.0
    elif case == "all-missing":
        frame["g8"] = np.nan
    elif case == "target-text":
        frame["y"] = frame["y"].astype(object)
        frame.loc[5, "y"] = "n/a?"
    return frame


@pytest.mark.parametrize("fmt", ["csv", "parquet"])
@pytest.mark.parametrize("case", ["text-value", "missing", "infinite", "categorical",
                                  "target-missing", "target-constant", "all-missing",
                                  "target-text"])
def test_wide_reader_refuses_as_in_memory(tmp_path, case, fmt):
    """A wide file with a bad value is refused with exactly the in-memory reader's one-line
    message (column, count, first line or row): the rules of paths.data.tables.select."""
    frame = _bad_frame(case)
    path = tmp_path / f"bad.{fmt}"
    if fmt == "csv":
        frame.to_csv(path, index=False)
    else:
        if case in ("text-value", "target-text"):
            pytest.skip("Parquet columns have one type: a number column holds no text")
        frame.to_parquet(path, index=False)
    mem, wide = _outcome(path, "memory"), _outcome(path, "stream")
    assert isinstance(mem, str), "the in-memory engine must refuse this input"
    assert wide == mem


@pytest.mark.reference
@pytest.mark.parametrize("fmt", ["csv", "parquet"])
@pytest.mark.parametrize("drop", ["rows", "columns"])
def test_wide_encode_and_drop_missing_equal_memory(tmp_path, fmt, drop):
    """``--encode onehot`` and ``--drop-missing`` on wide data: the same rows, the same
    one-hot columns (names, order), and the in-memory K-fold and test errors within the
    bound of the module notes."""
    from paths.workflows.prepare import prepare, train_test
    from paths.workflows.options import DataOptions

    rng = np.random.default_rng(4)
    n, p = 30, 60
    X = rng.standard_normal((n, p))
    frame = pd.DataFrame(X, columns=[f"g{j}" for j in range(p)])
    frame["y"] = X[:, :4] @ [1.0, 2.0, -1.0, 0.5] + rng.standard_normal(n)
    frame.insert(10, "tissue", rng.choice(["liver", "brain", "lung"], n))
    frame.insert(40, "batch", rng.choice(["b1", "b2"], n))
    frame.loc[3, "g5"] = np.nan
    frame.loc[7, "g33"] = np.nan
    path = tmp_path / f"e.{fmt}"
    frame.to_csv(path, index=False) if fmt == "csv" else frame.to_parquet(path, index=False)
    opts = dict(encode="onehot", drop_missing=drop, holdout=0.2, n_folds=4)
    mem, wide = _explore(path, "memory", **opts), _explore(path, "stream", **opts)
    assert wide.result.engine == "wide"
    assert list(wide.result.feature_names) == list(mem.result.feature_names)
    assert "tissue=lung" in list(wide.result.feature_names)
    assert wide.result.n_samples == mem.result.n_samples
    prep = prepare(DataOptions(file=path, target=("y",), encode="onehot", drop_missing=drop))
    tt = train_test(prep, holdout=0.2, seed=0)
    labels = [make_folds(tt.X.shape[0], 4, seed=0)]
    atol, _ = _tol(tt.X, tt.y, labels)  # bound: _tol (module notes)
    # spec: relative to the K-fold errors, the bound implies the parity issue 7 asks for
    assert atol / np.min(mem.summary["cv"]["mse"]) < 1e-9
    assert_allclose(wide.summary["cv"]["mse"], mem.summary["cv"]["mse"], rtol=0, atol=atol)
    assert_allclose(wide.summary["test_mse"], mem.summary["test_mse"], rtol=0, atol=atol)


def _range_outcome(fn):
    try:
        fn()
    except InputError as exc:
        return str(exc)
    return None


@pytest.mark.parametrize("case", ["y-huge", "y-tiny", "y-ulp", "x-huge", "x-subnormal",
                                  "x-ratio"])
def test_wide_range_checks_as_in_memory(case):
    """The range checks of ``fit_path`` (paths.data.validation) in the wide engine: the same
    one-line refusal, or — for what is rescaled exactly (powers of two) — the same path
    (criteria to the Gram-route bound of the module notes)."""
    from paths import fit_path
    from paths.engines.wide import wide_path

    rng = np.random.default_rng(1)
    X = rng.standard_normal((20, 50))
    y = X[:, 0] + rng.standard_normal(20)
    if case == "y-huge":
        y = y * 1e170
    elif case == "y-tiny":
        y = y * 1e-160
    elif case == "y-ulp":
        y = np.full(20, 1.0)
        y[3] = np.nextafter(1.0, 2.0)
    elif case == "x-huge":
        X[:, 4] *= 1.5e308 / np.max(np.abs(X[:, 4]))
    elif case == "x-subnormal":
        X[:, 4] *= 1e-310
    else:
        X[:, 4] *= 1e-300
        y = y * 1e10
    mem = _range_outcome(lambda: fit_path(X, y))
    wide = _range_outcome(lambda: wide_path(X, y, block_columns=8))
    assert wide == mem
    if mem is None:
        ref, res = fit_path(X, y), wide_path(X, y, block_columns=8)
        d = ref.singular_values
        # bound: Wedin's residual bound with the Gram term (Higham 2002 Thm 20.1, 20.4)
        atol = 4 * ls_residual_bound(d[0] / d[-1], backward_eps(19, 50), gram=True) \
            * float(np.var(y))
        assert_allclose(res.train_mse, ref.train_mse, rtol=0, atol=atol)


def test_column_blocks_are_named_records():
    """The wide engine's block records are frozen dataclasses with named fields
    (no positional tuples; a rule of the house)."""
    import dataclasses

    from paths.engines.wide import ColumnBlock

    assert dataclasses.is_dataclass(ColumnBlock)
    names = [f.name for f in dataclasses.fields(ColumnBlock)]
    assert names == ["start", "stop", "z", "design", "z_test"]
    with pytest.raises(dataclasses.FrozenInstanceError):
        ColumnBlock(0, 1, np.zeros((1, 1)), None).start = 2


@pytest.mark.parametrize("solver, route", [("svd", "tsqr"), ("gram", "gram")])
def test_wide_solver_maps_to_the_column_blocked_route(tmp_path, solver, route):
    """``--solver svd`` takes the backward-stable route of wide data (QR of the column
    blocks, SVD of R), ``--solver gram`` the n x n Gram; the request is stated."""
    _files(tmp_path)
    s = _run(tmp_path, "o", [str(tmp_path / "w.parquet"), "-t", "y", "--exclude", "site",
                             "--engine", "stream", "--solver", solver])
    assert s["solver"] == f"wide-{route}"
    assert s["solver_reason"].startswith(f"requested (solver {solver})")
