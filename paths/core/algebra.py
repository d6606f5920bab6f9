"""Every closed form of the ridge path on the factors, in one place.

Every engine (in memory, row-streamed, column-blocked wide, dask) only produces
a :class:`FactorState` — the singular values :math:`d`, the right factors, the
projections :math:`c = U^T y` and the part of the response outside the column
span — and, in a second pass where needed, the row-wise quantities of
:class:`LeverageRows` (one row of the left factor, the leverage left outside the
span, the out-of-span residual) or the per-fold triangular factors of
:func:`kfold_fold_mse`.  Everything else is computed here:

- shrinkage gains :math:`g_j = d_j/(d_j^2+\\lambda)`, fractions
  :math:`f_j = d_j^2/(d_j^2+\\lambda)` and complements
  :math:`s_j = \\lambda/(d_j^2+\\lambda)` (never formed as :math:`1 - f_j`);
- :math:`\\operatorname{df} = [\\text{intercept}] + \\sum_j f_j` (ESL eq. 3.50);
- :math:`\\mathrm{RSS} = \\|y_\\perp\\|^2 + \\sum_j s_j^2 c_j^2`;
- GCV :math:`= n\\,\\mathrm{RSS}/(n - \\operatorname{df})^2` (Golub, Heath &
  Wahba 1979), :math:`n - \\operatorname{df} = (m - r) + \\sum_j s_j`, and its
  :math:`\\lambda \\to 0^+` limit;
- exact leave-one-out :math:`e_i/(1 - H_{ii})`;
- exact K-fold held-out residuals :math:`(I - H_{ff})^{-1} e_f`;
- the test error, the coefficients on the original scale, the minimum-norm limit.

Scaled complements
------------------
Near :math:`\\lambda = 0` the complements underflow (:math:`s_j^2` is below the
smallest float for :math:`\\lambda \\lesssim 10^{-160} d^2`), and GCV and
leave-one-out are ratios of such quantities.  Every ratio is therefore written
with the complements relative to the largest one,

.. math:: \\hat s_j = s_j / s_r = (d_r^2 + \\lambda)/(d_j^2 + \\lambda) \\in (0, 1],

which has the finite limit :math:`d_r^2/d_j^2` at :math:`\\lambda = 0`; the common
factor :math:`s_r` cancels where the out-of-span part vanishes and multiplies a
bounded sum elsewhere.  GCV, leave-one-out and their limits are then finite for
every :math:`\\lambda` from 0 to the largest float, and equal to their
:math:`\\lambda \\to 0^+` limits at :math:`\\lambda = 0` without a special case.

Leverage near one
-----------------
:math:`1 - H_{ii} = \\ell_i + \\sum_j U_{ij}^2 s_j` with
:math:`\\ell_i = 1 - [1/n] - \\|U_i\\|^2` the leverage left outside the span.  For
rows whose :math:`\\ell_i` is small (a column non-zero in one row only, a rare
level of a one-hot encoding) the subtraction loses every digit.  Those rows are
recomputed from the complement: with the sample-space left factor
:math:`\\tilde U = [1/\\sqrt n,\\ U]` split into these rows :math:`S` and the
others :math:`O`, and :math:`\\tilde U_S = P \\Sigma Q^T` (full SVD),

.. math:: (I - \\tilde U \\tilde U^T)_{SS} = P \\operatorname{diag}(\\delta) P^T,
   \\qquad \\delta_k = \\|\\tilde U_O q_k\\|^2 = \\|R_O q_k\\|^2

(:math:`\\delta_k = 1` past the rank of :math:`\\tilde U_S`), with :math:`R_O` the
triangular factor of the other rows — a sum of squares, not a difference.  The
out-of-span residuals of those rows follow the same way,
:math:`e_{\\perp,S} = P[\\delta \\circ P^T y_S - \\Sigma (R_O Q)^T w]` with
:math:`w = Q_O^T y_O`.  A leverage below its rounding level,
:math:`\\ell_i \\le (10 \\max(n, r)\\,\\varepsilon)^2`, counts as exactly 1.

References
----------
Golub, G. H., Heath, M. and Wahba, G. (1979). Generalized cross-validation as a
method for choosing a good ridge parameter. *Technometrics* 21, 215–223.

Hastie, T., Tibshirani, R. and Friedman, J. (2009). *The Elements of Statistical
Learning*, 2nd ed., eq. 3.50 and §7.10.

Liland, K. H., Skogholt, J. and Indahl, U. G. (2024). A new formula for faster
computation of the K-fold cross-validation and good regularisation parameter
values in ridge regression. *IEEE Access* 12, 17349–17368.

Golub, G. H. and Van Loan, C. F. (2013). *Matrix Computations*, 4th ed.,
§6.5.4 (downdating needs the complement of the column space).
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import scipy.linalg as sla
from scipy.special import logsumexp

__all__ = [
    "FactorState", "factor_state", "state_from_response", "Shrinkage", "shrinkage", "gains", "fractions",
    "complements", "penalized_df", "degrees_of_freedom", "residual_dof", "rss", "gcv",
    "gcv_limit", "Criteria", "criteria", "LeverageRows", "sample_space_blocks",
    "leverage_rows", "state_blocks", "refine_leverage", "naive_ell", "ell_tolerance",
    "augment_rows", "LEVERAGE_REFINE", "loo_sums", "loo_mse", "loo_blocks", "loo_paired",
    "shrunk_projections", "LOO_BLOCK_ELEMS", "LOO_PER_PENALTY_TARGETS", "loo_row_weights", "gcv_paired", "reml_paired", "coefficients_paired",
    "path_intercepts",
    "loo_residuals", "project", "test_sums", "coefficients", "min_norm_coefficients",
    "intercepts", "coef_norm", "append_zero", "sample_weights", "path_coef_norm", "fold_factor", "kfold_fold_mse",
    "kfold_fold_errors", "tsqr",
    "block_sse", "loo_power_sums", "loo_standard_error", "HeldOutFold", "heldout_mse",
]

_EPS = np.finfo(np.float64).eps
_BLOCK_ROWS = 4096
#: rows whose computed leverage outside the span is below this are recomputed
#: from the complement (at most (r + 1)/(1 - LEVERAGE_REFINE)... rows, see module notes)
LEVERAGE_REFINE = 0.25


# ------------------------------------------------------------------------- state
@dataclass(frozen=True)
class FactorState:
    """The factor state every engine produces: enough for every criterion.

    Attributes
    ----------
    d : ndarray, shape (r,)
        Retained singular values of the reduced (centered, scaled) design, descending.
    vt : ndarray, shape (r, q)
        Right singular vectors (rows), on the active columns.
    uty : ndarray, shape (r, t)
        :math:`c = U^T y` on the reduced response.
    rss_out : ndarray, shape (t,)
        :math:`\\|y_\\perp\\|^2`, the squared norm of the response outside the
        retained column span (with a truncated rank it includes the discarded part).
    n_samples : int
    fit_intercept : bool
    u : ndarray, shape (m, r), or None
        Left singular vectors in reduced coordinates (in-memory engines only).
    resid_out : ndarray, shape (m, t), or None
        :math:`y_\\perp` in reduced coordinates (in-memory engines only).
    span : paths.core.design.FixedSpan or None
        With row weights or unpenalized columns: the unpenalized span projected
        out of the reduced coordinates (its columns take the place of the
        intercept's :math:`1/\\sqrt n` everywhere below).  Every formula is then
        that of the transformed problem :math:`W^{1/2}y, W^{1/2}X`: sums of
        squares are weighted sums, and means divide by :math:`\\sum_i w_i`.
    cache : dict
        Quantities computed once on first use (the refined high-leverage rows of
        :func:`leverage_rows`); not part of the state's identity.
    """

    d: np.ndarray
    vt: np.ndarray
    uty: np.ndarray
    rss_out: np.ndarray
    n_samples: int
    fit_intercept: bool
    u: np.ndarray | None = None
    resid_out: np.ndarray | None = None
    span: object = None
    cache: dict = field(default_factory=dict, repr=False, compare=False)

    @property
    def n_fixed(self) -> int:
        """Unpenalized parameters: the intercept, and unpenalized columns with a span."""
        return self.span.c if self.span is not None else int(self.fit_intercept)

    @property
    def total_weight(self) -> float:
        """:math:`\\sum_i w_i` (n without weights), the denominator of every mean error."""
        return self.span.total_weight if self.span is not None else float(self.n_samples)

    @property
    def m(self) -> int:
        """Rows of the reduced design: n minus the unpenalized parameters."""
        return self.n_samples - self.n_fixed

    @property
    def rank(self) -> int:
        return int(self.d.size)

    @property
    def n_targets(self) -> int:
        return int(self.uty.shape[1])

    @property
    def full_row_rank(self) -> bool:
        """True when the span holds every response (interpolation at λ = 0)."""
        return self.rank == self.m


def factor_state(fac, design) -> FactorState:
    """The in-memory :class:`FactorState` of a factorization and its design.

    ``fac`` is a :class:`paths.core.factor.Factorization` (``u``, ``d``, ``vt``),
    ``design`` a :class:`paths.core.design.Design` (``zy``, ``n_samples``,
    ``fit_intercept``); see :func:`state_from_response`.
    """
    return state_from_response(fac, design.zy, design.n_samples, design.fit_intercept,
                               span=getattr(design, "span", None))


def state_from_response(fac, zy: np.ndarray, n_samples: int, fit_intercept: bool, *,
                        span=None) -> FactorState:
    """The in-memory :class:`FactorState` of factors ``fac`` and a reduced response ``zy`` (m, t).

    ``span`` is the design's unpenalized span (row weights, unpenalized columns), if any.

    The out-of-span residual :math:`y - Uc` is formed once; at full row rank it
    is exactly zero (the computed difference would be rounding, of order
    :math:`m\\varepsilon\\|y\\|`).
    """
    u = fac.u
    c = u.T @ zy
    if u.shape[1] == u.shape[0]:
        resid = np.zeros_like(zy)
    else:
        resid = zy - u @ c
    rss_out = _sumsq(resid)
    for a in (c, resid, rss_out):
        a.flags.writeable = False
    return FactorState(d=fac.d, vt=fac.vt, uty=c, rss_out=rss_out, n_samples=n_samples,
                       fit_intercept=fit_intercept, u=u, resid_out=resid, span=span)


def _sumsq(a: np.ndarray) -> np.ndarray:
    """Column sums of squares, rescaled first so that they neither overflow nor underflow."""
    a = np.asarray(a, dtype=np.float64)
    if a.size == 0:
        return np.zeros(a.shape[1:])
    big = np.max(np.abs(a), axis=0)
    if np.all((big < 1e150) & ((big > 1e-150) | (big == 0))):
        return np.einsum("i...,i...->...", a, a)
    safe = np.where(big > 0, big, 1.0)
    s = a / safe
    with np.errstate(over="ignore"):
        return np.square(safe) * np.einsum("i...,i...->...", s, s)


# --------------------------------------------------------------------- shrinkage
@dataclass(frozen=True)
class Shrinkage:
    """Shrinkage of every singular direction at every penalty, shape (r, k).

    Attributes
    ----------
    lam : ndarray, shape (k,)
    f : ndarray, shape (r, k)
        Fractions :math:`d_j^2/(d_j^2+\\lambda)`.
    s : ndarray, shape (r, k)
        Complements :math:`\\lambda/(d_j^2+\\lambda)`, computed directly.
    s_max : ndarray, shape (k,)
        The largest complement, :math:`s_r` (of the smallest singular value).
    s_rel : ndarray, shape (r, k)
        :math:`s_j/s_r = (d_r^2+\\lambda)/(d_j^2+\\lambda)`: in (0, 1], never
        underflows, :math:`d_r^2/d_j^2` at :math:`\\lambda = 0`.
    gain : ndarray, shape (r, k)
        :math:`d_j/(d_j^2+\\lambda)` (:math:`1/d_j` at 0).
    """

    lam: np.ndarray
    f: np.ndarray
    s: np.ndarray
    s_max: np.ndarray
    s_rel: np.ndarray
    gain: np.ndarray


def _lam(lam) -> np.ndarray:
    return np.atleast_1d(np.asarray(lam, dtype=np.float64)).reshape(-1)


def shrinkage(d: np.ndarray, lam) -> Shrinkage:
    """Fractions, complements, scaled complements and gains at penalties ``lam``.

    Exact to a few ulps for every :math:`\\lambda \\in [0, \\text{max float}]`:
    where :math:`d_j^2 + \\lambda` would overflow, numerator and denominator are
    halved first (exact in binary).

    Examples
    --------
    >>> sh = shrinkage(np.array([2.0, 1.0]), [0.0, 1.0])
    >>> sh.f.tolist(), sh.s.tolist(), sh.s_rel.tolist()
    ([[1.0, 0.8], [1.0, 0.5]], [[0.0, 0.2], [0.0, 0.5]], [[0.25, 0.4], [1.0, 1.0]])
    """
    lam = _lam(lam)
    d = np.asarray(d, dtype=np.float64)
    d2 = np.square(d)[:, None]
    L = np.broadcast_to(lam[None, :], (d.size, lam.size))
    with np.errstate(over="ignore"):
        den = d2 + L
    top = ~np.isfinite(den)
    if top.any():  # both terms near the top of the range: halve (exact)
        half = 0.5 * d2 + 0.5 * L
        f = np.where(top, (0.5 * d2) / half, d2 / np.where(top, 1.0, den))
        s = np.where(top, (0.5 * L) / half, L / np.where(top, 1.0, den))
        den = np.where(top, half, den)
        s_rel = den[-1:] / den
        gain = f / d[:, None]
    else:
        f = d2 / den
        s = L / den
        s_rel = den[-1:] / den if d.size else den
        gain = d[:, None] / den
    s_max = s[-1] if d.size else np.zeros(lam.size)
    return Shrinkage(lam=lam, f=f, s=s, s_max=s_max, s_rel=s_rel, gain=gain)


def gains(d: np.ndarray, lam) -> np.ndarray:
    """:math:`d_j/(d_j^2+\\lambda)`, shape (r, k); the min-norm :math:`1/d_j` at 0."""
    return shrinkage(d, lam).gain


def fractions(d: np.ndarray, lam) -> np.ndarray:
    """:math:`f_j = d_j^2/(d_j^2+\\lambda)`, shape (r, k)."""
    return shrinkage(d, lam).f


def complements(d: np.ndarray, lam) -> np.ndarray:
    """:math:`s_j = \\lambda/(d_j^2+\\lambda)`, shape (r, k), formed directly (not 1 − f)."""
    return shrinkage(d, lam).s


def penalized_df(d: np.ndarray, lam) -> np.ndarray:
    """Effective df of the penalized part, :math:`\\sum_j d_j^2/(d_j^2+\\lambda)`.

    Shape of ``lam`` (a scalar for a scalar).  ESL eq. 3.50.

    Examples
    --------
    >>> float(penalized_df(np.array([1.0, 1.0]), 1.0))
    1.0
    """
    shape = np.shape(lam)
    return shrinkage(d, lam).f.sum(axis=0).reshape(shape)


def degrees_of_freedom(state: FactorState, lam) -> np.ndarray:
    """:math:`\\operatorname{tr} H_\\lambda`, the intercept's 1 included, shape (k,)."""
    return state.n_fixed + shrinkage(state.d, lam).f.sum(axis=0)


def residual_dof(state: FactorState, sh: Shrinkage) -> np.ndarray:
    """:math:`n - \\operatorname{df} = (m - r) + \\sum_j s_j`, without cancellation, (k,)."""
    return (state.m - state.rank) + sh.s.sum(axis=0)


def _c_scaled(c: np.ndarray):
    """``(c / cmax, cmax)`` per target, cmax = max |c_j| (1 where c is zero)."""
    cmax = np.max(np.abs(c), axis=0) if c.size else np.ones(c.shape[1])
    cmax = np.where(cmax > 0, cmax, 1.0)
    return c / cmax, cmax


def rss(state: FactorState, lam, sh: Shrinkage | None = None) -> np.ndarray:
    """Residual sum of squares :math:`\\|y_\\perp\\|^2 + \\sum_j s_j^2 c_j^2`, shape (k, t)."""
    sh = shrinkage(state.d, lam) if sh is None else sh
    ch, cmax = _c_scaled(state.uty)
    inner = np.square(sh.s_rel).T @ np.square(ch)  # (k, t), bounded by r
    with np.errstate(under="ignore", over="ignore"):
        scale = np.square(sh.s_max[:, None] * cmax[None, :])
        return state.rss_out[None, :] + scale * inner


def gcv_limit(state: FactorState) -> np.ndarray:
    """GCV at :math:`\\lambda \\to 0^+`, shape (t,).

    :math:`n\\|y_\\perp\\|^2/(m - r)^2` below full row rank; at full row rank
    (interpolation) :math:`n \\sum_j c_j^2 d_j^{-4} / (\\sum_j d_j^{-2})^2`,
    evaluated with :math:`d_r^2/d_j^2` so that it neither overflows nor underflows.
    """
    return gcv(state, [0.0])[0]


def gcv(state: FactorState, lam, sh: Shrinkage | None = None) -> np.ndarray:
    """Generalized cross-validation :math:`n\\,\\mathrm{RSS}/(n-\\operatorname{df})^2`, (k, t).

    O(r t) per penalty.  Finite for every :math:`\\lambda \\ge 0`; at 0 it is
    the :math:`\\lambda \\to 0^+` limit.

    Notes
    -----
    With :math:`A = \\sum_j \\hat s_j^2 c_j^2` and :math:`B = \\sum_j \\hat s_j`
    (scaled complements, module notes): :math:`n A / B^2` at full row rank
    (:math:`s_r` cancels), else
    :math:`n(\\|y_\\perp\\|^2 + s_r^2 A)/((m - r) + s_r B)^2`.
    """
    sh = shrinkage(state.d, lam) if sh is None else sh
    ch, cmax = _c_scaled(state.uty)
    A = np.square(sh.s_rel).T @ np.square(ch)  # (k, t)
    B = sh.s_rel.sum(axis=0)  # (k,)
    return _gcv_ratio(state, A, B[:, None], sh.s_max[:, None], cmax[None, :], state.rss_out)


def _gcv_ratio(state: FactorState, A, B, s_max, cmax, rss_out):
    """GCV from :math:`A = \\sum \\hat s^2 \\hat c^2`, :math:`B = \\sum \\hat s`, (broadcast shapes)."""
    n = state.n_samples
    if state.span is not None:  # weighted: (RSS_w / sum w) / (1 - df/n)^2
        n = n * (n / state.total_weight)
    with np.errstate(under="ignore", over="ignore"):
        if state.full_row_rank:
            return n * np.square(cmax / B) * A
        num = rss_out + np.square(s_max * cmax) * A
        den = (state.m - state.rank) + s_max * B
        return n * num / np.square(den)


def gcv_paired(state: FactorState, lam, *, targets=None) -> np.ndarray:
    """GCV of target ``targets[i]`` (default: every target) at penalty ``lam[i]``, (b,).

    :func:`gcv` on the diagonal, O(r b), with the same scaled complements
    (finite at every :math:`\\lambda \\ge 0`).
    """
    lam = _lam(lam)
    idx = np.arange(state.n_targets) if targets is None else np.asarray(targets).reshape(-1)
    if lam.size != idx.size:
        raise ValueError(f"gcv_paired needs one penalty per target ({idx.size}); "
                         f"got {lam.size}")
    sh = shrinkage(state.d, lam)  # (r, b)
    ch, cmax = _c_scaled(state.uty[:, idx])
    A = np.einsum("rt,rt->t", np.square(sh.s_rel), np.square(ch))
    return _gcv_ratio(state, A, sh.s_rel.sum(axis=0), sh.s_max, cmax, state.rss_out[idx])


# ----------------------------------------------------------- leave-one-out rows
@dataclass(frozen=True)
class LeverageRows:
    """Row-wise quantities of a block of rows for leave-one-out, in sample space.

    Attributes
    ----------
    u : ndarray, shape (b, r)
        Rows of the sample-space left factor (centered, without the 1/√n column).
    ell : ndarray, shape (b,)
        Leverage outside the span, :math:`1 - H_{ii}(0)`; exactly 0 where the row
        is interpolated.
    e_perp : ndarray, shape (b, t)
        Out-of-span residuals :math:`(y_\\perp)_i` (0 where ``ell`` is 0).
    """

    u: np.ndarray
    ell: np.ndarray
    e_perp: np.ndarray


def sample_space_blocks(u: np.ndarray, fit_intercept: bool, block: int = _BLOCK_ROWS):
    """Yield ``(start, stop, rows)`` of the sample-space factor :math:`Q[0; u]`.

    ``u`` has m reduced rows (n = m + 1 sample rows with an intercept, see
    :func:`paths.core.design.to_sample_space`); the factor is never formed.
    ``rows`` is a view of ``u`` (no intercept) or of one buffer reused for
    every block: use it before asking for the next block.
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
        lo, hi = max(s - 1, 0), e - 1
        rows = buf[:e - s]
        if s == 0:
            rows[0] = -colsum / rn
            np.subtract(u[lo:hi], shift, out=rows[1:])
        else:
            np.subtract(u[lo:hi], shift, out=rows)
        yield s, e, rows


def state_blocks(state: FactorState, a: np.ndarray, block: int = _BLOCK_ROWS):
    """:func:`sample_space_blocks` of reduced rows ``a`` for ``state`` (its span, if any)."""
    if state.span is None:
        yield from sample_space_blocks(a, state.fit_intercept, block)
        return
    full = state.span.to_sample(a)
    for s in range(0, full.shape[0], block):
        yield s, min(s + block, full.shape[0]), full[s:s + block]


def ell_tolerance(n: int, r: int) -> float:
    """Leverage outside the span below which a row counts as interpolated.

    The refined :math:`\\ell_i` is a sum of squares of quantities known to about
    :math:`\\max(n, r)\\,\\varepsilon` (backward error of the factors), so it is
    indistinguishable from 0 below :math:`(10 \\max(n, r)\\,\\varepsilon)^2`.
    """
    return (10.0 * max(n, r) * _EPS) ** 2


def naive_ell(state: FactorState, ub: np.ndarray, start: int = 0) -> np.ndarray:
    """:math:`1 - [1/n] - \\|u_i\\|^2` (accurate where it is not small; see refine).

    With a span, :math:`1 - \\|Q_{1,i}\\|^2 - \\|u_i\\|^2` for the rows from ``start``.
    """
    if state.full_row_rank:
        return np.zeros(ub.shape[0])
    if state.span is not None:
        base = 1.0 - state.span.leverage[start:start + ub.shape[0]]
    else:
        base = 1.0 - 1.0 / state.n_samples if state.fit_intercept else 1.0
    return np.maximum(base - np.einsum("ir,ir->i", ub, ub), 0.0)


def augment_rows(state: FactorState, ub: np.ndarray, start: int = 0) -> np.ndarray:
    """Rows of :math:`\\tilde U = [1/\\sqrt n,\\ U]` (the intercept column first).

    With a span, :math:`[Q_1,\\ U]` for the rows from ``start``.
    """
    if state.span is not None:
        return np.hstack([state.span.q1[start:start + ub.shape[0]], ub])
    if not state.fit_intercept:
        return ub
    return np.hstack([np.full((ub.shape[0], 1), 1.0 / np.sqrt(state.n_samples)), ub])


def tsqr(blocks, width: int) -> np.ndarray:
    """Upper-triangular R (width × width) of the rows yielded by ``blocks`` (tall-skinny QR)."""
    R = np.zeros((0, width))
    for b in blocks:
        if b.shape[0] == 0:
            continue
        R = _qr_r(np.vstack([R, b]), width)
    return R if R.shape[0] == width else np.vstack([R, np.zeros((width - R.shape[0], width))])


def _qr_r(a: np.ndarray, width: int) -> np.ndarray:
    r = sla.qr(a, mode="r", check_finite=False)[0]
    return r[:min(a.shape[0], width)]


def refine_leverage(state: FactorState, ua_s: np.ndarray, y_s: np.ndarray,
                    r_other: np.ndarray):
    """Leverage outside the span and out-of-span residuals of high-leverage rows.

    Parameters
    ----------
    state : FactorState
    ua_s : ndarray, shape (s, ra)
        The rows, augmented (:math:`[1/\\sqrt n,\\ u_i]` with an intercept).
    y_s : ndarray, shape (s, t)
        Their centered responses.
    r_other : ndarray, shape (ra + t, ra + t)
        Triangular factor of :math:`[\\tilde U_O,\\ y_O]` over all the other rows.

    Returns
    -------
    ell : ndarray, shape (s,)
    e_perp : ndarray, shape (s, t)

    Notes
    -----
    See the module notes: every eigenvalue of the complement block is the
    squared norm :math:`\\|R_O q_k\\|^2`, never :math:`1 - \\sigma_k^2`.
    """
    s, ra = ua_s.shape
    Rx, w = r_other[:ra, :ra], r_other[:ra, ra:]
    P, sig, Qt = np.linalg.svd(ua_s, full_matrices=True)
    kk = sig.size
    RQ = Rx @ Qt[:kk].T  # (ra, kk)
    delta = np.ones(s)
    delta[:kk] = np.einsum("ik,ik->k", RQ, RQ)
    cross = np.zeros((s, y_s.shape[1]))
    cross[:kk] = sig[:, None] * (RQ.T @ w)
    ell = np.square(P) @ delta
    e_perp = P @ (delta[:, None] * (P.T @ y_s) - cross)
    zero = ell <= ell_tolerance(state.n_samples, state.rank + state.n_fixed)
    ell[zero] = 0.0
    e_perp[zero] = 0.0
    return ell, e_perp


def leverage_rows(state: FactorState, block: int = _BLOCK_ROWS, targets=slice(None)):
    """Yield ``(start, stop, LeverageRows)`` over the sample rows (in-memory state).

    Rows whose computed leverage outside the span is below
    :data:`LEVERAGE_REFINE` are recomputed by :func:`refine_leverage` (one
    extra tall-skinny QR of the other rows, only when such rows exist).
    ``targets`` selects the columns of ``e_perp`` (a block of targets).
    """
    if state.u is None:
        raise ValueError("leverage_rows needs the left factor (an in-memory FactorState)")
    if "high_leverage" not in state.cache:  # once per state: an extra pass and maybe a QR
        state.cache["high_leverage"] = _refined_rows(state, block)
    fixes = state.cache["high_leverage"]
    resid = state.resid_out[:, targets]
    if state.full_row_rank:  # nothing outside the span: no pass over the residuals
        e_blocks = ((s, e, np.zeros((e - s, resid.shape[1])))
                    for s, e, _ in state_blocks(state, resid[:, :0], block))
    else:
        e_blocks = state_blocks(state, resid, block)
    for (s, e, ub), (_, _, eb) in zip(state_blocks(state, state.u, block), e_blocks):
        ell = naive_ell(state, ub, s)
        ep = eb if state.full_row_rank else eb.copy()
        if fixes is not None:
            idx, ell_s, ep_s = fixes
            sel = (idx >= s) & (idx < e)
            if sel.any():
                ell[idx[sel] - s] = ell_s[sel]
                ep[idx[sel] - s] = ep_s[sel][:, targets]
        yield s, e, LeverageRows(u=ub, ell=ell, e_perp=ep)


def _refined_rows(state: FactorState, block: int):
    """``(indices, ell, e_perp)`` of the high-leverage rows, or None when there are none."""
    if state.full_row_rank:
        return None
    flagged = []
    for s, e, ub in state_blocks(state, state.u, block):
        flagged.append(s + np.flatnonzero(naive_ell(state, ub, s) < LEVERAGE_REFINE))
    idx = np.concatenate(flagged)
    if idx.size == 0:
        return None
    t = state.n_targets
    ra = state.rank + state.n_fixed
    is_s = np.zeros(state.n_samples, dtype=bool)
    is_s[idx] = True
    ua_s = np.empty((idx.size, ra))
    y_s = np.empty((idx.size, t))

    def others():
        yb_iter = state_blocks(state, reduced_response(state), block)
        for (s, e, ub), (_, _, yb) in zip(state_blocks(state, state.u, block), yb_iter):
            keep = ~is_s[s:e]
            ua = augment_rows(state, ub, s)
            sel = idx[(idx >= s) & (idx < e)]
            pos = np.searchsorted(idx, sel)
            ua_s[pos] = ua[sel - s]
            y_s[pos] = yb[sel - s]
            yield np.hstack([ua[keep], yb[keep]])

    R = tsqr(others(), ra + t)
    ell, ep = refine_leverage(state, ua_s, y_s, R)
    return idx, ell, ep


def loo_sums(rows: LeverageRows, sh: Shrinkage, c: np.ndarray, *,
             sc: np.ndarray | None = None) -> np.ndarray:
    """Sum over the block's rows of the squared leave-one-out residuals, (k, t).

    Residual :math:`(e_{\\perp,i} + s_r a_i)/(\\ell_i + s_r b_i)` with
    :math:`a_i = \\sum_j u_{ij}\\hat s_j c_j`, :math:`b_i = \\sum_j u_{ij}^2 \\hat s_j`;
    :math:`a_i/b_i` on interpolated rows (:math:`\\ell_i = 0`).  Equal to its
    :math:`\\lambda \\to 0^+` limit at :math:`\\lambda = 0`.  ``sc`` is
    :func:`shrunk_projections` of ``sh`` and ``c`` when already formed (it does
    not depend on the rows).
    """
    res = _loo_res(rows, sh, c, sc)
    np.square(res, out=res)
    return res.sum(axis=0)


def shrunk_projections(sh: Shrinkage, c: np.ndarray) -> np.ndarray:
    """:math:`\\hat s_{jk} c_{jt}` laid out as an (r, k·t) matrix (penalty-major)."""
    r, k = sh.s_rel.shape
    return (sh.s_rel[:, :, None] * c[:, None, :]).reshape(r, k * c.shape[1])


def loo_power_sums(rows: LeverageRows, sh: Shrinkage, c: np.ndarray):
    r""":func:`loo_sums` and the sum of the fourth powers of the leave-one-out
    residuals, both (k, t): with n, the mean :math:`S_2/n` of the squared
    residuals and its standard error
    :math:`\sqrt{(S_4 - S_2^2/n) / ((n - 1)\, n)}` (:func:`loo_standard_error`)."""
    res = _loo_res(rows, sh, c)
    np.square(res, out=res)
    return res.sum(axis=0), np.einsum("ikt,ikt->kt", res, res)


def loo_standard_error(s2: np.ndarray, s4: np.ndarray, n: int) -> np.ndarray:
    r"""Standard error :math:`\operatorname{sd}(e_{(i)}^2)/\sqrt n` of the leave-one-out
    MSE from the sums of the squared residuals and of their squares.

    The sample variance :math:`(S_4 - S_2^2/n)/(n - 1)` of the squared residuals
    is formed by one subtraction; its relative rounding error is about
    :math:`n\,\varepsilon\, S_4 / (S_4 - S_2^2/n)` (the sums' own error over
    the cancellation), e.g. :math:`1.5\,n\,\varepsilon` for Gaussian
    residuals (:math:`E e^4 = 3\sigma^4`, variance of :math:`e^2` :math:`2\sigma^4`).

    Examples
    --------
    >>> import numpy as np
    >>> e2 = np.array([1.0, 4.0, 9.0])
    >>> se = loo_standard_error(e2.sum(), np.square(e2).sum(), 3)
    >>> bool(np.isclose(se, e2.std(ddof=1) / np.sqrt(3)))
    True
    """
    var = np.maximum(s4 - np.square(s2) / n, 0.0) / max(n - 1, 1)
    return np.sqrt(var / n)


def _loo_res(rows: LeverageRows, sh: Shrinkage, c: np.ndarray, sc=None) -> np.ndarray:
    ub = rows.u
    b, (r, k), t = ub.shape[0], sh.s_rel.shape, c.shape[1]
    SC = shrunk_projections(sh, c) if sc is None else sc
    num = (ub @ SC).reshape(b, k, t)
    den = np.square(ub) @ sh.s_rel  # (b, k)
    out = rows.ell > 0
    if out.all():  # in place, no gathered copies (the usual case below full row rank)
        num *= sh.s_max[None, :, None]
        num += rows.e_perp[:, None, :]
        den *= sh.s_max[None, :]
        den += rows.ell[:, None]
    elif out.any():
        num[out] = rows.e_perp[out][:, None, :] + sh.s_max[None, :, None] * num[out]
        den[out] = rows.ell[out][:, None] + sh.s_max[None, :] * den[out]
    num /= den[:, :, None]
    return num


def append_zero(lam: np.ndarray):
    """Penalties with 0 appended (for the min-norm limit) and whether it was added."""
    if lam.size and lam[-1] == 0:
        return lam, False
    return np.append(lam, 0.0), True


def loo_mse(state: FactorState, lam) -> tuple[np.ndarray, np.ndarray]:
    """Exact leave-one-out MSE on the grid (k, t) and at the min-norm limit (t,).

    In-memory state; O(n r k t).  Leave-one-out residuals are
    :math:`e_i(\\lambda)/(1 - H_{ii}(\\lambda))` (see :func:`loo_sums`).
    """
    lam = _lam(lam)
    full, added = append_zero(lam)
    sh = shrinkage(state.d, full)
    r, k, t = state.rank, full.size, state.n_targets
    total = np.zeros((k, t))
    if t >= LOO_PER_PENALTY_TARGETS:
        _loo_by_penalty(state, sh, total)
    else:
        tb, blk = loo_blocks(r, k, t, state.n_samples)
        for t0 in range(0, t, tb):  # targets in blocks: the n x k x t residuals are never held
            cols = slice(t0, min(t0 + tb, t))
            c = state.uty[:, cols]
            sc = shrunk_projections(sh, c)
            for _, _, rows in leverage_rows(state, blk, cols):
                total[:, cols] += loo_sums(rows, sh, c, sc=sc)
    total /= state.total_weight
    return (total[:-1] if added else total), total[-1]


#: from this many targets on, leave-one-out is summed one penalty at a time (below: all
#: penalties in one product, which suits few targets and tall data)
LOO_PER_PENALTY_TARGETS = 16


def _loo_by_penalty(state: FactorState, sh: Shrinkage, total: np.ndarray) -> None:
    """Add the leave-one-out sums of squares (k, t) into ``total``, one penalty at a time.

    The residual of row i is :math:`w_i (u_i^T(\\hat s \\circ c)) + v_i e_{\\perp,i}` with
    the row weights of :func:`loo_row_weights`, so each penalty is one product
    :math:`(W U)(\\hat S C)` of n × r by r × t and one sum of squares: no n × k × t
    block, and no pass to divide by :math:`1 - H_{ii}`.
    """
    n, (r, k), t = state.n_samples, sh.s_rel.shape, state.n_targets
    tb = int(max(1, min(t, LOO_BLOCK_ELEMS // max(min(n, _BLOCK_ROWS), r, 1))))
    for t0 in range(0, t, tb):
        cols = slice(t0, min(t0 + tb, t))
        c = state.uty[:, cols]
        for _, _, rows in leverage_rows(state, _BLOCK_ROWS, cols):
            den = np.square(rows.u) @ sh.s_rel  # (b, k)
            has_out = bool(np.any(rows.ell > 0) and np.any(rows.e_perp))
            for j in range(k):
                scale, inv = loo_row_weights(rows.ell, sh.s_max[j], den[:, j])
                res = (rows.u * scale[:, None]) @ (sh.s_rel[:, j:j + 1] * c)
                if has_out:
                    res += inv[:, None] * rows.e_perp
                total[j, cols] += np.einsum("it,it->t", res, res)


def loo_row_weights(ell: np.ndarray, s_max, den: np.ndarray):
    """``(scale, inv)``: the leave-one-out residual is ``scale * a + inv * e_perp``.

    With :math:`a_i = u_i^T(\\hat s \\circ c)` and :math:`b_i = ` ``den`` :math:`=
    \\sum_j u_{ij}^2 \\hat s_j`: ``scale`` :math:`= s_r/(\\ell_i + s_r b_i)` and ``inv``
    :math:`= 1/(\\ell_i + s_r b_i)` where :math:`\\ell_i > 0`; on interpolated rows
    (:math:`\\ell_i = 0`) ``scale`` :math:`= 1/b_i` and ``inv`` 0 (the limit of
    :func:`loo_sums`' ratio, finite at :math:`\\lambda = 0`).  ``den`` is (b,) or (b, t)
    (then ``s_max`` (t,)).
    """
    out = (ell > 0).reshape((-1,) + (1,) * (den.ndim - 1))
    ellx = ell.reshape(out.shape)
    full = ellx + s_max * den
    with np.errstate(divide="ignore", invalid="ignore"):
        scale = np.where(out, s_max / np.where(out, full, 1.0), 1.0 / np.where(out, 1.0, den))
        inv = np.where(out, 1.0 / np.where(out, full, 1.0), 0.0)
    return scale, inv


#: elements of the largest temporary of leave-one-out (the shrunk projections,
#: a block of residuals): 2**22 float64, 32 MiB
LOO_BLOCK_ELEMS = 1 << 22


def loo_blocks(r: int, k: int, t: int, n: int, budget: int | None = None) -> tuple[int, int]:
    """``(targets, rows)`` per block so that the (r, k·targets) shrunk projections and the
    (rows, k, targets) residuals each stay within ``budget`` elements (at least one of each;
    default :data:`LOO_BLOCK_ELEMS`)."""
    budget = LOO_BLOCK_ELEMS if budget is None else int(budget)
    tb = int(max(1, min(t, budget // max(r * k, 1))))
    blk = int(max(64, min(_BLOCK_ROWS, n, budget // max(k * tb, r, 1))))
    return tb, blk


def loo_paired(state: FactorState, lam, *, targets=None, budget: int | None = None):
    """Exact leave-one-out MSE and its standard error, target ``j`` at penalty ``lam[j]``.

    Returns ``(mse (t,), se (t,))``; ``se`` is
    :math:`\\operatorname{sd}_i(w_i e_{(i)}^2)/\\sqrt n` (weights rescaled to mean
    1).  One penalty per target, so every block costs O(n r t), not O(n r k t):
    the per-target refinement of :mod:`paths.selection.targets` evaluates this.
    """
    lam = _lam(lam)
    idx = np.arange(state.n_targets) if targets is None else np.asarray(targets).reshape(-1)
    t = idx.size
    if lam.size != t:
        raise ValueError(f"loo_paired needs one penalty per target ({t}); got {lam.size}")
    sh = shrinkage(state.d, lam)  # (r, t): the penalty axis is the target axis
    n = state.n_samples
    w = None if state.span is None else np.square(state.span.sqrt_w)
    s1, s2 = np.zeros(t), np.zeros(t)
    budget = LOO_BLOCK_ELEMS if budget is None else int(budget)
    tb = int(max(1, min(t, budget // max(n, state.rank, 1))))
    for t0 in range(0, t, tb):
        cols = slice(t0, min(t0 + tb, t))
        sc = sh.s_rel[:, cols] * state.uty[:, idx[cols]]
        for s, e, rows in leverage_rows(state, _BLOCK_ROWS, idx[cols]):
            den = np.square(rows.u) @ sh.s_rel[:, cols]
            scale, inv = loo_row_weights(rows.ell, sh.s_max[cols], den)
            e2 = np.square(scale * (rows.u @ sc) + inv * rows.e_perp)
            if w is not None:  # transformed residuals: w_i e_i^2 already; mean weight 1
                e2 *= n / w.sum()
            s1[cols] += e2.sum(axis=0)
            s2[cols] += np.square(e2).sum(axis=0)
    mean = s1 / n
    var = np.maximum(s2 - n * np.square(mean), 0.0) / max(n - 1, 1)
    return mean, np.sqrt(var / n)


def loo_residuals(state: FactorState, lam) -> np.ndarray:
    """Exact leave-one-out residuals :math:`y_i - \\hat y_{(-i)}`, shape (n, k, t) (in memory).

    With row weights, those of the weighted refits without row i (the
    transformed residual divided by :math:`\\sqrt{w_i}`).
    """
    sh = shrinkage(state.d, lam)
    out = np.empty((state.n_samples, sh.lam.size, state.n_targets))
    for s, e, rows in leverage_rows(state):
        out[s:e] = _loo_res(rows, sh, state.uty)
    if state.span is not None:
        out /= state.span.sqrt_w[:, None, None]
    return out


# ---------------------------------------------------------------------- criteria
@dataclass(frozen=True)
class Criteria:
    """Path criteria on a grid, with their :math:`\\lambda \\to 0^+` limits.

    Arrays have shape (k,) for ``df`` and (k, t) otherwise; the ``*0`` fields
    have shape (t,).  ``loo_mse`` and ``loo_mse0`` are None when the state has
    no left factor (streaming engines compute them in a second pass).
    """

    df: np.ndarray
    train_mse: np.ndarray
    gcv: np.ndarray
    loo_mse: np.ndarray | None
    train_mse0: np.ndarray
    gcv0: np.ndarray
    loo_mse0: np.ndarray | None


def criteria(state: FactorState, lam, *, loo: bool = True) -> Criteria:
    """df, training MSE, GCV and (in memory) exact leave-one-out MSE at ``lam``.

    Cost O(r k t), plus O(n r k t) for leave-one-out; no refit.
    """
    lam = _lam(lam)
    n = state.total_weight
    full, added = append_zero(lam)
    sh = shrinkage(state.d, full)
    g = gcv(state, full, sh)
    train = rss(state, full, sh) / n
    df = state.n_fixed + sh.f.sum(axis=0)
    looo = loo0 = None
    if loo and state.u is not None:
        looo, loo0 = loo_mse(state, lam)
    cut = slice(0, -1) if added else slice(None)
    return Criteria(df=df[cut], train_mse=train[cut], gcv=g[cut], loo_mse=looo,
                    train_mse0=state.rss_out / n, gcv0=g[-1], loo_mse0=loo0)


# ------------------------------------------------------------- predictions, test
def project(proj: np.ndarray, gain: np.ndarray, c: np.ndarray) -> np.ndarray:
    """:math:`\\sum_j P_{ij} g_{jk} c_{jt}`, shape (i, k, t), as one matrix product."""
    r, k = gain.shape
    t = c.shape[1]
    gc = (gain[:, :, None] * c[:, None, :]).reshape(r, k * t)
    return (proj @ gc).reshape(proj.shape[0], k, t)


def test_sums(state: FactorState, lam, proj: np.ndarray, yc: np.ndarray):
    """Sums of squared test residuals on the grid (k, t) and at the min-norm limit (t,).

    ``proj`` are the test rows centered and scaled as the training rows, times
    :math:`V` (shape (b, r)); ``yc`` the test responses minus the training mean.
    Divide by the number of test rows for the test MSE.
    """
    lam = _lam(lam)
    full, added = append_zero(lam)
    g = gains(state.d, full)
    t = state.n_targets
    sq = np.empty((full.size, t))
    tb = int(max(1, min(t, LOO_BLOCK_ELEMS // max(proj.shape[0] * full.size, 1))))
    for t0 in range(0, t, tb):  # blocks of targets: no (n_test, k, t) array at once
        cols = slice(t0, min(t0 + tb, t))
        res = yc[:, None, cols] - project(proj, g, state.uty[:, cols])
        sq[:, cols] = np.einsum("ikt,ikt->kt", res, res)
    return (sq[:-1] if added else sq), sq[-1]


@dataclass(frozen=True)
class HeldOutFold:
    """A fit without one fold, and that fold's rows: all its held-out error needs.

    Attributes
    ----------
    state : FactorState
        The factor state of the fit on the other folds (``d``, ``uty``).
    proj : ndarray, shape (b, r)
        The fold's rows, prepared as that fit's training rows, times its :math:`V`.
    yc : ndarray, shape (b, t)
        The fold's responses minus that fit's training mean.
    """

    state: FactorState
    proj: np.ndarray
    yc: np.ndarray


def heldout_mse(fold: HeldOutFold, lam) -> np.ndarray:
    """Held-out mean squared error (k, t) of a refit fold at penalties ``lam``:
    :math:`\\frac1b \\|y_f - P_f \\operatorname{diag}(g_\\lambda) c\\|^2`."""
    pred = project(fold.proj, gains(fold.state.d, lam), fold.state.uty)
    res = fold.yc[:, None, :] - pred
    return np.einsum("ikt,ikt->kt", res, res) / fold.yc.shape[0]


# ------------------------------------------------------------------ coefficients
def coefficients(state: FactorState, lam, design) -> np.ndarray:
    """Coefficients on the original feature scale, shape (k, p, t).

    :math:`\\beta_\\lambda = V \\operatorname{diag}(g)\\, c`, divided by the column
    scales; constant (inactive) columns get 0.
    """
    lam = _lam(lam)
    g = gains(state.d, lam)
    if state.span is not None:
        return _span_coefficients(state, g, design)
    k, t = lam.size, state.n_targets
    act = design.active
    scale = design.x_scale[act]  # divided, not multiplied by 1/scale: a subnormal
    scaled = not np.all(scale == 1.0)  # scale has no finite reciprocal
    if t == 1 and act.all():
        cj = (g * state.uty).T @ state.vt  # (k, p)
        if scaled:
            cj /= scale
        return cj[:, :, None]
    coef = np.zeros((k, design.n_features, t))
    for j in range(t):
        cj = (g * state.uty[:, j:j + 1]).T @ state.vt
        if scaled:
            cj /= scale
        coef[:, act, j] = cj
    return coef


def coefficients_paired(state: FactorState, lam, design, targets=None) -> np.ndarray:
    """Coefficients (original scale) of target ``targets[i]`` at penalty ``lam[i]``, (p, b).

    ``targets`` defaults to every target (then one penalty per target).  Cost
    O(q r b); the (k, p, t) array of :func:`coefficients` is never formed.
    """
    lam = _lam(lam)
    idx = np.arange(state.n_targets) if targets is None else np.asarray(targets).reshape(-1)
    if lam.size != idx.size:
        raise ValueError(f"one penalty per target: {idx.size} targets, {lam.size} penalties")
    g = gains(state.d, lam)  # (r, b)
    c = state.uty[:, idx]
    act = design.active
    coef = np.zeros((design.n_features, idx.size))
    beta = state.vt.T @ (g * c)  # (q, b)
    if state.span is not None:  # the unpenalized columns as in _span_coefficients
        sp = state.span
        rhs = sp.qty[:, idx] - sp.qtx @ beta
        fixed = sla.solve_triangular(sp.r, rhs, check_finite=False) if sp.c else rhs
        unp = design.unpenalized
        if unp is not None and unp.any():
            coef[unp] = fixed[int(sp.intercept):] / design.x_scale[unp][:, None]
    scale = design.x_scale[act]
    coef[act] = beta if np.all(scale == 1.0) else beta / scale[:, None]
    return coef


def path_intercepts(state: FactorState, lam, design) -> np.ndarray:
    """Intercepts :math:`\\bar y - \\bar x^T \\beta_\\lambda`, shape (k, t), from the factors.

    :math:`\\bar x^T \\beta = (V^T(\\bar x/s))^T \\operatorname{diag}(g) c`: O(q r + r k t),
    no coefficients formed (with a span, through :func:`coefficients`).
    """
    lam = _lam(lam)
    if state.span is not None:
        return intercepts(coefficients(state, lam, design), design)
    act = design.active
    xm = design.x_mean[act] / design.x_scale[act]
    w = state.vt @ xm  # (r,)
    g = gains(state.d, lam)  # (r, k)
    return design.y_mean - (g * w[:, None]).T @ state.uty


def _span_coefficients(state: FactorState, g: np.ndarray, design) -> np.ndarray:
    """Coefficients (k, p, t) with a span: penalized ones from the factors, the
    unpenalized ones :math:`R^{-1}(Q_1^T \\tilde y - Q_1^T \\tilde X \\beta)`.

    The span's intercept coefficient is zero up to rounding (the columns and
    the response are weighted-centered first), so :func:`intercepts` applies.
    """
    k, t = g.shape[1], state.n_targets
    beta = np.einsum("rq,rk,rt->qkt", state.vt, g, state.uty)  # (q, k, t)
    fixed = state.span.fixed_coef(beta)[int(state.span.intercept):]  # (c', k, t)
    coef = np.zeros((k, design.n_features, t))
    act, unp = design.active, design.unpenalized
    coef[:, act, :] = np.moveaxis(beta / design.x_scale[act][:, None, None], 0, 1)
    if unp is not None and unp.any():
        coef[:, unp, :] = np.moveaxis(fixed / design.x_scale[unp][:, None, None], 0, 1)
    return coef


def sample_weights(state: FactorState, lam) -> np.ndarray:
    """Weights :math:`a = U \\operatorname{diag}(g/d)\\, c`, shape (m, k, t), in reduced rows.

    The standardized coefficients are :math:`Z^T a` — the form an engine that
    holds the left factor but not the right one (column-blocked wide data) uses;
    :math:`\\lambda = 0` gives the minimum-norm fit, :math:`U D^{-2} c`.
    """
    g = gains(state.d, lam)
    return np.einsum("mr,rk,rt->mkt", state.u, g / state.d[:, None], state.uty)


def min_norm_coefficients(state: FactorState, design):
    """The :math:`\\lambda \\to 0^+` limit: ``(coef (p, t), beta_std (t, q))``.

    ``beta_std`` is :math:`V D^{-1} c` on the scale the penalty acts on (its norm
    is the min-norm coefficient norm); ``coef`` the same on the original scale.
    """
    beta0 = (state.uty / state.d[:, None]).T @ state.vt  # (t, q)
    if state.span is not None:
        return _span_coefficients(state, (1.0 / state.d)[:, None], design)[0], beta0
    coef0 = np.zeros((design.n_features, state.n_targets))
    coef0[design.active] = (beta0 / design.x_scale[design.active]).T
    return coef0, beta0


def intercepts(coef: np.ndarray, design) -> np.ndarray:
    """:math:`\\bar y - \\bar x^T \\beta` for coefficients (..., p, t), shape (..., t)."""
    return design.y_mean - np.einsum("...pt,p->...t", coef, design.x_mean)


def path_coef_norm(state: FactorState, lam) -> np.ndarray:
    """:math:`\\|\\beta_\\lambda\\| = (\\sum_j g_j^2 c_j^2)^{1/2}` on the penalized scale, (k, t)."""
    g = gains(state.d, lam)
    return np.sqrt(np.einsum("rk,rt->kt", np.square(g), np.square(state.uty)))


def coef_norm(beta_std: np.ndarray) -> np.ndarray:
    """Euclidean norm over the last axis, overflow safe."""
    return np.sqrt(_sumsq(np.moveaxis(beta_std, -1, 0)))


# ------------------------------------------------------------------------ K-fold
def reduced_response(state: FactorState) -> np.ndarray:
    """The reduced response :math:`Uc + y_\\perp`, shape (m, t) (in-memory state)."""
    return state.u @ state.uty + state.resid_out


def sample_rows(state: FactorState, idx: np.ndarray, zy: np.ndarray | None = None):
    """Sample rows ``idx`` of :math:`\\tilde U = [1/\\sqrt n,\\ Q[0; U]]` and of the centered response.

    Returns ``(ua (b, ra), yc (b, t))``; the intercept column only with an
    intercept.  ``zy`` is :func:`reduced_response` (computed when not given).
    """
    zy = reduced_response(state) if zy is None else zy
    idx = np.asarray(idx)
    if state.span is not None:
        ub = state.span.to_sample(state.u)[idx]
        yb = state.span.to_sample(zy)[idx]
        return np.hstack([state.span.q1[idx], ub]), yb
    ub = _rows_of(state.u, idx, state.fit_intercept)
    yb = _rows_of(zy, idx, state.fit_intercept)
    return augment_rows(state, ub), yb


def _rows_of(a: np.ndarray, idx: np.ndarray, fit_intercept: bool) -> np.ndarray:
    """Rows ``idx`` of :math:`Q[0; a]` (see :func:`sample_space_blocks`) without forming it."""
    if not fit_intercept:
        return a[idx]
    n = a.shape[0] + 1
    rn = np.sqrt(n)
    colsum = a.sum(axis=0)
    out = np.empty((idx.size,) + a.shape[1:])
    first = idx == 0
    rest = ~first
    out[rest] = a[idx[rest] - 1] - colsum / (n + rn)
    out[first] = -colsum / rn
    return out


def kfold_dual_mse(state: FactorState, idx: np.ndarray, lam, *, weight: float | None = None,
                   chunk_elems: int = 1 << 22) -> np.ndarray:
    """Held-out MSE (k, t) of one fold at full row rank (the dual form).

    The mean is over ``weight`` (the fold's :math:`\\sum_i w_i`; its size by
    default); see :func:`kfold_dual_residuals`.
    """
    idx = np.asarray(idx)
    weight = float(idx.size) if weight is None else float(weight)
    res = kfold_dual_residuals(state, idx, lam, chunk_elems=chunk_elems)
    return np.sum(np.square(res), axis=0) / weight


def kfold_dual_residuals(state: FactorState, idx: np.ndarray, lam, *,
                         chunk_elems: int = 1 << 22) -> np.ndarray:
    """Held-out residuals (b, k, t) of one fold at full row rank (the dual form).

    At full row rank :math:`I - H = \\tilde U S \\tilde U^T` (sample-space
    :math:`\\tilde U` without the ones column) and :math:`e = \\tilde U S c`, so
    with the scaled complements :math:`\\hat s` (module notes) the common
    factor :math:`s_r` cancels:
    :math:`e_{(-f)} = [U_f \\hat S U_f^T]^{-1} U_f \\hat S c` — no subtraction,
    finite at every :math:`\\lambda \\ge 0`, and at 0 the limit of the per-fold
    minimum-norm refits.  The :math:`b \\times b` blocks of all penalties come
    from one product :math:`(k \\times r)(r \\times b^2)` (per penalty when that
    factor would be too large) and a batched solve.
    """
    sh = shrinkage(state.d, lam)
    idx = np.asarray(idx)
    if state.span is not None:
        uf = state.span.to_sample(state.u)[idx]
    else:
        uf = _rows_of(state.u, idx, state.fit_intercept)  # (b, r)
    b, r = uf.shape
    P = (uf[:, None, :] * uf[None, :, :]).reshape(b * b, r).T if r * b * b <= chunk_elems \
        else None
    k, t = sh.lam.size, state.n_targets
    out = np.empty((b, k, t))
    step = max(1, chunk_elems // max(b * b, r * b))
    for s in range(0, k, step):
        w = sh.s_rel[:, s:s + step].T  # (kc, r)
        if P is not None:
            A = (w @ P).reshape(w.shape[0], b, b)
        else:
            A = np.stack([(uf * wk) @ uf.T for wk in w])
        rhs = np.stack([uf @ (wk[:, None] * state.uty) for wk in w])  # (kc, b, t): products
        out[:, s:s + step] = np.moveaxis(np.linalg.solve(A, rhs), 0, 1)
    return out


def fold_factor(ua: np.ndarray, yc: np.ndarray) -> np.ndarray:
    """Triangular factor of one fold's rows :math:`[\\tilde U_f,\\ y_f]` (square, ra + t)."""
    return tsqr([np.hstack([ua, yc])], ua.shape[1] + yc.shape[1])


def kfold_fold_mse(d: np.ndarray, fold_r: np.ndarray, counts: np.ndarray, lam, *,
                   n_fixed: int, rtol: float | None = None) -> np.ndarray:
    """Exact K-fold held-out MSE per fold, shape (K, k, t), from per-fold triangular factors.

    Parameters
    ----------
    d : ndarray, shape (r,)
    fold_r : ndarray, shape (K, ra + t, ra + t)
        :func:`fold_factor` of every fold (``ra = r + n_fixed``; the unpenalized
        columns first: the intercept's :math:`1/\\sqrt n`, or the span's basis).
    counts : ndarray, shape (K,)
        Rows per fold (with row weights, the fold's :math:`\\sum_i w_i`): the
        denominator of its mean error.
    lam : array_like, shape (k,)
    n_fixed : int
        Unpenalized columns (:attr:`FactorState.n_fixed`).
    rtol : float, optional
        Relative tolerance below which a direction of the training folds counts
        as absent (default ``max(sum(counts), r)·eps``).

    Notes
    -----
    The held-out residuals :math:`(I - H_{ff})^{-1} e_f` (Liland, Skogholt &
    Indahl 2024) are those of the refit on the other folds, with the
    preprocessing held fixed.  In the coordinates of the factors that refit is
    :math:`\\min_{a,b} \\|y_O - a/\\sqrt n - U_O D b\\|^2 + \\lambda \\|b\\|^2`,
    solved from :math:`R_O` (the triangular factor of the other folds, merged
    from their factors by prefix and suffix QR) and the SVD
    :math:`R_{O,U} D = P \\Sigma W^T`: every quantity is a square root (the
    complement :math:`\\sum_{g \\ne f} \\tilde U_g^T \\tilde U_g` of the fold is
    never formed as :math:`I - \\tilde U_f^T \\tilde U_f`), so it stays accurate
    as leverages tend to 1, and at :math:`\\lambda = 0` it is the limit of the
    refits (directions the other folds do not see get gain 0).  Cost
    :math:`O(K r^3 + K k r^2 t)`.
    """
    lam = _lam(lam)
    K, w_all, _ = fold_r.shape
    out = np.empty((K, lam.size, w_all - d.size - int(n_fixed)))
    for f, mse in enumerate(kfold_fold_errors(d, fold_r, counts, lam, n_fixed=n_fixed,
                                              rtol=rtol)):
        out[f] = mse
    return out


def kfold_fold_errors(d: np.ndarray, fold_r: np.ndarray, counts: np.ndarray, lam, *,
                      n_fixed: int, rtol: float | None = None):
    """Yield the held-out MSE (k, t) of fold 0, 1, .. K-1 in turn: :func:`kfold_fold_mse`
    one fold at a time (same arguments, same numbers), for a caller that counts folds."""
    lam = _lam(lam)
    r = d.size
    ra = r + int(n_fixed)
    if rtol is None:
        rtol = max(int(np.sum(counts)), r) * _EPS
    for f, Ro in enumerate(_other_factors(fold_r)):
        X = _refit_coords(Ro, d, lam, ra, int(n_fixed), rtol)  # (ra, k, t)
        Rf = fold_r[f]
        fit = np.einsum("ij,jkt->ikt", Rf[:ra, :ra], X)
        res = Rf[:ra, None, ra:] - fit
        rest = np.einsum("it,it->t", Rf[ra:, ra:], Rf[ra:, ra:])
        yield (np.einsum("ikt,ikt->kt", res, res) + rest[None, :]) / counts[f]


def block_sse(coef: np.ndarray, n: int, dmean: np.ndarray, *, m2: np.ndarray | None = None,
              r: np.ndarray | None = None) -> np.ndarray:
    r"""Sum of squared errors (k, t) of a fit on a block of rows, from the block's moments.

    Parameters
    ----------
    coef : ndarray, shape (k, p, t)
        Coefficients on the original scale of a fit whose intercepts are
        :math:`\bar y_o - \bar x_o^T \beta` (means of the rows it was fitted on).
    n : int
        Rows of the block.
    dmean : ndarray, shape (p + t,)
        The block's column means of ``[X | Y]`` minus the fit's means
        :math:`(\bar x_o, \bar y_o)`.
    m2, r : ndarray
        The block's centered cross products of ``[X | Y]`` (p + t square), or
        their triangular factor (``r^T r = m2``, the accurate route).

    Returns
    -------
    ndarray, shape (k, t)

    Notes
    -----
    With :math:`v = (-\beta, e_j)` the residuals of the block are
    :math:`(w_i - \bar w_b)^T v + \delta`, :math:`\delta = (\bar w_b - \bar w_o)^T v`,
    so their sum of squares is :math:`v^T M_b v + n \delta^2` (the cross term
    vanishes: centered rows sum to 0) — :math:`\|R_b v\|^2 + n\delta^2` from
    the triangular factor, a sum of squares without cancellation.  The mean
    offset is formed from the difference of the means, never as
    :math:`\bar y_b - b_0 - \bar x_b^T\beta` with a large intercept.

    Examples
    --------
    >>> import numpy as np
    >>> W = np.array([[0.0, 1.0], [1.0, 2.0], [2.0, 2.0]])
    >>> c = W - W.mean(axis=0)
    >>> coef = np.array([[[0.5]]])  # y = 1 + 0.5 x fitted elsewhere (means 0, 1)
    >>> round(float(block_sse(coef, 3, W.mean(axis=0) - [0.0, 1.0], m2=c.T @ c)[0, 0]), 12)
    0.25
    """
    p = coef.shape[1]
    delta = dmean[None, p:] - np.einsum("p,kpt->kt", dmean[:p], coef)
    if r is not None:
        res = r[:, None, p:] - np.einsum("sp,kpt->skt", r[:, :p], coef)
        quad = np.einsum("skt,skt->kt", res, res)
    else:
        mxx, mxy, myy = m2[:p, :p], m2[:p, p:], np.diag(m2[p:, p:])
        quad = (np.einsum("kpt,pq,kqt->kt", coef, mxx, coef)
                - 2.0 * np.einsum("kpt,pt->kt", coef, mxy) + myy[None, :])
        quad = np.maximum(quad, 0.0)  # a sum of squares; rounding of the Gram route
    return quad + n * np.square(delta)


def _other_factors(fold_r: np.ndarray):
    """Yield the triangular factor of all folds but ``f``, for f = 0 .. K-1 (prefix and
    suffix QR merges: O(K) merges in all)."""
    K, w_all, _ = fold_r.shape
    prefix = [np.zeros((0, w_all))]
    for f in range(K - 1):
        prefix.append(_qr_r(np.vstack([prefix[-1], fold_r[f]]), w_all))
    suffix = [np.zeros((0, w_all))] * K
    for f in range(K - 1, 0, -1):
        suffix[f - 1] = _qr_r(np.vstack([fold_r[f], suffix[f]]), w_all)
    for f in range(K):
        Ro = _qr_r(np.vstack([prefix[f], suffix[f]]), w_all)
        if Ro.shape[0] < w_all:
            Ro = np.vstack([Ro, np.zeros((w_all - Ro.shape[0], w_all))])
        yield Ro


def kfold_residuals(state: FactorState, fold_r: np.ndarray, folds, lam, *,
                    only=None) -> np.ndarray:
    """Held-out residuals (n, k, t) of the refits of :func:`kfold_fold_mse` (in memory).

    ``folds`` lists the row indices of every fold (the order of ``fold_r``);
    rows of folds not in ``only`` get 0.  With row weights, residuals of
    :math:`W^{1/2} y`.
    """
    lam = _lam(lam)
    zy = reduced_response(state)
    ra = state.rank + state.n_fixed
    rtol = max(state.n_samples, state.rank) * _EPS
    out = np.zeros((state.n_samples, lam.size, state.n_targets))
    for f, Ro in enumerate(_other_factors(fold_r)):
        if only is not None and f not in only:
            continue
        X = _refit_coords(Ro, state.d, lam, ra, state.n_fixed, rtol)
        ua, yc = sample_rows(state, folds[f], zy)
        out[folds[f]] = yc[:, None, :] - np.einsum("ij,jkt->ikt", ua, X)
    return out


def _refit_coords(Ro, d, lam, ra, o, rtol):
    """Coefficients (ra, k, t) on :math:`\\tilde U` of the ridge refit with factor ``Ro``.

    The first ``o`` columns are unpenalized: eliminated by back substitution on
    their triangular block after the penalized part is solved.
    """
    t = Ro.shape[1] - ra
    Rg, wg = Ro[o:ra, o:ra], Ro[o:ra, ra:]
    M = Rg * d[None, :]
    P, sig, Wt = np.linalg.svd(M)
    keep = sig > rtol * (sig[0] if sig.size else 0.0)
    sk = np.where(keep, sig, 0.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        g = np.where(keep[:, None], sk[:, None] / (np.square(sk)[:, None] + lam[None, :]), 0.0)
    Pw = P.T @ wg  # (r, t)
    b = np.einsum("jr,rk,rt->jkt", Wt.T, g, Pw)  # (r, k, t)
    xg = d[:, None, None] * b
    X = np.empty((ra, lam.size, t))
    X[o:] = xg
    if o:
        rhs = Ro[:o, ra:][:, None, :] - np.einsum("ij,jkt->ikt", Ro[:o, o:ra], xg)
        X[:o] = sla.solve_triangular(Ro[:o, :o], rhs.reshape(o, -1)).reshape(o, lam.size, t)
    return X


# ------------------------------------------------------- leave-out fits at new rows
def cross_hat(state: FactorState, proj: np.ndarray, lam: float, un: np.ndarray) -> np.ndarray:
    """Cross-hat rows :math:`h(x)` of new rows at penalty ``lam``, shape (b, n).

    ``proj`` holds the new rows in the right singular basis, :math:`a(x) = V^T
    \\tilde x` (centered and scaled like the training rows), ``un`` the
    sample-space left factor.  :math:`h_i(x) = [1/n] + \\sum_j a_j(x)\\,
    d_j/(d_j^2+\\lambda)\\, U_{ij}`, and the full-data prediction is
    :math:`\\hat\\mu(x) = h(x)^T y`.
    """
    h = (proj * gains(state.d, lam)[:, 0]) @ un.T
    if state.fit_intercept:
        h += 1.0 / state.n_samples
    return h


def leave_out_shift(state: FactorState, proj: np.ndarray, lam: float, un: np.ndarray,
                    resid: np.ndarray, labels: np.ndarray) -> np.ndarray:
    """:math:`\\hat\\mu(x) - \\hat\\mu_{(-f)}(x)` for every fold ``f``, shape (b, K).

    Leaving out the rows of fold :math:`f` changes a penalized least-squares fit
    at :math:`x` by :math:`h_f(x)^T (I - H_{ff})^{-1} e_f = h_f(x)^T e_{(-f)}`,
    :math:`e_{(-f)}` the held-out residuals (Woodbury; Sherman–Morrison for one
    row).  The sum over the fold is taken on the factors,
    :math:`\\bar e_f + a(x)^T \\operatorname{diag}(g)\\, U_f^T e_{(-f)}`: O(b r K),
    no (b, n) block.  ``resid`` (n,) holds :math:`y_i - \\hat\\mu_{(-f(i))}(x_i)`,
    ``labels`` (n,) the folds ``0 .. K-1``.
    """
    n = state.n_samples
    E = np.zeros((n, int(labels.max()) + 1))
    E[np.arange(n), labels] = resid
    shift = (proj * gains(state.d, lam)[:, 0]) @ (un.T @ E)
    if state.fit_intercept:
        shift += E.sum(axis=0) / n
    return shift


# ------------------------------------------------------------------------- REML
def _reml_parts(state: FactorState, target):
    """``m`` (contrasts), ``c`` (r, t) and ``B`` (t,), for every target or one."""
    m = state.n_samples - state.n_fixed
    c, out = state.uty, np.asarray(state.rss_out, dtype=float)
    if target is not None:
        c, out = c[:, target:target + 1], out[target:target + 1]
    return m, c, out


def _log1p_ratio(d2: np.ndarray, lam: np.ndarray) -> np.ndarray:
    """:math:`\\log(1 + d_j^2/\\lambda_k)`, shape (r, k), for λ > 0 without overflow."""
    d2c, lamr = d2[:, None], lam[None, :]
    big = lamr >= d2c
    with np.errstate(divide="ignore", over="ignore"):
        return np.where(big, np.log1p(np.where(big, d2c / lamr, 0.0)),
                        np.log(d2c + lamr) - np.log(lamr))


def reml_profile(state: FactorState, lam, *, target: int | None = None) -> np.ndarray:
    """Restricted log-likelihood :math:`\\ell(\\lambda)`, σ² profiled out, shape (k, t).

    :math:`\\ell = -\\tfrac12[m \\log(q/m) + \\sum_j L_j]` with
    :math:`L_j = \\log(1 + d_j^2/\\lambda)` (:math:`\\log\\det H`, :math:`H = I +
    ZZ^T/\\lambda`), :math:`q = r^T H^{-1} r = \\sum_j c_j^2 e^{-L_j} + B`,
    :math:`m` the number of contrasts (n minus the unpenalized parameters), up to
    a constant (Patterson & Thompson 1971; Harville 1977).  For
    :math:`\\lambda \\ge d_r^2` the terms are ``log1p`` and a log-sum-exp; below,
    :math:`q = \\lambda w` is factored out, :math:`m \\log q + \\sum L =
    (m - r)\\log\\lambda + m \\log w + \\sum_j \\log(d_j^2+\\lambda)`, so nothing
    overflows or cancels from :math:`10^{-300}` to :math:`10^{300}`.  ``inf``
    gives the intercept-only limit :math:`-\\tfrac12 m\\log(\\|r\\|^2/m)`; 0 gives
    :math:`-\\infty` when :math:`B > 0` or :math:`r < m`, else the finite limit.
    ``target``: only that target (t = 1).
    """
    lam = np.atleast_1d(np.asarray(lam, dtype=float))
    m, c, outside = _reml_parts(state, target)
    return _reml_core(np.square(state.d), m, lam, c, outside, paired=False)


def reml_paired(state: FactorState, lam, *, targets=None) -> np.ndarray:
    """:func:`reml_profile` of target ``targets[i]`` (default every target) at ``lam[i]``, (b,).

    O(r b); the same closed forms, so the same range (0 to inf) without overflow.
    """
    lam = np.atleast_1d(np.asarray(lam, dtype=float)).reshape(-1)
    idx = np.arange(state.n_targets) if targets is None else np.asarray(targets).reshape(-1)
    if lam.size != idx.size:
        raise ValueError(f"reml_paired needs one penalty per target ({idx.size}); got {lam.size}")
    m = state.n_samples - state.n_fixed
    c, outside = state.uty[:, idx], np.asarray(state.rss_out, dtype=float)[idx]
    return _reml_core(np.square(state.d), m, lam, c, outside, paired=True)


def _logsumexp_cols(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """:math:`\\log \\sum_j b_j e^{a_j}` down the columns, ``b >= 0``: the largest exponent
    with a positive weight is factored out (every term <= its weight), as ``logsumexp``."""
    pos = b > 0
    top = np.max(np.where(pos, a, -np.inf), axis=0)
    top = np.where(np.isfinite(top), top, 0.0)
    total = np.einsum("ij,ij->j", b, np.exp(np.where(pos, a - top, -np.inf)))
    with np.errstate(divide="ignore"):
        return top + np.log(total)


def _reml_core(d2, m, lam, c, outside, *, paired: bool) -> np.ndarray:
    """The profile of :func:`reml_profile`: (k, t) on a grid, or (t,) with ``paired``
    (column ``j`` of ``c`` at ``lam[j]``)."""
    r = d2.size
    out = np.empty(lam.shape if paired else (lam.size, c.shape[1]))
    b = np.concatenate([np.square(c), outside[None, :]])  # (r+1, t)
    b = b if paired else b[:, None, :]

    def lse(a, sel):  # log sum_j b_j e^{a_j} over the r+1 terms
        return _logsumexp_cols(a, b[:, sel]) if paired else logsumexp(a[:, :, None], b=b,
                                                                       axis=0)

    col = (lambda v: v) if paired else (lambda v: v[:, None])
    big = (lam >= d2[-1]) & np.isfinite(lam)
    if big.any():
        L = _log1p_ratio(d2, lam[big])  # (r, kb)
        logq = lse(np.concatenate([-L, np.zeros((1, L.shape[1]))]), big)
        out[big] = -0.5 * (m * (logq - np.log(m)) + col(L.sum(axis=0)))
    small = (lam > 0) & (lam < d2[-1])
    if small.any():
        ls = lam[small]
        logden = np.log(d2[:, None] + ls[None, :])  # (r, ks)
        logw = lse(np.concatenate([-logden, -np.log(ls)[None, :]]), small)
        out[small] = -0.5 * (m * (logw - np.log(m))
                             + col((m - r) * np.log(ls) + logden.sum(axis=0)))
    total = -0.5 * m * np.log((np.sum(np.square(c), axis=0) + outside) / m)  # lambda -> inf
    inf = np.isinf(lam)
    if inf.any():
        out[inf] = total[inf] if paired else total
    zero = lam == 0
    if zero.any():
        s = np.sum(np.square(c) * (d2[-1] / d2)[:, None], axis=0)  # scaled by d_r^2
        with np.errstate(divide="ignore"):
            at0 = -0.5 * (m * (np.log(s / m) - np.log(d2[-1])) + np.sum(np.log(d2)))
        dead = (outside > 0) if paired else np.full(c.shape[1], bool(outside.any()))
        at0 = np.where(dead | (r < m), -np.inf, at0)
        out[zero] = at0[zero] if paired else at0
    return out


def reml_variances(state: FactorState, lam: float, target: int = 0) -> tuple[float, float]:
    """``(noise variance, signal variance)`` of the random-effects model at ``lam``.

    :math:`\\hat\\sigma^2 = r^T H^{-1} r/m` and :math:`\\hat\\sigma^2 \\sum_j
    d_j^2/(\\lambda m)`; at ``inf`` the signal variance is 0; at 0 (full row
    rank) the noise variance is 0 and the signal variance its limit
    :math:`\\sum_j c_j^2 d_j^{-2} \\sum_j d_j^2/m^2`.
    """
    m, c, outside = _reml_parts(state, target)
    d2 = np.square(state.d)
    cj, out = c[:, 0], float(outside[0])
    if np.isinf(lam):
        return float((cj @ cj + out) / m), 0.0
    if lam == 0:
        if out > 0 or d2.size < m:
            return out / max(m - d2.size, 1), 0.0
        return 0.0, float(np.sum(np.square(cj) / d2) * np.sum(d2)) / m ** 2
    sigma2 = float(np.sum(np.square(cj) * (lam / (d2 + lam))) + out) / m
    return sigma2, sigma2 * float(np.sum(d2)) / (lam * m)
