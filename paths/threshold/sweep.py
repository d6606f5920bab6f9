"""Test-risk sweeps across the interpolation threshold (p = n), with theory overlays.

A *sweep* fits, at every point of a grid, the same family of estimators on a
growing model and records their training and test errors:

- ``over="features"``: nested feature sets of size :math:`p'` (1 to all) on the
  training rows, in the given column order, in random orders (one per repeat)
  or by a screening score (absolute correlation with the response on the
  training rows only).  With ``random_features=N`` the inputs are first mapped
  to ``N`` random nonlinear features (:class:`RandomFeatureMap`), so
  :math:`p'` can run to several times :math:`n`;
- ``over="samples"``: all features, training subsets of growing size
  :math:`n'` (nested, in file order or a random order per repeat).

At every point: the minimum-norm / OLS fit (``min_norm``), ridge at a fixed
penalty or fixed df fraction (``ridge_fixed``), ridge at the GCV-chosen penalty
(``ridge_gcv``), ridge at the penalty best on the test rows (``ridge_oracle`` —
an oracle, not a usable rule), and two baselines: the training mean
(``baseline_mean``) and the best single feature chosen on the training rows
(``baseline_best_feature``).  Every point is its own factorization
(:func:`paths.factor.factorize`); all penalties of a point are closed forms on
its factors.

What is reused: the column reordering, centering and scaling are done once per
repeat (they act column by column, so the reduced design of a nested set is the
leading columns of the full one); the factorization takes the smaller Gram side
when that is accurate (:func:`paths.factor.factorize` ``solver="auto"``); the
test rows are projected on the right singular vectors once per point and serve
every penalty.

Penalties follow :data:`paths.PENALTY_CONVENTION` (unnormalized λ on the
standardized design); the theory overlay uses :math:`\\lambda_n = \\lambda/m`
with :math:`m = n' - 1` the rows of the centered design.
"""
from __future__ import annotations

from dataclasses import dataclass, field, replace
from typing import Callable

import numpy as np

from paths.data.validation import InputError, as_design, as_response, check_memory
from paths.core.design import Design, prepare, to_sample_space
from paths.core.factor import Factorization, factorize
from paths.core import algebra
from paths.core.grid import lambda_for_df
from paths.selection.rules import noise_variance_from_factors
from paths.threshold import theory

__all__ = [
    "METHODS",
    "FIELDS",
    "CSV_COLUMNS",
    "RandomFeatureMap",
    "random_feature_map",
    "VarianceEstimate",
    "estimate_variances",
    "TheoryCurves",
    "PointFit",
    "ThresholdResult",
    "sweep_sizes",
    "threshold_sweep",
    "threshold_table",
    "threshold_summary",
]

METHODS = ("min_norm", "ridge_fixed", "ridge_gcv", "ridge_oracle", "baseline_mean",
           "baseline_best_feature")
FIELDS = ("lambda", "df", "train_mse", "test_mse", "rank", "min_singular_value", "coef_norm")
CSV_COLUMNS = ("over", "n_train", "n_features", "ratio", "repeat", "method", "lambda", "df",
               "train_mse", "test_mse", "rank", "min_singular_value", "coef_norm")
OVERS = ("features", "samples")
ORDERS = ("given", "random", "screening")
FEATURE_MAPS = ("relu", "fourier")
BANDS = ("se", "quantile")
_EPS = np.finfo(np.float64).eps
# normalized penalties lambda_n = lambda / m searched by GCV and the oracle (plus 0)
_LAMBDA_N_GRID = np.geomspace(1e-4, 1e3, 57)


# ----------------------------------------------------------------- random features
@dataclass(frozen=True)
class RandomFeatureMap:
    """A fixed random nonlinear feature map of standardized inputs.

    Attributes
    ----------
    kind : {"relu", "fourier"}
    weights : ndarray, shape (d, N)
        Gaussian projection :math:`W`, entries :math:`N(0, 1/d)`.
    offsets : ndarray, shape (N,)
        Phases :math:`b \\sim U(0, 2\\pi)` (Fourier features; zeros for ReLU).
    x_mean, x_scale : ndarray, shape (d,)
        Standardization of the inputs (training rows).

    Notes
    -----
    ReLU features :math:`\\phi(x) = \\max(0, W^T \\tilde x)` and random Fourier
    features :math:`\\phi(x) = \\sqrt2\\cos(W^T\\tilde x + b)`, an unbiased
    approximation of the Gaussian kernel with bandwidth :math:`\\sqrt d` on the
    standardized inputs :math:`\\tilde x` (Rahimi & Recht 2007).

    References
    ----------
    Rahimi, A. and Recht, B. (2007). Random features for large-scale kernel
    machines. *Advances in Neural Information Processing Systems* 20.
    """

    kind: str
    weights: np.ndarray
    offsets: np.ndarray
    x_mean: np.ndarray
    x_scale: np.ndarray

    @property
    def n_features(self) -> int:
        return self.weights.shape[1]

    def transform(self, X: np.ndarray) -> np.ndarray:
        """Features of the rows of ``X``, shape (n, N)."""
        proj = ((np.asarray(X, dtype=np.float64) - self.x_mean) / self.x_scale) @ self.weights
        if self.kind == "relu":
            return np.maximum(proj, 0.0)
        return np.sqrt(2.0) * np.cos(proj + self.offsets)


def random_feature_map(X_train, n_features: int, *, kind: str = "relu",
                       seed=0) -> RandomFeatureMap:
    """Draw a :class:`RandomFeatureMap` with ``n_features`` features for inputs like ``X_train``.

    Parameters
    ----------
    X_train : array_like, shape (n, d)
        Training inputs (their column means and SDs standardize every input).
    n_features : int
        Number of random features, at least 1.
    kind : {"relu", "fourier"}
    seed : int or numpy.random.Generator

    Raises
    ------
    InputError
        ``n_features < 1`` or an unknown ``kind``.
    """
    if int(n_features) != n_features or n_features < 1:
        raise InputError(f"the random-features count must be an integer >= 1; got {n_features}"
                         " (pass e.g. n_features=800)")
    if kind not in FEATURE_MAPS:
        raise InputError(f"feature map must be one of {', '.join(FEATURE_MAPS)}; got {kind!r}")
    X = as_design(X_train, "X")
    rng = np.random.default_rng(seed)
    d = X.shape[1]
    mean = X.mean(axis=0)
    sd = X.std(axis=0)
    sd = np.where(sd > 0, sd, 1.0)
    W = rng.standard_normal((d, int(n_features))) / np.sqrt(d)
    b = rng.uniform(0.0, 2 * np.pi, int(n_features)) if kind == "fourier" else np.zeros(int(n_features))
    return RandomFeatureMap(kind=kind, weights=W, offsets=b, x_mean=mean, x_scale=sd)


# ----------------------------------------------------------------- noise and signal
@dataclass(frozen=True)
class VarianceEstimate:
    """Noise variance :math:`\\sigma^2` and signal variance :math:`r^2`, and how they were obtained."""

    noise_variance: float
    signal_variance: float
    noise_estimator: str
    signal_estimator: str


