"""Preprocessing: centering (the unpenalized intercept) and optional scaling.

The intercept is removed exactly by an orthogonal change of coordinates rather
than by subtracting column means alone.  With the Householder reflector

.. math:: Q = I - 2 v v^T / (v^T v), \\qquad v = 1 + \\sqrt{n}\\, e_1,

which maps the all-ones vector to :math:`-\\sqrt{n}\\, e_1`, the first row of
:math:`Q X_c` is zero and the remaining :math:`m = n - 1` rows, ``z``, carry
the centered design in an orthonormal basis of :math:`1^\\perp`.  The centered
design therefore never has the structural zero singular value that centering
creates when :math:`p \\ge n - 1`; the numerical rank of ``z`` is the rank of
the centered design, with no rounding-level singular value left to mistake for
signal.  Norms and inner products are unchanged, so every criterion computed
in these coordinates equals the one on :math:`X_c`.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.linalg as sla
from scipy.linalg import lapack

from paths.data.validation import column_range

__all__ = ["Design", "FixedSpan", "prepare", "prepare_weighted", "to_sample_space",
           "column_norms", "reduce_rows"]

_EPS = np.finfo(np.float64).eps


def _readonly(*arrays):
    for a in arrays:
        a.flags.writeable = False


@dataclass(frozen=True)
class Design:
    """How a design was centered and scaled, and the response in reduced coordinates.

    The reduced design itself (``z``, shape (m, q): :math:`m = n - 1` rows with an
    intercept, :math:`m = n` without, on the ``q`` active columns) is returned
    beside it by :func:`prepare` and handed to the factorization, which may
    overwrite it; it is not kept.

    Attributes
    ----------
    zy : ndarray, shape (m, t)
        The response in the same coordinates.
    x_mean : ndarray, shape (p,)
        Column means (zeros without an intercept).
    x_scale : ndarray, shape (p,)
        Column scales: population SDs (ddof=0) when standardizing, else ones.
        Constant columns keep scale 1.
    y_mean : ndarray, shape (t,)
        Response means (zeros without an intercept).
    active : ndarray of bool, shape (p,)
        Columns that enter the fit; with an intercept, constant columns are
        identically zero after centering and are left out (coefficient 0).
    n_samples : int
    fit_intercept, standardize : bool
    span : FixedSpan or None
        With row weights or unpenalized columns: the unpenalized span (intercept
        and unpenalized columns) in weighted sample space, projected out of
        ``z`` and ``zy`` (:func:`prepare`).  None for the plain problem, whose
        intercept is the reflection of the ones vector.
    unpenalized : ndarray of bool, shape (p,), or None
        Non-constant columns left unpenalized (not in ``active``).
    sample_weight : ndarray, shape (n,), or None
    penalty_factor : ndarray, shape (p,), or None
        Relative penalties: column j is penalized by ``penalty_factor[j] * lambda``;
        already folded into ``x_scale`` (a factor :math:`\\sqrt{w_j}`).
    """

    zy: np.ndarray
    x_mean: np.ndarray
    x_scale: np.ndarray
    y_mean: np.ndarray
    active: np.ndarray
    n_samples: int
    fit_intercept: bool
    standardize: bool
    span: "FixedSpan | None" = None
    unpenalized: np.ndarray | None = None
    sample_weight: np.ndarray | None = None
    penalty_factor: np.ndarray | None = None

    @property
    def n_features(self) -> int:
        return self.x_mean.shape[0]

    @property
    def n_fixed(self) -> int:
        """Unpenalized parameters: the intercept and the unpenalized columns (df counts them)."""
        return self.span.c if self.span is not None else int(self.fit_intercept)

    @property
    def total_weight(self) -> float:
        """:math:`\\sum_i w_i` (n without weights): the denominator of every mean error."""
        return self.span.total_weight if self.span is not None else float(self.n_samples)

    @property
    def constant(self) -> np.ndarray:
        """Indices of the constant columns left out of the fit."""
        left = ~self.active
        if self.unpenalized is not None:
            left &= ~self.unpenalized
        return np.flatnonzero(left)

    def transform(self, X: np.ndarray) -> np.ndarray:
        """Center and scale new rows the way the training rows were (active columns)."""
        a = self.active
        # one new array, centered and scaled in place (the same operations, the same numbers)
        z = np.array(X, dtype=np.float64) if a.all() else np.asarray(X[:, a], dtype=np.float64)
        z -= self.x_mean[a]
        z /= self.x_scale[a]
        return z


def reduce_rows(A: np.ndarray, mean: np.ndarray) -> np.ndarray:
    """The reduced rows ``(Q (A - mean))[1:]``, shape (n - 1, ...), a new array.

    Centered first, :math:`B = A - \\bar a` (rounded at the scale of the centered
    values), then reflected exactly: for :math:`i \\ge 1`,
    :math:`(QB)_i = B_i - w` with
    :math:`w = (\\sum_i B_i + \\sqrt n B_0)/(\\sqrt n (1 + \\sqrt n))`, where the
    computed column sums of :math:`B` (rounding, not zero) are kept.  A rounding
    error in the mean is then a shift along the ones vector, which the
    reflection removes; shifting the rows by a rounded
    :math:`\\bar a + (A_0 - \\bar a)/(1 + \\sqrt n)` in one step instead leaves
    errors of order :math:`\\varepsilon \\max|A|` in the reduced rows, which
    cost the minimum-norm fit a factor :math:`\\max|A| / \\max|B|` in accuracy
    (issue 11).  Two subtractions per entry; no temporary of the size of ``A``.
    """
    n = A.shape[0]
    rn = np.sqrt(n)
    Z = np.subtract(A[1:], mean)
    b0 = A[0] - mean
    w = (Z.sum(axis=0) + b0 + rn * b0) / (rn * (1.0 + rn))
    Z -= w
    return Z


def to_sample_space(a: np.ndarray, fit_intercept: bool) -> np.ndarray:
    """Map reduced coordinates (m, ...) back to sample space (n, ...).

    Returns :math:`Q [0; a]`, orthogonal to the ones vector when
    ``fit_intercept``; the identity otherwise.
    """
    if not fit_intercept:
        return a
    m = a.shape[0]
    n = m + 1
    rn = np.sqrt(n)
    s = a.sum(axis=0)
    out = np.empty((n,) + a.shape[1:], dtype=np.float64)
    out[0] = -s / rn
    out[1:] = a - s / (n + rn)
    return out


def prepare(X: np.ndarray, Y: np.ndarray, *, fit_intercept: bool,
            standardize: bool) -> tuple[Design, np.ndarray]:
    """Center (and scale) a validated design and response.

    Parameters
    ----------
    X : ndarray, shape (n, p)
        Finite design (validated by the caller).
    Y : ndarray, shape (n, t)
        Finite response, two-dimensional.
    fit_intercept, standardize : bool

    Returns
    -------
    design : Design
    z : ndarray, shape (m, q)
        The reduced design (a new, writable array).

    Notes
    -----
    A column counts as constant when its population SD is at most
    :math:`n \\cdot \\varepsilon \\cdot \\max_i |x_{ij}|` (rounding level relative
    to its own magnitude, so the test is scale free).
    """
    n, p = X.shape
    x_min, x_max = column_range(X)
    g = _power_of_two_scales(x_min, x_max) if standardize else None
    if g is not None:  # extreme columns: exact rescaling, absorbed by the standardization
        design, z = prepare(X / g, Y, fit_intercept=fit_intercept, standardize=True)
        x_mean = design.x_mean * g
        scale = design.x_scale * g  # Z = (X/g - m)/s = (X - m g)/(s g)
        _readonly(x_mean, scale)
        return Design(zy=design.zy, x_mean=x_mean, x_scale=scale, y_mean=design.y_mean,
                      active=design.active, n_samples=n, fit_intercept=fit_intercept,
                      standardize=True), z
    absmax = np.maximum(x_max, -x_min)  # = max |x_ij|, without an |X|-sized temporary
    if fit_intercept:
        x_mean = X.mean(axis=0)
        y_mean = Y.mean(axis=0)
        Z = reduce_rows(X, x_mean)
        zy = reduce_rows(Y, y_mean)
        # norms of the centered columns, overflow-safe
        sd = column_norms(Z) / np.sqrt(n)
        active = sd > n * _EPS * absmax
        active &= x_max > x_min
    else:
        x_mean = np.zeros(p)
        y_mean = np.zeros(Y.shape[1])
        Z = X.copy()
        zy = Y.copy()
        sd = X.std(axis=0)
        active = np.ones(p, dtype=bool)
    scale = np.ones(p)
    if standardize:
        usable = sd > n * _EPS * absmax
        scale[usable] = sd[usable]
    if not active.all():
        Z = Z[:, active]
    if standardize:
        Z /= scale[active]
    _readonly(zy, x_mean, scale, y_mean, active)
    design = Design(
        zy=zy,
        x_mean=x_mean,
        x_scale=scale,
        y_mean=y_mean,
        active=active,
        n_samples=n,
        fit_intercept=fit_intercept,
        standardize=standardize,
    )
    return design, Z


def _power_of_two_scales(x_min: np.ndarray, x_max: np.ndarray) -> np.ndarray | None:
    """Powers of two that bring extreme columns (max |x| beyond 2**±400) near 1, else None.

    Dividing by a power of two is exact (IEEE 754), so standardizing ``X / g``
    gives the same standardized design as ``X`` would in exact arithmetic, while
    sums of n values near 1e308 no longer overflow and subnormal columns regain
    normal range.
    """
    absmax = np.maximum(x_max, -x_min)
    extreme = (absmax > 2.0**400) | ((absmax > 0) & (absmax < 2.0**-400))
    if not extreme.any():
        return None
    _, e = np.frexp(np.where(extreme, absmax, 1.0))
    return np.ldexp(1.0, np.where(extreme, e, 0).astype(int))


def column_norms(A: np.ndarray) -> np.ndarray:
    """Euclidean column norms, without overflow or underflow for extreme scales."""
    lo, hi = column_range(A)
    big = np.maximum(hi, -lo)  # max |a_ij|, no |A|-sized temporary
    if big.size and (big.max() > 1e150 or big[big > 0].min(initial=1.0) < 1e-150):
        safe = np.where(big > 0, big, 1.0)
        S = A / safe
        return big * np.sqrt(np.einsum("ij,ij->j", S, S))
    return np.sqrt(np.einsum("ij,ij->j", A, A))


# ------------------------------------------------ row weights, unpenalized columns
@dataclass(frozen=True)
class FixedSpan:
    """The unpenalized part of a weighted problem, projected out by one QR factorization.

    With row weights :math:`w` and unpenalized columns :math:`X_u`, the problem
    :math:`\\min \\sum_i w_i (y_i - b_0 - x_{u,i}\\gamma - x_i\\beta)^2 + \\lambda\\|\\beta\\|^2`
    is ordinary ridge on :math:`W^{1/2} y` and :math:`W^{1/2} X` with the
    unpenalized columns :math:`C = [\\sqrt w,\\ W^{1/2} X_u]` (the intercept's
    column is :math:`\\sqrt w`, not 1).  With the Householder QR
    :math:`C = Q_1 R` and :math:`Q = [Q_1\\ Q_2]`, the penalized problem lives in
    the :math:`m = n - c` coordinates :math:`Q_2^T`: there the design is ``z``,
    the response ``zy``, and every ridge formula applies unchanged; the
    unpenalized coefficients follow as
    :math:`[b_0; \\gamma] = R^{-1}(Q_1^T \\tilde y - Q_1^T \\tilde X \\beta)`.

    Attributes
    ----------
    reflectors : ndarray, shape (n, c)
        LAPACK ``geqrf`` output (Householder vectors below the diagonal).
    tau : ndarray, shape (c,)
    r : ndarray, shape (c, c)
        The triangular factor.
    q1 : ndarray, shape (n, c)
        Orthonormal basis of the unpenalized span in weighted sample space.
    sqrt_w : ndarray, shape (n,)
    qty : ndarray, shape (c, t)
        :math:`Q_1^T W^{1/2} y_c`.
    qtx : ndarray, shape (c, q)
        :math:`Q_1^T W^{1/2} X_c` on the penalized (scaled) columns.
    intercept : bool
        The first column of the span is :math:`\\sqrt w` (the intercept).
    total_weight : float
    """

    reflectors: np.ndarray
    tau: np.ndarray
    r: np.ndarray
    q1: np.ndarray
    sqrt_w: np.ndarray
    qty: np.ndarray
    qtx: np.ndarray
    intercept: bool
    total_weight: float

    @property
    def c(self) -> int:
        return int(self.tau.size)

    @property
    def leverage(self) -> np.ndarray:
        """Diagonal of the unpenalized part's hat matrix, :math:`\\|Q_{1,i}\\|^2`, shape (n,)."""
        return np.einsum("ic,ic->i", self.q1, self.q1)

    def _apply(self, a: np.ndarray, trans: str) -> np.ndarray:
        a2 = np.asfortranarray(a.reshape(a.shape[0], -1), dtype=np.float64)
        if self.c == 0 or a2.shape[1] == 0:
            return a2.copy().reshape(a.shape)
        _, work, _ = lapack.dormqr("L", trans, self.reflectors, self.tau, a2, -1)
        out, _, info = lapack.dormqr("L", trans, self.reflectors, self.tau, a2,
                                     max(int(work[0].real), 1))
        if info != 0:
            raise np.linalg.LinAlgError(f"dormqr failed (info {info})")
        return out.reshape(a.shape)

    def to_reduced(self, a: np.ndarray) -> np.ndarray:
        """:math:`Q_2^T a` for sample-space rows ``a`` (n, ...) → (m, ...)."""
        return self._apply(a, "T")[self.c:]

    def to_sample(self, a: np.ndarray) -> np.ndarray:
        """:math:`Q_2 a` for reduced rows ``a`` (m, ...) → (n, ...)."""
        full = np.zeros((a.shape[0] + self.c,) + a.shape[1:])
        full[self.c:] = a
        return self._apply(full, "N")

    def fixed_coef(self, beta_z: np.ndarray) -> np.ndarray:
        """:math:`R^{-1}(Q_1^T \\tilde y - Q_1^T \\tilde X \\beta)` for ``beta_z`` (q, k, t) → (c, k, t)."""
        q, k, t = beta_z.shape
        rhs = self.qty[:, None, :] - (self.qtx @ beta_z.reshape(q, k * t)).reshape(-1, k, t)
        if self.c == 0:
            return rhs
        return sla.solve_triangular(self.r, rhs.reshape(self.c, k * t),
                                    check_finite=False).reshape(self.c, k, t)


