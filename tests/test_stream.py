"""Streaming engine (paths/stream.py, paths/chunks.py) against outside references.

References named per test: numpy (covariance, lstsq), scikit-learn ``Ridge``
refits (alpha = lambda, same objective), NIST StRD certified values, the
Chan-Golub-LeVeque merge formula (Chan, Golub & LeVeque 1983, *Amer. Statist.*
37, 242-247), and the in-memory engine ``fit_path`` (whose own tests check it
against these references).  All data are synthetic, generated here with seeds.
"""
from __future__ import annotations

import csv
import json
import warnings

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from numpy.testing import assert_allclose
from sklearn.linear_model import Ridge
from typer.testing import CliRunner

from error_bounds import (RecordView, TargetView, backward_eps, check_same_min_norm,
                          check_same_path, gamma, gram_atol,
                          grid_rtol, refit_fold_rtol, refit_loo_rtol, reorder_bound, ridge_bounds)
from paths import InputError, fit_path
from paths.cli import app
from paths.engines.stream import (PairwiseMerger, chunk_moments, merge_moments, stream_path)

# numerical reference checks against outside references: CI reruns them under a
# forced OpenBLAS kernel (.ci/run)
pytestmark = pytest.mark.reference

FIELDS = ["lambdas", "coef", "intercept", "df", "train_mse", "gcv", "loo_mse", "test_mse",
          "singular_values"]
MN_FIELDS = ["coef", "intercept", "train_mse", "gcv", "loo_mse", "test_mse"]


def problem(n=3000, p=12, *, t=None, seed=0):
    """Synthetic, well-conditioned: shifted, unequally scaled Gaussian columns."""
    rng = np.random.default_rng(seed)
    X = rng.standard_normal((n, p)) * np.geomspace(0.3, 4.0, p) + rng.uniform(-5, 5, p)
    shape = (p,) if t is None else (p, t)
    y = 2.0 + X @ rng.standard_normal(shape) + rng.standard_normal((n,) if t is None else (n, t))
    return X, y


def relerr(a, b):
    a, b = np.asarray(a, float), np.asarray(b, float)
    return float(np.max(np.abs(a - b)) / max(np.max(np.abs(b)), 1e-300))




@pytest.mark.parametrize("accurate", [False, True])
def test_pairwise_merge_equals_numpy_covariance(accurate):
    """Merged chunk moments equal numpy's mean and (n-1)*np.cov of all rows
    (Chan, Golub & LeVeque update; the accurate route's R^T R is the same
    matrix): the mean within 2 gamma_n of mean|w| (n-term sums, Higham 2002 section 3.1),
    the centered cross products within gram_atol (centering and inner products, relative to
    the raw columns' size: the data sit at 100 +- 3)."""
    rng = np.random.default_rng(1)
    W = rng.standard_normal((1000, 6)) * 3 + 100.0
    merger = PairwiseMerger()
    for s in range(0, 1000, 97):  # uneven chunks, odd count: exercises the pairwise tree
        merger.add(chunk_moments(W[s:s + 97], accurate=accurate))
    m = merger.result()
    assert m.n == 1000
    # bound: docstring
    assert_allclose(m.mean, W.mean(axis=0), rtol=0, atol=2 * gamma(1000) * np.abs(W).mean())
    tol = gram_atol(W).max()
    assert_allclose(m.gram(), 999 * np.cov(W, rowvar=False), rtol=0, atol=tol)
    two = merge_moments(chunk_moments(W[:10], accurate=accurate),
                        chunk_moments(W[10:], accurate=accurate))
    assert_allclose(two.gram(), 999 * np.cov(W, rowvar=False), rtol=0, atol=tol)


CASES = [
    dict(accurate=False, chunk_rows=700),
    dict(accurate=True, chunk_rows=700),
    dict(accurate=False, chunk_rows=10_000),
    dict(accurate=False, chunk_rows=500, standardize=False),
    dict(accurate=True, chunk_rows=333, fit_intercept=False),
    dict(accurate=False, chunk_rows=1000, t=3),
]


