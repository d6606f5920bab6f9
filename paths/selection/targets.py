"""Penalties for many targets at once: every rule, per target, vectorized over targets.

One factorization serves every target (the projections :math:`C = U^T Y` are
r × t); every criterion is a (k, t) matrix of the path, and each rule's choice
is found for all targets together:

- ``gcv`` and ``loo``: the grid minimum of each target, then golden-section
  search on :math:`\\log\\lambda` between its neighbours, all targets in one
  step (each step evaluates target ``j`` at its own penalty: O(r t) for GCV,
  O(n r t) for leave-one-out, :func:`paths.core.algebra.gcv_paired` and
  :func:`paths.core.algebra.loo_paired`), down to a bracket of
  :data:`COARSE` in :math:`\\log\\lambda`, then one step to the vertex of the
  parabola through the best three points; the best point evaluated is kept.
  A minimum at an edge of the grid extends the grid half a decade a step, up
  to 12 decades, as :func:`paths.selection.rules.select_penalty` does.
- ``cv`` and ``one-se``: K-fold errors have no per-target form, so the refinement
  is on a fine grid (:data:`FINE` log-spaced penalties inside every bracket any
  target needs, evaluated once for all targets).
- ``df``: the same penalty for every target; ``fraction``: bisection on
  :math:`\\log\\lambda` for all targets at once; ``hkb``, ``lw``, ``isotropic``:
  closed forms; ``reml``: the profile on a grid, golden section, and the
  likelihood-ratio interval by bisection, all vectorized.

The result, :class:`TargetSelection`, holds one :class:`RuleChoices` (arrays of
length t) per rule; :meth:`TargetSelection.report` gives the per-target
:class:`~paths.selection.rules.SelectionReport` of ``select_penalty``.

References
----------
Kiefer, J. (1953). Sequential minimax search for a maximum. *Proc. Amer. Math.
Soc.* 4, 502–506 (golden-section search).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from paths.core import algebra
from paths.core.grid import lambda_for_df
from paths.data.validation import InputError
from paths.selection.rules import (RemlSelection, Selection, SelectionReport, check_selection,
                                   noise_variance, setting_note)

__all__ = ["COARSE", "FINE", "RuleChoices", "TargetSelection", "Minima", "minimize_targets",
           "select_targets"]

#: golden-section search stops at this bracket width in log(lambda) (then a parabola step)
COARSE = 1e-3
#: penalties per bracket of the fine grid (K-fold rules; each costs a K-fold grid column
#: for every target, so few)
FINE = 6
_CV_CHUNK = 32  # penalties per K-fold evaluation (bounds its held-out residual blocks)
_INV_PHI = (np.sqrt(5.0) - 1.0) / 2.0
_N_EXTEND = 24  # up to 12 decades beyond the edge, half a decade a step
_CHI2_1_95 = 3.841458820694124  # 0.95 quantile of chi-square(1) (scipy.stats.chi2.ppf)
_CV_EST_TARGETS = 64  # up to this many targets, K-fold estimates at every rule's choice


# ---------------------------------------------------------------------- minimize
@dataclass(frozen=True)
class Minima:
    """Per-target minima of a criterion (arrays of length t).

    Attributes
    ----------
    lam, value : ndarray
        The refined penalty and the criterion there (the best point evaluated).
    index : ndarray of int
        Grid index (in the grid's own order) of the grid minimum.
    refined, extended : ndarray of bool
    notes : tuple of str
    """

    lam: np.ndarray
    value: np.ndarray
    index: np.ndarray
    refined: np.ndarray
    extended: np.ndarray
    notes: tuple


def minimize_targets(grid_fn, lambdas, values, paired_fn=None) -> Minima:
    """Minimize a criterion given on a grid, for every target at once.

    Parameters
    ----------
    grid_fn : callable
        ``grid_fn(lams (m,), idx (b,)) -> (m, b)``: the criterion of targets
        ``idx`` at the penalties ``lams``.
    lambdas : array_like, shape (k,)
    values : array_like, shape (k, t)
    paired_fn : callable, optional
        ``paired_fn(lam (b,), idx (b,)) -> (b,)``: target ``idx[i]`` at
        ``lam[i]``.  With it, golden section (then a parabola step); without,
        a fine grid in each bracket.

    Returns
    -------
    Minima
    """
    lam = np.asarray(lambdas, dtype=float)
    vals = np.asarray(values, dtype=float).reshape(lam.size, -1)
    order = np.argsort(lam)
    ls, vs = lam[order], vals[order]
    k, t = vs.shape
    cols = np.arange(t)
    i = np.argmin(vs, axis=0)
    st = dict(lam=ls[i].copy(), value=vs[i, cols].copy(), lo=np.zeros(t), hi=np.zeros(t),
              flo=np.zeros(t), fhi=np.zeros(t), active=np.ones(t, bool),
              extended=np.zeros(t, bool), notes=[""] * t)
    if k == 1:
        st["notes"] = ["single penalty: nothing to refine"] * t
        st["active"][:] = False
    else:
        inner = i < k - 1
        inner &= (i > 0) | (ls[0] == 0)
        lo_i = np.maximum(i - 1, 0)
        hi_i = np.where(i == 0, 1, i + 1)
        for key, src in (("lo", ls[lo_i]), ("hi", ls[np.minimum(hi_i, k - 1)])):
            st[key] = np.where(inner, src, 0.0)
        st["flo"] = np.where(inner, vs[lo_i, cols], 0.0)
        st["fhi"] = np.where(inner, vs[np.minimum(hi_i, k - 1), cols], 0.0)
        for up in (True, False):
            edge = np.flatnonzero((i == k - 1) if up else ((i == 0) & (ls[0] > 0)))
            if edge.size:
                _extend(st, grid_fn, ls, vs, i, edge, up)
        pos = ls[ls > 0]
        small = st["active"] & (st["lo"] <= 0)
        st["lo"][small] = (np.minimum(pos.min(), st["hi"][small]) * 1e-3 if pos.size
                           else st["hi"][small] * 1e-12)
        if small.any():  # the bracket's lower end moved off 0: evaluate it there
            st["flo"][small] = _at(grid_fn, paired_fn, st["lo"][small], np.flatnonzero(small))
    act = np.flatnonzero(st["active"])
    if act.size:
        refine = _golden if paired_fn is not None else _fine_grid
        lam_r, val_r = refine(grid_fn, paired_fn, st, act)
        better = val_r <= st["value"][act]
        st["lam"][act[better]] = lam_r[better]
        st["value"][act[better]] = val_r[better]
    refined = st["active"].copy()
    return Minima(lam=st["lam"], value=st["value"], index=order[i], refined=refined,
                  extended=st["extended"], notes=tuple(st["notes"]))


def _at(grid_fn, paired_fn, lam, idx):
    """The criterion of targets ``idx`` each at its own penalty ``lam``."""
    if paired_fn is not None:
        return np.asarray(paired_fn(lam, idx), dtype=float)
    out = np.empty(idx.size)
    for u in np.unique(lam):
        sel = lam == u
        out[sel] = grid_fn(np.array([u]), idx[sel])[0]
    return out


def _extend(st, grid_fn, ls, vs, i, edge, up):
    """Extend the grid past its edge for targets ``edge`` (see :func:`minimize_targets`)."""
    k = ls.size
    steps = 10.0 ** (0.5 * np.arange(1, _N_EXTEND + 1))
    e = k - 1 if up else 0
    nb = k - 2 if up else 1
    ext = ls[e] * steps if up else ls[e] / steps
    ev = np.asarray(grid_fn(ext, edge), dtype=float).reshape(ext.size, edge.size)
    seq_l = np.concatenate([[ls[nb], ls[e]], ext])
    seq_v = np.vstack([vs[nb, edge], vs[e, edge], ev])  # (m + 2, b)
    rise = np.diff(seq_v[1:], axis=0) > 1e-9 * np.abs(seq_v[2:])
    has = rise.any(axis=0)
    first = np.argmax(rise, axis=0) + 1  # seq index of the bracketed minimum
    st["extended"][edge] = True
    for pos, j in enumerate(edge):
        if has[pos]:
            jj = first[pos]
            a, b = seq_l[jj - 1], seq_l[jj + 1]
            fa, fb = seq_v[jj - 1, pos], seq_v[jj + 1, pos]
            if a > b:
                a, b, fa, fb = b, a, fb, fa
            st["lo"][j], st["hi"][j], st["flo"][j], st["fhi"][j] = a, b, fa, fb
            st["lam"][j], st["value"][j] = seq_l[jj], seq_v[jj, pos]
            st["notes"][j] = (f"the grid minimum was at the {'largest' if up else 'smallest'} "
                              f"penalty; the grid was extended to lambda = {seq_l[jj + 1]:.3g} "
                              "to bracket it")
            continue
        st["active"][j] = False
        kk = int(np.argmin(seq_v[:, pos]))
        st["lam"][j], st["value"][j] = seq_l[kk], seq_v[kk, pos]
        st["notes"][j] = (f"criterion still decreasing at lambda = {ext[-1]:.3g} (grid "
                          "extended 12 decades): the intercept-only model is preferred")
    if up:
        return
    still = np.array([not has[pos] for pos in range(edge.size)])
    if still.any():
        sub = edge[still]
        v0 = np.asarray(grid_fn(np.array([0.0]), sub), dtype=float).reshape(-1)
        for pos, j in enumerate(sub):
            if v0[pos] <= st["value"][j] * (1 + 1e-9):
                st["lam"][j], st["value"][j] = 0.0, v0[pos]
                st["notes"][j] = ("criterion decreases all the way to the minimum-norm limit "
                                  "lambda -> 0+ (grid extended 12 decades down)")
            else:
                st["notes"][j] = f"criterion still decreasing at lambda = {ext[-1]:.3g}"


def _golden(grid_fn, paired_fn, st, act):
    """Golden section on log(lambda) for targets ``act`` down to :data:`COARSE`, then the
    vertex of the parabola through the best three points; returns (lam, value)."""
    a, b = np.log(st["lo"][act]), np.log(st["hi"][act])
    fa, fb = st["flo"][act].copy(), st["fhi"][act].copy()
    c = b - _INV_PHI * (b - a)
    d = a + _INV_PHI * (b - a)
    fc, fd = paired_fn(np.exp(c), act), paired_fn(np.exp(d), act)
    for _ in range(200):
        if np.max(b - a) <= COARSE:
            break
        left = fc < fd  # the minimum is in [a, d]
        b, fb = np.where(left, d, b), np.where(left, fd, fb)
        a, fa = np.where(left, a, c), np.where(left, fa, fc)
        x = np.where(left, b - _INV_PHI * (b - a), a + _INV_PHI * (b - a))
        fx = paired_fn(np.exp(x), act)
        c, d, fc, fd = (np.where(left, x, d), np.where(left, c, x),
                        np.where(left, fx, fd), np.where(left, fc, fx))
    left = fc < fd
    x0, x1, x2 = np.where(left, a, c), np.where(left, c, d), np.where(left, d, b)
    f0, f1, f2 = np.where(left, fa, fc), np.where(left, fc, fd), np.where(left, fd, fb)
    num = (x1 - x0) ** 2 * (f1 - f2) - (x1 - x2) ** 2 * (f1 - f0)
    den = (x1 - x0) * (f1 - f2) - (x1 - x2) * (f1 - f0)
    with np.errstate(divide="ignore", invalid="ignore"):
        xv = x1 - 0.5 * num / den
    xv = np.where(np.isfinite(xv), np.clip(xv, x0, x2), x1)
    fv = paired_fn(np.exp(xv), act)
    cand_x = np.stack([c, d, xv])
    cand_f = np.stack([fc, fd, fv])
    best = np.argmin(cand_f, axis=0)
    cols = np.arange(act.size)
    return np.exp(cand_x[best, cols]), cand_f[best, cols]


def _fine_grid(grid_fn, paired_fn, st, act):
    """:data:`FINE` log-spaced penalties inside each target's bracket (shared between
    targets with the same bracket), evaluated once; returns (lam, value) of the best."""
    lo, hi = st["lo"][act], st["hi"][act]
    pairs, inv = np.unique(np.stack([lo, hi], axis=1), axis=0, return_inverse=True)
    inv = np.asarray(inv).reshape(-1)
    pts = np.concatenate([np.geomspace(a, b, FINE + 2)[1:-1] for a, b in pairs])
    vals = np.asarray(grid_fn(pts, act), dtype=float).reshape(len(pairs), FINE, act.size)
    cols = np.arange(act.size)
    mine = vals[inv, :, cols]  # (b, FINE): each target on its own bracket
    j = np.argmin(mine, axis=1)
    return pts.reshape(len(pairs), FINE)[inv, j], mine[cols, j]


# ----------------------------------------------------------------------- results
@dataclass(frozen=True)
class RuleChoices:
    """One rule's choice for every target (arrays of length t).

    Attributes
    ----------
    rule : str
    lam : ndarray
        The penalty per target (NaN where the rule does not apply, see ``notes``).
    df, fraction : ndarray
        :math:`\\operatorname{tr} H_\\lambda` (intercept included) and
        :math:`\\|\\beta_\\lambda\\|/\\|\\beta^+\\|` at the choice.
    est_mse, est_se : ndarray
        Estimated test MSE and its standard error (NaN where none exists).
    est_source : tuple of str or None
        ``"gcv"``, ``"loo"`` or ``"cv"`` per target.
    index : ndarray of int
        Grid index of the grid choice (-1 for rules without a grid).
    refined, extended : ndarray of bool
    notes : tuple of str
    extra : dict
        Further per-target arrays (``reml``: ``noise_variance``,
        ``signal_variance``, ``variance_explained``, ``lam_low``, ``lam_high``,
        ``loglik``).
    """

    rule: str
    lam: np.ndarray
    df: np.ndarray
    fraction: np.ndarray
    est_mse: np.ndarray
    est_se: np.ndarray
    est_source: tuple
    index: np.ndarray
    refined: np.ndarray
    extended: np.ndarray
    notes: tuple
    extra: dict

    def selection(self, j: int) -> Selection:
        """Target ``j``'s choice as a :class:`~paths.selection.rules.Selection`."""
        def num(a):
            v = float(a[j])
            return None if not np.isfinite(v) else v

        lam = num(self.lam)
        base = dict(rule=self.rule, lam=lam, target=j, note=self.notes[j])
        if lam is not None:
            base.update(df=num(self.df), fraction=num(self.fraction), est_mse=num(self.est_mse),
                        est_se=num(self.est_se), est_source=self.est_source[j],
                        index=None if self.index[j] < 0 else int(self.index[j]),
                        refined=bool(self.refined[j]), extended=bool(self.extended[j]))
        if self.rule != "reml":
            return Selection(**base)
        ex = {key: (None if not np.isfinite(v[j]) else float(v[j]))
              for key, v in self.extra.items() if key not in ("lam_low", "lam_high")}
        interval = None
        if lam is not None:
            interval = (float(self.extra["lam_low"][j]), float(self.extra["lam_high"][j]))
        return RemlSelection(**base, lam_interval=interval, **ex)


