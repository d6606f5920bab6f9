"""The whole ridge path, and its criteria, from one factorization.

Penalty convention (fixed everywhere in this package)::

    minimize  ||y - b0 - X beta||^2 + lambda ||beta||^2   over (b0, beta)

with ``X`` the column-centered design, scaled to unit population SD when
``standardize=True``; the intercept ``b0`` is unpenalized, and ``lambda`` is on
the scale of the squared singular values of that design.  This is scikit-learn's
``Ridge(alpha=lambda)`` objective.  Papers that normalize the loss by ``1/n``
use ``lambda_n = lambda / n``.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from paths.data.validation import InputError, as_design, as_lambdas, as_response, feature_names_of
from paths.core.design import Design, prepare, to_sample_space
from paths.core.factor import Factorization, factorize
from paths.core.grid import default_grid

__all__ = ["PENALTY_CONVENTION", "RidgePath", "MinNormFit", "Criteria", "criteria", "fit_path",
           "path_from_factors"]

PENALTY_CONVENTION = (
    "minimize ||y - b0 - X beta||^2 + lambda ||beta||^2; X column-centered "
    "(and scaled to unit population SD when standardized); intercept b0 unpenalized; "
    "lambda on the scale of squared singular values of X (scikit-learn Ridge alpha)"
)
_EPS = np.finfo(np.float64).eps
_BLOCK_ROWS = 4096  # rows per block for the n x k leave-one-out arrays


def _freeze(*arrays):
    for a in arrays:
        if isinstance(a, np.ndarray):
            a.flags.writeable = False


@dataclass(frozen=True)
class MinNormFit:
    """The :math:`\\lambda \\to 0^+` limit: the minimum-norm least-squares fit.

    Equals ordinary least squares when the centered design has full column
    rank, and interpolates the training data when it has full row rank.

    Attributes
    ----------
    coef : ndarray, shape (p,) or (p, t)
        Coefficients on the original feature scale.
    intercept : float or ndarray, shape (t,)
    train_mse, gcv, loo_mse : float or ndarray, shape (t,)
        Criteria at the limit (limits of the path formulas, so finite even when
        the fit interpolates).
    test_mse : float, ndarray or None
    df : float
        ``rank`` plus one for the intercept.
    coef_norm : float or ndarray, shape (t,)
        Euclidean norm of the coefficients on the standardized scale when
        standardizing, else on the original scale.
    rank : int
    """

    coef: np.ndarray
    intercept: np.ndarray | float
    train_mse: np.ndarray | float
    gcv: np.ndarray | float
    loo_mse: np.ndarray | float
    test_mse: np.ndarray | float | None
    df: float
    coef_norm: np.ndarray | float
    rank: int


@dataclass(frozen=True)
class RidgePath:
    """Ridge fits and criteria along a grid of penalties, from one factorization.

    Arrays are indexed by penalty first; a trailing target axis appears only for
    a two-dimensional response.

    Attributes
    ----------
    lambdas : ndarray, shape (k,)
        Penalties, in the convention of :data:`PENALTY_CONVENTION`.
    coef : ndarray, shape (k, p) or (k, p, t)
        Coefficients on the original feature scale.
    intercept : ndarray, shape (k,) or (k, t)
    df : ndarray, shape (k,)
        Effective degrees of freedom :math:`\\operatorname{tr} H_\\lambda`, the
        intercept's 1 included.
    train_mse, gcv, loo_mse : ndarray, shape (k,) or (k, t)
        Training mean squared error RSS/n, generalized cross-validation
        n·RSS/(n − df)², exact leave-one-out mean squared error.
    test_mse : ndarray, shape (k,) or (k, t), or None
    fitted : ndarray, shape (k, n) or (k, n, t), or None
        Training-set fitted values, when requested.
    rank : int
        Numerical rank of the centered (scaled) design.
    rank_tol : float
        Singular values at or below this were treated as zero.
    singular_values : ndarray, shape (rank,)
    condition_number : float
        ``singular_values[0] / singular_values[-1]``.
    min_norm : MinNormFit
    solver, solver_reason : str
    n_samples, n_features, n_test : int
    fit_intercept, standardize : bool
    feature_names : list of str
    design : Design
        Means, scales, active columns (no copy of the design itself).
    factorization : Factorization
    uty : ndarray, shape (rank, t)
        :math:`U^T y` on the reduced response.
    penalty_convention : str
    """

    lambdas: np.ndarray
    coef: np.ndarray
    intercept: np.ndarray
    df: np.ndarray
    train_mse: np.ndarray
    gcv: np.ndarray
    loo_mse: np.ndarray
    test_mse: np.ndarray | None
    fitted: np.ndarray | None
    rank: int
    rank_tol: float
    singular_values: np.ndarray
    condition_number: float
    min_norm: MinNormFit
    solver: str
    solver_reason: str
    n_samples: int
    n_features: int
    n_test: int
    fit_intercept: bool
    standardize: bool
    feature_names: list
    design: Design = field(repr=False)
    factorization: Factorization = field(repr=False)
    uty: np.ndarray = field(repr=False)
    penalty_convention: str = PENALTY_CONVENTION

    # ------------------------------------------------------------------ helpers
    @property
    def multi_target(self) -> bool:
        return self.uty.shape[1] > 1 or self.coef.ndim == 3

    @property
    def coef_std(self) -> np.ndarray:
        """Coefficients on the standardized scale (equal to ``coef`` without scaling)."""
        s = self.design.x_scale
        return self.coef * (s[:, None] if self.coef.ndim == 3 else s)

    @property
    def coef_norm(self) -> np.ndarray:
        """:math:`\\|\\beta_\\lambda\\|_2` on the scale the penalty acts on, shape (k,) or (k, t)."""
        return np.sqrt(np.sum(np.square(self.coef_std), axis=1))

    def index_min(self, criterion: str = "gcv", target: int = 0) -> int:
        """Grid index minimizing ``"gcv"``, ``"loo"``/``"loo_mse"``, ``"train"`` or ``"test"``."""
        key = {"gcv": "gcv", "loo": "loo_mse", "loo_mse": "loo_mse", "train": "train_mse",
               "train_mse": "train_mse", "test": "test_mse", "test_mse": "test_mse"}.get(criterion)
        if key is None:
            raise InputError(f"criterion must be gcv, loo, train or test; got {criterion!r}")
        values = getattr(self, key)
        if values is None:
            raise InputError("no test set was given; pass X_test and y_test to fit_path")
        if values.ndim == 2:
            values = values[:, target]
        return int(np.argmin(values))

    def criteria_at(self, lam) -> "Criteria":
        """df, training MSE, GCV and leave-one-out MSE at any penalties, from the factors.

        Shapes follow the path's: (k,) per criterion [or (k, t) for several targets].
        """
        crit = criteria(self.factorization, self.design, self.uty, as_lambdas(lam))
        if self.multi_target:
            return crit
        return Criteria(**{k: (v if k == "df" else v[..., 0]) for k, v in vars(crit).items()})

    def coef_at(self, lam) -> np.ndarray:
        """Coefficients (original scale) at any penalties, from the factors.

        Returns shape (p,) [or (p, t)] for a scalar ``lam``, (len(lam), p) [or
        (len(lam), p, t)] for a sequence.
        """
        lam_arr = as_lambdas(lam)
        coef = _coefficients(self.factorization, self.uty, lam_arr, self.design)
        if not self.multi_target:
            coef = coef[..., 0]
        return coef[0] if np.ndim(lam) == 0 else coef

    def predict(self, X, lam) -> np.ndarray:
        """Predictions for new rows at penalty (or penalties) ``lam``.

        Parameters
        ----------
        X : array_like, shape (n_new, p)
        lam : float or sequence of float
            Any non-negative penalty, on the grid or not (0 gives the min-norm fit).

        Returns
        -------
        ndarray, shape (n_new,) [or (n_new, t)] for a scalar ``lam``;
        (n_new, len(lam)) [or (n_new, len(lam), t)] for a sequence.
        """
        X = as_design(X, "X")
        if X.shape[1] != self.n_features:
            raise InputError(
                f"X has {X.shape[1]} columns but the path was fitted on {self.n_features}; "
                "pass the same features in the same order"
            )
        lam_arr = as_lambdas(lam)
        gains = _gains(self.factorization.d, lam_arr)  # (r, k)
        proj = self.design.transform(X) @ self.factorization.vt.T  # (n_new, r)
        pred = self.design.y_mean + _project(proj, gains, self.uty)
        if not self.multi_target:
            pred = pred[..., 0]
        return pred[:, 0] if np.ndim(lam) == 0 else pred


def _gains(d: np.ndarray, lam: np.ndarray) -> np.ndarray:
    """:math:`d_j/(d_j^2+\\lambda)`, shape (r, k); the min-norm :math:`1/d_j` at 0."""
    return d[:, None] / (np.square(d)[:, None] + lam[None, :])


def _project(proj: np.ndarray, gains: np.ndarray, uty: np.ndarray) -> np.ndarray:
    """:math:`\\sum_j P_{ij} g_{jk} c_{jt}`, shape (i, k, t), as one matrix product."""
    r, k = gains.shape
    t = uty.shape[1]
    gc = (gains[:, :, None] * uty[:, None, :]).reshape(r, k * t)
    return (proj @ gc).reshape(proj.shape[0], k, t)


def _coefficients(fac: Factorization, uty: np.ndarray, lam: np.ndarray, design: Design):
    """Original-scale coefficients (k, p, t) at penalties ``lam``."""
    gains = _gains(fac.d, lam)
    k, t = lam.size, uty.shape[1]
    p = design.n_features
    act = design.active
    inv_scale = 1.0 / design.x_scale[act]
    scaled = not np.all(inv_scale == 1.0)  # x * 1.0 == x: skip a pass over k x p
    if t == 1 and act.all():  # one GEMM straight into the result, scaled in place
        cj = (gains * uty).T @ fac.vt  # (k, p)
        if scaled:
            cj *= inv_scale
        return cj[:, :, None]
    coef = np.zeros((k, p, t))
    for j in range(t):
        cj = (gains * uty[:, j:j + 1]).T @ fac.vt  # (k, q)
        if scaled:
            cj *= inv_scale
        coef[:, act, j] = cj
    return coef


def _row_blocks(u: np.ndarray, fit_intercept: bool, block: int = _BLOCK_ROWS):
    """Yield ``(start, stop, rows)`` of the sample-space :math:`U` without forming it.

    ``rows`` is a view of ``u`` (no intercept) or of one buffer reused for every
    block (with an intercept): use it before asking for the next block.
    """
    m = u.shape[0]
    if not fit_intercept:
        for s in range(0, m, block):
            yield s, min(s + block, m), u[s:s + block]
        return
    n = m + 1
    rn = np.sqrt(n)
    colsum = u.sum(axis=0)
    shift = colsum / (n + rn)
    buf = np.empty((min(block, n),) + u.shape[1:])
    for s in range(0, n, block):
        e = min(s + block, n)
        lo, hi = max(s - 1, 0), e - 1  # reduced rows for sample rows s..e-1 (row 0 special)
        rows = buf[:e - s]
        if s == 0:
            rows[0] = -colsum / rn
            np.subtract(u[lo:hi], shift, out=rows[1:])
        else:
            np.subtract(u[lo:hi], shift, out=rows)
        yield s, e, rows


def _loo_block_rows(r: int, width: int) -> int:
    """Rows per leave-one-out block: about 4 MiB per (rows x max(r, k t)) array."""
    return int(min(_BLOCK_ROWS, max(256, (1 << 19) // max(r, width, 1))))


def _loo(fac: Factorization, design: Design, uty: np.ndarray, out: np.ndarray,
         lam: np.ndarray):
    """Exact leave-one-out MSE (k, t) on the grid and at the min-norm limit (t,).

    The LOO residual is :math:`e_i(\\lambda) / (1 - H_{ii}(\\lambda))` with
    :math:`H = 11^T/n + U \\operatorname{diag}(f) U^T`.  Both parts are built
    from the shrinkage complements :math:`s_j = \\lambda/(d_j^2+\\lambda)`, never
    as ``1 - f``, so they stay accurate as the fit approaches interpolation:

    - :math:`e(\\lambda) = e_\\perp + U (s \\circ U^T y)`, with :math:`e_\\perp` the
      part of the response outside the column span;
    - :math:`1 - H_{ii} = \\ell_i + \\sum_j U_{ij}^2 s_j`, with :math:`\\ell_i`
      the leverage left outside the span (zero at full row rank).

    At :math:`\\lambda = 0` the ratio is its limit: :math:`e_{\\perp,i}/\\ell_i`,
    or where :math:`\\ell_i = 0`,
    :math:`\\sum_j U_{ij} c_j d_j^{-2} / \\sum_j U_{ij}^2 d_j^{-2}`.
    """
    d2 = np.square(fac.d)
    n = design.n_samples
    m, r = fac.u.shape
    k, t = lam.size, uty.shape[1]
    S = lam[None, :] / (d2[:, None] + lam[None, :])  # (r, k)
    # S scaled by each target's U^T y, side by side: the residuals of every
    # penalty and target are one matrix product per block, U_b @ SC
    SC = (S[:, :, None] * uty[:, None, :]).reshape(r, k * t)
    full_row_rank = r == m
    zero = lam == 0
    inv_d2 = d2[-1] / d2  # 1/d_j^2 up to a constant (cancels in a/b): no overflow
    sum_sq = np.zeros((k, t))
    lim_sq = np.zeros(t)
    base = 1.0 - 1.0 / n if design.fit_intercept else 1.0
    block = _loo_block_rows(r, k * t)
    sq_buf = np.empty((min(block, n), r))
    out_blocks = _row_blocks(out, design.fit_intercept, block)
    for (s, e, ub), (_, _, ob) in zip(_row_blocks(fac.u, design.fit_intercept, block),
                                      out_blocks):
        if full_row_rank:
            lev_out = np.zeros(e - s)
        else:
            lev_out = np.maximum(base - np.einsum("ir,ir->i", ub, ub), 0.0)
        ub2 = np.square(ub, out=sq_buf[:e - s])
        den = ub2 @ S  # (b, k)
        den += lev_out[:, None]
        num = (ub @ SC).reshape(e - s, k, t)  # (b, k, t)
        num += ob[:, None, :]
        # min-norm limit
        small = lev_out <= 100 * m * _EPS
        lim = np.empty((e - s, t))
        with np.errstate(divide="ignore", invalid="ignore"):
            lim[~small] = ob[~small] / lev_out[~small, None]
        if small.any():
            a = ub[small] @ (uty * inv_d2[:, None])
            b = ub2[small] @ inv_d2
            lim[small] = a / b[:, None]
        lim_sq += np.sum(np.square(lim), axis=0)
        if zero.any():
            den[:, zero] = 1.0
            num[:, zero, :] = lim[:, None, :]
        num /= den[:, :, None]
        np.square(num, out=num)
        sum_sq += np.sum(num, axis=0)
    return sum_sq / n, lim_sq / n


@dataclass(frozen=True)
class Criteria:
    """Path criteria on a grid, with their :math:`\\lambda \\to 0^+` limits.

    Arrays have shape (k,) for ``df`` and (k, t) otherwise; the ``*0`` fields
    have shape (t,).
    """

    df: np.ndarray
    train_mse: np.ndarray
    gcv: np.ndarray
    loo_mse: np.ndarray
    train_mse0: np.ndarray
    gcv0: np.ndarray
    loo_mse0: np.ndarray


def criteria(fac: Factorization, design: Design, uty: np.ndarray, lam) -> Criteria:
    """Effective df, training MSE, GCV and exact leave-one-out MSE at penalties ``lam``.

    Parameters
    ----------
    fac : Factorization
        Factors of the reduced design.
    design : Design
        Its preprocessing (``design.zy`` is the reduced response).
    uty : ndarray, shape (r, t)
        ``fac.u.T @ design.zy``.
    lam : array_like, shape (k,)
        Non-negative penalties; 0 gives the min-norm limit.

    Returns
    -------
    Criteria

    Notes
    -----
    See :func:`fit_path`; every quantity is a closed form on the factors and the
    cost is O((m + k) r t) plus O(n r k) for leave-one-out, with no refit.
    """
    lam = np.atleast_1d(np.asarray(lam, dtype=np.float64))
    n = design.n_samples
    c = uty
    if fac.u.shape[1] == fac.u.shape[0]:
        # U spans all of R^m: nothing lies outside the span; the computed difference
        # would be rounding (~m eps |y|), which dominates residuals ~lam/d^2 near 0
        resid_out = np.zeros_like(design.zy)
    else:
        resid_out = design.zy - fac.u @ c  # (m, t): response outside the column span
    rss_out = np.einsum("it,it->t", resid_out, resid_out)
    m, r = fac.u.shape
    d2 = np.square(fac.d)
    denom = d2[:, None] + lam[None, :]
    F = d2[:, None] / denom
    S = lam[None, :] / denom
    df = design.fit_intercept + F.sum(axis=0)
    rss = rss_out[None, :] + np.square(S).T @ np.square(c)  # (k, t)
    resid_dof = (m - r) + S.sum(axis=0)  # n - df, without cancellation
    # min-norm limit of GCV: finite even when the fit interpolates (m == r)
    if m > r:
        gcv0 = n * rss_out / (m - r) ** 2
    else:
        inv_d2 = d2[-1] / d2  # 1/d_j^2 up to a constant (cancels): no overflow or 0/0
        gcv0 = n * (np.square(c).T @ np.square(inv_d2)) / inv_d2.sum() ** 2
    zero = resid_dof == 0
    gcv = n * rss / np.square(np.where(zero, 1.0, resid_dof))[:, None]
    gcv[zero] = gcv0
    loo_mse, loo0 = _loo(fac, design, c, resid_out, lam)
    return Criteria(df=df, train_mse=rss / n, gcv=gcv, loo_mse=loo_mse,
                    train_mse0=rss_out / n, gcv0=gcv0, loo_mse0=loo0)


def fit_path(
    X,
    y,
    lambdas=None,
    *,
    fit_intercept: bool = True,
    standardize: bool = True,
    solver: str = "auto",
    X_test=None,
    y_test=None,
    n_lambdas: int = 100,
    rtol: float | None = None,
    return_fitted: bool = False,
) -> RidgePath:
    """The ridge regularization path, with its criteria, from one factorization.

    Parameters
    ----------
    X : array_like, shape (n, p)
        Design; any p, including p much larger than n.
    y : array_like, shape (n,) or (n, t)
        Response; several targets share the one factorization.
    lambdas : array_like of float, optional
        Penalties (>= 0; 0 gives the min-norm limit).  Default: ``n_lambdas``
        log-spaced values from the spectrum, largest first, from df = 0.5 (plus
        the intercept) to within 1% of the rank (see :func:`paths.grid.default_grid`).
    fit_intercept : bool
        Fit an unpenalized intercept (center the columns and the response).
    standardize : bool
        Scale columns to unit population SD (ddof=0) before penalizing;
        coefficients are reported on the original scale either way.
    solver : {"auto", "svd", "gram"}
        Factorization route (:func:`paths.factor.factorize`).
    X_test, y_test : array_like, optional
        Held-out rows for the test error.
    n_lambdas : int
        Size of the default grid.
    rtol : float, optional
        Relative rank tolerance: singular values at or below ``rtol * d_max``
        count as zero.  Default ``max(n, p) * eps`` (numpy's ``pinv`` default).
    return_fitted : bool
        Also return the training-set fitted values (k × n).

    Returns
    -------
    RidgePath

    Raises
    ------
    InputError
        Non-numeric, non-finite or empty input, mismatched shapes, fewer than
        two rows with an intercept, a constant response, or no non-constant
        column.

    Notes
    -----
    With the reduced design :math:`Z = U D V^T` (rank ``r``), :math:`c = U^T y`,
    :math:`f_j = d_j^2/(d_j^2+\\lambda)` and :math:`s_j = 1 - f_j`:

    - :math:`\\beta_\\lambda = V \\operatorname{diag}(d_j/(d_j^2+\\lambda))\\, c`;
    - :math:`\\operatorname{df}(\\lambda) = 1 + \\sum_j f_j` (ESL eq. 3.50, plus
      the intercept);
    - :math:`\\mathrm{RSS}(\\lambda) = \\|y_\\perp\\|^2 + \\sum_j s_j^2 c_j^2`, with
      :math:`y_\\perp = y - U c` the part of the centered response outside the
      column span, computed directly rather than as a difference of norms;
    - :math:`\\mathrm{GCV} = n\\,\\mathrm{RSS}/(n-\\operatorname{df})^2` (Golub,
      Heath & Wahba 1979) with :math:`n - \\operatorname{df} = (m - r) + \\sum_j s_j`;
    - leave-one-out residuals :math:`e_i/(1-H_{ii})`, exact (see ``_loo``).

    All penalties are handled by matrix products on the factors; nothing is
    refitted.

    References
    ----------
    Golub, G. H., Heath, M. and Wahba, G. (1979). Generalized cross-validation
    as a method for choosing a good ridge parameter. *Technometrics* 21, 215–223.

    Hoerl, A. E. and Kennard, R. W. (1970). Ridge regression: biased estimation
    for nonorthogonal problems. *Technometrics* 12, 55–67.

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> X = rng.standard_normal((20, 50)); y = X[:, 0] + 0.1 * rng.standard_normal(20)
    >>> path = fit_path(X, y)
    >>> path.coef.shape, path.rank
    ((100, 50), 19)
    """
    names = feature_names_of(X)
    X = as_design(X, "X")
    n, p = X.shape
    y_arr = as_response(y, n, "y")
    multi = y_arr.ndim == 2
    Y = y_arr if multi else y_arr[:, None]
    if fit_intercept and n < 2:
        raise InputError(
            f"X has {n} row; at least 2 samples are needed to fit an intercept "
            "(or pass fit_intercept=False)"
        )
    spread = (Y.max(axis=0) > Y.min(axis=0)) if fit_intercept else np.any(Y != 0, axis=0)
    if not spread.all():
        j = int(np.flatnonzero(~spread)[0])
        label = f"target column {j}" if multi else "y"
        raise InputError(
            f"{label} is constant (every value {Y[0, j]!r}); there is nothing to fit — "
            "check the target column"
        )
    if n_lambdas < 1:
        raise InputError(f"n_lambdas must be at least 1; got {n_lambdas}")
    has_test = X_test is not None or y_test is not None
    if has_test:
        if X_test is None or y_test is None:
            raise InputError("pass both X_test and y_test, or neither")
        X_test = as_design(X_test, "X_test")
        if X_test.shape[1] != p:
            raise InputError(
                f"X_test has {X_test.shape[1]} columns but X has {p}; "
                "pass the same features in the same order"
            )
        Yt = as_response(y_test, X_test.shape[0], "y_test")
        if Yt.ndim != y_arr.ndim or (multi and Yt.shape[1] != Y.shape[1]):
            raise InputError(
                f"y_test has shape {Yt.shape} but y has shape {y_arr.shape}; "
                "pass the same targets"
            )
        Yt = Yt if multi else Yt[:, None]
    lam_user = None if lambdas is None else as_lambdas(lambdas)

    design, z = prepare(X, Y, fit_intercept=fit_intercept, standardize=standardize)
    if not design.active.any():
        raise InputError(
            f"every one of the {p} columns of X is constant; nothing to fit — "
            "check the feature selection"
        )
    if rtol is None:
        rtol = max(n, p) * _EPS
    try:
        fac = factorize(z, solver=solver, rtol=rtol, overwrite=True)
    except np.linalg.LinAlgError:  # gesdd failed after overwriting z: rebuild, use gesvd
        design, z = prepare(X, Y, fit_intercept=fit_intercept, standardize=standardize)
        fac = factorize(z, solver="svd", rtol=rtol, overwrite=False)
    del z
    if fac.rank == 0:
        raise InputError("the centered design is numerically zero; nothing to fit")
    with np.errstate(over="ignore", under="ignore"):
        out_of_range = (not np.isfinite(4.0 * np.sum(np.square(fac.d)))
                        or np.square(fac.d[-1]) < 1e6 * np.finfo(np.float64).tiny)
    if out_of_range:
        # lambda lives on the scale of d^2, which would leave the float64 range
        raise InputError(
            f"the design's singular values span {fac.d[-1]:.1e} to {fac.d_max:.1e}, whose squares "
            "(the scale of lambda) leave the float64 range; standardize the columns "
            "(standardize=True) or rescale X"
        )
    lam = default_grid(fac.d, n_lambdas) if lam_user is None else lam_user
    return path_from_factors(
        design, fac, lam, feature_names=names if names is not None else [f"x{j}" for j in range(p)],
        multi_target=multi, X_test=X_test if has_test else None, Y_test=Yt if has_test else None,
        return_fitted=return_fitted)


def path_from_factors(design: Design, fac: Factorization, lambdas, *, feature_names,
                      multi_target: bool = False, X_test=None, Y_test=None,
                      return_fitted: bool = False) -> RidgePath:
    """Assemble a :class:`RidgePath` from a prepared design and its factorization.

    The step of :func:`fit_path` after the factorization; also used to rebuild a
    path from a saved fit (:func:`paths.load_fit`), which then gives the same
    numbers bit for bit.

    Parameters
    ----------
    design : Design
    fac : Factorization
        Factors of the reduced design of ``design``.
    lambdas : ndarray, shape (k,)
        Validated penalties.
    feature_names : list of str
    multi_target : bool
        Keep the target axis in the results (a two-dimensional response).
    X_test : ndarray, shape (n_test, p), optional
    Y_test : ndarray, shape (n_test, t), optional
        Validated held-out rows and responses (two-dimensional).
    return_fitted : bool

    Returns
    -------
    RidgePath
    """
    lam = np.array(lambdas, dtype=np.float64)
    _freeze(lam)
    n, p = design.n_samples, design.n_features
    fit_intercept = design.fit_intercept
    multi = multi_target
    Yt = Y_test
    has_test = X_test is not None
    t_count = design.zy.shape[1]

    c = fac.u.T @ design.zy  # (r, t)
    crit = criteria(fac, design, c, lam)
    df = crit.df
    m, r = fac.u.shape
    d = fac.d

    coef = _coefficients(fac, c, lam, design)  # (k, p, t)
    intercept = design.y_mean[None, :] - np.matmul(design.x_mean, coef)  # (k, t)
    beta0 = (c / d[:, None]).T @ fac.vt  # (t, q) standardized min-norm coefficients
    coef0 = np.zeros((p, t_count))
    coef0[design.active] = (beta0 / design.x_scale[design.active]).T
    intercept0 = design.y_mean - design.x_mean @ coef0

    test_mse = test0 = None
    n_test = 0
    if has_test:
        n_test = X_test.shape[0]
        proj = design.transform(X_test) @ fac.vt.T  # (n_test, r), once per test set
        gains = _gains(d, lam)
        resid = (Yt - design.y_mean)[:, None, :] - _project(proj, gains, c)
        test_mse = np.mean(np.square(resid), axis=0)
        resid0 = Yt - design.y_mean - proj @ (c / d[:, None])
        test0 = np.mean(np.square(resid0), axis=0)

    fitted = None
    if return_fitted:
        F = np.square(d)[:, None] / (np.square(d)[:, None] + lam[None, :])
        fitted_c = to_sample_space(fac.u @ (F[:, :, None] * c[:, None, :]).reshape(r, -1),
                                   fit_intercept)
        fitted = design.y_mean + fitted_c.reshape(n, lam.size, -1).transpose(1, 0, 2)

    def sq(a):  # drop the target axis for a one-dimensional response
        return a if (multi or a is None) else a[..., 0]

    min_norm = MinNormFit(
        coef=sq(coef0), intercept=sq(intercept0), train_mse=sq(crit.train_mse0),
        gcv=sq(crit.gcv0), loo_mse=sq(crit.loo_mse0), test_mse=sq(test0), df=float(fit_intercept + r),
        coef_norm=sq(np.sqrt(np.sum(np.square(beta0), axis=1))), rank=r,
    )
    out = dict(
        coef=sq(coef), intercept=sq(intercept), train_mse=sq(crit.train_mse), gcv=sq(crit.gcv),
        loo_mse=sq(crit.loo_mse), test_mse=sq(test_mse), fitted=sq(fitted),
    )
    _freeze(*out.values(), df, c, *(v for v in vars(min_norm).values()))
    return RidgePath(
        lambdas=lam, df=df, rank=r, rank_tol=fac.tol, singular_values=fac.d,
        condition_number=fac.condition_number, min_norm=min_norm, solver=fac.solver,
        solver_reason=fac.reason, n_samples=n, n_features=p, n_test=n_test,
        fit_intercept=fit_intercept, standardize=design.standardize,
        feature_names=list(feature_names), design=design, factorization=fac, uty=c, **out,
    )