@pytest.mark.parametrize("case", CASES, ids=lambda c: "-".join(f"{k}={v}" for k, v in c.items()))
def test_equals_in_memory_engine(case):
    """Issue 7 contract: the streamed path equals the in-memory ``fit_path`` on
    data that fit in memory, every field, within the Gram route's bounds (check_same_path)."""
    case = dict(case)
    t = case.pop("t", None)
    X, y = problem(t=t)
    Xt, yt = problem(n=400, t=t, seed=5)
    kw = {k: case[k] for k in ("fit_intercept", "standardize") if k in case}
    ref = fit_path(X, y, X_test=Xt, y_test=yt, **kw)
    res = stream_path(X, y=y, test=Xt, y_test=yt, **case)
    # bound: check_same_path per target; the min-norm fit as ridge_bounds at 0
    cols = [None] if t is None else range(t)
    for j in cols:
        pick = (lambda a: a) if j is None else (lambda a, j=j: np.asarray(a)[..., j])
        yj, ytj = pick(y), pick(yt)
        r_j, f_j = TargetView(res, j), TargetView(ref, j)
        check_same_path(r_j, f_j, X, yj, FIELDS, Xt=Xt, yt=ytj, **kw)
        check_same_min_norm(r_j, f_j, X, yj, Xt=Xt, yt=ytj, **kw)
        assert_allclose(r_j.predict(Xt[:5], 3.0), f_j.predict(Xt[:5], 3.0), rtol=0,
                        atol=ridge_bounds(X, yj, 3.0, gram=True, **kw).predict_atol(Xt[:5]))
    assert res.rank == ref.rank and res.n_test == ref.n_test
    assert res.index_min("gcv") == ref.index_min("gcv")


def test_coefficients_against_sklearn_ridge():
    """Coefficients and intercepts at several penalties equal scikit-learn
    ``Ridge(alpha=lambda)`` (same objective, unscaled columns): within ridge_bounds, the
    streamed Gram route's term plus Ridge's SVD."""
    X, y = problem(n=2000, p=8, seed=2)
    lams = np.array([1e3, 10.0, 0.1])
    res = stream_path(X, lams, y=y, standardize=False, chunk_rows=300, loo=False)
    assert res.loo_mse is None
    for i, lam in enumerate(lams):
        sk = Ridge(alpha=lam, solver="svd").fit(X, y)
        # bound: docstring
        bg = ridge_bounds(X, y, lam, standardize=False, solvers=1, gram=True)
        bs = ridge_bounds(X, y, lam, standardize=False, solvers=1)
        assert np.linalg.norm(res.coef[i] - sk.coef_) <= (bg.coef + bs.coef) * bs.coef_norm
        assert_allclose(res.intercept[i], sk.intercept_, rtol=0, atol=bg.intercept + bs.intercept)


def test_loo_against_brute_force_refits():
    """Exact leave-one-out from the second pass equals n explicit refits
    (numpy ``lstsq`` on the augmented ridge system with the scaling of all rows
    fixed and an unpenalized intercept): within the refits' bound (refit_loo_rtol), the
    streamed Gram route's extra kappa eps_b acting as a backward error kappa times larger."""
    X, y = problem(n=60, p=4, seed=3)
    lams = np.array([50.0, 1.0, 0.0])
    res = stream_path(X, lams, y=y, chunk_rows=7)
    s = X.std(axis=0)
    Z = X / s
    n, p = Z.shape
    for i, lam in enumerate(lams):
        errs = []
        for k in range(n):
            keep = np.arange(n) != k
            A = np.hstack([np.ones((n - 1, 1)), Z[keep]])
            A = np.vstack([A, np.hstack([np.zeros((p, 1)), np.sqrt(lam) * np.eye(p)])])
            b = np.concatenate([y[keep], np.zeros(p)])
            coef = np.linalg.lstsq(A, b, rcond=None)[0]
            errs.append(y[k] - coef[0] - Z[k] @ coef[1:])
        # bound: docstring
        sv = np.linalg.svd(Z - Z.mean(axis=0), compute_uv=False)
        extra = sv[0] / sv[-1] * backward_eps(n, p)
        tol = refit_loo_rtol(Z, y, lam, extra_eps=extra) + refit_loo_rtol(Z, y, lam)
        assert_allclose(res.loo_mse[i], np.mean(np.square(errs)), rtol=tol)
    # bound: the same sums, possibly in another order (reorder_bound)
    assert_allclose(res.min_norm.loo_mse, res.loo_mse[2], rtol=reorder_bound(n, ops=4))


