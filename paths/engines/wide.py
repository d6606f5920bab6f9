"""The ridge path of very wide data (p ≫ n) read in column blocks.

With p in the hundreds of thousands and n in the thousands, the design does not
need to be held: centering and scaling act on each column alone, so one pass
over column blocks accumulates the reduced Gram matrix

.. math:: K = Z Z^T = \\sum_b z_b z_b^T \\qquad (m \\times m,\\ m = n - 1),

with :math:`z_b` a block of columns centered, scaled and mapped into the
reduced coordinates of :func:`paths.design.prepare` (the Householder reflector
that removes the intercept exactly).  The eigendecomposition
:math:`K = U D^2 U^T` gives every criterion of :func:`paths.path.criteria`
(df, training error, GCV, exact leave-one-out), which needs :math:`U`, the
singular values and the response only.  Test predictions use the test-by-train
cross Gram :math:`Z_{test} Z^T`, accumulated in the same pass, so the
p × n factor :math:`V = Z^T U D^{-1}` is never formed; coefficients
:math:`\\beta_\\lambda = Z^T U \\operatorname{diag}(g_\\lambda/d)\\, U^T y` come
from a second pass over the columns, one block at a time, and only on request.

``accurate=True`` replaces the Gram matrix by the triangular factor of a QR of
:math:`Z^T` accumulated over the column blocks (:math:`Z^T` is tall), so the
singular values keep their full relative accuracy.

``rank=K`` uses a randomized range finder with power iterations (Halko,
Martinsson & Tropp 2011, Alg. 4.4) over the column blocks instead: memory
O(m·(K + oversample)), passes ``2 + power_iters``.  The fit is then ridge on the
top K principal components: the minimum-norm fit and everything near the
interpolation threshold need the whole spectrum and are approximations; the
result reports the captured share of :math:`\\|Z\\|_F^2`.
"""
from __future__ import annotations

import time
import warnings
from dataclasses import dataclass

import numpy as np
import scipy.linalg as sla

from paths.data.folds import FoldCount
from paths.data.validation import (InputError, as_lambdas, as_response, check_feature_range,
                                   check_response_range)
from paths.data.chunks import (DEFAULT_BLOCK_COLUMNS, ColumnSource, CSVColumns, ParquetColumns,
                               is_text_path, open_columns)
from paths.core import algebra
from paths.core.design import Design, prepare, reduce_rows
from paths.core.factor import Factorization
from paths.core.grid import default_grid
from paths.core.path import PENALTY_CONVENTION, MinNormFit, RidgePath
from paths.engines.stream import PassInfo, StreamPath

__all__ = ["WidePath", "wide_path", "ColumnBlock", "open_wide", "fold_refits"]

_EPS = np.finfo(np.float64).eps


@dataclass(frozen=True)
class WidePath(StreamPath):
    """A :class:`~paths.path.RidgePath` of wide data computed from column blocks.

    ``coef`` (k × p) and ``min_norm.coef`` are filled by the optional
    coefficient pass (``coefficients=True``), else None; ``coef_norm`` is a
    closed form and always available.  ``captured_share`` is the share of
    :math:`\\|Z\\|_F^2` in the retained singular values (1 unless ``rank``).
    """

    @property
    def coef(self):
        """The coefficient pass's (k, p)[, t] array, or None without ``coefficients=True``."""
        return self.cache.get("coef")

    @property
    def coef_std(self):
        if self.coef is None:
            raise InputError("coefficients were not computed; pass coefficients=True")
        return super().coef_std

    @property
    def coef_norm(self) -> np.ndarray:
        """:math:`\\|\\beta_\\lambda\\|` on the penalized scale, :math:`\\sqrt{\\sum_j (g_j c_j)^2}`."""
        fac = self.factorization
        state = algebra.FactorState(d=fac.d, vt=fac.vt, uty=self.uty,
                                    rss_out=np.zeros(self.uty.shape[1]),
                                    n_samples=self.n_samples, fit_intercept=self.fit_intercept)
        nrm = algebra.path_coef_norm(state, self.lambdas)
        return nrm if self.multi_target else nrm[:, 0]

    def criteria_at(self, lam):
        """Criteria at any penalties from the held left factor (no pass over the columns)."""
        return RidgePath.criteria_at(self, lam)

    def coef_at(self, lam):
        raise InputError("coefficients at new penalties need another pass over the columns; "
                         "pass the penalties as lambdas= to wide_path")

    def predict(self, X, lam=None):
        """Predictions on the grid (needs the coefficient pass): shape (n_new, k)[, t]."""
        if self.coef is None:
            raise InputError("predictions need the coefficients; pass coefficients=True "
                             "(or a test set to wide_path)")
        if lam is not None:
            raise InputError("wide results predict on their own grid only; omit lam")
        X = np.asarray(X, dtype=np.float64)
        if X.ndim != 2 or X.shape[1] != self.n_features:
            raise InputError(f"X must have shape (n, {self.n_features}); got {X.shape}")
        if self.multi_target:
            return self.intercept[None] + np.einsum("ip,kpt->ikt", X, self.coef)
        return self.intercept[None] + X @ self.coef.T


