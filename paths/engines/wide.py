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

from paths.data.validation import InputError, as_lambdas, as_response
from paths.data.chunks import DEFAULT_BLOCK_COLUMNS, ColumnSource, ParquetColumns, open_columns
from paths.core import algebra
from paths.core.design import Design, column_norms, reduce_rows
from paths.core.factor import Factorization
from paths.core.grid import default_grid
from paths.core.path import PENALTY_CONVENTION, MinNormFit, RidgePath
from paths.engines.stream import PassInfo, StreamPath

__all__ = ["WidePath", "wide_path"]

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


def _block_design(block, n, fit_intercept, standardize):
    """Column-local preprocessing of one block, as :func:`paths.design.prepare` does it."""
    absmax = np.max(np.abs(block), axis=0)
    if fit_intercept:
        mean = block.mean(axis=0)
        rn = np.sqrt(n)
        z = reduce_rows(block, mean)  # as paths.core.design.prepare
        sd = column_norms(z) / rn  # overflow-safe, as paths.core.design.prepare
        active = (sd > n * _EPS * absmax) & (block.max(axis=0) > block.min(axis=0))
    else:
        mean = np.zeros(block.shape[1])
        z = block.copy()
        sd = block.std(axis=0)
        active = np.ones(block.shape[1], dtype=bool)
    scale = np.ones(block.shape[1])
    if standardize:
        usable = sd > n * _EPS * absmax
        scale[usable] = sd[usable]
    z = z[:, active] / scale[active]
    return z, mean, scale, active


def _test_block(test, s, e, names):
    if test is None:
        return None
    if isinstance(test, ParquetColumns):
        return test.read_columns(names[s:e])
    blk = test[:, s:e]
    if hasattr(blk, "compute"):
        blk = blk.compute()
    return np.asarray(blk, dtype=np.float64)


class _Sweep:
    """One pass over the column blocks with the per-column preprocessing applied."""

    def __init__(self, src: ColumnSource, fit_intercept, standardize, test=None):
        self.src, self.fit_intercept, self.standardize, self.test = src, fit_intercept, standardize, test

    def __iter__(self):
        n = self.src.n_rows
        names = self.src.feature_names
        for s, block in self.src:
            if block.shape[0] != n:
                raise InputError(f"{self.src.source}: column block at {s} has {block.shape[0]} "
                                 f"rows, expected {n}; all columns must have the same length")
            e = s + block.shape[1]
            z, mean, scale, active = _block_design(block, n, self.fit_intercept, self.standardize)
            tb = _test_block(self.test, s, e, names)
            zt = None
            if tb is not None:
                zt = (tb[:, active] - mean[active]) / scale[active]
            yield s, e, z, mean, scale, active, zt


def _householder(Y, fit_intercept):
    """Reduced coordinates (m, t) of the centered response, and its mean."""
    if not fit_intercept:
        return Y.copy(), np.zeros(Y.shape[1])
    mean = Y.mean(axis=0)
    return reduce_rows(Y, mean), mean


