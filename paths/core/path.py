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

from paths.data.validation import (InputError, as_count, as_design, as_lambdas, as_response,
                                   as_weights, check_feature_range, check_memory,
                                   check_response_range, feature_names_of)
from paths.core.design import Design, prepare, prepare_weighted, to_sample_space
from paths.core.factor import Factorization, factorize
from paths.core.grid import default_grid
from paths.core import algebra
from paths.core.algebra import Criteria, FactorState

__all__ = ["PENALTY_CONVENTION", "DENSE_COEF_LIMIT", "RidgePath", "MinNormFit", "Criteria", "fit_path",
           "path_from_factors", "predict_from_factors"]

PENALTY_CONVENTION = (
    "minimize ||y - b0 - X beta||^2 + lambda ||beta||^2; X column-centered "
    "(and scaled to unit population SD when standardized); intercept b0 unpenalized; "
    "lambda on the scale of squared singular values of X (scikit-learn Ridge alpha)"
)
_EPS = np.finfo(np.float64).eps
#: bytes above which a dense penalties x features x targets coefficient array is refused
DENSE_COEF_LIMIT = 2.0 * 2**30


def _check_dense(k: int, p: int, t: int) -> None:
    need = 8.0 * k * p * t
    if need > DENSE_COEF_LIMIT:
        raise InputError(
            f"coefficients of {k} penalties x {p} features x {t} targets would take "
            f"{need / 2**30:.3g} GiB (limit {DENSE_COEF_LIMIT / 2**30:.3g} GiB); ask for fewer "
            "penalties or targets, or use coef_per_target(lambdas) (one penalty per target)")


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
        Coefficients on the original feature scale: a property, computed from
        the factors on first use and kept.  Above :data:`DENSE_COEF_LIMIT` bytes
        (many targets) it is refused with an :class:`InputError` naming
        :meth:`coef_of` (one target's path) and :meth:`coef_per_target` (each
        target at its own penalty), which never form it.
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
        ``singular_values[0] / singular_values[-1]``: it covers the ``rank``
        retained singular values only (those dropped as numerically zero, or as
        too small for a forced Gram route to resolve, are not in it; a forced
        Gram route that drops any says so with a ``RankCutWarning``).
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
    unpenalized : list of str
        Columns left out of the penalty (``unpenalized=``).
    weighted : bool
        Fitted with row weights (``sample_weight=``): every error is weighted.
    """

    lambdas: np.ndarray
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
    state: FactorState | None = field(default=None, repr=False, compare=False)
    unpenalized: list = field(default_factory=list)
    weighted: bool = False
    multi_target: bool = False
    cache: dict = field(default_factory=dict, repr=False, compare=False)

    # ------------------------------------------------------------------ helpers
    @property
    def n_targets(self) -> int:
        return int(self.uty.shape[1])

    @property
    def coef(self) -> np.ndarray:
        """Coefficients (k, p) [or (k, p, t)] on the original scale, formed on first use.

        Raises
        ------
        InputError
            When the dense array would exceed :data:`DENSE_COEF_LIMIT` bytes.
        """
        if "coef" not in self.cache:
            k, p, t = self.lambdas.size, self.n_features, self.n_targets
            need = 8.0 * k * p * t
            if need > DENSE_COEF_LIMIT:
                raise InputError(
                    f"the dense coefficients of {k} penalties x {p} features x {t} targets "
                    f"would take {need / 2**30:.3g} GiB (limit {DENSE_COEF_LIMIT / 2**30:.3g} GiB); "
                    "use path.coef_of(target) for one target's path or "
                    "path.coef_per_target(lambdas) for each target at its penalty")
            coef = algebra.coefficients(self._state(), self.lambdas, self.design)
            coef = coef if self.multi_target else coef[..., 0]
            _freeze(coef)
            self.cache["coef"] = coef
        return self.cache["coef"]

    def coef_of(self, target: int = 0) -> np.ndarray:
        """One target's coefficient path (k, p), original scale, from the factors: O(k q r)."""
        j = int(target)
        if not 0 <= j < self.n_targets:
            raise InputError(f"target {target} is out of range: the path has "
                             f"{self.n_targets} target(s), numbered from 0")
        if "coef" in self.cache:
            c = self.cache["coef"]
            return c[:, :, j] if c.ndim == 3 else c
        lam = self.lambdas
        return algebra.coefficients_paired(self._state(), np.asarray(lam), self.design,
                                           np.full(lam.size, j)).T

    def coef_per_target(self, lam, targets=None) -> np.ndarray:
        """Coefficients (p, b) of each target at its own penalty, original scale.

        Parameters
        ----------
        lam : array_like, shape (b,)
            One penalty per target (every target by default).
        targets : array_like of int, shape (b,), optional

        Returns
        -------
        ndarray, shape (p, b): O(q r b), no (k, p, t) array.
        """
        lam_arr = as_lambdas(lam)
        idx = np.arange(self.n_targets) if targets is None else np.asarray(targets, int)
        if lam_arr.size != idx.size:
            raise InputError(f"pass one penalty per target: {idx.size} target(s), "
                             f"{lam_arr.size} penalties")
        return algebra.coefficients_paired(self._state(), lam_arr, self.design, idx)

    @property
    def coef_std(self) -> np.ndarray:
        """Coefficients on the standardized scale (equal to ``coef`` without scaling)."""
        s = self.design.x_scale
        return self.coef * (s[:, None] if self.coef.ndim == 3 else s)

    @property
    def coef_norm(self) -> np.ndarray:
        """:math:`\\|\\beta_\\lambda\\|_2` on the scale the penalty acts on, shape (k,) or (k, t).

        Unpenalized columns are left out (the penalty does not act on them):
        :math:`(\\sum_j g_j^2 c_j^2)^{1/2}`, V having orthonormal columns.
        """
        if "coef_norm" not in self.cache:
            nrm = algebra.path_coef_norm(self._state(), self.lambdas)
            nrm = nrm if self.multi_target else nrm[:, 0]
            _freeze(nrm)
            self.cache["coef_norm"] = nrm
        return self.cache["coef_norm"]

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
        if self.state is None or self.state.u is None:
            raise InputError("criteria at new penalties need the left factor, which this "
                             "engine does not keep; pass the penalties as lambdas=")
        crit = algebra.criteria(self.state, as_lambdas(lam))
        if self.multi_target:
            return crit
        return Criteria(**{k: (v if k == "df" else v[..., 0]) for k, v in vars(crit).items()})

    def coef_at(self, lam) -> np.ndarray:
        """Coefficients (original scale) at any penalties, from the factors.

        Returns shape (p,) [or (p, t)] for a scalar ``lam``, (len(lam), p) [or
        (len(lam), p, t)] for a sequence.
        """
        lam_arr = as_lambdas(lam)
        _check_dense(lam_arr.size, self.n_features, self.n_targets)
        coef = algebra.coefficients(self._state(), lam_arr, self.design)
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
        if self.design.span is not None:  # unpenalized part: through the coefficients
            _check_dense(lam_arr.size, self.n_features, self.n_targets)
            coef = algebra.coefficients(self._state(), lam_arr, self.design)  # (k, p, t)
            pred = np.einsum("np,kpt->nkt", X, coef) + algebra.intercepts(coef, self.design)
        else:
            fac = self.factorization
            pred = predict_from_factors(self.design, fac.d, fac.vt, self.uty, X, lam_arr)
        if not self.multi_target:
            pred = pred[..., 0]
        return pred[:, 0] if np.ndim(lam) == 0 else pred

    def _state(self) -> FactorState:
        if self.state is not None:
            return self.state
        fac = self.factorization
        return FactorState(d=fac.d, vt=fac.vt, uty=self.uty, rss_out=np.zeros(self.uty.shape[1]),
                           n_samples=self.n_samples, fit_intercept=self.fit_intercept)