@dataclass(frozen=True)
class TargetSelection:
    """Every rule's choice for every target, with the noise estimate.

    Attributes
    ----------
    rules : dict
        ``rules[rule]`` is a :class:`RuleChoices`.
    noise : NoiseEstimate
    reported : str
    df_target, fraction_target : float or None
    """

    rules: dict
    noise: object
    reported: str
    df_target: float | None = None
    fraction_target: float | None = None

    @property
    def n_targets(self) -> int:
        return int(next(iter(self.rules.values())).lam.size)

    def chosen_lambdas(self) -> np.ndarray:
        """The reported rule's penalty per target, shape (t,)."""
        return self.rules[self.reported].lam

    def report(self) -> SelectionReport:
        """The same choices as a :class:`~paths.selection.rules.SelectionReport`."""
        per = tuple({rule: ch.selection(j) for rule, ch in self.rules.items()}
                    for j in range(self.n_targets))
        return SelectionReport(per_target=per, noise=self.noise, reported=self.reported,
                               df_target=self.df_target, fraction_target=self.fraction_target)


# ------------------------------------------------------------------------ select
class _CVValues:
    """K-fold errors at any penalties for every target, kept by penalty (so the
    standard error at a chosen penalty is the one computed with its error)."""

    def __init__(self, cv):
        self.cv = cv
        self.seen = {}
        mse = np.asarray(cv.mse, dtype=float).reshape(cv.lambdas.size, -1)
        se = np.asarray(cv.se, dtype=float).reshape(cv.lambdas.size, -1)
        for i, lam in enumerate(np.asarray(cv.lambdas, dtype=float)):
            self.seen[float(lam)] = (mse[i], se[i])

    def grid(self, lams, idx):
        lams = np.asarray(lams, dtype=float).reshape(-1)
        new = np.array(sorted({float(v) for v in lams} - set(self.seen)))
        for s0 in range(0, new.size, _CV_CHUNK):
            part = new[s0:s0 + _CV_CHUNK]
            mse, se = self.cv.at(part)
            mse = np.asarray(mse, dtype=float).reshape(part.size, -1)
            se = np.asarray(se, dtype=float).reshape(part.size, -1)
            for i, lam in enumerate(part):
                self.seen[float(lam)] = (mse[i], se[i])
        return np.stack([self.seen[float(v)][0][idx] for v in lams])

    def paired(self, lam, idx):
        """``(mse, se)`` of target ``idx[i]`` at ``lam[i]``."""
        self.grid(lam, idx[:1])
        mse = np.array([self.seen[float(v)][0][j] for v, j in zip(lam, idx)])
        se = np.array([self.seen[float(v)][1][j] for v, j in zip(lam, idx)])
        return mse, se