@dataclass(frozen=True)
class ColumnBlock:
    """One block of columns ``start .. stop - 1``, prepared as
    :func:`paths.core.design.prepare` prepares a whole design.

    Attributes
    ----------
    start, stop : int
        The block's columns in the source.
    z : ndarray, shape (m, q_b)
        The block's active columns of the training rows, centered (reduced
        coordinates when an intercept is fitted) and scaled.
    design : paths.core.design.Design
        The block's column means, scales and active mask (``zy`` is empty).
    z_test : ndarray, shape (n_test, q_b), or None
        The test rows' active columns, centered and scaled the same way.
    """

    start: int
    stop: int
    z: np.ndarray
    design: Design
    z_test: np.ndarray | None = None

    @property
    def active(self) -> np.ndarray:
        return self.design.active

    @property
    def scale(self) -> np.ndarray:
        return self.design.x_scale

    @property
    def mean(self) -> np.ndarray:
        return self.design.x_mean


def _test_block(test, s, e, names):
    if test is None:
        return None
    if isinstance(test, ColumnSource):
        blk = test.read_columns(names[s:e])
    else:
        blk = test[:, s:e]
        if hasattr(blk, "compute"):
            blk = blk.compute()
        blk = np.asarray(blk, dtype=np.float64)
    bad = ~np.isfinite(blk)
    if bad.any():
        j = int(np.flatnonzero(bad.any(axis=0))[0])
        raise InputError(f"X_test column {names[s + j]!r} has {int(bad[:, j].sum())} missing "
                         "or infinite value(s); remove or impute them")
    return blk


class _Sweep:
    """One pass over the column blocks, each prepared by :func:`paths.core.design.prepare`
    after the in-memory range checks (:func:`paths.data.validation.check_feature_range`).

    ``test_rows`` (boolean, over the source's rows) splits every block into its
    training rows and its held-out test rows; else ``test`` is read alongside.
    """

    def __init__(self, src: ColumnSource, fit_intercept, standardize, test=None, *,
                 test_rows=None, y_size: float = 1.0):
        self.src, self.fit_intercept, self.standardize, self.test = src, fit_intercept, standardize, test
        self.test_rows, self.y_size = test_rows, y_size

    def blocks(self):
        """``(start, training rows, test rows or None)`` of every block, checked."""
        n = self.src.n_rows
        names = self.src.feature_names
        for s, block in self.src:
            if block.shape[0] != n:
                raise InputError(f"{self.src.source}: column block at {s} has {block.shape[0]} "
                                 f"rows, expected {n}; all columns must have the same length")
            e = s + block.shape[1]
            if self.test_rows is not None:
                yield s, block[~self.test_rows], block[self.test_rows]
            else:
                yield s, block, _test_block(self.test, s, e, names)

    def __iter__(self):
        names = self.src.feature_names
        for s, block, tb in self.blocks():
            e = s + block.shape[1]
            labels = names[s:e] if getattr(self.src, "named", True) else [
                f"column {j}" for j in range(s, e)]
            check_feature_range(block, standardize=self.standardize, y_size=self.y_size,
                                names=labels)
            design, z = prepare(block, np.empty((block.shape[0], 0)),
                                fit_intercept=self.fit_intercept, standardize=self.standardize)
            zt = None if tb is None else design.transform(tb)
            yield ColumnBlock(start=s, stop=e, z=z, design=design, z_test=zt)


def _householder(Y, fit_intercept):
    """Reduced coordinates (m, t) of the centered response, and its mean."""
    if not fit_intercept:
        return Y.copy(), np.zeros(Y.shape[1])
    mean = Y.mean(axis=0)
    return reduce_rows(Y, mean), mean


