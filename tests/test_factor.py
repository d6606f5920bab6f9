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

    Tolerances: the Gram route computes d_j^2 with absolute error
    ~max(m, q) eps d_1^2 (Golub & Van Loan sec. 8.1), i.e. relative error
    max(m, q) eps (d_1/d_j)^2 / 2 in d_j; we allow 10x that.  Singular vectors
    move by at most ||E|| / gap (Davis-Kahan) with ||E|| ~ max(m, q) eps d_1^2 and
    gap the smallest distance between distinct d_j^2; we allow 100x that.
    """
    z = well_conditioned(*shape, seed=1)
    m, q = z.shape
    ref = np.linalg.svd(z, compute_uv=False)
    fs = factorize(z, solver="svd")
    fg = factorize(z, solver="gram")
    fa = factorize(z, solver="auto")
    assert fa.solver == "gram" and "Gram route" in fa.reason
    assert fs.rank == fg.rank == fa.rank == min(m, q)
    # SVD route vs numpy: both backward stable, relative error <= ~cond * eps
    cond = ref[0] / ref[-1]
    assert_allclose(fs.d, ref, rtol=100 * cond * EPS)
    bound = 0.5 * max(m, q) * EPS * (ref[0] / ref) ** 2
    assert np.all(np.abs(fg.d / ref - 1) <= 10 * bound + 4 * EPS)
    assert_allclose(fa.d, fg.d, rtol=0, atol=0)  # auto took exactly this route
    d2 = ref**2
    gap = np.min(np.abs(np.diff(d2)))
    vec_tol = 100 * max(m, q) * EPS * d2[0] / gap
    assert_allclose(np.abs(fg.u), np.abs(fs.u), atol=vec_tol)
    assert_allclose(np.abs(fg.vt), np.abs(fs.vt), atol=vec_tol)
    # min-norm coefficients V D^-1 U^T y against numpy pinv
    y = np.random.default_rng(2).standard_normal(m)
    ref_coef = np.linalg.pinv(z) @ y
    for f in (fs, fg, fa):
        coef = f.vt.T @ ((f.u.T @ y) / f.d)
        # relative error <= ~cond * eps for the SVD route, the Gram bound above
        # for the other: 1e-12 covers both here (cond <= 3.5)
        assert np.linalg.norm(coef - ref_coef) <= 1e-12 * np.linalg.norm(ref_coef)


@pytest.mark.parametrize("case", ["polynomial", "polynomial-std", "p=n", "p=n-1"])
def test_auto_falls_back_to_svd_and_matches_it(case):
    """On ill-conditioned designs (monomial basis, cond >= 1e8) and square
    Gaussian designs (p = n, p = n - 1 after centering: smallest singular value
    near 0 by Marchenko-Pastur, cond ~ 1e3), ``solver="auto"`` takes a
    backward-stable route; its reason says so;
    its smallest singular values and min-norm coefficients equal the SVD
    route's to ~cond * eps (we allow 100 cond eps)."""
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
    assert_allclose(fa.d[-3:], fs.d[-3:], rtol=100 * cond * EPS)
    y = rng.standard_normal(z.shape[0])
    ca = fa.vt.T @ ((fa.u.T @ y) / fa.d)
    cs = fs.vt.T @ ((fs.u.T @ y) / fs.d)
    assert np.linalg.norm(ca - cs) <= 100 * cond * EPS * np.linalg.norm(cs)


@pytest.mark.parametrize("shape", [(30, 30), (30, 29), (60, 60), (60, 61)])
def test_auto_near_p_equals_n_small_designs(shape):
    """Small square-ish Gaussian designs (cond ~ 20-130) where "auto" may
    accept a fast route: against the SVD route (LAPACK gesdd, backward stable),
    the smallest singular value and the min-norm coefficients agree to 1e-10
    relative, i.e. at least ~3 digits above the 1e-6 to which results are
    reported (measured <= 2e-12 with the Gram route, 0 with the SVD route)."""
    rng = np.random.default_rng(5)
    z = reduced(rng.standard_normal(shape))
    fa = factorize(z, solver="auto")
    fs = factorize(z, solver="svd")
    assert fa.rank == fs.rank == min(z.shape)
    assert_allclose(fa.d[-1], fs.d[-1], rtol=1e-10)
    y = rng.standard_normal(z.shape[0])
    ca = fa.vt.T @ ((fa.u.T @ y) / fa.d)
    cs = fs.vt.T @ ((fs.u.T @ y) / fs.d)
    assert np.linalg.norm(ca - cs) <= 1e-10 * np.linalg.norm(cs)


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
    assert fg.tol >= np.sqrt(max(m, q) * EPS) * fg.d_max * (1 - 1e-12)
    assert fg.rank < fs.rank == q
    assert fg.rank == np.linalg.matrix_rank(z, tol=fg.tol)
    # the singular values it keeps are accurate to its own error bound
    bound = 0.5 * max(m, q) * EPS * (fs.d[0] / fs.d[:fg.rank]) ** 2
    assert np.all(np.abs(fg.d / fs.d[:fg.rank] - 1) <= 10 * bound + 4 * EPS)


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
    # rtol 1e-12: d_max from two LAPACK calls, each with relative error ~eps
    assert_allclose(f.tol, max(m, q) * EPS * d_all[0], rtol=1e-12)
    assert np.all(f.d > f.tol)
    assert f.d_min <= f.tol  # the dropped values were seen and are below tol
    # a user rtol is honoured
    f2 = factorize(z, solver="svd", rtol=1e-3)
    assert f2.rank == np.linalg.matrix_rank(z, tol=1e-3 * d_all[0])


