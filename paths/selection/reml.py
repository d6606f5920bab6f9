"""Restricted maximum likelihood (REML) for the penalty, from the singular values.

The random-effects view of ridge: :math:`y = b_0 1 + Z\\beta + e` with
:math:`\\beta \\sim N(0, (\\sigma^2/\\lambda) I)` and :math:`e \\sim N(0, \\sigma^2 I)`,
:math:`Z` the centered (optionally standardized) design.  The posterior mean of
:math:`\\beta` is the ridge fit at :math:`\\lambda` (penalty convention of
:data:`paths.core.path.PENALTY_CONVENTION`).  The likelihood of the contrasts
(the response with the intercept projected out), with :math:`\\sigma^2`
profiled out, is

.. math:: \\ell(\\lambda) = -\\tfrac12\\left[m \\log\\frac{r^T H^{-1} r}{m}
          + \\log\\det H\\right], \\qquad H = I + ZZ^T/\\lambda,

with :math:`r` the centered response and :math:`m = n - 1` (:math:`n` without an
intercept), up to a constant (Patterson & Thompson 1971; Harville 1977).  With
:math:`Z = U D V^T` (rank :math:`r`), :math:`c = U^T r` and :math:`B` the squared
norm of the response outside the column span,

.. math:: \\log\\det H = \\sum_j L_j, \\quad L_j = \\log(1 + d_j^2/\\lambda), \\qquad
          r^T H^{-1} r = \\sum_j c_j^2 e^{-L_j} + B,

so the whole profile costs O(k r) for k penalties (the closed forms are
:func:`paths.core.algebra.reml_profile` and :func:`paths.core.algebra.reml_variances`); the :math:`m - r` zero
singular values contribute :math:`L = 0` and their part of the response is
:math:`B`.  :math:`L_j` is evaluated as ``log1p(d²/λ)`` for
:math:`\\lambda \\ge d_j^2` and as :math:`\\log(d_j^2+\\lambda) - \\log\\lambda`
below, and :math:`\\log r^T H^{-1} r` as a log-sum-exp, so nothing overflows as
:math:`\\lambda \\to 0` or :math:`\\lambda \\to \\infty`.  The limits are
:math:`-\\tfrac12 m \\log(\\|r\\|^2/m)` as :math:`\\lambda \\to \\infty` (the
intercept-only model) and, as :math:`\\lambda \\to 0`, :math:`-\\infty` when
:math:`B > 0` or, at full row rank (:math:`r = m`),
:math:`-\\tfrac12[m \\log(\\sum_j c_j^2 d_j^{-2}/m) + \\sum_j \\log d_j^2]`.

At the maximum, :math:`\\hat\\sigma^2 = r^T H^{-1} r/m` (the noise variance) and
the signal variance is :math:`\\hat\\sigma^2 \\sum_j d_j^2/(\\lambda m)`, the
average variance of :math:`Z\\beta` per row, so that noise plus signal variance
has expectation :math:`E\\|r\\|^2/m`.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.optimize import brentq, minimize_scalar

from paths.core import algebra

__all__ = ["RemlEstimate", "reml_estimate", "reml_loglik", "reml_interval", "path_state",
           "CHI2_1_95"]

CHI2_1_95 = 3.841458820694124  # 0.95 quantile of chi-square with 1 df (scipy.stats.chi2.ppf)


def path_state(path) -> algebra.FactorState:
    """The path's factor state (:class:`paths.core.algebra.FactorState`)."""
    state = getattr(path, "state", None)
    if state is not None:
        return state
    if path.factorization.u.shape[0] == 0:  # streamed: the left factor was never formed
        from paths.data.validation import InputError

        raise InputError("this path was computed without its left singular vectors (streaming "
                         "engine); REML and prediction intervals need engine='memory'")
    return algebra.factor_state(path.factorization, path.design)


def reml_loglik(path, lam=None) -> np.ndarray:
    """:func:`paths.core.algebra.reml_profile` of a :class:`~paths.core.path.RidgePath`
    (default: on its grid).

    Shape (k,), or (k, t) with several targets.

    Examples
    --------
    >>> import numpy as np
    >>> from paths import fit_path
    >>> rng = np.random.default_rng(0)
    >>> X = rng.standard_normal((50, 80)); y = X @ rng.standard_normal(80) + rng.standard_normal(50)
    >>> path = fit_path(X, y)
    >>> ll = reml_loglik(path)
    >>> ll.shape, bool(np.all(np.isfinite(ll)))
    ((100,), True)
    """
    lam = path.lambdas if lam is None else lam
    out = algebra.reml_profile(path_state(path), lam)
    return out if path.multi_target else out[:, 0]


