"""Issue 11 item 4: how many digits the Gram route gives up against the SVD route.

Synthetic designs ``Z = Q1 diag(d) Q2^T`` (seeded Haar-random orthonormal
factors) with a prescribed 2-norm condition number kappa, two spectra
(``geom``: log-spaced from 1 to 1/kappa; ``one``: all ones but the last, 1/kappa)
and three shapes (tall 200 x 40, wide 40 x 200, square 60 x 60).  For each,
the minimum-norm least-squares coefficients ``V diag(1/d) U^T y`` from
``factorize(solver="svd")`` and ``factorize(solver="gram")`` are compared with
a reference solved in extended precision (numpy ``longdouble``, 64-bit
mantissa on x86-64: a Cholesky solve of the normal equations, exact to
~kappa^2 * 1e-19 for the float64 design as given).

Printed per (shape, spectrum, kappa): median, 90th percentile and maximum over
``--reps`` designs of the digits lost on the same design,
``log10(err_gram / err_svd)``, and the fewest correct digits of each route.
Usage: ``python benchmarks/bench_gram_accuracy.py [--reps 30] [--seed 0]``.
No timing: an accuracy measurement (recorded in README "The factorization").
"""
from __future__ import annotations

import argparse

import numpy as np

from paths.core.factor import factorize

LD = np.longdouble


def _chol_solve_ld(G, b):
    n = G.shape[0]
    L = np.zeros_like(G)
    for j in range(n):
        L[j, j] = np.sqrt(G[j, j] - L[j, :j] @ L[j, :j])
        L[j + 1:, j] = (G[j + 1:, j] - L[j + 1:, :j] @ L[j, :j]) / L[j, j]
    z = np.zeros(n, dtype=LD)
    for i in range(n):
        z[i] = (b[i] - L[i, :i] @ z[:i]) / L[i, i]
    x = np.zeros(n, dtype=LD)
    for i in reversed(range(n)):
        x[i] = (z[i] - L[i + 1:, i] @ x[i + 1:]) / L[i, i]
    return x


def reference(z, y):
    """Minimum-norm least squares in extended precision (normal equations, either side)."""
    Z, Y = z.astype(LD), y.astype(LD)
    if z.shape[0] >= z.shape[1]:
        return _chol_solve_ld(Z.T @ Z, Z.T @ Y).astype(float)
    return (Z.T @ _chol_solve_ld(Z @ Z.T, Y)).astype(float)


def design(rng, m, q, kappa, spectrum):
    k = min(m, q)
    q1, _ = np.linalg.qr(rng.standard_normal((m, k)))
    q2, _ = np.linalg.qr(rng.standard_normal((q, k)))
    d = np.geomspace(1, 1 / kappa, k) if spectrum == "geom" else np.r_[np.ones(k - 1), 1 / kappa]
    return (q1 * d) @ q2.T


def min_norm(f, y):
    return f.vt.T @ ((f.u.T @ y) / f.d)


def main(reps: int = 30, seed: int = 0) -> None:
    rng = np.random.default_rng(seed)
    print("shape     spectrum kappa | lost: median  p90  max | fewest digits: svd  gram")
    for m, q in [(200, 40), (40, 200), (60, 60)]:
        for spectrum in ("geom", "one"):
            for kappa in (1.5, 2.0, 3.0, 4.3, 6.0, 10.0):
                es, eg = np.empty(reps), np.empty(reps)
                for i in range(reps):
                    z = design(rng, m, q, kappa, spectrum)
                    y = rng.standard_normal(m)
                    ref = reference(z, y)
                    nr = np.linalg.norm(ref)
                    es[i] = np.linalg.norm(min_norm(factorize(z, solver="svd"), y) - ref) / nr
                    eg[i] = np.linalg.norm(min_norm(factorize(z, solver="gram"), y) - ref) / nr
                lost = np.log10(np.maximum(eg, 1e-17) / np.maximum(es, 1e-17))
                print(f"{m}x{q:<6d} {spectrum:5s} {kappa:5.1f} | {np.median(lost):12.2f} "
                      f"{np.quantile(lost, 0.9):5.2f} {lost.max():4.2f} | "
                      f"{-np.log10(es.max()):18.2f} {-np.log10(eg.max()):5.2f}")


if __name__ == "__main__":
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--reps", type=int, default=30)
    ap.add_argument("--seed", type=int, default=0)
    a = ap.parse_args()
    main(a.reps, a.seed)
