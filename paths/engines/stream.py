"""The ridge path of tall data (n ≫ p) read in row chunks, in bounded memory.

One pass over the rows accumulates, per chunk, the column means and the
centered cross-product matrix of the augmented block ``[X | Y]`` (or, with
``accurate=True``, the triangular factor of its QR decomposition), and merges
the chunks' statistics pairwise; the p × p factor then gives the whole path,
GCV and the test error without holding X.  Exact leave-one-out (and K-fold)
errors need the hat-matrix diagonals, which need every row again: a second pass
computes them chunk by chunk.  Peak memory is O(p² log(n / chunk) + chunk · p).

Merging two chunks ``a``, ``b`` (Chan, Golub & LeVeque 1979, 1983):

.. math::

    n = n_a + n_b,\\quad \\delta = \\bar w_b - \\bar w_a,\\quad
    \\bar w = \\bar w_a + \\delta\\, n_b / n,\\quad
    M = M_a + M_b + \\frac{n_a n_b}{n}\\, \\delta \\delta^T

for the centered cross products :math:`M`; for triangular factors
(``accurate=True``), the merged :math:`R` is the triangular factor of
:math:`[R_a;\\ R_b;\\ \\sqrt{n_a n_b / n}\\, \\delta^T]`, whose Gram matrix is the
:math:`M` above (the tall-skinny QR of Demmel, Grigori, Hoemmen & Langou 2012,
with the centering correction as one extra row).  Merging equal-sized groups
(a binary counter over chunks) keeps the rounding error growth logarithmic in
the number of chunks.
"""
from __future__ import annotations

import time
import warnings
from dataclasses import dataclass, field, replace

import numpy as np
import scipy.linalg as sla

from paths.data.folds import FoldCount, fold_labels
from paths.data.validation import (InputError, as_lambdas, check_feature_bounds,
                                   check_response_bounds)
from paths.data.chunks import (DEFAULT_CHUNK_ROWS, GroupValues, HoldoutRows, PreparedGroups,
                               RowSource, count_rows, open_prepared, open_rows)
from paths.core.design import Design
from paths.core.factor import Factorization
from paths.core.grid import default_grid
from paths.core import algebra
from paths.core.algebra import FactorState
from paths.core.path import PENALTY_CONVENTION, MinNormFit, RidgePath

__all__ = ["Moments", "chunk_moments", "merge_moments", "PairwiseMerger", "StreamPath",
           "stream_path", "PassInfo", "path_from_moments", "HatPass", "FoldPlan", "fold_plan",
           "FoldFactors", "FoldMoments", "fold_moments", "LooPasses",
           "check_cv_options", "check_scheme", "check_moment_ranges", "cv_note",
           "solver_route"]

_EPS = np.finfo(np.float64).eps


# --------------------------------------------------------------------------- moments
@dataclass(frozen=True)
class Moments:
    """Sufficient statistics of a block of rows of ``W = [X | Y]`` (c = p + t columns).

    Attributes
    ----------
    n : int
        Number of rows.
    mean : ndarray, shape (c,)
    m2 : ndarray, shape (c, c) or None
        Centered cross products :math:`(W - \\bar w)^T (W - \\bar w)` (Gram route).
    r : ndarray, shape (s, c) or None
        Upper-triangular :math:`R` with :math:`R^T R = (W - \\bar w)^T (W - \\bar w)`
        (``accurate`` route; s ≤ c).
    lo, hi, absmax : ndarray, shape (c,)
        Column minima, maxima and largest magnitudes (constant-column test).
    """

    n: int
    mean: np.ndarray
    m2: np.ndarray | None
    r: np.ndarray | None
    lo: np.ndarray
    hi: np.ndarray
    absmax: np.ndarray

    @property
    def accurate(self) -> bool:
        return self.r is not None

    def gram(self) -> np.ndarray:
        """The centered cross-product matrix (formed from ``r`` on the accurate route)."""
        return self.m2 if self.r is None else self.r.T @ self.r


def _qr_r(a: np.ndarray) -> np.ndarray:
    r = sla.qr(a, mode="r", check_finite=False, overwrite_a=True)[0]
    return r[: min(a.shape)]


def chunk_moments(block: np.ndarray, *, accurate: bool = False) -> Moments:
    """Moments of one chunk of rows (shape (b, c), finite float64).

    Examples
    --------
    >>> import numpy as np
    >>> m = chunk_moments(np.array([[1.0, 2.0], [3.0, 6.0]]))
    >>> m.n, m.mean.tolist(), m.m2.tolist()
    (2, [2.0, 4.0], [[2.0, 4.0], [4.0, 8.0]])
    """
    # values outside the float64 range of their squares give non-finite moments here;
    # the range checks on lo/hi (factor_moments) refuse them in one line before use
    with np.errstate(over="ignore", invalid="ignore", under="ignore"):
        mean = block.mean(axis=0)
        centered = block - mean
        if accurate:
            r, m2 = _qr_r(centered), None
        else:
            r, m2 = None, centered.T @ centered
    lo, hi = block.min(axis=0), block.max(axis=0)
    return Moments(n=block.shape[0], mean=mean, m2=m2, r=r, lo=lo, hi=hi,
                   absmax=np.maximum(np.abs(lo), np.abs(hi)))


def merge_moments(a: Moments, b: Moments) -> Moments:
    """Merge the moments of two disjoint row blocks (Chan, Golub & LeVeque update)."""
    n = a.n + b.n
    with np.errstate(over="ignore", invalid="ignore", under="ignore"):  # see chunk_moments
        delta = b.mean - a.mean
        mean = a.mean + delta * (b.n / n)
        w = a.n * b.n / n
        if a.r is not None:
            r = _qr_r(np.vstack([a.r, b.r, np.sqrt(w) * delta[None, :]]))
            m2 = None
        else:
            r = None
            m2 = a.m2 + b.m2 + w * np.outer(delta, delta)
    return Moments(n=n, mean=mean, m2=m2, r=r, lo=np.minimum(a.lo, b.lo),
                   hi=np.maximum(a.hi, b.hi), absmax=np.maximum(a.absmax, b.absmax))


class PairwiseMerger:
    """Merge a stream of chunk moments pairwise (a binary counter: at most log₂ chunks held)."""

    def __init__(self):
        self._stack: list[tuple[int, Moments]] = []

    @property
    def filled(self) -> bool:
        """True once a block was added."""
        return bool(self._stack)

    def add(self, m: Moments) -> None:
        level = 0
        while self._stack and self._stack[-1][0] == level:
            _, prev = self._stack.pop()
            m = merge_moments(prev, m)
            level += 1
        self._stack.append((level, m))

    def result(self) -> Moments:
        if not self._stack:
            raise InputError("the data have no rows; pass a file with data rows")
        out = self._stack[-1][1]
        for _, m in reversed(self._stack[:-1]):
            out = merge_moments(m, out)
        return out


# --------------------------------------------------------------------------- factors
@dataclass(frozen=True)
class _Fit:
    design: Design
    fac: Factorization
    uty: np.ndarray  # (r, t)
    rss_out: np.ndarray  # (t,)
    raw_gram: bool
    captured_share: float = 1.0
    rank_limit: int | None = None

    @property
    def state(self) -> FactorState:
        """The algebra's factor state (no left factor: rows come in a second pass)."""
        return FactorState(d=self.fac.d, vt=self.fac.vt, uty=self.uty, rss_out=self.rss_out,
                           n_samples=self.design.n_samples,
                           fit_intercept=self.design.fit_intercept)


def check_moment_ranges(mom: Moments, p: int, *, fit_intercept: bool, standardize: bool,
                        names=None, source: str = "") -> None:
    """The in-memory engine's range checks (:mod:`paths.data.validation`) on the pass-1
    bounds of ``[X | Y]``: subnormal columns, a response whose squared errors leave the
    float64 range or is constant up to rounding, features whose squares or coefficients
    leave it.  Every streamed engine (stream, dask) calls this before factoring."""
    names = None if names is None else list(names)
    if names is not None:
        check_magnitudes(mom, names, source)
    n = mom.n
    check_response_bounds(mom.lo[p:], mom.hi[p:], n, fit_intercept=fit_intercept)  # as fit_path
    with np.errstate(over="ignore"):
        y_size = float(np.max(mom.hi[p:] - mom.lo[p:] if fit_intercept else mom.absmax[p:]))
    check_feature_bounds(mom.lo[:p], mom.hi[:p], n, standardize=standardize, y_size=y_size,
                         rescalable=False, names=None if names is None else names[:p])


