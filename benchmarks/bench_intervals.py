"""Issue 14 (speed): prediction intervals and the REML profile against ``fit_path``.

Shape (1000, 5000) with 10 000 new rows (``--quick``: (300, 1500) with 3000),
seeded Gaussian data (synthetic), 100 penalties on the default grid:

- ``fit_path`` on the training rows (the reference time);
- ``prediction_intervals`` jackknife+ (and CV+, split) for all new rows at one
  penalty, given the path; target ``jackknife+ / fit_path <= 2``;
- ``RidgePath.predict`` for the same rows: the projection of the new rows onto
  the right singular vectors, O(m p r), which every interval method (and any
  prediction) pays; ``jackknife+ / predict`` shows what the intervals add;
- the REML profile on a 200-penalty grid (``reml_loglik``), and the whole REML
  estimate (search + likelihood-ratio interval); target
  ``REML grid / fit_path <= 0.05``.
"""
from __future__ import annotations

import numpy as np

try:
    from . import harness as H
except ImportError:  # run as a script / imported from the benchmarks folder
    import harness as H

BENCH = "intervals"
IV_TARGET = "<= 2"
REML_TARGET = "<= 0.05"


def _data(n: int, p: int, m: int, seed: int = 0):
    """Synthetic Gaussian design, 10 active features plus noise, and m new rows."""
    rng = np.random.default_rng(seed)
    X = rng.standard_normal((n + m, p))
    beta = np.zeros(p)
    beta[:10] = 1.0
    y = X @ beta + rng.standard_normal(n + m)
    return X[:n], y[:n], X[n:]


def _bench(n: int, p: int, m: int, quick: bool) -> list[dict]:
    from paths import fit_path, prediction_intervals
    from paths.selection.reml import reml_estimate, reml_loglik

    X, y, Xn = _data(n, p, m)
    case = f"{n}x{p}, {m} new rows"
    repeats = 3
    rows = []
    for threads in H.THREAD_SETTINGS:
        with H.blas_threads(threads):
            path = fit_path(X, y)
            lam = float(path.lambdas[path.index_min("gcv")])
            grid = np.geomspace(path.lambdas.min(), path.lambdas.max(), 200)
            t = {
                "fit_path": H.measure(lambda: fit_path(X, y), repeats),
                "jackknife+": H.measure(lambda: prediction_intervals(path, Xn, lam), repeats),
                "cv+ (10 folds)": H.measure(
                    lambda: prediction_intervals(path, Xn, lam, method="cv+"), repeats),
                "split": H.measure(
                    lambda: prediction_intervals(path, Xn, lam, method="split"), repeats),
                "predict": H.measure(lambda: path.predict(Xn, lam), repeats),
                "REML profile, 200 penalties": H.measure(lambda: reml_loglik(path, grid),
                                                         repeats),
                "REML estimate (search + interval)": H.measure(lambda: reml_estimate(path),
                                                               repeats),
            }
            for name, r in t.items():
                rows.append(H.row(BENCH, case, name, r["median"], "s", threads=threads,
                                  kind="time", min=r["min"], max=r["max"], repeats=r["repeats"]))
            med = {name: r["median"] for name, r in t.items()}
            fit = med["fit_path"]
            for name, value, target in (
                    ("jackknife+ / fit_path", med["jackknife+"] / fit, IV_TARGET),
                    ("cv+ / fit_path", med["cv+ (10 folds)"] / fit, None),
                    ("split / fit_path", med["split"] / fit, None),
                    ("predict / fit_path", med["predict"] / fit, None),
                    ("jackknife+ / predict", med["jackknife+"] / med["predict"], None),
                    ("REML grid / fit_path", med["REML profile, 200 penalties"] / fit,
                     REML_TARGET),
                    ("REML estimate / fit_path",
                     med["REML estimate (search + interval)"] / fit, None)):
                rows.append(H.row(BENCH, case, name, value, "×", threads=threads, kind="ratio",
                                  target=target, ok=H.check(value, target)))
    return rows


def run(quick: bool = False) -> list[dict]:
    """Intervals for 10 000 new rows at (1000, 5000) ((300, 1500), 3000 rows with ``quick``)."""
    return _bench(300, 1500, 3000, True) if quick else _bench(1000, 5000, 10000, False)


if __name__ == "__main__":  # python benchmarks/bench_intervals.py [--quick]
    import sys

    for r in run("--quick" in sys.argv):
        print(f"{r['case']:>24} {str(r['threads']):>4}  {r['name']:<36} {r['value']:.4g} "
              f"{r['unit']} {r['target'] or ''} {'' if r['ok'] is None else r['ok']}")