def predict_from_factors(design: Design, d: np.ndarray, vt: np.ndarray, uty: np.ndarray,
                         X: np.ndarray, lam: np.ndarray) -> np.ndarray:
    r"""Predictions (n_new, k, t) for validated rows ``X`` at validated penalties ``lam``
    from the factors alone: :math:`\bar y + \tilde x V G_\lambda U^T y`, with
    :math:`\tilde x` the row centered and scaled as the training rows and
    :math:`G_\lambda = \operatorname{diag}(d_j/(d_j^2 + \lambda))`.

    The arithmetic of :meth:`RidgePath.predict` for a design without an unpenalized
    span (and of a saved fit, :meth:`paths.present.fitfile.SavedFit.predict`, which
    therefore gives the same numbers bit for bit).
    """
    gains = algebra.gains(d, lam)  # (r, k)
    proj = design.transform(X) @ vt.T  # (n_new, r)
    return design.y_mean + algebra.project(proj, gains, uty)


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
    sample_weight=None,
    unpenalized=None,
    relative_penalty=None,
    test_weight=None,
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
    sample_weight : array_like, shape (n,), optional
        Positive row weights: minimize
        :math:`\\sum_i w_i (y_i - b_0 - x_i\\beta)^2 + \\lambda\\|\\beta\\|^2` with
        weighted centering and weighted population scaling (scikit-learn's
        ``Ridge(alpha).fit(X, y, sample_weight=w)``).  Every criterion is then
        weighted: training and test error, GCV, leave-one-out and K-fold errors
        are :math:`\\sum_i w_i e_i^2 / \\sum_i w_i` (leave-one-out and K-fold from
        the weighted refits without the rows left out).
    unpenalized : sequence of str or int, or bool mask, optional
        Columns left out of the penalty (names, glob patterns or indices), like
        the intercept; df counts them.
    relative_penalty : mapping or array_like, optional
        ``{pattern: W}`` (or one factor per column): column j is penalized by
        :math:`W_j \\lambda`, :math:`W_j > 0`.
    test_weight : array_like, shape (n_test,), optional
        Weights of the test rows (default 1): test error
        :math:`\\sum_i w_i e_i^2/\\sum_i w_i`.

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
    - leave-one-out residuals :math:`e_i/(1-H_{ii})`, exact (see :mod:`paths.core.algebra`).

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
    check_response_range(Y, fit_intercept=fit_intercept)
    y_size = float(np.max(np.ptp(Y, axis=0) if fit_intercept else np.abs(Y).max(axis=0)))
    check_feature_range(X, standardize=standardize, y_size=y_size, names=names)
    n_lambdas = as_count(n_lambdas, "n_lambdas")
    n_pen = n_lambdas if lambdas is None else np.size(lambdas)
    check_memory(8.0 * n_pen * 16 * Y.shape[1] + 8.0 * algebra.LOO_BLOCK_ELEMS,
                 f"{n_pen} penalties x {Y.shape[1]} targets of criteria on {n} x {p} data",
                 "ask for fewer penalties (n_lambdas) or targets")
    has_test = X_test is not None or y_test is not None
    if has_test:
        X_test, Yt = _test_set(X_test, y_test, p, y_arr)
    lam_user = None if lambdas is None else as_lambdas(lambdas)
    names = names if names is not None else [f"x{j}" for j in range(p)]
    general = _penalty_spec(names, n, sample_weight, unpenalized, relative_penalty)
    Wt = None
    if test_weight is not None:
        if not has_test:
            raise InputError("test_weight needs X_test and y_test")
        Wt = as_weights(test_weight, X_test.shape[0], "test_weight")

    def prep():
        if general is None:
            return prepare(X, Y, fit_intercept=fit_intercept, standardize=standardize)
        return prepare_weighted(X, Y, fit_intercept=fit_intercept, standardize=standardize,
                                names=names, **general)

    design, fac = _factor_prepared(prep, n, p, solver, rtol)
    lam = default_grid(fac.d, n_lambdas) if lam_user is None else lam_user
    return path_from_factors(
        design, fac, lam, feature_names=names, multi_target=multi,
        X_test=X_test if has_test else None, Y_test=Yt if has_test else None, test_weight=Wt,
        X_train=X if return_fitted else None, return_fitted=return_fitted)