def _weighted_sd(Xc: np.ndarray, sqrt_w: np.ndarray, total: float) -> np.ndarray:
    """Weighted population SD of weighted-centered columns, overflow-safe."""
    return column_norms(Xc * sqrt_w[:, None]) / np.sqrt(total)


def prepare_weighted(X: np.ndarray, Y: np.ndarray, *, fit_intercept: bool, standardize: bool,
                     sample_weight=None, unpenalized=None, penalty_factor=None,
                     names=None) -> tuple[Design, np.ndarray]:
    """:func:`prepare` with row weights, unpenalized columns and relative penalties.

    Parameters
    ----------
    X, Y : ndarray
        As for :func:`prepare`.
    sample_weight : ndarray, shape (n,), optional
        Positive, finite row weights (validated by the caller).
    unpenalized : ndarray of bool, shape (p,), optional
        Columns left out of the penalty.
    penalty_factor : ndarray, shape (p,), optional
        Positive multipliers of :math:`\\lambda` per column (1 = the common penalty).
    names : list of str, optional
        Column names, for messages.

    Returns
    -------
    design : Design
        With ``span`` (:class:`FixedSpan`) set.
    z : ndarray, shape (n - c, q)
        The reduced penalized design, :math:`c` the number of unpenalized parameters.

    Notes
    -----
    Weighted means :math:`\\bar x = \\sum_i w_i x_i / \\sum_i w_i` and weighted
    population SDs (the scikit-learn convention for ``sample_weight`` with
    ``fit_intercept``).  The unpenalized columns must be linearly independent of
    each other and of the intercept: rank of :math:`R` tested at
    :math:`\\max(n, c)\\,\\varepsilon \\max_j |R_{jj}|`.
    """
    from paths.data.validation import InputError

    n, p = X.shape
    w = np.ones(n) if sample_weight is None else np.asarray(sample_weight, dtype=np.float64)
    sqrt_w = np.sqrt(w)
    total = float(w.sum())
    x_min, x_max = column_range(X)
    absmax = np.maximum(x_max, -x_min)
    mu = (w @ X) / total
    if fit_intercept:
        x_mean, y_mean = mu, (w @ Y) / total
        Xc, Yc = X - x_mean, Y - y_mean
        sd = _weighted_sd(Xc, sqrt_w, total)
    else:
        x_mean, y_mean = np.zeros(p), np.zeros(Y.shape[1])
        Xc, Yc = X.copy(), Y.copy()
        sd = _weighted_sd(X - mu, sqrt_w, total)
    nonconst = sd > n * _EPS * absmax
    if fit_intercept:
        nonconst &= x_max > x_min
    scale = np.ones(p)
    if standardize:
        scale[nonconst] = sd[nonconst]
    unpen = np.zeros(p, dtype=bool) if unpenalized is None else np.asarray(unpenalized, bool)
    fixed = nonconst & unpen
    active = nonconst & ~unpen
    pf = None if penalty_factor is None else np.asarray(penalty_factor, dtype=np.float64)
    x_scale = scale * (np.sqrt(pf) if pf is not None else 1.0)
    x_scale = np.where(fixed, scale, x_scale)
    cols = [sqrt_w[:, None]] if fit_intercept else []
    cols.append(sqrt_w[:, None] * Xc[:, fixed] / x_scale[fixed])
    C = np.hstack(cols)
    B = np.hstack([sqrt_w[:, None] * Xc[:, active] / x_scale[active], sqrt_w[:, None] * Yc])
    q, c = int(active.sum()), C.shape[1]
    if c:
        (refl, tau), R = sla.qr(C, mode="raw", check_finite=False)
        R = np.triu(R[:c, :c])
        diag = np.abs(np.diagonal(R))
        bad = np.flatnonzero(diag <= max(n, c) * _EPS * diag.max())
        if bad.size or c >= n:
            fixed_names = ([] if not fit_intercept else ["(intercept)"]) + [
                (names[j] if names is not None else f"x{j}") for j in np.flatnonzero(fixed)]
            which = ", ".join(fixed_names[j] for j in bad[:5]) if bad.size else ""
            raise InputError(
                f"the {c} unpenalized parameters ({', '.join(fixed_names[:6])}) are "
                f"{'collinear (' + which + ' is a combination of the others)' if bad.size else 'as many as the rows'}"
                "; penalize some of them or drop duplicates")
    else:
        refl, tau, R = np.zeros((n, 0), order="F"), np.zeros(0), np.zeros((0, 0))
    span = FixedSpan(reflectors=refl, tau=tau, r=R, q1=np.zeros((n, c)), sqrt_w=sqrt_w,
                     qty=np.zeros((c, Y.shape[1])), qtx=np.zeros((c, q)), intercept=fit_intercept,
                     total_weight=total)
    QB = span._apply(B, "T")
    q1 = span._apply(np.eye(n, c), "N") if c else np.zeros((n, 0))
    span = FixedSpan(reflectors=refl, tau=tau, r=R, q1=q1, sqrt_w=sqrt_w,
                     qty=np.ascontiguousarray(QB[:c, q:]), qtx=np.ascontiguousarray(QB[:c, :q]),
                     intercept=fit_intercept, total_weight=total)
    Z = np.ascontiguousarray(QB[c:, :q])
    zy = np.ascontiguousarray(QB[c:, q:])
    _readonly(zy, x_mean, x_scale, y_mean, active, fixed, sqrt_w, q1, R, span.qty, span.qtx)
    design = Design(zy=zy, x_mean=x_mean, x_scale=x_scale, y_mean=y_mean, active=active,
                    n_samples=n, fit_intercept=fit_intercept, standardize=standardize,
                    span=span, unpenalized=fixed,
                    sample_weight=None if sample_weight is None else w, penalty_factor=pf)
    return design, Z