def _nan(t):
    return np.full(t, np.nan)


def _choices(path, rule, lam, est, **kw) -> RuleChoices:
    """A :class:`RuleChoices` with df and fraction at ``lam`` (NaN where ``lam`` is)."""
    t = lam.size
    ok = np.isfinite(lam)
    df, frac = _nan(t), _nan(t)
    if ok.any():
        d = path.factorization.d
        df[ok] = path.design.n_fixed + algebra.shrinkage(d, lam[ok]).f.sum(axis=0)
        frac[ok] = _fraction(path, lam[ok], np.flatnonzero(ok))
    mse, se, source = est if est is not None else (_nan(t), _nan(t), (None,) * t)
    fields = dict(index=np.full(t, -1), refined=np.zeros(t, bool), extended=np.zeros(t, bool),
                  notes=("",) * t, extra={})
    fields.update(kw)
    return RuleChoices(rule=rule, lam=lam, df=df, fraction=frac, est_mse=mse, est_se=se,
                       est_source=tuple(source), **fields)


def _fraction(path, lam, idx) -> np.ndarray:
    """:math:`\\|\\beta_{\\lambda_i}\\|/\\|\\beta^+\\|` of target ``idx[i]`` (penalized scale)."""
    d = path.factorization.d
    c = path.uty[:, idx]
    g = algebra.gains(d, lam)  # (r, b)
    full = np.sqrt(np.sum(np.square(c / d[:, None]), axis=0))
    return np.sqrt(np.sum(np.square(g * c), axis=0)) / full


