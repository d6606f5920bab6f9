"""Exact K-fold cross-validation for the whole ridge path, from one factorization.

For a linear smoother :math:`\\hat y = H y` fitted by penalized least squares,
the residuals of the rows in a fold :math:`f` when that fold is left out and the
model is refitted on the others are

.. math:: e_{(-f)} = (I - H_{ff})^{-1} e_f ,

with :math:`H = 11^T/n + U \\operatorname{diag}(f_\\lambda) U^T` the full-data
hat matrix (the unpenalized intercept's :math:`11^T/n` included) and
:math:`e = (I - H) y` the full-data residuals (Liland, Skogholt & Indahl,
*IEEE Access* 12, 2024; for single rows this is the leave-one-out identity).
It is exact for every penalty, as long as the preprocessing (centering and
scaling) is held fixed; the intercept is refitted per fold automatically.

Two algebraically equal forms are used, both cancellation free (the closed
forms live in :mod:`paths.core.algebra`):

*primal* (the centered design has rank :math:`r < n - 1`)
    The held-out residuals are those of the ridge refit on the other folds in
    the coordinates of the factors, :math:`\\min_{a,b} \\|y_O - a/\\sqrt n -
    U_O D b\\|^2 + \\lambda\\|b\\|^2`, solved from the triangular factor of the
    other folds' rows of :math:`[1/\\sqrt n,\\ U,\\ y]` (merged from per-fold
    factors) and one :math:`r \\times r` SVD per fold.  The complement of a fold
    is a sum of squares over the other folds, never :math:`I - U_f^T U_f`, so
    it stays accurate as leverages tend to 1 and at :math:`\\lambda = 0` is the
    limit of the per-fold refits.  Cost :math:`O(n r^2 + K r^3 + K k r^2 t)`.
*dual* (full row rank, :math:`p \\ge n - 1`)
    :math:`I - H = U \\operatorname{diag}(s) U^T` and :math:`e = U (s \\circ U^T y)`
    with :math:`s_j = \\lambda/(d_j^2 + \\lambda)`; the common factor cancels, leaving
    :math:`e_{(-f)} = [U_f \\hat S U_f^T]^{-1} U_f \\hat S U^T y` with the scaled
    complements :math:`\\hat s_j = (d_r^2 + \\lambda)/(d_j^2 + \\lambda)`, the dual
    form :math:`[(G^{-1})_{ff}]^{-1} (G^{-1} y)_f` with :math:`G = XX^T + \\lambda I`
    restricted to the complement of the ones vector (intercept unpenalized).
    It stays exact as :math:`\\lambda \\to 0`, where :math:`I - H_{ff}` itself
    becomes singular, and at :math:`\\lambda = 0` gives the limit of the
    per-fold minimum-norm refits.  For every fold, the :math:`b \\times b`
    blocks of all :math:`k` penalties come from ONE matrix product,
    :math:`(k \\times r) \\cdot (r \\times b^2)`, and a batched solve; the cost is
    about :math:`2 k r b^2 + \\tfrac23 k b^3` per fold.

Refitting instead costs one factorization per fold; ``method="auto"`` compares
the two from a measured cost model (:class:`CostModel`).

Scaling: ``scaling="global"`` (the default) learns the column scales on all rows
and holds them fixed — fast, exact for that estimator, slightly optimistic since
the held-out rows informed the scales.  ``scaling="per-fold"`` learns the means
and scales on each fold's training rows, as a fully honest pipeline would; it
cannot be read off the full-data factors and always refits.
"""
from __future__ import annotations

import time
from dataclasses import dataclass, field
from functools import cached_property

import numpy as np

from paths.data.validation import InputError, as_design, as_lambdas, as_response
from paths.core import algebra
from paths.core.design import prepare
from paths.core.factor import factorize
from paths.data.folds import SCHEMES, FoldCount, fold_labels, group_folds

__all__ = [
    "SCHEMES",
    "SCALINGS",
    "METHODS",
    "CostModel",
    "CVResult",
    "make_folds",
    "cross_validate",
    "loo_residuals",
    "heldout_residuals",
    "measure_cost_model",
    "cv_from_fold_stats",
    "fold_partitions",
    "StateFolds",
    "RefitFolds",
]

SCALINGS = ("global", "per-fold")
METHODS = ("auto", "exact", "refit")
_CHUNK_ELEMS = 1 << 22  # largest (k_chunk, b, b) block held at once (32 MiB of float64)


