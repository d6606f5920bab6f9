"""Reference checks for :mod:`paths.core.factor` (the factorization routes).

References: numpy/LAPACK (``numpy.linalg.svd``, ``pinv``, ``matrix_rank``) and
standard perturbation bounds for the symmetric eigenproblem and the SVD
(Golub & Van Loan, *Matrix Computations*, 4th ed., sec. 8.1 and 8.6; the
Davis-Kahan sin-theta bound for eigenvectors).
"""
from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings, strategies as st
from numpy.testing import assert_allclose

from error_bounds import (backward_eps, gamma, orthonormality_bound, ridge_bounds,
                          singular_value_bound, singular_vector_bound)
from paths import fit_path
from paths.data.validation import InputError
from paths.core.design import prepare
from paths.core.factor import factorize

# numerical reference checks (mpmath, scikit-learn, numpy, published bounds): CI reruns
# them under a forced OpenBLAS kernel (.ci/run)
pytestmark = pytest.mark.reference

EPS = np.finfo(np.float64).eps


def reduced(X, standardize=False, fit_intercept=True):
    """The reduced design handed to factorize (centered by the Householder step)."""
    _, z = prepare(X, np.zeros((X.shape[0], 1)) + np.arange(X.shape[0])[:, None],
                   fit_intercept=fit_intercept, standardize=standardize)
    return z


def well_conditioned(m, q, seed):
    """Gaussian matrix far from square (cond ~ (1 + sqrt(m/q)) / (1 - sqrt(m/q)) <= ~3)."""
    return np.random.default_rng(seed).standard_normal((m, q))


def polynomial_design(n=30, degree=9):
    """Monomial basis on [1, 2] (synthetic): cond > 1e8 after centering."""
    x = np.linspace(1.0, 2.0, n)
    return np.column_stack([x**k for k in range(1, degree + 1)])


@pytest.mark.parametrize("shape", [(200, 25), (25, 300)], ids=["tall", "wide"])
def test_routes_agree_on_well_conditioned(shape):
    """"svd", "gram" and "auto" give the same factors on well-conditioned
    designs; singular values also equal ``numpy.linalg.svd`` (LAPACK).

    Tolerances: singular values within Weyl's bound (singular_value_bound:
    eps_b kappa_j for the SVD, eps_b kappa_j^2 through the Gram matrix), singular
    vectors within Wedin's sin-theta bound (singular_vector_bound), min-norm
    coefficients within Wedin's least-squares bound (ridge_bounds at lam = 0);
    eps_b = backward_eps(m, q).
    """
    z = well_conditioned(*shape, seed=1)
    m, q = z.shape
    ref = np.linalg.svd(z, compute_uv=False)
    fs = factorize(z, solver="svd")
    fg = factorize(z, solver="gram")
    fa = factorize(z, solver="auto")
    assert fa.solver == "gram" and "Gram route" in fa.reason
    assert fs.rank == fg.rank == fa.rank == min(m, q)
    # bound: SVD route vs numpy, both backward stable: Weyl, twice
    eb = backward_eps(m, q)
    kj = ref[0] / ref
    assert_allclose(fs.d, ref, rtol=2 * np.max(singular_value_bound(kj, eb)))
    # bound: the Gram route's Weyl bound on d_j^2 plus numpy's
    sv = singular_value_bound(kj, eb, gram=True) + singular_value_bound(kj, eb)
    assert np.all(np.abs(fg.d / ref - 1) <= sv)
    assert_allclose(fa.d, fg.d, rtol=0, atol=0)  # exact: auto took exactly this route
    # bound: Wedin's sin-theta for both routes
    vec_tol = singular_vector_bound(ref, eb, gram=True) + singular_vector_bound(ref, eb)
    assert_allclose(np.abs(fg.u), np.abs(fs.u), atol=vec_tol)
    assert_allclose(np.abs(fg.vt), np.abs(fs.vt), atol=vec_tol)
    # min-norm coefficients V D^-1 U^T y against numpy pinv
    y = np.random.default_rng(2).standard_normal(m)
    ref_coef = np.linalg.pinv(z) @ y
    for f in (fs, fg, fa):
        coef = f.vt.T @ ((f.u.T @ y) / f.d)
        # bound: Wedin (ridge_bounds at 0): the route's (Gram bound covers
        # both) plus numpy's, plus gamma_q for forming the product here
        tol = sum(ridge_bounds(z, y, 0.0, standardize=False, fit_intercept=False, solvers=1,
                               gram=g).coef for g in (True, False)) + 2 * gamma(max(m, q))
        assert np.linalg.norm(coef - ref_coef) <= tol * np.linalg.norm(ref_coef)


