"""Issue 2 (speed): the whole ridge path against its competitors, side by side.

For each shape — wide (400, 4000), tall (4000, 400), square (1000, 1000), and
with ``PATHS_BENCH_LARGE=1`` (``run.py --large``) very tall (200000, 100) — on
seeded Gaussian data (synthetic), with the same 200 penalties for everyone
(the package's default grid for that design, ``standardize=False`` so that
every competitor solves the same problem):

- the floor: a bare LAPACK ``gesdd`` SVD of the centered design, and the bare
  Gram eigendecomposition (Gram product + ``eigh``);
- the factorization candidates (``gesdd``, ``gesvd``, Gram + ``eigh`` with the
  ``evr`` and ``evd`` drivers, QR then SVD of the triangle) and the cost of the
  conditioning check (Cholesky + LAPACK ``pocon`` on the Gram matrix);
- ``fit_path`` with each solver, and its pieces: ``prepare`` and ``factorize``;
- scikit-learn ``RidgeCV(alphas=grid)`` (leave-one-out, ``gcv_mode`` auto; no
  coefficient path) and a loop of ``Ridge(alpha).fit`` (timed on every
  ``step``-th penalty and extrapolated linearly to the whole grid).

Ratios (reported per BLAS thread setting):

- ``RidgeCV / fit_path`` and ``Ridge loop / fit_path``: speed-ups, targets
  from the issue for the wide and tall shapes;
- ``post / factorization``: (fit_path − prepare − factorize) / factorize, the
  work after the factorization (grid, criteria incl. leave-one-out, the
  coefficient path, the min-norm limit) relative to the factorization; target
  ≤ 0.5.  ``(fit_path − factorize) / factorize`` counts prepare too;
- ``fit_path / bare gesdd``.

Memory (1 thread): peak traced allocations during ``fit_path`` (the input X
excluded: it exists before the call) over ``X.nbytes + k·p·8``; target ≤ 3.
"""
from __future__ import annotations

import os
import time

import numpy as np
import scipy.linalg as sla
from scipy.linalg import lapack

try:
    from . import harness as H
except ImportError:  # run as a script / imported from the benchmarks folder
    import harness as H

BENCH = "path"
N_LAMBDAS = 200
SHAPES = [(400, 4000, "wide"), (4000, 400, "tall"), (1000, 1000, "square")]
LARGE = (200000, 100, "very tall")
TARGETS = {
    "wide": {"ridgecv": ">= 1.5", "loop": ">= 50"},
    "tall": {"ridgecv": ">= 10", "loop": ">= 30"},
}
POST_TARGET = "<= 0.5"
MEMORY_TARGET = "<= 3"


def _data(n: int, p: int, seed: int = 0):
    """Synthetic Gaussian design and a response with 10 active features plus noise."""
    rng = np.random.default_rng(seed)
    X = rng.standard_normal((n, p))
    beta = np.zeros(p)
    beta[: min(10, p)] = 1.0
    y = X @ beta + rng.standard_normal(n)
    return X, y


def _candidates(Xc: np.ndarray, quick: bool):
    """Factorization candidates on the centered design: name -> callable."""
    n, p = Xc.shape

    def gram():
        return Xc @ Xc.T if n < p else Xc.T @ Xc

    def qr_svd():  # QR of the long side, SVD of the triangle, one product back
        A = Xc.T if n < p else Xc
        q, r = sla.qr(A, mode="economic", check_finite=False)
        w, d, vt = sla.svd(r, full_matrices=False, check_finite=False)
        return q @ w, d, vt

    def cond_check():
        g = gram()
        c, info = lapack.dpotrf(g, lower=False, clean=False, overwrite_a=True)
        if info == 0:
            lapack.dpocon(c, float(np.abs(g).sum(axis=0).max()))

    cands = {
        "bare gesdd SVD (floor)": lambda: sla.svd(Xc, full_matrices=False, lapack_driver="gesdd",
                                                  check_finite=False),
        "bare Gram + eigh (evr)": lambda: sla.eigh(gram(), check_finite=False, overwrite_a=True),
        "bare Gram + eigh (evd)": lambda: sla.eigh(gram(), check_finite=False, overwrite_a=True,
                                                   driver="evd"),
        "bare QR + SVD of R": qr_svd,
        "Gram + Cholesky + pocon (check)": cond_check,
    }
    if not quick:
        cands["bare gesvd SVD"] = lambda: sla.svd(Xc, full_matrices=False, lapack_driver="gesvd",
                                                  check_finite=False)
    return cands