def _preprocess(mom: Moments, p: int, fit_intercept: bool, standardize: bool, names=None):
    """Means, scales and active columns, as :func:`paths.design.prepare` defines them."""
    n = mom.n
    t = mom.mean.size - p
    check_moment_ranges(mom, p, fit_intercept=fit_intercept, standardize=standardize,
                        names=names)
    if mom.r is not None:
        diag = np.einsum("ij,ij->j", mom.r, mom.r)
    else:
        diag = np.diag(mom.m2).copy()
    sd_all = np.sqrt(np.maximum(diag, 0.0) / n)
    sd = sd_all[:p]
    absmax = mom.absmax[:p]
    if fit_intercept:
        x_mean = mom.mean[:p].copy()
        y_mean = mom.mean[p:].copy()
        active = (sd > n * _EPS * absmax) & (mom.hi[:p] > mom.lo[:p])
        spread = mom.hi[p:] > mom.lo[p:]
    else:
        x_mean = np.zeros(p)
        y_mean = np.zeros(t)
        active = np.ones(p, dtype=bool)
        spread = mom.absmax[p:] > 0
    if not spread.all():
        j = int(np.flatnonzero(~spread)[0])
        raise InputError(f"target column {j} is constant (every value {mom.lo[p + j]!r}); "
                         "there is nothing to fit — check the target column")
    scale = np.ones(p)
    if standardize:
        usable = sd > n * _EPS * absmax
        scale[usable] = sd[usable]
    if not active.any():
        raise InputError(f"every one of the {p} columns of X is constant; nothing to fit — "
                         "check the feature selection")
    for a in (x_mean, y_mean, scale, active):
        a.flags.writeable = False
    design = Design(zy=np.empty((0, t)), x_mean=x_mean, x_scale=scale, y_mean=y_mean,
                    active=active, n_samples=n, fit_intercept=fit_intercept,
                    standardize=standardize)
    return design


def factor_moments(mom: Moments, p: int, *, fit_intercept: bool = True, standardize: bool = True,
                   rtol: float | None = None, rank: int | None = None, names=None,
                   requested: str | None = None) -> _Fit:
    """Singular values, right singular vectors, :math:`U^T y` and the out-of-span RSS.

    Gram route: the eigendecomposition of the scaled p × p centered Gram
    :math:`Z^T Z = V D^2 V^T`, :math:`U^T y = D^{-1} V^T Z^T y` and
    :math:`\\|y_\\perp\\|^2 = \\|y\\|^2 - \\|U^T y\\|^2`.  Accurate route: the QR
    factor of the augmented block, re-triangularized on the active scaled
    columns, :math:`[Z\\ y] = Q [R_{11}\\ R_{12};\\ 0\\ R_{22}]`; the SVD
    :math:`R_{11} = W D V^T` gives :math:`U^T y = W^T R_{12}` and
    :math:`\\|y_\\perp\\|^2 = \\|(I - W W^T) R_{12}\\|^2 + \\|R_{22}\\|^2`, with no
    difference of large squares and no squared condition number.
    """
    design = _preprocess(mom, p, fit_intercept, standardize, names)
    n = mom.n
    t = mom.mean.size - p
    act = design.active
    q = int(act.sum())
    m = n - 1 if fit_intercept else n
    s = design.x_scale[act]
    cols = np.concatenate([np.flatnonzero(act), p + np.arange(t)])
    colscale = np.concatenate([s, np.ones(t)])
    route = _tsqr_route if mom.r is not None else _gram_route
    d_all, d, vt, uty, rss_out, tol, dmax, solver, reason = route(
        mom, cols, colscale, q, m, fit_intercept, rtol)
    r = d.size
    if r == 0:
        raise InputError("the centered design is numerically zero; nothing to fit")
    if requested in ("svd", "gram"):
        reason = f"requested (solver {requested}): {reason}"
    share = 1.0
    if rank is not None:
        r, d, vt, uty, rss_out, share = _truncated(rank, d_all, d, vt, uty, rss_out, n, m, q)
        reason += f"; truncated to rank {r}"
    for a in (d, vt, uty):
        a.flags.writeable = False
    fac = Factorization(u=np.empty((0, r)), d=d, vt=vt, rank=r, tol=float(tol), d_max=dmax,
                        d_min=float(d_all[-1]), solver=solver, reason=reason)
    return _Fit(design=design, fac=fac, uty=uty, rss_out=rss_out, raw_gram=mom.r is None,
                captured_share=share, rank_limit=rank)


def _tsqr_route(mom: Moments, cols, colscale, q, m, fit_intercept, rtol):
    """The accurate route's factors from the moments' R factor (see :func:`factor_moments`)."""
    n = mom.n
    R = mom.r
    if not fit_intercept:  # raw cross products: append the mean row
        R = _qr_r(np.vstack([R, np.sqrt(n) * mom.mean[None, :]]))
    A = R[:, cols] / colscale
    if A.shape[0] < A.shape[1]:
        A = np.vstack([A, np.zeros((A.shape[1] - A.shape[0], A.shape[1]))])
    R2 = _qr_r(A)
    R11, R12, R22 = R2[:q, :q], R2[:q, q:], R2[q:, q:]
    w, d_all, vt_all = sla.svd(R11, full_matrices=False, check_finite=False)
    if rtol is None:
        rtol = max(m, q) * _EPS
    dmax = float(d_all[0])
    tol = rtol * dmax
    r = int(np.count_nonzero(d_all > tol))
    d, vt, w = d_all[:r], vt_all[:r], w[:, :r]
    uty = w.T @ R12
    rest = R12 - w @ uty
    rss_out = np.einsum("it,it->t", rest, rest) + np.einsum("it,it->t", R22, R22)
    reason = ("accurate: chunked TSQR of the centered design, SVD of the final R "
              "(backward stable, no squared condition number)")
    return d_all, d, vt, uty, rss_out, tol, dmax, "stream-tsqr", reason


def _gram_route(mom: Moments, cols, colscale, q, m, fit_intercept, rtol):
    """The Gram route's factors from the moments' cross products (see :func:`factor_moments`)."""
    n = mom.n
    t = cols.size - q
    G = mom.m2
    if not fit_intercept:
        G = G + n * np.outer(mom.mean, mom.mean)
    G = G[np.ix_(cols, cols)] / np.outer(colscale, colscale)
    Gx, Gxy, Gyy = G[:q, :q], G[:q, q:], np.diag(G[q:, q:])
    with np.errstate(over="ignore", invalid="ignore"):
        finite = np.all(np.isfinite(Gx))
    if not finite:
        raise InputError("the Gram matrix overflows for this design; pass accurate=True "
                         "or standardize the columns")
    wv, V = sla.eigh(Gx, check_finite=False)
    wv, V = np.maximum(wv[::-1], 0.0), V[:, ::-1]
    d_all = np.sqrt(wv)
    dmax = float(d_all[0])
    tol = max(rtol if rtol is not None else max(m, q) * _EPS,
              np.sqrt(max(m, q) * _EPS)) * dmax
    r = int(np.count_nonzero(d_all > tol))
    d, vt = d_all[:r], np.ascontiguousarray(V[:, :r].T)
    uty = (vt @ Gxy) / d[:, None] if r else np.zeros((0, t))
    rss_out = np.maximum(Gyy - np.einsum("it,it->t", uty, uty), 0.0)
    predicted = 0.5 * max(m, q) * _EPS * wv[0] / wv[-1] if wv[-1] > 0 else np.inf
    reason = (f"Gram route over row chunks: predicted relative error of the smallest "
              f"singular value {predicted:.1e}")
    if predicted > 1e-10:
        warnings.warn(
            f"the streamed Gram route squares the condition number (predicted relative "
            f"error {predicted:.1e} of the smallest singular value); pass accurate=True "
            "for the chunked TSQR route", UserWarning, stacklevel=4)
        reason += "; accurate=True recommended"
    return d_all, d, vt, uty, rss_out, tol, dmax, "stream-gram", reason


