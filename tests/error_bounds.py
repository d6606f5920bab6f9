"""Published error bounds the reference tests derive their tolerances from.

Every tolerance in the numerical reference tests is one of these bounds, never
the digits one machine happened to reach: OpenBLAS picks different kernels on
different processors (``OPENBLAS_CORETYPE``), and their rounding differs.

Notation: ``u`` is the unit roundoff (``eps / 2``), ``kappa = d_1 / d_r`` the
2-norm condition number of the centered (scaled) design that is factored,
``m x p`` its shape.

References
----------
Higham, N. J. (2002). *Accuracy and Stability of Numerical Algorithms*, 2nd ed.
SIAM.  Theorem 20.1 (Wedin's perturbation bound for least squares), Theorem
20.3 (backward stability of orthogonal-factorization solvers), section 20.4
(normal equations: forward error of order ``kappa**2 u``), section 2.8 (rounding
errors accumulate like the square root of the worst-case constant: the "rule of
thumb" replacing a constant ``f(n)`` in a bound by ``sqrt(f(n))``), section 3.1
(inner products: error ``gamma_n = n u / (1 - n u)`` relative to
``|x|^T |y|``).
Golub, G. H. and Van Loan, C. F. (2013). *Matrix Computations*, 4th ed. Johns
Hopkins.  Corollary 8.6.2 (Weyl: a perturbation ``E`` moves every singular
value by at most ``||E||_2``), Theorem 8.1.4 (the same for the eigenvalues of a
symmetric matrix).
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import numpy.testing as _np_testing

U = np.finfo(np.float64).eps / 2  # unit roundoff
#: NIST StRD certified values are rounded to 15 significant digits: half a unit
#: in the 15th digit is at most 5e-15 relative (leading digit 1).
CERT_ROUND = 5e-15


def backward_eps(m: int, p: int) -> float:
    """Backward error of an orthogonal-factorization least-squares solve.

    Higham (2002) Theorem 20.3 gives ``||dA||_F <= gamma~_{mp} ||A||_F`` with
    ``gamma~_{mp} = c m p u``; with the rule of thumb of section 2.8 (rounding
    errors accumulate like a random walk) the constant is ``sqrt(m p)``.  A
    further factor 4 covers the small constant ``c`` and the centering and
    scaling passes (each one rounding per entry).
    """
    return 4.0 * math.sqrt(m * p) * U


def ls_coef_bound(kappa: float, rho: float, eps: float, *, gram: bool = False) -> float:
    """Normwise relative forward error of a least-squares solution.

    Higham (2002) Theorem 20.1: with a backward error ``eps`` and
    ``rho = ||r|| / (||A|| ||x||)``,
    ``||dx|| / ||x|| <= kappa eps / (1 - kappa eps) * (2 + (kappa + 1) rho)``.
    A Gram (normal-equations) route has a forward error of order
    ``kappa**2 eps`` instead (section 20.4): ``gram=True`` adds that term.
    """
    k = kappa * eps
    if k >= 1.0:
        return math.inf
    bound = k / (1.0 - k) * (2.0 + (kappa + 1.0) * rho)
    if gram:
        bound += 2.0 * kappa**2 * eps
    return bound


def ls_residual_bound(kappa: float, eps: float, *, gram: bool = False) -> float:
    """Normwise forward error of the residual, relative to ``||b||``.

    Higham (2002) Theorem 20.1: ``||dr|| / ||b|| <= (1 + 2 kappa) eps``; the
    Gram route forms the residual from factors whose span carries an error of
    order ``kappa**2 eps`` (section 20.4), hence the extra term.
    """
    return (1.0 + 2.0 * kappa) * eps + (2.0 * kappa**2 * eps if gram else 0.0)


def singular_value_bound(kappa_j, eps: float, *, gram: bool = False):
    """Relative error of singular values ``d_j`` with ``kappa_j = d_1 / d_j``.

    A backward-stable SVD moves each singular value by at most
    ``eps ||A||`` (Golub and Van Loan 2013, Corollary 8.6.2), a relative
    error ``eps kappa_j``.  Through the Gram matrix the eigenvalue
    ``w_j = d_j**2`` moves by ``eps ||A||**2`` (Theorem 8.1.4), a relative error
    ``eps kappa_j**2`` on ``w_j`` and half that on ``d_j``.
    """
    kappa_j = np.asarray(kappa_j, dtype=float)
    return eps * kappa_j * (1.0 + (kappa_j if gram else 0.0))


# ---------------------------------------------------------------- summation
def gamma(n: int) -> float:
    """Higham (2002) section 3.1: ``gamma_n = n u / (1 - n u)``.

    A sum or inner product of ``n`` terms computed in any order has an error
    of at most ``gamma_{n-1} sum |terms|``; two evaluations of the same
    expression that differ only in the order of their reductions (BLAS kernels,
    blocking, threads) therefore agree to ``2 gamma_n`` relative for sums of
    terms of one sign (sums of squares, traces of positive semidefinite
    matrices, means of squared errors).
    """
    n = max(int(n), 1)
    return n * U / (1.0 - n * U)


def reorder_bound(n: int, *, ops: int = 1) -> float:
    """Relative difference of two evaluations of the same same-sign sums.

    ``2 gamma_n`` for the two summations (:func:`gamma`) plus ``ops`` further
    roundings on each side (the elementwise operations of the expression:
    one division, one square... each one ``u``; Higham 2002 section 2.2).
    """
    return 2.0 * gamma(n) + 2.0 * ops * U


def solve_bound(A) -> float:
    """Normwise relative forward error of ``numpy.linalg.solve(A, b)``.

    LU with partial pivoting is backward stable, ``|dA| <= gamma_{3n} |L||U|``
    (Higham 2002 Theorem 9.3); with the rule of thumb of section 2.8 and a
    growth factor of order 1 (section 9.4: small in practice) the forward error
    is ``kappa(A) * 3 sqrt(n) u`` times a factor 4 for the constant
    (Theorem 7.2: ``kappa eps / (1 - kappa eps)`` to first order).
    """
    A = np.asarray(A, dtype=float)
    n = A.shape[0]
    return 4.0 * np.linalg.cond(A) * 3.0 * math.sqrt(n) * U


# ---------------------------------------------------------------- ridge
@dataclass(frozen=True)
class RidgeBounds:
    """Error bounds for one ridge fit at one penalty (see :func:`ridge_bounds`).

    Fields: ``kappa`` the condition number ``sqrt((d_1^2 + lam)/(d_r^2 + lam))``
    of the augmented problem; ``coef`` normwise relative error of the
    coefficients on the original scale (``coef_std`` on the centered scaled
    design, whose coefficient vector has the norm ``coef_std_norm``: an entry
    ``j`` on the original scale is within ``coef_std * coef_std_norm / s_j``);
    ``intercept`` and ``fitted`` absolute
    errors (``fitted`` entrywise, for the training rows); ``resid`` absolute
    2-norm error of the residual; ``mse`` relative error of the training mean
    squared error; ``df`` absolute error of ``tr(H)``; ``gcv`` and ``loo``
    relative errors.
    """

    kappa: float
    coef: float
    coef_std: float
    coef_std_norm: float
    intercept: float
    fitted: float
    resid: float
    mse: float
    mse_abs: float
    df: float
    gcv: float
    loo: float
    coef_norm: float
    center: np.ndarray
    scale: np.ndarray
    ybar: float

    def predict_atol(self, Xnew) -> float:
        """Entrywise absolute error of predictions at new rows ``Xnew``:
        ``||z_i|| ||d beta|| + |d b0|`` with ``z_i`` the centered scaled row
        (Cauchy-Schwarz), plus ``gamma_{p+1}`` of the terms of the sum."""
        Z = (np.atleast_2d(np.asarray(Xnew, dtype=float)) - self.center) / self.scale
        zn = np.linalg.norm(Z, axis=1).max()
        terms = abs(self.ybar) + zn * self.coef_std_norm
        return (zn * self.coef_std * self.coef_std_norm + self.intercept
                + gamma(Z.shape[1] + 1) * terms)

    def test_mse_rtol(self, Xnew, ynew, fitted_ref) -> float:
        """Relative error of a mean squared prediction error: ``2 max|df| /
        rmse`` from ``|a^2 - b^2| = |a - b| |a + b|`` (Cauchy-Schwarz), plus
        ``2 gamma_n`` for the mean."""
        e = np.asarray(ynew, dtype=float) - np.asarray(fitted_ref, dtype=float)
        rmse = math.sqrt(np.mean(e**2))
        d = self.predict_atol(Xnew)
        return 2.0 * d / rmse + (d / rmse) ** 2 + 2.0 * gamma(e.shape[0])


def ridge_bounds(X, y, lam: float, *, standardize: bool = True,
                 fit_intercept: bool = True, solvers: int = 2,
                 gram: bool = False, rank_rtol: float | None = None,
                 extra_eps: float = 0.0) -> RidgeBounds:
    """Error bounds on a ridge fit at penalty ``lam``, for comparing ``solvers``
    backward-stable computations of it (each one's bound adds up).

    The problem is rebuilt here in numpy from ``X`` and ``y`` (one ``y``
    column): ``Z`` the centered (``fit_intercept``), population-SD scaled
    (``standardize``) design with singular values ``d``, numerical rank ``r``
    (numpy ``pinv``'s tolerance ``max(m, p) eps d_1`` unless ``rank_rtol``).
    ``extra_eps`` adds a known normwise relative perturbation of the data (for
    example a column stored with fewer significant bits) to the backward error.

    Notes
    -----
    Ridge is the least-squares problem ``min ||[y; 0] - [Z; sqrt(lam) I] b||``;
    its solution lies in the span of the ``r`` leading right singular vectors,
    where the problem has the condition number
    ``kappa = sqrt((d_1^2 + lam) / (d_r^2 + lam))`` (Wedin 1973, rank-preserving
    perturbations; Higham 2002 Theorem 20.1 with ``kappa`` for the reduced
    problem).  A backward-stable SVD or QR solve has a backward error
    :func:`backward_eps` ``(m, p)`` relative to ``||Z||`` (Theorem 20.3), so:

    * coefficients: :func:`ls_coef_bound` with
      ``rho = ||r_aug|| / (||A|| ||b||)``, ``r_aug`` the augmented residual;
      on the original scale (``b / s``) times ``max(s) / min(s)``;
      a Gram route (``gram=True``) adds ``2 kappa^2 eps`` (section 20.4);
    * residual: :func:`ls_residual_bound`, ``||dr|| <= (1 + 2 kappa) eps ||y||``;
      the training MSE moves by ``2 ||dr|| / ||r|| + (||dr|| / ||r||)^2``
      relative (``mse_abs``: ``(||dr||^2 + 2 ||r|| ||dr||) / m`` absolute);
      at full row rank and ``lam > 0`` also ``r = lam (G + lam I)^-1 y`` with
      ``G = Z Z^T``, whose relative error is at most
      ``2 cond(G + lam I)^2 eps``, ``cond(G + lam I) = kappa^2``: the
      smaller bound applies (residuals formed without cancellation);
    * intercept ``b0 = ybar - (xbar / s)^T b``: ``||xbar / s|| ||db||`` plus
      ``gamma_{p+1}`` of its terms; fitted values likewise with each row;
    * ``df = [1] + sum d_j^2 / (d_j^2 + lam)``: each singular value moves by at
      most ``eps d_1`` (Weyl; Golub and Van Loan 2013 Corollary 8.6.2) and
      ``|d(df)/dd_j| = 2 lam d_j / (d_j^2 + lam)^2``; a Gram route moves each
      ``d_j^2`` by ``eps d_1^2`` instead (Theorem 8.1.4);
    * GCV ``= m RSS / (m - df)^2``: the MSE error plus ``2 |d df| / (m - df)``,
      with ``m - df = (m - [1] - r) + sum lam / (d_j^2 + lam)`` summed as
      complements (relative ``gamma_r``); at full row rank and ``lam = 0`` the
      limit ``m ||G+ y||^2 / (tr G+)^2``, whose numerator moves by
      ``4 kappa^4 eps`` and denominator by ``4 kappa^2 eps`` relative (as for
      LOO below);
    * leave-one-out residuals ``e_i = r_i / (1 - h_i)``: the leverages are
      diagonal entries of the top block of the orthogonal projector onto the
      range of the augmented matrix, which moves by at most ``2 kappa eps``
      (Wedin's sin-theta bound; Stewart and Sun 1990 Theorem III.3.4; through
      a Gram matrix ``2 kappa^2 eps``, section 20.4), so
      ``||de|| <= ||dr|| / min(1 - h) + ||e|| 2 kappa eps / min(1 - h)`` and the
      LOO MSE moves by ``2 ||de|| / ||e|| + (||de|| / ||e||)^2`` relative.
      Rows of leverage one at ``lam = 0`` (interpolation) take the
      ``lam -> 0+`` limit ``e_i = (G+ y)_i / (G+)_ii``, ``G = Z Z^T``:
      ``G+ = (Z+)^T Z+`` and ``Z+`` has a normwise relative error
      ``kappa eps`` (Wedin 1973), so ``G+ y`` moves by ``2 kappa^2 eps
      ||y|| / d_r^2`` and ``(G+)_ii = ||Z+ e_i||^2 >= 1 / d_1^2`` by
      ``2 kappa^2 eps`` relative: ``||de|| <= 2 kappa^2 eps (kappa^2 ||y|| +
      ||e||)``.  At full row rank the same argument holds at every
      ``lam``: ``e_i = (M y)_i / M_ii`` with ``M = (G + lam I)^-1`` (on the
      complement of the constant vector with an intercept), whose condition
      number is ``kappa^2``; the smaller of the two bounds applies.

    Each bound is first order in ``eps``; the tests use it unchanged (no
    safety factor beyond the constants stated in :func:`backward_eps`).

    References
    ----------
    Wedin, P.-A. (1973). Perturbation theory for pseudo-inverses. BIT 13, 217-232.
    Stewart, G. W. and Sun, J.-G. (1990). *Matrix Perturbation Theory*. Academic Press.
    """
    X = np.asarray(X, dtype=float)
    y = np.asarray(y, dtype=float).ravel()
    m, p = X.shape
    center = X.mean(axis=0) if fit_intercept else np.zeros(p)
    scale = X.std(axis=0) if standardize else np.ones(p)
    scale = np.where(scale > 0, scale, 1.0)
    Z = (X - center) / scale
    ybar = float(y.mean()) if fit_intercept else 0.0
    yc = y - ybar
    u, d, vt = np.linalg.svd(Z, full_matrices=False)
    tol = (rank_rtol if rank_rtol is not None else max(m, p) * 2 * U) * d[0]
    r = int(np.sum(d > tol))
    u, d, vt = u[:, :r], d[:r], vt[:r]
    # every bound is invariant under Z -> Z / d_1, lam -> lam / d_1^2 (and b -> d_1 b):
    # work with d_1 = 1 so that no square leaves the float64 range
    dscale = float(d[0])
    d = d / dscale
    lam = float(lam) / dscale**2
    eps = backward_eps(m, p) + extra_eps
    kappa = math.sqrt((d[0] ** 2 + lam) / (d[-1] ** 2 + lam))
    uty = u.T @ yc
    b = vt.T @ (d / (d**2 + lam) * uty) / dscale
    fit = u @ (d**2 / (d**2 + lam) * uty)
    res = yc - fit
    bnorm = float(np.linalg.norm(b))
    raug = math.sqrt(res @ res + lam * (dscale * bnorm) ** 2)
    anorm = math.sqrt(d[0] ** 2 + lam) * dscale
    rho = raug / (anorm * bnorm) if bnorm > 0 else 0.0
    coef_std = solvers * ls_coef_bound(kappa, rho, eps, gram=gram)
    coef = coef_std * float(scale.max() / scale.min())
    zbar = center / scale
    icpt = (float(np.linalg.norm(zbar)) * coef_std * bnorm
            + gamma(p + 1) * (abs(ybar) + float(np.abs(zbar) @ np.abs(b))))
    zrow = float(np.linalg.norm(Z, axis=1).max())
    fitted = zrow * coef_std * bnorm + icpt + gamma(p + 1) * (abs(ybar) + zrow * bnorm)
    dr = solvers * ls_residual_bound(kappa, eps, gram=gram) * float(np.linalg.norm(yc))
    rn = float(np.linalg.norm(res))
    full_row = r == m - fit_intercept
    kg = kappa**2 * (1.0 + (kappa**2 if gram else 0.0))  # cond of G + lam I
    if full_row and lam > 0:  # r = lam (G + lam I)^-1 y (see Notes)
        dr = min(dr, solvers * 2 * kg * kg * eps * rn)
    q = dr / rn if rn > 0 else math.inf
    mse = 2 * q + q * q + 2 * gamma(m)
    mse_abs = (dr * dr + 2 * rn * dr) / m + 2 * gamma(m) * rn * rn / m
    dd = eps * d[0] * (1.0 + (d[0] / d if gram else 0.0))
    dweyl = solvers * float(np.sum(2 * lam * d / (d**2 + lam) ** 2 * dd))
    df = fit_intercept + float(np.sum(d**2 / (d**2 + lam)))
    ddf = dweyl + 2 * gamma(r) * df
    resid_df = (m - fit_intercept - r) + float(np.sum(lam / (d**2 + lam)))
    gcv = mse + 2 * (dweyl / resid_df + 2 * gamma(r)) if resid_df > 0 else math.inf
    if full_row and lam == 0:  # GCV_0 = m ||G+ y||^2 / (tr G+)^2 (see Notes)
        gcv = solvers * (4 * kg * kg * eps + 4 * kg * eps) + 4 * gamma(m)
    h = (1.0 / m if fit_intercept else 0.0) + np.sum((u * (d**2 / (d**2 + lam))) * u, axis=1)
    one = 1.0 - h
    full = one <= m * m * U  # leverage one at lam = 0: the lam -> 0+ limit
    e = np.where(full, 0.0, res / np.where(full, 1.0, one))
    if full.any():  # limit e_i = (G+ y)_i / (G+)_ii with G = Z Z^T (see Notes; scale-free)
        gy = u @ (uty / d**2)
        gd = np.sum(u * u / d**2, axis=1)
        e[full] = gy[full] / gd[full]
    en = float(np.linalg.norm(e))
    dh = solvers * 2 * kappa * eps * (1.0 + (kappa if gram else 0.0))
    de = (dr + en * dh) / float(one[~full].min()) if (~full).any() else 0.0
    if full.any():
        de += solvers * 2 * kappa**2 * eps * (kappa**2 * float(np.linalg.norm(yc)) + en)
    if r == m - fit_intercept:  # full row rank: the inverse form (see Notes)
        kg = kappa**2 * (1.0 + (kappa**2 if gram else 0.0))
        de = min(de, solvers * 2 * kg * eps * (kg * float(np.linalg.norm(yc)) + en))
    qe = de / en if en > 0 else math.inf
    loo = 2 * qe + qe * qe + 2 * gamma(m)
    return RidgeBounds(kappa=kappa, coef=coef, coef_std=coef_std,
                       coef_std_norm=bnorm, intercept=icpt, fitted=fitted, resid=dr,
                       mse=mse, mse_abs=mse_abs, df=ddf, gcv=gcv, loo=loo, coef_norm=float(np.linalg.norm(b / scale)),
                       center=center, scale=scale, ybar=ybar)


def explicit_hat_bound(X1, pen) -> float:
    """2-norm error of an explicit hat matrix ``X1 solve(X1^T X1 + diag(pen), X1^T)``.

    Forming ``A = X1^T X1 + diag(pen)`` rounds each entry by ``gamma_m`` of
    ``|X1|^T |X1|`` (Higham 2002 section 3.5), a backward error of at most
    ``gamma_m ||X1||_F^2 / ||A||`` relative to ``A``; the solve adds
    :func:`solve_bound`.  The forward error of ``A^-1 X1^T`` is then
    ``cond(A)`` times that (Higham Theorem 7.2) and
    ``||dH|| <= ||X1|| ||A^-1|| ||X1|| * rel``.
    """
    X1 = np.asarray(X1, dtype=float)
    A = X1.T @ X1 + np.diag(np.asarray(pen, dtype=float))
    sv = np.linalg.svd(A, compute_uv=False)
    nx = np.linalg.norm(X1, 2)
    rel = solve_bound(A) + sv[0] / sv[-1] * gamma(X1.shape[0]) * np.linalg.norm(X1) ** 2 / sv[0]
    return float(nx * nx / sv[-1] * rel)


def refit_errors(X, y, lam: float, *, fit_intercept: bool = True, labels=None,
                 extra_eps: float = 0.0, standardize: bool = False):
    """Held-out errors of brute-force ridge refits and their error bounds.

    Refit ``f`` on the rows outside fold ``f`` (each row its own fold without
    ``labels``: leave-one-out) predicts the held-out rows to within
    :meth:`RidgeBounds.predict_atol` (one backward-stable solver, Wedin).
    With ``standardize`` each refit scales by its own training rows (a
    pipeline); otherwise ``X`` is taken as already scaled.  The held-out errors
    are functions of the data alone, so the same bounds hold for any method
    backward stable on the whole data (a perturbation of the whole data
    perturbs every refit's by no more).  Returns ``(err, atol)`` per row.
    """
    X = np.asarray(X, dtype=float)
    y = np.asarray(y, dtype=float)
    n, p = X.shape
    labels = np.arange(n) if labels is None else np.asarray(labels)
    err, de = np.empty(n), np.empty(n)
    for f in np.unique(labels):
        te = labels == f
        k = ~te
        b = ridge_bounds(X[k], y[k], lam, standardize=standardize, fit_intercept=fit_intercept,
                         solvers=1, extra_eps=extra_eps)
        Z = (X - b.center) / b.scale
        ym = b.ybar
        A = np.vstack([Z[k], math.sqrt(lam) * np.eye(p)])
        beta = np.linalg.lstsq(A, np.r_[y[k] - ym, np.zeros(p)], rcond=None)[0]
        err[te] = y[te] - ym - Z[te] @ beta
        de[te] = b.predict_atol(X[te])
    return err, de


def refit_loo_rtol(Xs, y, lam: float, *, fit_intercept: bool = True, labels=None,
                   extra_eps: float = 0.0, standardize: bool = False) -> float:
    """Relative error of a pooled leave-one-out (or K-fold) MSE from refits
    (:func:`refit_errors`): ``2 max|de| / rms(e) + (max|de| / rms(e))^2``
    (``|a^2 - b^2| = |a - b| |a + b|``) plus ``2 gamma_n`` for the mean."""
    err, de = refit_errors(Xs, y, lam, fit_intercept=fit_intercept, labels=labels,
                           extra_eps=extra_eps, standardize=standardize)
    q = de.max() / math.sqrt(np.mean(err**2))
    return 2 * q + q * q + 2 * gamma(err.size)


def refit_fold_rtol(X, y, lam: float, labels, **kw) -> np.ndarray:
    """Per-fold relative error of the held-out MSEs from refits, as
    :func:`refit_loo_rtol` fold by fold (folds in label order)."""
    err, de = refit_errors(X, y, lam, labels=labels, **kw)
    labels = np.asarray(labels)
    out = []
    for f in np.unique(labels):
        te = labels == f
        q = de[te].max() / math.sqrt(np.mean(err[te] ** 2))
        out.append(2 * q + q * q + 2 * gamma(int(te.sum())))
    return np.array(out)


@dataclass(frozen=True)
class LimitGap:
    """How far the criteria at a small ``lam`` may lie from their ``lam -> 0+``
    limits in exact arithmetic (see :func:`limit_gap`): ``mse`` absolute,
    ``df`` absolute, ``gcv`` and ``loo`` relative."""

    tau: float
    mse: float
    df: float
    gcv: float
    loo: float


def limit_gap(X, y, lam: float, *, standardize: bool = True,
              fit_intercept: bool = True) -> LimitGap:
    """Exact-arithmetic distance between the ridge criteria at ``lam`` and at
    ``lam -> 0+``, from the shrinkage complements ``t_j = lam / (d_j^2 + lam)``
    which all lie in ``[0, tau]``, ``tau = lam / d_r^2`` (a fact of the SVD).

    * ``RSS = RSS_0 + sum t_j^2 c_j^2`` (``c = U^T y``): moves by ``<= tau^2 ||c||^2``;
    * ``df = df_0 - sum t_j``: moves by ``<= r tau``;
    * GCV: below full row rank, numerator and ``(m - df)^2`` move by the
      above; at full row rank ``GCV = m sum s_j^2 (1 - t_j)^2 c_j^2 /
      (sum s_j (1 - t_j))^2`` with ``s_j = d_j^-2``, so it lies within a factor
      ``(1 - tau)^{-2}`` of its limit;
    * LOO residuals ``e_i = r_i / (1 - h_i)``: ``r_i`` moves by
      ``<= tau |U_i| |c|`` and ``1 - h_i`` by ``<= tau ||U_i||^2``; rows of
      leverage one at the limit are ratios ``sum s_j (1 - t_j) U_ij c_j /
      sum s_j (1 - t_j) U_ij^2``, numerator moving by
      ``tau sum s_j |U_ij c_j|`` and the denominator within ``(1 - tau)``.
    """
    X = np.asarray(X, dtype=float)
    y = np.asarray(y, dtype=float).ravel()
    m, p = X.shape
    center = X.mean(axis=0) if fit_intercept else np.zeros(p)
    scale = X.std(axis=0) if standardize else np.ones(p)
    Z = (X - center) / np.where(scale > 0, scale, 1.0)
    yc = y - (y.mean() if fit_intercept else 0.0)
    u, d, _ = np.linalg.svd(Z, full_matrices=False)
    r = int(np.sum(d > max(m, p) * 2 * U * d[0]))
    u, d = u[:, :r], d[:r]
    c = u.T @ yc
    tau = lam / d[-1] ** 2
    r0 = yc - u @ c
    rss0 = float(r0 @ r0)
    cn = float(np.linalg.norm(c))
    one0 = 1.0 - (1.0 / m if fit_intercept else 0.0) - np.sum(u * u, axis=1)
    full = one0 <= m * m * U
    s = 1.0 / d**2
    e0 = np.empty(m)
    de = np.empty(m)
    nf = ~full
    e0[nf] = r0[nf] / one0[nf]
    # |d r_i| <= tau |U_i . |c||; |d(1 - h_i)| <= tau ||U_i||^2
    dri = tau * (np.abs(u) @ np.abs(c))
    dhi = tau * np.sum(u * u, axis=1)
    de[nf] = (dri[nf] + np.abs(e0[nf]) * dhi[nf]) / np.maximum(one0[nf] - dhi[nf], 0.0)
    if full.any():
        num = u[full] @ (s * c)
        den = (u[full] ** 2) @ s
        e0[full] = num / den
        de[full] = (tau * (np.abs(u[full]) @ (s * np.abs(c))) / ((1 - tau) * den)
                    + np.abs(e0[full]) * tau / (1 - tau))
    qe = float(np.linalg.norm(de) / np.linalg.norm(e0))
    loo = 2 * qe + qe * qe
    rdf = m - fit_intercept - r
    if rdf == 0:
        gcv = (1.0 - tau) ** -2 - 1.0
    else:
        gcv = (1 + tau**2 * cn**2 / rss0) * (1 + r * tau / rdf) ** 2 - 1.0
    return LimitGap(tau=tau, mse=tau**2 * cn**2 / m, df=r * tau, gcv=gcv, loo=loo)


def singular_vector_bound(d, eps: float, *, gram: bool = False) -> float:
    """Largest entrywise difference of ``|u_j|`` (or ``|v_j|``) between the exact
    and a computed singular vector, for a backward-stable factorization.

    Wedin's sin-theta theorem (Stewart and Sun 1990, Theorem V.4.4; Golub and
    Van Loan 2013, Theorem 8.6.5): a perturbation ``E`` turns the ``j``-th
    singular vector by ``sin theta <= ||E|| / gap_j`` with ``gap_j`` the distance
    from ``d_j`` to the other singular values; entries change by at most
    ``sqrt(2) sin theta``.  ``||E|| <= eps d_1`` for an SVD; through the Gram
    matrix the eigenvector of ``d_j^2`` turns by ``eps d_1^2 / gap(d^2)``
    (Theorem 8.1.12).
    """
    d = np.sort(np.asarray(d, dtype=float))[::-1]
    if gram:
        d2 = d**2
        gap = np.min(np.abs(np.diff(d2))) if d.size > 1 else d2[0]
        return float(math.sqrt(2) * eps * d2[0] / gap)
    gap = np.min(np.abs(np.diff(d))) if d.size > 1 else d[0]
    return float(math.sqrt(2) * eps * d[0] / gap)


def orthonormality_bound(m: int, q: int, kappa: float, *, gram: bool = False) -> float:
    """``||Q^T Q - I||`` for the factors of a backward-stable SVD: Householder
    based factors are orthonormal to ``gamma~_{mq}`` (Higham 2002 section 19.3,
    with the rule of thumb :func:`backward_eps`); a Gram route forms
    ``U = Z V D^-1``, whose ``U^T U - I = D^-1 V^T E V D^-1`` with
    ``||E|| <= eps d_1^2``: ``kappa^2`` times more."""
    return backward_eps(m, q) * (1.0 + (kappa**2 if gram else 0.0))


def centering_atol(X) -> np.ndarray:
    """Entrywise error of a centered column (``X - mean`` in numpy, or a
    Householder reflector applied to ``X``): at most ``gamma_{6n} ||x_j||``.

    Higham (2002) Lemma 19.2: applying a computed reflector to a vector ``x``
    errs by at most ``gamma~_{cn} ||x||`` with a small constant (we take
    ``c = 6``); explicit centering errs by ``u |x_ij| + gamma_n mean|x_j|``, less.
    The error is relative to the raw column's size, not to its spread.
    """
    X = np.asarray(X, dtype=float)
    return gamma(6 * X.shape[0]) * np.linalg.norm(X, axis=0)


def gram_atol(X, Y=None) -> np.ndarray:
    """Entrywise difference between two computations of the centered cross
    products ``Xc^T Yc`` (two centerings, :func:`centering_atol`, and two
    ``n``-term inner products, ``gamma_n |xc|^T |yc|``, Higham 2002 section 3.1)."""
    X = np.asarray(X, dtype=float)
    Y = X if Y is None else np.asarray(Y, dtype=float)
    n = X.shape[0]
    cx, cy = centering_atol(X), centering_atol(Y)
    nx = np.linalg.norm(X - X.mean(axis=0), axis=0)
    ny = np.linalg.norm(Y - Y.mean(axis=0), axis=0)
    return (2 * (np.outer(cx, ny) + np.outer(nx, cy) + np.sqrt(n) * np.outer(cx, cy))
            + 2 * gamma(n) * np.outer(nx, ny))


def assert_within(actual, desired, atol, rtol=0.0) -> None:
    """``|actual - desired| <= atol + rtol |desired|`` elementwise, where
    ``atol`` / ``rtol`` may be arrays (numpy's ``assert_allclose`` formats them
    as scalars); the message names the worst entry and its ratio to the bound."""
    a = np.asarray(actual, dtype=float)
    b = np.asarray(desired, dtype=float)
    tol = np.asarray(atol, dtype=float) + np.asarray(rtol, dtype=float) * np.abs(b)
    diff = np.abs(a - b)
    bad = ~(diff <= tol)
    if np.any(bad):
        ratio = np.where(tol > 0, diff / np.where(tol > 0, tol, 1.0), np.inf)
        k = np.unravel_index(int(np.argmax(np.where(bad, ratio, -1.0))), bad.shape) if bad.ndim else ()
        raise AssertionError(f"{int(bad.sum())} of {bad.size} entries outside the bound; worst "
                             f"at {k}: |{a[k]!r} - {b[k]!r}| = {diff[k]:.3g} > {np.broadcast_to(tol, bad.shape)[k]:.3g}")


def weighted_ridge_bounds(X, y, w, lam: float, *, standardize: bool = True,
                          fit_intercept: bool = True, solvers: int = 2,
                          gram: bool = False) -> RidgeBounds:
    """:func:`ridge_bounds` for weighted ridge, ``sum_i w_i (y_i - b0 - x_i^T b)^2 +
    lam ||b||^2``: after weighted centering (and weighted population-SD scaling) it is
    unweighted ridge on the rows scaled by ``sqrt(w_i)``, so the same theorems apply to
    that design; the returned bounds are mapped back to the original rows (centre,
    scales and weighted mean of ``y``) for intercepts and predictions."""
    import dataclasses

    X = np.asarray(X, dtype=float)
    y = np.asarray(y, dtype=float).ravel()
    w = np.asarray(w, dtype=float)
    p = X.shape[1]
    mu = np.average(X, axis=0, weights=w) if fit_intercept else np.zeros(p)
    ym = float(np.average(y, weights=w)) if fit_intercept else 0.0
    sd = np.sqrt(np.average((X - mu) ** 2, axis=0, weights=w)) if standardize else np.ones(p)
    sd = np.where(sd > 0, sd, 1.0)
    sw = np.sqrt(w)[:, None]
    b = ridge_bounds(sw * (X - mu) / sd, sw[:, 0] * (y - ym), lam, standardize=False,
                     fit_intercept=False, solvers=solvers, gram=gram)
    zbar = mu / sd
    icpt = (float(np.linalg.norm(zbar)) * b.coef_std * b.coef_std_norm
            + gamma(p + 1) * (abs(ym) + float(np.linalg.norm(zbar)) * b.coef_std_norm))
    return dataclasses.replace(b, coef=b.coef_std * float(sd.max() / sd.min()), intercept=icpt,
                               center=mu, scale=sd, ybar=ym,
                               coef_norm=b.coef_std_norm / float(sd.min()))


# ------------------------------------------------------- engines against each other

class TargetView:
    """One target's view of a multi-target path (``j`` None: the path itself)."""

    def __init__(self, path, j):
        self.p, self.j = path, j

    def _pick(self, a):
        a = np.asarray(a)
        return a if self.j is None else a[..., self.j]

    def __getattr__(self, name):
        if name == "min_norm":
            return TargetView(self.p.min_norm, self.j)
        if name == "predict":
            return lambda X, lam: self._pick(self.p.predict(X, lam))
        if name in ("lambdas", "singular_values", "df"):
            return getattr(self.p, name)
        return self._pick(getattr(self.p, name))


class RecordView:
    """A summary.json record read as a path (its arrays by name)."""

    def __init__(self, rec):
        self.r = rec

    def __getattr__(self, name):
        return np.asarray(self.r[name], dtype=float)


def grid_rtol(X, y, lams, *, gram=True, **kw):
    """How far two default grids of one problem may differ: each end is brentq's root of
    df(lam) = target on log lam (xtol 1e-12, rtol 4 eps; Brent stops within twice it,
    paths/core/grid.py), moved by the df error of the route (ridge_bounds.df, the Gram term
    when a route forms X^T X) over |d df / d log lam|; geomspace adds a few u."""
    b0 = ridge_bounds(X, y, 1.0, **kw)
    Z = (X - b0.center) / b0.scale
    d = np.linalg.svd(Z, compute_uv=False)
    d = d[d > max(X.shape) * 2 * U * d[0]]
    tol = 0.0
    for lam in (lams[0], lams[-1]):
        slope = np.sum(d**2 * lam / (d**2 + lam) ** 2)
        b = ridge_bounds(X, y, lam, gram=gram, **kw)
        tol = max(tol, 4 * (1e-12 + 8 * U * abs(np.log(lam))) + b.df / slope)
    return tol + 8 * U


def check_same_path(res, ref, X, y, fields, *, Xt=None, yt=None, gram=True, cv_labels=None,
                    **kw):
    """Field by field and penalty by penalty, ``res`` (a streamed / Gram route) and ``ref``
    (the in-memory SVD route) within error_bounds.ridge_bounds with the Gram term (which
    covers both routes), two solvers; the penalties themselves within grid_rtol, whose
    effect on the solution is at most as large relative (|d log b / d log lam| <= 1) and on
    the criteria at most 4 times (RSS's <= 2, (n - df)^-2's <= 2)."""
    lams = np.asarray(ref.lambdas)
    g = grid_rtol(X, y, lams, gram=gram, **kw) if "lambdas" in fields else 0.0
    if "lambdas" in fields:
        _np_testing.assert_allclose(res.lambdas, lams, rtol=g)  # bound: grid_rtol
    for i, lam in enumerate(lams):
        b = ridge_bounds(X, y, lam, gram=gram, **kw)
        if "coef" in fields:
            assert np.linalg.norm(res.coef[i] - ref.coef[i]) <= (b.coef + g) * b.coef_norm
        if "intercept" in fields:
            _np_testing.assert_allclose(res.intercept[i], ref.intercept[i], rtol=g, atol=b.intercept)
        if "df" in fields:
            _np_testing.assert_allclose(res.df[i], ref.df[i], rtol=g, atol=b.df)
        for name, tol in (("train_mse", b.mse), ("gcv", b.gcv), ("loo_mse", b.loo)):
            if name in fields:
                _np_testing.assert_allclose(getattr(res, name)[i], getattr(ref, name)[i], rtol=tol + 4 * g)
        if "cv_mse" in fields:
            # K-fold: both within the refits' bound, the Gram route's extra kappa eps_b as a
            # backward error (refit_loo_rtol over the folds, on the globally scaled design)
            Zs = X / (X.std(axis=0) if kw.get("standardize", True) else 1.0)
            tol = refit_loo_rtol(Zs, y, lam, labels=cv_labels, extra_eps=b.kappa * backward_eps(*X.shape))
            _np_testing.assert_allclose(res.cv_mse[i], ref.cv_mse[i], rtol=2 * tol + 4 * g)
        if "coef_norm" in fields:
            _np_testing.assert_allclose(res.coef_norm[i], ref.coef_norm[i],
                                        rtol=b.coef + g + 2 * gamma(X.shape[1]))
        if "test_mse" in fields:
            # |a^2 - b^2| = |a - b| |a + b| with the predictions within predict_atol
            q = b.predict_atol(Xt) / math.sqrt(float(ref.test_mse[i]))
            _np_testing.assert_allclose(res.test_mse[i], ref.test_mse[i],
                                        rtol=2 * q + q * q + 2 * gamma(len(yt)) + 4 * g)
    if "singular_values" in fields:
        d = np.asarray(ref.singular_values)
        eb = backward_eps(*X.shape)
        sv = singular_value_bound(d[0] / d, eb, gram=gram) + singular_value_bound(d[0] / d, eb)
        assert np.all(np.abs(np.asarray(res.singular_values) / d - 1) <= sv)


def check_same_min_norm(res, ref, X, y, *, Xt=None, yt=None, gram=True, **kw):
    """The lam -> 0+ limits of two routes (``res.min_norm`` against ``ref.min_norm``) within
    ridge_bounds at 0 (two solvers, the Gram term covering both routes): coefficients
    normwise, intercept, training MSE absolutely (0 at full row rank), GCV, LOO, test MSE."""
    b = ridge_bounds(X, y, 0.0, gram=gram, **kw)
    mr, mf = res.min_norm, ref.min_norm
    assert np.linalg.norm(np.asarray(mr.coef) - mf.coef) <= b.coef * np.linalg.norm(mf.coef)
    _np_testing.assert_allclose(mr.intercept, mf.intercept, rtol=0, atol=b.intercept)
    _np_testing.assert_allclose(mr.train_mse, mf.train_mse, rtol=2 * gamma(X.shape[0]),
                                atol=b.mse_abs)
    _np_testing.assert_allclose(mr.gcv, mf.gcv, rtol=b.gcv)
    _np_testing.assert_allclose(mr.loo_mse, mf.loo_mse, rtol=b.loo)
    if Xt is not None:
        q = b.predict_atol(Xt) / math.sqrt(float(mf.test_mse))
        _np_testing.assert_allclose(mr.test_mse, mf.test_mse,
                                    rtol=2 * q + q * q + 2 * gamma(len(yt)))
    if hasattr(mf, "coef_norm"):
        _np_testing.assert_allclose(mr.coef_norm, mf.coef_norm,
                                    rtol=b.coef + 2 * gamma(X.shape[1]))