def estimate_variances(X, y, *, fit_intercept: bool = True,
                       standardize: bool = True) -> VarianceEstimate:
    """Estimate :math:`\\sigma^2` and :math:`r^2` for the theory overlay.

    Parameters
    ----------
    X : array_like, shape (n, p)
    y : array_like, shape (n,)

    Returns
    -------
    VarianceEstimate

    Notes
    -----
    With :math:`m = n - 1` centered rows (``fit_intercept``) and rank :math:`q`:

    - when the residual degrees of freedom :math:`m - q` are at least
      :math:`\\max(5, m/10)`: :math:`\\hat\\sigma^2 = \\mathrm{RSS}/(n - p - 1)`
      (the OLS residual variance, unbiased for any design) and
      :math:`\\hat r^2 = \\max(s_y^2 - \\hat\\sigma^2, 0)` with :math:`s_y^2` the
      sample variance of the response;
    - otherwise (p near or above n) the ridge residual variance
      :math:`\\mathrm{RSS}(\\lambda)/\\operatorname{tr}(I - H_\\lambda)` at the GCV
      penalty, raised if needed to leave max(1, n/10) residual degrees of freedom
      (Wahba 1983; :func:`paths.selection.rules.noise_variance_from_factors`, the
      estimator ``paths explore`` reports), positive unless y is fitted exactly,
      and :math:`\\hat r^2 = \\max(s_y^2 - \\hat\\sigma^2, 0)`.  The moment estimator
      for isotropic designs (Dicker 2014) is not used: on correlated designs
      (gene-expression tables) it is biased towards 0 and was clipped to
      exactly 0.

    References
    ----------
    Wahba, G. (1983). Bayesian "confidence intervals" for the cross-validated
    smoothing spline. *J. R. Statist. Soc. B* 45, 133–150.

    Dicker, L. H. (2014). Variance estimation in high-dimensional linear models.
    *Biometrika* 101, 269–284.
    """
    X = as_design(X, "X")
    yv = as_response(y, X.shape[0], "y")
    if yv.ndim != 1:
        raise InputError("the threshold sweep takes one target; pass y as a 1-D array")
    design, z = prepare(X, yv[:, None], fit_intercept=fit_intercept, standardize=standardize)
    return _variances_from(design, factorize(z))


def _variances_from(design, fac: Factorization) -> VarianceEstimate:
    """:func:`estimate_variances` on a prepared design (one target) and its factors."""
    zy = design.zy[:, 0]
    m, q = fac.u.shape[0], fac.vt.shape[1]
    s_y2 = float(zy @ zy) / max(m, 1)
    dof = m - fac.rank
    if dof >= max(5, m / 10):
        c = fac.u.T @ zy
        res = zy - fac.u @ c
        s2 = float(res @ res) / dof
        s2 = min(s2, s_y2)
        return VarianceEstimate(
            s2, max(s_y2 - s2, 0.0),
            f"OLS residual variance RSS/(n - rank - 1) on all {q} features ({dof} residual df)",
            "sample variance of the response minus the noise variance")
    est = noise_variance_from_factors(fac, design, fac.u.T @ design.zy)
    s2 = float(est.value)
    label = (f"{est.formula} ({est.reference}), lambda = {float(est.lam):.4g}, on all {q} "
             f"features ({m} centered rows)")
    return VarianceEstimate(s2, max(s_y2 - s2, 0.0), label,
                            "sample variance of the response minus the noise variance")


# ----------------------------------------------------------------- results
@dataclass(frozen=True)
class TheoryCurves:
    """Isotropic-theory predictions at the sweep's points (means over nothing: formulas).

    Attributes
    ----------
    ratio : ndarray, shape (P,)
        ``n_features / n_train`` of each point (the csv ``ratio``).
    gamma : ndarray, shape (P,)
        :math:`p'/m`, :math:`m` the centered rows, at which the formulas are
        evaluated.
    noise_variance, signal_variance : ndarray, shape (P,)
        Per-point :math:`\\sigma^2_{\\text{eff}}`, :math:`r^2_{\\text{eff}}`
        (:func:`paths.theory.misspecified_variances` in a feature-wise sweep).
    min_norm_test_mse, ridge_optimal_test_mse : ndarray, shape (P,)
        :math:`(1 + 1/n')\\,\\sigma^2_{\\text{eff}}` plus the limits of
        :func:`paths.theory.min_norm_risk` and :func:`paths.theory.optimal_ridge_risk`
        (``inf`` at :math:`\\gamma = 1`).
    ridge_fixed_test_mse : ndarray, shape (P,)
        The same for ridge at the sweep's fixed penalty (mean over repeats).
    ls_train_mse : ndarray, shape (P,)
        :func:`paths.theory.ls_train_mse` with :math:`\\sigma^2_{\\text{eff}}`.
    source : str
        Where :math:`\\sigma^2`, :math:`r^2` came from (estimators or the truth).
    nesting : str
        The nesting order the misspecified-model adjustment assumes.
    applies : bool
        False where the isotropic linear theory is not expected to describe the
        sweep (screening order, random features).
    note : str
    """

    ratio: np.ndarray
    gamma: np.ndarray
    noise_variance: np.ndarray
    signal_variance: np.ndarray
    min_norm_test_mse: np.ndarray
    ridge_optimal_test_mse: np.ndarray
    ridge_fixed_test_mse: np.ndarray
    ls_train_mse: np.ndarray
    source: str
    nesting: str
    applies: bool
    note: str = ""


@dataclass(frozen=True)
class PointFit:
    """One fitted sweep point, handed to the ``on_point`` callback of :func:`threshold_sweep`.

    Attributes
    ----------
    repeat, index : int
        Repeat and point number.
    columns : ndarray of int
        Columns of the sweep's feature matrix in the model, in order (indices
        into ``X`` after constant training columns are left out, or into the
        random features).
    rows : ndarray of int
        Training rows used (indices into the training rows).
    design : Design
        Centering and scaling of the point.
    factorization : Factorization
    lambdas : dict
        Penalty of each ridge method (``min_norm`` is 0).
    """

    repeat: int
    index: int
    columns: np.ndarray
    rows: np.ndarray
    design: Design
    factorization: Factorization
    lambdas: dict

    def coef(self, lam: float = 0.0):
        """Coefficients (original feature scale, the point's columns) and intercept at ``lam``."""
        fac, des = self.factorization, self.design
        c = fac.u.T @ des.zy[:, 0]
        beta_std = fac.vt.T @ (algebra.gains(fac.d, lam)[:, 0] * c)
        beta = np.zeros(des.n_features)
        beta[des.active] = beta_std / des.x_scale[des.active]
        return beta, float(des.y_mean[0] - des.x_mean @ beta)