def _gram_factor(K: np.ndarray, q: int, rtol):
    """``(u, d, d_all, tol)`` of a Gram matrix :math:`K = ZZ^T` (m × m, overwritten) of a
    reduced design with ``q`` active columns: its eigenvectors and the square roots of
    its eigenvalues, kept above the rank tolerance.

    The eigenvalues of the Gram matrix carry absolute errors of order
    :math:`\\max(m, q)\\,\\varepsilon\\,d_1^2`, so singular values below
    :math:`\\sqrt{\\max(m, q)\\varepsilon}\\,d_1` cannot be resolved and are not kept.
    """
    m = K.shape[0]
    wv, U = sla.eigh(K, check_finite=False, overwrite_a=True)
    wv, U = np.maximum(wv[::-1], 0.0), U[:, ::-1]
    d_all = np.sqrt(wv)
    dmax = float(d_all[0]) if d_all.size else 0.0
    tol = max(rtol if rtol is not None else max(m, q) * _EPS, np.sqrt(max(m, q) * _EPS)) * dmax
    r = int(np.count_nonzero(d_all > tol))
    return np.ascontiguousarray(U[:, :r]), d_all[:r], d_all, float(tol)


def _check_spectrum(d: np.ndarray) -> None:
    """The in-memory engine's refusal of singular values whose squares leave float64."""
    with np.errstate(over="ignore", under="ignore"):
        out = (not np.isfinite(4.0 * np.sum(np.square(d)))
               or np.square(d[-1]) < 1e6 * np.finfo(np.float64).tiny)
    if out:
        raise InputError(
            f"the design's singular values span {d[-1]:.1e} to {d[0]:.1e}, whose squares "
            "(the scale of lambda) leave the float64 range; standardize the columns "
            "(standardize=True) or rescale X")


def open_wide(data, y=None, *, target=None, features=None, sep=None,
              block_columns: int = DEFAULT_BLOCK_COLUMNS, progress=None):
    """``(source, y)``: the column source of ``data`` and the response.

    A CSV/TSV path is parsed once, in row chunks under the in-memory reader's
    rules (:class:`paths.data.chunks.CSVColumns`), into a temporary column
    store; a Parquet path is read a block of columns at a time, with ``target``
    read as its own columns.
    """
    if target is None or y is not None:
        return open_columns(data, features=features, block_columns=block_columns), y
    if not isinstance(data, (str, bytes)) and not hasattr(data, "__fspath__"):
        raise InputError("target= names a column of a Parquet or CSV file; pass y= with arrays")
    names = [target] if isinstance(target, str) else list(target)
    if is_text_path(data):
        src = CSVColumns(data, names, features=features, sep=sep, block_columns=block_columns,
                         progress=progress)
        return src, src.targets
    probe = ParquetColumns(data, features=names)
    src = open_columns(data, features=features, exclude=probe.feature_names,
                       block_columns=block_columns)
    return src, probe.read_columns(probe.feature_names)


