"""Validation at the public boundary.

Everything here runs once, when data enter the library; the numerical core
trusts what it is handed.  Every problem raises :class:`InputError`, a
:class:`ValueError` subclass whose message is one line naming the problem and
the fix (the CLI prints it and exits with status 2).
"""
from __future__ import annotations

import numpy as np

__all__ = ["InputError", "as_design", "as_response", "as_lambdas", "check_rows_for_cv"]


class InputError(ValueError):
    """Bad input: the message names the problem and how to fix it, in one line."""


def _to_float_2d(a, what: str) -> np.ndarray:
    try:
        arr = np.asarray(a, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise InputError(
            f"{what} is not numeric ({exc}); convert or drop the non-numeric columns"
        ) from None
    return arr


def _check_finite(arr: np.ndarray, what: str, names=None) -> None:
    bad = ~np.isfinite(arr)
    if bad.any():
        if arr.ndim == 2:
            cols = np.flatnonzero(bad.any(axis=0))
            label = ", ".join(
                str(names[j]) if names is not None else f"column {j}" for j in cols[:5]
            )
            more = "" if cols.size <= 5 else f" and {cols.size - 5} more"
            raise InputError(
                f"{what} has {int(bad.sum())} NaN or infinite value(s) in {label}{more}; "
                "remove or impute them before fitting"
            )
        raise InputError(
            f"{what} has {int(bad.sum())} NaN or infinite value(s); "
            "remove or impute them before fitting"
        )


def feature_names_of(X) -> list[str] | None:
    """Column names of a DataFrame-like ``X``, else ``None``."""
    cols = getattr(X, "columns", None)
    if cols is None:
        return None
    return [str(c) for c in cols]


def as_design(X, what: str = "X") -> np.ndarray:
    """Return ``X`` as a finite float64 array of shape (n, p), n >= 1, p >= 1."""
    names = feature_names_of(X)
    arr = _to_float_2d(X, what)
    if arr.ndim == 1:
        raise InputError(
            f"{what} is 1-D with shape {arr.shape}; pass a 2-D array of shape "
            "(n_samples, n_features), e.g. X.reshape(-1, 1) for one feature"
        )
    if arr.ndim != 2:
        raise InputError(f"{what} must be 2-D (n_samples, n_features); got shape {arr.shape}")
    n, p = arr.shape
    if n == 0:
        raise InputError(f"{what} has no rows (shape {arr.shape}); pass at least 2 samples")
    if p == 0:
        raise InputError(f"{what} has no columns (shape {arr.shape}); pass at least 1 feature")
    _check_finite(arr, what, names)
    return arr


def as_response(y, n: int, what: str = "y") -> np.ndarray:
    """Return ``y`` as a finite float64 array of shape (n,) or (n, t)."""
    arr = _to_float_2d(y, what)
    if arr.ndim == 2 and arr.shape[1] == 0:
        raise InputError(f"{what} has no columns (shape {arr.shape}); pass at least one target")
    if arr.ndim not in (1, 2):
        raise InputError(f"{what} must be 1-D (n,) or 2-D (n, n_targets); got shape {arr.shape}")
    if arr.shape[0] != n:
        raise InputError(
            f"{what} has {arr.shape[0]} rows but X has {n}; pass one response row per sample"
        )
    _check_finite(arr, what)
    return arr


def as_lambdas(lambdas) -> np.ndarray:
    """Return a user grid as a 1-D float64 array of finite, non-negative penalties."""
    try:
        lam = np.atleast_1d(np.asarray(lambdas, dtype=np.float64))
    except (TypeError, ValueError):
        shown = " ".join(repr(lambdas).split())[:80]
        raise InputError(
            f"lambdas must be numeric penalties >= 0; got the non-numeric {shown}"
        ) from None
    if lam.ndim != 1 or lam.size == 0:
        raise InputError(f"lambdas must be a non-empty 1-D sequence; got shape {lam.shape}")
    nan = np.isnan(lam)
    if nan.any():
        raise InputError(
            f"lambdas contain {int(nan.sum())} NaN value(s) (first at position "
            f"{int(np.argmax(nan))}); pass finite penalties >= 0"
        )
    if not np.all(np.isfinite(lam)) or np.any(lam < 0):
        raise InputError(
            "lambdas must be finite and >= 0 (penalty on ||beta||^2); "
            f"got min {lam.min()!r}, max {lam.max()!r}"
        )
    return lam


def check_rows_for_cv(n_rows: int, n_folds, source: str = "", *, fit_intercept: bool = True) -> None:
    """Refuse K-fold cross-validation that the rows cannot support, naming the file.

    K folds need at least K rows (one per held-out fold) and, with an intercept,
    at least 2 training rows in every fold's complement: ``n_rows >= max(K, 3)``
    and ``n_rows - ceil(n_rows / K) >= 2``.
    """
    if n_folds is None:
        return
    where = f"{source}: " if source else ""
    K = int(n_folds)
    if K < 2:
        return  # not a question of rows: paths.cv reports the valid range
    need = 2 if fit_intercept else 1

    def ok(k):
        return 2 <= k <= n_rows and n_rows - (-(-n_rows // k)) >= need

    if not ok(K):
        valid = [k for k in range(2, min(n_rows, 1000) + 1) if ok(k)]
        fix = (f"choose --cv between {valid[0]} and {valid[-1]}" if valid
               else "add rows or drop --cv")
        raise InputError(
            f"{where}{n_rows} row(s) are too few for {K}-fold cross-validation (every fold "
            f"needs a held-out row and {need} training rows); {fix}"
        )


def as_weights(w, n: int, what: str = "sample_weight") -> np.ndarray:
    """Return row weights as a float64 array of shape (n,): finite and positive.

    Zero weights are refused (drop those rows instead): a row that does not
    count has no leave-one-out or K-fold error to weigh.
    """
    arr = _to_float_2d(w, what)
    if arr.ndim != 1:
        raise InputError(f"{what} must be 1-D with one weight per row; got shape {arr.shape}")
    if arr.shape[0] != n:
        raise InputError(f"{what} has {arr.shape[0]} values but X has {n} rows; pass one "
                         "weight per row")
    _check_finite(arr, what)
    if np.any(arr <= 0):
        i = int(np.flatnonzero(arr <= 0)[0])
        raise InputError(f"{what} must be positive; value {arr[i]!r} at row {i} — drop rows "
                         "with zero weight instead")
    return arr
