"""Issue 3 (speed): exact 10-fold CV over 200 penalties, against the SVD floor and refits.

Shape (400, 4000) (``--quick``: (200, 2000)), seeded Gaussian data (synthetic),
the same 200 penalties for everyone (the package's default grid for that design,
``standardize=False`` so that every competitor solves the same problem), the
same 10 shuffled folds:

- the floor: a bare LAPACK ``gesdd`` thin SVD of the centered design;
- ``cross_validate`` end to end (``fit_path`` + the exact fold solves), and the
  fold solves alone given the path;
- ``cross_validate(method="refit")``: one factorization per fold (the fallback);
- scikit-learn ``cross_val_score(Ridge(alpha), cv=KFold)`` looped over the grid,
  timed on every ``step``-th penalty and extrapolated linearly to the grid.

Ratios (per BLAS thread setting): ``CV / bare SVD`` (target ≤ 3) and
``sklearn loop / CV`` (target ≥ 20), both with the end-to-end CV time.
Also recorded: the cost model's predicted route and a fresh
:func:`paths.selection.cv.measure_cost_model` (seconds per flop of both kernels).
"""
from __future__ import annotations

import numpy as np
import scipy.linalg as sla

try:
    from . import harness as H
except ImportError:  # run as a script / imported from the benchmarks folder
    import harness as H

BENCH = "cv"
N_LAMBDAS = 200
N_FOLDS = 10
SVD_TARGET = "<= 3"
LOOP_TARGET = ">= 20"


def _data(n: int, p: int, seed: int = 0):
    """Synthetic Gaussian design and a response with 10 active features plus noise."""
    rng = np.random.default_rng(seed)
    X = rng.standard_normal((n, p))
    beta = np.zeros(p)
    beta[:10] = 1.0
    return X, X @ beta + rng.standard_normal(n)


def _bench(n: int, p: int, quick: bool) -> list[dict]:
    from sklearn.linear_model import Ridge
    from sklearn.model_selection import KFold, cross_val_score

    from paths import fit_path
    from paths.selection.cv import cross_validate, make_folds, measure_cost_model

    X, y = _data(n, p)
    case = f"{n}x{p}"
    path0 = fit_path(X, y, n_lambdas=N_LAMBDAS, standardize=False)
    grid = path0.lambdas
    labels = make_folds(n, N_FOLDS, seed=0)
    splits = [(np.flatnonzero(labels != f), np.flatnonzero(labels == f)) for f in range(N_FOLDS)]
    repeats = 3 if quick else 5
    step = 50 if quick else 40  # sklearn loop: every step-th penalty, extrapolated
    rows = []
    for threads in H.THREAD_SETTINGS:
        with H.blas_threads(threads):
            Xc = X - X.mean(axis=0)
            t = {}
            t["bare gesdd SVD"] = H.measure(
                lambda: sla.svd(Xc, full_matrices=False, lapack_driver="gesdd",
                                check_finite=False), repeats)
            t["cross_validate (fit_path + folds)"] = H.measure(
                lambda: cross_validate(X, y, grid, n_folds=N_FOLDS, standardize=False,
                                       method="exact"), repeats)
            t["fold solves given the path"] = H.measure(
                lambda: cross_validate(X, y, grid, n_folds=N_FOLDS, path=path0,
                                       method="exact"), repeats)
            t["cross_validate refit route"] = H.measure(
                lambda: cross_validate(X, y, grid, n_folds=N_FOLDS, standardize=False,
                                       method="refit"), max(2, repeats // 2), warmup=0)
            sub = grid[::step]

            def loop():
                for lam in sub:
                    cross_val_score(Ridge(alpha=lam), X, y, cv=splits,
                                    scoring="neg_mean_squared_error")

            m = H.measure(loop, 1, warmup=0)
            scale = grid.size / sub.size
            t["sklearn cross_val_score loop"] = {k: (v * scale if k in ("median", "min", "max")
                                                     else v) for k, v in m.items()}
            for name, m in t.items():
                rows.append(H.row(BENCH, case, name, m["median"], "s", threads=threads,
                                  kind="time", min=m["min"], max=m["max"], repeats=m["repeats"],
                                  note=(f"timed on {sub.size} of {grid.size} penalties, "
                                        "extrapolated" if "sklearn" in name else "")))
            med = {name: m["median"] for name, m in t.items()}
            cv = med["cross_validate (fit_path + folds)"]
            for name, value, target in (
                    ("CV / bare SVD", cv / med["bare gesdd SVD"], SVD_TARGET),
                    ("sklearn loop / CV", med["sklearn cross_val_score loop"] / cv, LOOP_TARGET),
                    ("refit route / exact CV", med["cross_validate refit route"] / cv, None)):
                rows.append(H.row(BENCH, case, name, value, "×", threads=threads, kind="ratio",
                                  target=target, ok=H.check(value, target)))
            # sanity: the timed CV equals the sklearn scores on the timed penalties
            res = cross_validate(X, y, sub, n_folds=N_FOLDS, standardize=False, method="exact")
            ref = np.array([-np.mean(cross_val_score(Ridge(alpha=lam), X, y, cv=splits,
                                                     scoring="neg_mean_squared_error"))
                            for lam in sub[:2]])
            fold_mean = res.fold_mse[0][:, :2].mean(axis=0)
            rows.append(H.row(BENCH, case, "max rel. diff vs sklearn (2 penalties)",
                              float(np.max(np.abs(fold_mean - ref) / ref)), "", threads=threads,
                              kind="ratio", note="cross_val_score averages the fold MSEs"))
    cm = measure_cost_model()
    auto = cross_validate(X, y, grid, n_folds=N_FOLDS, path=path0)
    rows.append(H.row(BENCH, case, "cost model: exact s/flop", cm.exact_rate, "s/flop",
                      kind="ratio", note=f"auto route: {auto.method_reason}"))
    rows.append(H.row(BENCH, case, "cost model: refit s/flop", cm.refit_rate, "s/flop",
                      kind="ratio"))
    return rows


def run(quick: bool = False) -> list[dict]:
    """10-fold CV over 200 penalties on (400, 4000) ((200, 2000) with ``quick``)."""
    return _bench(200, 2000, True) if quick else _bench(400, 4000, False)


if __name__ == "__main__":  # python benchmarks/bench_cv.py [--quick]
    import sys

    for r in run("--quick" in sys.argv):
        print(f"{r['case']:>10} {str(r['threads']):>4}  {r['name']:<40} {r['value']:.4g} "
              f"{r['unit']} {r['target'] or ''} {'' if r['ok'] is None else r['ok']} {r['note']}")
