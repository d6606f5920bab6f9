"""Validation at the public boundary.

Everything here runs once, when data enter the library; the numerical core
trusts what it is handed.  Every problem raises :class:`InputError`, a
:class:`ValueError` subclass whose message is one line naming the problem and
the fix (the CLI prints it and exits with status 2).
"""
from __future__ import annotations

import os

import numpy as np

__all__ = ["InputError", "as_design", "as_response", "as_lambdas", "as_count", "check_rows_for_cv",
           "available_memory", "check_memory", "check_response_range", "check_feature_range",
           "check_response_bounds", "check_feature_bounds", "all_finite",
           "column_range"]

_EPS = np.finfo(np.float64).eps
_TINY = np.finfo(np.float64).tiny
_HUGE = np.finfo(np.float64).max


class InputError(ValueError):
    """Bad input: the message names the problem and how to fix it, in one line."""


def _to_float_2d(a, what: str) -> np.ndarray:
    """``a`` as float64, refusing what a plain conversion would silently misread:
    complex values (the imaginary part dropped), sparse matrices, masked entries,
    duplicate column names."""
    module = type(a).__module__ or ""
    if module.startswith("scipy.sparse") or hasattr(a, "tocsr"):
        raise InputError(f"{what} is a sparse matrix of shape {getattr(a, 'shape', '?')}; "
                         f"pass a dense array ({what}.toarray()): the path needs the dense SVD")
    if isinstance(a, np.ma.MaskedArray):
        masked = int(np.ma.count_masked(a))
        if masked:
            raise InputError(f"{what} is a masked array with {masked} masked value(s); fill "
                             f"or drop them first ({what}.filled(value) or "
                             f"{what}[~{what}.mask.any(axis=1)])")
        a = np.ma.getdata(a)
    cols = getattr(a, "columns", None)
    if cols is not None and hasattr(cols, "duplicated") and bool(cols.duplicated().any()):
        dup = [str(c) for c in cols[cols.duplicated()]][:5]
        raise InputError(f"{what} has duplicate column name(s) {', '.join(map(repr, dup))}; "
                         "rename them so every column has one name")
    try:
        raw = np.asarray(a)
    except (TypeError, ValueError) as exc:
        raise InputError(f"{what} is not numeric ({_one_line(exc)}); convert or drop the "
                         "non-numeric columns") from None
    if raw.dtype.kind == "c" or (raw.dtype.kind == "O" and any(
            isinstance(v, complex) for v in raw.ravel()[:100_000])):
        raise InputError(f"{what} holds complex numbers (dtype {raw.dtype}); pass the real "
                         "part and the imaginary part as separate real columns")
    try:
        arr = np.asarray(raw, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise InputError(
            f"{what} is not numeric ({_one_line(exc)}); convert or drop the non-numeric columns"
        ) from None
    return arr


def _one_line(exc) -> str:
    return " ".join(str(exc).split())[:160]


def all_finite(arr: np.ndarray, block_bytes: int = 1 << 20) -> bool:
    """Whether every entry of ``arr`` is finite, checked in row blocks of about
    ``block_bytes`` (no mask the size of ``arr``, 1/8 of its bytes, is formed)."""
    arr = np.asarray(arr)
    if arr.ndim < 2:
        return bool(np.isfinite(arr).all())
    step = max(1, block_bytes // max(arr[:1].size, 1))
    return all(np.isfinite(arr[s:s + step]).all() for s in range(0, arr.shape[0], step))


def column_range(A: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Column minima and maxima ``(lo, hi)`` of a finite 2-D array.

    ``fmin``/``fmax`` reductions: on finite data they equal ``min``/``max``
    exactly, without the NaN checks that make those several times slower along
    the rows of a tall array.

    Examples
    --------
    >>> column_range(np.array([[1.0, -2.0], [3.0, 0.5]]))
    (array([ 1., -2.]), array([3. , 0.5]))
    """
    return np.fmin.reduce(A, axis=0), np.fmax.reduce(A, axis=0)


def _check_finite(arr: np.ndarray, what: str, names=None) -> None:
    if all_finite(arr):
        return
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
            f"got min {float(lam.min())!r}, max {float(lam.max())!r}"
        )
    return lam


def as_count(value, name: str, *, minimum: int = 1, maximum: int | None = None) -> int:
    """``value`` as a whole number in ``[minimum, maximum]``; InputError otherwise.

    Examples
    --------
    >>> as_count(3.0, "n_lambdas")
    3
    >>> as_count(2.5, "n_lambdas")
    Traceback (most recent call last):
    ...
    paths.data.validation.InputError: n_lambdas must be a whole number >= 1; got 2.5
    """
    bound = f">= {minimum}" if maximum is None else f"between {minimum} and {maximum}"
    ok = (isinstance(value, (int, np.integer)) and not isinstance(value, (bool, np.bool_))) or (
        isinstance(value, (float, np.floating)) and np.isfinite(value) and float(value).is_integer())
    if not ok:
        raise InputError(f"{name} must be a whole number {bound}; got {value!r}")
    k = int(value)
    if k < minimum or (maximum is not None and k > maximum):
        raise InputError(f"{name} must be a whole number {bound}; got {k}")
    return k


def available_memory() -> int | None:
    """Bytes of memory this process can still use: ``MemAvailable`` of ``/proc/meminfo``,
    capped by a cgroup (container) limit; None where neither is known."""
    avail = None
    try:
        with open("/proc/meminfo", encoding="ascii") as fh:
            for line in fh:
                if line.startswith("MemAvailable:"):
                    avail = int(line.split()[1]) * 1024
                    break
    except OSError:
        pass
    if avail is None:
        try:
            avail = os.sysconf("SC_AVPHYS_PAGES") * os.sysconf("SC_PAGE_SIZE")
        except (ValueError, OSError, AttributeError):
            avail = None
    for limit_file, usage_file in (("/sys/fs/cgroup/memory.max", "/sys/fs/cgroup/memory.current"),
                                   ("/sys/fs/cgroup/memory/memory.limit_in_bytes",
                                    "/sys/fs/cgroup/memory/memory.usage_in_bytes")):
        try:
            with open(limit_file, encoding="ascii") as fh:
                text = fh.read().strip()
            if text == "max":
                continue
            with open(usage_file, encoding="ascii") as fh:
                left = int(text) - int(fh.read().strip())
            avail = left if avail is None else min(avail, left)
        except (OSError, ValueError):
            continue
    return avail


def _bytes(n: float) -> str:
    for unit in ("bytes", "KiB", "MiB", "GiB", "TiB", "PiB", "EiB"):
        if n < 1024 or unit == "EiB":
            return f"{n:.0f} {unit}" if unit == "bytes" else f"{n:.3g} {unit}"
        n /= 1024
    return f"{n:.3g} EiB"  # pragma: no cover


def check_memory(nbytes: float, what: str, fix: str) -> None:
    """Refuse, before allocating, a request estimated at ``nbytes`` above the available memory.

    ``what`` says what would be allocated (with its shape), ``fix`` how to need less.
    The estimate counts the largest arrays only (8 bytes per float64), so it is a lower
    bound of the real use; nothing is refused when the available memory is unknown.

    Examples
    --------
    >>> check_memory(8 * 10**20, "the coefficients (1e20 x 1)",
    ...              "ask for fewer penalties")  # doctest: +ELLIPSIS
    Traceback (most recent call last):
    ...
    paths.data.validation.InputError: the coefficients (1e20 x 1) need about 694 EiB ...
    """
    avail = available_memory()
    if avail is not None and nbytes > avail:
        raise InputError(f"{what} need about {_bytes(nbytes)} but {_bytes(avail)} of memory "
                         f"are available; {fix}")


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
        fix = (f"choose n_folds between {valid[0]} and {valid[-1]}" if valid
               else "add rows or drop n_folds")
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


def _decade(v: float) -> str:
    return f"1e{int(np.floor(np.log10(v)))}"


def _spread_of(lo: np.ndarray, hi: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Per column ``(max |a|, max - min)`` from the bounds, the latter without overflow."""
    absmax = np.maximum(hi, -lo)
    with np.errstate(over="ignore"):
        spread = hi - lo  # exact for subnormals; inf (then the largest float) on overflow
    return absmax, np.minimum(spread, _HUGE)


def check_response_range(Y: np.ndarray, *, fit_intercept: bool, names=None) -> None:
    """Refuse a response whose criteria cannot be represented, or that is constant.

    Parameters
    ----------
    Y : ndarray, shape (n, t)
        Finite response (validated by :func:`as_response`).
    fit_intercept : bool
    names : list of str, optional
        Target names, for the message.

    Notes
    -----
    The criteria (training, GCV, leave-one-out, test MSE) are mean squares of
    residuals, of the order of the squared spread :math:`s^2` of the response
    (:math:`s = \\max y - \\min y`, or :math:`\\max|y|` without an intercept);
    their sums of n terms must stay finite, :math:`n s^2 < ` the largest float,
    and their values must stay normal numbers (:math:`s^2 \\ge 10^6` tiny, about
    2e-302, the margin the factorization's own range check uses), else digits
    are lost or they are 0.  A response is constant when
    its spread is at most :math:`n\\,\\varepsilon\\max|y|` (rounding level
    relative to its own size: the test the columns use), not only when all
    values are equal.
    """
    check_response_bounds(Y.min(axis=0), Y.max(axis=0), Y.shape[0],
                          fit_intercept=fit_intercept, names=names)


def check_response_bounds(lo, hi, n: int, *, fit_intercept: bool, names=None) -> None:
    """:func:`check_response_range` from per-target minima and maxima (streaming engines)."""
    lo, hi = np.asarray(lo, dtype=float), np.asarray(hi, dtype=float)
    absmax, spread = _spread_of(lo, hi)
    size = spread if fit_intercept else absmax
    for j in range(lo.size):
        label = (f"target {names[j]!r}" if names is not None
                 else ("y" if lo.size == 1 else f"target column {j}"))
        if spread[j] == 0 and (fit_intercept or absmax[j] == 0):
            raise InputError(f"{label} is constant (every value {float(lo[j]):g}); there is "
                             "nothing to fit — check the target column")
        if (fit_intercept and spread[j] <= n * _EPS * absmax[j]) or absmax[j] == 0:
            raise InputError(
                f"{label} is constant up to rounding (values within {spread[j]:.3g} of "
                f"{float(lo[j])!r}, at most n*eps of their size); there is nothing to fit — "
                "check the target column")
        if size[j] > np.sqrt(_HUGE / n) / 2:
            raise InputError(
                f"{label} spans {size[j]:.3g}: its squared errors (the scale of the MSE, GCV "
                f"and leave-one-out criteria) leave the float64 range; rescale it (e.g. divide "
                f"by {_decade(size[j] / 1e6)})")
        if size[j] ** 2 < 1e6 * _TINY:
            raise InputError(
                f"{label} spans only {size[j]:.3g}: its squared errors (the scale of the MSE, "
                "GCV and leave-one-out criteria) underflow float64; rescale it (e.g. multiply "
                f"by {_decade(1e6 / size[j])})")


def check_feature_range(X: np.ndarray, *, standardize: bool, y_size: float = 1.0,
                        names=None) -> None:
    """Refuse feature columns whose penalty scale or coefficients leave the float64 range.

    Parameters
    ----------
    X : ndarray, shape (n, p)
        Finite design.
    standardize : bool
    y_size : float
        Spread of the response (coefficients are of order ``y_size / column size``).
    names : list of str, optional

    Notes
    -----
    Standardized columns are rescaled exactly (by a power of two) before
    centering, so any finite column can be used, as long as its coefficient,
    of order spread(y) / spread(x), is a normal float64 (within 1e±300).
    Without standardization the penalty acts on the squared singular values,
    of order :math:`n \\max|x|^2`, which must be normal numbers.
    """
    lo, hi = column_range(X)  # X is finite (validated first)
    check_feature_bounds(lo, hi, X.shape[0], standardize=standardize, y_size=y_size,
                         names=names)


def check_feature_bounds(lo, hi, n: int, *, standardize: bool, y_size: float = 1.0,
                         names=None, rescalable: bool = True) -> None:
    """:func:`check_feature_range` from per-column minima and maxima.

    ``rescalable=False`` (engines that accumulate cross products chunk by chunk
    and do not rescale columns) also refuses standardized columns beyond
    2**±400, whose squares would overflow or underflow there.
    """
    lo, hi = np.asarray(lo, dtype=float), np.asarray(hi, dtype=float)
    absmax, spread = _spread_of(lo, hi)
    size = np.where(spread > 0, spread, absmax)
    bad = np.zeros(size.size, dtype=bool)
    why = ""
    if not standardize:
        bad = (size > np.sqrt(_HUGE / n) / 2) | ((size > 0) & (size < np.sqrt(1e6 * _TINY)))
        why = ("without standardization the penalty acts on its squares, which leave the "
               "float64 range; pass standardize=True or rescale it")
    elif not rescalable:
        bad = (absmax > 2.0**400) | ((absmax > 0) & (absmax < 2.0**-400))
        why = ("this engine accumulates its squares, which would leave the float64 range, "
               "and does not rescale columns; rescale it (or fit in memory)")
    if not bad.any():
        with np.errstate(divide="ignore", over="ignore"):
            ratio = np.where(size > 0, y_size / np.where(size > 0, size, 1.0), 1.0)
        bad = (ratio > 1e300) | (ratio < 1e-300)
        why = ("its coefficient, of order spread(y)/spread(x), would leave the float64 range; "
               "rescale the column")
    if bad.any():
        j = int(np.flatnonzero(bad)[0])
        label = str(names[j]) if names is not None else f"column {j}"
        more = "" if bad.sum() == 1 else f" (and {int(bad.sum()) - 1} more column(s))"
        raise InputError(f"feature {label} spans {size[j]:.3g}{more}: {why}")