def _truncated(rank, d_all, d, vt, uty, rss_out, n, m, q):
    """``(r, d, vt, uty, rss_out, captured share)`` kept to the top ``rank`` components."""
    r = d.size
    if int(rank) != rank or not 1 <= rank <= min(m, q):
        raise InputError(f"rank must be an integer in [1, {min(m, q)}] (min(n - 1, p) for "
                         f"this {n} x {q} design); got {rank}")
    total = float(np.sum(np.square(d_all)))
    if rank < r:
        # the discarded components' part of y moves outside the retained span
        rss_out = rss_out + np.einsum("it,it->t", uty[rank:], uty[rank:])
        r, d, vt, uty = rank, d[:rank], vt[:rank], uty[:rank]
    share = float(np.sum(np.square(d)) / total) if total > 0 else 1.0
    msg = (f"rank={rank}: the fit is ridge on the top {r} principal components, capturing "
           f"{100 * share:.2f}% of ||X||_F^2; the minimum-norm fit and the quantities near "
           "the interpolation threshold need the full spectrum and are approximations")
    warnings.warn(msg, UserWarning, stacklevel=4)
    return r, d, vt, uty, rss_out, share


# --------------------------------------------------------------------------- second pass
class HatPass:
    """Accumulates leave-one-out (and K-fold) statistics chunk by chunk from the rows.

    For rows :math:`x_i` the sample-space singular vectors are
    :math:`u_i = V^T z_i / d`, with :math:`z_i` the centered scaled row.  Every
    closed form is :mod:`paths.core.algebra`'s; this class only produces the
    row-wise quantities:

    - leave-one-out (:func:`paths.core.algebra.loo_sums`): rows whose leverage
      outside the span :math:`1 - 1/n - \\|u_i\\|^2` is at least
      :data:`paths.core.algebra.LEVERAGE_REFINE` are summed at once; the few
      others are kept and recomputed at the end from the complement
      (:func:`paths.core.algebra.refine_leverage`, with the triangular factor of
      :math:`[1/\\sqrt n,\\ u_i,\\ y_i]` over the other rows, from a third pass
      :meth:`add_others` made only when such rows exist), so nothing is formed as
      :math:`1 -` (something close to 1);
    - K-fold (fold f held out, fixed preprocessing): the triangular factor of
      every fold's rows :math:`[1/\\sqrt n,\\ u_i,\\ y_i]`
      (:func:`paths.core.algebra.kfold_fold_mse`).

    Two passes over disjoint rows merge with :meth:`merge` (sums add,
    triangular factors merge by QR, kept rows concatenate).
    """

    def __init__(self, fit: _Fit, lam: np.ndarray, *, n_folds: int = 0, fold_seed=None,
                 folds: "FoldPlan | None" = None, cv_scaling: str = "global"):
        self.fit = fit
        self.lam = lam
        d = fit.fac.d
        self.state = fit.state
        full, self._added = algebra.append_zero(lam)
        self.shrink = algebra.shrinkage(d, full)
        self.k, self.t = lam.size, fit.uty.shape[1]
        r = d.size
        self.ra = r + int(fit.design.fit_intercept)
        self.proj = fit.fac.vt.T / d  # (q, r)
        self.sums = np.zeros((full.size, self.t))
        self.sums4 = np.zeros((full.size, self.t))  # fourth powers: the LOO standard error
        width = self.ra + self.t
        self.r_other = np.zeros((0, width))
        self.kept = np.zeros((0, width))  # high-leverage rows [ua, y], refined at the end
        if folds is None and n_folds:
            folds = FoldPlan(n_folds=int(n_folds), n_rows=fit.design.n_samples,
                             scheme="blocked" if fold_seed is None else "shuffled",
                             seed=0 if fold_seed is None else int(fold_seed))
        self.folds = folds
        self.n_folds = 0 if folds is None else folds.n_folds
        self.per_fold = cv_scaling == "per-fold"
        if self.n_folds:
            R = folds.repeats
            self.fold_r = [[np.zeros((0, width)) for _ in range(self.n_folds)] for _ in range(R)]
            self.count = np.zeros((R, self.n_folds), dtype=np.int64)
            # per-fold scaling: every fold's raw moments of [X | Y] (its training set's
            # moments are the merge of the other folds')
            self.fold_mom = [[PairwiseMerger() for _ in range(self.n_folds)] for _ in range(R)]
        self._stats = None  # the fold statistics, made once the rows are all in

    def rows_u(self, block: np.ndarray, p: int):
        des = self.fit.design
        a = des.active
        z = (block[:, :p][:, a] - des.x_mean[a]) / des.x_scale[a]
        yc = block[:, p:] - des.y_mean
        return z @ self.proj, yc

    def fold_of(self, start: int, rows: int) -> np.ndarray:
        """Fold labels (first repeat) of rows ``start .. start+rows-1``: the
        :class:`FoldPlan`'s, independent of the chunk size."""
        return self.folds.labels(start, rows)[0]

    def add(self, start: int, block: np.ndarray, p: int, groups=None) -> None:
        """Add the rows ``start ..`` of ``block`` (``groups``: their group codes, grouped folds)."""
        # sub-blocks keep the (rows x k) temporaries small whatever the chunk size
        step = max(256, (4 << 20) // (8 * max(self.k * self.t, self.fit.fac.rank, 1)))
        for off in range(0, block.shape[0], step):
            ub, yc = self.rows_u(block[off:off + step], p)
            g = None if groups is None else groups[off:off + step]
            self.add_rows(start + off, ub, yc, g)
            if self.n_folds and self.per_fold:
                self.add_fold_moments(start + off, block[off:off + step], g)

    def add_fold_moments(self, start: int, rows: np.ndarray, groups=None) -> None:
        """Per-fold scaling: add raw rows ``start ..`` to their folds' moments."""
        accurate = not self.fit.raw_gram
        for rep, lab in enumerate(self.folds.labels(start, rows.shape[0], groups)):
            for f in np.unique(lab):
                self.fold_mom[rep][f].add(chunk_moments(rows[lab == f], accurate=accurate))

    def add_rows(self, start: int, ub: np.ndarray, yc: np.ndarray, groups=None) -> None:
        fit = self.fit
        width = self.ra + self.t
        ell = algebra.naive_ell(self.state, ub)
        if self.state.full_row_rank:
            keep = np.ones(ub.shape[0], dtype=bool)
            ell[:] = 0.0
        else:
            keep = ell >= algebra.LEVERAGE_REFINE
        ua_y = np.hstack([algebra.augment_rows(self.state, ub), yc])
        if keep.any():
            rows = algebra.LeverageRows(u=ub[keep], ell=ell[keep],
                                        e_perp=(np.zeros((int(keep.sum()), self.t))
                                                if self.state.full_row_rank else
                                                yc[keep] - ub[keep] @ fit.uty))
            s2, s4 = algebra.loo_power_sums(rows, self.shrink, fit.uty)
            self.sums += s2
            self.sums4 += s4
        if not keep.all():
            self.kept = np.vstack([self.kept, ua_y[~keep]])
        if self.n_folds:
            labels = self.folds.labels(start, ub.shape[0], groups)  # (R, b)
            for rep, lab in enumerate(labels):
                for f in np.unique(lab):
                    sel = lab == f
                    if not self.per_fold:
                        self.fold_r[rep][f] = algebra.tsqr([self.fold_r[rep][f], ua_y[sel]],
                                                           width)
                    self.count[rep, f] += int(sel.sum())

    @property
    def needs_others(self) -> bool:
        """True when high-leverage rows were kept: :meth:`add_others` must see every row once."""
        return self.kept.shape[0] > 0

    def add_others(self, start: int, block: np.ndarray, p: int) -> None:
        """Third pass (only when rows were kept): the triangular factor of all other rows.

        The kept rows are recognised by the same test as in :meth:`add_rows`.
        """
        width = self.ra + self.t
        step = max(256, (4 << 20) // (8 * max(width, 1)))
        for off in range(0, block.shape[0], step):
            ub, yc = self.rows_u(block[off:off + step], p)
            keep = algebra.naive_ell(self.state, ub) >= algebra.LEVERAGE_REFINE
            if keep.any():
                ua_y = np.hstack([algebra.augment_rows(self.state, ub[keep]), yc[keep]])
                self.r_other = algebra.tsqr([self.r_other, ua_y], width)

    def merge(self, other: "HatPass") -> None:
        self._stats = None
        width = self.ra + self.t
        self.sums += other.sums
        self.sums4 += other.sums4
        self.r_other = algebra.tsqr([self.r_other, other.r_other], width)
        self.kept = np.vstack([self.kept, other.kept])
        if self.n_folds:
            for rep, row in enumerate(self.fold_r):
                for f in range(self.n_folds):
                    row[f] = algebra.tsqr([row[f], other.fold_r[rep][f]], width)
                    if other.fold_mom[rep][f].filled:
                        self.fold_mom[rep][f].add(other.fold_mom[rep][f].result())
            self.count += other.count

    def _loo_totals(self):
        """Sums of the squared leave-one-out residuals and of their squares, (k + 1, t)."""
        total, total4 = self.sums.copy(), self.sums4.copy()
        if self.kept.shape[0]:
            ra = self.ra
            ua_s, y_s = self.kept[:, :ra], self.kept[:, ra:]
            width = ra + self.t
            R = algebra.tsqr([self.r_other], width)
            ell, e_perp = algebra.refine_leverage(self.state, ua_s, y_s, R)
            rows = algebra.LeverageRows(u=ua_s[:, ra - self.fit.fac.rank:], ell=ell,
                                        e_perp=e_perp)
            s2, s4 = algebra.loo_power_sums(rows, self.shrink, self.fit.uty)
            total += s2
            total4 += s4
        return total, total4

    def loo(self):
        """Leave-one-out MSE on the grid (k, t) and at the min-norm limit (t,)."""
        total = self._loo_totals()[0] / self.fit.design.n_samples
        return (total[:-1] if self._added else total), total[-1]

    def loo_with_se(self):
        """Leave-one-out MSE and its standard error on the grid, both (k, t)
        (:func:`paths.core.algebra.loo_standard_error`)."""
        n = self.fit.design.n_samples
        s2, s4 = self._loo_totals()
        se = algebra.loo_standard_error(s2, s4, n)
        mse = s2 / n
        return (mse[:-1], se[:-1]) if self._added else (mse, se)

    def kfold(self, progress=None):
        """K-fold CV MSE (k, t) and its standard error across folds (k, t), averaged over
        the repeats (as :func:`paths.selection.cv.cross_validate` pools them).

        ``progress(stage, done, total)`` counts the folds times the repeats (the K-fold
        stage, :class:`paths.data.folds.FoldCount`).  The per-fold errors on the grid
        stay with :meth:`fold_factors` (their ``grid``): asked for again at the grid,
        they are not computed (nor counted) twice.
        """
        if not self.n_folds:
            return None, None
        if np.any(self.count == 0):
            raise InputError(f"{int(np.sum(self.count[0] == 0))} of the {self.n_folds} folds "
                             "are empty; use fewer folds")
        stats = self.fold_factors(progress)
        fold = stats.fold_mse(self.lam, progress=progress)
        fold.flags.writeable = False
        self._stats = replace(stats, grid=(self.lam, fold))
        w = self.count / self.count.sum(axis=1, keepdims=True)  # (R, K)
        pooled = np.einsum("rf,rfkt->rkt", w, fold)
        se = fold.std(axis=1, ddof=1) / np.sqrt(self.n_folds)
        return pooled.mean(axis=0), se.mean(axis=0)

    def fold_factors(self, progress=None) -> "FoldFactors | FoldMoments | None":
        """The per-fold triangular factors, for K-fold errors at any penalty (with
        per-fold scaling, the per-fold moments and their training sets' factors, whose
        refits ``progress(stage, done, total)`` counts); made once."""
        if not self.n_folds:
            return None
        if self._stats is None:
            self._stats = self._make_fold_stats(progress)
        return self._stats

    def _make_fold_stats(self, progress):
        if self.per_fold:
            if np.any(self.count == 0):
                raise InputError(f"{int(np.sum(self.count[0] == 0))} of the {self.n_folds} "
                                 "folds are empty; use fewer folds")
            des = self.fit.design
            return fold_moments([[m.result() for m in row] for row in self.fold_mom],
                                des.n_features, fit_intercept=des.fit_intercept,
                                standardize=des.standardize, progress=progress)
        width = self.ra + self.t
        fold_r = np.stack([np.stack([algebra.tsqr([R], width) for R in row])
                           for row in self.fold_r])
        return FoldFactors(d=self.fit.fac.d, fold_r=fold_r, count=self.count.copy(),
                           n_fixed=self.state.n_fixed)


@dataclass(frozen=True)
class FoldFactors:
    """Per-fold triangular factors of a streamed pass: K-fold errors at any penalty
    without the rows (:func:`paths.core.algebra.kfold_fold_mse`).

    ``fold_r`` (R, K, r' + t, r' + t), ``count`` (R, K): the factor of every
    fold's rows :math:`[1/\\sqrt n,\\ u_i,\\ y_i]` and the fold sizes; ``grid``:
    ``(lambdas, errors)`` already computed by the pass (:meth:`HatPass.kfold`).
    """

    d: np.ndarray
    fold_r: np.ndarray
    count: np.ndarray
    n_fixed: int
    grid: tuple | None = field(default=None, repr=False, compare=False)

    form = "primal"

    def fold_mse(self, lam, progress=None) -> np.ndarray:
        """Held-out mean squared error (R, K, k, t) at penalties ``lam``;
        ``progress(stage, done, total)`` counts the folds (none at the ``grid``)."""
        lam = np.asarray(lam, dtype=float).reshape(-1)
        if self.grid is not None and np.array_equal(lam, self.grid[0]):
            return self.grid[1]
        count = FoldCount(progress, self.count.size)
        return np.stack([np.stack([count.tick(mse) for mse in algebra.kfold_fold_errors(
            self.d, fr, c, lam, n_fixed=self.n_fixed)]) for fr, c in zip(self.fold_r, self.count)])


@dataclass(frozen=True)
class FoldMoments:
    """Per-fold scaling from per-fold moments: every fold's training set centered and
    scaled on its own rows, refitted from its p x p moments, and scored on the fold's
    rows from their moments (:func:`paths.core.algebra.block_sse`).

    ``fits`` (R, K): the factors of each training set (the merge of the other
    folds' moments, :func:`factor_moments`); ``held`` (R, K): each fold's own
    moments; ``count`` (R, K) the fold sizes; ``grid``: ``(lambdas, errors)`` already
    computed by the pass (:meth:`HatPass.kfold`).
    """

    fits: tuple
    held: tuple
    count: np.ndarray
    grid: tuple | None = field(default=None, repr=False, compare=False)

    form = "refit"
    scaling = "per-fold"
    reason = ("refit: per-fold scaling, each training set factored from the merged moments "
              "of the other folds (no rows held)")

    def fold_mse(self, lam, progress=None) -> np.ndarray:
        """Held-out mean squared error (R, K, k, t) at penalties ``lam`` (the folds were
        counted when refitted, :func:`fold_moments`)."""
        lam = np.asarray(lam, dtype=float).reshape(-1)
        if self.grid is not None and np.array_equal(lam, self.grid[0]):
            return self.grid[1]
        out = []
        for fits, held, count in zip(self.fits, self.held, self.count):
            rows = []
            for fit, mom, c in zip(fits, held, count):
                coef = algebra.coefficients(fit.state, lam, fit.design)
                des = fit.design
                dmean = mom.mean - np.concatenate([des.x_mean, des.y_mean])  # 0s: no intercept
                sse = algebra.block_sse(coef, mom.n, dmean, m2=mom.m2, r=mom.r)
                rows.append(sse / c)
            out.append(np.stack(rows))
        return np.stack(out)


def fold_moments(held, p: int, *, fit_intercept: bool = True,
                 standardize: bool = True, progress=None) -> FoldMoments:
    """:class:`FoldMoments` of the per-fold moments ``held`` (R lists of K
    :class:`Moments`): each training set's moments merged from the other folds'
    (prefix and suffix merges, O(K) per repeat) and factored;
    ``progress(stage, done, total)`` counts the folds as they are refitted."""
    count = FoldCount(progress, sum(len(row) for row in held))
    fits = []
    for row in held:
        K = len(row)
        prefix = [None]
        for f in range(K - 1):
            prefix.append(row[f] if prefix[-1] is None else merge_moments(prefix[-1], row[f]))
        suffix = [None] * K
        for f in range(K - 1, 0, -1):
            suffix[f - 1] = row[f] if suffix[f] is None else merge_moments(row[f], suffix[f])
        per = []
        for f in range(K):
            parts = [m for m in (prefix[f], suffix[f]) if m is not None]
            train = parts[0] if len(parts) == 1 else merge_moments(*parts)
            with warnings.catch_warnings():  # the full-data fit already warned
                warnings.simplefilter("ignore", UserWarning)
                per.append(count.tick(factor_moments(train, p, fit_intercept=fit_intercept,
                                                    standardize=standardize)))
        fits.append(tuple(per))
    count = np.array([[m.n for m in row] for row in held], dtype=np.int64)
    return FoldMoments(fits=tuple(fits), held=tuple(tuple(r) for r in held), count=count)


@dataclass(frozen=True)
class FoldPlan:
    """Which fold each row is in: :mod:`paths.data.folds`, as every engine assigns folds.

    ``n_rows`` rows (the training rows, in order) are split into ``n_folds``
    folds by ``scheme``, ``repeats`` times; for grouped folds ``group_fold``
    (R, G) gives each group's fold (groups coded in sorted label order).
    """

    n_folds: int
    n_rows: int
    scheme: str = "shuffled"
    seed: int = 0
    repeats: int = 1
    group_fold: np.ndarray | None = None

    def labels(self, start: int, rows: int, groups=None) -> np.ndarray:
        """Fold labels (R, rows) of rows ``start .. start + rows - 1``."""
        if self.scheme == "grouped":
            return self.group_fold[:, np.asarray(groups, dtype=np.intp)]
        idx = np.arange(start, start + rows)
        return np.stack([fold_labels(idx, self.n_rows, self.n_folds, scheme=self.scheme,
                                     seed=self.seed, repeat=i) for i in range(self.repeats)])


def solver_route(solver: str, accurate: bool) -> bool:
    """The streamed route for ``solver`` (as :func:`paths.core.factor.factorize` names
    them): ``"svd"`` → the accurate route (QR of the rows, then the SVD of R),
    ``"gram"`` → the Gram route, ``"auto"`` → ``accurate`` as given."""
    if solver not in ("auto", "svd", "gram"):
        raise InputError(f"solver must be one of auto, svd, gram; got {solver!r}")
    if solver == "gram" and accurate:
        raise InputError("accurate=True is the QR route and solver gram the Gram route; "
                         "drop one of them")
    return accurate if solver == "auto" else solver == "svd"


def check_scheme(fold_scheme: str, groups=None) -> str:
    """The fold scheme of a streamed engine: ``"grouped"`` with groups, else ``fold_scheme``."""
    if fold_scheme not in ("shuffled", "blocked", "grouped"):
        raise InputError(f"fold_scheme must be shuffled or blocked; got {fold_scheme!r}")
    if groups is not None:
        if fold_scheme == "blocked":
            raise InputError("groups makes grouped folds; drop fold_scheme blocked")
        return "grouped"
    if fold_scheme == "grouped":
        raise InputError("fold_scheme grouped needs groups; pass the group labels")
    return fold_scheme


def check_cv_options(n_folds, scheme, repeats, cv_scaling: str = "global") -> None:
    """One-line errors for K-fold options a streamed engine is given."""
    if cv_scaling not in ("global", "per-fold"):
        raise InputError(f"cv_scaling must be global or per-fold; got {cv_scaling!r}")
    if n_folds is None:
        if isinstance(repeats, bool) or repeats != 1:
            raise InputError("repeats needs K-fold CV; pass n_folds")
        return
    if isinstance(n_folds, bool) or int(n_folds) != n_folds or n_folds < 2:
        raise InputError(f"n_folds must be an integer >= 2; got {n_folds!r}")
    if isinstance(repeats, bool) or int(repeats) != repeats or repeats < 1:
        raise InputError(f"repeats must be an integer >= 1; got {repeats!r}")
    if scheme == "blocked" and repeats > 1:
        raise InputError("blocked folds are deterministic; use repeats=1 (or shuffled folds)")


def fold_plan(n: int, n_folds: int, *, scheme="shuffled", seed=0, repeats=1, group_counts=None,
              fit_intercept: bool = True) -> FoldPlan:
    """The :class:`FoldPlan` of ``n`` training rows (checked as
    :func:`paths.selection.cv.make_folds` checks folds)."""
    from paths.data.folds import group_folds

    K = int(n_folds)
    if group_counts is not None:
        if group_counts.size < K:
            raise InputError(f"{group_counts.size} groups cannot fill {K} folds; use at most "
                             f"{group_counts.size} folds")
        gf = np.stack([group_folds(group_counts, K, seed=seed, repeat=i) for i in range(repeats)])
        sizes = np.stack([np.bincount(g, weights=group_counts, minlength=K) for g in gf])
        plan = FoldPlan(n_folds=K, n_rows=n, scheme="grouped", seed=seed, repeats=int(repeats),
                        group_fold=gf)
    else:
        if n < K:
            raise InputError(f"fewer rows ({n}) than folds ({K}); choose 2 to {n} folds")
        q, r = divmod(n, K)
        sizes = np.array([[q + (f < r) for f in range(K)]])
        plan = FoldPlan(n_folds=K, n_rows=n, scheme=scheme, seed=seed, repeats=int(repeats))
    need = 2 if fit_intercept else 1
    if n - sizes.max() < need:
        raise InputError(f"a fold of {int(sizes.max())} of {n} rows leaves fewer than {need} "
                         "training rows; use more folds or more rows")
    return plan


def cv_note(plan: FoldPlan, cv_scaling: str = "global") -> str:
    """The data note of a streamed engine's K-fold CV."""
    how = {"shuffled": f"seeded shuffle, seed {plan.seed}", "blocked": "contiguous blocks of rows",
           "grouped": f"whole groups, seed {plan.seed}"}[plan.scheme]
    reps = f" x {plan.repeats} repeats" if plan.repeats > 1 else ""
    pre = ("each training set centered and scaled on its own rows (per-fold scaling, "
           "refitted from the per-fold moments)" if cv_scaling == "per-fold" else
           "preprocessing (centering, scaling) from all training rows")
    return (f"{plan.n_folds}-fold CV{reps} with {pre}; {how} (paths.data.folds, as every "
            "engine assigns folds)")


# --------------------------------------------------------------------------- result
@dataclass(frozen=True)
class PassInfo:
    """One pass over the data: what it computed, rows, seconds, throughput."""

    label: str
    rows: int
    seconds: float
    bytes: int

    @property
    def rows_per_second(self) -> float:
        return self.rows / self.seconds if self.seconds > 0 else float("inf")

    @property
    def mb_per_second(self) -> float:
        return self.bytes / 1e6 / self.seconds if self.seconds > 0 else float("inf")

    def as_dict(self) -> dict:
        return {"label": self.label, "rows": self.rows, "seconds": self.seconds,
                "rows_per_second": self.rows_per_second, "mb_per_second": self.mb_per_second}


@dataclass(frozen=True)
class StreamPath(RidgePath):
    """A :class:`~paths.path.RidgePath` computed without holding the design.

    Same fields and methods as the in-memory result, plus:

    Attributes
    ----------
    engine : str
        ``"stream"``, ``"dask"`` or ``"wide"``.
    passes : tuple of PassInfo
        The passes over the data, with rows and throughput.
    cv_mse, cv_se : ndarray, shape (k,) or (k, t), or None
        K-fold CV error (fixed preprocessing) and its standard error across folds.
    n_folds : int
    notes : tuple of str
        What the engine did that a report should state.
    captured_share : float
        Share of :math:`\\|Z\\|_F^2` in the retained singular values (1 unless
        the factorization was truncated with ``rank``).
    approximate : bool
        True when truncated (``rank``): the fit is ridge on the top principal
        components and the min-norm quantities are approximations.
    preparation : dict or None
        With ``encode`` / ``drop_missing``: the source columns, the one-hot
        levels and the missing-value rule (as ``fit.npz`` records them).

    ``factorization.u`` is empty (0 × r): the left singular vectors are never
    formed, so :meth:`criteria_at` (which needs them for leave-one-out) is not
    available; ``fitted`` is always None.
    """

    engine: str = "stream"
    passes: tuple = ()
    cv_mse: np.ndarray | None = None
    cv_se: np.ndarray | None = None
    n_folds: int = 0
    notes: tuple = ()
    captured_share: float = 1.0
    approximate: bool = False
    fold_stats: "FoldFactors | None" = None
    fold_plan: "FoldPlan | None" = None
    loo_at: object = field(default=None, repr=False, compare=False)
    preparation: dict | None = None

    def criteria_at(self, lam):
        """df, training MSE, GCV and leave-one-out MSE at any penalties.

        df, training error and GCV are closed forms of the factors; leave-one-out
        needs every row's hat diagonal, so each call with new penalties makes one
        more pass over the rows (``loo_at.passes`` counts them).
        """
        lam = as_lambdas(lam)
        base = algebra.criteria(self.state, lam, loo=False)
        loo = loo0 = None
        if self.loo_at is not None:
            loo = self.loo_at(lam)
            loo0 = self.min_norm.loo_mse
        elif self.loo_mse is not None:
            raise InputError("leave-one-out at new penalties needs another pass over the rows, "
                             "which this result cannot make; pass the penalties as lambdas=")
        crit = algebra.Criteria(df=base.df, train_mse=base.train_mse, gcv=base.gcv,
                                loo_mse=loo, train_mse0=base.train_mse0, gcv0=base.gcv0,
                                loo_mse0=loo0)
        if self.multi_target:
            return crit
        return algebra.Criteria(**{k: (v if k == "df" or v is None or np.ndim(v) == 0
                                       else v[..., 0]) for k, v in vars(crit).items()})

    def engine_record(self) -> dict:
        """The engine's part of the summary record (passes, throughput, notes)."""
        return {"engine": self.engine, "passes": [p.as_dict() for p in self.passes],
                "n_folds": self.n_folds, "notes": list(self.notes),
                "captured_share": self.captured_share, "approximate": self.approximate}


def _test_pass(fit: _Fit, lam, source: RowSource, p: int, progress):
    des, fac = fit.design, fit.fac
    state = fit.state
    k, t = lam.size, fit.uty.shape[1]
    sq = np.zeros((k, t))
    sq0 = np.zeros(t)
    n_test = 0
    for start, block in source:
        if block.shape[1] != p + t:
            raise InputError(f"{source.source}: test data have {block.shape[1] - t} feature "
                             f"columns but the training data {p}; pass the same features")
        proj = des.transform(block[:, :p]) @ fac.vt.T
        yc = block[:, p:] - des.y_mean
        b = block.shape[0]
        s_k, s_0 = algebra.test_sums(state, lam, proj, yc)
        sq += s_k
        sq0 += s_0
        n_test += b
        if progress:
            progress("test rows: test error", start + b, source.n_rows)
    if n_test == 0:
        raise InputError(f"{source.source}: the test data have no rows; pass test rows")
    return sq / n_test, sq0 / n_test, n_test


def path_from_moments(fit: _Fit, lam, *, feature_names, loo, loo0, test=None, cv=None,
                      n_folds=0, engine="stream", passes=(), notes=(), fold_stats=None,
                      fold_plan=None, loo_at=None, preparation=None) -> StreamPath:
    """Assemble the path result from the factors and the pass results."""
    fac, des = fit.fac, fit.design
    p = des.n_features
    multi = fit.uty.shape[1] > 1
    state = fit.state
    crit = algebra.criteria(state, lam, loo=False)
    df, train, gcv, train0, gcv0 = crit.df, crit.train_mse, crit.gcv, crit.train_mse0, crit.gcv0
    c = fit.uty
    intercept = algebra.path_intercepts(state, lam, des)  # coefficients only on demand
    coef0, beta0 = algebra.min_norm_coefficients(state, des)
    intercept0 = algebra.intercepts(coef0, des)
    test_mse, test0, n_test = test if test is not None else (None, None, 0)
    cv_mse, cv_se = cv if cv is not None else (None, None)

    def sq(a):
        return a if (multi or a is None) else a[..., 0]

    min_norm = MinNormFit(
        coef=sq(coef0), intercept=sq(intercept0), train_mse=sq(train0), gcv=sq(gcv0),
        loo_mse=sq(loo0), test_mse=sq(test0), df=float(des.fit_intercept + fac.rank),
        coef_norm=sq(algebra.coef_norm(beta0)), rank=fac.rank)
    out = dict(intercept=sq(intercept), train_mse=sq(train), gcv=sq(gcv),
               loo_mse=sq(loo), test_mse=sq(test_mse), cv_mse=sq(cv_mse), cv_se=sq(cv_se))
    for v in (*out.values(), df, lam, *vars(min_norm).values()):
        if isinstance(v, np.ndarray):
            v.flags.writeable = False
    return StreamPath(
        lambdas=lam, df=df, fitted=None, rank=fac.rank, rank_tol=fac.tol,
        singular_values=fac.d, condition_number=fac.condition_number, min_norm=min_norm,
        solver=fac.solver, solver_reason=fac.reason, n_samples=des.n_samples, n_features=p,
        n_test=n_test, fit_intercept=des.fit_intercept, standardize=des.standardize,
        feature_names=list(feature_names), design=des, factorization=fac, uty=c,
        penalty_convention=PENALTY_CONVENTION, state=state, engine=engine, passes=tuple(passes),
        n_folds=int(n_folds), notes=tuple(notes), captured_share=fit.captured_share,
        approximate=fit.rank_limit is not None, fold_stats=fold_stats, fold_plan=fold_plan,
        loo_at=loo_at, preparation=preparation, multi_target=multi, **out)


class LooPasses:
    """Leave-one-out MSE (k, t) and its standard error at new penalties: one pass over
    the rows for each call with penalties not seen before (all of them at once).

    ``pass_fn(lam) -> (mse, se)``, both (k, t); results are cached by penalty,
    and ``passes`` counts the passes made.
    """

    def __init__(self, pass_fn, lam=None, mse=None, se=None):
        self._fn, self._cache, self.passes = pass_fn, {}, 0
        if lam is not None:  # the values the second pass already gave on the grid
            for i, v in enumerate(np.asarray(lam, dtype=float).tolist()):
                self._cache[v] = (mse[i], se[i])

    def _fill(self, lam) -> list:
        lam = np.asarray(lam, dtype=float).reshape(-1).tolist()
        todo = [v for v in dict.fromkeys(lam) if v not in self._cache]
        if todo:
            mse, se = self._fn(np.array(todo))
            self.passes += 1
            for i, v in enumerate(todo):
                self._cache[v] = (mse[i], se[i])
        return lam

    def __call__(self, lam):
        return np.stack([self._cache[v][0] for v in self._fill(lam)])

    def se(self, lam):
        """Standard error (k, t) of the leave-one-out MSE at ``lam``."""
        return np.stack([self._cache[v][1] for v in self._fill(lam)])


# --------------------------------------------------------------------------- entry point
_TINY_ROOT = float(np.sqrt(np.finfo(np.float64).tiny))  # |x| below: x*x is subnormal or 0


def check_magnitudes(mom: Moments, names, source: str = "") -> None:
    """Refuse a column whose values are all so small that their squares underflow.

    Its spread, computed from squares, would be zero or inaccurate, and the
    column would be dropped as constant without a word; the user rescales it.
    """
    small = (mom.absmax > 0) & (mom.absmax < _TINY_ROOT)
    if small.any():
        j = int(np.flatnonzero(small)[0])
        where = f"{source}: " if source else ""
        raise InputError(f"{where}column {names[j]!r} has values no larger than "
                         f"{mom.absmax[j]:.3g} in magnitude: their squares fall below the "
                         "float64 normal range (subnormal), so its spread cannot be computed; "
                         "rescale the column (e.g. multiply it by 1e200) or leave it out")


def stream_path(
    data,
    lambdas=None,
    *,
    target=None,
    y=None,
    features=None,
    sep: str | None = None,
    chunk_rows: int = DEFAULT_CHUNK_ROWS,
    accurate: bool = False,
    solver: str = "auto",
    fit_intercept: bool = True,
    standardize: bool = True,
    test=None,
    y_test=None,
    n_lambdas: int = 100,
    rtol: float | None = None,
    loo: bool = True,
    n_folds: int | None = None,
    fold_scheme: str = "shuffled",
    cv_scaling: str = "global",
    repeats: int = 1,
    groups=None,
    holdout: float | None = None,
    seed: int = 0,
    rank: int | None = None,
    encode: str | None = None,
    drop_missing: str | None = None,
    progress=None,
) -> StreamPath:
    """The ridge path of tall data read in row chunks, without holding the design.

    Parameters
    ----------
    data : path, RowSource or array_like
        A Parquet file or folder of part files, a CSV/TSV file, a ``.npy`` file,
        a :class:`~paths.chunks.RowSource`, or an array (with ``y``).
    lambdas : array_like, optional
        Penalties (>= 0); default: ``n_lambdas`` from the spectrum as in
        :func:`paths.path.fit_path`.
    target : str or list of str
        Target column(s) of a file.
    y : array_like, optional
        Response, with an array ``data``.
    features : list of str, optional
        Feature columns of a file (default: all but the targets).
    sep : str, optional
        CSV delimiter (default ``","``, tab for ``.tsv``).
    chunk_rows : int
        Rows per chunk (memory ~ 3 × chunk_rows × (p + t) × 8 bytes).
    accurate : bool
        Chunked TSQR instead of the Gram matrix: backward stable, about twice
        the arithmetic.
    solver : {"auto", "svd", "gram"}
        As in :func:`paths.core.path.fit_path`: ``"svd"`` takes the accurate
        route (TSQR of the rows, then the SVD of R), ``"gram"`` the Gram route,
        ``"auto"`` follows ``accurate``; the request is stated in ``solver_reason``.
    fit_intercept, standardize : bool
        As in :func:`paths.path.fit_path`.
    test : path, RowSource or array_like, optional
        Test rows (same columns), streamed in a separate pass; ``y_test`` with arrays.
    n_lambdas : int
    rtol : float, optional
        Relative rank tolerance; default ``max(m, q)·eps`` (raised to
        ``sqrt(max(m, q)·eps)`` on the Gram route, the smallest it resolves).
    loo : bool
        Make the second pass for exact leave-one-out (default True).  With
        ``False`` the result's ``loo_mse`` is None.
    n_folds : int, optional
        Also exact K-fold CV with ``n_folds`` folds in the second pass (fixed
        preprocessing), assigned by :mod:`paths.data.folds` as every engine does.
    fold_scheme : {"shuffled", "blocked"}
        The fold scheme: the seeded shuffle (``seed``) or contiguous blocks of
        rows; with ``groups``, whole groups (``"grouped"``).
    cv_scaling : {"global", "per-fold"}
        Centering and scaling of the K-fold training sets: from all training
        rows (held fixed), or each training set's own (every fold refitted from
        the merged moments of the other folds, as
        :func:`paths.selection.cv.cross_validate` with ``scaling="per-fold"``).
    repeats : int
        Repetitions of the shuffled (or grouped) K-fold split.
    groups : str or array_like, optional
        Group labels (a column name of the file, or one label per row): grouped folds.
    holdout : float, optional
        Hold out this fraction of the rows (seeded by ``seed``) as the test set.
    seed : int
        The one seed of the holdout split and the shuffled or grouped folds.
    rank : int, optional
        Keep only the top ``rank`` principal components (exact truncation of
        the p × p factorization; a warning states the captured share of
        :math:`\\|Z\\|_F^2` and that the min-norm quantities are then
        approximations).  At most min(n - 1, p).
    encode : {None, "onehot"}
        One-hot encode text feature columns as the in-memory reader does
        (:func:`paths.data.tables.select`): same columns, names and order; the
        levels come from a pre-pass over the file (:mod:`paths.data.rowprep`).
    drop_missing : {None, "rows", "columns"}
        Drop rows (or feature columns) with missing values, as in memory; a
        pre-pass counts the rows kept, and the holdout and the folds are
        assigned on the kept rows.  Both need a CSV or Parquet file.
    progress : callable, optional
        ``progress(label, rows_done, rows_total_or_None)`` after each chunk; with
        ``n_folds``, also the K-fold stage (:data:`paths.data.folds.KFOLD_STAGE`)
        once per fold (times the repeats) as its errors are computed.

    Returns
    -------
    StreamPath
        A :class:`~paths.path.RidgePath` (same fields) plus ``passes``,
        ``cv_mse``, ``cv_se``.

    Raises
    ------
    InputError
        Missing columns, non-numeric or missing values (with their row range),
        a Parquet part with a different schema, a constant target, fewer than
        two rows.

    Notes
    -----
    Pass 1 accumulates the moments (see the module notes) and factors the
    p × p result; df, training error and GCV are closed forms of the singular
    values and :math:`U^T y` (as in :func:`paths.path.fit_path`).  Pass 2
    recomputes :math:`u_i = V^T z_i / d` row by row for the hat diagonals.
    Memory: O(p² log(n/chunk) + chunk·(p + k·t)).

    References
    ----------
    Chan, T. F., Golub, G. H. and LeVeque, R. J. (1983). Algorithms for computing
    the sample variance: analysis and recommendations. *Amer. Statist.* 37, 242–247.

    Demmel, J., Grigori, L., Hoemmen, M. and Langou, J. (2012). Communication-
    optimal parallel and sequential QR and LU factorizations. *SIAM J. Sci.
    Comput.* 34, A206–A239.

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> X = rng.standard_normal((5000, 10)); y = X[:, 0] + rng.standard_normal(5000)
    >>> res = stream_path(X, y=y, chunk_rows=1000)
    >>> res.coef.shape, res.engine
    ((100, 10), 'stream')
    """
    accurate = solver_route(solver, accurate)
    prepared = bool(encode) or drop_missing is not None
    src, prep = _open_source(data, target, features, sep, chunk_rows, y, groups, progress,
                             encode, drop_missing, prepared)
    p = src.n_features
    group_src, scheme = _checked_options(src, groups, prepared, sep, n_lambdas, test, holdout,
                                         fold_scheme, n_folds, repeats, cv_scaling)
    cv = n_folds
    lam_user = None if lambdas is None else as_lambdas(lambdas)
    src, test_src, group_src = _split_test(src, group_src, test, y_test, holdout, seed, target,
                                           prep, sep, chunk_rows, progress)
    counts = None if group_src is None else group_src.counts(progress)
    if counts is not None and cv is None:
        cv = int(min(10, counts.size))
    passes = []
    label1 = "pass 1/2: moments (X'X, X'y, y'y)" if loo or cv else "pass 1/1: moments (X'X, X'y, y'y)"
    mom = _moment_pass(src, accurate, label1, passes, progress)
    if fit_intercept and mom.n < 2:
        raise InputError(f"the data have {mom.n} row; at least 2 samples are needed to fit an "
                         "intercept (or pass fit_intercept=False)")
    fit = factor_moments(mom, p, fit_intercept=fit_intercept, standardize=standardize, rtol=rtol,
                         rank=rank, names=src.columns, requested=solver)
    lam = default_grid(fit.fac.d, n_lambdas) if lam_user is None else lam_user
    loo_mse = loo0 = loo_se = cvres = hp = None
    notes = list(prep.notes) if prepared else []
    plan = None if not cv else fold_plan(
        mom.n, cv, scheme=scheme, seed=int(seed), repeats=repeats, group_counts=counts,
        fit_intercept=fit_intercept)
    if loo or cv:
        hp, loo_mse, loo0, loo_se, cvres = _second_pass(fit, lam, src, p, cv, plan, group_src,
                                                        passes, progress, cv_scaling, notes)
    else:
        notes.append("leave-one-out skipped (loo=False): no second pass")
    if rank is not None:
        notes.append(f"truncated to the top {fit.fac.rank} principal components (rank=), "
                     f"capturing {100 * fit.captured_share:.2f}% of ||X||_F^2; min-norm "
                     "quantities are approximations")
    test_res = None if test_src is None else _timed_test_pass(fit, lam, test_src, p, passes,
                                                              progress)
    def one_pass(lam_new):
        return _hat_pass(fit, lam_new, src, p, None, None, [], progress, "global",
                         "extra pass: leave-one-out at new penalties").loo_with_se()

    return path_from_moments(fit, lam, feature_names=src.feature_names, loo=loo_mse, loo0=loo0,
                             test=test_res, cv=cvres, n_folds=cv or 0, passes=passes,
                             notes=notes, fold_stats=None if hp is None else hp.fold_factors(),
                             fold_plan=plan, loo_at=LooPasses(one_pass, lam, loo_mse, loo_se)
                             if loo else None,
                             preparation=prep.record() if prepared else None)


def _open_source(data, target, features, sep, chunk_rows, y, groups, progress, encode,
                 drop_missing, prepared):
    """``(source, preparation or None)``: the rows to stream, a groups column left out."""
    prep = None
    if prepared:
        if groups is not None and not isinstance(groups, str):
            raise InputError("groups with encode or drop_missing: name the groups column of "
                             "the file (its labels are read with the prepared rows)")
        src = open_prepared(data, target, features=features, sep=sep, chunk_rows=chunk_rows,
                            encode=encode, drop_missing=drop_missing, progress=progress,
                            extra=() if groups is None else (groups,))
        prep = src.preparation
    else:
        src = open_rows(data, target, features=features, sep=sep, chunk_rows=chunk_rows, y=y)
    if isinstance(groups, str) and groups in src.feature_names:
        if features is not None:
            raise InputError(f"groups column {groups!r} is also a feature; leave it out of "
                             "the features")
        src = open_rows(data, target, features=[c for c in src.feature_names if c != groups],
                        sep=sep, chunk_rows=chunk_rows)
    return src, prep


def _checked_options(src, groups, prepared, sep, n_lambdas, test, holdout, fold_scheme,
                     n_folds, repeats, cv_scaling):
    """``(groups source or None, fold scheme)``, the options checked."""
    if n_lambdas < 1:
        raise InputError(f"n_lambdas must be at least 1; got {n_lambdas}")
    if test is not None and holdout is not None:
        raise InputError("pass either a test set or a holdout fraction, not both")
    group_src = None if groups is None else (
        PreparedGroups(groups, src) if prepared else GroupValues(groups, src, sep=sep))
    scheme = check_scheme(fold_scheme, groups)
    check_cv_options(n_folds, scheme, repeats, cv_scaling)
    return group_src, scheme


def _split_test(src, group_src, test, y_test, holdout, seed, target, prep, sep, chunk_rows,
                progress):
    """``(training rows, test rows or None, groups)``: a seeded holdout or a test source."""
    test_src = None
    if holdout is not None:
        n_all = count_rows(src, progress)
        full = src
        src = HoldoutRows(full, n_all, holdout, seed, test=False)
        test_src = HoldoutRows(full, n_all, holdout, seed, test=True)
        if group_src is not None:
            group_src = group_src.subset(src)
    elif test is not None and prep is not None:
        test_src = open_prepared(test, None, sep=sep, chunk_rows=chunk_rows,
                                 like=prep)
    elif test is not None:
        test_src = open_rows(test, target if target is not None else src.target_names,
                             features=src.feature_names if not isinstance(test, RowSource) and
                             not hasattr(test, "shape") else None,
                             sep=sep, chunk_rows=chunk_rows, y=y_test)
    return src, test_src, group_src


def _moment_pass(src, accurate, label, passes, progress) -> Moments:
    """The first pass: the merged moments of the row chunks (magnitudes checked)."""
    merger = PairwiseMerger()
    t0 = time.perf_counter()
    rows = 0
    for start, block in src:
        merger.add(chunk_moments(block, accurate=accurate))
        rows = start + block.shape[0]
        if progress:
            progress(label, rows, src.n_rows)
    mom = merger.result()
    check_magnitudes(mom, src.columns, src.source)  # before the row-count checks
    passes.append(PassInfo(label, mom.n, time.perf_counter() - t0, mom.n * src.nbytes_per_row))
    return mom


def _second_pass(fit, lam, src, p, cv, plan, group_src, passes, progress, cv_scaling, notes):
    """``(hat pass, loo MSE, min-norm loo MSE, loo SE, K-fold result or None)``."""
    hp = _hat_pass(fit, lam, src, p, plan, group_src, passes, progress, cv_scaling,
                   "pass 2/2: hat diagonals for exact leave-one-out"
                   + (f" and {cv}-fold CV" if cv else ""))
    return (hp, *hat_results(hp, plan, cv_scaling, notes, progress))


def hat_results(hp, plan, cv_scaling: str, notes: list, progress=None) -> tuple:
    """``(loo MSE, min-norm loo MSE, loo SE, K-fold result or None)`` of a finished hat
    pass (row-streamed or dask); a K-fold run adds its note to ``notes``."""
    loo_mse, loo0 = hp.loo()
    loo_se = hp.loo_with_se()[1]
    cvres = None
    if plan is not None:
        cvres = hp.kfold(progress)
        notes.append(cv_note(plan, cv_scaling))
    return loo_mse, loo0, loo_se, cvres


def _timed_test_pass(fit, lam, test_src, p, passes, progress):
    """The test rows' pass, recorded in ``passes``."""
    t0 = time.perf_counter()
    test_res = _test_pass(fit, lam, test_src, p, progress)
    passes.append(PassInfo("test rows: test error", test_res[2], time.perf_counter() - t0,
                           test_res[2] * test_src.nbytes_per_row))
    return test_res


def _hat_pass(fit, lam, src, p, plan, group_src, passes, progress, cv_scaling,
              label) -> HatPass:
    """The second pass (and the third, when rows of leverage near 1 were kept)."""
    n = fit.design.n_samples
    hp = HatPass(fit, lam, folds=plan, cv_scaling=cv_scaling)
    codes = None if plan is None or group_src is None else group_src.codes()
    t0 = time.perf_counter()
    rows2 = 0
    for start, block in src:
        hp.add(start, block, p, None if codes is None else codes.take(start, block.shape[0]))
        rows2 = start + block.shape[0]
        if progress:
            progress(label, rows2, n)
    if rows2 != n:
        raise InputError(f"{src.source}: the data changed between passes ({n} rows, then "
                         f"{rows2}); do not modify the input while it is read")
    passes.append(PassInfo(label, rows2, time.perf_counter() - t0, rows2 * src.nbytes_per_row))
    if hp.needs_others:
        label3 = "pass 3/3: complement of the rows of leverage near 1"
        t0 = time.perf_counter()
        for start, block in src:
            hp.add_others(start, block, p)
            if progress:
                progress(label3, start + block.shape[0], n)
        passes.append(PassInfo(label3, rows2, time.perf_counter() - t0,
                               rows2 * src.nbytes_per_row))
    return hp
