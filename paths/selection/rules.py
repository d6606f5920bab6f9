"""Choosing the penalty: every defensible rule side by side, each with its uncertainty.

All rules work on the one factorization held by a :class:`~paths.path.RidgePath`
(and, for the cross-validation rules, a :class:`~paths.cv.CVResult` computed on
the same data).  Each reports the penalty, the effective degrees of freedom
:math:`\\operatorname{tr} H_\\lambda`, the shrinkage fraction
:math:`\\|\\beta_\\lambda\\|/\\|\\beta^+\\|` (on the scale the penalty acts on) and
an estimated test mean squared error with its standard error where one exists.

Rules (keys of :data:`RULES`):

``gcv``, ``loo``, ``cv``
    Minimum of generalized cross-validation (Golub, Heath & Wahba 1979), exact
    leave-one-out, or K-fold cross-validation.  The grid minimum is refined by
    bounded scalar minimization on :math:`\\log\\lambda` between its neighbours;
    a minimum on the edge of the grid extends the grid (and says so).
``one-se``
    The largest penalty whose CV error is within one standard error of the
    minimum (Breiman, Friedman, Olshen & Stone 1984; ESL §7.10).
``df``, ``fraction``
    A target effective degrees of freedom (:math:`\\operatorname{tr} H`,
    intercept included), or a target shrinkage fraction in (0, 1].
``hkb``, ``lw``
    Hoerl, Kennard & Baldwin (1975) :math:`k = p\\hat\\sigma^2/\\|\\hat b\\|^2` and
    Lawless & Wang (1976) :math:`k = p\\hat\\sigma^2/\\|X\\hat b\\|^2`, in the
    correlation form of their papers (columns centered to unit length,
    :math:`\\hat b` the OLS fit); in this package's convention (unit population
    SD) :math:`\\lambda = n k`, i.e. :math:`\\lambda_{HKB} = p\\hat\\sigma^2/
    \\|\\hat\\beta\\|^2` and :math:`\\lambda_{LW} = n p \\hat\\sigma^2/\\|X\\hat\\beta\\|^2`.
``reml``
    The maximum of the restricted likelihood of the random-effects model
    :math:`\\beta \\sim N(0, (\\sigma^2/\\lambda) I)` (Patterson & Thompson 1971;
    Harville 1977; :mod:`paths.selection.reml`), with the noise and signal
    variances at the maximum, the share of variance explained and an approximate
    95% likelihood-ratio interval for :math:`\\lambda`.
``isotropic``
    The random-matrix plug-in :math:`\\lambda^* = p\\hat\\sigma^2/\\hat r^2`,
    :math:`\\hat r^2 = \\widehat{\\operatorname{var}}(y) - \\hat\\sigma^2`
    (Dobriban & Wager 2018), optimal for roughly isotropic standardized features.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from scipy.optimize import brentq, minimize_scalar

from paths.core import algebra
from paths.data.validation import InputError
from paths.core.grid import default_grid, lambda_for_df
from paths.selection.reml import reml_estimate

__all__ = [
    "RULES",
    "NoiseEstimate",
    "Selection",
    "RemlSelection",
    "SelectionReport",
    "parse_rule",
    "noise_variance",
    "noise_variance_from_factors",
    "one_se_index",
    "lambda_for_fraction",
    "shrinkage_fraction",
    "hkb_lambda",
    "lw_lambda",
    "isotropic_lambda",
    "select_penalty",
    "select",
]

RULES = ("gcv", "loo", "cv", "one-se", "df", "fraction", "hkb", "lw", "isotropic", "reml")
_XATOL = 1e-7  # tolerance of the refinement, in log(lambda)
_N_EXTEND = 24  # grid extension: up to 12 decades beyond the edge, half a decade a step
_SUBGRID, _SUBGRID_ROUNDS = 33, 3  # batched refinement (leave-one-out, K-fold)


def parse_rule(spec: str) -> tuple[str, float | None]:
    """``"gcv"`` → ``("gcv", None)``; ``"df=12"`` → ``("df", 12.0)``; ``"fraction=0.5"`` likewise.

    Raises
    ------
    InputError
        Unknown rule, or a missing / non-numeric value for ``df`` and ``fraction``.
    """
    text = str(spec).strip().lower()
    name, _, value = text.partition("=")
    name = name.strip()
    if name in ("one_se", "onese", "1se"):
        name = "one-se"
    if name not in RULES:
        raise InputError(
            f"unknown rule {spec!r}; choose gcv, loo, cv, one-se, df=VALUE, fraction=VALUE, "
            "hkb, lw, isotropic or reml"
        )
    if name in ("df", "fraction"):
        try:
            return name, float(value)
        except ValueError:
            raise InputError(
                f"rule {name} needs a number: {name}=VALUE (e.g. "
                f"{'df=10' if name == 'df' else 'fraction=0.5'}); got {spec!r}"
            ) from None
    if value:
        raise InputError(f"rule {name} takes no value; got {spec!r}")
    return name, None


# ------------------------------------------------------------------ building blocks
def _col(a, j):
    a = np.asarray(a)
    return float(a) if a.ndim == 0 else float(a[j]) if a.ndim == 1 else float(a[0, j])


def shrinkage_fraction(path, lam, target: int = 0) -> np.ndarray:
    """:math:`\\|\\beta_\\lambda\\| / \\|\\beta^+\\|` at penalties ``lam`` (shape of ``lam``).

    Norms on the scale the penalty acts on (standardized when ``standardize``);
    :math:`\\beta^+` is the minimum-norm fit, so the fraction is 1 at
    :math:`\\lambda = 0` and decreases to 0.
    """
    lam = np.asarray(lam, dtype=float)
    nrm = algebra.path_coef_norm(_state_of(path), algebra.append_zero(lam.reshape(-1))[0])
    num, den = nrm[:lam.size, target], nrm[-1, target]
    return (num / den).reshape(lam.shape)


def lambda_for_fraction(path, fraction: float, target: int = 0) -> float:
    """The penalty whose shrinkage fraction is ``fraction`` (0 < fraction <= 1; 1 gives 0).

    The fraction decreases strictly in :math:`\\lambda` (each :math:`d_j/(d_j^2+\\lambda)`
    does), so the root is unique; Brent's method on :math:`\\log\\lambda`.
    """
    if not (0.0 < fraction <= 1.0) or not np.isfinite(fraction):
        raise InputError(f"target shrinkage fraction must lie in (0, 1]; got {fraction}")
    if fraction == 1.0:
        return 0.0
    d2 = np.square(path.factorization.d)
    f = lambda t: float(shrinkage_fraction(path, np.exp(t), target)) - fraction  # noqa: E731
    lo, hi = np.log(d2[-1]) - 2.0, np.log(d2[0]) + 2.0
    for _ in range(200):
        if f(lo) > 0:
            break
        lo -= 2.0
    for _ in range(200):
        if f(hi) < 0:
            break
        hi += 2.0
    return float(np.exp(brentq(f, lo, hi, xtol=1e-12, rtol=4 * np.finfo(float).eps)))


def one_se_index(lambdas, mse, se, *, min_index: int | None = None) -> int:
    """Grid index of the one-standard-error rule.

    The largest penalty whose error is at most ``mse[i] + se[i]``, with ``i`` the
    grid minimum (or ``min_index``).

    Parameters
    ----------
    lambdas, mse, se : array_like, shape (k,)
        Grid (any order), CV error and its standard error.
    min_index : int, optional

    Returns
    -------
    int

    References
    ----------
    Breiman, L., Friedman, J., Olshen, R. and Stone, C. (1984). *Classification
    and Regression Trees*, §3.4.3.  Hastie, Tibshirani & Friedman (2009),
    *The Elements of Statistical Learning*, 2nd ed., §7.10.
    """
    lam = np.asarray(lambdas, dtype=float)
    mse = np.asarray(mse, dtype=float)
    se = np.asarray(se, dtype=float)
    i = int(np.argmin(mse)) if min_index is None else int(min_index)
    ok = (mse <= mse[i] + se[i]) & (lam >= lam[i])
    cand = np.flatnonzero(ok)
    return int(cand[np.argmax(lam[cand])])


@dataclass(frozen=True)
class NoiseEstimate:
    """An estimate of the noise variance :math:`\\sigma^2`.

    Attributes
    ----------
    value : float or ndarray, shape (t,)
    method : str
        ``"ols"`` or ``"ridge"``.
    formula : str
        The formula, named in the output.
    dof : float or ndarray
        Residual degrees of freedom used.
    lam : float, ndarray or None
        The ridge penalty (GCV choice) for ``"ridge"``.
    reference : str
    """

    value: float | np.ndarray
    method: str
    formula: str
    dof: float | np.ndarray
    lam: float | np.ndarray | None
    reference: str

    def as_dict(self, target: int | None = None) -> dict:
        def pick(v):
            if v is None:
                return None
            v = np.asarray(v, dtype=float)
            if v.ndim == 0:
                return float(v)
            return float(v[target]) if target is not None else v.tolist()
        return {"value": pick(self.value), "method": self.method, "formula": self.formula,
                "dof": pick(self.dof), "lambda": pick(self.lam), "reference": self.reference}


def noise_variance(path, *, gcv_lambda=None) -> NoiseEstimate:
    """Noise variance from the OLS residuals when n > rank + 1, else from a ridge fit.

    Parameters
    ----------
    path : RidgePath
    gcv_lambda : float or array_like (t,), optional
        The penalty of the ridge estimate; default the refined GCV minimum of
        each target.

    Returns
    -------
    NoiseEstimate

    Notes
    -----
    See :func:`noise_variance_from_factors`, which this calls on the path's factors.
    """
    streamed = path.factorization.u.shape[0] == 0  # no left factor: the state's sums
    return noise_variance_from_factors(path.factorization, path.design, path.uty,
                                       path.lambdas, gcv_lambda=gcv_lambda,
                                       multi=path.multi_target,
                                       rss_out=path.state.rss_out if streamed else None)


def noise_variance_from_factors(fac, design, uty, lambdas=None, *, gcv_lambda=None,
                                multi: bool = False, rss_out=None) -> NoiseEstimate:
    """Noise variance on the factors of a reduced design; never 0 unless y is fitted exactly.

    Parameters
    ----------
    fac : Factorization
    design : Design
    uty : ndarray, shape (r, t)
        ``fac.u.T @ design.zy``.
    lambdas : array_like, optional
        Grid on which GCV is minimized (then refined); default the package's grid.
    gcv_lambda : float or array_like (t,), optional
        The penalty of the ridge estimate, instead of the GCV minimum.
    multi : bool
        Keep the target axis in the result.
    rss_out : ndarray, shape (t,), optional
        A streamed path's residual sum of squares outside the span (its
        factorization has no left factor; :attr:`FactorState.rss_out`).

    Returns
    -------
    NoiseEstimate

    Notes
    -----
    OLS: :math:`\\hat\\sigma^2 = \\mathrm{RSS}/(n - r - 1)` with ``r`` the rank of the
    centered design (``p`` at full column rank; without an intercept
    :math:`n - r`).  Otherwise (p near or above n) the residual variance of the
    ridge fit at the GCV choice, :math:`\\hat\\sigma^2 = \\mathrm{RSS}(\\lambda)/
    \\operatorname{tr}(I - H_\\lambda)` (Wahba 1983), with
    :math:`\\operatorname{tr}(I - H) = (m - r) + \\sum_j s_j`,
    :math:`s_j = \\lambda/(d_j^2+\\lambda)` (no cancellation).  Under the
    random-effects view of ridge (:math:`\\beta \\sim N(0, \\sigma^2 I/\\lambda^*)`)
    it is unbiased at :math:`\\lambda = \\lambda^*`:
    :math:`E[s_j^2 c_j^2] = \\sigma^2 s_j` there, so the squared bias of the fit
    is counted, not ignored — which the denominator
    :math:`n - \\operatorname{tr}(2H - H^2)` does, overestimating by the signal
    left in the residual when p is much larger than n.  GCV estimates
    :math:`\\lambda^*` (Golub, Heath & Wahba 1979).  When the GCV choice leaves
    fewer than max(1, n/10) residual degrees of freedom (GCV can prefer the
    interpolating limit near and past p = n, where the estimate would be 0),
    the penalty is raised until it leaves that many — our rule, said in
    ``formula``; the estimate is then positive whenever y is not fitted exactly.
    Checked by simulation (``tests/test_select.py``): on 100 x 300 Gaussian
    designs, isotropic and AR(1) with correlation 0.9, the mean over 30 repeats
    is within 15 % (plus 3 Monte Carlo SE) of the true :math:`\\sigma^2`; at
    p = 10 n with a strong signal (var(X beta) >= 2 sigma^2) it overestimates
    by up to a factor 2.6 (GCV's penalty is then too large).

    References
    ----------
    Wahba, G. (1983). Bayesian "confidence intervals" for the cross-validated
    smoothing spline. *J. R. Statist. Soc. B* 45, 133–150.

    Golub, G. H., Heath, M. and Wahba, G. (1979). Generalized cross-validation
    as a method for choosing a good ridge parameter. *Technometrics* 21, 215–223.
    """
    m, r = fac.u.shape
    n = design.n_samples
    t = uty.shape[1]

    def out(a):
        a = np.asarray(a, dtype=float)
        return a if multi else float(a.reshape(-1)[0])

    if rss_out is not None:  # a streamed path: no left factor, the state's sums
        m = design.n_samples - design.n_fixed
    if m - r >= 1:
        if rss_out is not None:
            rss = np.asarray(rss_out, dtype=float).reshape(t)
        else:
            resid = design.zy - fac.u @ uty
            rss = np.einsum("it,it->t", resid, resid)
        dof = float(m - r)
        fixed = design.n_fixed  # the intercept, and unpenalized columns
        label = f"n - rank - {fixed}" if fixed else "n - rank"
        return NoiseEstimate(
            value=out(rss / dof), method="ols",
            formula=f"OLS: RSS/({label}) = RSS/{dof:g}",
            dof=dof, lam=None, reference="least-squares residual variance (common practice)")
    if gcv_lambda is None:
        grid = default_grid(fac.d, 100) if lambdas is None else np.asarray(lambdas, float)

        state = algebra.factor_state(fac, design)

        def gcv(j):
            return lambda lam: algebra.gcv(state, np.atleast_1d(lam))[:, j]

        lam = np.array([_refine_minimum(gcv(j), grid, gcv(j)(grid))["lam"] for j in range(t)])
    else:
        lam = np.broadcast_to(np.asarray(gcv_lambda, dtype=float), (t,)).copy()
    d = fac.d
    min_dof = max(1.0, 0.1 * n)

    def resid_dof(lam_j):  # n - df = (m - r) + sum_j s_j, from the algebra's complements
        return (m - r) + float(algebra.complements(d, lam_j).sum())

    raised = False
    for j in range(t):  # the estimate needs residual degrees of freedom
        if resid_dof(lam[j]) < min_dof:
            log_d2 = 2.0 * np.log(d[[-1, 0]])
            lam[j] = float(np.exp(brentq(lambda u: resid_dof(np.exp(u)) - min_dof,
                                         log_d2[0] - 40.0, log_d2[1] + 40.0, xtol=1e-10)))
            raised = True
    vals, dofs = np.empty(t), np.empty(t)
    for j in range(t):
        s = algebra.complements(d, lam[j])[:, 0]
        rss = float(np.sum(np.square(s * uty[:, j])))
        dofs[j] = (m - r) + float(np.sum(s))
        vals[j] = rss / dofs[j]
    return NoiseEstimate(
        value=out(vals), method="ridge",
        formula="ridge: RSS(lambda)/tr(I - H) at the GCV-chosen lambda"
                + (f" (raised to leave >= {min_dof:g} residual dof)" if raised else ""),
        dof=out(dofs), lam=out(lam),
        reference="Wahba (1983), J. R. Statist. Soc. B 45, 133-150")


def _squeeze(a, path):
    a = np.asarray(a, dtype=float)
    return a if path.multi_target else float(a.reshape(-1)[0])


def _target_col(a, j):
    a = np.asarray(a)
    return a if a.ndim == 1 else a[:, j]


def hkb_lambda(path, sigma2, target: int = 0) -> float:
    """Hoerl–Kennard–Baldwin (1975): :math:`\\lambda = p\\,\\hat\\sigma^2/\\|\\hat\\beta\\|^2`.

    :math:`\\hat\\beta` is the least-squares (minimum-norm) fit on the scale the
    penalty acts on, ``p`` the number of non-constant features.  Equal to
    :math:`n k_{HKB}` with :math:`k_{HKB}` of the paper's correlation form.

    References
    ----------
    Hoerl, A. E., Kennard, R. W. and Baldwin, K. F. (1975). Ridge regression:
    some simulations. *Communications in Statistics* 4, 105–123.
    """
    c = path.uty[:, target]
    d = path.factorization.d
    p = int(path.design.active.sum())
    return float(p * sigma2 / np.sum(np.square(c / d)))


def lw_lambda(path, sigma2, target: int = 0) -> float:
    """Lawless–Wang (1976): :math:`\\lambda = n\\,p\\,\\hat\\sigma^2/\\|X\\hat\\beta\\|^2`.

    The paper's :math:`k = p\\hat\\sigma^2/\\hat b^T X^T X \\hat b` in correlation
    form (columns of unit length), times ``n`` for this package's unit-SD
    columns; :math:`\\|X\\hat\\beta\\|^2 = \\sum_j (u_j^T y)^2`, the fitted sum of squares.

    References
    ----------
    Lawless, J. F. and Wang, P. (1976). A simulation study of ridge and other
    regression estimators. *Communications in Statistics A* 5, 307–323.
    """
    c = path.uty[:, target]
    p = int(path.design.active.sum())
    return float(path.n_samples * p * sigma2 / np.sum(np.square(c)))


def isotropic_lambda(path, sigma2, target: int = 0) -> float | None:
    """Random-matrix plug-in :math:`\\lambda^* = p\\hat\\sigma^2/\\hat r^2` (``None`` if :math:`\\hat r^2 \\le 0`).

    :math:`\\hat r^2 = \\|y - \\bar y\\|^2/(n-1) - \\hat\\sigma^2` estimates the signal
    variance; with isotropic standardized features it is :math:`\\|\\beta\\|^2`, and
    :math:`\\lambda_n^* = \\gamma\\sigma^2/r^2` (:math:`\\gamma = p/n`) is the
    limiting-risk optimum of Dobriban & Wager (2018), i.e. :math:`\\lambda^* = n\\lambda_n^*`.

    References
    ----------
    Dobriban, E. and Wager, S. (2018). High-dimensional asymptotics of
    prediction: ridge regression and classification. *Ann. Statist.* 46, 247–279.
    """
    zy = path.design.zy[:, target]
    n = path.n_samples
    if zy.size:
        ss = float(zy @ zy)
    else:  # a streamed path keeps no rows: the span part and the out-of-span residual
        st = _state_of(path)
        ss = float(st.uty[:, target] @ st.uty[:, target] + st.rss_out[target])
    var_y = ss / (n - path.design.n_fixed)
    r2 = var_y - sigma2
    if not r2 > 0:
        return None
    p = int(path.design.active.sum())
    return float(p * sigma2 / r2)


# -------------------------------------------------------------------- refinement
def _gcv_values(path, lam, j):
    """GCV :math:`n\\,\\mathrm{RSS}/(n - \\mathrm{df})^2` at ``lam`` for target ``j``
    (:func:`paths.core.algebra.gcv`, O(r) per penalty; at 0, the min-norm limit)."""
    lam = np.atleast_1d(np.asarray(lam, dtype=float))
    return algebra.gcv(_state_of(path), lam.reshape(-1))[:, j].reshape(lam.shape)


def _gcv_fun(path, j):
    return lambda lam: _gcv_values(path, lam, j)


def _loo_fun(path, j):
    """Leave-one-out MSE at any penalties: one pass over the rows per call, however many
    penalties (in memory O(n r k); a streamed path reads the file once)."""
    state = getattr(path, "state", None)

    def f(lam):
        lam = np.atleast_1d(np.asarray(lam, dtype=float))
        if state is not None and state.u is not None:
            vals = algebra.loo_mse(state, lam.reshape(-1))[0]
        else:
            vals = path.criteria_at(lam.reshape(-1)).loo_mse
        return _target_col(vals, j).reshape(lam.shape)
    return f


def _loo_grid(path, j):
    """Leave-one-out MSE on the path's own grid: the path's values when it holds them."""
    if getattr(path, "loo_mse", None) is not None:
        return _target_col(path.loo_mse, j)
    return _loo_fun(path, j)(path.lambdas)


def _cv_fun(cv, j):
    def f(lam):
        mse, _ = cv.at(lam)
        return _target_col(mse, j)
    return f


def _subgrid_minimum(fun, a: float, b: float):
    """Minimize ``fun`` over log-penalties in [a, b] by nested sub-grids: one call of
    ``fun`` with :data:`_SUBGRID` penalties per round, :data:`_SUBGRID_ROUNDS` rounds,
    each round on the two spacings around the previous minimum, then the vertex of
    the parabola through the last minimum and its neighbours.

    For criteria whose every evaluation costs a pass over the rows (a streamed
    leave-one-out): 3 passes instead of Brent's ~20.  The last spacing h is
    ``(b - a) / 32 / 16**2``, about 7e-5 in log(lambda) for a bracket of two steps
    of a 100-point grid over 12 decades; the parabola's vertex is then within
    O(h**2) times the ratio of the third to the second derivative, about 1e-8, of
    the minimizer: inside Brent's ``xatol`` (1e-7) of the in-memory refinement.
    On a very flat criterion (large n) both methods are limited instead by its
    rounding, sqrt(2 delta_f / f'') in log(lambda) (about 1e-4 at
    n = 20000, p = 20); the vertex is kept within the last bracket.
    Returns ``(log_lam, value at the best sub-grid point)``.
    """
    best_t, best_v = None, np.inf
    for _ in range(_SUBGRID_ROUNDS):
        t = np.linspace(a, b, _SUBGRID)
        v = np.asarray(fun(np.exp(t)), dtype=float).reshape(-1)
        i = int(np.argmin(v))
        if v[i] < best_v:
            best_t, best_v = float(t[i]), float(v[i])
        a, b = float(t[max(i - 1, 0)]), float(t[min(i + 1, t.size - 1)])
    if 0 < i < t.size - 1 and best_t == t[i]:
        curv = v[i - 1] - 2 * v[i] + v[i + 1]
        if curv > 0:  # within the bracket: rounding in a flat criterion cannot throw it out
            step = float(np.clip(0.5 * (v[i - 1] - v[i + 1]) / curv, -1.0, 1.0))
            best_t = float(t[i] + step * (t[1] - t[0]))
    return best_t, best_v


def _refine_minimum(fun, lambdas, values, *, batched: bool = False) -> dict:
    """Minimize a criterion given on a grid: refine between neighbours, extend at an edge.

    ``fun(lam_array) -> values``.  Returns ``lam``, ``value``, ``index`` (grid
    argmin, in the grid's own order), ``extended`` (bool) and ``note``.
    ``batched``: refine by nested sub-grids (:func:`_subgrid_minimum`: a few calls
    of ``fun`` with many penalties each) instead of Brent's method (one penalty a
    call); ``value`` is then ``fun`` at the refined penalty, evaluated once more
    (by the caller's next batch when ``fun`` caches, as a streamed path does).
    """
    lam = np.asarray(lambdas, dtype=float)
    vals = np.asarray(values, dtype=float)
    order = np.argsort(lam)
    ls, vs = lam[order], vals[order]
    i = int(np.argmin(vs))
    index = int(order[i])
    note = ""
    extended = False
    if ls.size == 1:
        return dict(lam=float(ls[0]), value=float(vs[0]), index=index, extended=False,
                    note="single penalty: nothing to refine")
    pos = ls > 0
    best_l, best_v = float(ls[i]), float(vs[i])
    if i == ls.size - 1 or (i == 0 and ls[0] > 0):
        extended = True
        up = i == ls.size - 1
        steps = 10.0 ** (0.5 * np.arange(1, _N_EXTEND + 1))
        ext = ls[i] * steps if up else ls[i] / steps
        ev = np.asarray(fun(ext), dtype=float)
        seq_l = np.concatenate([[ls[i - 1] if up else ls[i + 1]], [ls[i]], ext])
        seq_v = np.concatenate([[vs[i - 1] if up else vs[i + 1]], [vs[i]], ev])
        rising = np.flatnonzero(np.diff(seq_v[1:]) > 1e-9 * np.abs(seq_v[2:]))
        if rising.size:
            j = int(rising[0]) + 1  # seq index of the bracketed minimum
            lo, hi = sorted((seq_l[j - 1], seq_l[j + 1]))
            best_l, best_v = float(seq_l[j]), float(seq_v[j])
            note = (f"the grid minimum was at the {'largest' if up else 'smallest'} penalty; "
                    f"the grid was extended to lambda = {seq_l[j + 1]:.3g} to bracket it")
        elif up:
            k = int(np.argmin(seq_v))
            return dict(lam=float(seq_l[k]), value=float(seq_v[k]), index=index, extended=True,
                        note=(f"criterion still decreasing at lambda = {ext[-1]:.3g} "
                              "(grid extended 12 decades): the intercept-only model is preferred"))
        else:
            v0 = float(np.asarray(fun(np.array([0.0])), dtype=float).reshape(-1)[0])
            k = int(np.argmin(seq_v))
            if v0 <= seq_v[k] * (1 + 1e-9):
                return dict(lam=0.0, value=v0, index=index, extended=True,
                            note="criterion decreases all the way to the minimum-norm limit "
                                 "lambda -> 0+ (grid extended 12 decades down)")
            return dict(lam=float(seq_l[k]), value=float(seq_v[k]), index=index, extended=True,
                        note=f"criterion still decreasing at lambda = {ext[-1]:.3g}")
    else:
        if i == 0:  # lambda = 0 on the grid
            lo, hi = ls[0], ls[1]
        else:
            lo, hi = ls[i - 1], ls[i + 1]
    if lo <= 0:
        lo = hi * 1e-12 if not pos.any() else min(ls[pos].min(), hi) * 1e-3
    if batched:
        t_best, v_sub = _subgrid_minimum(fun, float(np.log(lo)), float(np.log(hi)))
        if v_sub <= best_v:
            best_l, best_v = float(np.exp(t_best)), None  # evaluated with the estimates
        return dict(lam=best_l, value=best_v, index=index, extended=extended, note=note)
    res = minimize_scalar(lambda t: float(np.asarray(fun(np.array([np.exp(t)]))).reshape(-1)[0]),
                          bounds=(np.log(lo), np.log(hi)), method="bounded",
                          options={"xatol": _XATOL})
    if res.fun <= best_v:
        best_l, best_v = float(np.exp(res.x)), float(res.fun)
    return dict(lam=best_l, value=best_v, index=index, extended=extended, note=note)


# ----------------------------------------------------------------------- results
@dataclass(frozen=True)
class Selection:
    """One rule's choice of penalty, for one target.

    Attributes
    ----------
    rule : str
    lam : float or None
        The penalty (``None`` when the rule does not apply, see ``note``).
    df : float or None
        :math:`\\operatorname{tr} H_\\lambda`, the intercept's 1 included.
    fraction : float or None
        :math:`\\|\\beta_\\lambda\\|/\\|\\beta^+\\|`.
    est_mse, est_se : float or None
        Estimated test MSE and its standard error (``None`` where none exists).
    est_source : str or None
        Which estimate: ``"gcv"``, ``"loo"`` or ``"cv"``.
    index : int or None
        For the grid-based rules (gcv, loo, cv, one-se): the grid index of the
        grid choice before refinement.
    refined, extended : bool
        Refined between grid points; grid extended past its edge.
    note : str
    target : int
    """

    rule: str
    lam: float | None
    df: float | None = None
    fraction: float | None = None
    est_mse: float | None = None
    est_se: float | None = None
    est_source: str | None = None
    index: int | None = None
    refined: bool = False
    extended: bool = False
    note: str = ""
    target: int = 0

    def as_dict(self) -> dict:
        """The ``summary.json`` entry ``selected.<rule>``."""
        out = {"lambda": self.lam, "df": self.df, "fraction": self.fraction,
               "est_mse": self.est_mse, "est_se": self.est_se, "est_source": self.est_source}
        if self.index is not None:
            out["index"] = self.index
            out["on_grid_index"] = self.index
        if self.rule in ("gcv", "loo"):
            out["value"] = self.est_mse
        out["refined"] = self.refined
        out["extended"] = self.extended
        out["note"] = self.note
        return out


@dataclass(frozen=True)
class RemlSelection(Selection):
    """The ``reml`` rule's choice, with the variance components at the maximum.

    Attributes
    ----------
    noise_variance : float or None
        :math:`\\hat\\sigma^2 = r^T H^{-1} r/m` at the chosen penalty.
    signal_variance : float or None
        :math:`\\hat\\sigma^2 \\sum_j d_j^2/(\\lambda m)`, the average variance of
        the random effect :math:`Z\\beta` per row.
    variance_explained : float or None
        signal / (signal + noise).
    lam_interval : tuple of float or None
        Approximate 95% likelihood-ratio interval ``(low, high)`` for the penalty
        (:math:`\\chi^2_1`; ``high`` may be ``inf``).
    loglik : float or None
        The restricted log-likelihood at the maximum (up to a constant).
    """

    noise_variance: float | None = None
    signal_variance: float | None = None
    variance_explained: float | None = None
    lam_interval: tuple | None = None
    loglik: float | None = None

    def as_dict(self) -> dict:
        out = super().as_dict()
        ends = None if self.lam_interval is None else [
            None if not np.isfinite(v) else float(v) for v in self.lam_interval]
        out.update(noise_variance=self.noise_variance, signal_variance=self.signal_variance,
                   variance_explained=self.variance_explained, lambda_interval=ends,
                   interval_level=0.95, loglik=self.loglik)
        return out


@dataclass(frozen=True)
class SelectionReport:
    """Every rule's choice, per target, with the noise estimate.

    Attributes
    ----------
    per_target : tuple of dict
        ``per_target[j][rule]`` is the :class:`Selection` of ``rule`` for target ``j``.
    noise : NoiseEstimate
    reported : str
        The rule whose choice is reported (see :func:`select`).
    df_target, fraction_target : float or None
    """

    per_target: tuple
    noise: NoiseEstimate
    reported: str
    df_target: float | None = None
    fraction_target: float | None = None
    rules: dict = field(default_factory=dict)

    def __post_init__(self):
        object.__setattr__(self, "rules", self.per_target[0])

    @property
    def chosen(self) -> Selection:
        """The reported rule's selection for the first target."""
        return self.per_target[0][self.reported]

    def chosen_lambdas(self) -> np.ndarray:
        """The reported rule's penalty for each target, shape (t,)."""
        return np.array([sel[self.reported].lam for sel in self.per_target], dtype=float)

    def as_dict(self, target: int = 0) -> dict:
        return {rule: sel.as_dict() for rule, sel in self.per_target[target].items()}


# ------------------------------------------------------------------------ select
def _estimate(path, cv, lam, j, loo_se_cache):
    """(est_mse, est_se, source) at ``lam``: CV when available, else exact LOO."""
    from paths.selection.cv import loo_residuals

    if lam is None:
        return None, None, None
    if cv is not None:
        mse, se = cv.at(lam)
        return _col(mse, j), _col(se, j), "cv"
    if getattr(path, "loo_at", None) is not None:  # a streamed path: a pass over the rows
        at = np.array([lam])  # (cached: the penalties of every rule are prefetched together)
        return float(path.loo_at(at)[0, j]), float(path.loo_at.se(at)[0, j]), "loo"
    res = loo_residuals(path, np.array([lam]))  # (n, 1[, t])
    e2 = np.square(res[:, 0] if res.ndim == 2 else res[:, 0, j])
    w = path.design.sample_weight
    if w is not None:  # sum_i w_i e_i^2 / sum_i w_i as a plain mean of rescaled terms
        e2 = e2 * w * (e2.size / w.sum())
    return float(e2.mean()), float(e2.std(ddof=1) / np.sqrt(e2.size)), "loo"


def _df_at(path, lam):
    return float(path.design.n_fixed + algebra.penalized_df(path.factorization.d, lam))


def _state_of(path) -> algebra.FactorState:
    """The path's factor state (from its factors when the engine did not keep one)."""
    st = getattr(path, "state", None)
    if st is not None:
        return st
    fac = path.factorization
    rss_out = np.atleast_1d(np.asarray(path.min_norm.train_mse, dtype=float)) * path.n_samples
    return algebra.FactorState(d=fac.d, vt=fac.vt, uty=path.uty, rss_out=rss_out,
                               n_samples=path.n_samples, fit_intercept=path.fit_intercept)


def select_penalty(path, cv=None, *, df_target: float | None = None,
           fraction_target: float | None = None, reported: str | None = None) -> SelectionReport:
    """Apply every selection rule to a fitted path (and optional CV errors).

    Parameters
    ----------
    path : RidgePath
    cv : CVResult, optional
        K-fold errors on the same data (:func:`paths.cv.cross_validate`); the
        ``cv`` and ``one-se`` rules need it, and the other rules then report CV
        estimates of the test error (else exact leave-one-out).
    df_target : float, optional
        Target :math:`\\operatorname{tr} H` in (intercept, rank + intercept] —
        (1, rank + 1] with an intercept, (0, rank] without.
    fraction_target : float, optional
        Target shrinkage fraction in (0, 1].
    reported : str, optional
        The rule to report: a rule name or spec (``"df=10"``).  Default ``"cv"``
        when ``cv`` is given, else ``"gcv"``.

    Returns
    -------
    SelectionReport

    Raises
    ------
    InputError
        A target outside its range, or a reported rule that cannot be computed
        (``cv``/``one-se`` without CV, ``df``/``fraction`` without a target).

    Notes
    -----
    The test-error estimate of a rule is its own criterion for gcv, loo and cv
    (the GCV value has no standard error), and otherwise the CV error (or, with
    no CV, the leave-one-out error, SE :math:`\\operatorname{sd}(e_{(i)}^2)/\\sqrt n`)
    at the chosen penalty.  Estimates at a penalty chosen on the same data are
    optimistic.

    Examples
    --------
    >>> import numpy as np
    >>> from paths import fit_path
    >>> rng = np.random.default_rng(0)
    >>> X = rng.standard_normal((60, 30)); y = X[:, 0] + rng.standard_normal(60)
    >>> rep = select_penalty(fit_path(X, y))
    >>> rep.reported, rep.noise.method
    ('gcv', 'ols')
    """
    if reported is not None:
        name, value = parse_rule(reported)
        if name == "df":
            df_target = value if df_target is None else df_target
        elif name == "fraction":
            fraction_target = value if fraction_target is None else fraction_target
        reported = name
    else:
        reported = "cv" if cv is not None else "gcv"
    if reported in ("cv", "one-se") and cv is None:
        raise InputError(f"rule {reported} needs K-fold cross-validation; pass n_folds (K-fold CV)")
    r = path.rank
    fixed = path.design.n_fixed
    lo_df, hi_df = float(fixed), float(r + fixed)
    if df_target is not None and not (lo_df < df_target <= hi_df):
        raise InputError(
            f"df target {df_target:g} is outside ({lo_df:g}, {hi_df:g}] "
            f"(tr H, {f'{fixed} unpenalized parameter(s) counted, ' if fixed else ''}rank {r})"
        )
    if fraction_target is not None and not (0.0 < fraction_target <= 1.0):
        raise InputError(f"target shrinkage fraction must lie in (0, 1]; got {fraction_target:g}")
    if cv is not None and (cv.lambdas.size == 0 or cv.mse.shape[0] != cv.lambdas.size):
        raise InputError("cv result has no penalties; compute it with cross_validate")
    t = path.uty.shape[1]
    gcv_choice = [_refine_minimum(_gcv_fun(path, j), path.lambdas,
                                  _gcv_values(path, path.lambdas, j)) for j in range(t)]
    noise = noise_variance(path, gcv_lambda=np.array([g["lam"] for g in gcv_choice]))
    sig = np.broadcast_to(np.asarray(noise.value, dtype=float), (t,))
    per_target = []
    for j in range(t):
        per_target.append(_select_one(path, cv, j, gcv_choice[j], float(sig[j]), noise,
                                      df_target, fraction_target))
    return SelectionReport(per_target=tuple(per_target), noise=noise, reported=reported,
                           df_target=df_target, fraction_target=fraction_target)


def _make(path, rule, lam, j, *, est=None, cv=None, **kw):
    if lam is None:
        return Selection(rule=rule, lam=None, target=j, **kw)
    if est is None:
        est = _estimate(path, cv, lam, j, None)
    return Selection(rule=rule, lam=float(lam), df=_df_at(path, lam),
                     fraction=float(shrinkage_fraction(path, lam, j)),
                     est_mse=est[0], est_se=est[1], est_source=est[2], target=j, **kw)


def _gcv_note(path, g) -> str:
    """The GCV choice's note, plus a warning when it leaves fewer than max(1, m/10) residual
    degrees of freedom: GCV's optimality needs tr(H)/n bounded away from 1 (Li 1987, Ann.
    Statist. 15, 958-975), so near and past p = n it can pick an interpolating fit.  The
    choice itself stays GCV's minimum (docs/selection.md, "GCV near p = n")."""
    if g["lam"] is None:
        return g["note"]
    floor = max(1.0, 0.1 * _state_of(path).m)
    resid = path.n_samples - _df_at(path, g["lam"])
    if resid >= floor:
        return g["note"]
    warn = (f"leaves {resid:.3g} residual df, fewer than max(1, m/10) = {floor:g}: GCV's "
            "optimality needs tr H / n bounded away from 1 (Li 1987); compare loo or cv")
    return "; ".join(x for x in (g["note"], warn) if x)


def _select_one(path, cv, j, g, sigma2, noise, df_target, fraction_target):
    out = {}
    out["gcv"] = _make(path, "gcv", g["lam"], j, est=(g["value"], None, "gcv"), index=g["index"],
                       refined=True, extended=g["extended"], note=_gcv_note(path, g))
    lams = _rule_lambdas(path, j, sigma2, df_target, fraction_target)
    streamed = getattr(path, "loo_at", None) is not None  # each new penalty: a pass
    loo_f = _loo_fun(path, j)
    lo = _refine_minimum(loo_f, path.lambdas, _loo_grid(path, j), batched=True)
    if streamed:  # one more pass for the estimates at every rule's penalty
        extra = [] if cv is not None else [v for v in lams.values() if v is not None]
        path.loo_at(np.array([lo["lam"], *extra]))
    loo_est = _estimate(path, None, lo["lam"], j, None)
    out["loo"] = _make(path, "loo", lo["lam"], j,
                       est=(loo_est[0] if lo["value"] is None else lo["value"], loo_est[1],
                            "loo"),
                       index=lo["index"], refined=True, extended=lo["extended"], note=lo["note"])
    if cv is None:
        none = "no K-fold CV computed (no number of folds given)"
        out["cv"] = Selection("cv", None, target=j, note=none)
        out["one-se"] = Selection("one-se", None, target=j, note=none)
    else:
        cm = _refine_minimum(_cv_fun(cv, j), cv.lambdas, _target_col(cv.mse, j), batched=True)
        mse_min, se_min = cv.at(cm["lam"])
        mse_min, se_min = _col(mse_min, j), _col(se_min, j)
        reason = (f"{cv.n_folds}-fold {cv.scheme}" + (f" x {cv.repeats} repeats" if cv.repeats > 1
                                                    else "") + f", {cv.method} ({cv.form})")
        out["cv"] = _make(path, "cv", cm["lam"], j, est=(mse_min, se_min, "cv"), index=cm["index"],
                          refined=True, extended=cm["extended"],
                          note="; ".join(x for x in (reason, cm["note"]) if x))
        out["one-se"] = _one_se(path, cv, j, cm["lam"], mse_min, se_min)
    est_cv = cv
    if df_target is None:
        out["df"] = Selection("df", None, target=j, note="no df target given (rule df=VALUE)")
    else:
        out["df"] = _make(path, "df", lams["df"], j, cv=est_cv, note=f"target df {df_target:g}")
    if fraction_target is None:
        out["fraction"] = Selection("fraction", None, target=j,
                                    note="no fraction target given (rule fraction=VALUE)")
    else:
        out["fraction"] = _make(path, "fraction", lams["fraction"], j, cv=est_cv,
                                note=f"target fraction {fraction_target:g}")
    outside = []
    if noise.method != "ols":
        outside.append("OLS undefined (rank >= n - 1): min-norm fit and the ridge noise "
                       "estimate used, outside the published setting")
    if not path.standardize:
        outside.append("features not standardized: the published rules assume standardized "
                       "columns")
    note = "; ".join(outside)
    out["hkb"] = _make(path, "hkb", lams["hkb"], j, cv=est_cv,
                       note="; ".join(x for x in ("Hoerl, Kennard & Baldwin (1975)", note) if x))
    out["lw"] = _make(path, "lw", lams["lw"], j, cv=est_cv,
                      note="; ".join(x for x in ("Lawless & Wang (1976)", note) if x))
    out["reml"] = _reml(path, j, est_cv)
    iso = lams["isotropic"]
    iso_note = "Dobriban & Wager (2018); assumes roughly isotropic standardized features"
    if not path.standardize:
        iso_note += "; features not standardized"
    if iso is None:
        out["isotropic"] = Selection("isotropic", None, target=j,
                                     note=iso_note + "; estimated signal variance <= 0 "
                                     "(the plug-in says: intercept only)")
    else:
        out["isotropic"] = _make(path, "isotropic", iso, j, cv=est_cv, note=iso_note)
    return out


def _rule_lambdas(path, j, sigma2, df_target, fraction_target) -> dict:
    """The penalties of the closed-form rules (None where a rule gives none)."""
    out = {"df": None, "fraction": None}
    if df_target is not None:
        hi = path.rank + path.design.n_fixed
        out["df"] = 0.0 if df_target == hi else lambda_for_df(path.factorization.d,
                                                              df_target - path.design.n_fixed)
    if fraction_target is not None:
        out["fraction"] = lambda_for_fraction(path, fraction_target, j)
    out["hkb"] = hkb_lambda(path, sigma2, j)
    out["lw"] = lw_lambda(path, sigma2, j)
    out["isotropic"] = isotropic_lambda(path, sigma2, j)
    try:
        out["reml"] = reml_estimate(path, j).lam
    except InputError:
        out["reml"] = None
    return out


def _reml(path, j, cv) -> RemlSelection:
    """The REML maximum (:func:`paths.selection.reml.reml_estimate`) as a rule's choice."""
    try:
        est = reml_estimate(path, j)
    except InputError as exc:  # a path without its left factor (streamed)
        return RemlSelection("reml", None, target=j, note=str(exc))
    lo, hi = est.lam_interval
    summary = (f"noise variance {est.noise_variance:.4g}, signal variance "
               f"{est.signal_variance:.4g} ({100 * est.variance_explained:.1f}% of the variance "
               f"explained); approximate 95% likelihood-ratio interval for lambda "
               f"[{lo:.3g}, {hi:.3g}]")
    note = "; ".join(x for x in ("Patterson & Thompson (1971), Harville (1977); random-effects "
                                 "model", summary, est.note) if x)
    sel = _make(path, "reml", est.lam, j, cv=cv, refined=True, note=note)
    return RemlSelection(**vars(sel), noise_variance=est.noise_variance,
                         signal_variance=est.signal_variance,
                         variance_explained=est.variance_explained,
                         lam_interval=est.lam_interval, loglik=est.loglik)


def _one_se(path, cv, j, lam_min, mse_min, se_min):
    """Largest penalty with CV error <= min + SE(min), the crossing refined by Brent's method."""
    lam = np.asarray(cv.lambdas, dtype=float)
    mse = _target_col(cv.mse, j)
    thresh = mse_min + se_min
    ok = (mse <= thresh) & (lam >= lam_min)
    note = f"largest lambda with CV error <= {mse_min:.4g} + {se_min:.4g} (min + 1 SE)"
    if not ok.any():  # the CV minimum lies beyond the largest grid penalty
        return _make(path, "one-se", lam_min, j, cv=cv,
                     note=note + "; no grid penalty above the CV minimum: the minimum reported")
    cand = np.flatnonzero(ok)
    idx = int(cand[np.argmax(lam[cand])])
    above = lam > lam[idx]
    chosen, refined = float(lam[idx]), False
    if above.any():
        nxt = float(lam[above].min())
        f = lambda t: _col(cv.at(np.exp(t))[0], j) - thresh  # noqa: E731
        a, b = np.log(lam[idx]) if lam[idx] > 0 else np.log(nxt) - 30.0, np.log(nxt)
        if f(a) <= 0 < f(b):
            chosen, refined = float(np.exp(brentq(f, a, b, xtol=1e-10))), True
    else:
        note += "; at the largest grid penalty"
    return _make(path, "one-se", chosen, j, cv=cv, index=idx, refined=refined, note=note)


select = select_penalty  # short alias inside this module (the package exports select_penalty)
