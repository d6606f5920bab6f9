"""Issue 16, item 6 (many targets): a leave-one-out penalty per target, against scikit-learn.

Shape 500 × 2000 with 1000 targets (``--quick``: 300 targets; ``--large`` also
10 000 targets, one thread, fewer repeats), seeded Gaussian data (synthetic):
each target has 20 active features with Gaussian effects plus unit noise.  Both
sides get the same 100 penalties (the package's default grid for the design,
``standardize=False`` so that both solve the same problem) and deliver the same
things: every target's leave-one-out choice on the grid and its coefficients
and intercept there.

- ours: ``fit_path`` (df, GCV, exact LOO for every penalty and target, in
  blocks: no penalties × features × targets array) + the grid argmin per target
  + ``coef_per_target`` at the choices;
- scikit-learn ``RidgeCV(alphas=grid, alpha_per_target=True)``;
- also timed: ``select_targets`` (every rule for every target, refined between
  grid points), which scikit-learn has no counterpart for.

Ratios per BLAS thread setting: ``RidgeCV / ours`` (target ≥ 3), and peak traced
memory (tracemalloc) of both.  The notes say whether both chose the same grid
penalty for every target and how far the coefficients are apart.
"""
from __future__ import annotations

import os

import numpy as np

try:
    from . import harness as H
except ImportError:  # run as a script / imported from the benchmarks folder
    import harness as H

BENCH = "targets"
N_LAMBDAS = 100
TARGET = ">= 3"


def _data(n: int, p: int, t: int, seed: int = 0):
    """Synthetic Gaussian design; t targets, 20 active features each, unit noise."""
    rng = np.random.default_rng(seed)
    X = rng.standard_normal((n, p))
    B = np.zeros((p, t))
    for j in range(t):
        B[rng.choice(p, 20, replace=False), j] = rng.standard_normal(20)
    return X, X @ B + rng.standard_normal((n, t))


def ours(X, Y, grid):
    """The path, each target's leave-one-out grid choice, its coefficients and intercept."""
    from paths import fit_path

    path = fit_path(X, Y, grid, standardize=False)
    idx = np.argmin(path.loo_mse, axis=0)
    coef = path.coef_per_target(path.lambdas[idx])  # (p, t)
    intercept = path.intercept[idx, np.arange(idx.size)]
    return path.lambdas[idx], coef, intercept


def _case(n, p, t, threads_list, repeats, ref_repeats) -> list[dict]:
    from sklearn.linear_model import RidgeCV

    from paths import fit_path
    from paths.selection.targets import select_targets

    X, Y = _data(n, p, t)
    case = f"{n}x{p}, {t} targets"
    grid = fit_path(X, Y[:, :1], n_lambdas=N_LAMBDAS, standardize=False).lambdas
    lam, coef, _ = ours(X, Y, grid)  # agreement, untimed
    m = RidgeCV(alphas=grid, alpha_per_target=True).fit(X, Y)
    same = float(np.mean(m.alpha_ == lam))
    diff = float(np.max(np.abs(m.coef_.T - coef)) / np.max(np.abs(m.coef_)))
    del m, coef
    rows = []
    for threads in threads_list:
        with H.blas_threads(threads):
            mine = H.measure(lambda: ours(X, Y, grid), repeats=repeats)
            ref = H.measure(lambda: RidgeCV(alphas=grid, alpha_per_target=True).fit(X, Y),
                            repeats=ref_repeats, warmup=0 if ref_repeats == 1 else 1)
            path = fit_path(X, Y, grid, standardize=False)
            sel = H.measure(lambda: select_targets(path), repeats=max(1, repeats - 2))
        for name, r in (("fit_path + LOO choice + coefficients", mine),
                        ("RidgeCV(alpha_per_target=True)", ref),
                        ("select_targets: every rule, refined (given the path)", sel)):
            rows.append(H.row(BENCH, case, name, r["median"], "s", threads=threads,
                              min=r["min"], max=r["max"], repeats=r["repeats"]))
        value = ref["median"] / mine["median"]
        rows.append(H.row(BENCH, case, "RidgeCV / ours", value, "×", threads=threads,
                          kind="ratio", target=TARGET, ok=H.check(value, TARGET),
                          note=f"same LOO grid choice for {100 * same:.1f}% of targets; "
                               f"coefficients agree to {diff:.1e} (relative to the largest)"))
    peak_ours = H.peak_memory(lambda: ours(X, Y, grid))
    peak_ref = H.peak_memory(lambda: RidgeCV(alphas=grid, alpha_per_target=True).fit(X, Y))
    dense = 8.0 * grid.size * p * t
    for name, v in (("peak traced memory, ours", peak_ours / 2**20),
                    ("peak traced memory, RidgeCV", peak_ref / 2**20),
                    ("dense k×p×t coefficients (not formed)", dense / 2**20)):
        rows.append(H.row(BENCH, case, name, v, "MiB", kind="memory"))
    rows.append(H.row(BENCH, case, "peak memory RidgeCV / ours", peak_ref / peak_ours, "×",
                      kind="memory"))
    return rows


def run(quick: bool) -> list[dict]:
    rows = _case(500, 2000, 300 if quick else 1000, H.THREAD_SETTINGS, 3, 3)
    if os.environ.get("PATHS_BENCH_LARGE") == "1":
        rows += _case(500, 2000, 10000, (1,), 3, 1)
    return rows


if __name__ == "__main__":  # pragma: no cover
    import sys

    out = run("--quick" in sys.argv)
    print(H.render_markdown({"rows": out, "machine": H.machine_info()}))