@pytest.mark.parametrize("cv_seed", [None, 7])
def test_kfold_against_sklearn_refits(cv_seed):
    """K-fold CV from the hat diagonals (Woodbury form of (I - H_ff)^-1 e_f,
    Liland, Skogholt & Indahl 2024) equals scikit-learn ``Ridge`` refitted on
    each training part with the scaling of all rows fixed (the documented
    convention): blocked and seeded-shuffle folds, within the refits' bounds (refit_fold_rtol;
    the streamed Gram route's extra kappa eps_b as a backward error); the SE through the
    sample SD's Lipschitz constant 1/sqrt(K - 1)."""
    X, y = problem(n=300, p=6, seed=4)
    lams = np.array([100.0, 3.0, 0.0])
    res = stream_path(X, lams, y=y, chunk_rows=41, n_folds=5,
                      fold_scheme="blocked" if cv_seed is None else "shuffled",
                      seed=cv_seed or 0)
    hp_folds = None
    from paths.engines.stream import HatPass, factor_moments  # fold labels as the engine assigns them
    from paths.engines.stream import PairwiseMerger as PM
    m = PM()
    m.add(chunk_moments(np.column_stack([X, y])))
    hp = HatPass(factor_moments(m.result(), 6), lams, n_folds=5, fold_seed=cv_seed)
    hp_folds = hp.fold_of(0, 300)
    assert set(hp_folds.tolist()) == set(range(5))
    Z = X / X.std(axis=0)
    for i, lam in enumerate(lams):
        sq = 0.0
        per_fold = []
        for f in range(5):
            te = hp_folds == f
            sk = Ridge(alpha=lam, solver="svd").fit(Z[~te], y[~te])
            e = np.square(y[te] - sk.predict(Z[te]))
            sq += e.sum()
            per_fold.append(e.mean())
        # bound: docstring
        sv = np.linalg.svd(Z - Z.mean(axis=0), compute_uv=False)
        extra = sv[0] / sv[-1] * backward_eps(300, 6)
        tf = (refit_fold_rtol(Z, y, lam, hp_folds, extra_eps=extra)
              + refit_fold_rtol(Z, y, lam, hp_folds))
        pf = np.array(per_fold)
        sizes = np.bincount(hp_folds)
        assert_allclose(res.cv_mse[i], sq / 300, rtol=0,
                        atol=np.sum(sizes * tf * pf) / 300 + 2 * gamma(300) * sq / 300)
        se_tol = (np.linalg.norm(tf * pf) / np.sqrt(4) + gamma(8) * np.std(pf, ddof=1)) / np.sqrt(5)
        assert_allclose(res.cv_se[i], np.std(per_fold, ddof=1) / np.sqrt(5), rtol=0, atol=se_tol)
    assert res.n_folds == 5