@dataclass(frozen=True)
class ThresholdResult:
    """A sweep: every method's errors at every point and repeat, plus theory and context.

    Arrays of measurements have shape (R, P, M): repeats × points × methods, in
    the order of :attr:`methods` (:data:`METHODS`).  NaN marks a field that does
    not apply (the penalty of a baseline, the smallest singular value of the
    mean predictor).

    Attributes
    ----------
    over : {"features", "samples"}
    order : {"given", "random", "screening"}
    feature_map : str or None
        ``"relu"``/``"fourier"`` in random-features mode.
    n_train, n_test : int
        All training rows, test rows.
    n_features_total : int
        Columns available to the sweep (random features in that mode).
    n_features, n_train_points : ndarray of int, shape (P,)
        :math:`p'` and :math:`n'` of each point.
    ratio : ndarray, shape (P,)
        ``n_features / n_train_points``.
    repeats : int
    methods : tuple of str
    lam, df, train_mse, test_mse, rank, min_singular_value, coef_norm : ndarray, shape (R, P, M)
        ``coef_norm`` is :math:`\\|\\beta\\|_2` on the standardized scale.
    band : {"se", "quantile"}
        How :meth:`band_of` summarizes the repeats.
    variances : VarianceEstimate
        :math:`\\sigma^2`, :math:`r^2` behind the theory (estimated or true).
    theory : TheoryCurves or None
        None in random-features mode (the isotropic linear theory does not apply).
    spectrum_gamma : float
        Aspect ratio :math:`q/m` of the full training design.
    spectrum : ndarray
        Non-zero eigenvalues of :math:`Z^TZ/m` of the full (standardized)
        training design, to hold against :func:`paths.theory.mp_density`.
    ridge_rule : str
        How ``ridge_fixed`` chose its penalty.
    lambda_n_grid : ndarray
        Normalized penalties searched by GCV and the oracle (plus 0).
    seed : int
    fit_intercept, standardize : bool
    notes : list of str
    """

    over: str
    order: str
    feature_map: str | None
    n_train: int
    n_test: int
    n_features_total: int
    n_features: np.ndarray
    n_train_points: np.ndarray
    ratio: np.ndarray
    repeats: int
    methods: tuple
    lam: np.ndarray
    df: np.ndarray
    train_mse: np.ndarray
    test_mse: np.ndarray
    rank: np.ndarray
    min_singular_value: np.ndarray
    coef_norm: np.ndarray
    band: str
    variances: VarianceEstimate
    theory: TheoryCurves | None
    spectrum_gamma: float
    spectrum: np.ndarray = field(repr=False)
    ridge_rule: str = ""
    lambda_n_grid: np.ndarray = field(default_factory=lambda: _LAMBDA_N_GRID, repr=False)
    seed: int = 0
    fit_intercept: bool = True
    standardize: bool = True
    notes: list = field(default_factory=list)

    def _values(self, field_name: str) -> np.ndarray:
        key = {"lambda": "lam"}.get(field_name, field_name)
        if key not in ("lam", "df", "train_mse", "test_mse", "rank", "min_singular_value",
                       "coef_norm"):
            raise InputError(f"field must be one of {', '.join(FIELDS)}; got {field_name!r}")
        return getattr(self, key)

    def method_index(self, method: str) -> int:
        if method not in self.methods:
            raise InputError(f"method must be one of {', '.join(self.methods)}; got {method!r}")
        return self.methods.index(method)

    def mean(self, field_name: str = "test_mse", method: str = "min_norm") -> np.ndarray:
        """Mean over repeats, shape (P,)."""
        v = self._values(field_name)[:, :, self.method_index(method)]
        ok = ~np.isnan(v)
        count = ok.sum(axis=0)
        total = np.where(ok, v, 0.0).sum(axis=0)
        return np.where(count > 0, total / np.maximum(count, 1), np.nan)

    def band_of(self, field_name: str = "test_mse", method: str = "min_norm"):
        """``(lower, upper)`` band over repeats, each shape (P,).

        ``band="se"``: mean ∓ one standard error (SD with ddof=1 over √R; zero
        width for one repeat).  ``band="quantile"``: the 10% and 90% quantiles
        over repeats.
        """
        v = self._values(field_name)[:, :, self.method_index(method)]
        if self.band == "quantile":
            return np.quantile(v, 0.1, axis=0), np.quantile(v, 0.9, axis=0)
        mu = v.mean(axis=0)
        if v.shape[0] < 2:
            return mu.copy(), mu.copy()
        se = v.std(axis=0, ddof=1) / np.sqrt(v.shape[0])
        return mu - se, mu + se

    @property
    def peak(self) -> dict:
        """The point where the min-norm curve's mean test MSE is highest."""
        mu = self.mean("test_mse", "min_norm")
        i = int(np.nanargmax(mu))
        return {"ratio": float(self.ratio[i]), "n_features": int(self.n_features[i]),
                "n_train": int(self.n_train_points[i]), "test_mse": float(mu[i]), "index": i}

    @property
    def best_ridge(self) -> dict:
        """The lowest mean test MSE of a usable ridge rule (fixed or GCV; not the oracle)."""
        best = None
        for meth in ("ridge_fixed", "ridge_gcv"):
            mu = self.mean("test_mse", meth)
            i = int(np.nanargmin(mu))
            if best is None or mu[i] < best["test_mse"]:
                best = {"method": meth, "ratio": float(self.ratio[i]),
                        "n_features": int(self.n_features[i]),
                        "n_train": int(self.n_train_points[i]), "test_mse": float(mu[i])}
        return best


# ----------------------------------------------------------------- grids
def sweep_sizes(lo: int, hi: int, threshold: int, n_points: int) -> np.ndarray:
    """Integer sizes from ``lo`` to ``hi``, dense around ``threshold``.

    Points are evenly spaced in :math:`t = \\operatorname{sign}(x)\\sqrt{|x|}`,
    :math:`x = \\log(v/\\text{threshold})`, so their spacing shrinks toward the
    threshold; ``lo``, ``hi`` and the threshold (and its neighbours) are always
    included; the largest gaps are split until there are ``n_points`` distinct
    integers (or every integer in range).

    Returns
    -------
    ndarray of int, increasing
    """
    lo, hi, thr = int(lo), int(hi), int(threshold)
    if hi - lo + 1 <= n_points:
        return np.arange(lo, hi + 1)
    thr = min(max(thr, lo), hi)
    x_lo, x_hi = np.log(lo / thr), np.log(hi / thr)
    t_lo, t_hi = -np.sqrt(-x_lo), np.sqrt(x_hi)
    forced = {lo, hi, thr, max(lo, thr - 1), min(hi, thr + 1)}
    best = np.array(sorted(forced))
    for k in range(max(2, n_points - len(forced)), 4 * n_points):
        t = np.linspace(t_lo, t_hi, k)
        v = thr * np.exp(np.sign(t) * t * t)
        cand = np.unique(np.concatenate([np.clip(np.rint(v), lo, hi).astype(int),
                                         list(forced)]))
        if cand.size > n_points:
            break
        best = cand
    vals = list(best)
    while len(vals) < n_points:
        arr = np.array(vals, dtype=float)
        gaps = np.diff(np.log(arr))
        gaps[np.diff(arr) < 2] = -1
        j = int(np.argmax(gaps))
        if gaps[j] < 0:
            break
        vals.append(int(np.rint(np.sqrt(arr[j] * arr[j + 1]))))
        vals = sorted(set(vals))
    return np.array(vals, dtype=int)


