"""Closed-form test-risk theory for least squares, minimum-norm and ridge fits.

Pure numerical functions (no I/O), vectorized over the aspect ratio
:math:`\\gamma = p/n` and the penalty.  Conventions:

- features :math:`x \\sim N(0, \\Sigma)` (isotropic: :math:`\\Sigma = I_p`);
  response :math:`y = x^T\\beta + \\varepsilon`, noise variance :math:`\\sigma^2`,
  signal variance :math:`r^2 = \\beta^T\\Sigma\\beta` (:math:`=\\|\\beta\\|^2` when
  isotropic);
- *excess risk* :math:`E[(x_0^T(\\hat\\beta - \\beta))^2]`; the expected test MSE
  of a new observation adds :math:`\\sigma^2`;
- penalties here are **normalized**, :math:`\\lambda_n`, for the objective
  :math:`\\frac1n\\|y - X\\beta\\|^2 + \\lambda_n\\|\\beta\\|^2`; the package's
  convention (:data:`paths.PENALTY_CONVENTION`) uses :math:`\\lambda = n\\lambda_n`.

References
----------
Hastie, T., Montanari, A., Rosset, S. and Tibshirani, R. J. (2022). Surprises
in high-dimensional ridgeless least squares interpolation. *Ann. Statist.* 50,
949–986.

Dobriban, E. and Wager, S. (2018). High-dimensional asymptotics of prediction:
ridge regression and classification. *Ann. Statist.* 46, 247–279.

Marchenko, V. A. and Pastur, L. A. (1967). Distribution of eigenvalues for
some sets of random matrices. *Math. USSR-Sbornik* 1, 457–483.

Bach, F. (2024). High-dimensional analysis of double descent for linear
regression with random projections. *SIAM J. Math. Data Sci.* 6, 26–50.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.optimize import brentq, minimize_scalar

__all__ = [
    "mp_edges",
    "mp_density",
    "mp_cdf",
    "mp_stieltjes",
    "mp_stieltjes_derivative",
    "min_norm_risk",
    "ridge_risk",
    "optimal_ridge_lambda",
    "optimal_ridge_risk",
    "ls_train_mse",
    "EffectiveVariances",
    "misspecified_variances",
    "SpectrumRisk",
    "spectrum_ridge_risk",
    "spectrum_optimal_ridge_risk",
]


def _gamma(gamma) -> np.ndarray:
    g = np.asarray(gamma, dtype=np.float64)
    if np.any(~np.isfinite(g)) or np.any(g <= 0):
        from paths.data.validation import InputError

        raise InputError("the aspect ratio gamma = p/n must be finite and > 0")
    return g


def mp_edges(gamma):
    """Support edges :math:`a, b = (1 \\mp \\sqrt\\gamma)^2` of the Marchenko–Pastur law.

    Parameters
    ----------
    gamma : float or array_like
        Aspect ratio :math:`p/n > 0`.

    Returns
    -------
    a, b : ndarray
        Lower and upper edges of the continuous part.

    Examples
    --------
    >>> [float(v) for v in mp_edges(0.25)]
    [0.25, 2.25]
    """
    g = _gamma(gamma)
    s = np.sqrt(g)
    return (1.0 - s) ** 2, (1.0 + s) ** 2


def mp_density(x, gamma):
    """Density of the continuous part of the Marchenko–Pastur law.

    The limiting distribution of the eigenvalues of :math:`X^TX/n` for an
    :math:`n \\times p` matrix with i.i.d. unit-variance entries, :math:`p/n \\to
    \\gamma`.

    Parameters
    ----------
    x : array_like
        Points.
    gamma : float
        Aspect ratio :math:`p/n`.

    Returns
    -------
    ndarray
        :math:`\\sqrt{(b - x)(x - a)} / (2\\pi\\gamma x)` on :math:`[a, b]`, 0
        elsewhere.

    Notes
    -----
    For :math:`\\gamma > 1` the continuous part has mass :math:`1/\\gamma`; the
    law adds a point mass :math:`1 - 1/\\gamma` at 0 (the zero eigenvalues of a
    rank-:math:`n` matrix), which this density does not include.

    References
    ----------
    Marchenko & Pastur (1967).

    Examples
    --------
    >>> round(float(mp_density(1.0, 0.5)), 6)
    0.421084
    """
    g = float(_gamma(gamma))
    a, b = mp_edges(g)
    x = np.asarray(x, dtype=np.float64)
    inside = (x > a) & (x < b)
    xs = np.where(inside, x, 1.0)
    val = np.sqrt(np.maximum((b - xs) * (xs - a), 0.0)) / (2.0 * np.pi * g * xs)
    return np.where(inside, val, 0.0)


def mp_cdf(x, gamma):
    """Cumulative distribution function of the Marchenko–Pastur law (point mass included).

    Parameters
    ----------
    x : array_like
    gamma : float

    Returns
    -------
    ndarray
        :math:`F(x)`, including the mass :math:`1 - 1/\\gamma` at 0 when
        :math:`\\gamma > 1`.

    Notes
    -----
    Closed form of the integral of :func:`mp_density`: with :math:`c = 1 +
    \\gamma`, :math:`h = 2\\sqrt\\gamma` and :math:`x = c - h\\cos\\theta`,
    :math:`\\theta \\in [0, \\pi]`,

    .. math:: F_c(x) = \\frac{1}{2\\pi\\gamma}\\Big[h\\sin\\theta + c\\,\\theta
              - 2|1-\\gamma|\\arctan\\Big(\\sqrt{b/a}\\,\\tan\\frac\\theta2\\Big)\\Big],

    obtained from :math:`(b-x)(x-a) = h^2\\sin^2\\theta` and the partial fraction
    :math:`\\sin^2\\theta/(c - h\\cos\\theta) = \\cos\\theta/h + c/h^2 -
    (1-\\gamma)^2/(h^2(c - h\\cos\\theta))`.  It reaches :math:`\\min(1,
    1/\\gamma)` at :math:`x = b`.
    """
    g = float(_gamma(gamma))
    a, b = mp_edges(g)
    x = np.asarray(x, dtype=np.float64)
    c, h = 1.0 + g, 2.0 * np.sqrt(g)
    theta = np.arccos(np.clip((c - x) / h, -1.0, 1.0))
    if a > 0:
        k = np.sqrt(b / a)
        at = np.arctan2(k * np.sin(theta / 2), np.cos(theta / 2))
    else:  # gamma == 1: the arctan term has coefficient 0
        at = np.zeros_like(theta)
    cont = (h * np.sin(theta) + c * theta - 2.0 * abs(1.0 - g) * at) / (2.0 * np.pi * g)
    cont = np.where(x <= a, 0.0, np.where(x >= b, min(1.0, 1.0 / g), cont))
    atom = max(0.0, 1.0 - 1.0 / g)
    return cont + np.where(x >= 0, atom, 0.0)


def mp_stieltjes(lam, gamma):
    """Stieltjes transform :math:`m(-\\lambda) = \\int dF(x)/(x + \\lambda)` of the MP law.

    Parameters
    ----------
    lam : float or array_like
        Points :math:`\\lambda > 0` (the transform is evaluated at
        :math:`z = -\\lambda`).
    gamma : float or array_like
        Aspect ratio (broadcast against ``lam``).

    Returns
    -------
    ndarray
        :math:`m(z) = [1 - \\gamma - z - \\sqrt{(1-\\gamma-z)^2 - 4\\gamma z}]/(2\\gamma z)`
        at :math:`z = -\\lambda`, computed without cancellation as
        :math:`2/(B + S)` for :math:`B \\ge 0` and :math:`(S - B)/(2\\gamma\\lambda)`
        otherwise, with :math:`B = 1 - \\gamma + \\lambda` and :math:`S =
        \\sqrt{B^2 + 4\\gamma\\lambda}`.

    References
    ----------
    Dobriban & Wager (2018); Marchenko & Pastur (1967).
    """
    lam = np.asarray(lam, dtype=np.float64)
    g = _gamma(gamma)
    B = 1.0 - g + lam
    S = np.sqrt(B * B + 4.0 * g * lam)
    pos = B >= 0
    Bp = np.where(pos, B, 1.0)
    Sp = np.where(pos, S, 1.0)
    den = np.where(pos, 1.0, 2.0 * g * lam)
    return np.where(pos, 2.0 / (Bp + Sp), (S - B) / den)


def mp_stieltjes_derivative(lam, gamma):
    """:math:`m'(z)` at :math:`z = -\\lambda`, equal to :math:`\\int dF(x)/(x + \\lambda)^2`.

    Notes
    -----
    Differentiating the quadratic :math:`\\gamma z m^2 - (1 - \\gamma - z) m + 1 = 0`
    gives :math:`m' = (\\gamma m^2 + m)/(1 - \\gamma - z - 2\\gamma z m)`, which at
    :math:`z = -\\lambda` simplifies to :math:`m(1 + \\gamma m)/S` with :math:`S`
    as in :func:`mp_stieltjes`.
    """
    lam = np.asarray(lam, dtype=np.float64)
    g = _gamma(gamma)
    m = mp_stieltjes(lam, g)
    S = np.sqrt(np.square(1.0 - g + lam) + 4.0 * g * lam)
    return m * (1.0 + g * m) / S


def min_norm_risk(gamma, noise_variance, signal_variance):
    """Limiting excess risk of minimum-norm least squares, isotropic features.

    Parameters
    ----------
    gamma : float or array_like
        :math:`p/n`.
    noise_variance, signal_variance : float or array_like
        :math:`\\sigma^2` and :math:`r^2 = \\|\\beta\\|^2` (broadcast).

    Returns
    -------
    ndarray
        :math:`\\sigma^2\\gamma/(1-\\gamma)` for :math:`\\gamma < 1`,
        :math:`r^2(1 - 1/\\gamma) + \\sigma^2/(\\gamma - 1)` for :math:`\\gamma > 1`,
        ``inf`` at :math:`\\gamma = 1` (when :math:`\\sigma^2 > 0`).  Add
        :math:`\\sigma^2` for the test MSE of a new observation.

    References
    ----------
    Hastie, Montanari, Rosset & Tibshirani (2022), Theorem 1.

    Examples
    --------
    >>> float(min_norm_risk(2.0, 1.0, 1.0))
    1.5
    """
    g = _gamma(gamma)
    s2 = np.asarray(noise_variance, dtype=np.float64)
    r2 = np.asarray(signal_variance, dtype=np.float64)
    g, s2, r2 = np.broadcast_arrays(g, s2, r2)
    out = np.full(g.shape, np.inf)
    lo, hi = g < 1, g > 1
    out[lo] = s2[lo] * g[lo] / (1.0 - g[lo])
    out[hi] = r2[hi] * (1.0 - 1.0 / g[hi]) + s2[hi] / (g[hi] - 1.0)
    at_one = (g == 1) & (s2 == 0)
    out[at_one] = 0.0
    return out if out.ndim else out[()]


def ridge_risk(lam, gamma, noise_variance, signal_variance):
    """Limiting excess risk of ridge at normalized penalty :math:`\\lambda_n > 0`, isotropic features.

    Parameters
    ----------
    lam : float or array_like
        Normalized penalty :math:`\\lambda_n = \\lambda/n > 0`.
    gamma, noise_variance, signal_variance : float or array_like
        Broadcast against ``lam``.

    Returns
    -------
    ndarray
        :math:`R(\\lambda_n) = r^2\\lambda_n^2 m'(-\\lambda_n) + \\sigma^2\\gamma
        [m(-\\lambda_n) - \\lambda_n m'(-\\lambda_n)]` (bias plus variance).

    References
    ----------
    Dobriban & Wager (2018), Theorem 2.1 (isotropic case); Hastie et al. (2022),
    Theorem 5.
    """
    lam = np.asarray(lam, dtype=np.float64)
    g = _gamma(gamma)
    s2 = np.asarray(noise_variance, dtype=np.float64)
    r2 = np.asarray(signal_variance, dtype=np.float64)
    m = mp_stieltjes(lam, g)
    dm = mp_stieltjes_derivative(lam, g)
    return r2 * lam * lam * dm + s2 * g * (m - lam * dm)


def optimal_ridge_lambda(gamma, noise_variance, signal_variance):
    """Risk-minimizing normalized penalty :math:`\\lambda_n^* = \\gamma\\sigma^2/r^2` (isotropic).

    In the package convention this is :math:`\\lambda^* = p\\sigma^2/r^2`.
    ``inf`` when :math:`r^2 = 0` (predict the mean).

    References
    ----------
    Dobriban & Wager (2018); Hastie et al. (2022).
    """
    g = _gamma(gamma)
    s2 = np.asarray(noise_variance, dtype=np.float64)
    r2 = np.asarray(signal_variance, dtype=np.float64)
    g, s2, r2 = np.broadcast_arrays(g, s2, r2)
    out = np.full(g.shape, np.inf)
    ok = r2 > 0
    out[ok] = g[ok] * s2[ok] / r2[ok]
    return out if out.ndim else out[()]


def optimal_ridge_risk(gamma, noise_variance, signal_variance):
    """Limiting excess risk of optimally tuned ridge, isotropic features.

    Returns
    -------
    ndarray
        :math:`R^* = \\sigma^2\\gamma\\, m(-\\lambda_n^*)` with
        :math:`\\lambda_n^* = \\gamma\\sigma^2/r^2`; the min-norm limit when
        :math:`\\sigma^2 = 0`; 0 when :math:`r^2 = 0` (the optimum
        is the null predictor).

    Notes
    -----
    At :math:`\\lambda_n^*` the bias term :math:`r^2\\lambda^2 m'` equals
    :math:`\\gamma\\sigma^2\\lambda m'` and cancels the variance term's
    :math:`-\\sigma^2\\gamma\\lambda m'`, leaving :math:`\\sigma^2\\gamma m`.

    References
    ----------
    Dobriban & Wager (2018), Theorem 2.1; Hastie et al. (2022), Corollary 5.

    Examples
    --------
    >>> round(float(optimal_ridge_risk(1.0, 1.0, 1.0)), 6)
    0.618034
    """
    g = _gamma(gamma)
    s2 = np.asarray(noise_variance, dtype=np.float64)
    r2 = np.asarray(signal_variance, dtype=np.float64)
    g, s2, r2 = np.broadcast_arrays(g, s2, r2)
    out = np.zeros(g.shape)
    reg = (s2 > 0) & (r2 > 0)
    lam = g[reg] * s2[reg] / r2[reg]
    out[reg] = s2[reg] * g[reg] * mp_stieltjes(lam, g[reg])
    noiseless = (s2 == 0) & (r2 > 0)
    out[noiseless] = np.where(g[noiseless] > 1, r2[noiseless] * (1 - 1 / g[noiseless]), 0.0)
    return out if out.ndim else out[()]


def ls_train_mse(n, p, noise_variance, *, fit_intercept: bool = True):
    """Expected training MSE of least squares: :math:`\\sigma^2 (n - p - 1)/n` with an intercept.

    Parameters
    ----------
    n, p : int or array_like
        Training rows and features (broadcast).
    noise_variance : float or array_like
    fit_intercept : bool
        With an intercept the residual degrees of freedom are :math:`n - p - 1`,
        without :math:`n - p`.

    Returns
    -------
    ndarray
        :math:`\\sigma^2 \\max(n - p - \\mathbb 1_{\\text{intercept}}, 0)/n`: zero once
        the fit interpolates.

    Notes
    -----
    The projection argument: the residual is :math:`(I - H)\\varepsilon` with
    :math:`H` the projection on the columns (and the ones vector), so
    :math:`E[\\mathrm{RSS}] = \\sigma^2\\operatorname{tr}(I - H) = \\sigma^2(n -
    \\operatorname{rank})`, for any design of full column rank and homoscedastic
    noise (common practice, no source).
    """
    n = np.asarray(n, dtype=np.float64)
    p = np.asarray(p, dtype=np.float64)
    s2 = np.asarray(noise_variance, dtype=np.float64)
    dof = np.maximum(n - p - (1.0 if fit_intercept else 0.0), 0.0)
    return s2 * dof / n


@dataclass(frozen=True)
class EffectiveVariances:
    """Noise and signal variance seen by a model on ``p_sub`` of ``p`` features.

    Attributes
    ----------
    noise_variance : ndarray
        :math:`\\sigma^2_{\\text{eff}} = \\sigma^2 + r^2(1 - p'/p)`.
    signal_variance : ndarray
        :math:`r^2_{\\text{eff}} = r^2 p'/p`.
    """

    noise_variance: np.ndarray
    signal_variance: np.ndarray


def misspecified_variances(p_sub, p, noise_variance, signal_variance) -> EffectiveVariances:
    """Per-point :math:`\\sigma^2_{\\text{eff}}` and :math:`r^2_{\\text{eff}}` for nested feature sets.

    Parameters
    ----------
    p_sub : int or array_like
        Features in the model, :math:`1 \\le p' \\le p`.
    p : int
        All features (the truth uses every one).
    noise_variance, signal_variance : float
        :math:`\\sigma^2`, :math:`r^2` of the full model.

    Returns
    -------
    EffectiveVariances

    Notes
    -----
    With the signal spread evenly over isotropic features, the omitted
    :math:`p - p'` features carry :math:`r^2(1 - p'/p)` of the signal variance,
    independent of the kept ones, so for the smaller model it is noise.  The
    isotropic formulas then apply with :math:`\\gamma = p'/n` and these values
    (the misspecified model, Hastie et al. 2022, §5).  Not valid for an order
    that puts the strong features first (screening).
    """
    frac = np.asarray(p_sub, dtype=np.float64) / float(p)
    s2 = np.asarray(noise_variance, dtype=np.float64)
    r2 = np.asarray(signal_variance, dtype=np.float64)
    return EffectiveVariances(noise_variance=s2 + r2 * (1.0 - frac),
                              signal_variance=r2 * frac)


# ----------------------------------------------------------------- general spectrum
@dataclass(frozen=True)
class SpectrumRisk:
    """Deterministic-equivalent excess risk of ridge for a given covariance spectrum.

    Attributes
    ----------
    risk, bias2, variance : float
        Excess risk and its parts (add :math:`\\sigma^2` for the test MSE).
    kappa : float
        Effective regularization :math:`\\kappa`.
    lam : float
        Normalized penalty :math:`\\lambda_n`.
    """

    risk: float
    bias2: float
    variance: float
    kappa: float
    lam: float


def _kappa(lam: float, s: np.ndarray, n: float) -> float:
    """Solve :math:`\\lambda = \\kappa(1 - \\mathrm{df}_1(\\kappa)/n)` for :math:`\\kappa \\ge 0`."""
    p = s.size
    if lam == 0:
        if p <= n:  # full column rank: OLS, no implicit regularization
            return 0.0
        g = lambda k: float(np.sum(s / (s + k))) - n  # noqa: E731
        hi = 2.0 * float(s.sum()) / n
        return brentq(g, 0.0, hi, xtol=1e-14 * hi, rtol=8 * np.finfo(float).eps)
    f = lambda k: k * (1.0 - float(np.sum(s / (s + k))) / n) - lam  # noqa: E731
    lo = lam
    hi = lam + float(s.sum()) / n + lam
    while f(hi) < 0:
        hi *= 2
    if f(lo) >= 0:
        return lo
    return brentq(f, lo, hi, xtol=1e-14 * hi, rtol=8 * np.finfo(float).eps)


def spectrum_ridge_risk(lam: float, n: float, eigenvalues, noise_variance: float,
                        signal_energy) -> SpectrumRisk:
    """Excess risk of ridge for covariance eigenvalues ``eigenvalues`` (deterministic equivalent).

    Parameters
    ----------
    lam : float
        Normalized penalty :math:`\\lambda_n \\ge 0` (0: minimum-norm / OLS).
    n : float
        Training rows.
    eigenvalues : array_like, shape (p,)
        Eigenvalues :math:`s_i > 0` of :math:`\\Sigma`.
    noise_variance : float
    signal_energy : array_like, shape (p,)
        :math:`(v_i^T\\beta)^2` along each eigenvector; their :math:`s`-weighted sum
        is the signal variance.  For coefficients spread evenly in every direction
        use :math:`r^2/\\operatorname{tr}\\Sigma` in each entry.

    Returns
    -------
    SpectrumRisk

    Notes
    -----
    With :math:`\\kappa` solving :math:`\\lambda_n = \\kappa(1 - \\mathrm{df}_1/n)`,
    :math:`\\mathrm{df}_k = \\sum_i s_i^k/(s_i + \\kappa)^k`,

    .. math:: R = \\frac{\\kappa^2 \\sum_i b_i s_i/(s_i+\\kappa)^2 + \\sigma^2
              \\mathrm{df}_2/n}{1 - \\mathrm{df}_2/n}.

    For :math:`\\Sigma = I` it reduces to :func:`ridge_risk` and
    :func:`min_norm_risk` (checked in the tests).  From memory; checked by
    simulation in ``tests/test_plan.py``.

    References
    ----------
    Bach (2024), §3; Hastie et al. (2022), §5 (general covariance).
    """
    s = np.asarray(eigenvalues, dtype=np.float64)
    b = np.asarray(signal_energy, dtype=np.float64) * np.ones_like(s)
    k = _kappa(float(lam), s, float(n))
    df2 = float(np.sum(np.square(s / (s + k)))) / n
    if df2 >= 1.0:
        inf = float("inf")
        return SpectrumRisk(inf, inf, inf, k, float(lam))
    bias = k * k * float(np.sum(b * s / np.square(s + k))) / (1.0 - df2)
    var = noise_variance * df2 / (1.0 - df2)
    return SpectrumRisk(bias + var, bias, var, k, float(lam))


def spectrum_optimal_ridge_risk(n: float, eigenvalues, noise_variance: float,
                                signal_energy) -> SpectrumRisk:
    """Minimum over :math:`\\lambda_n` of :func:`spectrum_ridge_risk` (bounded search in log λ)."""
    s = np.asarray(eigenvalues, dtype=np.float64)
    scale = float(np.mean(s))
    f = lambda t: spectrum_ridge_risk(np.exp(t), n, s, noise_variance,  # noqa: E731
                                      signal_energy).risk
    lo, hi = np.log(scale * 1e-8), np.log(scale * 1e6)
    grid = np.linspace(lo, hi, 57)
    vals = np.array([f(t) for t in grid])
    i = int(np.argmin(vals))
    a, c = grid[max(i - 1, 0)], grid[min(i + 1, grid.size - 1)]
    res = minimize_scalar(f, bounds=(a, c), method="bounded", options={"xatol": 1e-6})
    t = res.x if res.fun <= vals[i] else grid[i]
    return spectrum_ridge_risk(float(np.exp(t)), n, s, noise_variance, signal_energy)