@pytest.mark.parametrize("case", ["polynomial", "polynomial-std", "p=n", "p=n-1"])
def test_auto_falls_back_to_svd_and_matches_it(case):
    """On ill-conditioned designs (monomial basis, cond >= 1e8) and square
    Gaussian designs (p = n, p = n - 1 after centering: smallest singular value
    near 0 by Marchenko-Pastur, cond ~ 1e3), ``solver="auto"`` takes a
    backward-stable route; its reason says so;
    its smallest singular values and min-norm coefficients equal the SVD
    route's within Weyl's and Wedin's bounds (two SVD solvers)."""
    rng = np.random.default_rng(5)
    if case.startswith("polynomial"):
        X = polynomial_design()
        z = reduced(X, standardize=case.endswith("std"))
    else:
        n = 200
        X = rng.standard_normal((n, n if case == "p=n" else n - 1))
        z = reduced(X)
    fa = factorize(z, solver="auto")
    fs = factorize(z, solver="svd")
    assert fa.solver.startswith("svd"), fa.reason
    assert "SVD route" in fa.reason
    cond = fs.d[0] / fs.d[-1]
    if case.startswith("polynomial"):
        assert cond >= 1e8
    assert fa.rank == fs.rank
    # bound: Weyl, two backward-stable SVDs
    eb = backward_eps(*z.shape)
    assert_allclose(fa.d[-3:], fs.d[-3:], rtol=2 * float(singular_value_bound(cond, eb)))
    y = rng.standard_normal(z.shape[0])
    ca = fa.vt.T @ ((fa.u.T @ y) / fa.d)
    cs = fs.vt.T @ ((fs.u.T @ y) / fs.d)
    # bound: Wedin, two SVD solvers (ridge_bounds at 0), gamma_q for the products
    tol = ridge_bounds(z, y, 0.0, standardize=False, fit_intercept=False).coef
    assert np.linalg.norm(ca - cs) <= (tol + 2 * gamma(max(z.shape))) * np.linalg.norm(cs)


@pytest.mark.parametrize("shape", [(30, 30), (30, 29), (60, 60), (60, 61)])
def test_auto_near_p_equals_n_small_designs(shape):
    """Small square-ish Gaussian designs (cond ~ 20-130) where "auto" may
    accept a fast route: against the SVD route (LAPACK gesdd, backward stable),
    the smallest singular value and the min-norm coefficients agree within the
    Gram route's bounds (Weyl on d^2, Wedin with kappa^2), which also cover an
    SVD route."""
    rng = np.random.default_rng(5)
    z = reduced(rng.standard_normal(shape))
    fa = factorize(z, solver="auto")
    fs = factorize(z, solver="svd")
    assert fa.rank == fs.rank == min(z.shape)
    eb = backward_eps(*z.shape)
    cond = fs.d[0] / fs.d[-1]
    # bound: Weyl for the Gram route plus the SVD's
    sv = singular_value_bound(cond, eb, gram=True) + singular_value_bound(cond, eb)
    assert_allclose(fa.d[-1], fs.d[-1], rtol=float(sv))
    y = rng.standard_normal(z.shape[0])
    ca = fa.vt.T @ ((fa.u.T @ y) / fa.d)
    cs = fs.vt.T @ ((fs.u.T @ y) / fs.d)
    # bound: Wedin, the Gram route's kappa^2 term plus the SVD's
    tol = sum(ridge_bounds(z, y, 0.0, standardize=False, fit_intercept=False, solvers=1,
                           gram=g).coef for g in (True, False)) + 2 * gamma(max(z.shape))
    assert np.linalg.norm(ca - cs) <= tol * np.linalg.norm(cs)