def wide_path(
    data,
    y=None,
    lambdas=None,
    *,
    target: str | None = None,
    features=None,
    sep: str | None = None,
    block_columns: int = DEFAULT_BLOCK_COLUMNS,
    accurate: bool = False,
    rank: int | None = None,
    oversample: int = 10,
    power_iters: int = 2,
    seed: int = 0,
    fit_intercept: bool = True,
    standardize: bool = True,
    X_test=None,
    y_test=None,
    test_rows=None,
    n_lambdas: int = 100,
    rtol: float | None = None,
    coefficients: bool = True,
    progress=None,
) -> WidePath:
    """The ridge path of wide data from an n × n Gram accumulated over column blocks.

    Parameters
    ----------
    data : path, ColumnSource, array or dask array, shape (n, p)
        Parquet file (columns read a block at a time), CSV/TSV file (parsed once
        in row chunks under the in-memory reader's rules into a temporary
        memory-mapped column store; needs ``target``), ``.npy`` file (memory
        mapped), an array, or a dask array chunked by columns.
    y : array_like, shape (n,) or (n, t), optional
        Response; or ``target`` names a column of a Parquet or CSV ``data``.
    lambdas : array_like, optional
        Penalties; default from the spectrum as in :func:`paths.path.fit_path`.
    sep : str, optional
        Delimiter of a CSV file (default: detected, as the in-memory reader does).
    block_columns : int
        Columns per block (memory ~ 2 × n × block_columns × 8 bytes).
    accurate : bool
        QR of :math:`Z^T` over the blocks instead of the Gram matrix.
    rank : int, optional
        Randomized truncated SVD with ``rank`` components (approximate; see
        the module notes).  Must be at most min(n - 1, p).
    oversample, power_iters, seed : int
        Randomized SVD settings.
    X_test, y_test : optional
        Test rows: an array (n_test, p) or a Parquet file with the same columns
        (then ``y_test`` may be omitted and the ``target`` column is read).
    test_rows : array_like of bool, shape (n,), optional
        Rows of ``data`` (and ``y``) held out as the test set (a holdout split,
        e.g. :func:`paths.data.folds.holdout_mask`): every column block is split
        into its training and its test rows as it is read.
    coefficients : bool
        Make the extra pass that computes the k × p coefficients.
    progress : callable, optional
        ``progress(label, columns_done, columns_total)``.

    Returns
    -------
    WidePath

    Raises
    ------
    InputError
        ``rank`` outside [1, min(n - 1, p)], mismatched shapes, missing or
        non-numeric values, a response or a column out of the float64 range or
        constant (the range checks of :func:`paths.core.path.fit_path`).

    References
    ----------
    Halko, N., Martinsson, P.-G. and Tropp, J. A. (2011). Finding structure with
    randomness: probabilistic algorithms for constructing approximate matrix
    decompositions. *SIAM Review* 53, 217–288.

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> X = rng.standard_normal((50, 3000)); y = X[:, 0] + rng.standard_normal(50)
    >>> res = wide_path(X, y, block_columns=1000)
    >>> res.rank, res.coef.shape
    (49, (100, 3000))
    """
    src, y = open_wide(data, y, target=target, features=features, sep=sep,
                       block_columns=block_columns, progress=progress)
    multi, Y, Yt, test, test_rows, y_size = _responses(src, y, test_rows, X_test, y_test,
                                                       target, sep, fit_intercept)
    n, p, t = Y.shape[0], src.n_features, Y.shape[1]
    m = n - 1 if fit_intercept else n
    rank = _check_rank(rank, accurate, m, p, n)
    if n_lambdas < 1:
        raise InputError(f"n_lambdas must be at least 1; got {n_lambdas}")
    lam_user = None if lambdas is None else as_lambdas(lambdas)
    zy, y_mean = _householder(Y, fit_intercept)
    n_test = 0 if Yt is None else Yt.shape[0]
    sweep = _Sweep(src, fit_intercept, standardize, test, test_rows=test_rows, y_size=y_size)
    acc = _Accumulated(p, m, n_test if Yt is not None else None)
    passes = []
    runner = _Runner(sweep, passes, progress, n * p * 8)
    u, d, d_all, tol, solver, reason = _factor_blocks(runner, acc, m, p, rank, accurate,
                                                      oversample, power_iters, seed, rtol)
    r = d.size
    share = float(np.sum(np.square(d)) / acc.fro) if acc.fro > 0 else 1.0
    approximate = rank is not None
    notes = _wide_notes(src, rank, r, share, test_rows, n_test)
    design, fac = _frozen_factors(acc, y_mean, zy, u, d, d_all, tol, solver, reason, n,
                                  fit_intercept, standardize)
    state = algebra.factor_state(fac, design)
    lam = default_grid(d, n_lambdas) if lam_user is None else lam_user
    crit = algebra.criteria(state, lam)
    A, A0, intercept, intercept0 = _intercepts(state, lam, acc, y_mean)
    test_mse, test0 = _test_errors(state, lam, acc, u, d, Yt, y_mean, n_test)
    coef = coef0 = None
    if coefficients:
        coef, coef0 = _coefficient_pass(_Runner(
            _Sweep(src, fit_intercept, standardize, test_rows=test_rows, y_size=y_size),
            passes, progress, n * p * 8), A, A0, p, t)
    min_norm, out = _squeezed(state, crit, lam, multi, fit_intercept, r, coef0, intercept,
                              intercept0, test_mse, test0)
    return WidePath(
        lambdas=lam, df=crit.df, fitted=None, rank=r, rank_tol=fac.tol, singular_values=d,
        condition_number=fac.condition_number, min_norm=min_norm, solver=solver,
        solver_reason=reason, n_samples=n, n_features=p, n_test=n_test,
        fit_intercept=fit_intercept, standardize=standardize, feature_names=src.feature_names,
        design=design, factorization=fac, uty=state.uty, penalty_convention=PENALTY_CONVENTION,
        state=state, engine="wide", passes=tuple(passes), notes=tuple(notes), captured_share=share,
        approximate=approximate, multi_target=multi,
        cache={"coef": coef if (multi or coef is None) else coef[..., 0]}, **out)