def _fraction_lambdas(path, target: float) -> np.ndarray:
    """Per-target penalty with shrinkage fraction ``target``: bisection on log(lambda)
    for every target at once (the fraction decreases strictly in lambda)."""
    t = path.uty.shape[1]
    if target == 1.0:
        return np.zeros(t)
    d2 = np.square(path.factorization.d)
    lo = np.full(t, np.log(d2[-1]) - 60.0)
    hi = np.full(t, np.log(d2[0]) + 60.0)
    idx = np.arange(t)
    for _ in range(80):  # width 120 + log-range, halved 80 times: far below 1e-12
        mid = 0.5 * (lo + hi)
        above = _fraction(path, np.exp(mid), idx) > target
        lo, hi = np.where(above, mid, lo), np.where(above, hi, mid)
    return np.exp(0.5 * (lo + hi))


# --------------------------------------------------------------------------- REML
def _reml_targets(path, state, estimate) -> RuleChoices:
    """The REML maximum of every target (:func:`paths.selection.reml.reml_estimate`,
    vectorized): a 100-point grid from 1e-6 d_r^2 to 1e6 d_1^2, golden section, the
    variance components and the likelihood-ratio interval (bisection)."""
    t = path.uty.shape[1]
    cols = np.arange(t)
    d2 = np.square(state.d)

    def prof(lam, idx):
        return algebra.reml_paired(state, lam, targets=idx)

    grid = np.geomspace(1e-6 * d2[-1], 1e6 * d2[0], 60)
    vals = np.stack([prof(np.full(t, v), cols) for v in grid])  # (K, t)
    i = np.argmax(vals, axis=0)
    lam, top = grid[i], vals[i, cols]
    notes = [""] * t
    at_inf = (i == grid.size - 1) & (prof(np.full(t, np.inf), cols) >= top)
    p0 = prof(np.zeros(t), cols)
    at0 = (i == 0) & (p0 >= vals[0]) & ~at_inf
    for j in np.flatnonzero(at_inf):
        notes[j] = ("the likelihood rises toward lambda -> inf (no signal detected); reported at "
                    f"lambda = {lam[j]:.3g}, 1e6 times the largest squared singular value")
    for j in np.flatnonzero(at0):
        notes[j] = "the likelihood is largest at the minimum-norm limit lambda -> 0+"
    lam, top = np.where(at0, 0.0, lam), np.where(at0, p0, top)
    sub = np.flatnonzero(~(at_inf | at0))
    if sub.size:
        mn = minimize_targets(
            lambda ls, ii: -np.stack([prof(np.full(ii.size, v), sub[ii]) for v in ls]),
            grid, -vals[:, sub], lambda ls, ii: -prof(ls, sub[ii]))
        lam[sub], top[sub] = mn.lam, -mn.value
    sigma2, signal = _reml_variances(state, lam)
    low, high = _reml_interval(state, prof, lam, top)
    base = ("Patterson & Thompson (1971), Harville (1977); random-effects model")
    for j in range(t):
        share = signal[j] / (signal[j] + sigma2[j])
        notes[j] = "; ".join(x for x in (
            base, f"noise variance {sigma2[j]:.4g}, signal variance {signal[j]:.4g} "
                  f"({100 * share:.1f}% of the variance explained); approximate 95% "
                  f"likelihood-ratio interval for lambda [{low[j]:.3g}, {high[j]:.3g}]",
            notes[j]) if x)
    extra = dict(noise_variance=sigma2, signal_variance=signal,
                 variance_explained=signal / (signal + sigma2), lam_low=low, lam_high=high,
                 loglik=top)
    return _choices(path, "reml", lam, estimate(lam), refined=np.ones(t, bool),
                    notes=tuple(notes), extra=extra)