def test_forced_gram_loses_small_singular_values_as_documented():
    """The Gram route squares the condition number (Golub & Van Loan sec. 5.3.7):
    forced on a monomial basis its rank tolerance is raised to
    sqrt(max(m, q) eps) d_max, so it reports fewer singular values than the SVD
    route rather than returning garbage ones; ``numpy.linalg.matrix_rank`` with
    the same tolerance agrees."""
    z = reduced(polynomial_design())
    m, q = z.shape
    fg = factorize(z, solver="gram")
    fs = factorize(z, solver="svd")
    # bound: the same formula on the same d_max, three roundings apart
    assert fg.tol >= np.sqrt(max(m, q) * EPS) * fg.d_max * (1 - gamma(3))
    assert fg.rank < fs.rank == q
    assert fg.rank == np.linalg.matrix_rank(z, tol=fg.tol)
    # the singular values it keeps are accurate to its own error bound
    # bound: Weyl through the Gram matrix plus the SVD's (singular_value_bound)
    kj = fs.d[0] / fs.d[:fg.rank]
    eb = backward_eps(m, q)
    bound = singular_value_bound(kj, eb, gram=True) + singular_value_bound(kj, eb)
    assert np.all(np.abs(fg.d / fs.d[:fg.rank] - 1) <= bound)


@pytest.mark.parametrize("solver", ["svd", "auto"])
@pytest.mark.parametrize("kind", ["tall", "wide", "square"])
def test_rank_tolerance_and_numpy_matrix_rank(solver, kind):
    """Default rank tolerance is max(m, q) eps d_max (numpy ``matrix_rank`` /
    ``pinv`` convention); on constructed rank-deficient designs (products of
    thin factors) the rank equals ``numpy.linalg.matrix_rank``."""
    rng = np.random.default_rng(7)
    m, q, k = {"tall": (80, 30, 12), "wide": (30, 90, 17), "square": (40, 40, 25)}[kind]
    z = rng.standard_normal((m, k)) @ rng.standard_normal((k, q))
    f = factorize(z, solver=solver)
    assert f.rank == k == np.linalg.matrix_rank(z)
    d_all = np.linalg.svd(z, compute_uv=False)
    # bound: d_max from two backward-stable SVDs (Weyl, kappa_1 = 1) and two
    # roundings of the product
    assert_allclose(f.tol, max(m, q) * EPS * d_all[0],
                    rtol=2 * backward_eps(m, q) + gamma(2))
    assert np.all(f.d > f.tol)
    assert f.d_min <= f.tol  # the dropped values were seen and are below tol
    # a user rtol is honoured
    f2 = factorize(z, solver="svd", rtol=1e-3)
    assert f2.rank == np.linalg.matrix_rank(z, tol=1e-3 * d_all[0])


@pytest.mark.parametrize("solver", ["svd", "gram", "auto"])
def test_factors_are_orthonormal_and_reconstruct(solver):
    """U^T U = I, V^T V = I and U D V^T = Z to backward-error level (numpy
    norms; LAPACK SVD is backward stable, Golub & Van Loan sec. 8.6):
    orthonormality_bound (kappa^2 larger through the Gram matrix), and the
    reconstruction within twice that times d_max (U D V^T = Z V V^T there)."""
    z = well_conditioned(50, 120, seed=9)
    f = factorize(z, solver=solver)
    r = f.rank
    # bound: orthonormality_bound; "auto" may take the Gram route
    tol = orthonormality_bound(*z.shape, f.condition_number, gram=solver != "svd")
    assert_allclose(f.u.T @ f.u, np.eye(r), atol=tol)
    assert_allclose(f.vt @ f.vt.T, np.eye(r), atol=tol)
    recon = (f.u * f.d) @ f.vt
    assert np.linalg.norm(recon - z, 2) <= 2 * tol * f.d_max + gamma(r) * f.d_max
    assert np.all(np.diff(f.d) <= 0)  # descending
    # exact: the documented definition, the same division
    assert_allclose(f.condition_number, f.d[0] / f.d[-1], rtol=0)