def _responses(src, y, test_rows, X_test, y_test, target, sep, fit_intercept):
    """``(multi, Y, Y_test, test set, test_rows, y_size)``: the checked responses, a holdout
    split off or a separate test set opened."""
    if y is None:
        raise InputError("pass the response: y= (array) or target= (a Parquet or CSV column)")
    y_arr = as_response(y, src.n_rows, "y")
    multi = y_arr.ndim == 2 and y_arr.shape[1] > 1
    Y_all = _response_2d(y_arr)
    test = Yt = None
    if test_rows is not None:
        if X_test is not None:
            raise InputError("pass either X_test or test_rows (a holdout), not both")
        test_rows = np.asarray(test_rows, dtype=bool)
        if test_rows.shape != (src.n_rows,) or not test_rows.any() or test_rows.all():
            raise InputError(f"test_rows must be a boolean mask of the {src.n_rows} rows with "
                             f"rows on both sides; got shape {test_rows.shape}")
        Y, Yt = Y_all[~test_rows], Y_all[test_rows]
    else:
        Y = Y_all
        test, Yt = _open_test(X_test, y_test, src, target, sep, Y.shape[1])
    n = Y.shape[0]
    if fit_intercept and n < 2:
        raise InputError(f"X has {n} row; at least 2 samples are needed to fit an intercept")
    check_response_range(Y, fit_intercept=fit_intercept,
                         names=getattr(src, "target_names", None) if target is not None else None)
    y_size = float(np.max(np.ptp(Y, axis=0) if fit_intercept else np.abs(Y).max(axis=0)))
    return multi, Y, Yt, test, test_rows, y_size


def _factor_blocks(runner, acc, m, p, rank, accurate, oversample, power_iters, seed, rtol):
    """``(u, d, d_all, tol, solver, reason)`` from the passes of the route asked for, refused
    when nothing can be fitted."""
    if rank is None and not accurate:
        u, d, d_all, tol, solver, reason = _gram_route(runner, acc, m, rtol)
    elif accurate:
        u, d, d_all, tol, solver, reason = _tsqr_route(runner, acc, m, rtol)
    else:
        u, d, d_all, tol, solver, reason = _randomized_route(
            runner, acc, m, p, rank, oversample, power_iters, seed, rtol)
    if not acc.active.any():
        raise InputError(f"every one of the {p} columns of X is constant; nothing to fit — "
                         "check the feature selection")
    if d.size == 0:
        raise InputError("the centered design is numerically zero; nothing to fit")
    _check_spectrum(d)
    return u, d, d_all, tol, solver, reason


def _wide_notes(src, rank, r, share, test_rows, n_test) -> list:
    """What a report states; a truncation (``rank``) is also a warning."""
    notes = []
    if rank is not None:
        msg = (f"rank={rank}: the fit is ridge on the top {r} principal components, capturing "
               f"{100 * share:.2f}% of ||X||_F^2; the minimum-norm fit and the quantities near the "
               "interpolation threshold need the full spectrum and are approximations")
        warnings.warn(msg, UserWarning, stacklevel=3)
        notes.append(msg)
    if test_rows is not None:
        notes.append(f"holdout: {n_test} of {src.n_rows} rows held out as the test set "
                     "(paths.data.folds, as every engine splits)")
    notes += list(getattr(src, "notes", ()))
    if rank is None:
        notes.append("n x n Gram over column blocks; the p x n factor was never formed")
    return notes


def _frozen_factors(acc, y_mean, zy, u, d, d_all, tol, solver, reason, n, fit_intercept,
                    standardize):
    """The read-only ``(Design, Factorization)`` of the accumulated column blocks."""
    for a in (acc.x_mean, acc.x_scale, acc.active, y_mean, zy, u, d):
        a.flags.writeable = False
    design = Design(zy=zy, x_mean=acc.x_mean, x_scale=acc.x_scale, y_mean=y_mean,
                    active=acc.active, n_samples=n, fit_intercept=fit_intercept,
                    standardize=standardize)
    r = d.size
    fac = Factorization(u=u, d=d, vt=np.empty((r, 0)), rank=r, tol=float(tol),
                        d_max=float(d_all[0]), d_min=float(d_all[-1]), solver=solver,
                        reason=reason)
    return design, fac


def _intercepts(state, lam, acc, y_mean):
    """``(A, A0, intercepts, min-norm intercept)`` with the sample weights ``A``."""
    # standardized coefficients are Z^T a(lam) with a = U diag(g/d) c  (m, k, t)
    A = algebra.sample_weights(state, lam)
    A0 = algebra.sample_weights(state, [0.0])[:, 0]  # min-norm: gain 1/d, divided by d
    intercept = y_mean[None, :] - np.einsum("m,mkt->kt", acc.w, A)
    intercept0 = y_mean - acc.w @ A0
    return A, A0, intercept, intercept0


def _test_errors(state, lam, acc, u, d, Yt, y_mean, n_test):
    """``(test MSE, min-norm test MSE)`` from the test rows' cross Gram, or ``(None, None)``."""
    if Yt is None:
        return None, None
    # the test rows' projections Z_test V = C U D^-1: the algebra's test error
    proj = np.einsum("im,mr->ir", acc.C, u) / d
    sums, sums0 = algebra.test_sums(state, lam, proj, Yt - y_mean)
    return sums / n_test, sums0 / n_test