@pytest.mark.parametrize("solver", ["svd", "gram", "auto"])
def test_factors_are_orthonormal_and_reconstruct(solver):
    """U^T U = I, V^T V = I and U D V^T = Z to backward-error level (numpy
    norms; LAPACK SVD is backward stable, Golub & Van Loan sec. 8.6): we allow
    10 max(m, q) eps d_max for the SVD route and the Gram route's
    sqrt-of-eigenvalue error on this well-conditioned design."""
    z = well_conditioned(50, 120, seed=9)
    f = factorize(z, solver=solver)
    r = f.rank
    tol = 10 * max(z.shape) * EPS
    assert_allclose(f.u.T @ f.u, np.eye(r), atol=tol)
    assert_allclose(f.vt @ f.vt.T, np.eye(r), atol=tol)
    recon = (f.u * f.d) @ f.vt
    assert np.linalg.norm(recon - z, 2) <= tol * f.d_max
    assert np.all(np.diff(f.d) <= 0)  # descending
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
    InputError; the SVD route's singular values equal numpy's (rtol 1e-13)."""
    f = factorize(np.zeros((5, 0)))
    assert f.rank == 0
    z = well_conditioned(30, 8, seed=13) * 1e200
    fa = factorize(z, solver="auto")
    assert fa.solver.startswith("svd") and "not finite" in fa.reason
    assert_allclose(fa.d, np.linalg.svd(z, compute_uv=False), rtol=1e-13)
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
    assert_allclose(res.rank_tol, max(30, 120) * EPS * d_all[0], rtol=1e-12)
    assert res.rank == 29  # centering removes one dimension
    assert res.solver == res.factorization.solver and res.solver_reason


@settings(max_examples=30, deadline=None)
@given(m=st.integers(1, 25), q=st.integers(1, 25), k=st.integers(1, 25),
       seed=st.integers(0, 2**16), solver=st.sampled_from(["svd", "auto"]))
def test_property_rank_and_pinv(m, q, k, seed, solver):
    """Random low-rank matrices: the rank equals ``numpy.linalg.matrix_rank``
    and V D^-1 U^T y equals ``numpy.linalg.pinv(z) @ y`` with the same tolerance.
    Relative error <= 100 cond^2 eps: the SVD route is accurate to ~cond eps,
    the Gram route (which "auto" may take) to ~cond^2 eps (Golub & Van Loan
    sec. 5.3.7, normal-equation error)."""
    rng = np.random.default_rng(seed)
    z = rng.standard_normal((m, k)) @ rng.standard_normal((k, q))
    f = factorize(z, solver=solver)
    d = np.linalg.svd(z, compute_uv=False)
    tol = max(m, q) * EPS * d[0]
    assert f.rank == np.linalg.matrix_rank(z, tol=tol)
    y = rng.standard_normal(m)
    ref = np.linalg.pinv(z, rtol=max(m, q) * EPS) @ y
    coef = f.vt.T @ ((f.u.T @ y) / f.d) if f.rank else np.zeros(q)
    cond = d[0] / d[f.rank - 1] if f.rank else 1.0
    assert np.linalg.norm(coef - ref) <= 100 * cond**2 * EPS * max(np.linalg.norm(ref), 1e-300)


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
    assert f"{cut.rank_tol:.3g}" in msg and cut.rank_tol >= limit * (1 - 1e-12)
    assert "covers the kept values only" in cut.solver_reason
    # the condition number is that of the kept values, as documented
    assert cut.condition_number == cut.singular_values[0] / cut.singular_values[-1]