def _reml_variances(state, lam):
    """Noise and signal variances at ``lam`` per target (:func:`paths.core.algebra.reml_variances`)."""
    m = state.n_samples - state.n_fixed
    d2 = np.square(state.d)
    c2 = np.square(state.uty)
    out = np.asarray(state.rss_out, dtype=float)
    fin = np.isfinite(lam) & (lam > 0)
    sigma2 = (np.sum(c2, axis=0) + out) / m  # lambda = inf
    signal = np.zeros(lam.size)
    lf = np.where(fin, lam, 1.0)
    s = lf[None, :] / (d2[:, None] + lf[None, :])
    sig_f = (np.sum(c2 * s, axis=0) + out) / m
    sigma2 = np.where(fin, sig_f, sigma2)
    signal = np.where(fin, sig_f * d2.sum() / (lf * m), signal)
    zero = lam == 0
    if zero.any():
        interp = (out == 0) & (d2.size >= m)
        z_noise = np.where(interp, 0.0, out / max(m - d2.size, 1))
        z_signal = np.where(interp, np.sum(c2 / d2[:, None], axis=0) * d2.sum() / m ** 2, 0.0)
        sigma2 = np.where(zero, z_noise, sigma2)
        signal = np.where(zero, z_signal, signal)
    return sigma2, signal


