"""Engine parity: ``paths explore`` gives the same errors with --engine memory, stream and dask.

The in-memory engine is the reference for the options (it is checked against
scikit-learn refits in tests/test_cv.py); here every streamed engine is
compared with it option by option, and the K-fold errors of the streamed
engines once more against scikit-learn ``Ridge`` refits directly.
Tolerances: both engines evaluate the same closed forms on factors of the
same centered design — the Gram route (eigh of X'X, Chan–Golub–LeVeque
merges) versus the thin SVD — so quantities agree to the perturbation of a
well-conditioned problem, κ² · eps · (modest constant); with κ < 10 for the
designs below that is below 1e-12, and 1e-9 relative has ample margin.
Selected penalties are minimizers of flat functions: the refined choices are
compared to 1e-5 relative in λ (Brent's ``xatol`` is 1e-7 in log λ, and the
criteria agree to 1e-12, so the minimizers agree to sqrt(1e-12 / curvature)
≈ 1e-6 or better).
"""
from __future__ import annotations

import json

import numpy as np
import pytest
from numpy.testing import assert_allclose
from sklearn.linear_model import Ridge
from typer.testing import CliRunner

from error_bounds import assert_within, backward_eps
from paths.cli import app
from paths.data.folds import holdout_mask
from paths.selection.cv import make_folds

ENGINES = ["stream", "dask"]


def _rtol():
    """bound: the module notes' kappa^2 eps (modest constant), computed: kappa of the
    centered, standardized 160 x 5 design of _write_csv (any training subset used below keeps
    at least 60 % of its rows: kappa at most doubles, hence 4 kappa^2), eps_b the backward error
    of either route (backward_eps), and a constant 10 for the criteria's amplification (GCV's
    denominator and the leverages' 1/min(1 - h) <= n / (n - p - 1) for these designs)."""
    rng = np.random.default_rng(0)
    X = rng.standard_normal((160, 5))
    Z = (X - X.mean(axis=0)) / X.std(axis=0)
    d = np.linalg.svd(Z, compute_uv=False)
    return 10 * 4 * (d[0] / d[-1]) ** 2 * backward_eps(160, 5)


RTOL = _rtol()  # bound: kappa^2 eps, computed (_rtol)


def _write_csv(path, n=160, p=5, seed=0, with_groups=True):
    rng = np.random.default_rng(seed)
    X = rng.standard_normal((n, p))
    y = X @ rng.standard_normal(p) + rng.standard_normal(n)
    ids = np.arange(1000, 1000 + n)
    grp = rng.integers(0, 9, n)
    cols = [f"x{j}" for j in range(p)]
    head = ["id", *cols, "site", "y"] if with_groups else [*cols, "y"]
    with open(path, "w") as fh:
        fh.write(",".join(head) + "\n")
        for i in range(n):
            vals = ([str(ids[i])] if with_groups else []) + [repr(float(v)) for v in X[i]]
            vals += ([f"s{grp[i]}"] if with_groups else []) + [repr(float(y[i]))]
            fh.write(",".join(vals) + "\n")
    return X, y, grp


def _run(tmp_path, name, args):
    out = tmp_path / name
    r = CliRunner().invoke(app, ["explore", *args, "--out", str(out), "--format", "svg"])
    assert r.exit_code == 0, r.output
    return json.loads((out / "summary.json").read_text())


OPTION_SETS = {
    "cv-shuffled": ["--exclude", "site", "--id", "id", "--n-folds", "5", "--seed", "0"],
    "cv-blocked": ["--exclude", "site", "--id", "id", "--n-folds", "4", "--fold-scheme",
                   "blocked"],
    "repeats": ["--exclude", "site", "--id", "id", "--n-folds", "3", "--repeats", "3",
                "--seed", "2"],
    "holdout-cv": ["--exclude", "site", "--id", "id", "--holdout", "0.25", "--seed", "4",
                   "--n-folds", "5"],
    "groups": ["--id", "id", "--groups", "site", "--n-folds", "4", "--seed", "1"],
    "groups-holdout": ["--id", "id", "--groups", "site", "--holdout", "0.2", "--seed", "6"],
    "rule-one-se": ["--exclude", "site", "--id", "id", "--n-folds", "4", "--rule", "one-se"],
    "rule-loo": ["--exclude", "site", "--id", "id", "--rule", "loo"],
}