# --------------------------------------------------------------------------- folds
def make_folds(n_samples: int, n_folds: int = 10, *, scheme: str = "shuffled", seed: int = 0,
               groups=None, repeat: int = 0, fit_intercept: bool = True) -> np.ndarray:
    """Fold labels ``0 .. K-1`` for ``n_samples`` rows.

    Parameters
    ----------
    n_samples : int
    n_folds : int
        K, at least 2 and at most the number of rows (or of groups).
    scheme : {"shuffled", "blocked", "grouped"}
        ``"shuffled"``: a seeded random partition into K near-equal folds.
        ``"blocked"``: K contiguous blocks in row order (for ordered data: time,
        position).  ``"grouped"``: whole groups (subjects, sites, batches) held
        out together; groups are dealt, largest first in a seeded random order,
        to the currently smallest fold.
    seed : int
        Seed of the shuffle (shuffled and grouped).
    groups : array_like, shape (n_samples,), optional
        Group labels; required for (and implying) ``"grouped"``.
    repeat : int
        Index of the repetition: repetition ``i`` uses the permutation keyed by
        ``(seed, i)`` (:mod:`paths.data.folds`, the one assignment for every
        engine; repetition 0 is the plain seeded partition).
    fit_intercept : bool
        Each training set must keep at least 2 rows to fit an intercept.

    Returns
    -------
    ndarray of int, shape (n_samples,)

    Raises
    ------
    InputError
        K < 2, fewer rows (or groups) than folds, a single group, a group array
        of the wrong length, or a fold that leaves too few training rows.

    Examples
    --------
    >>> make_folds(6, 3, scheme="blocked").tolist()
    [0, 0, 1, 1, 2, 2]
    """
    if scheme not in SCHEMES:
        raise InputError(f"fold scheme must be one of {', '.join(SCHEMES)}; got {scheme!r}")
    if isinstance(n_folds, bool) or int(n_folds) != n_folds:
        raise InputError(f"the number of folds must be an integer >= 2; got {n_folds!r}")
    K = int(n_folds)
    if groups is not None and len(groups) and np.unique(np.asarray(groups)).size < 2:
        one = np.asarray(groups).ravel()[0]
        raise InputError(f"every row is in a single group ({str(one)!r}); grouped cross-validation "
                         "needs at least 2 groups: check the group labels (groups=)")
    if K < 2:
        raise InputError(f"the number of folds must be at least 2; got {K} (valid: 2 to {n_samples})")
    if groups is not None or scheme == "grouped":
        if groups is None:
            raise InputError("grouped folds need group labels; pass groups=")
        labels = _grouped(n_samples, K, groups, seed, repeat)
    else:
        if n_samples < K:
            raise InputError(
                f"fewer rows ({n_samples}) than folds ({K}); choose 2 to {n_samples} folds"
            )
        labels = fold_labels(np.arange(n_samples), n_samples, K, scheme=scheme, seed=seed,
                             repeat=repeat)
    sizes = np.bincount(labels, minlength=K)
    need = 2 if fit_intercept else 1
    if n_samples - sizes.max() < need and groups is not None:
        raise InputError(
            f"one fold of whole groups holds {sizes.max()} of {n_samples} rows, leaving fewer "
            f"than {need} training rows when it is held out; the groups are too unbalanced for "
            f"{K} folds: regroup, or leave out groups=")
    if n_samples - sizes.max() < need:
        raise InputError(
            f"a fold of {sizes.max()} of {n_samples} rows leaves fewer than {need} training rows; "
            "use more folds or more rows"
        )
    return labels


def fold_partitions(n_samples: int, n_folds: int, *, scheme: str = "shuffled", seed: int = 0,
                    repeats: int = 1, groups=None, fit_intercept: bool = True) -> np.ndarray:
    """The fold labels of every repetition, shape (R, n): :func:`make_folds` with
    ``repeat = 0 .. R - 1`` (the one assignment every engine uses).

    Raises
    ------
    InputError
        As :func:`make_folds`; also ``repeats`` < 1 and repeated blocked folds.

    Examples
    --------
    >>> fold_partitions(6, 3, scheme="blocked").tolist()
    [[0, 0, 1, 1, 2, 2]]
    """
    if isinstance(repeats, bool) or int(repeats) != repeats or repeats < 1:
        raise InputError(f"repeats must be an integer >= 1; got {repeats!r}")
    if groups is not None:
        scheme = "grouped"
    if scheme == "blocked" and repeats > 1:
        raise InputError("blocked folds are deterministic; use repeats=1 (or shuffled folds)")
    return np.stack([make_folds(n_samples, n_folds, scheme=scheme, seed=seed, groups=groups,
                                repeat=i, fit_intercept=fit_intercept)
                     for i in range(int(repeats))])


