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

__all__ = ["Design", "prepare", "to_sample_space", "column_norms", "reduce_rows"]

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
    """

    zy: np.ndarray
    x_mean: np.ndarray
    x_scale: np.ndarray
    y_mean: np.ndarray
    active: np.ndarray
    n_samples: int
    fit_intercept: bool
    standardize: bool

    @property
    def n_features(self) -> int:
        return self.x_mean.shape[0]

    @property
    def constant(self) -> np.ndarray:
        """Indices of the constant columns left out of the fit."""
        return np.flatnonzero(~self.active)

    def transform(self, X: np.ndarray) -> np.ndarray:
        """Center and scale new rows the way the training rows were (active columns)."""
        a = self.active
        return (X[:, a] - self.x_mean[a]) / self.x_scale[a]


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
    x_max, x_min = X.max(axis=0), X.min(axis=0)
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


def column_norms(A: np.ndarray) -> np.ndarray:
    """Euclidean column norms, without overflow or underflow for extreme scales."""
    big = np.maximum(A.max(axis=0), -A.min(axis=0))  # max |a_ij|, no |A|-sized temporary
    if big.size and (big.max() > 1e150 or big[big > 0].min(initial=1.0) < 1e-150):
        safe = np.where(big > 0, big, 1.0)
        S = A / safe
        return big * np.sqrt(np.einsum("ij,ij->j", S, S))
    return np.sqrt(np.einsum("ij,ij->j", A, A))