# ----------------------------------------------------------------- one point
def _row(*, lam, df, train_mse, test_mse, rank, min_singular_value, coef_norm) -> np.ndarray:
    """One method's record at one point, its values in the order of ``FIELDS`` (named, not
    positional, at every call)."""
    return np.array([lam, df, train_mse, test_mse, rank, min_singular_value, coef_norm],
                    dtype=float)


def _fit_point(fac: Factorization, zy: np.ndarray, n: int, fit_intercept: bool,
               test_std: np.ndarray, yt_c: np.ndarray, lam_fixed: float | None,
               df_fraction: float | None, lam_grid: np.ndarray):
    """All ridge methods of one point from its factors.

    Returns an (M_ridge=4, 7) array of FIELDS for min_norm, ridge_fixed,
    ridge_gcv, ridge_oracle, and the dict of penalties.
    """
    d, r = fac.d, fac.rank
    state = algebra.state_from_response(fac, zy[:, None], n, fit_intercept)
    if lam_fixed is None:
        target = df_fraction * r
        lam_f = lambda_for_df(d, target) if 0 < target < r else 0.0
    else:
        lam_f = lam_fixed
    lam = np.concatenate([[0.0], lam_grid, [lam_f]])
    sh = algebra.shrinkage(d, lam)
    rss = algebra.rss(state, lam, sh)[:, 0]  # (K,)
    df = fit_intercept + sh.f.sum(axis=0)
    gcv = algebra.gcv(state, lam, sh)[:, 0]
    # GCV is trusted only where the fit leaves at least max(1, m/10) residual degrees of
    # freedom: its optimality needs tr(H)/n bounded away from 1 (Li 1987, Ann. Statist. 15,
    # 958-975).  Near p' = n, GCV(0+) = n (one or two squared noise components) / (m - r)^2
    # can fall below every sensible penalty by chance and pick an interpolating fit
    # (issue 11: a test MSE of 151.7 against the oracle's 2.0 at p' = n - 2); at
    # interpolation (m = r) its lambda = 0 value is a limit dominated by the smallest
    # singular direction.  Our threshold, the same as the noise-variance estimate's
    # (paths.selection.rules.noise_variance_from_factors).
    resid_dof = algebra.residual_dof(state, sh)
    gcv[resid_dof < max(1.0, 0.1 * state.m)] = np.inf
    coef_norm = algebra.path_coef_norm(state, lam)[:, 0]  # standardized coefficients' norm
    # test projections once per point
    test = algebra.test_sums(state, lam, test_std, yt_c[:, None])[0][:, 0] / yt_c.size
    K = lam.size
    i_gcv = int(np.argmin(np.where(np.isnan(gcv[:K - 1]), np.inf, gcv[:K - 1])))
    i_or = int(np.argmin(test[:K - 1]))
    idx = [0, K - 1, i_gcv, i_or]
    out = np.empty((4, 7))
    dmin = float(d[-1]) if r else np.nan
    for row, i in enumerate(idx):
        out[row] = _row(lam=lam[i], df=df[i], train_mse=rss[i] / n, test_mse=test[i], rank=r,
                        min_singular_value=dmin, coef_norm=coef_norm[i])
    lambdas = {"min_norm": 0.0, "ridge_fixed": float(lam_f), "ridge_gcv": float(lam[i_gcv]),
               "ridge_oracle": float(lam[i_or])}
    return out, lambdas


def _baselines(z: np.ndarray, zy: np.ndarray, n: int, test_std: np.ndarray, yt_c: np.ndarray,
               fit_intercept: bool, best=None):
    """Training-mean and best-single-feature rows (2, 7); ``best`` = (j, beta) to reuse."""
    yy = float(zy @ zy)
    out = np.full((2, 7), np.nan)
    out[0] = _row(lam=np.nan, df=float(fit_intercept), train_mse=yy / n,
                  test_mse=float(np.mean(np.square(yt_c))), rank=0, min_singular_value=np.nan,
                  coef_norm=0.0)
    if best is None:
        zz = np.einsum("ij,ij->j", z, z)
        zty = z.T @ zy
        ok = zz > 0
        gain = np.where(ok, np.square(zty) / np.where(ok, zz, 1.0), -1.0)
        j = int(np.argmax(gain))
        best = (j, float(zty[j] / zz[j]), float(np.sqrt(zz[j])), float(gain[j]))
    j, b, norm_j, gain_j = best
    test = float(np.mean(np.square(yt_c - test_std[:, j] * b)))
    out[1] = _row(lam=np.nan, df=fit_intercept + 1.0, train_mse=max(yy - gain_j, 0.0) / n,
                  test_mse=test, rank=1, min_singular_value=norm_j, coef_norm=abs(b))
    return out, best


# ----------------------------------------------------------------- the sweep
def _check_choice(name, value, choices):
    if value not in choices:
        raise InputError(f"{name} must be one of {', '.join(choices)}; got {value!r}")