def _test_set(X_test, y_test, p, y_arr):
    """The checked test rows: ``(X_test, Y_test)`` with a two-dimensional response."""
    if X_test is None or y_test is None:
        raise InputError("pass both X_test and y_test, or neither")
    X_test = as_design(X_test, "X_test")
    if X_test.shape[1] != p:
        raise InputError(
            f"X_test has {X_test.shape[1]} columns but X has {p}; "
            "pass the same features in the same order"
        )
    Yt = as_response(y_test, X_test.shape[0], "y_test")
    multi = y_arr.ndim == 2
    if Yt.ndim != y_arr.ndim or (multi and Yt.shape[1] != y_arr.shape[1]):
        raise InputError(
            f"y_test has shape {Yt.shape} but y has shape {y_arr.shape}; "
            "pass the same targets"
        )
    return X_test, (Yt if multi else Yt[:, None])


def _factor_prepared(prep, n, p, solver, rtol):
    """``(design, factorization)`` of the prepared design, refused when nothing can be fitted."""
    design, z = prep()
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
        design, z = prep()
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
    return design, fac


def _penalty_spec(names, n, sample_weight, unpenalized, relative_penalty) -> dict | None:
    """Keyword arguments of :func:`paths.core.design.prepare_weighted`, or None (plain ridge)."""
    from paths.core.penalties import penalty_factors, unpenalized_mask

    w = None if sample_weight is None else as_weights(sample_weight, n)
    unp = unpenalized_mask(unpenalized, names)
    pf = penalty_factors(relative_penalty, names)
    if w is None and unp is None and pf is None:
        return None
    return {"sample_weight": w, "unpenalized": unp, "penalty_factor": pf}