def test_parquet_and_csv_sources_equal_arrays(tmp_path):
    """Reading Parquet (several row groups, and a folder of parts) and CSV in
    chunks gives the array result (pyarrow / pandas readers as the reference
    for the bytes): within the Gram route's bounds (check_same_path; the bytes are read
    exactly, only the chunking of the arithmetic may differ)."""
    X, y = problem(n=2500, p=5, seed=6)
    names = [f"f{j}" for j in range(5)]
    table = pa.table({**{nm: X[:, j] for j, nm in enumerate(names)}, "resp": y})
    pq.write_table(table, tmp_path / "d.parquet", row_group_size=600)
    parts = tmp_path / "parts"
    parts.mkdir()
    pq.write_table(table.slice(0, 1000), parts / "a.parquet")
    pq.write_table(table.slice(1000), parts / "b.parquet")
    with open(tmp_path / "d.csv", "w", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(names + ["resp"])
        w.writerows([[repr(float(v)) for v in row] for row in np.column_stack([X, y])])
    ref = stream_path(X, y=y, chunk_rows=512)
    for src in (tmp_path / "d.parquet", parts, tmp_path / "d.csv"):
        res = stream_path(src, target="resp", chunk_rows=512)
        assert res.feature_names == names
        check_same_path(res, ref, X, y, ("coef", "gcv", "loo_mse", "singular_values"))


NIST_SETS = ["Norris", "Longley", "Filip", "Wampler1", "Wampler3", "Wampler4", "Wampler5",
             "Pontius"]


@pytest.mark.reference
@pytest.mark.parametrize("chunk_rows", [5, 1000])
@pytest.mark.parametrize("name", NIST_SETS)
def test_accurate_route_reaches_nist_digits(name, chunk_rows):
    """Chunked TSQR (``accurate=True``) on the NIST StRD designs, including the
    ill-conditioned Filip (degree-10 polynomial) and Wampler sets, chunks of 5
    rows (many merges with the centering row) or one chunk: the certified OLS
    coefficients within the least-squares forward error bound of a backward-stable
    solver (Higham 2002, Theorem 20.1; TSQR is a Householder QR of stacked
    triangles, backward stable like it: Demmel, Grigori, Hoemmen & Langou 2012,
    SIAM J. Sci. Comput. 34), the bound of tests/test_nist.py."""
    from test_nist import bounds, coef_error, load

    X, y, meta = load(name)
    icpt = meta["model"]["intercept"]
    res = stream_path(X, [0.0], y=y, fit_intercept=icpt, accurate=True, chunk_rows=chunk_rows)
    assert res.rank == X.shape[1]
    coef_rel, b0_abs, *_ = bounds(X, y, meta, res)
    err, err0 = coef_error(res, meta)
    assert err <= coef_rel, (name, err, coef_rel)
    assert err0 <= b0_abs, (name, err0, b0_abs)


@pytest.mark.parametrize("name", ["Filip", "Wampler1", "Longley"])
def test_gram_route_warns_or_reports_rank_when_it_loses_digits(name):
    """The streamed Gram route squares the condition number (Golub & Van Loan,
    *Matrix Computations*, sec. 5.3.7): on NIST designs it either stays within
    the forward error bound of a backward-stable solver (Higham 2002, Theorem
    20.1; the bound of tests/test_nist.py), or warns and recommends accurate=True,
    or reports the rank deficiency -- never a silent wrong answer."""
    from test_nist import bounds, coef_error, load

    X, y, meta = load(name)
    icpt = meta["model"]["intercept"]
    with warnings.catch_warnings(record=True) as rec:
        warnings.simplefilter("always")
        res = stream_path(X, [0.0], y=y, fit_intercept=icpt, chunk_rows=5)
    warned = any("accurate=True" in str(w.message) for w in rec)
    coef_rel, *_ = bounds(X, y, meta, res)
    ok = res.rank == X.shape[1] and coef_error(res, meta)[0] <= coef_rel
    assert ok or warned or res.rank < X.shape[1]
    if not ok:
        assert "accurate=True recommended" in res.solver_reason


def test_progress_names_both_passes():
    """The progress callback reports the moments pass and the second pass for
    the hat diagonals (issue 7: 'say so in the progress output'); row counts
    reach n (common practice, no source)."""
    X, y = problem(n=1000, p=3)
    seen = []
    res = stream_path(X, y=y, chunk_rows=300, progress=lambda lab, done, tot: seen.append((lab, done, tot)))
    labels = [s[0] for s in seen]
    assert any("pass 1/2" in lab for lab in labels)
    assert any("hat diagonals" in lab and "leave-one-out" in lab for lab in labels)
    assert seen[-1][1] == 1000 and seen[-1][2] == 1000
    assert [p.label for p in res.passes][1].startswith("pass 2/2")
    assert all(p.rows == 1000 for p in res.passes)


# --------------------------------------------------------------------------- bad input
def test_parquet_parts_with_different_schema(tmp_path):
    """A folder of Parquet parts whose schema changes (a column's type) is
    refused with one line naming the part and the column (issue 7)."""
    pq.write_table(pa.table({"a": [1.0, 2.0, 3.0], "y": [1.0, 2.0, 4.0]}), tmp_path / "p0.parquet")
    pq.write_table(pa.table({"a": ["x", "y"], "y": [1.0, 2.0]}), tmp_path / "p1.parquet")
    with pytest.raises(InputError, match=r"p1\.parquet: schema differs .*column 'a'") as ei:
        stream_path(tmp_path, target="y")
    assert "\n" not in str(ei.value)


def test_csv_non_numeric_value_reports_row_range(tmp_path):
    """A non-numeric value deep in a CSV (in the third chunk) is reported with
    its column, value, chunk row range and data row (issue 7)."""
    f = tmp_path / "d.csv"
    rows = [[i, 2 * i + (i % 3)] for i in range(25)]
    rows[21][0] = "n/a?"
    f.write_text("a,y\n" + "\n".join(f"{r[0]},{r[1]}" for r in rows) + "\n")
    with pytest.raises(InputError, match=r"rows 21-25: column 'a' has a non-numeric value "
                                         r"'n/a\?' on line 23"):
        stream_path(f, target="y", chunk_rows=10)


def test_parquet_null_reports_row_range(tmp_path):
    """A null in the second row group of a Parquet file is reported with the
    row range read (that row group) and its data row (issue 7)."""
    a = pa.array([1.0, 2.0, 3.0, 4.0, None, 6.0])
    pq.write_table(pa.table({"a": a, "y": [1.0, 2.0, 3.0, 4.0, 5.0, 7.0]}), tmp_path / "n.parquet",
                   row_group_size=3)
    with pytest.raises(InputError, match=r"rows 4-6: column 'a' has 1 null .*data row 5"):
        stream_path(tmp_path / "n.parquet", target="y", chunk_rows=2)


@pytest.mark.parametrize("kw, msg", [
    (dict(n_folds=1), "n_folds must be an integer >= 2"),
    (dict(chunk_rows=0), "chunk_rows must be a positive integer"),
    (dict(target="nope"), "target column 'nope' not found"),
])
def test_bad_arguments(tmp_path, kw, msg):
    """Bad options raise a one-line InputError naming the valid range (issue 7)."""
    pq.write_table(pa.table({"a": [1.0, 2.0, 3.0], "y": [1.0, 2.0, 4.0]}), tmp_path / "d.parquet")
    kw = {"target": "y", **kw}
    with pytest.raises(InputError, match=msg):
        stream_path(tmp_path / "d.parquet", **kw)


def test_constant_target_refused():
    """A constant response is refused, as by the in-memory engine."""
    X, _ = problem(n=100, p=3)
    with pytest.raises(InputError, match="constant"):
        stream_path(X, y=np.ones(100))


# --------------------------------------------------------------------------- CLI
def _parquet(path, X, y, **kw):
    pq.write_table(pa.table({**{f"f{j}": X[:, j] for j in range(X.shape[1])}, "y": y}), path, **kw)


def test_cli_stream_equals_memory_engine(tmp_path):
    """``paths explore DATA --engine stream`` writes the numbers of the default
    in-memory engine (path.csv / summary.json, 1e-10 relative), prints both
    passes with their throughput, and records the engine in summary.json."""
    X, y = problem(n=4000, p=4, seed=8)
    Xt, yt = problem(n=300, p=4, seed=9)
    _parquet(tmp_path / "d.parquet", X, y, row_group_size=1000)
    _parquet(tmp_path / "t.parquet", Xt, yt)
    runner = CliRunner()
    base = ["explore", str(tmp_path / "d.parquet"), "--target", "y", "--test",
            str(tmp_path / "t.parquet")]
    r1 = runner.invoke(app, base + ["--out", str(tmp_path / "mem")])
    r2 = runner.invoke(app, base + ["--engine", "stream", "--chunk-rows", "900",
                                    "--out", str(tmp_path / "str")])
    assert r1.exit_code == 0, r1.output
    assert r2.exit_code == 0, r2.output
    assert "hat diagonals" in r2.output and "rows/s" in r2.output
    a = json.loads((tmp_path / "mem" / "summary.json").read_text())
    b = json.loads((tmp_path / "str" / "summary.json").read_text())
    # bound: check_same_path on the records (JSON floats round-trip)
    check_same_path(RecordView(b), RecordView(a), X, y, ("lambdas", "gcv", "loo_mse", "df"))
    g = grid_rtol(X, y, a["lambdas"])
    for i, lam in enumerate(a["lambdas"]):
        bd = ridge_bounds(X, y, lam, gram=True)
        assert_allclose(b["coef_norm"][i], a["coef_norm"][i], rtol=bd.coef + g + 2 * gamma(4))
        e = 2 * bd.predict_atol(Xt) / np.sqrt(a["test_mse"][i])
        assert_allclose(b["test_mse"][i], a["test_mse"][i],
                        rtol=e + e * e / 4 + 2 * gamma(300) + 4 * g)
    assert b["engine"]["engine"] == "stream" and len(b["engine"]["passes"]) == 3
    ca = np.loadtxt(tmp_path / "mem" / "coefficients.csv", delimiter=",", skiprows=1)
    cb = np.loadtxt(tmp_path / "str" / "coefficients.csv", delimiter=",", skiprows=1)
    # bound: per row (lambda, intercept, coefficients) as in check_same_path
    assert_allclose(cb[:, 0], ca[:, 0], rtol=g)
    for row_b, row_a in zip(cb, ca):
        bd = ridge_bounds(X, y, row_a[0], gram=True)
        assert_allclose(row_b[1], row_a[1], rtol=g, atol=bd.intercept)
        assert np.linalg.norm(row_b[2:] - row_a[2:]) <= (bd.coef + g) * bd.coef_norm


def test_cli_wide_parquet_routes_to_column_blocks(tmp_path):
    """A Parquet file with more feature columns than rows goes to the wide
    engine under --engine stream; the GCV curve equals the in-memory engine's
    (1e-9 relative)."""
    rng = np.random.default_rng(10)
    X = rng.standard_normal((30, 400))
    y = X[:, 0] + rng.standard_normal(30)
    _parquet(tmp_path / "w.parquet", X, y)
    r = CliRunner().invoke(app, ["explore", str(tmp_path / "w.parquet"), "-t", "y", "--engine",
                                 "stream", "--chunk-rows", "64", "--out", str(tmp_path / "o")])
    assert r.exit_code == 0, r.output
    s = json.loads((tmp_path / "o" / "summary.json").read_text())
    assert s["engine"]["engine"] == "wide" and s["solver"] == "wide-gram"
    # bound: the wide Gram route against the in-memory SVD (check_same_path)
    check_same_path(RecordView(s), fit_path(X, y), X, y, ("lambdas", "gcv"))


@pytest.mark.parametrize("case", ["non-numeric", "schema", "rank", "holdout"])
def test_cli_bad_input_exit_2(tmp_path, case):
    """Bad input through the CLI: one line on stderr naming the problem, exit
    status 2, no traceback (issue 7 bad-input list)."""
    args = ["explore"]
    if case == "non-numeric":
        f = tmp_path / "d.csv"
        f.write_text("a,y\n" + "\n".join(f"{i},{i % 7}" for i in range(30)) + "\n7x,1\n")
        args += [str(f), "-t", "y", "--engine", "stream", "--chunk-rows", "8"]
        want = "rows 25-31: column 'a' has a non-numeric value '7x' on line 32"
    elif case == "schema":
        pq.write_table(pa.table({"a": [1.0, 2.0, 3.0], "y": [1.0, 2.0, 4.0]}), tmp_path / "p0.parquet")
        pq.write_table(pa.table({"a": [1, 2], "y": [1.0, 2.0]}), tmp_path / "p1.parquet")
        args += [str(tmp_path), "-t", "y", "--engine", "stream"]
        want = "schema differs"
    elif case == "rank":
        X, y = problem(n=50, p=5)
        _parquet(tmp_path / "d.parquet", X, y)
        args += [str(tmp_path / "d.parquet"), "-t", "y", "--engine", "stream", "--rank", "6"]
        want = "--rank must be an integer in [1, 5]"
    else:
        X, y = problem(n=50, p=5)
        _parquet(tmp_path / "d.parquet", X, y)
        args += [str(tmp_path / "d.parquet"), "-t", "y", "--engine", "stream", "--unpenalized",
                 "x0"]
        want = "--unpenalized is not available with --engine stream (its one-pass moments"
    r = CliRunner().invoke(app, args + ["--out", str(tmp_path / "out")])
    assert r.exit_code == 2, r.output
    assert want in r.output
    assert "Traceback" not in r.output


@pytest.mark.parametrize("case, match", [
    ("subnormal feature", r"column .?x?2.? .*rescale"),
    ("y one ulp", r"y is constant up to rounding"),
    ("y*1e170", r"y spans .*rescale it"),
])
def test_range_checks_as_in_memory(case, match):
    """Issue 11 item 6: the streaming engine applies the in-memory range checks
    (paths.data.validation) to its pass-1 bounds; a subnormal feature (IEEE 754: its
    square underflows to 0 in the accumulated cross products) is refused in one line
    rather than silently dropped as constant."""
    X, y = problem(n=100, p=3)
    if case == "subnormal feature":
        X = X.copy()
        X[:, 2] *= 1e-310
    elif case == "y one ulp":
        y = np.where(np.arange(100) % 2 == 0, 1.0, np.nextafter(1.0, 2.0))
    else:
        y = y * 1e170
    with pytest.raises(InputError, match=match) as info:
        stream_path(X, y=y)
    assert "\n" not in str(info.value)
