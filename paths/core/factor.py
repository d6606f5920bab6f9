"""One factorization per dataset: the thin SVD of the reduced design.

Two routes reach the same factors :math:`Z = U D V^T`:

``"svd"``
    LAPACK ``gesdd`` on :math:`Z` (``gesvd`` if ``gesdd`` fails to converge).
    Backward stable: every singular value carries an absolute error of order
    :math:`\\varepsilon\\, d_1`, whatever the conditioning.
``"gram"``
    The symmetric eigendecomposition of the smaller Gram matrix,
    :math:`Z Z^T` when :math:`m < p`, :math:`Z^T Z` otherwise, and the other
    factor from one matrix product.  About five times faster, but forming the
    Gram matrix squares the condition number: a singular value :math:`d_j` comes
    out with relative error of order :math:`\\max(m, p)\\,\\varepsilon\\,
    (d_1/d_j)^2`, so values below about :math:`\\sqrt{\\varepsilon}\\, d_1` have
    no correct digits.  Those are the ones that govern the minimum-norm fit
    near :math:`p \\approx n`.

``solver="auto"`` takes the Gram route only when the condition number of the
design is at most ``gram_max_cond`` (default 10).  Solving through the Gram
matrix has an error bound about :math:`\\kappa` times that of the backward-stable
SVD (normal equations against orthogonal factorizations; Higham, *Accuracy and
Stability of Numerical Algorithms*, 2nd ed., SIAM 2002, ch. 20), at most ten
times at :math:`\\kappa \\le 10`; otherwise ``auto`` falls back to the SVD route.
Measured (``benchmarks/bench_gram_accuracy.py``), the Gram route keeps at least
13.4 significant digits of the minimum-norm coefficients at :math:`\\kappa \\le
10`, 0.1 to 1 digit (median) and up to 1.9 digits (worst design) fewer than the
SVD route on the same design, a loss that comes from forming the Gram matrix
and does not shrink with :math:`\\kappa`.  A forced ``"gram"`` route drops the
singular values it cannot resolve with a :class:`RankCutWarning`.  Random designs away
from :math:`p = n` pass (a 400 × 4000 Gaussian design has :math:`\\kappa \\approx 2`);
polynomial bases, spectra, collinear economic series and square designs do not.
"""
from __future__ import annotations

from dataclasses import dataclass

import warnings

import numpy as np
import scipy.linalg as sla
from scipy.linalg import lapack

__all__ = ["Factorization", "factorize", "SOLVERS", "RankCutWarning"]


class RankCutWarning(UserWarning):
    """A forced Gram route dropped singular values it cannot resolve."""

SOLVERS = ("auto", "svd", "gram")
_EPS = np.finfo(np.float64).eps


@dataclass(frozen=True)
class Factorization:
    """Thin SVD :math:`Z = U D V^T` of a reduced design, truncated at its rank.

    Attributes
    ----------
    u : ndarray, shape (m, r)
        Left singular vectors, in the reduced coordinates of the design.
    d : ndarray, shape (r,)
        Singular values above the rank tolerance, descending.
    vt : ndarray, shape (r, q)
        Right singular vectors (rows).
    rank : int
        Number of singular values above ``tol``.
    tol : float
        Rank tolerance used, ``rtol * d_max``.
    d_max, d_min : float
        Largest singular value, and the smallest one the route computed
        (including those dropped as numerically zero).
    solver : str
        Route taken: ``"svd"``, ``"svd-gesvd"`` (fallback) or ``"gram"``.
    reason : str
        Why ``solver="auto"`` took that route (or "requested").
    """

    u: np.ndarray
    d: np.ndarray
    vt: np.ndarray
    rank: int
    tol: float
    d_max: float
    d_min: float
    solver: str
    reason: str

    @property
    def condition_number(self) -> float:
        """:math:`d_1 / d_r` over the ``rank`` retained singular values (inf if rank 0).

        It covers only the values kept: those at or below ``tol`` (numerically
        zero, or, on a forced Gram route, too small for that route to resolve)
        are not in it.  ``rank < min(m, q)`` says some were dropped.
        """
        return float(self.d[0] / self.d[-1]) if self.rank else float("inf")


def _svd(z: np.ndarray, overwrite: bool):
    try:
        u, d, vt = sla.svd(z, full_matrices=False, lapack_driver="gesdd",
                           check_finite=False, overwrite_a=overwrite)
        return u, d, vt, "svd"
    except np.linalg.LinAlgError:
        if overwrite:  # z may be destroyed: the caller rebuilds it and retries
            raise
        u, d, vt = sla.svd(z, full_matrices=False, lapack_driver="gesvd", check_finite=False)
        return u, d, vt, "svd-gesvd"