def threshold_sweep(
    X,
    y,
    X_test,
    y_test,
    *,
    over: str = "features",
    order: str = "given",
    repeats: int = 1,
    seed: int = 0,
    n_points: int = 40,
    sizes=None,
    random_features: int | None = None,
    feature_map: str = "relu",
    ridge_lambda: float | None = None,
    ridge_df_fraction: float | None = None,
    band: str = "se",
    fit_intercept: bool = True,
    standardize: bool = True,
    solver: str = "auto",
    variances: VarianceEstimate | None = None,
    variance_source: str | None = None,
    progress: Callable[[str, int, int], None] | None = None,
    on_point: Callable[[PointFit], None] | None = None,
) -> ThresholdResult:
    """Sweep the model size across the interpolation threshold and record every method's errors.

    Parameters
    ----------
    X, y : array_like, shapes (n, d) and (n,)
        Training rows.
    X_test, y_test : array_like, shapes (n_test, d) and (n_test,)
        Test rows (at least 2).
    over : {"features", "samples"}
        Grow the feature set (nested, :math:`p' = 1 \\ldots p`) or the training
        set (nested, :math:`n' = 3 \\ldots n`).
    order : {"given", "random", "screening"}
        Nesting order: the given order, a random order per repeat (seeded), or by
        decreasing absolute correlation with ``y`` on the training rows
        (features only).  In samples mode, the order of the rows.
    repeats : int
        Number of repeats; with ``order="given"`` or ``"screening"`` only
        meaningful with random features (new features per repeat).
    seed : int
    n_points : int
        Grid points (:func:`sweep_sizes`), dense around the threshold.
    sizes : array_like of int, optional
        Explicit grid (must straddle the threshold).
    random_features : int, optional
        Map the inputs to this many random features first (:func:`random_feature_map`).
    feature_map : {"relu", "fourier"}
    ridge_lambda : float, optional
        Fixed penalty of ``ridge_fixed`` (package convention).
    ridge_df_fraction : float, optional
        Or: the penalty leaving this fraction of the point's rank as df.
        Default when neither is given: ``ridge_lambda = 0.1 * m``
        (:math:`\\lambda_n = 0.1`).
    band : {"se", "quantile"}
    fit_intercept, standardize : bool
    solver : {"auto", "svd", "gram"}
    variances : VarianceEstimate, optional
        :math:`\\sigma^2`, :math:`r^2` for the theory; default
        :func:`estimate_variances` on the training rows.
    variance_source : str, optional
        Label of ``variances`` (e.g. "truth (simulation)").
    progress : callable ``(stage, done, total)``, optional
    on_point : callable ``(PointFit)``, optional
        Called with each fitted point (used by :mod:`paths.simulate`).

    Returns
    -------
    ThresholdResult

    Raises
    ------
    InputError
        A grid that cannot reach the threshold (the message gives the range it
        reaches), fewer than 2 test rows, a random-features count below 1, an
        unknown option.

    Notes
    -----
    Per point with factors :math:`Z = UDV^T`, :math:`c = U^Ty`: ridge
    coefficients :math:`V\\operatorname{diag}(d/(d^2+\\lambda))c`, RSS and GCV as
    in :func:`paths.fit_path`, test predictions :math:`(\\tilde X_{\\text{test}}V)
    \\operatorname{diag}(d/(d^2+\\lambda))c` for all penalties at once.
    ``ridge_gcv`` and ``ridge_oracle`` search :math:`\\lambda = m\\lambda_n`,
    :math:`\\lambda_n \\in \\{0\\} \\cup [10^{-4}, 10^3]` (57 log-spaced values);
    where the point interpolates (rank = m) GCV is 0/0 at :math:`\\lambda = 0` and
    that candidate is left out of its search.

    With an intercept the theory's test MSE carries the factor :math:`1 + 1/n'`:
    for Gaussian rows the sample mean is independent of the centered rows, so
    the intercept's error :math:`\\bar\\varepsilon - \\bar x^T(\\hat\\beta - \\beta)`
    adds :math:`(\\sigma^2 + \\text{excess})/n'`.
    """
    data = _validated_inputs(X, y, X_test, y_test, over=over, order=order, band=band,
                             repeats=repeats, n_points=n_points, random_features=random_features,
                             ridge_lambda=ridge_lambda, ridge_df_fraction=ridge_df_fraction)
    rng = np.random.default_rng(seed)
    if random_features is None:
        data = _without_constant_columns(data, fit_intercept)
    p_total = int(random_features) if random_features is not None else data.X.shape[1]
    spec = _SweepSpec(over=over, order=order, fit_intercept=fit_intercept,
                      standardize=standardize, solver=solver, ridge_lambda=ridge_lambda,
                      ridge_df_fraction=ridge_df_fraction, random_features=random_features,
                      variances=variances, on_point=on_point)
    grid = _sweep_grid(spec, sizes, n=data.n, p_total=p_total, n_points=n_points)
    P = grid.n_features.size
    tally = _Tally(vals=np.full((data.repeats, P, len(METHODS), 7), np.nan),
                   total=data.repeats * P, progress=progress)
    for rep in range(data.repeats):
        if random_features is not None:
            fmap = random_feature_map(data.X, int(random_features), kind=feature_map, seed=rng)
            F, Ft = fmap.transform(data.X), fmap.transform(data.X_test)
        else:
            F, Ft = data.X, data.X_test
        # one column (or row) reordering per repeat
        if over == "features":
            _sweep_features(rep, F, Ft, data, grid, spec, rng, tally)
        else:
            _sweep_samples(rep, F, Ft, data, grid, spec, rng, tally)
    return _sweep_result(data, grid, spec, tally, p_total=p_total, feature_map=feature_map,
                         band=band, seed=seed, variance_source=variance_source)


@dataclass(frozen=True)
class _SweepData:
    """The validated training and test rows of a sweep (and notes on what was left out)."""

    X: np.ndarray
    y: np.ndarray
    X_test: np.ndarray
    y_test: np.ndarray
    repeats: int
    notes: tuple = ()

    @property
    def n(self) -> int:
        return self.X.shape[0]


@dataclass(frozen=True)
class _SweepSpec:
    """The options every sweep point is fitted with."""

    over: str
    order: str
    fit_intercept: bool
    standardize: bool
    solver: str
    ridge_lambda: float | None
    ridge_df_fraction: float | None
    random_features: int | None
    variances: VarianceEstimate | None
    on_point: Callable[[PointFit], None] | None

    @property
    def intercept(self) -> int:
        return 1 if self.fit_intercept else 0

    def fixed_penalty(self, scale: float) -> float | None:
        """Penalty of ``ridge_fixed`` (None: chosen per point from the df fraction)."""
        if self.ridge_lambda is not None:
            return self.ridge_lambda
        return None if self.ridge_df_fraction is not None else 0.1 * scale


@dataclass(frozen=True)
class _SweepGrid:
    """Features :math:`p'` and training rows :math:`n'` of each point."""

    n_features: np.ndarray
    n_rows: np.ndarray


@dataclass(frozen=True)
class _NestedDesign:
    """A repeat's reordered, centered and scaled design whose leading columns nest."""

    design: Design
    z: np.ndarray
    zy: np.ndarray
    test_std: np.ndarray
    yt_c: np.ndarray


@dataclass
class _Tally:
    """What the sweep loop accumulates: the values, the progress count, full-design facts."""

    vals: np.ndarray
    total: int
    progress: Callable[[str, int, int], None] | None
    done: int = 0
    spectrum: np.ndarray | None = None
    spec_gamma: float = float("nan")
    est: VarianceEstimate | None = None

    def tick(self) -> None:
        """Count one point done and report it."""
        self.done += 1
        if self.progress is not None:
            self.progress("sweep", self.done, self.total)


