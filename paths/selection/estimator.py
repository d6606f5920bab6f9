"""A scikit-learn estimator: the whole ridge path, then one selection rule.

:class:`RidgePathRegressor` follows the scikit-learn conventions: the
parameters are stored unchanged in ``__init__``, everything learned ends in an
underscore, and ``fit`` / ``predict`` / ``score`` behave as in any regressor,
so it works inside :class:`~sklearn.pipeline.Pipeline` and
:class:`~sklearn.model_selection.GridSearchCV`.  ``fit`` computes the whole
path from one factorization (:func:`paths.path.fit_path`), K-fold
cross-validation from the same factors when the rule needs it
(:func:`paths.cv.cross_validate`), and applies the rule
(:func:`paths.select.select`); the full path and the side-by-side rules table
stay available as ``path_`` and ``selection_``.
"""
from __future__ import annotations

import numpy as np
from sklearn.base import BaseEstimator, RegressorMixin
from sklearn.utils.validation import check_is_fitted, validate_data

from paths.data.validation import InputError, as_weights
from paths.selection.cv import cross_validate
from paths.core.algebra import penalized_df
from paths.core.path import fit_path
from paths.selection.rules import parse_rule, select_penalty

__all__ = ["RidgePathRegressor"]


class RidgePathRegressor(RegressorMixin, BaseEstimator):
    """Ridge regression with the penalty chosen along the whole path by a named rule.

    Penalty convention: minimize :math:`\\|y - b_0 - X\\beta\\|^2 + \\lambda\\|\\beta\\|^2`
    on the centered (by default standardized, population SD) design, intercept
    unpenalized — scikit-learn's ``Ridge(alpha=lambda)`` on the scaled design.

    Parameters
    ----------
    rule : str, default="gcv"
        ``"gcv"``, ``"loo"``, ``"cv"``, ``"one-se"``, ``"df=VALUE"``,
        ``"fraction=VALUE"``, ``"hkb"``, ``"lw"`` or ``"isotropic"``; see
        :mod:`paths.select`.
    lambdas : array_like, optional
        Penalty grid; default the spectrum-based grid of ``n_lambdas`` values.
    n_lambdas : int, default=100
    fit_intercept : bool, default=True
    standardize : bool, default=True
        Scale columns to unit population SD before penalizing.
    solver : {"auto", "svd", "gram"}, default="auto"
    cv : int, optional
        Number of folds for K-fold CV.  Default: none, except 10 when the rule
        is ``"cv"`` or ``"one-se"``.  With CV, the other rules report CV
        estimates of the test error.
    cv_scheme : {"shuffled", "blocked"}, default="shuffled"
        Fold scheme (grouped folds: pass ``groups`` to :meth:`fit`).
    cv_repeats : int, default=1
    cv_scaling : {"global", "per-fold"}, default="global"
    random_state : int, default=0
        Seed of the shuffled folds.

    Attributes
    ----------
    coef_ : ndarray, shape (n_features,) or (n_targets, n_features)
    intercept_ : float or ndarray, shape (n_targets,)
    lambda_ : float or ndarray, shape (n_targets,)
        The chosen penalty (per target); ``inf`` for a constant response.
    df_ : float or ndarray
        Effective degrees of freedom at ``lambda_`` (intercept included).
    path_ : RidgePath or None
        The full path result (``None`` when the response or every feature is
        constant and only an intercept is fitted).
    cv_result_ : CVResult or None
    selection_ : SelectionReport or None
        Every rule's choice side by side.
    noise_variance_ : float or ndarray or None
    n_features_in_ : int
    feature_names_in_ : ndarray of str
        Only when ``X`` has string column names.

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> X = rng.standard_normal((50, 200)); y = X[:, 0] + 0.5 * rng.standard_normal(50)
    >>> est = RidgePathRegressor(rule="gcv").fit(X, y)
    >>> est.coef_.shape, est.path_.lambdas.shape
    ((200,), (100,))
    """

    def __init__(self, rule="gcv", lambdas=None, n_lambdas=100, fit_intercept=True,
                 standardize=True, solver="auto", cv=None, cv_scheme="shuffled", cv_repeats=1,
                 cv_scaling="global", random_state=0):
        self.rule = rule
        self.lambdas = lambdas
        self.n_lambdas = n_lambdas
        self.fit_intercept = fit_intercept
        self.standardize = standardize
        self.solver = solver
        self.cv = cv
        self.cv_scheme = cv_scheme
        self.cv_repeats = cv_repeats
        self.cv_scaling = cv_scaling
        self.random_state = random_state

    def __sklearn_tags__(self):
        tags = super().__sklearn_tags__()
        tags.target_tags.multi_output = True
        tags.target_tags.single_output = True
        return tags

    def fit(self, X, y, groups=None, sample_weight=None):
        """Compute the path, apply the rule, keep the chosen coefficients.

        Parameters
        ----------
        X : array_like, shape (n_samples, n_features)
        y : array_like, shape (n_samples,) or (n_samples, n_targets)
        groups : array_like, shape (n_samples,), optional
            Group labels for grouped K-fold CV (whole groups held out together).
        sample_weight : array_like, shape (n_samples,), optional
            Positive row weights (:func:`paths.path.fit_path`): the fit and every
            criterion the rule reads are weighted.

        Returns
        -------
        self
        """
        X, y = validate_data(self, X, y, multi_output=True, y_numeric=True,
                             ensure_min_samples=2, dtype=np.float64)
        name, _ = parse_rule(self.rule)
        multi = y.ndim == 2
        Y = y if multi else y[:, None]
        n, p = X.shape
        const_y = Y.max(axis=0) <= Y.min(axis=0) if self.fit_intercept else ~np.any(Y, axis=0)
        const_x = bool(np.all(X.max(axis=0) <= X.min(axis=0))) and self.fit_intercept
        self.cv_result_ = None
        if sample_weight is not None:
            sample_weight = as_weights(sample_weight, n)
        if const_y.all() or const_x:
            # nothing to fit but the intercept: predict the mean (no penalty to choose)
            self.path_ = self.selection_ = self.noise_variance_ = None
            mean = (np.average(Y, axis=0, weights=sample_weight) if self.fit_intercept
                    else np.zeros(Y.shape[1]))
            coef = np.zeros((Y.shape[1], p))
            lam = np.full(Y.shape[1], np.inf)
            df = np.full(Y.shape[1], float(self.fit_intercept))
            self._set(coef, mean, lam, df, multi)
            return self
        if const_y.any():
            j = int(np.flatnonzero(const_y)[0])
            raise InputError(f"target column {j} is constant; fit it separately or drop it")
        path = fit_path(X, y, self.lambdas, fit_intercept=self.fit_intercept,
                        standardize=self.standardize, solver=self.solver,
                        n_lambdas=self.n_lambdas, sample_weight=sample_weight)
        k = self.cv
        if k is None and (name in ("cv", "one-se") or groups is not None):
            k = 10 if groups is None else min(10, np.unique(np.asarray(groups)).size)
        if k is not None:
            self.cv_result_ = cross_validate(
                X, y, n_folds=k, scheme=self.cv_scheme, seed=self.random_state,
                repeats=self.cv_repeats, groups=groups, scaling=self.cv_scaling, path=path)
        rep = select_penalty(path, self.cv_result_, reported=self.rule)
        lam = rep.chosen_lambdas()
        if not np.all(np.isfinite(lam)):
            raise InputError(
                f"rule {self.rule!r} gives no penalty here ({rep.chosen.note}); choose another rule"
            )
        coef = path.coef_per_target(lam).T  # each target at its own penalty: (t, p)
        intercept = path.design.y_mean - coef @ path.design.x_mean
        df = path.design.n_fixed + penalized_df(path.singular_values, lam)
        self.path_ = path
        self.selection_ = rep
        self.noise_variance_ = rep.noise.value
        self._set(coef, intercept, lam, df, multi)
        return self

    def _set(self, coef, intercept, lam, df, multi):
        if multi:
            self.coef_, self.intercept_, self.lambda_, self.df_ = coef, intercept, lam, df
        else:
            self.coef_ = coef[0]
            self.intercept_ = float(intercept[0])
            self.lambda_ = float(lam[0])
            self.df_ = float(df[0])

    def predict(self, X):
        """Predictions at the chosen penalty, shape (n,) or (n, n_targets)."""
        check_is_fitted(self, "coef_")
        X = validate_data(self, X, reset=False, dtype=np.float64)
        return X @ self.coef_.T + self.intercept_