def reml_interval(state, lam_hat: float, target: int = 0, *,
                  threshold: float = CHI2_1_95) -> tuple[float, float]:
    """Likelihood-ratio interval for λ: :math:`\\{\\lambda : 2[\\ell(\\hat\\lambda) - \\ell(\\lambda)] \\le \\chi^2_{1}\\}`.

    The default threshold, the 0.95 quantile of :math:`\\chi^2_1`, gives the usual
    approximate 95% profile-likelihood interval (Wilks' theorem; approximate, and
    not valid when the maximum sits on the boundary λ → ∞).  Ends are found by
    Brent's method on :math:`\\log\\lambda`; an end is 0 (or ``inf``) when the
    profile at λ → 0 (or ∞) stays within the threshold.
    """
    def prof(lam):
        return float(algebra.reml_profile(state, np.array([lam]), target=target)[0, 0])

    top = prof(lam_hat)
    cut = top - 0.5 * threshold
    d2 = np.square(state.d)
    ends = []
    for direction, limit in ((-1.0, 0.0), (1.0, np.inf)):
        if lam_hat == limit:
            ends.append(lam_hat)
            continue
        if prof(limit) >= cut:
            ends.append(limit)
            continue
        t0 = t1 = np.log(lam_hat if lam_hat > 0 else 1e-6 * d2[-1])
        span = np.log(d2[0] / d2[-1]) + 60.0  # far past the spectrum, where the profile is flat
        while prof(np.exp(t1)) >= cut and abs(t1 - t0) < span:
            t1 += direction * 2.0
        if prof(np.exp(t1)) >= cut:
            ends.append(limit)
            continue
        root = brentq(lambda t: prof(np.exp(t)) - cut, *sorted((t0, t1)), xtol=1e-10)
        ends.append(float(np.exp(root)))
    return float(ends[0]), float(ends[1])


@dataclass(frozen=True)
class RemlEstimate:
    """The REML choice of the penalty for one target.

    Attributes
    ----------
    lam : float
        The maximizing penalty (0: the minimum-norm limit; at the upper end of
        the search, see ``note``).
    loglik : float
        :math:`\\ell(\\hat\\lambda)`, up to a constant.
    noise_variance, signal_variance : float
        :math:`\\hat\\sigma^2` and :math:`\\hat\\sigma^2 \\sum_j d_j^2/(\\hat\\lambda m)`.
    variance_explained : float
        signal / (signal + noise).
    lam_interval : tuple of float
        Approximate 95% likelihood-ratio interval (:func:`reml_interval`).
    note : str
    """

    lam: float
    loglik: float
    noise_variance: float
    signal_variance: float
    variance_explained: float
    lam_interval: tuple
    note: str = ""


def reml_estimate(path, target: int = 0, *, n_grid: int = 400) -> RemlEstimate:
    """Maximize the restricted likelihood of a path's target over the penalty.

    The profile is evaluated on ``n_grid`` log-spaced penalties from
    :math:`10^{-6} d_r^2` to :math:`10^{6} d_1^2` (cheap: O(n_grid · r)), then
    refined by bounded scalar search on :math:`\\log\\lambda` between the
    neighbours of the grid maximum.  When the maximum is at an end, the limit
    (λ = 0 at full row rank, λ → ∞) is compared and the note says so.

    References
    ----------
    Patterson, H. D. and Thompson, R. (1971). Recovery of inter-block
    information when block sizes are unequal. *Biometrika* 58, 545–554.

    Harville, D. A. (1977). Maximum likelihood approaches to variance component
    estimation and to related problems. *J. Amer. Statist. Assoc.* 72, 320–338.

    Examples
    --------
    >>> import numpy as np
    >>> from paths import fit_path
    >>> rng = np.random.default_rng(0)
    >>> X = rng.standard_normal((80, 200)); y = X @ (0.1 * rng.standard_normal(200))
    >>> y = y + rng.standard_normal(80)
    >>> est = reml_estimate(fit_path(X, y))
    >>> est.lam_interval[0] < est.lam < est.lam_interval[1]
    True
    """
    state = path_state(path)
    d2 = np.square(state.d)
    grid = np.geomspace(1e-6 * d2[-1], 1e6 * d2[0], n_grid)

    def prof(lam):
        return algebra.reml_profile(state, lam, target=target)[:, 0]

    vals = prof(grid)
    i = int(np.argmax(vals))
    note = ""
    if i == grid.size - 1 and prof(np.array([np.inf]))[0] >= vals[i]:
        lam, top = float(grid[i]), float(vals[i])
        note = (f"the likelihood rises toward lambda -> inf (no signal detected); reported at "
                f"lambda = {lam:.3g}, 1e6 times the largest squared singular value")
    elif i == 0 and prof(np.array([0.0]))[0] >= vals[0]:
        lam, top = 0.0, float(prof(np.array([0.0]))[0])
        note = "the likelihood is largest at the minimum-norm limit lambda -> 0+"
    else:
        lo, hi = np.log(grid[max(i - 1, 0)]), np.log(grid[min(i + 1, grid.size - 1)])
        res = minimize_scalar(lambda t: -float(prof(np.array([np.exp(t)]))[0]),
                              bounds=(lo, hi), method="bounded", options={"xatol": 1e-8})
        lam, top = (float(np.exp(res.x)), -float(res.fun)) if -res.fun >= vals[i] else (
            float(grid[i]), float(vals[i]))
    sigma2, signal = algebra.reml_variances(state, lam, target)
    interval = reml_interval(state, lam, target)
    share = signal / (signal + sigma2)
    return RemlEstimate(lam=lam, loglik=top, noise_variance=sigma2, signal_variance=signal,
                        variance_explained=float(share), lam_interval=interval, note=note)