def _gram_eig(z: np.ndarray, screen: float | None = None):
    """Eigenvalues (descending, clipped at 0) and eigenvectors of the smaller Gram.

    Returns ``(w, vec, None)``; ``(None, None, None)`` when the Gram matrix is
    not finite; ``(None, None, bound)`` when ``screen`` is given and
    :func:`_cond_lower_bound` proves the condition number exceeds twice it
    (the eigendecomposition, about 30 Cholesky factorizations' worth of work,
    is then skipped: its only use would be to reject the route).
    """
    m, q = z.shape
    with np.errstate(over="ignore", invalid="ignore"):
        g = z @ z.T if m < q else z.T @ z
    if not np.all(np.isfinite(g)):
        return None, None, None
    if screen is not None:
        bound = _cond_lower_bound(g)
        if bound > 2.0 * screen:
            return None, None, bound
    w, vec = sla.eigh(g, check_finite=False, overwrite_a=True)
    return np.maximum(w[::-1], 0.0), vec[:, ::-1], None


def _cond_lower_bound(g: np.ndarray, steps: int = 3) -> float:
    """A lower bound on :math:`\\kappa = \\sqrt{w_{\\max}/w_{\\min}}` of a Gram matrix.

    Both ends are Rayleigh quotients, so the bound holds for any vectors:
    :math:`w_{\\max} \\ge \\max_j g_{jj}` and
    :math:`w_{\\min} \\le x^T g x / x^T x` with ``x`` from ``steps`` steps of
    inverse iteration on the Cholesky factor (LAPACK ``potrf``/``potrs``,
    :math:`O(m^3/3 + m^2)`).  A failed Cholesky factorization means ``g`` is
    not numerically positive definite (:math:`w_{\\min} \\lesssim m\\,
    \\varepsilon\\, w_{\\max}`): the bound is then infinite.
    """
    c, info = lapack.dpotrf(g, lower=0, clean=0, overwrite_a=0)
    if info != 0:
        return np.inf
    x = np.random.default_rng(0).standard_normal((g.shape[0], 1))
    for _ in range(steps):
        x, info = lapack.dpotrs(c, x, lower=0)
        if info != 0 or not np.all(np.isfinite(x)):
            return np.inf
        x /= np.max(np.abs(x))
    wmin_up = float((x.T @ (g @ x))[0, 0] / (x.T @ x)[0, 0])
    wmax_lo = float(np.max(np.diagonal(g)))
    if wmin_up <= 0.0:
        return np.inf
    return float(np.sqrt(wmax_lo / wmin_up))


def factorize(
    z: np.ndarray,
    *,
    solver: str = "auto",
    rtol: float | None = None,
    gram_max_cond: float = 10.0,
    overwrite: bool = False,
) -> Factorization:
    """Thin SVD of a reduced design by the most economical accurate route.

    Parameters
    ----------
    z : ndarray, shape (m, q)
        Finite design (validated upstream).
    solver : {"auto", "svd", "gram"}
        Route; see the module notes.
    rtol : float, optional
        Relative rank tolerance: singular values at or below ``rtol * d_max`` are
        treated as zero.  Default ``max(m, q) * eps`` (numpy's ``pinv`` and
        ``matrix_rank`` default).  A forced Gram route raises it to at least
        ``sqrt(max(m, q) * eps)``, the smallest value that route resolves.
    overwrite : bool
        Allow the factorization to destroy ``z`` (saves one copy of the design: the
        Gram route writes the other factor over it, the SVD route lets LAPACK use it).  If
        ``gesdd`` then fails to converge, :class:`numpy.linalg.LinAlgError` is
        raised so the caller can rebuild ``z`` and retry without it (the retry
        falls back to ``gesvd``).
    gram_max_cond : float
        Largest condition number :math:`d_1/d_{\\min}` at which ``"auto"``
        accepts the Gram route.

    Returns
    -------
    Factorization

    Notes
    -----
    The condition number is read off the Gram eigenvalues,
    :math:`\\kappa = \\sqrt{w_{\\max}/w_{\\min}}`; near 10 it is accurate to
    many digits, and a computed eigenvalue of zero sends ``"auto"`` to the SVD route.

    Examples
    --------
    >>> import numpy as np
    >>> f = factorize(np.eye(3)[:, :2])
    >>> f.rank, f.d.tolist()
    (2, [1.0, 1.0])
    """
    if solver not in SOLVERS:
        from paths.data.validation import InputError

        raise InputError(f"solver must be one of {', '.join(SOLVERS)}; got {solver!r}")
    m, q = z.shape
    if rtol is None:
        rtol = max(m, q) * _EPS
    reason = "requested"
    if solver in ("auto", "gram") and min(m, q) > 0:
        w, vec, bound = _gram_eig(z, screen=gram_max_cond if solver == "auto" else None)
        if bound is not None:
            reason = (f"SVD route: condition number >= {bound:.3g} > {gram_max_cond:g}, "
                      "too large for the Gram route (bound from a Cholesky factor of the "
                      "Gram matrix)")
        elif w is None:
            if solver == "gram":
                from paths.data.validation import InputError

                raise InputError(
                    "the Gram matrix overflows for this design; use solver='svd' "
                    "or standardize the columns"
                )
            reason = "Gram matrix not finite (extreme scale): SVD route"
        else:
            wmax, wmin = w[0], w[-1]
            cond = np.sqrt(wmax / wmin) if wmin > 0 else np.inf
            if solver == "gram" or cond <= gram_max_cond:
                if solver == "auto":
                    reason = (f"Gram route: condition number {cond:.3g} <= {gram_max_cond:g} "
                              "(at most one digit below the SVD route)")
                return _from_gram(z, w, vec, rtol, reason, forced=solver == "gram",
                                  overwrite=overwrite)
            reason = (f"SVD route: condition number {cond:.3g} > {gram_max_cond:g}, "
                      "too large for the Gram route")
    if min(m, q) == 0:
        return Factorization(np.zeros((m, 0)), np.zeros(0), np.zeros((0, q)), 0, 0.0,
                             0.0, 0.0, "svd", reason)
    u, d, vt, route = _svd(z, overwrite)
    dmax = float(d[0]) if d.size else 0.0
    tol = rtol * dmax
    r = int(np.count_nonzero(d > tol))
    return _finish(u[:, :r], d[:r], vt[:r], r, tol, dmax, float(d[-1]), route, reason)