def _bench_shape(n: int, p: int, label: str, quick: bool) -> list[dict]:
    from sklearn.linear_model import Ridge, RidgeCV

    from paths import fit_path
    from paths.core.design import prepare
    from paths.core.factor import factorize

    case = f"{label} {n}×{p}"
    repeats = 3 if quick else 5
    budget = 10.0 if quick else 20.0
    X, y = _data(n, p)
    Y = y[:, None]
    ref = fit_path(X, y, n_lambdas=N_LAMBDAS, standardize=False)
    grid = np.array(ref.lambdas)
    k = grid.size
    step = 40 if quick else 20
    subset = grid[::step]
    Xc = X - X.mean(axis=0)
    kw = dict(standardize=False)
    rows = []

    def fit(solver):
        return lambda: fit_path(X, y, grid, solver=solver, **kw)

    def fresh_z():
        return prepare(X, Y, fit_intercept=True, standardize=False)[1]

    def fact(solver):
        return lambda z: factorize(z, solver=solver, overwrite=True)

    # same problem check (outside the timings): the leave-one-out choice agrees
    t0 = time.perf_counter()
    rcv = RidgeCV(alphas=grid).fit(X, y)
    # a slow competitor is already warm from this fit: no further untimed run
    warm = 0 if time.perf_counter() - t0 > 1.0 else 1
    same = bool(np.isclose(rcv.alpha_, grid[ref.index_min("loo")], rtol=1e-12))
    sklearn_note = f"same LOO choice as fit_path: {'yes' if same else 'NO'}"
    loop_note = f"{subset.size} of {k} penalties timed, ×{k / subset.size:g}"

    for threads in H.THREAD_SETTINGS:
        with H.blas_threads(threads):
            t = {}
            for solver in ("auto", "svd", "gram"):
                t[f"fit_path {solver}"] = H.measure(fit(solver), repeats, budget=budget)
                t[f"factorize {solver}"] = H.measure(fact(solver), repeats, setup=fresh_z,
                                                     budget=budget)
            t["prepare"] = H.measure(lambda: prepare(X, Y, fit_intercept=True, standardize=False),
                                     repeats, budget=budget)
            for name, fn in _candidates(Xc, quick).items():
                t[name] = H.measure(fn, repeats, budget=budget)
            t["sklearn RidgeCV"] = H.measure(lambda: RidgeCV(alphas=grid).fit(X, y), repeats,
                                             warmup=warm, budget=budget)
            loop = H.measure(lambda: [Ridge(alpha=a).fit(X, y) for a in subset],
                             3 if not quick else 1, warmup=0, budget=budget)
            scale = k / subset.size
            t["sklearn Ridge loop"] = {key: (v * scale if key in ("median", "min", "max") else v)
                                       for key, v in loop.items() if key != "times"}

            for name, m in t.items():
                rows.append(H.row(BENCH, case, name, m["median"], "s", threads=threads,
                                  kind="time", min=m["min"], max=m["max"],
                                  repeats=m["repeats"],
                                  note=loop_note if name == "sklearn Ridge loop" else ""))

            med = {name: m["median"] for name, m in t.items()}
            fp = med["fit_path auto"]
            tg = TARGETS.get(label, {})

            def ratio(name, value, target=None, note=""):
                rows.append(H.row(BENCH, case, name, value, "×", threads=threads, kind="ratio",
                                  target=target, ok=H.check(value, target), note=note))

            ratio("RidgeCV / fit_path auto", med["sklearn RidgeCV"] / fp, tg.get("ridgecv"),
                  sklearn_note)
            ratio("Ridge loop / fit_path auto", med["sklearn Ridge loop"] / fp, tg.get("loop"),
                  "loop extrapolated")
            for solver in ("auto", "svd", "gram"):
                f = med[f"factorize {solver}"]
                post = med[f"fit_path {solver}"] - med["prepare"] - f
                route = f"; auto route: {ref.solver}" if solver == "auto" else ""
                ratio(f"post / factorization ({solver})", post / f,
                      POST_TARGET if solver == "auto" else None,
                      f"factorization {f:.3f} s, post {post:.3f} s{route}")
            f = med["factorize auto"]
            ratio("(fit_path − factorize) / factorize (auto)", (fp - f) / f)
            ratio("fit_path auto / bare gesdd", fp / med["bare gesdd SVD (floor)"])
            ratio("fit_path svd / bare gesdd", med["fit_path svd"] / med["bare gesdd SVD (floor)"])
            ratio("fit_path gram / bare Gram+eigh",
                  med["fit_path gram"] / med["bare Gram + eigh (evr)"])

    # memory: independent of the thread setting, measured at 1 thread
    base = X.nbytes + k * p * 8
    with H.blas_threads(1):
        for solver in ("auto", "svd", "gram"):
            peak = H.peak_memory(fit(solver))
            rows.append(H.row(BENCH, case, f"peak fit_path {solver} / (X + k·p·8)", peak / base,
                              "×", kind="memory", target=MEMORY_TARGET if solver == "auto" else None,
                              ok=H.check(peak / base, MEMORY_TARGET) if solver == "auto" else None,
                              note=f"peak {peak / 2**20:.1f} MiB; X {X.nbytes / 2**20:.1f} MiB, "
                                   f"coef {k * p * 8 / 2**20:.1f} MiB"))
        peak = H.peak_memory(lambda: RidgeCV(alphas=grid).fit(X, y))
        rows.append(H.row(BENCH, case, "peak sklearn RidgeCV / (X + k·p·8)", peak / base, "×",
                          kind="memory", note=f"peak {peak / 2**20:.1f} MiB (no coefficient path)"))
    return rows


def run(quick: bool = False) -> list[dict]:
    """All shapes; the very tall one only with ``PATHS_BENCH_LARGE=1``."""
    shapes = list(SHAPES)
    if os.environ.get("PATHS_BENCH_LARGE") == "1":
        shapes.append(LARGE)
    rows = []
    for n, p, label in shapes:
        rows.extend(_bench_shape(n, p, label, quick))
    return rows


if __name__ == "__main__":  # python benchmarks/bench_path.py [--quick]
    import sys

    out = run(quick="--quick" in sys.argv)
    print(H.render_markdown({"rows": out, "machine": H.machine_info()}))