def wide_path(
    data,
    y=None,
    lambdas=None,
    *,
    target: str | None = None,
    features=None,
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
    n_lambdas: int = 100,
    rtol: float | None = None,
    coefficients: bool = True,
    progress=None,
) -> WidePath:
    """The ridge path of wide data from an n × n Gram accumulated over column blocks.

    Parameters
    ----------
    data : path, ColumnSource, array or dask array, shape (n, p)
        Parquet file (columns read a block at a time), ``.npy`` file (memory
        mapped), an array, or a dask array chunked by columns.
    y : array_like, shape (n,) or (n, t), optional
        Response; or ``target`` names a column of a Parquet ``data``.
    lambdas : array_like, optional
        Penalties; default from the spectrum as in :func:`paths.path.fit_path`.
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
        non-numeric values, a constant response.

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
    if target is not None and y is None:
        if not isinstance(data, (str, bytes)) and not hasattr(data, "__fspath__"):
            raise InputError("target= names a column of a Parquet file; pass y= with arrays")
        probe = ParquetColumns(data, features=[target] if isinstance(target, str) else list(target))
        y = probe.read_columns(probe.feature_names)
        exclude = probe.feature_names
    else:
        exclude = ()
    src = open_columns(data, features=features, exclude=exclude, block_columns=block_columns)
    n, p = src.n_rows, src.n_features
    if y is None:
        raise InputError("pass the response: y= (array) or target= (a Parquet column)")
    y_arr = as_response(y, n, "y")
    multi = y_arr.ndim == 2 and y_arr.shape[1] > 1
    Y = y_arr if y_arr.ndim == 2 else y_arr[:, None]
    if fit_intercept and n < 2:
        raise InputError(f"X has {n} row; at least 2 samples are needed to fit an intercept")
    spread = (Y.max(axis=0) > Y.min(axis=0)) if fit_intercept else np.any(Y != 0, axis=0)
    if not spread.all():
        raise InputError("y is constant; there is nothing to fit — check the target column")
    m = n - 1 if fit_intercept else n
    if rank is not None:
        if int(rank) != rank or not 1 <= rank <= min(m, p):
            raise InputError(f"--rank must be an integer in [1, {min(m, p)}] (min(n - 1, p) for "
                             f"this {n} x {p} design); got {rank}")
        rank = int(rank)
        if accurate:
            raise InputError("pass either accurate=True (--accurate) or rank= (--rank), not both")
    if n_lambdas < 1:
        raise InputError(f"n_lambdas must be at least 1; got {n_lambdas}")
    lam_user = None if lambdas is None else as_lambdas(lambdas)
    test = Yt = None
    if X_test is not None:
        if isinstance(X_test, (str, bytes)) or hasattr(X_test, "__fspath__"):
            test = ParquetColumns(X_test, features=src.feature_names)
            if y_test is None and target is not None:
                yt_src = ParquetColumns(X_test, features=[target] if isinstance(target, str)
                                        else list(target))
                y_test = yt_src.read_columns(yt_src.feature_names)
        else:
            test = X_test if hasattr(X_test, "compute") else np.asarray(X_test, dtype=np.float64)
            if test.ndim != 2 or test.shape[1] != p:
                raise InputError(f"X_test must have shape (n_test, {p}); got {test.shape}")
        n_test = test.n_rows if isinstance(test, ParquetColumns) else test.shape[0]
        if y_test is None:
            raise InputError("pass y_test with X_test")
        Yt = as_response(y_test, n_test, "y_test")
        Yt = Yt if Yt.ndim == 2 else Yt[:, None]
        if Yt.shape[1] != Y.shape[1]:
            raise InputError(f"y_test has {Yt.shape[1]} target(s) but y has {Y.shape[1]}")
    zy, y_mean = _householder(Y, fit_intercept)
    t = Y.shape[1]

    passes, notes = [], []
    x_mean, x_scale, active = np.zeros(p), np.ones(p), np.zeros(p, dtype=bool)
    sweep = _Sweep(src, fit_intercept, standardize, test)

    def run_pass(label, body):
        t0 = time.perf_counter()
        for s, e, z, mean, scale, act, zt in sweep:
            body(s, e, z, mean, scale, act, zt)
            if progress:
                progress(label, e, p)
        passes.append(PassInfo(label, p, time.perf_counter() - t0, n * p * 8))

    total = {"fro": 0.0, "w": np.zeros(m), "C": None if test is None else
             np.zeros((test.n_rows if isinstance(test, ParquetColumns) else test.shape[0], m))}

    def common(s, e, z, mean, scale, act, zt):
        x_mean[s:e], x_scale[s:e], active[s:e] = mean, scale, act
        total["fro"] += float(np.einsum("ij,ij->", z, z))
        total["w"] += z @ (mean[act] / scale[act])
        if zt is not None:
            total["C"] += zt @ z.T

    if rank is None and not accurate:
        K = np.zeros((m, m))

        def body(s, e, z, mean, scale, act, zt):
            common(s, e, z, mean, scale, act, zt)
            np.add(K, z @ z.T, out=K)

        run_pass("pass 1: n x n Gram over column blocks", body)
        wv, U = sla.eigh(K, check_finite=False, overwrite_a=True)
        del K
        wv, U = np.maximum(wv[::-1], 0.0), U[:, ::-1]
        d_all = np.sqrt(wv)
        dmax = float(d_all[0]) if d_all.size else 0.0
        q = int(active.sum())
        tol = max(rtol if rtol is not None else max(m, q) * _EPS, np.sqrt(max(m, q) * _EPS)) * dmax
        r = int(np.count_nonzero(d_all > tol))
        u, d = np.ascontiguousarray(U[:, :r]), d_all[:r]
        solver, reason = "wide-gram", "n x n Gram accumulated over column blocks (eigh)"
        predicted = 0.5 * max(m, q) * _EPS * wv[0] / wv[-1] if wv[-1] > 0 else np.inf
        if predicted > 1e-10 and r:
            reason += f"; predicted relative error {predicted:.1e}: accurate=True recommended"
    elif accurate:
        stack: list = []

        def body(s, e, z, mean, scale, act, zt):
            common(s, e, z, mean, scale, act, zt)
            Rb = sla.qr(z.T, mode="r", check_finite=False)[0][: min(z.shape[1], m)]
            level = 0
            while stack and stack[-1][0] == level:
                Rb = sla.qr(np.vstack([stack.pop()[1], Rb]), mode="r", check_finite=False)[0][:m]
                level += 1
            stack.append((level, Rb))

        run_pass("pass 1: QR of Z^T over column blocks", body)
        R = stack.pop()[1]
        while stack:
            R = sla.qr(np.vstack([stack.pop()[1], R]), mode="r", check_finite=False)[0][:m]
        if R.shape[0] < m:
            R = np.vstack([R, np.zeros((m - R.shape[0], m))])
        U, d_all, _ = sla.svd(R.T, full_matrices=False, check_finite=False)
        dmax = float(d_all[0])
        q = int(active.sum())
        tol = (rtol if rtol is not None else max(m, q) * _EPS) * dmax
        r = int(np.count_nonzero(d_all > tol))
        u, d = np.ascontiguousarray(U[:, :r]), d_all[:r]
        solver, reason = "wide-tsqr", "QR of Z^T over column blocks, SVD of R (backward stable)"
    else:
        kk = rank + int(oversample)
        kk = min(kk, m)
        Ysk = np.zeros((m, kk))

        def omega(s, width):
            rng = np.random.default_rng([seed, s])
            return rng.standard_normal((width, kk))

        def sketch(s, e, z, mean, scale, act, zt):
            common(s, e, z, mean, scale, act, zt)
            Ysk[:] += z @ omega(s, z.shape[1])

        run_pass("pass 1: randomized range sketch over column blocks", sketch)
        Qm = sla.qr(Ysk, mode="economic", check_finite=False)[0]
        for it in range(int(power_iters)):
            acc = np.zeros((m, kk))

            def power(s, e, z, mean, scale, act, zt, acc=acc):
                acc += z @ (z.T @ Qm)

            t0 = time.perf_counter()
            for s, e, z, *_ in sweep:
                power(s, e, z, None, None, None, None)
                if progress:
                    progress(f"power iteration {it + 1}/{power_iters} over column blocks", e, p)
            passes.append(PassInfo(f"power iteration {it + 1} over column blocks", p, time.perf_counter() - t0,
                                   n * p * 8))
            Qm = sla.qr(acc, mode="economic", check_finite=False)[0]
        B = np.zeros((kk, kk))
        t0 = time.perf_counter()
        for s, e, z, *_ in sweep:
            qz = Qm.T @ z
            B += qz @ qz.T
            if progress:
                progress("final pass: projected Gram over column blocks", e, p)
        passes.append(PassInfo("final pass: projected Gram over column blocks", p, time.perf_counter() - t0, n * p * 8))
        wv, W = sla.eigh(B, check_finite=False)
        wv, W = np.maximum(wv[::-1], 0.0)[:rank], W[:, ::-1][:, :rank]
        d_all = np.sqrt(wv)
        dmax = float(d_all[0])
        tol = (rtol if rtol is not None else max(m, p) * _EPS) * dmax
        r = int(np.count_nonzero(d_all > tol))
        u, d = Qm @ W[:, :r], d_all[:r]
        solver = "wide-randomized"
        reason = (f"randomized truncated SVD, rank {rank} (oversample {oversample}, "
                  f"{power_iters} power iterations, seed {seed})")
    if not active.any():
        raise InputError(f"every one of the {p} columns of X is constant; nothing to fit")
    if r == 0:
        raise InputError("the centered design is numerically zero; nothing to fit")
    share = float(np.sum(np.square(d)) / total["fro"]) if total["fro"] > 0 else 1.0
    approximate = rank is not None
    if approximate:
        msg = (f"--rank {rank}: the fit is ridge on the top {r} principal components, capturing "
               f"{100 * share:.2f}% of ||X||_F^2; the minimum-norm fit and the quantities near the "
               "interpolation threshold need the full spectrum and are approximations")
        warnings.warn(msg, UserWarning, stacklevel=2)
        notes.append(msg)
    for a in (x_mean, x_scale, active, y_mean, zy):
        a.flags.writeable = False
    design = Design(zy=zy, x_mean=x_mean, x_scale=x_scale, y_mean=y_mean, active=active,
                    n_samples=n, fit_intercept=fit_intercept, standardize=standardize)
    for a in (u, d):
        a.flags.writeable = False
    fac = Factorization(u=u, d=d, vt=np.empty((r, 0)), rank=r, tol=float(tol), d_max=dmax,
                        d_min=float(d_all[-1]), solver=solver, reason=reason)
    state = algebra.factor_state(fac, design)
    c = state.uty
    lam = default_grid(d, n_lambdas) if lam_user is None else lam_user
    crit = algebra.criteria(state, lam)
    # standardized coefficients are Z^T a(lam) with a = U diag(g/d) c  (m, k, t)
    A = algebra.sample_weights(state, lam)
    A0 = algebra.sample_weights(state, [0.0])[:, 0]  # min-norm: gain 1/d, divided by d
    intercept = y_mean[None, :] - np.einsum("m,mkt->kt", total["w"], A)
    intercept0 = y_mean - total["w"] @ A0
    test_mse = test0 = None
    n_test = 0
    if test is not None:
        Cm = total["C"]
        n_test = Cm.shape[0]
        # the test rows' projections Z_test V = C U D^-1: the algebra's test error
        proj = np.einsum("im,mr->ir", Cm, u) / d
        sums, sums0 = algebra.test_sums(state, lam, proj, Yt - y_mean)
        test_mse, test0 = sums / n_test, sums0 / n_test
    coef = coef0 = None
    if coefficients:
        k = lam.size
        coef = np.zeros((k, p, t))
        coef0 = np.zeros((p, t))
        A2 = A.reshape(m, -1)
        t0 = time.perf_counter()
        for s, e, z, mean, scale, act, _ in _Sweep(src, fit_intercept, standardize):
            idx = s + np.flatnonzero(act)
            cb = (z.T @ A2).reshape(-1, k, t) / scale[act][:, None, None]
            coef[:, idx, :] = cb.transpose(1, 0, 2)
            coef0[idx] = (z.T @ A0) / scale[act][:, None]
            if progress:
                progress("coefficient pass over column blocks", e, p)
        passes.append(PassInfo("coefficient pass over column blocks", p, time.perf_counter() - t0, n * p * 8))

    def sq(a):
        return a if (multi or a is None) else a[..., 0]

    beta0_norm = algebra.path_coef_norm(state, [0.0])[0]
    min_norm = MinNormFit(
        coef=sq(coef0), intercept=sq(intercept0), train_mse=sq(crit.train_mse0),
        gcv=sq(crit.gcv0), loo_mse=sq(crit.loo_mse0), test_mse=sq(test0),
        df=float(fit_intercept + r), coef_norm=sq(beta0_norm), rank=r)
    out = dict(intercept=sq(intercept), train_mse=sq(crit.train_mse),
               gcv=sq(crit.gcv), loo_mse=sq(crit.loo_mse), test_mse=sq(test_mse))
    for v in (*out.values(), crit.df, lam, c, *vars(min_norm).values()):
        if isinstance(v, np.ndarray):
            v.flags.writeable = False
    if not approximate:
        notes.append("n x n Gram over column blocks; the p x n factor was never formed")
    return WidePath(
        lambdas=lam, df=crit.df, fitted=None, rank=r, rank_tol=fac.tol, singular_values=d,
        condition_number=fac.condition_number, min_norm=min_norm, solver=solver,
        solver_reason=reason, n_samples=n, n_features=p, n_test=n_test,
        fit_intercept=fit_intercept, standardize=standardize, feature_names=src.feature_names,
        design=design, factorization=fac, uty=c, penalty_convention=PENALTY_CONVENTION,
        state=state, engine="wide", passes=tuple(passes), notes=tuple(notes), captured_share=share,
        approximate=approximate, multi_target=multi, cache={"coef": sq(coef)}, **out)
