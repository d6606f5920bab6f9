"""Issue 4 (speed): a feature-wise threshold sweep against the bare factorizations it needs.

Case: seeded Gaussian data (synthetic), n_train = 200, 100 test rows, 800
columns; ``threshold_sweep(order="random", repeats=5, n_points=40)`` — 40
points with p' from 1 to 800, dense around p' = n, five random orders.

- the floor: the sum, over the 5 × 40 points, of ``paths.core.factor.factorize``
  (``solver="auto"``, the call the sweep makes) on the same reduced designs
  (centering and scaling done outside the timing, the same column orders);
- the sweep: ``threshold_sweep`` end to end (validation, one column
  reordering and preprocessing per repeat, every factorization, all methods
  and baselines at every point, the noise/signal estimate, the theory curves).

Ratio ``sweep / bare factorizations``: target ≤ 1.3 (issue 4).
"""
from __future__ import annotations

import numpy as np

try:
    from . import harness as H
except ImportError:  # run as a script / imported from the benchmarks folder
    import harness as H

BENCH = "threshold"
TARGET = "<= 1.3"
N_TRAIN, N_TEST, P, POINTS, REPEATS, SEED = 200, 100, 800, 40, 5, 0


def _data():
    rng = np.random.default_rng(2026)
    X = rng.standard_normal((N_TRAIN + N_TEST, P))
    beta = rng.standard_normal(P) / np.sqrt(P)
    y = X @ beta + rng.standard_normal(N_TRAIN + N_TEST)
    return X[:N_TRAIN], y[:N_TRAIN], X[N_TRAIN:], y[N_TRAIN:]


def run(quick: bool) -> list[dict]:
    from paths.core.design import prepare
    from paths.core.factor import factorize
    from paths.threshold.sweep import sweep_sizes, threshold_sweep

    X, y, Xt, yt = _data()
    grid = sweep_sizes(1, P, N_TRAIN - 1, POINTS)
    rng = np.random.default_rng(SEED)  # the sweep draws its orders from this seed the same way
    zs = []
    for _ in range(REPEATS):
        perm = rng.permutation(P)
        _, z = prepare(X[:, perm], y[:, None], fit_intercept=True, standardize=True)
        zs.append(np.asfortranarray(z))

    def bare():
        for z in zs:
            for k in grid:
                factorize(z[:, :k], solver="auto")

    def sweep():
        return threshold_sweep(X, y, Xt, yt, order="random", repeats=REPEATS, seed=SEED,
                               n_points=POINTS)

    res = sweep()
    assert res.n_features.size == grid.size == POINTS
    repeats = 3 if quick else 7
    case = f"features {N_TRAIN}×{P}, {POINTS} points × {REPEATS} repeats"
    rows = []
    for threads in H.THREAD_SETTINGS:
        with H.blas_threads(threads):
            tb = H.measure(bare, repeats)
            ts = H.measure(sweep, repeats)
        for name, m in (("bare factorizations (floor)", tb), ("threshold_sweep", ts)):
            rows.append(H.row(BENCH, case, name, m["median"], "s", threads=threads,
                              min=m["min"], max=m["max"], repeats=m["repeats"]))
        ratio = ts["median"] / tb["median"]
        rows.append(H.row(BENCH, case, "sweep / bare factorizations", ratio, "×",
                          threads=threads, kind="ratio", target=TARGET,
                          ok=H.check(ratio, TARGET),
                          note=f"{REPEATS * POINTS} factorizations; medians of {repeats} runs"))
    return rows


if __name__ == "__main__":  # pragma: no cover
    for r in run(quick="--quick" in __import__("sys").argv):
        print(r["case"], "|", r["name"], "|", r["threads"], "|", f"{r['value']:.4g}", r["unit"],
              "|", r.get("target") or "", r.get("ok") if r.get("ok") is not None else "")