def _validated_inputs(X, y, X_test, y_test, *, over, order, band, repeats, n_points,
                      random_features, ridge_lambda, ridge_df_fraction) -> _SweepData:
    """Check the rows and options of :func:`threshold_sweep` (one-line InputErrors)."""
    _check_choice("over", over, OVERS)
    _check_choice("order", order, ORDERS)
    _check_choice("band", band, BANDS)
    X = as_design(X, "X")
    n, d_in = X.shape
    yv = as_response(y, n, "y")
    if yv.ndim != 1:
        raise InputError("the threshold sweep takes one target; pass y as a 1-D array")
    if X_test is None or y_test is None:
        raise InputError("the sweep needs test rows; pass X_test and y_test")
    Xt = as_design(X_test, "X_test")
    if Xt.shape[0] < 2:
        raise InputError(f"the sweep has {Xt.shape[0]} test row(s); at least 2 are needed — "
                         "pass a larger holdout= fraction or a test file with more rows "
                         "(test_file=)")
    if Xt.shape[1] != d_in:
        raise InputError(f"X_test has {Xt.shape[1]} columns but X has {d_in}; "
                         "pass the same features in the same order")
    yt = as_response(y_test, Xt.shape[0], "y_test").reshape(-1)
    if int(repeats) != repeats or repeats < 1:
        raise InputError(f"repeats must be an integer >= 1; got {repeats}")
    repeats = int(repeats)
    if n_points < 3:
        raise InputError(f"the sweep needs at least 3 points; got {n_points} (pass n_points=40)")
    if ridge_lambda is not None and ridge_df_fraction is not None:
        raise InputError("give either a fixed ridge penalty or a df fraction, not both")
    if ridge_lambda is not None and not (np.isfinite(ridge_lambda) and ridge_lambda > 0):
        raise InputError(f"the fixed ridge penalty must be finite and > 0; got {ridge_lambda}")
    if ridge_df_fraction is not None and not 0 < ridge_df_fraction < 1:
        raise InputError(f"the ridge df fraction must lie in (0, 1); got {ridge_df_fraction}")
    if order == "screening" and over == "samples":
        raise InputError("order='screening' ranks features; for over='samples' use "
                         "order='given' or order='random'")
    if random_features is not None:
        if int(random_features) != random_features or random_features < 1:
            raise InputError(f"the random-features count must be an integer >= 1; got "
                             f"{random_features} (pass e.g. random_features=800)")
        rows = X.shape[0] + Xt.shape[0]
        check_memory(8.0 * 3 * rows * float(random_features),
                     f"{random_features} random features of {rows} rows",
                     "ask for fewer random features (random_features=)")
    if (repeats > 1 and random_features is None and over == "features"
            and order != "random"):
        raise InputError(f"repeats={repeats} repeats nothing with order={order!r}; "
                         "use order='random' or random_features=, or repeats=1")
    if (repeats > 1 and over == "samples" and order != "random"
            and random_features is None):
        raise InputError(f"repeats={repeats} repeats nothing with rows in the given order; "
                         "use order='random' or repeats=1")
    if np.ptp(yv) == 0:
        raise InputError("y is constant on the training rows; there is nothing to fit")
    return _SweepData(X=X, y=yv, X_test=Xt, y_test=yt, repeats=repeats)


def _without_constant_columns(data: _SweepData, fit_intercept: bool) -> _SweepData:
    """Leave out training columns constant to rounding (with an intercept they carry nothing)."""
    X = data.X
    sd = X.std(axis=0)
    keep = sd > data.n * _EPS * np.max(np.abs(X), axis=0)
    if not fit_intercept or keep.all():
        return data
    note = f"{int((~keep).sum())} constant training column(s) left out of the sweep"
    data = replace(data, X=X[:, keep], X_test=data.X_test[:, keep], notes=data.notes + (note,))
    if data.X.shape[1] == 0:
        raise InputError("every feature is constant on the training rows; nothing to fit")
    return data


def _sweep_grid(spec: _SweepSpec, sizes, *, n: int, p_total: int, n_points: int) -> _SweepGrid:
    """The points of the sweep, checked to straddle the threshold."""
    intercept = spec.intercept
    if spec.over == "features":
        thr = n - intercept
        if sizes is None:
            lo, hi = 1, p_total
            if hi < n:
                fix = ("pass more random features (random_features=N with N >= "
                       f"{n})" if spec.random_features is not None else
                       f"map the inputs to random features (random_features=N, N >= {n})")
                raise InputError(
                    f"the feature-wise sweep reaches p' = 1..{hi} but the threshold is at "
                    f"p' = n_train = {n}; {fix} or hold out more rows (holdout=)")
            grid = sweep_sizes(lo, hi, thr, n_points)
        else:
            grid = np.unique(np.asarray(sizes, dtype=int))
            if grid.min() < 1 or grid.max() > p_total or grid.min() > thr or grid.max() < n:
                raise InputError(
                    f"the given sizes reach p' = {grid.min()}..{grid.max()} but must lie in "
                    f"1..{p_total} and straddle the threshold p' = n_train = {n}; adjust them")
        return _SweepGrid(n_features=grid, n_rows=np.full(grid.size, n))
    thr = p_total + intercept
    lo = 2 + intercept
    if sizes is None:
        if n <= thr:
            raise InputError(
                f"the sample-wise sweep reaches n' = {lo}..{n} but the threshold is at "
                f"n' = p + 1 = {thr}; use fewer feature columns or a smaller "
                "holdout= so the training rows exceed the features")
        grid = sweep_sizes(lo, n, thr, n_points)
    else:
        grid = np.unique(np.asarray(sizes, dtype=int))
        if grid.min() < lo or grid.max() > n or grid.min() > thr or grid.max() <= thr:
            raise InputError(
                f"the given sizes reach n' = {grid.min()}..{grid.max()} but must lie in "
                f"{lo}..{n} and straddle the threshold n' = {thr}; adjust them")
    return _SweepGrid(n_features=np.full(grid.size, p_total), n_rows=grid)


def _feature_order(F: np.ndarray, y: np.ndarray, order: str, rng) -> np.ndarray:
    """Column order of one feature-wise repeat: given, random or by screening score."""
    if order == "random":
        return rng.permutation(F.shape[1])
    if order == "screening":
        Fc = F - F.mean(axis=0)
        yc = y - y.mean()
        nrm = np.sqrt(np.einsum("ij,ij->j", Fc, Fc)) * np.sqrt(yc @ yc)
        score = np.abs(Fc.T @ yc) / np.where(nrm > 0, nrm, 1.0)
        return np.argsort(-score, kind="stable")
    return np.arange(F.shape[1])


def _nested_design(Fr: np.ndarray, Ftr: np.ndarray, data: _SweepData,
                   spec: _SweepSpec) -> _NestedDesign:
    """Center and scale a repeat's reordered columns once; every point takes leading columns."""
    design, z = prepare(Fr, data.y[:, None], fit_intercept=spec.fit_intercept,
                        standardize=spec.standardize)
    if not design.active.all():  # constant random features: drop, keep nesting
        z_full = np.zeros((z.shape[0], Fr.shape[1]))
        z_full[:, design.active] = z
        z = z_full
    tstd = np.zeros_like(Ftr)
    a = design.active
    tstd[:, a] = (Ftr[:, a] - design.x_mean[a]) / design.x_scale[a]
    return _NestedDesign(design=design, z=np.asfortranarray(z), zy=design.zy[:, 0],
                         test_std=np.asfortranarray(tstd), yt_c=data.y_test - design.y_mean[0])