def _reml_interval(state, prof, lam, top, threshold: float = _CHI2_1_95):
    """Ends of :math:`\\{\\lambda: 2[\\ell(\\hat\\lambda) - \\ell(\\lambda)] \\le \\chi^2_1\\}` per
    target (:func:`paths.selection.reml.reml_interval`, by the Illinois method on log(lambda))."""
    t = lam.size
    cols = np.arange(t)
    cut = top - 0.5 * threshold
    d2 = np.square(state.d)
    span = np.log(d2[0] / d2[-1]) + 60.0
    ends = []
    for direction, limit in ((-1.0, 0.0), (1.0, np.inf)):
        end = np.full(t, limit)
        todo = (lam != limit) & (prof(np.full(t, limit), cols) < cut)
        end[lam == limit] = limit
        idx = np.flatnonzero(todo)
        if idx.size:
            t0 = np.log(np.where(lam[idx] > 0, lam[idx], 1e-6 * d2[-1]))
            t1 = t0.copy()
            inside = np.ones(idx.size, bool)
            while True:  # step out until the profile drops below the cut
                inside = prof(np.exp(t1), idx) >= cut[idx]
                more = inside & (np.abs(t1 - t0) < span)
                if not more.any():
                    break
                t1 = np.where(more, t1 + direction * 2.0, t1)
            found = _illinois(lambda x, ii: prof(np.exp(x), idx[ii]) - cut[idx[ii]],
                              t1 - direction * 2.0, t1)
            end[idx] = np.where(inside, limit, np.exp(found))
        ends.append(end)
    return ends[0], ends[1]