def test_zero_and_negligible_singular_values_never_give_nan():
    """An all-zero design and designs with rounding-level singular values:
    finite factors, rank 0 or the true rank (``numpy.linalg.matrix_rank``), no
    RuntimeWarning (the suite turns them into errors)."""
    for solver in ("svd", "gram", "auto"):
        f0 = factorize(np.zeros((6, 4)), solver=solver)
        assert f0.rank == 0 and f0.d.size == 0
        assert f0.condition_number == np.inf
        rng = np.random.default_rng(11)
        a = rng.standard_normal((20, 3))
        z = np.column_stack([a, a[:, :1] * (1 + 1e-17), a @ [1.0, -2.0, 0.5], np.zeros(20)])
        f = factorize(z, solver=solver)
        assert f.rank == np.linalg.matrix_rank(z) == 3
        for arr in (f.u, f.d, f.vt):
            assert np.all(np.isfinite(arr))
        assert np.isfinite(f.tol) and np.isfinite(f.condition_number)


def test_empty_and_overflowing_designs():
    """Edge cases: an empty design gives rank 0; a design whose Gram matrix
    overflows (entries 1e200, squares 1e400 > float64 max, IEEE 754) makes
    "auto" take the SVD route with a reason, and a forced "gram" raises
    InputError; the SVD route's singular values equal numpy's (Weyl, twice)."""
    f = factorize(np.zeros((5, 0)))
    assert f.rank == 0
    z = well_conditioned(30, 8, seed=13) * 1e200
    fa = factorize(z, solver="auto")
    assert fa.solver.startswith("svd") and "not finite" in fa.reason
    ref = np.linalg.svd(z, compute_uv=False)
    # bound: Weyl for two backward-stable SVDs (a power-of-two rescaling is exact)
    assert_allclose(fa.d, ref, rtol=2 * np.max(singular_value_bound(ref[0] / ref,
                                                                     backward_eps(*z.shape))))
    with pytest.raises(InputError):
        factorize(z, solver="gram")
    with pytest.raises(InputError):
        factorize(z, solver="cholesky")


def test_overwrite_gives_the_same_factors():
    """``overwrite=True`` may destroy the input but returns the same factors
    (bitwise: the same LAPACK call on the same values)."""
    z = well_conditioned(40, 40, seed=15)
    a = factorize(z.copy(), solver="svd", overwrite=False)
    b = factorize(z.copy(), solver="svd", overwrite=True)
    # exact: the same LAPACK call on the same values (docstring)
    assert_allclose(a.d, b.d, rtol=0, atol=0)
    assert_allclose(np.abs(a.u), np.abs(b.u), rtol=0, atol=0)


@pytest.mark.parametrize("solver", ["svd", "auto"])
def test_fit_path_reports_route_and_tolerance(solver):
    """``fit_path`` exposes the factorization: rank tolerance
    max(n, p) eps d_max (numpy ``pinv`` / ``matrix_rank`` convention, as
    ``fit_path`` documents), route and reason."""
    rng = np.random.default_rng(17)
    # wide by a factor 4: cond ~ 3, so "auto" takes the Gram route
    X = rng.standard_normal((30, 120))
    res = fit_path(X, rng.standard_normal(30), [1.0], standardize=False, solver=solver)
    if solver == "auto":
        assert res.solver == "gram"
    d_all = np.linalg.svd(X - X.mean(axis=0), compute_uv=False)
    # bound: d_max from two backward-stable SVDs (Weyl), two roundings
    assert_allclose(res.rank_tol, max(30, 120) * EPS * d_all[0],
                    rtol=2 * backward_eps(30, 120) + gamma(2))
    assert res.rank == 29  # centering removes one dimension
    assert res.solver == res.factorization.solver and res.solver_reason


