"""Prediction intervals from the one factorization: jackknife+, CV+ and split conformal.

For a new row :math:`x`, each method forms an interval from fits that left
some training rows out, with a finite-sample coverage guarantee under
exchangeability of the training rows and the new one (Barber, Candès, Ramdas &
Tibshirani 2021; Lei, G'Sell, Rinaldo, Tibshirani & Wasserman 2018).  Ridge
with fixed preprocessing is a linear smoother, so every leave-out fit at
:math:`x` is a closed form in the full-data fit (see
:func:`leave_out_shift`): nothing is refitted.

Penalty convention: that of :data:`paths.core.path.PENALTY_CONVENTION`.  The
column scales (``standardize=True``) are learned on all training rows and held
fixed in the leave-out fits, as in :mod:`paths.selection.cv`; the intercept is
refitted in each.  With ``standardize=False`` every leave-out fit is exactly a
refit on the remaining rows.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from paths.data.validation import InputError, as_design, as_lambdas
from paths.core import algebra
from paths.core.design import to_sample_space

__all__ = ["METHODS", "PredictionIntervals", "prediction_intervals", "conformal_ranks",
           "guarantee"]

METHODS = ("jackknife+", "cv+", "split")
_BLOCK_BYTES = 1 << 25  # 32 MiB: the largest (rows x n) array held at once


@dataclass(frozen=True)
class PredictionIntervals:
    """Prediction intervals for new rows at one penalty.

    Attributes
    ----------
    prediction : ndarray, shape (m,) or (m, t)
        Point prediction: the full-data fit (jackknife+, CV+) or the fit on the
        proper training rows (split).
    lower, upper : ndarray, shape (m,) or (m, t)
        Interval endpoints.
    level : float
        Nominal level :math:`1 - \\alpha`.
    method : str
        ``"jackknife+"``, ``"cv+"`` or ``"split"``.
    lam : float or ndarray, shape (t,)
        The penalty (per target with several targets).
    guarantee : str
        The finite-sample coverage guarantee of the method, with its assumption.
    n_folds : int or None
        K for CV+.
    n_calibration : int or None
        Calibration rows for split conformal.
    """

    prediction: np.ndarray
    lower: np.ndarray
    upper: np.ndarray
    level: float
    method: str
    lam: float | np.ndarray
    guarantee: str = ""
    n_folds: int | None = None
    n_calibration: int | None = None

    @property
    def width(self) -> np.ndarray:
        """``upper - lower``."""
        return self.upper - self.lower

    def coverage(self, y) -> float | np.ndarray:
        """Share of ``y`` (shape of ``prediction``) inside its interval, per target."""
        y = np.asarray(y, dtype=float).reshape(self.prediction.shape)
        inside = (self.lower <= y) & (y <= self.upper)
        return inside.mean(axis=0) if inside.ndim == 2 else float(inside.mean())


def conformal_ranks(n: int, level: float) -> tuple[int, int]:
    """Ranks of the lower and upper endpoints among ``n`` leave-out values.

    :math:`k_- = \\lfloor \\alpha (n+1) \\rfloor` and
    :math:`k_+ = \\lceil (1-\\alpha)(n+1) \\rceil`, :math:`\\alpha = 1 - \\text{level}`
    (1-based: the :math:`k`-th smallest), as in Barber et al. (2021), eq. (6).

    Raises
    ------
    InputError
        A level outside (0, 1), or too few rows for finite endpoints
        (:math:`k_- \\ge 1` and :math:`k_+ \\le n`).

    Examples
    --------
    >>> conformal_ranks(99, 0.9)
    (10, 90)
    """
    level = float(level)
    if not 0.0 < level < 1.0:
        raise InputError(f"level must lie strictly between 0 and 1 (e.g. 0.9); got {level!r}")
    alpha = 1.0 - level
    # a tiny slack so that alpha (n + 1) = 10.000000000000002 from rounding still gives 10
    slack = 8 * np.finfo(float).eps * (n + 1)
    k_lo = int(np.floor(alpha * (n + 1) + slack))
    k_hi = int(np.ceil((1.0 - alpha) * (n + 1) - slack))
    if k_lo < 1 or k_hi > n:
        need = int(np.ceil(1.0 / alpha - 1.0 - 1e-9))
        raise InputError(
            f"level {level:g} needs at least {need} leave-out values for finite endpoints "
            f"(there are {n}); lower the level or use more rows"
        )
    return k_lo, k_hi


def guarantee(method: str, level: float, *, n: int | None = None,
              n_folds: int | None = None) -> str:
    """The coverage guarantee of ``method`` at ``level``, as a sentence."""
    alpha = 1.0 - level
    if method == "split":
        return (f"coverage >= {level:g} (1 - alpha) for exchangeable rows "
                "(Lei et al. 2018, Thm 2.2)")
    if method == "jackknife+":
        return (f"coverage >= {1 - 2 * alpha:g} (1 - 2 alpha) for exchangeable rows "
                "(Barber et al. 2021, Thm 1)")
    K = n_folds
    slack = min(2 * (1 - 1 / K) / (n / K + 1), (1 - K / n) / (K + 1))
    return (f"coverage >= {1 - 2 * alpha - slack:.4g} (1 - 2 alpha - {slack:.3g}) for "
            f"exchangeable rows (Barber et al. 2021, Thm 4, K = {K})")


# ------------------------------------------------------------------ orchestration
def _blocks(m: int, n: int, budget: int):
    """Row blocks of new rows so that three (rows x n) float64 arrays fit in ``budget`` bytes."""
    step = max(1, budget // (3 * 8 * max(n, 1)))
    for s in range(0, m, step):
        yield s, min(s + step, m)


def _project(path, X_new: np.ndarray, budget: int) -> np.ndarray:
    """New rows in the right singular basis, :math:`a(x) = V^T \\tilde x`, shape (m, r),
    centered and scaled a row block at a time (no (m, p) copy beyond the budget)."""
    vt = path.factorization.vt
    m, p = X_new.shape
    out = np.empty((m, vt.shape[0]))
    step = max(1, budget // (8 * max(p, 1)))
    for s in range(0, m, step):
        np.matmul(path.design.transform(X_new[s:s + step]), vt.T, out=out[s:s + step])
    return out


def _quantiles(centers: np.ndarray, radius: np.ndarray, k_lo: int, k_hi: int):
    """Per row: the k_lo-th smallest of centers - radius, the k_hi-th smallest of centers + radius."""
    vals = centers - radius
    lower = np.partition(vals, k_lo - 1, axis=1)[:, k_lo - 1]
    np.add(centers, radius, out=vals)
    upper = np.partition(vals, k_hi - 1, axis=1)[:, k_hi - 1]
    return lower, upper


def _one_target(path, state, proj, lam, j, method, k_lo, k_hi, labels, budget):
    """(prediction, lower, upper) of target ``j`` for all new rows."""
    from paths.selection.cv import heldout_residuals

    pred = path.design.y_mean[j] + proj @ (algebra.gains(state.d, lam)[:, 0] * state.uty[:, j])
    m, n = proj.shape[0], path.n_samples
    lower, upper = np.empty(m), np.empty(m)
    un = to_sample_space(path.factorization.u, path.fit_intercept)  # (n, r)
    if method == "jackknife+":
        e = algebra.loo_residuals(state, np.array([lam]))[:, 0, j]
        radius = np.abs(e)
        for s, t in _blocks(m, n, budget):
            shift = algebra.cross_hat(state, proj[s:t], lam, un)
            shift *= e  # mu(x) - mu_{-i}(x) = h_i(x) e_(i)
            centers = np.subtract(pred[s:t, None], shift, out=shift)
            lower[s:t], upper[s:t] = _quantiles(centers, radius, k_lo, k_hi)
        return pred, lower, upper
    e = np.asarray(heldout_residuals(path, lam, labels, only=[0] if method == "split" else None))
    e = e if e.ndim == 1 else e[:, j]
    if method == "split":  # the proper training fit and the calibration quantile
        cal = labels == 0
        shift = algebra.leave_out_shift(state, proj, lam, un, np.where(cal, e, 0.0),
                                        cal.astype(np.intp))
        center = pred - shift[:, 1]
        q = np.sort(np.abs(e[cal]))[k_hi - 1]
        return center, center - q, center + q
    radius = np.abs(e)
    for s, t in _blocks(m, n, budget):
        shift = algebra.leave_out_shift(state, proj[s:t], lam, un, e, labels)  # (b, K)
        centers = pred[s:t, None] - shift[:, labels]
        lower[s:t], upper[s:t] = _quantiles(centers, radius, k_lo, k_hi)
    return pred, lower, upper


def _labels(path, method, folds, n_folds, calibration, seed):
    """Fold labels for CV+ (0..K-1) or the calibration mask as labels (1 = calibration)."""
    from paths.selection.cv import make_folds

    n = path.n_samples
    if method == "cv+":
        if folds is None:
            return make_folds(n, n_folds, seed=seed, fit_intercept=path.fit_intercept)
        labels = np.asarray(folds)
        if labels.shape != (n,) or not np.issubdtype(labels.dtype, np.integer):
            raise InputError(f"folds must be {n} integer fold labels (one per training row); "
                             f"got shape {labels.shape}, dtype {labels.dtype}")
        _, labels = np.unique(labels, return_inverse=True)
        if labels.max() < 1:
            raise InputError("folds has a single fold; CV+ needs at least 2")
        return labels.astype(np.intp)
    if method == "split":
        frac = float(calibration)
        n_cal = int(round(frac * n))
        if not 0.0 < frac < 1.0 or n_cal < 1 or n - n_cal < 2:
            raise InputError(f"calibration must be a fraction in (0, 1) leaving at least one "
                             f"calibration row and 2 training rows of {n}; got {calibration!r}")
        rng = np.random.default_rng(seed)
        labels = np.ones(n, dtype=np.intp)
        labels[rng.permutation(n)[:n_cal]] = 0
        return labels
    return None


def prediction_intervals(path, X_new, lam, *, level: float = 0.9, method: str = "jackknife+",
                         folds=None, n_folds: int = 10, calibration: float = 0.5,
                         seed: int = 0, max_block_bytes: int = _BLOCK_BYTES
                         ) -> PredictionIntervals:
    """Prediction intervals for new rows at penalty ``lam``, from the path's factors.

    Parameters
    ----------
    path : RidgePath
        A path from :func:`paths.fit_path` (its factors; nothing is refitted).
    X_new : array_like, shape (m, p)
        New rows, same features in the same order.
    lam : float or array_like, shape (t,)
        The penalty (>= 0; 0 is the minimum-norm limit), or one per target.
    level : float
        Nominal level :math:`1 - \\alpha` in (0, 1).
    method : {"jackknife+", "cv+", "split"}
        Leave-one-out (jackknife+), K-fold (CV+), or split conformal with a
        seeded random calibration subset of the training rows.
    folds : array_like of int, shape (n,), optional
        Fold label of each training row for CV+ (default: ``n_folds`` seeded
        shuffled folds, :func:`paths.selection.cv.make_folds`).
    n_folds : int
        K for CV+ when ``folds`` is not given.
    calibration : float
        Share of the training rows held out for calibration (split).
    seed : int
        Seed of the folds (CV+) or of the calibration subset (split).
    max_block_bytes : int
        Memory budget: new rows are processed in blocks so that no (rows × n)
        array exceeds it (three are held at once).

    Returns
    -------
    PredictionIntervals

    Raises
    ------
    InputError
        Wrong columns in ``X_new``, a bad level (or too few rows for finite
        endpoints at that level), an unknown method, bad folds or calibration.

    Notes
    -----
    With :math:`\\hat\\mu_{(-i)}` the fit without row :math:`i` and
    :math:`R_i = |y_i - \\hat\\mu_{(-i)}(x_i)|` (exact leave-one-out residuals),
    jackknife+ returns
    :math:`[\\hat q^-_\\alpha\\{\\hat\\mu_{(-i)}(x) - R_i\\},\\;
    \\hat q^+_\\alpha\\{\\hat\\mu_{(-i)}(x) + R_i\\}]`, the
    :math:`\\lfloor\\alpha(n+1)\\rfloor`-th smallest and the
    :math:`\\lceil(1-\\alpha)(n+1)\\rceil`-th smallest values; coverage is at
    least :math:`1 - 2\\alpha` for exchangeable rows (Barber et al. 2021, Thm 1).
    CV+ replaces :math:`\\hat\\mu_{(-i)}` by the fit without the fold of row
    :math:`i` (coverage at least :math:`1 - 2\\alpha - \\min\\{2(1-1/K)/(n/K+1),
    (1-K/n)/(K+1)\\}`, Thm 4).  Split conformal returns
    :math:`\\hat\\mu_{\\text{train}}(x) \\pm` the
    :math:`\\lceil(1-\\alpha)(n_c+1)\\rceil`-th smallest calibration residual
    (coverage at least :math:`1 - \\alpha`; Lei et al. 2018, Thm 2.2).

    Every leave-out fit is the full-data fit minus :math:`h_f(x)^T e_{(-f)}`
    (:func:`paths.core.algebra.leave_out_shift`; :func:`paths.core.algebra.cross_hat`
    for single rows), with the
    held-out residuals from :mod:`paths.selection.cv`.  Cost: O(m p r) to place
    the new rows in the singular basis (the same as :meth:`RidgePath.predict`),
    plus O(m n r) for jackknife+ or O(m r K + m n) for CV+.

    References
    ----------
    Barber, R. F., Candès, E. J., Ramdas, A. and Tibshirani, R. J. (2021).
    Predictive inference with the jackknife+. *Ann. Statist.* 49, 486–507.

    Lei, J., G'Sell, M., Rinaldo, A., Tibshirani, R. J. and Wasserman, L.
    (2018). Distribution-free predictive inference for regression. *J. Amer.
    Statist. Assoc.* 113, 1094–1111.

    Examples
    --------
    >>> import numpy as np
    >>> from paths import fit_path
    >>> rng = np.random.default_rng(0)
    >>> X = rng.standard_normal((60, 100)); y = X[:, 0] + rng.standard_normal(60)
    >>> pi = prediction_intervals(fit_path(X, y), X[:3] + 0.1, 10.0, level=0.8)
    >>> pi.method, pi.lower.shape, bool(np.all(pi.lower < pi.upper))
    ('jackknife+', (3,), True)
    """
    if method not in METHODS:
        raise InputError(f"method must be one of {', '.join(METHODS)}; got {method!r}")
    if getattr(path.design, "span", None) is not None:
        raise InputError("prediction intervals need a path fitted without row weights or "
                         "unpenalized columns (the leave-out fits assume exchangeable, equally "
                         "weighted rows); refit without sample_weight= / unpenalized=")
    X_new = as_design(X_new, "X_new")
    if X_new.shape[1] != path.n_features:
        raise InputError(f"X_new has {X_new.shape[1]} columns but the path was fitted on "
                         f"{path.n_features}; pass the same features in the same order")
    t = path.uty.shape[1]
    lam_arr = as_lambdas(lam)
    if lam_arr.size not in (1, t):
        raise InputError(f"lam must be one penalty or one per target ({t}); "
                         f"got {lam_arr.size} values")
    lam_arr = np.broadcast_to(lam_arr, (t,))
    n = path.n_samples
    labels = _labels(path, method, folds, n_folds, calibration, seed)
    n_cal = int(np.sum(labels == 0)) if method == "split" else None
    k_lo, k_hi = conformal_ranks(n_cal if method == "split" else n, level)
    proj = _project(path, X_new, int(max_block_bytes))  # (m, r)
    from paths.selection.reml import path_state

    state = path_state(path)
    out = [_one_target(path, state, proj, float(lam_arr[j]), j, method, k_lo, k_hi, labels,
                       int(max_block_bytes)) for j in range(t)]
    pred, lower, upper = (np.stack([o[i] for o in out], axis=1) for i in range(3))
    if not path.multi_target:
        pred, lower, upper = pred[:, 0], lower[:, 0], upper[:, 0]
    for a in (pred, lower, upper):
        a.flags.writeable = False
    K = int(labels.max()) + 1 if method == "cv+" else None
    return PredictionIntervals(
        prediction=pred, lower=lower, upper=upper, level=float(level), method=method,
        lam=float(lam_arr[0]) if not path.multi_target else np.array(lam_arr, dtype=float),
        guarantee=guarantee(method, float(level), n=n, n_folds=K), n_folds=K, n_calibration=n_cal)