# ------------------------------------------------------------------------ select
def select_targets(path, cv=None, *, df_target: float | None = None,
                   fraction_target: float | None = None,
                   reported: str | None = None) -> TargetSelection:
    """Every selection rule for every target of a path, vectorized over targets.

    The arguments and the rules are those of
    :func:`paths.selection.rules.select_penalty`, which calls this for several
    targets; the K-fold rules (``cv``, ``one-se``) are refined on a fine grid,
    the others as the module notes say.  With more than 64 targets, the
    test-error estimate of the rules without their own criterion is exact
    leave-one-out (``est_source`` says so), not K-fold: the K-fold error at t
    different penalties costs t times a grid column.

    Returns
    -------
    TargetSelection

    Examples
    --------
    >>> import numpy as np
    >>> from paths import fit_path
    >>> rng = np.random.default_rng(0)
    >>> X = rng.standard_normal((40, 80)); Y = X[:, :3] + rng.standard_normal((40, 3))
    >>> sel = select_targets(fit_path(X, Y))
    >>> sel.rules["loo"].lam.shape, sel.reported
    ((3,), 'gcv')
    """
    reported, df_target, fraction_target = check_selection(path, cv, df_target,
                                                           fraction_target, reported)
    state = path.state
    if state is None or state.u is None:
        raise InputError("per-target selection needs the left factor, which this engine does "
                         "not keep; use select_penalty")
    t = path.uty.shape[1]
    every = np.arange(t)
    lams = np.asarray(path.lambdas, dtype=float)
    g = minimize_targets(lambda ls, idx: algebra.gcv(state, ls)[:, idx], lams,
                         np.asarray(path.gcv).reshape(lams.size, t),
                         lambda ls, idx: algebra.gcv_paired(state, ls, targets=idx))
    noise = noise_variance(path, gcv_lambda=g.lam)
    sig = np.broadcast_to(np.asarray(noise.value, dtype=float), (t,))
    cvv = None if cv is None else _CVValues(cv)

    def estimate(lam):
        mse, se, ok = _nan(t), _nan(t), np.isfinite(lam)
        idx = np.flatnonzero(ok)
        use_cv = cvv is not None and t <= _CV_EST_TARGETS
        m, s = cvv.paired(lam[ok], idx) if use_cv else algebra.loo_paired(state, lam[ok],
                                                                           targets=idx)
        mse[ok], se[ok] = m, s
        return mse, se, tuple(("cv" if use_cv else "loo") if o else None for o in ok)

    def loo_at(ls, idx):
        return algebra.loo_paired(state, ls, targets=idx)[0]

    lo = minimize_targets(lambda ls, idx: np.stack([loo_at(np.full(idx.size, v), idx)
                                                    for v in ls]),
                          lams, np.asarray(path.loo_mse).reshape(lams.size, t), loo_at)
    ones = np.ones(t, bool)
    rules = {"gcv": _choices(path, "gcv", g.lam, (g.value, _nan(t), ("gcv",) * t),
                             index=g.index, refined=ones, extended=g.extended, notes=g.notes)}
    loo_se = algebra.loo_paired(state, lo.lam)[1]
    rules["loo"] = _choices(path, "loo", lo.lam, (lo.value, loo_se, ("loo",) * t),
                            index=lo.index, refined=ones, extended=lo.extended, notes=lo.notes)
    rules.update(_cv_rules(path, cv, cvv, every))
    rules.update(_target_rules(path, state, sig, noise, estimate, df_target, fraction_target))
    rules["reml"] = _reml_targets(path, state, estimate)
    rules = {rule: rules[rule] for rule in ("gcv", "loo", "cv", "one-se", "df", "fraction",
                                            "hkb", "lw", "reml", "isotropic")}
    return TargetSelection(rules=rules, noise=noise, reported=reported, df_target=df_target,
                           fraction_target=fraction_target)


def _cv_rules(path, cv, cvv, every) -> dict:
    """``cv`` and ``one-se`` for every target (fine-grid refinement)."""
    t = every.size
    if cv is None:
        none = ("no K-fold CV computed (no number of folds given)",) * t
        return {rule: _choices(path, rule, _nan(t), None, notes=none) for rule in ("cv", "one-se")}
    cm = minimize_targets(cvv.grid, cv.lambdas, np.asarray(cv.mse).reshape(cv.lambdas.size, t))
    mse_min, se_min = cvv.paired(cm.lam, every)
    reason = (f"{cv.n_folds}-fold {cv.scheme}" + (f" x {cv.repeats} repeats" if cv.repeats > 1
                                                else "") + f", {cv.method} ({cv.form})")
    ones = np.ones(t, bool)
    out = {"cv": _choices(path, "cv", cm.lam, (mse_min, se_min, ("cv",) * t), index=cm.index,
                          refined=ones, extended=cm.extended,
                          notes=tuple("; ".join(x for x in (reason, n) if x) for n in cm.notes))}
    lam = np.asarray(cv.lambdas, dtype=float)
    mse = np.asarray(cv.mse, dtype=float).reshape(lam.size, t)
    thresh = mse_min + se_min
    ok = (mse <= thresh[None, :]) & (lam[:, None] >= cm.lam[None, :])
    score = np.where(ok, lam[:, None], -np.inf)
    idx = np.argmax(score, axis=0)
    chosen = np.where(ok.any(axis=0), lam[idx], cm.lam)
    refined = np.zeros(t, bool)
    notes = [f"largest lambda with CV error <= {mse_min[j]:.4g} + {se_min[j]:.4g} (min + 1 SE)"
             for j in range(t)]
    above = lam[None, :] > chosen[:, None]  # (t, k)
    nxt = np.where(above, lam[None, :], np.inf).min(axis=1)
    cross = ok.any(axis=0) & np.isfinite(nxt) & (chosen > 0)
    for j in np.flatnonzero(~ok.any(axis=0)):
        notes[j] += "; no grid penalty above the CV minimum: the minimum reported"
    for j in np.flatnonzero(ok.any(axis=0) & ~np.isfinite(nxt)):
        notes[j] += "; at the largest grid penalty"
    sub = np.flatnonzero(cross)
    if sub.size:  # the crossing, on FINE penalties between the choice and the next one
        pairs, inv = np.unique(np.stack([chosen[sub], nxt[sub]], axis=1), axis=0,
                               return_inverse=True)
        inv = np.asarray(inv).reshape(-1)
        pts = np.concatenate([np.geomspace(a, b, FINE + 2)[1:-1] for a, b in pairs])
        vals = cvv.grid(pts, sub).reshape(len(pairs), FINE, sub.size)
        mine = vals[inv, :, np.arange(sub.size)]  # (b, FINE)
        under = mine <= thresh[sub][:, None]
        # the largest fine penalty still within the threshold, before the first one above
        first_over = np.where((~under).any(axis=1), np.argmax(~under, axis=1), FINE)
        has = first_over > 0
        pick = pts.reshape(len(pairs), FINE)[inv, np.maximum(first_over - 1, 0)]
        chosen[sub[has]] = pick[has]
        refined[sub[has]] = True
        for j in sub[has]:
            notes[j] += f"; crossing refined on a fine grid of {FINE} penalties"
    mse_c, se_c = cvv.paired(chosen, every)
    out["one-se"] = _choices(path, "one-se", chosen, (mse_c, se_c, ("cv",) * t), index=idx,
                             refined=refined, notes=tuple(notes))
    return out