def _sweep_features(rep: int, F, Ft, data: _SweepData, grid: _SweepGrid, spec: _SweepSpec,
                    rng, tally: _Tally) -> None:
    """One feature-wise repeat: nested column sets on all training rows, into ``tally``."""
    n = data.n
    perm = _feature_order(F, data.y, spec.order, rng)
    nest = _nested_design(F[:, perm], Ft[:, perm], data, spec)
    zf = nest.z
    base, _ = _baselines(zf, nest.zy, n, nest.test_std, nest.yt_c, spec.fit_intercept)
    m = zf.shape[0]
    lam_grid = m * _LAMBDA_N_GRID
    lam_fixed = spec.fixed_penalty(m)
    for i, k in enumerate(grid.n_features):
        fac = factorize(zf[:, :k], solver=spec.solver)
        if rep == 0 and k == zf.shape[1]:  # the full design: spectrum, sigma^2, r^2
            tally.spectrum, tally.spec_gamma = _spectrum_of(fac, m), k / m
            if spec.random_features is None and spec.variances is None:
                tally.est = _variances_from(nest.design, fac)
        if fac.rank == 0:
            tally.vals[rep, i, :4, :] = np.nan
            lambdas = {}
        else:
            tally.vals[rep, i, :4], lambdas = _fit_point(
                fac, nest.zy, n, spec.fit_intercept, nest.test_std[:, :k] @ fac.vt.T,
                nest.yt_c, lam_fixed, spec.ridge_df_fraction, lam_grid)
        tally.vals[rep, i, 4:] = base
        if spec.on_point is not None:
            spec.on_point(PointFit(rep, i, perm[:k], np.arange(n),
                                   _sub_design(nest.design, k), fac, lambdas))
        tally.tick()


def _sweep_samples(rep: int, F, Ft, data: _SweepData, grid: _SweepGrid, spec: _SweepSpec,
                   rng, tally: _Tally) -> None:
    """One sample-wise repeat: nested training rows, all columns, into ``tally``."""
    n = data.n
    rows = rng.permutation(n) if spec.order == "random" else np.arange(n)
    lam_fixed = spec.fixed_penalty(n - spec.intercept)
    for i, k in enumerate(grid.n_rows):
        sel = rows[:k]
        if np.ptp(data.y[sel]) == 0:
            tally.tick()
            continue
        design, z = prepare(F[sel], data.y[sel, None], fit_intercept=spec.fit_intercept,
                            standardize=spec.standardize)
        zy = design.zy[:, 0]
        tstd = design.transform(Ft)
        yt_c = data.y_test - design.y_mean[0]
        m = z.shape[0]
        fac = factorize(z, solver=spec.solver)
        if rep == 0 and k == grid.n_rows[-1]:  # all training rows: spectrum, sigma^2, r^2
            tally.spectrum, tally.spec_gamma = _spectrum_of(fac, m), z.shape[1] / m
            if spec.variances is None:
                tally.est = _variances_from(design, fac)
        if fac.rank == 0:
            lambdas = {}
        else:
            tally.vals[rep, i, :4], lambdas = _fit_point(
                fac, zy, int(k), spec.fit_intercept, tstd @ fac.vt.T, yt_c, lam_fixed,
                spec.ridge_df_fraction, m * _LAMBDA_N_GRID)
        tally.vals[rep, i, 4:], _ = _baselines(z, zy, int(k), tstd, yt_c, spec.fit_intercept)
        if spec.on_point is not None:
            spec.on_point(PointFit(rep, i, np.flatnonzero(design.active), sel, design, fac,
                                   lambdas))
        tally.tick()


def _ridge_rule(spec: _SweepSpec, n: int) -> str:
    """How ``ridge_fixed`` chose its penalty, in words."""
    if spec.ridge_lambda is not None:
        return f"fixed penalty lambda = {spec.ridge_lambda:g}"
    if spec.ridge_df_fraction is not None:
        return f"penalty leaving df = {spec.ridge_df_fraction:g} x rank at each point"
    m_all = n - spec.intercept
    return f"fixed penalty lambda = 0.1 x {m_all} = {0.1 * m_all:g} (lambda_n = 0.1)"


def _sweep_result(data: _SweepData, grid: _SweepGrid, spec: _SweepSpec, tally: _Tally, *,
                  p_total: int, feature_map: str, band: str, seed: int,
                  variance_source: str | None) -> ThresholdResult:
    """Assemble the :class:`ThresholdResult`: read-only fields, variances, theory, notes."""
    n, n_feat, n_rows = data.n, grid.n_features, grid.n_rows
    notes = list(data.notes)
    variances = spec.variances
    if variances is None:
        variances = tally.est if tally.est is not None else estimate_variances(
            data.X, data.y, fit_intercept=spec.fit_intercept, standardize=spec.standardize)
        source = "estimated from the training rows: " + variances.noise_estimator
    else:
        source = variance_source or "given"
    fields = {name: tally.vals[..., j] for j, name in enumerate(
        ("lam", "df", "train_mse", "test_mse", "rank", "min_singular_value", "coef_norm"))}
    lf = fields["lam"][:, :, 1]
    ok = np.isfinite(lf)
    lam_fixed_mean = np.where(ok.any(axis=0), np.where(ok, lf, 0.0).sum(axis=0)
                              / np.maximum(ok.sum(axis=0), 1), np.nan)
    th = None
    if spec.random_features is None:
        th = _theory_curves(spec.over, spec.order, n_feat, n_rows, p_total, spec.intercept,
                            variances, source, lam_fixed_mean)
    else:
        notes.append("no theory overlay: the isotropic linear theory does not describe random "
                     "features")
    for a in fields.values():
        a.flags.writeable = False
    spectrum = tally.spectrum
    return ThresholdResult(
        over=spec.over, order=spec.order,
        feature_map=feature_map if spec.random_features is not None else None,
        n_train=n, n_test=data.X_test.shape[0], n_features_total=p_total, n_features=n_feat,
        n_train_points=n_rows, ratio=n_feat / n_rows, repeats=data.repeats, methods=METHODS,
        band=band, variances=variances, theory=th, spectrum_gamma=float(tally.spec_gamma),
        spectrum=spectrum if spectrum is not None else np.zeros(0),
        ridge_rule=_ridge_rule(spec, n), seed=seed, fit_intercept=spec.fit_intercept,
        standardize=spec.standardize, notes=notes, **fields)


def _sub_design(design: Design, k: int) -> Design:
    """The Design of the leading ``k`` columns (preprocessing is column by column)."""
    return Design(zy=design.zy, x_mean=design.x_mean[:k], x_scale=design.x_scale[:k],
                  y_mean=design.y_mean, active=design.active[:k], n_samples=design.n_samples,
                  fit_intercept=design.fit_intercept, standardize=design.standardize)


def _spectrum_of(fac: Factorization, m: int) -> np.ndarray:
    """Non-zero eigenvalues :math:`d_j^2/m` of :math:`Z^TZ/m`, descending."""
    return np.square(fac.d) / m