@pytest.mark.parametrize("case", sorted(OPTION_SETS))
def test_engine_equals_memory(tmp_path, case):
    """Every fold and holdout option with a streamed engine gives the in-memory
    engine's errors (1e-9 relative, module notes) on the same rows and folds."""
    data = tmp_path / "d.csv"
    _write_csv(data)
    base = [str(data), "-t", "y", *OPTION_SETS[case]]
    mem = _run(tmp_path, "mem", base)
    for engine in ENGINES:
        if engine == "dask" and case.startswith("groups"):
            continue  # refused by the dask engine (test_dask_refuses_groups_in_one_line)
        eng = _run(tmp_path, engine, [*base, "--engine", engine, "--chunk-rows", "37"])
        assert eng["n_features"] == mem["n_features"] == 5
        assert eng["n_test"] == mem["n_test"]
        for key in ("gcv", "loo_mse", "train_mse", "test_mse"):
            if mem[key] is None:
                assert eng[key] is None
                continue
            assert_allclose(eng[key], mem[key], rtol=RTOL)
        if mem.get("cv"):
            assert eng["cv"]["repeats"] == mem["cv"]["repeats"]
            assert eng["cv"]["n_folds"] == mem["cv"]["n_folds"]
            assert_allclose(eng["cv"]["mse"], mem["cv"]["mse"], rtol=RTOL)
            # bound: the SE of K fold values each within RTOL, through the sample SD's
            # Lipschitz constant (sqrt(K / (K - 1)) of the largest fold value over the SE)
            fold_scale = np.asarray(mem["cv"]["mse"]) * np.sqrt(mem["cv"]["n_folds"])
            assert_within(eng["cv"]["se"], mem["cv"]["se"], 2 * RTOL * fold_scale)
        assert eng["reported"] == mem["reported"]
        for rule in ("gcv", "loo", "cv", "one-se", "hkb", "lw", "reml"):
            sel, got = mem["selected"].get(rule), eng["selected"].get(rule)
            if sel is None or sel.get("lambda") is None:
                continue
            # spec: refined minimizers of flat functions (module notes: Brent's xatol 1e-7 in
            # log lambda and sqrt(RTOL / curvature)); the estimate at the choice moves at
            # second order in the penalty's difference
            assert_allclose(got["lambda"], sel["lambda"], rtol=1e-5, atol=1e-12)
            if sel.get("est_source") == "cv":  # K-fold estimates at the choice: same folds
                assert_allclose(got["est_mse"], sel["est_mse"], rtol=1e-6)


@pytest.mark.parametrize("engine", ENGINES)
def test_engine_kfold_with_holdout_against_sklearn_refits(tmp_path, engine):
    """K-fold CV of a streamed engine after a seeded holdout equals scikit-learn
    ``Ridge`` refitted on each training part (scaling of all training rows held
    fixed, the documented convention), with the folds of ``make_folds`` on the
    training rows: within the refits' bound (error_bounds.refit_loo_rtol)."""
    data = tmp_path / "d.csv"
    X, y, _ = _write_csv(data, with_groups=False)
    s = _run(tmp_path, "eng", [str(data), "-t", "y", "--holdout", "0.2", "--seed", "3",
                               "--n-folds", "4", "--engine", engine, "--chunk-rows", "29"])
    held = holdout_mask(np.arange(X.shape[0]), X.shape[0], 0.2, seed=3)
    Xt, yt = X[~held], y[~held]
    lab = make_folds(Xt.shape[0], 4, seed=3)
    Z = (Xt - Xt.mean(axis=0)) / Xt.std(axis=0)
    lams = np.asarray(s["lambdas"])
    for i in (0, len(lams) // 2, len(lams) - 1):
        sq = 0.0
        for f in range(4):
            te = lab == f
            fit = Ridge(alpha=lams[i], solver="svd").fit(Z[~te], yt[~te])
            sq += np.sum(np.square(yt[te] - fit.predict(Z[te])))
        # bound: refit_loo_rtol over the folds, the Gram route's extra kappa eps_b as a
        # backward error, twice (the engine and the refits)
        from error_bounds import refit_loo_rtol
        extra = np.linalg.cond(Z - Z.mean(axis=0)) * backward_eps(*Z.shape)
        tol = 2 * refit_loo_rtol(Z, yt, lams[i], labels=lab, extra_eps=extra)
        assert_allclose(s["cv"]["mse"][i], sq / Xt.shape[0], rtol=tol)


def test_dask_refuses_groups_in_one_line(tmp_path):
    """What the dask engine cannot do is refused in one line with the alternative."""
    data = tmp_path / "d.csv"
    _write_csv(data)
    r = CliRunner().invoke(app, ["explore", str(data), "-t", "y", "--id", "id", "--groups",
                                 "site", "--engine", "dask", "--out", str(tmp_path / "o")])
    assert r.exit_code == 2, r.output
    assert "use --engine stream" in r.output and "Traceback" not in r.output


@pytest.mark.parametrize("flags, want", [
    (["--encode", "onehot"], "encode the columns beforehand"),
    (["--drop-missing", "rows"], "remove the missing values beforehand"),
    (["--n-folds", "3", "--cv-scaling", "per-fold"], "use --cv-scaling global"),
    (["--solver", "gram"], "the streamed engines factor the p x p moments"),
])
def test_engine_refusals_say_why(tmp_path, flags, want):
    """Options a streamed engine cannot honour: exit 2, one line, the reason and the fix
    (a fact of the trade, no source: a refusal names the cause and the alternative)."""
    data = tmp_path / "d.csv"
    _write_csv(data, with_groups=False)
    r = CliRunner().invoke(app, ["explore", str(data), "-t", "y", "--engine", "stream", *flags,
                                 "--out", str(tmp_path / "o")])
    assert r.exit_code == 2, r.output
    assert want in r.output and "--engine memory" in r.output, r.output
    assert len(r.output.strip().splitlines()) == 1, r.output
