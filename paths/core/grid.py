"""Default penalty grids, derived from the spectrum of the design."""
from __future__ import annotations

import numpy as np
from scipy.optimize import brentq

from paths.core.algebra import penalized_df

__all__ = ["effective_df", "lambda_for_df", "default_grid"]


def effective_df(d: np.ndarray, lam) -> np.ndarray:
    """Effective degrees of freedom of the penalized part, :math:`\\sum_j d_j^2/(d_j^2+\\lambda)`.

    Parameters
    ----------
    d : ndarray, shape (r,)
        Positive singular values.
    lam : float or ndarray, shape (k,)

    Returns
    -------
    ndarray, shape (k,) (or a scalar for scalar ``lam``)

    Notes
    -----
    :func:`paths.core.algebra.penalized_df`, exact for every penalty from 0 to
    the largest float.

    References
    ----------
    Hastie, Tibshirani & Friedman, *The Elements of Statistical Learning*,
    2nd ed. (2009), eq. 3.50.
    """
    return penalized_df(d, lam)


def lambda_for_df(d: np.ndarray, target: float) -> float:
    """The penalty at which :func:`effective_df` equals ``target`` (0 < target < r).

    df is strictly decreasing in :math:`\\lambda`, so the root is unique; it is
    bracketed by :math:`\\lambda = d_r^2 (r - \\text{target}) / (2r)` from below and
    :math:`\\lambda = 2 \\sum_j d_j^2 / \\text{target}` from above, and found by
    Brent's method on :math:`\\log\\lambda`.
    """
    r = d.size
    if not 0 < target < r:
        raise ValueError(f"target df must lie in (0, {r}); got {target}")
    d2 = np.square(d)
    lo = np.log(d2[-1] * (r - target) / (2 * r))
    hi = np.log(2 * d2.sum() / target)
    f = lambda t: float(effective_df(d, np.exp(t))) - target  # noqa: E731
    return float(np.exp(brentq(f, lo, hi, xtol=1e-12, rtol=4 * np.finfo(float).eps)))


def default_grid(d: np.ndarray, n_lambdas: int = 100) -> np.ndarray:
    """Log-spaced penalties, largest first, spanning the whole path.

    The largest penalty leaves df = 0.5 (below one parameter), the smallest
    df = 0.995 r, within 1% of the rank ``r``; the points are evenly spaced in
    :math:`\\log\\lambda` between them.
    """
    r = d.size
    hi = lambda_for_df(d, min(0.5, 0.5 * r))
    lo = lambda_for_df(d, 0.995 * r)
    return np.geomspace(hi, lo, n_lambdas)