def _from_gram(z, w, vec, rtol, reason, forced, overwrite=False):
    m, q = z.shape
    d_all = np.sqrt(w)
    dmax = float(d_all[0])
    # A forced Gram route cannot resolve singular values below ~sqrt(max(m, q) eps) d_max;
    # under "auto" every one is >= d_max / gram_max_cond, so the stated tolerance stands.
    tol = (max(rtol, np.sqrt(max(m, q) * _EPS)) if forced else rtol) * dmax
    r = int(np.count_nonzero(d_all > tol))
    if forced and 0 < r < min(m, q):
        reason = _warn_rank_cut(r, min(m, q), tol, dmax, rtol)
    d = d_all[:r]
    if m < q:  # g = Z Z^T = U D^2 U^T ;  V^T = D^-1 U^T Z
        u = np.ascontiguousarray(vec[:, :r])
        vt = _product_into(z, u.T, d, by_rows=False) if overwrite else u.T @ z
        if not overwrite:
            vt /= d[:, None]  # in place: one design-sized array, not two
    else:  # g = Z^T Z = V D^2 V^T ;  U = Z V D^-1
        vt = np.ascontiguousarray(vec[:, :r].T)
        u = _product_into(z, vt.T, d, by_rows=True) if overwrite else z @ vt.T
        if not overwrite:
            u /= d
    return _finish(u, d, vt, r, tol, dmax, float(d_all[-1]), "gram", reason)


def _product_into(z: np.ndarray, f: np.ndarray, d: np.ndarray, *, by_rows: bool,
                  block_bytes: int = 8 << 20) -> np.ndarray:
    """The other factor written over ``z`` block by block: no second design-sized array.

    ``by_rows`` (tall): :math:`U = Z V D^{-1}`, row block by row block, into the first
    ``r`` columns of ``z``; else (wide): :math:`V^T = D^{-1} U^T Z`, column block by
    column block, into the first ``r`` rows.  Each block's product is formed from the
    block's original values before they are overwritten; the products are the same
    sums as the whole-matrix product, in blocks.
    """
    m, q = z.shape
    r = d.size
    if by_rows:
        step = max(1, block_bytes // (8 * max(r, 1)))
        for s in range(0, m, step):
            blk = z[s:s + step] @ f
            blk /= d
            z[s:s + step, :r] = blk
        return z if r == q else np.ascontiguousarray(z[:, :r])
    step = max(1, block_bytes // (8 * max(r, 1)))
    for s in range(0, q, step):
        blk = f @ z[:, s:s + step]
        blk /= d[:, None]
        z[:r, s:s + step] = blk
    return z[:r]


def _warn_rank_cut(r: int, full: int, tol: float, dmax: float, rtol: float) -> str:
    """Warn that a forced Gram route kept rank ``r`` of ``full``; return the reason.

    Forming the Gram matrix moves each eigenvalue :math:`d_j^2` by about
    :math:`\\varepsilon\\, d_1^2` (Golub & Van Loan 2013, Theorem 8.1.4), so a
    singular value below :math:`\\sqrt{\\max(m, q)\\,\\varepsilon}\\, d_1` cannot be
    told from zero there: the route keeps rank ``r`` and the condition number
    covers the kept values only.
    """
    msg = (f"solver='gram' kept rank {r} of {full}: the {full - r} smallest singular "
           f"value(s) are at or below {tol:.3g} (= {tol / dmax:.2g} x d_max), which the "
           "Gram route cannot tell from zero; the condition number covers the kept "
           f"values only; use solver='svd' to resolve them down to {rtol * dmax:.3g}")
    warnings.warn(msg, RankCutWarning, stacklevel=4)
    return f"requested; {msg}"


def _finish(u, d, vt, r, tol, dmax, dmin, route, reason):
    for a in (u, d, vt):
        a.flags.writeable = False
    return Factorization(u=u, d=d, vt=vt, rank=r, tol=float(tol), d_max=dmax, d_min=dmin,
                         solver=route, reason=reason)