def _theory_curves(over, order, n_feat, n_rows, p_total, intercept, var: VarianceEstimate,
                   source, lam_fixed_mean) -> TheoryCurves:
    m = n_rows - intercept
    gamma = n_feat / m
    if over == "features":
        eff = theory.misspecified_variances(n_feat, p_total, var.noise_variance,
                                            var.signal_variance)
        s2, r2 = np.asarray(eff.noise_variance), np.asarray(eff.signal_variance)
        nesting = (f"nested feature sets in {order} order; the omitted features' signal "
                   "counted as noise, spread evenly (Hastie et al. 2022, sec. 5)")
    else:
        s2 = np.full(n_feat.shape, var.noise_variance)
        r2 = np.full(n_feat.shape, var.signal_variance)
        nesting = "all features; nested training rows"
    # with an intercept the test error gains a factor (1 + 1/n'): for Gaussian rows the
    # sample mean is independent of the centered rows, and the intercept's error
    # eps_bar - xbar'(beta_hat - beta) has variance (sigma^2 + excess)/n'
    infl = 1.0 + intercept / n_rows
    mn = infl * (s2 + theory.min_norm_risk(gamma, s2, r2))
    opt = infl * (s2 + theory.optimal_ridge_risk(gamma, s2, r2))
    with np.errstate(invalid="ignore"):
        lam_n = lam_fixed_mean / m
    fixed = np.full(gamma.shape, np.nan)
    ok = np.isfinite(lam_n) & (lam_n > 0)
    fixed[ok] = infl[ok] * (s2[ok] + theory.ridge_risk(lam_n[ok], gamma[ok], s2[ok], r2[ok]))
    train = theory.ls_train_mse(n_rows, np.minimum(n_feat, n_rows), s2,
                                fit_intercept=bool(intercept))
    applies = order != "screening"
    note = ("" if applies else "screening puts the strong features first, so the evenly-spread "
            "adjustment understates the signal of small models; curves for reference only")
    return TheoryCurves(ratio=n_feat / n_rows, gamma=gamma, noise_variance=s2,
                        signal_variance=r2, min_norm_test_mse=mn, ridge_optimal_test_mse=opt,
                        ridge_fixed_test_mse=fixed, ls_train_mse=train, source=source,
                        nesting=nesting, applies=applies, note=note)


# ----------------------------------------------------------------- tables and records
def _num(v):
    v = float(v)
    return v if np.isfinite(v) else None


def threshold_table(result: ThresholdResult):
    """``threshold.csv``: header and rows, one per point × repeat × method (:data:`CSV_COLUMNS`)."""
    rows = []
    for rep in range(result.repeats):
        for i in range(result.n_features.size):
            for j, meth in enumerate(result.methods):
                rank = result.rank[rep, i, j]
                rows.append([
                    result.over, int(result.n_train_points[i]), int(result.n_features[i]),
                    float(result.ratio[i]), rep, meth, _num(result.lam[rep, i, j]),
                    _num(result.df[rep, i, j]), _num(result.train_mse[rep, i, j]),
                    _num(result.test_mse[rep, i, j]),
                    int(rank) if np.isfinite(rank) else None,
                    _num(result.min_singular_value[rep, i, j]),
                    _num(result.coef_norm[rep, i, j]),
                ])
    return list(CSV_COLUMNS), rows


def _lst(a):
    return None if a is None else [_num(v) for v in np.asarray(a, dtype=float)]


def threshold_summary(result: ThresholdResult, **extra) -> dict:
    """The ``threshold.json`` record (contract keys plus context); ``extra`` added verbatim.

    Keys: ``n_train``, ``n_test``, ``over``, ``peak`` (``ratio``, ``n_features``,
    ``test_mse`` of the min-norm curve's highest mean), ``best_ridge_test_mse``
    (lowest mean test MSE of ``ridge_fixed``/``ridge_gcv``, the oracle excluded),
    ``noise_variance``, ``signal_variance`` with ``noise_variance_estimator`` and
    ``signal_variance_estimator``, ``theory`` (curves on the same ``ratio``; JSON
    ``null`` where infinite), ``curves`` (mean and band per method), and context.
    """
    peak = result.peak
    best = result.best_ridge
    curves = {}
    for meth in result.methods:
        entry = {}
        for fld in ("test_mse", "train_mse"):
            lo, hi = result.band_of(fld, meth)
            entry[fld] = {"mean": _lst(result.mean(fld, meth)), "lower": _lst(lo),
                          "upper": _lst(hi)}
        entry["lambda"] = _lst(result.mean("lambda", meth))
        entry["df"] = _lst(result.mean("df", meth))
        curves[meth] = entry
    th = result.theory
    theory_rec = None
    if th is not None:
        theory_rec = {
            "ratio": _lst(th.ratio), "gamma": _lst(th.gamma),
            "noise_variance": _lst(th.noise_variance),
            "signal_variance": _lst(th.signal_variance),
            "min_norm_test_mse": _lst(th.min_norm_test_mse),
            "ridge_optimal_test_mse": _lst(th.ridge_optimal_test_mse),
            "ridge_fixed_test_mse": _lst(th.ridge_fixed_test_mse),
            "ls_train_mse": _lst(th.ls_train_mse),
            "source": th.source, "nesting": th.nesting, "applies": th.applies, "note": th.note,
            "references": [
                "Hastie, Montanari, Rosset & Tibshirani (2022), Ann. Statist. 50, Thm 1 and sec. 5",
                "Dobriban & Wager (2018), Ann. Statist. 46",
            ],
        }
    band_desc = ("mean -/+ one standard error over repeats (SD ddof=1 / sqrt(R))"
                 if result.band == "se" else "10% and 90% quantiles over repeats")
    out = {
        "n_train": result.n_train,
        "n_test": result.n_test,
        "over": result.over,
        "order": result.order,
        "feature_map": result.feature_map,
        "n_features_total": result.n_features_total,
        "repeats": result.repeats,
        "seed": result.seed,
        "points": int(result.n_features.size),
        "ratio": _lst(result.ratio),
        "n_features": [int(v) for v in result.n_features],
        "n_train_points": [int(v) for v in result.n_train_points],
        "peak": {k: peak[k] for k in ("ratio", "n_features", "n_train", "test_mse")},
        "best_ridge_test_mse": best["test_mse"],
        "best_ridge": best,
        "best_oracle_ridge_test_mse": _num(np.nanmin(result.mean("test_mse", "ridge_oracle"))),
        "noise_variance": result.variances.noise_variance,
        "signal_variance": result.variances.signal_variance,
        "noise_variance_estimator": result.variances.noise_estimator,
        "signal_variance_estimator": result.variances.signal_estimator,
        "theory": theory_rec,
        "curves": curves,
        "band": band_desc,
        "methods": list(result.methods),
        "ridge_fixed_rule": result.ridge_rule,
        "ridge_gcv_grid": "lambda = m * lambda_n, lambda_n in {0} and 57 log-spaced values "
                          "in [1e-4, 1e3], m = centered training rows",
        "ridge_oracle_note": "ridge_oracle picks the penalty best on the TEST rows: an oracle "
                             "bound, not a usable rule",
        "spectrum": {"gamma": _num(result.spectrum_gamma),
                     "eigenvalues": _lst(result.spectrum),
                     "note": "non-zero eigenvalues of Z'Z/m of the full standardized training "
                             "design; compare with the Marchenko-Pastur density at gamma"},
        "fit_intercept": result.fit_intercept,
        "standardize": result.standardize,
        "notes": list(result.notes),
    }
    out.update(extra)
    return out