def path_from_factors(design: Design, fac: Factorization, lambdas, *, feature_names,
                      multi_target: bool = False, X_test=None, Y_test=None, test_weight=None,
                      X_train=None, return_fitted: bool = False) -> RidgePath:
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
    test_weight : ndarray, shape (n_test,), optional
    X_train : ndarray, shape (n, p), optional
        The training design, needed for ``return_fitted`` with a span (weights
        or unpenalized columns).
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

    state = algebra.factor_state(fac, design)
    c = state.uty
    crit = algebra.criteria(state, lam)
    df = crit.df
    r = fac.rank

    intercept = algebra.path_intercepts(state, lam, design)  # (k, t), no coefficients formed
    coef0, beta0 = algebra.min_norm_coefficients(state, design)
    intercept0 = algebra.intercepts(coef0, design)

    test_mse = test0 = None
    n_test = 0
    if has_test:
        n_test = X_test.shape[0]
        if design.span is None and test_weight is None:
            proj = design.transform(X_test) @ fac.vt.T  # (n_test, r), once per test set
            sums, sums0 = algebra.test_sums(state, lam, proj, Yt - design.y_mean)
            test_mse, test0 = sums / n_test, sums0 / n_test
        else:
            _check_dense(lam.size, p, Yt.shape[1])
            coef = algebra.coefficients(state, lam, design)
            test_mse, test0 = _weighted_test_error(X_test, Yt, test_weight, coef, intercept,
                                                   coef0, intercept0)

    fitted = None
    if return_fitted and design.span is not None:
        _check_dense(lam.size, p, c.shape[1])
        coef = algebra.coefficients(state, lam, design)
        fitted = np.einsum("np,kpt->knt", X_train, coef) + intercept[:, None, :]
    elif return_fitted:
        F = algebra.fractions(fac.d, lam)
        fitted_c = to_sample_space(fac.u @ (F[:, :, None] * c[:, None, :]).reshape(r, -1),
                                   fit_intercept)
        fitted = design.y_mean + fitted_c.reshape(n, lam.size, -1).transpose(1, 0, 2)

    def sq(a):  # drop the target axis for a one-dimensional response
        return a if (multi or a is None) else a[..., 0]

    min_norm = MinNormFit(
        coef=sq(coef0), intercept=sq(intercept0), train_mse=sq(crit.train_mse0),
        gcv=sq(crit.gcv0), loo_mse=sq(crit.loo_mse0), test_mse=sq(test0),
        df=float(design.n_fixed + r),
        coef_norm=sq(algebra.coef_norm(beta0)), rank=r,
    )
    out = dict(
        intercept=sq(intercept), train_mse=sq(crit.train_mse), gcv=sq(crit.gcv),
        loo_mse=sq(crit.loo_mse), test_mse=sq(test_mse), fitted=sq(fitted),
    )
    _freeze(*out.values(), df, c, *(v for v in vars(min_norm).values()))
    unpen = design.unpenalized
    return RidgePath(
        unpenalized=[] if unpen is None else [feature_names[j] for j in np.flatnonzero(unpen)],
        weighted=design.sample_weight is not None,
        lambdas=lam, df=df, rank=r, rank_tol=fac.tol, singular_values=fac.d,
        condition_number=fac.condition_number, min_norm=min_norm, solver=fac.solver,
        solver_reason=fac.reason, n_samples=n, n_features=p, n_test=n_test,
        fit_intercept=fit_intercept, standardize=design.standardize,
        feature_names=list(feature_names), design=design, factorization=fac, uty=c, state=state,
        multi_target=multi, **out,
    )


def _weighted_test_error(X_test, Yt, w, coef, intercept, coef0, intercept0):
    """Test error :math:`\\sum_i w_i e_i^2 / \\sum_i w_i` on the grid (k, t) and at 0 (t,)."""
    w = np.ones(X_test.shape[0]) if w is None else w
    pred = np.einsum("np,kpt->knt", X_test, coef) + intercept[:, None, :]
    res = Yt[None, :, :] - pred
    mse = np.einsum("n,knt->kt", w, np.square(res)) / w.sum()
    res0 = Yt - (X_test @ coef0 + intercept0)
    return mse, (w @ np.square(res0)) / w.sum()
