"""Sample-size planning: predicted test MSE against n, from the risk formulas.

"How many samples do I need so that plain least squares is about as good as
well-tuned ridge?"  Given the number of features p, the noise and signal
variances (or only their ratio, the SNR) and optionally a covariance spectrum,
:func:`plan` predicts the test MSE of least squares / minimum-norm and of
optimally tuned ridge along n, and finds the smallest n at which least squares
comes within a chosen percentage of optimal ridge.

Formulas (see :mod:`paths.theory`): isotropic features use the limits of
Hastie, Montanari, Rosset & Tibshirani (2022, Thm 1) and Dobriban & Wager
(2018); a given spectrum uses the deterministic equivalent
:func:`paths.theory.spectrum_ridge_risk` with the signal spread evenly over all
directions.  With an intercept the formulas are evaluated at :math:`m = n - 1`
rows and the test MSE carries the factor :math:`1 + 1/n` (the intercept's
error; see :func:`paths.threshold.threshold_sweep`).  These are predictions for
Gaussian-like features in the proportional regime, not guarantees.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from paths.data.validation import InputError
from paths.threshold import theory

__all__ = ["PlanResult", "plan", "PLAN_COLUMNS", "plan_table", "plan_summary"]

PLAN_COLUMNS = ("n", "ratio", "min_norm_test_mse", "ridge_optimal_test_mse",
                "ridge_optimal_lambda", "relative_gap")


@dataclass(frozen=True)
class PlanResult:
    """Predicted test MSE along the training size n.

    Attributes
    ----------
    n_features : int
    noise_variance, signal_variance : float
        :math:`\\sigma^2` and :math:`r^2` used (with only an SNR, :math:`\\sigma^2 = 1`:
        errors are in units of the noise variance).
    source : str
        Where they came from.
    spectrum : ndarray or None
        Covariance eigenvalues used (None: isotropic).
    n : ndarray of int, shape (K,)
    ratio : ndarray, shape (K,)
        :math:`p/n`.
    min_norm_test_mse, ridge_optimal_test_mse : ndarray, shape (K,)
        Predicted test MSE of least squares / minimum-norm and of optimally tuned ridge
        (``inf`` at the interpolation threshold).
    ridge_optimal_lambda : ndarray, shape (K,)
        The optimal penalty in the package convention (:math:`\\lambda = m\\lambda_n`).
    relative_gap : ndarray, shape (K,)
        ``min_norm / ridge_optimal - 1``.
    tolerance : float
        Allowed relative gap (0.05 = 5%).
    n_within : int
        Smallest n with ``relative_gap <= tolerance`` (n > p + 1).
    fit_intercept : bool
    """

    n_features: int
    noise_variance: float
    signal_variance: float
    source: str
    spectrum: np.ndarray | None = field(repr=False)
    n: np.ndarray = field(repr=False)
    ratio: np.ndarray = field(repr=False)
    min_norm_test_mse: np.ndarray = field(repr=False)
    ridge_optimal_test_mse: np.ndarray = field(repr=False)
    ridge_optimal_lambda: np.ndarray = field(repr=False)
    relative_gap: np.ndarray = field(repr=False)
    tolerance: float = 0.05
    n_within: int = 0
    fit_intercept: bool = True


def _risks(n: np.ndarray, p: int, s2: float, r2: float, spectrum, fit_intercept: bool):
    """(min-norm test MSE, optimal-ridge test MSE, optimal lambda) at integer sizes ``n``."""
    n = np.asarray(n, dtype=np.float64)
    m = n - (1.0 if fit_intercept else 0.0)
    infl = 1.0 + (1.0 / n if fit_intercept else 0.0)
    if spectrum is None:
        g = p / m
        mn = s2 + theory.min_norm_risk(g, s2, r2)
        opt = s2 + theory.optimal_ridge_risk(g, s2, r2)
        lam = m * theory.optimal_ridge_lambda(g, s2, r2)
        return infl * mn, infl * opt, lam
    s = np.asarray(spectrum, dtype=np.float64)
    energy = r2 / float(s.sum())
    mn = np.empty(n.size)
    opt = np.empty(n.size)
    lam = np.empty(n.size)
    for i, mi in enumerate(m):
        if mi == p:
            mn[i] = np.inf
        else:
            mn[i] = s2 + theory.spectrum_ridge_risk(0.0, mi, s, s2, energy).risk
        best = theory.spectrum_optimal_ridge_risk(mi, s, s2, energy)
        opt[i] = s2 + best.risk
        lam[i] = mi * best.lam
    return infl * mn, infl * opt, lam


def plan(n_features: int, *, snr: float | None = None, noise_variance: float | None = None,
         signal_variance: float | None = None, spectrum=None, tolerance: float = 0.05,
         n_values=None, fit_intercept: bool = True, source: str | None = None) -> PlanResult:
    """Predicted test MSE against n, and the n at which least squares nears optimal ridge.

    Parameters
    ----------
    n_features : int
        p, at least 1.
    snr : float, optional
        :math:`r^2/\\sigma^2 > 0`; then :math:`\\sigma^2 = 1` unless ``noise_variance``
        is given.
    noise_variance, signal_variance : float, optional
        :math:`\\sigma^2 > 0` and :math:`r^2 \\ge 0` (e.g. estimated from a pilot
        dataset with :func:`paths.threshold.estimate_variances`); instead of ``snr``.
    spectrum : array_like, shape (p,), optional
        Covariance eigenvalues (> 0) of the features on the standardized scale;
        default isotropic.
    tolerance : float
        Allowed relative excess of least squares over optimal ridge (0.05 = 5%).
    n_values : array_like of int, optional
        Sizes for the curve; default 60 values from p/20 to 20 p plus the answer.
    fit_intercept : bool
    source : str, optional
        Label of the variances.

    Returns
    -------
    PlanResult

    Raises
    ------
    InputError
        An SNR <= 0, a noise variance <= 0, neither or both of SNR and variances,
        a tolerance <= 0, a spectrum of the wrong length or with values <= 0.

    Notes
    -----
    The relative gap (least squares over optimal ridge, minus 1) shrinks as n
    grows past p; the answer is found by doubling then bisection over integers
    n > p + 1.

    Examples
    --------
    >>> r = plan(100, snr=1.0, tolerance=0.05)
    >>> bool(r.relative_gap[r.n == r.n_within][0] <= 0.05)
    True
    """
    if int(n_features) != n_features or n_features < 1:
        raise InputError(f"the number of features must be an integer >= 1; got {n_features}")
    p = int(n_features)
    if snr is not None:
        if signal_variance is not None:
            raise InputError("give either snr= or signal_variance=, not both")
        if not (np.isfinite(snr) and snr > 0):
            raise InputError(f"the SNR must be a finite number > 0; got {snr} (pass e.g. snr=1)")
        s2 = 1.0 if noise_variance is None else float(noise_variance)
        r2 = float(snr) * s2
        src = source or (f"SNR = {snr:g}" + (" (errors in units of the noise variance)"
                                             if noise_variance is None else ""))
    else:
        if noise_variance is None or signal_variance is None:
            raise InputError("give an SNR (snr=) or both the noise and signal variances "
                             "(noise_variance=, signal_variance=; or a pilot dataset)")
        s2, r2 = float(noise_variance), float(signal_variance)
        if not r2 >= 0 or not np.isfinite(r2):
            raise InputError(f"the signal variance must be finite and >= 0; got {r2}")
        src = source or "given noise and signal variances"
    if not (np.isfinite(s2) and s2 > 0):
        raise InputError(f"the noise variance must be finite and > 0; got {s2}")
    if not (np.isfinite(tolerance) and tolerance > 0):
        raise InputError(f"the tolerance must be > 0 (a fraction, 0.05 = 5%); got {tolerance}")
    spec = None
    if spectrum is not None:
        spec = np.asarray(spectrum, dtype=np.float64).ravel()
        if spec.size != p:
            raise InputError(f"the spectrum has {spec.size} eigenvalues but p = {p}; "
                             "give one eigenvalue per feature")
        if not np.all(np.isfinite(spec)) or np.any(spec <= 0):
            raise InputError("the spectrum must be finite and > 0; drop zero eigenvalues "
                             "or add a small ridge")
        spec = np.sort(spec)[::-1]
    icpt = 1 if fit_intercept else 0

    def gap(n_int: int) -> float:
        mn, opt, _ = _risks(np.array([n_int]), p, s2, r2, spec, fit_intercept)
        return float(mn[0] / opt[0] - 1.0)

    lo = p + icpt + 1  # first size with full column rank and finite risk
    hi = max(lo + 1, 2 * lo)
    while gap(hi) > tolerance:
        lo, hi = hi, 2 * hi
        if hi > 1e12:
            raise InputError("no sample size below 1e12 reaches that tolerance; "
                             "choose a larger tolerance")
    if gap(lo) <= tolerance:
        hi = lo
    while hi - lo > 1:
        mid = (lo + hi) // 2
        if gap(mid) <= tolerance:
            hi = mid
        else:
            lo = mid
    n_within = hi
    if n_values is None:
        grid = np.geomspace(max(3, p / 20), max(20 * p, 2 * n_within), 60)
        n_arr = np.unique(np.concatenate([np.rint(grid).astype(int),
                                          [p + icpt, n_within]]))
    else:
        n_arr = np.unique(np.asarray(n_values, dtype=int))
        if n_arr.min() < 2:
            raise InputError("sample sizes must be >= 2")
    mn, opt, lam = _risks(n_arr, p, s2, r2, spec, fit_intercept)
    with np.errstate(invalid="ignore"):
        rel = np.where(np.isfinite(mn), mn / opt - 1.0, np.inf)
    for a in (n_arr, mn, opt, lam, rel):
        a.flags.writeable = False
    return PlanResult(n_features=p, noise_variance=s2, signal_variance=r2, source=src,
                      spectrum=spec, n=n_arr, ratio=p / n_arr, min_norm_test_mse=mn,
                      ridge_optimal_test_mse=opt, ridge_optimal_lambda=lam, relative_gap=rel,
                      tolerance=float(tolerance), n_within=int(n_within),
                      fit_intercept=fit_intercept)


def _num(v):
    v = float(v)
    return v if np.isfinite(v) else None


def plan_table(result: PlanResult):
    """``plan.csv``: one row per n (:data:`PLAN_COLUMNS`; empty where infinite)."""
    rows = [[int(result.n[i]), float(result.ratio[i]), _num(result.min_norm_test_mse[i]),
             _num(result.ridge_optimal_test_mse[i]), _num(result.ridge_optimal_lambda[i]),
             _num(result.relative_gap[i])] for i in range(result.n.size)]
    return list(PLAN_COLUMNS), rows


def plan_summary(result: PlanResult, **extra) -> dict:
    """The ``plan.json`` record; ``extra`` added verbatim."""
    i = int(np.flatnonzero(result.n == result.n_within)[0])
    out = {
        "n_features": result.n_features,
        "noise_variance": result.noise_variance,
        "signal_variance": result.signal_variance,
        "snr": result.signal_variance / result.noise_variance,
        "variance_source": result.source,
        "spectrum": "isotropic" if result.spectrum is None else "given",
        "tolerance": result.tolerance,
        "n_within": result.n_within,
        "at_n_within": {"min_norm_test_mse": _num(result.min_norm_test_mse[i]),
                        "ridge_optimal_test_mse": _num(result.ridge_optimal_test_mse[i]),
                        "relative_gap": _num(result.relative_gap[i])},
        "fit_intercept": result.fit_intercept,
        "formulas": ("isotropic: Hastie, Montanari, Rosset & Tibshirani (2022) Thm 1; Dobriban "
                     "& Wager (2018)" if result.spectrum is None else
                     "given spectrum: deterministic equivalent of ridge risk (Bach 2024), "
                     "signal spread evenly over directions"),
        "caution": "predictions for roughly Gaussian features in the proportional regime; "
                   "check them on a pilot or simulation before committing to a sample size",
    }
    out.update(extra)
    return out