@settings(max_examples=30, deadline=None)
@given(m=st.integers(1, 25), q=st.integers(1, 25), k=st.integers(1, 25),
       seed=st.integers(0, 2**16), solver=st.sampled_from(["svd", "auto"]))
def test_property_rank_and_pinv(m, q, k, seed, solver):
    """Random low-rank matrices: the rank equals ``numpy.linalg.matrix_rank``
    and V D^-1 U^T y equals ``numpy.linalg.pinv(z) @ y`` with the same tolerance.
    Within Wedin's bound: the SVD route's kappa eps, the Gram route's (which
    "auto" may take) kappa^2 eps (Golub & Van Loan sec. 5.3.7), plus pinv's."""
    rng = np.random.default_rng(seed)
    z = rng.standard_normal((m, k)) @ rng.standard_normal((k, q))
    f = factorize(z, solver=solver)
    d = np.linalg.svd(z, compute_uv=False)
    tol = max(m, q) * EPS * d[0]
    assert f.rank == np.linalg.matrix_rank(z, tol=tol)
    y = rng.standard_normal(m)
    ref = np.linalg.pinv(z, rtol=max(m, q) * EPS) @ y
    coef = f.vt.T @ ((f.u.T @ y) / f.d) if f.rank else np.zeros(q)
    if f.rank:
        # bound: Wedin (ridge_bounds at 0), Gram bound for the route + pinv's
        tol = sum(ridge_bounds(z, y, 0.0, standardize=False, fit_intercept=False, solvers=1,
                               gram=g).coef for g in (solver != "svd", False))
        tol += 2 * gamma(max(m, q))
        assert np.linalg.norm(coef - ref) <= tol * np.linalg.norm(ref)
    else:
        assert np.all(ref == 0)


def test_forced_gram_never_cuts_the_rank_silently():
    """A 50 x 50 near-duplicate design (pairs of columns 1e-7 apart, labelled
    synthetic): the SVD route (LAPACK gesdd, reference) keeps rank 49 of the
    centered design; a forced Gram route cannot resolve singular values below
    sqrt(max(m, q) eps) d_max (eigenvalues move by ~eps d_max^2, Golub & Van Loan
    2013, Theorem 8.1.4), so it keeps fewer and must say so: a RankCutWarning
    naming the rank kept and that limit, and a reason saying the condition number
    covers the kept values only."""
    from paths import fit_path
    from paths.core.factor import RankCutWarning

    rng = np.random.default_rng(0)
    A = rng.standard_normal((50, 25))
    X = np.repeat(A, 2, axis=1) + 1e-7 * rng.standard_normal((50, 50))
    y = A.sum(axis=1) + rng.standard_normal(50)
    full = fit_path(X, y, [1e-12], solver="svd")
    assert full.rank == 49
    with pytest.warns(RankCutWarning, match=r"kept rank (\d+) of 49") as rec:
        cut = fit_path(X, y, [1e-12], solver="gram")
    assert cut.rank < 49
    msg = str(rec[0].message)
    assert f"kept rank {cut.rank} of 49" in msg and "solver='svd'" in msg
    limit = np.sqrt(50 * EPS) * cut.singular_values[0]
    # bound: the same formula on the same d_max, three roundings apart
    assert f"{cut.rank_tol:.3g}" in msg and cut.rank_tol >= limit * (1 - gamma(3))
    assert "covers the kept values only" in cut.solver_reason
    # the condition number is that of the kept values, as documented
    assert cut.condition_number == cut.singular_values[0] / cut.singular_values[-1]