def _grouped(n, K, groups, seed, repeat):
    g = np.asarray(groups)
    if g.ndim != 1 or g.shape[0] != n:
        raise InputError(
            f"groups has shape {g.shape} but there are {n} rows; pass one group label per row"
        )
    try:
        _, inv, counts = np.unique(g, return_inverse=True, return_counts=True)
    except TypeError:
        _, inv, counts = np.unique(g.astype(str), return_inverse=True, return_counts=True)
    return group_folds(counts, K, seed=seed, repeat=repeat)[inv.ravel()]


# ---------------------------------------------------------------------- cost model
@dataclass(frozen=True)
class CostModel:
    """Seconds per floating-point operation of the two ways to cross-validate.

    ``exact_rate`` times the fold solves (one GEMM and a batched solve per
    fold), ``refit_rate`` the per-fold factorizations.  The defaults were
    measured with :func:`measure_cost_model` on the development machine
    (2 cores, OpenBLAS, numpy 2.4: 3.3e-11 and 9.3e-11 s per flop); re-measure on yours and pass the result as
    ``cost_model=`` when the choice matters.  Both routes give the same numbers
    (to rounding); only the time differs.
    """

    exact_rate: float = 3.3e-11
    refit_rate: float = 9.3e-11

    @staticmethod
    def exact_flops(sizes, r: int, k: int, t: int = 1, *, dual: bool = True) -> float:
        """Dual form: :math:`\\sum_f 2 k r b_f^2 + \\tfrac23 k b_f^3 + 2 k r b_f t + r b_f^2`;
        primal form: :math:`2 n r^2` for the fold factors, :math:`30 r^3` per fold for
        the merges and the SVD, :math:`4 k r^2 t` per fold for the residuals."""
        b = np.asarray(sizes, dtype=float)
        if not dual:
            ra = r + 1.0
            return float(2 * b.sum() * ra**2 + b.size * (30 * ra**3 + 4 * k * ra**2 * t))
        return float(np.sum(2 * k * r * b**2 + (2 / 3) * k * b**3 + 2 * k * r * b * t + r * b**2))

    @staticmethod
    def refit_flops(sizes, n: int, q: int, k: int, t: int = 1) -> float:
        """Per fold: a factorization of the (n − b) × q training design, modelled as
        :math:`4 \\min^2 \\max + 8 \\min^3`, plus predictions :math:`2 b \\min k t`."""
        b = np.asarray(sizes, dtype=float)
        m = n - b
        lo, hi = np.minimum(m, q), np.maximum(m, q)
        return float(np.sum(4 * lo**2 * hi + 8 * lo**3 + 2 * b * lo * k * t))

    def choose(self, sizes, *, n: int, r: int, q: int, k: int, t: int = 1,
               dual: bool | None = None):
        """``("exact" | "refit", reason)`` from the predicted times."""
        dual = r >= n - 1 if dual is None else dual
        te = self.exact_rate * self.exact_flops(sizes, r, k, t, dual=dual)
        tr = self.refit_rate * self.refit_flops(sizes, n, q, k, t)
        route = "exact" if te <= tr else "refit"
        return route, (f"{route}: predicted {te:.2g} s for the fold solves vs "
                       f"{tr:.2g} s for {len(sizes)} refits (cost model)")