def _squeezed(state, crit, lam, multi, fit_intercept, r, coef0, intercept, intercept0,
              test_mse, test0):
    """``(min-norm fit, per-penalty fields)``, one target squeezed, the arrays read-only."""
    def sq(a):
        return a if (multi or a is None) else a[..., 0]

    beta0_norm = algebra.path_coef_norm(state, [0.0])[0]
    min_norm = MinNormFit(
        coef=sq(coef0), intercept=sq(intercept0), train_mse=sq(crit.train_mse0),
        gcv=sq(crit.gcv0), loo_mse=sq(crit.loo_mse0), test_mse=sq(test0),
        df=float(fit_intercept + r), coef_norm=sq(beta0_norm), rank=r)
    out = dict(intercept=sq(intercept), train_mse=sq(crit.train_mse),
               gcv=sq(crit.gcv), loo_mse=sq(crit.loo_mse), test_mse=sq(test_mse))
    for v in (*out.values(), crit.df, lam, *vars(min_norm).values()):
        if isinstance(v, np.ndarray):
            v.flags.writeable = False
    return min_norm, out


def _response_2d(y_arr: np.ndarray) -> np.ndarray:
    return y_arr if y_arr.ndim == 2 else y_arr[:, None]


def _open_test(X_test, y_test, src, target, sep, t):
    """``(test source or array, Y_test)`` of a separate test set, or ``(None, None)``."""
    if X_test is None:
        if y_test is not None:
            raise InputError("pass X_test with y_test")
        return None, None
    p = src.n_features
    if isinstance(X_test, (str, bytes)) or hasattr(X_test, "__fspath__"):
        if is_text_path(X_test):
            if target is None:
                raise InputError("a CSV test file needs target= (the response column)")
            test = CSVColumns(X_test, target, features=src.feature_names, sep=sep)
            y_test = test.targets if y_test is None else y_test
        else:
            test = ParquetColumns(X_test, features=src.feature_names)
            if y_test is None and target is not None:
                yt_src = ParquetColumns(X_test, features=[target] if isinstance(target, str)
                                        else list(target))
                y_test = yt_src.read_columns(yt_src.feature_names)
    else:
        test = X_test if hasattr(X_test, "compute") else np.asarray(X_test, dtype=np.float64)
        if test.ndim != 2 or test.shape[1] != p:
            raise InputError(f"X_test must have shape (n_test, {p}); got {test.shape}")
    n_test = test.n_rows if isinstance(test, ColumnSource) else test.shape[0]
    if y_test is None:
        raise InputError("pass y_test with X_test")
    Yt = _response_2d(as_response(y_test, n_test, "y_test"))
    if Yt.shape[1] != t:
        raise InputError(f"y_test has {Yt.shape[1]} target(s) but y has {t}")
    return test, Yt


def _check_rank(rank, accurate, m, p, n):
    if rank is None:
        return None
    if int(rank) != rank or not 1 <= rank <= min(m, p):
        raise InputError(f"rank= must be an integer in [1, {min(m, p)}] (min(n - 1, p) for "
                         f"this {n} x {p} design); got {rank}")
    if accurate:
        raise InputError("pass either accurate=True or rank=, not both")
    return int(rank)


class _Accumulated:
    """What every first pass collects besides the factor: the column preprocessing,
    :math:`\\|Z\\|_F^2`, the intercept weights :math:`w = Z\\,(\\bar x/s)` and the test
    rows' cross Gram :math:`C = Z_{test} Z^T`."""

    def __init__(self, p, m, n_test):
        self.x_mean, self.x_scale = np.zeros(p), np.ones(p)
        self.active = np.zeros(p, dtype=bool)
        self.fro, self.w = 0.0, np.zeros(m)
        self.C = None if n_test is None else np.zeros((n_test, m))

    def add(self, b: ColumnBlock) -> None:
        s, e, act = b.start, b.stop, b.active
        self.x_mean[s:e], self.x_scale[s:e], self.active[s:e] = b.mean, b.scale, act
        self.fro += float(np.einsum("ij,ij->", b.z, b.z))
        self.w += b.z @ (b.mean[act] / b.scale[act])
        if b.z_test is not None:
            self.C += b.z_test @ b.z.T


class _Runner:
    """Runs a pass over the column blocks, reporting progress and recording it."""

    def __init__(self, sweep, passes, progress, nbytes):
        self.sweep, self.passes, self.progress, self.nbytes = sweep, passes, progress, nbytes

    def run(self, label, body):
        t0 = time.perf_counter()
        p = self.sweep.src.n_features
        for b in self.sweep:
            body(b)
            if self.progress:
                self.progress(label, b.stop, p)
        self.passes.append(PassInfo(label, p, time.perf_counter() - t0, self.nbytes))