def _target_rules(path, state, sig, noise, estimate, df_target, fraction_target) -> dict:
    """``df``, ``fraction``, ``hkb``, ``lw`` and ``isotropic`` for every target."""
    t = sig.size
    out = {}
    if df_target is None:
        out["df"] = _choices(path, "df", _nan(t), None,
                             notes=("no df target given (rule df=VALUE)",) * t)
    else:
        hi = path.rank + path.design.n_fixed
        lam = 0.0 if df_target == hi else lambda_for_df(path.factorization.d,
                                                       df_target - path.design.n_fixed)
        full = np.full(t, float(lam))
        out["df"] = _choices(path, "df", full, estimate(full),
                             notes=(f"target df {df_target:g}",) * t)
    if fraction_target is None:
        out["fraction"] = _choices(path, "fraction", _nan(t), None,
                                   notes=("no fraction target given (rule fraction=VALUE)",) * t)
    else:
        lam = _fraction_lambdas(path, fraction_target)
        out["fraction"] = _choices(path, "fraction", lam, estimate(lam),
                                   notes=(f"target fraction {fraction_target:g}",) * t)
    note = setting_note(path, noise)
    c, d = path.uty, path.factorization.d
    p = int(path.design.active.sum())
    hkb = p * sig / np.sum(np.square(c / d[:, None]), axis=0)
    lw = path.n_samples * p * sig / np.sum(np.square(c), axis=0)
    for rule, lam, cite in (("hkb", hkb, "Hoerl, Kennard & Baldwin (1975)"),
                            ("lw", lw, "Lawless & Wang (1976)")):
        out[rule] = _choices(path, rule, lam, estimate(lam),
                             notes=("; ".join(x for x in (cite, note) if x),) * t)
    zy = path.design.zy
    var_y = np.einsum("it,it->t", zy, zy) / (path.n_samples - path.design.n_fixed)
    r2 = var_y - sig
    iso = np.where(r2 > 0, p * sig / np.where(r2 > 0, r2, 1.0), np.nan)
    iso_note = "Dobriban & Wager (2018); assumes roughly isotropic standardized features"
    if not path.standardize:
        iso_note += "; features not standardized"
    notes = tuple(iso_note if r2[j] > 0 else iso_note + "; estimated signal variance <= 0 "
                  "(the plug-in says: intercept only)" for j in range(t))
    out["isotropic"] = _choices(path, "isotropic", iso, estimate(iso), notes=notes)
    return out


def _illinois(fun, a, b, *, xtol: float = 1e-12, maxiter: int = 100) -> np.ndarray:
    """Roots of ``fun(x, ii)`` (targets ``ii``) bracketed by ``[a, b]`` (opposite signs),
    every target at once: regula falsi with the Illinois modification, superlinear,
    the bracket kept (Dowell & Jarratt 1971, BIT 11, 168-174)."""
    a, b = np.asarray(a, dtype=float).copy(), np.asarray(b, dtype=float).copy()
    all_ = np.arange(a.size)
    fa, fb = fun(a, all_), fun(b, all_)
    for _ in range(maxiter):
        live = np.flatnonzero((np.abs(b - a) > xtol * (1.0 + np.abs(b))) & (fa != fb))
        if live.size == 0:
            break
        c = b[live] - fb[live] * (b[live] - a[live]) / (fb[live] - fa[live])
        fc = fun(c, live)
        flip = fc * fb[live] < 0  # the root is between b and c: b becomes the other end
        a[live] = np.where(flip, b[live], a[live])
        fa[live] = np.where(flip, fb[live], 0.5 * fa[live])
        b[live], fb[live] = c, fc
        done = fc == 0
        a[live[done]] = c[done]
    return b