def measure_cost_model(*, size: int = 240, repeats: int = 3, seed: int = 0) -> CostModel:
    """Time both kernels on a small synthetic problem and return the rates.

    The exact kernel is timed on ``k = 50`` penalties, folds of ``size // 4``
    rows and rank ``size``; the refit kernel is :func:`paths.factor.factorize`
    on a ``size × 2 size`` Gaussian matrix.  The best of ``repeats`` runs is used.
    """
    rng = np.random.default_rng(seed)
    r, b, k = size, max(size // 4, 2), 50
    u = rng.standard_normal((b, r))
    w = rng.random((k, r))
    best_e = np.inf
    for _ in range(repeats):
        t0 = time.perf_counter()
        P = (u[:, None, :] * u[None, :, :]).reshape(b * b, r).T
        A = (w @ P).reshape(k, b, b) + np.eye(b) * r
        np.linalg.solve(A, np.ones((k, b, 1)))
        best_e = min(best_e, time.perf_counter() - t0)
    z = rng.standard_normal((size, 2 * size))
    best_r = np.inf
    for _ in range(repeats):
        t0 = time.perf_counter()
        factorize(z.copy(), solver="auto")
        best_r = min(best_r, time.perf_counter() - t0)
    fe = CostModel.exact_flops([b], r, k)
    fr = 4 * size**2 * 2 * size + 8 * size**3
    return CostModel(exact_rate=best_e / fe, refit_rate=best_r / fr)


# ------------------------------------------------------------------------ results
@dataclass(frozen=True)
class CVResult:
    """K-fold cross-validation errors along a grid of penalties.

    Arrays are indexed by penalty first; a trailing target axis appears only
    for a two-dimensional response.

    Attributes
    ----------
    lambdas : ndarray, shape (k,)
    mse : ndarray, shape (k,) or (k, t)
        Cross-validated mean squared error: the squared held-out residuals of
        all rows, averaged (pooled over folds), then averaged over repetitions.
    se : ndarray, shape (k,) or (k, t)
        Its standard error, :math:`\\operatorname{sd}(\\text{fold MSEs})/\\sqrt K`
        (ESL §7.10; common practice), averaged over repetitions.
    se_repeats : ndarray or None
        With ``repeats > 1``: the spread of the repetition means,
        :math:`\\operatorname{sd}/\\sqrt R` — how much the partition alone moves
        the estimate (not an error bar for the test error).
    fold_mse : ndarray, shape (R, K, k) or (R, K, k, t)
    fold_sizes : ndarray, shape (R, K)
    labels : ndarray, shape (R, n)
        Fold label of every row, per repetition.
    n_folds, repeats, seed : int
    scheme, scaling : str
    method : str
        ``"exact"`` (from the full-data factors) or ``"refit"``.
    form : str
        ``"dual"``, ``"primal"`` (exact) or ``"refit"``.
    method_reason : str
    """

    lambdas: np.ndarray
    mse: np.ndarray
    se: np.ndarray
    se_repeats: np.ndarray | None
    fold_mse: np.ndarray
    fold_sizes: np.ndarray
    labels: np.ndarray
    n_folds: int
    repeats: int
    seed: int
    scheme: str
    scaling: str
    method: str
    form: str
    method_reason: str
    multi_target: bool = False
    _engine: object = field(default=None, repr=False, compare=False)
    fold_weights: np.ndarray | None = None

    def at(self, lam):
        """``(mse, se)`` at any penalties (arrays shaped like ``mse``), same folds, no refit.

        Uses the same route as the grid (the full-data factors, or the stored
        per-fold factors when the route was ``"refit"``).
        """
        lam = as_lambdas(lam)
        fold = self._engine.fold_mse(lam)  # (R, K, k, t)
        mse, se, _ = _summarize(fold, self.fold_sizes if self.fold_weights is None
                                else self.fold_weights)
        if not self.multi_target:
            mse, se = mse[..., 0], se[..., 0]
        return mse, se


def _summarize(fold, sizes):
    """Pooled MSE, fold SE, and repetition SE from per-fold MSEs (R, K, k, t)."""
    R, K = sizes.shape
    wts = sizes / sizes.sum(axis=1, keepdims=True)  # (R, K)
    pooled = np.einsum("rf,rfkt->rkt", wts, fold)  # (R, k, t)
    se = fold.std(axis=1, ddof=1) / np.sqrt(K)  # (R, k, t)
    se_rep = pooled.std(axis=0, ddof=1) / np.sqrt(R) if R > 1 else None
    return pooled.mean(axis=0), se.mean(axis=0), se_rep


# ------------------------------------------------------------------------ engines
class _ExactEngine:
    """Held-out residuals from the full-data factors (:mod:`paths.core.algebra`).

    Primal (rank below n − 1): the refit on the other folds from per-fold
    triangular factors (:func:`paths.core.algebra.kfold_fold_mse`); dual (full
    row rank): the b × b blocks of :func:`paths.core.algebra.kfold_dual_mse`.
    The per-fold factors of the primal form are made on first use (inside the
    K-fold stage of :meth:`fold_mse`).
    """

    def __init__(self, state, labels_list):
        self.state = state
        self.dual = state.full_row_rank
        self.folds = [[np.flatnonzero(lab == f) for f in range(int(lab.max()) + 1)]
                      for lab in labels_list]
        # with row weights, a fold's mean error is sum_i w_i e_i^2 / sum_i w_i
        w = None if state.span is None else np.square(state.span.sqrt_w)
        self.weights = [np.array([idx.size if w is None else w[idx].sum() for idx in folds])
                        for folds in self.folds]

    @cached_property
    def fold_r(self) -> list:
        """Primal form: the triangular factor of every fold's rows, per partition."""
        if self.dual:
            return []
        zy = algebra.reduced_response(self.state)
        return [np.stack([algebra.fold_factor(*algebra.sample_rows(self.state, idx, zy))
                          for idx in folds]) for folds in self.folds]

    @property
    def form(self):
        return "dual" if self.dual else "primal"

    def residuals(self, lam, only=None) -> np.ndarray:
        """Held-out residuals (n, k, t) of the first partition (rows of folds not in
        ``only`` get 0); with row weights, those of :math:`W^{1/2} y`."""
        folds = self.folds[0]
        only = range(len(folds)) if only is None else only
        if self.dual:
            out = np.zeros((self.state.n_samples, np.size(lam), self.state.n_targets))
            for f in only:
                out[folds[f]] = algebra.kfold_dual_residuals(self.state, folds[f], lam)
            return out
        return algebra.kfold_residuals(self.state, self.fold_r[0], folds, lam, only=only)

    def fold_mse(self, lam, progress=None):
        """Held-out MSE (R, K, k, t); ``progress(stage, done, total)`` counts the folds."""
        count = FoldCount(progress, sum(len(folds) for folds in self.folds))
        if self.dual:
            return np.stack([np.stack([count.tick(
                algebra.kfold_dual_mse(self.state, idx, lam, weight=wf, chunk_elems=_CHUNK_ELEMS))
                for idx, wf in zip(folds, wts)]) for folds, wts in zip(self.folds, self.weights)])
        return np.stack([np.stack([count.tick(mse) for mse in algebra.kfold_fold_errors(
            self.state.d, R, wts, lam, n_fixed=self.state.n_fixed)])
            for R, wts in zip(self.fold_r, self.weights)])


class _RefitEngine:
    """One factorization per fold; predictions for any penalty from the fold's factors.
    ``progress(stage, done, total)`` counts the folds as they are refitted."""

    def __init__(self, X, Y, labels_list, *, fit_intercept, standardize, scaling, solver, design,
                 progress=None):
        self.folds = []
        count = FoldCount(progress, sum(int(lab.max()) + 1 for lab in labels_list))
        if scaling == "global":
            act = design.active
            Xs = X[:, act] / design.x_scale[act]
            std_fold = False
        else:
            Xs, std_fold = X, standardize
        for lab in labels_list:
            per = []
            for f in range(int(lab.max()) + 1):
                test = lab == f
                dsg, z = prepare(Xs[~test], Y[~test], fit_intercept=fit_intercept,
                                 standardize=std_fold)
                if not dsg.active.any():
                    raise InputError(
                        f"fold {f} leaves only constant columns in its training rows; "
                        "use fewer folds or another fold scheme"
                    )
                fac = factorize(z, solver=solver, overwrite=True)
                state = algebra.FactorState(d=fac.d, vt=fac.vt, uty=fac.u.T @ dsg.zy,
                                            rss_out=np.zeros(Y.shape[1]), n_samples=z.shape[0],
                                            fit_intercept=fit_intercept)
                per.append(count.tick(algebra.HeldOutFold(
                    state=state, proj=dsg.transform(Xs[test]) @ fac.vt.T,
                    yc=Y[test] - dsg.y_mean)))
            self.folds.append(per)

    form = "refit"

    def fold_mse(self, lam, progress=None):
        """Held-out MSE (R, K, k, t); the folds were counted as they were refitted."""
        return _refit_fold_mse(self.folds, lam)


def _refit_fold_mse(folds, lam) -> np.ndarray:
    """(R, K, k, t) held-out errors of refit folds (:func:`paths.core.algebra.heldout_mse`)."""
    return np.stack([np.stack([algebra.heldout_mse(f, lam) for f in per]) for per in folds])


@dataclass(frozen=True)
class StateFolds:
    """K-fold statistics of a factor state that holds its left factor (the wide engine):
    the in-memory exact route (primal or dual form, :mod:`paths.core.algebra`) on the
    partitions ``labels`` (R, n), as :func:`cross_validate` computes them.

    ``count`` (R, K) are the fold sizes; :meth:`fold_mse` the held-out errors
    (R, K, k, t) at any penalties; ``form``, ``reason`` and ``scaling`` describe
    the route for :func:`cv_from_fold_stats`.
    """

    state: object
    labels: np.ndarray
    scaling = "global"

    def __post_init__(self):
        object.__setattr__(self, "_exact", _ExactEngine(self.state, list(self.labels)))

    @property
    def count(self) -> np.ndarray:
        return np.stack([np.asarray(w) for w in self._exact.weights])

    @property
    def form(self) -> str:
        return self._exact.form

    @property
    def reason(self) -> str:
        return (f"exact ({self.form} form) from the full-data factors held by the engine, "
                "preprocessing from all training rows")

    def fold_mse(self, lam, progress=None) -> np.ndarray:
        """Held-out MSE (R, K, k, t) at ``lam``; ``progress(stage, done, total)`` counts
        the folds (:class:`paths.data.folds.FoldCount`)."""
        try:
            return self._exact.fold_mse(as_lambdas(lam), progress)
        except np.linalg.LinAlgError:
            raise InputError("a fold's block I - H_ff is singular at some penalty (its rows "
                             "carry directions no other fold sees); use fewer, larger folds, "
                             "or per-fold scaling (it refits every fold)") from None


@dataclass(frozen=True)
class RefitFolds:
    """K-fold statistics of per-fold refits made by an engine: ``folds`` (R lists of K
    :class:`paths.core.algebra.HeldOutFold`), ``labels`` (R, n) — per-fold scaling."""

    folds: tuple
    labels: np.ndarray
    form = "refit"
    scaling = "per-fold"

    @property
    def count(self) -> np.ndarray:
        return np.stack([[f.yc.shape[0] for f in per] for per in self.folds])

    @property
    def reason(self) -> str:
        return ("refit: per-fold scaling (means and scales from each fold's training rows), "
                "one factorization per fold")

    def fold_mse(self, lam, progress=None) -> np.ndarray:
        """Held-out MSE (R, K, k, t) at ``lam`` (the folds were counted when refitted,
        :func:`paths.engines.wide.fold_refits`)."""
        return _refit_fold_mse(self.folds, as_lambdas(lam))


# --------------------------------------------------------------------- public API
def cross_validate(
    X,
    y,
    lambdas=None,
    *,
    n_folds: int = 10,
    scheme: str = "shuffled",
    seed: int = 0,
    repeats: int = 1,
    groups=None,
    scaling: str = "global",
    method: str = "auto",
    path=None,
    fit_intercept: bool = True,
    standardize: bool = True,
    solver: str = "auto",
    n_lambdas: int = 100,
    cost_model: CostModel | None = None,
    sample_weight=None,
    unpenalized=None,
    relative_penalty=None,
    progress=None,
) -> CVResult:
    """K-fold cross-validation errors for every penalty, without refitting per penalty.

    Parameters
    ----------
    X : array_like, shape (n, p)
    y : array_like, shape (n,) or (n, t)
    lambdas : array_like, optional
        Penalties; default the path's grid (``path.lambdas``, or the default
        grid of :func:`paths.path.fit_path`).
    n_folds : int
        K (2 to n, or to the number of groups).
    scheme : {"shuffled", "blocked", "grouped"}
        See :func:`make_folds`; ``groups`` implies ``"grouped"``.
    seed : int
    repeats : int
        Repetitions of the seeded partition (R); the mean and standard error
        are reported per penalty.  Blocked folds are deterministic: R must be 1.
    groups : array_like, shape (n,), optional
        Group labels; whole groups are held out together.
    scaling : {"global", "per-fold"}
        Learn the column scales on all rows and hold them fixed (fast, exact
        from the full-data factors, slightly optimistic), or on each fold's
        training rows (honest, refits every fold).
    method : {"auto", "exact", "refit"}
        ``"exact"``: from the full-data factors; ``"refit"``: one factorization
        per fold; ``"auto"``: the cheaper one by ``cost_model``.  Both give the
        same errors to rounding (with ``scaling="global"``).
    path : RidgePath, optional
        A path already fitted on these ``X, y``; its factors are reused (and its
        ``fit_intercept``/``standardize`` settings).
    fit_intercept, standardize, solver, n_lambdas
        As in :func:`paths.path.fit_path` (ignored when ``path`` is given).
    cost_model : CostModel, optional
    sample_weight, unpenalized, relative_penalty
        As in :func:`paths.path.fit_path` (taken from ``path`` when given).
        With row weights the error is :math:`\\sum_i w_i e_{(-f),i}^2 / \\sum_i w_i`
        from the weighted refits without each fold; weights and unpenalized
        columns need ``scaling="global"`` and are always exact (no refit route).
    progress : callable, optional
        ``progress(stage, done, total)``: the K-fold stage
        (:data:`paths.data.folds.KFOLD_STAGE`) counts the folds times the repeats as
        their errors (exact route) or refits (refit route) are done; a fall back from
        the exact route to refits counts again from 0.  The numbers do not depend on it.

    Returns
    -------
    CVResult

    Raises
    ------
    InputError
        Bad folds (see :func:`make_folds`), unknown options, repeats < 1,
        repeated blocked folds, or a ``path`` of another shape.

    Notes
    -----
    Held-out residuals :math:`e_{(-f)} = (I - H_{ff})^{-1} e_f` for every fold and
    penalty (see the module notes for the primal and dual forms).  The
    cross-validated error is :math:`\\frac1n \\sum_f \\|e_{(-f)}\\|^2`, its standard
    error :math:`\\operatorname{sd}_f(\\mathrm{MSE}_f)/\\sqrt K`.

    References
    ----------
    Liland, K. H., Skogholt, J. and Indahl, U. G. (2024). A new formula for
    faster computation of the K-fold cross-validation and good regularisation
    parameter values in ridge regression. *IEEE Access* 12, 17349–17368.

    Hastie, T., Tibshirani, R. and Friedman, J. (2009). *The Elements of
    Statistical Learning*, 2nd ed., §7.10.

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> X = rng.standard_normal((40, 100)); y = X[:, 0] + rng.standard_normal(40)
    >>> cv = cross_validate(X, y, [1.0, 10.0, 100.0], n_folds=5)
    >>> cv.mse.shape, cv.method, cv.form
    ((3,), 'exact', 'dual')
    """
    repeats = _checked_options(scaling, method, repeats)
    if groups is not None:
        scheme = "grouped"
    Xa = as_design(X, "X")
    n = Xa.shape[0]
    Ya = as_response(y, n, "y")
    multi = Ya.ndim == 2
    Y = Ya if multi else Ya[:, None]
    if path is None:
        from paths.core.path import fit_path

        path = fit_path(X, y, lambdas, fit_intercept=fit_intercept, standardize=standardize,
                        solver=solver, n_lambdas=n_lambdas, sample_weight=sample_weight,
                        unpenalized=unpenalized, relative_penalty=relative_penalty)
    else:
        _check_given_path(path, Xa.shape, sample_weight)
    span = path.design.span
    lam = path.lambdas if lambdas is None else as_lambdas(lambdas)
    labels = fold_partitions(n, n_folds, scheme=scheme, seed=seed, repeats=repeats,
                             groups=groups, fit_intercept=path.fit_intercept)
    K = int(labels.max()) + 1
    sizes = np.stack([np.bincount(lab, minlength=K) for lab in labels])
    fold_w = None
    if span is not None:
        w = np.square(span.sqrt_w)
        fold_w = np.stack([np.bincount(lab, weights=w, minlength=K) for lab in labels])
    route, reason = _route(path, span, scaling, method, cost_model, sizes[0], lam.size,
                           Y.shape[1])
    fold, engine, route, reason = _fold_errors(path, route, reason, Xa, Y, labels, lam,
                                               scaling, progress)
    mse, se, se_rep = _summarize(fold, sizes if fold_w is None else fold_w)
    if not multi:
        mse, se, fold = mse[..., 0], se[..., 0], fold[..., 0]
        se_rep = None if se_rep is None else se_rep[..., 0]
    for a in (mse, se, fold, sizes, labels, se_rep):
        if a is not None:
            a.flags.writeable = False
    return CVResult(lambdas=lam, mse=mse, se=se, se_repeats=se_rep, fold_mse=fold,
                    fold_sizes=sizes, labels=labels, n_folds=K, repeats=repeats, seed=seed,
                    scheme=scheme, scaling=scaling, method=route, form=engine.form,
                    method_reason=reason, multi_target=multi, _engine=engine,
                    fold_weights=fold_w)


def _checked_options(scaling, method, repeats) -> int:
    """Refuse unknown ``scaling`` and ``method`` values; ``repeats`` as an integer >= 1."""
    if scaling not in SCALINGS:
        raise InputError(f"scaling must be one of {', '.join(SCALINGS)}; got {scaling!r}")
    if method not in METHODS:
        raise InputError(f"method must be one of {', '.join(METHODS)}; got {method!r}")
    if isinstance(repeats, bool) or int(repeats) != repeats or repeats < 1:
        raise InputError(f"repeats must be an integer >= 1; got {repeats!r}")
    return int(repeats)


def _check_given_path(path, shape, sample_weight) -> None:
    """Refuse a given path fitted on data of another shape or with other row weights."""
    n, p = shape
    if path.n_samples != n or path.n_features != p:
        raise InputError(
            f"path was fitted on {path.n_samples} x {path.n_features} data but X is "
            f"{n} x {p}; pass the same data"
        )
    if sample_weight is not None and (path.design.sample_weight is None or not np.array_equal(
            np.asarray(sample_weight, dtype=float), path.design.sample_weight)):
        raise InputError("sample_weight differs from the weights the path was fitted with; "
                         "pass the same weights (or none: the path's are used)")


def _route(path, span, scaling, method, cost_model, sizes, k, t):
    """``(route, reason)``: exact from the full-data factors or one refit per fold."""
    if span is not None:
        fixes = [fix for fix, wrong in (("scaling='global'", scaling == "per-fold"),
                                        ("method='exact'", method == "refit")) if wrong]
        if fixes:
            raise InputError("with row weights, unpenalized columns or relative penalties, "
                             "K-fold CV is exact from the full-data factors only; use "
                             + " and ".join(fixes))
        return "exact", "exact: row weights / unpenalized columns (no refit route)"
    if scaling == "per-fold":
        return "refit", "refit: per-fold scaling cannot be read off the full-data factors"
    if method != "auto":
        return method, "requested"
    return (cost_model or CostModel()).choose(
        sizes, n=path.n_samples, r=path.factorization.rank, q=int(path.design.active.sum()),
        k=k, t=t, dual=path.state.full_row_rank)


def _fold_errors(path, route, reason, Xa, Y, labels, lam, scaling, progress):
    """``(fold errors, engine, route, reason)``; the exact route falls back to refits when a
    fold block is singular (refused with row weights or unpenalized columns)."""
    engine = None
    if route == "exact":
        engine = _ExactEngine(path.state, list(labels))
        try:
            fold = engine.fold_mse(lam, progress)
        except np.linalg.LinAlgError:
            if path.design.span is not None:
                raise InputError("a fold's block I - H_ff is singular (its rows carry "
                                 "parameters no other fold sees); use fewer, larger folds") \
                    from None
            route, engine = "refit", None
            reason = "refit: a fold block I - H_ff was singular at some penalty"
    if engine is None:
        engine = _RefitEngine(Xa, Y, list(labels), fit_intercept=path.fit_intercept,
                              standardize=path.standardize, scaling=scaling, solver=path.solver
                              if path.solver in ("svd", "gram") else "auto", design=path.design,
                              progress=progress)
        fold = engine.fold_mse(lam)
    return fold, engine, route, reason


def heldout_residuals(path, lam: float, labels, *, only=None) -> np.ndarray:
    """Exact held-out residuals at one penalty for a partition ``labels``, shape (n,) or (n, t).

    Row ``i`` gets :math:`y_i - \\hat\\mu_{(-f)}(x_i)`, the residual of the fit
    that leaves out its whole fold :math:`f`, from the full-data factors
    (:math:`e_{(-f)} = (I - H_{ff})^{-1} e_f`, primal or dual form of the module
    notes); the preprocessing is held fixed and the intercept refitted.  ``only``:
    the folds to compute (the other rows get 0).
    """
    labels = np.asarray(labels)
    lam_arr = as_lambdas(lam)[:1]
    engine = _ExactEngine(path.state, [labels])
    out = engine.residuals(lam_arr, only=only)[:, 0]
    return out if path.multi_target else out[:, 0]


def loo_residuals(path, lam) -> np.ndarray:
    """Exact leave-one-out residuals at penalties ``lam``, shape (n, k) or (n, k, t).

    :math:`e_i/(1 - H_{ii})` from :func:`paths.core.algebra.loo_residuals`
    (cancellation free as leverages tend to 1, finite as :math:`\\lambda \\to 0`).
    Their mean square is ``path.criteria_at(lam).loo_mse``; their spread gives
    its standard error.
    """
    lam = as_lambdas(lam)
    if path.state is None or path.state.u is None:
        raise InputError("leave-one-out residuals need the left factor, which this engine "
                         "does not keep; use the in-memory engine")
    res = algebra.loo_residuals(path.state, lam)
    return res if path.multi_target else res[..., 0]


def cv_from_fold_stats(stats, plan, lambdas, *, multi_target: bool, progress=None) -> CVResult:
    """The :class:`CVResult` of an out-of-memory engine's fold statistics.

    ``stats`` (:class:`paths.engines.stream.FoldFactors` of a streamed pass;
    :class:`StateFolds` or :class:`RefitFolds` of the wide engine) gives the
    held-out errors at any penalty, as the in-memory exact route does; ``plan``
    (:class:`paths.engines.stream.FoldPlan`) says which folds — the assignment
    of :mod:`paths.data.folds`, so the folds, and the errors, are the in-memory
    engine's.  ``labels`` are the statistics' own (the wide engine holds them),
    else empty (R, 0): a streamed pass never holds the rows' labels.
    ``progress(stage, done, total)`` counts the folds whose errors are computed here
    (none when the engine already did, at these penalties, and counted them then).
    """
    lam = as_lambdas(lambdas)
    sizes = np.array(stats.count, dtype=np.int64)
    fold = stats.fold_mse(lam, progress=progress)
    labels = getattr(stats, "labels", None)
    if labels is None:
        labels = np.zeros((plan.repeats, 0), dtype=np.int64)
    mse, se, se_rep = _summarize(fold, sizes)
    if not multi_target:
        mse, se, fold = mse[..., 0], se[..., 0], fold[..., 0]
        se_rep = None if se_rep is None else se_rep[..., 0]
    return CVResult(lambdas=lam, mse=mse, se=se, se_repeats=se_rep, fold_mse=fold,
                    fold_sizes=sizes, labels=labels,
                    n_folds=plan.n_folds, repeats=plan.repeats, seed=plan.seed,
                    scheme=plan.scheme, scaling=getattr(stats, "scaling", "global"),
                    method="refit" if stats.form == "refit" else "exact", form=stats.form,
                    method_reason=getattr(stats, "reason", "exact: per-fold triangular factors "
                                          "of the streamed hat pass, preprocessing from all "
                                          "training rows"),
                    multi_target=multi_target, _engine=stats)