def _gram_route(runner, acc, m, rtol):
    K = np.zeros((m, m))

    def body(b):
        acc.add(b)
        np.add(K, b.z @ b.z.T, out=K)

    runner.run("pass 1: n x n Gram over column blocks", body)
    q = int(acc.active.sum())
    u, d, d_all, tol = _gram_factor(K, q, rtol)
    reason = "n x n Gram accumulated over column blocks (eigh)"
    wv = np.square(d_all)
    predicted = 0.5 * max(m, q) * _EPS * wv[0] / wv[-1] if wv[-1] > 0 else np.inf
    if predicted > 1e-10 and d.size:
        reason += f"; predicted relative error {predicted:.1e}: accurate=True recommended"
    return u, d, d_all, tol, "wide-gram", reason


def _tsqr_route(runner, acc, m, rtol):
    stack: list = []

    def body(b):
        acc.add(b)
        Rb = sla.qr(b.z.T, mode="r", check_finite=False)[0][: min(b.z.shape[1], m)]
        level = 0
        while stack and stack[-1][0] == level:
            Rb = sla.qr(np.vstack([stack.pop()[1], Rb]), mode="r", check_finite=False)[0][:m]
            level += 1
        stack.append((level, Rb))

    runner.run("pass 1: QR of Z^T over column blocks", body)
    R = stack.pop()[1]
    while stack:
        R = sla.qr(np.vstack([stack.pop()[1], R]), mode="r", check_finite=False)[0][:m]
    if R.shape[0] < m:
        R = np.vstack([R, np.zeros((m - R.shape[0], m))])
    U, d_all, _ = sla.svd(R.T, full_matrices=False, check_finite=False)
    q = int(acc.active.sum())
    tol = (rtol if rtol is not None else max(m, q) * _EPS) * float(d_all[0])
    r = int(np.count_nonzero(d_all > tol))
    return (np.ascontiguousarray(U[:, :r]), d_all[:r], d_all, tol, "wide-tsqr",
            "QR of Z^T over column blocks, SVD of R (backward stable)")


def _randomized_route(runner, acc, m, p, rank, oversample, power_iters, seed, rtol):
    kk = min(rank + int(oversample), m)
    Ysk = np.zeros((m, kk))

    def sketch(b):
        acc.add(b)
        Ysk[:] += b.z @ np.random.default_rng([seed, b.start]).standard_normal((b.z.shape[1], kk))

    runner.run("pass 1: randomized range sketch over column blocks", sketch)
    Qm = sla.qr(Ysk, mode="economic", check_finite=False)[0]
    for it in range(int(power_iters)):
        prod = np.zeros((m, kk))

        def power(b, prod=prod, Qm=Qm):
            prod += b.z @ (b.z.T @ Qm)

        runner.run(f"power iteration {it + 1}/{power_iters} over column blocks", power)
        Qm = sla.qr(prod, mode="economic", check_finite=False)[0]
    B = np.zeros((kk, kk))

    def project(b):
        qz = Qm.T @ b.z
        B[:] += qz @ qz.T

    runner.run("final pass: projected Gram over column blocks", project)
    wv, W = sla.eigh(B, check_finite=False)
    wv, W = np.maximum(wv[::-1], 0.0)[:rank], W[:, ::-1][:, :rank]
    d_all = np.sqrt(wv)
    tol = (rtol if rtol is not None else max(m, p) * _EPS) * float(d_all[0])
    r = int(np.count_nonzero(d_all > tol))
    reason = (f"randomized truncated SVD, rank {rank} (oversample {oversample}, "
              f"{power_iters} power iterations, seed {seed})")
    return Qm @ W[:, :r], d_all[:r], d_all, tol, "wide-randomized", reason


def _coefficient_pass(runner, A, A0, p, t):
    """The k × p × t coefficients :math:`Z^T a(\\lambda)` on the original scale, one block
    at a time, and the minimum-norm ones."""
    m, k = A.shape[0], A.shape[1]
    coef, coef0 = np.zeros((k, p, t)), np.zeros((p, t))
    A2 = A.reshape(m, -1)

    def body(b):
        act = b.active
        idx = b.start + np.flatnonzero(act)
        cb = (b.z.T @ A2).reshape(-1, k, t) / b.scale[act][:, None, None]
        coef[:, idx, :] = cb.transpose(1, 0, 2)
        coef0[idx] = (b.z.T @ A0) / b.scale[act][:, None]

    runner.run("coefficient pass over column blocks", body)
    return coef, coef0


def fold_refits(data, y, labels, *, test_rows=None, fit_intercept: bool = True,
                standardize: bool = True, block_columns: int = DEFAULT_BLOCK_COLUMNS,
                rtol: float | None = None, progress=None, passes: list | None = None) -> tuple:
    """Per-fold refits of wide data with per-fold preprocessing, in one pass over the columns.

    For every partition ``labels`` (R, n) of the training rows (those not in
    ``test_rows``) and every fold f, the columns are centered and scaled on the
    other folds' rows alone (:func:`paths.core.design.prepare` on them), and
    the fold-f fit is the dual form of the wide path on those rows: the Gram
    matrix :math:`K_f = Z_{-f} Z_{-f}^T` and the cross Gram
    :math:`C_f = Z_f Z_{-f}^T` of the fold's own rows, accumulated block by
    block; its eigendecomposition gives the fold's factor state and the held-out
    rows' projections :math:`C_f U_f D_f^{-1}`.  Memory: R·K matrices of size
    about :math:`(n - b)^2 + b(n - b)`.

    ``progress(label, done, total)`` hears the pass over the column blocks, then the
    K-fold stage (:data:`paths.data.folds.KFOLD_STAGE`) once per fold refitted.

    Returns
    -------
    tuple of tuple of paths.core.algebra.HeldOutFold
        ``[r][f]``: the fit without fold f of partition r, and that fold's rows;
        :class:`paths.selection.cv.RefitFolds` turns them into K-fold errors.
    """
    from paths.data.validation import check_memory

    src, y = open_wide(data, y, block_columns=block_columns)
    Y = _response_2d(as_response(y, src.n_rows, "y"))
    if test_rows is not None:
        Y = Y[~np.asarray(test_rows, dtype=bool)]
    labels = np.atleast_2d(np.asarray(labels))
    n = Y.shape[0]
    if labels.shape[1] != n:
        raise InputError(f"labels cover {labels.shape[1]} rows but there are {n} training rows")
    K = int(labels.max()) + 1
    sizes = np.stack([np.bincount(lab, minlength=K) for lab in labels])
    mf = (n - sizes) - int(fit_intercept)
    check_memory(8.0 * float(np.sum(mf * (mf + sizes))),
                 f"per-fold scaling: {labels.shape[0] * K} Gram matrices of wide data",
                 "use cv_scaling global (exact from one factorization), or fewer folds")
    grams = [[np.zeros((mf[r, f], mf[r, f])) for f in range(K)] for r in range(len(labels))]
    cross = [[np.zeros((sizes[r, f], mf[r, f])) for f in range(K)] for r in range(len(labels))]
    q = np.zeros(sizes.shape, dtype=np.int64)
    sweep = _Sweep(src, fit_intercept, standardize, test_rows=test_rows)
    t0 = time.perf_counter()
    for s, block, _ in sweep.blocks():
        for r, lab in enumerate(labels):
            for f in range(K):
                held = lab == f
                design, z = prepare(block[~held], np.empty((n - sizes[r, f], 0)),
                                    fit_intercept=fit_intercept, standardize=standardize)
                np.add(grams[r][f], z @ z.T, out=grams[r][f])
                cross[r][f] += design.transform(block[held]) @ z.T
                q[r, f] += int(design.active.sum())
        if progress:
            progress("per-fold scaling: fold Gram matrices over column blocks",
                     s + block.shape[1], src.n_features)
    if passes is not None:
        passes.append(PassInfo("per-fold scaling: fold Gram matrices over column blocks",
                               src.n_features, time.perf_counter() - t0,
                               src.n_rows * src.n_features * 8))
    count = FoldCount(progress, labels.shape[0] * K)
    return tuple(tuple(count.tick(_fold_fit(grams[r][f], cross[r][f], Y, labels[r] == f,
                                            int(q[r, f]), f, fit_intercept, rtol))
                       for f in range(K))
                 for r in range(len(labels)))


def _fold_fit(gram, cross, Y, held, q, f, fit_intercept, rtol) -> algebra.HeldOutFold:
    """The factor state of one fold's Gram matrix and its held-out rows' projections."""
    if q == 0:
        raise InputError(f"fold {f} leaves only constant columns in its training rows; "
                         "use fewer folds or another fold scheme")
    u, d, _, _ = _gram_factor(gram, q, rtol)
    zy, y_mean = _householder(Y[~held], fit_intercept)
    state = algebra.FactorState(d=d, vt=np.empty((d.size, 0)), uty=u.T @ zy,
                                rss_out=np.zeros(Y.shape[1]), n_samples=int((~held).sum()),
                                fit_intercept=fit_intercept)
    return algebra.HeldOutFold(state=state, proj=(cross @ u) / d, yc=Y[held] - y_mean)
