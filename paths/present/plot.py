"""Matplotlib helpers for the ridge path, the spectrum and the interpolation threshold.

Every helper has the signature ``plot_x(result, ax=None, **style) -> Artists``:
it draws on ``ax`` (a new Agg-backed figure when ``None``; pyplot is never
used), and returns an :class:`Artists` record holding the drawn artists by name
and the exact data drawn (:class:`Trace` rows), so that a figure can be saved
as the CSV of what it shows (:func:`paths.figures.save_figure`) and tests can
read the lines back.

The helpers take a :class:`paths.path.RidgePath` or plain mappings and arrays
(a ``summary.json`` record, a ``threshold.csv`` table as a DataFrame or a dict
of columns), and draw whatever is present, skipping what is absent.

Penalty convention on every axis: minimize ``||y - b0 - X beta||^2 +
lambda ||beta||^2`` with ``X`` centered (and standardized when so fitted); the
x axes say so in short (:data:`CONVENTION_SHORT`).

Colours are the colour-blind-safe palette of Okabe & Ito (2008), each paired
with its own line style so that the curves stay distinct in greyscale.

References
----------
Okabe, M. and Ito, K. (2008). Color Universal Design (CUD): how to make figures
and presentations that are friendly to colorblind people. J*Fly, jfly.uni-koeln.de/color.

Marchenko, V. A. and Pastur, L. A. (1967). Distribution of eigenvalues for some
sets of random matrices. *Math. USSR-Sbornik* 1, 457–483.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Mapping

import numpy as np

from paths.core.algebra import fractions, penalized_df
from paths.data.validation import InputError

__all__ = [
    "OKABE_ITO", "STYLES", "RULE_LABELS", "CONVENTION_SHORT", "Trace", "Artists",
    "RULE_FAMILIES", "rule_family", "selections_of", "theory_of", "marchenko_pastur_density",
    "plot_coef_path", "plot_errors", "plot_rule_strip", "interpolation_ratio", "theory_applies",
    "power_of_ten", "unicode_log_ticks", "plot_shrinkage", "plot_spectrum", "plot_reml_profile",
    "plot_variance_share", "plot_threshold", "plot_training_law", "plot_bias_variance",
    "plot_target_penalties",
]

#: Okabe & Ito (2008) colour-blind-safe palette.
OKABE_ITO = {
    "black": "#000000", "orange": "#E69F00", "sky_blue": "#56B4E9",
    "bluish_green": "#009E73", "yellow": "#F0E442", "blue": "#0072B2",
    "vermillion": "#D55E00", "reddish_purple": "#CC79A7",
}
_C = OKABE_ITO

#: One colour + line style + marker per quantity; distinct in greyscale by the dash pattern.
STYLES = {
    "train": dict(color=_C["black"], linestyle="-", marker="o"),
    "gcv": dict(color=_C["orange"], linestyle="--", marker="s"),
    "loo": dict(color=_C["blue"], linestyle="-.", marker="D"),
    "cv": dict(color=_C["bluish_green"], linestyle=(0, (5, 1, 1, 1, 1, 1)), marker="^"),
    "test": dict(color=_C["vermillion"], linestyle=":", marker="v"),
    "one_se": dict(color=_C["reddish_purple"], linestyle=(0, (3, 1, 1, 1)), marker="P"),
    "min_norm": dict(color=_C["vermillion"], linestyle="-", marker="o"),
    "ridge_fixed": dict(color=_C["sky_blue"], linestyle="--", marker="s"),
    "ridge_gcv": dict(color=_C["blue"], linestyle="-.", marker="D"),
    "ridge_oracle": dict(color=_C["bluish_green"], linestyle=(0, (5, 1, 1, 1, 1, 1)), marker="^"),
    "baseline_mean": dict(color="#777777", linestyle=(0, (1, 1)), marker=""),
    "baseline_best_feature": dict(color="#777777", linestyle=(0, (6, 2)), marker=""),
    "theory": dict(color=_C["black"], linestyle=(0, (2, 1)), marker=""),
}
_SEQUENCE = [(_C["blue"], "-"), (_C["vermillion"], "--"), (_C["bluish_green"], "-."),
             (_C["orange"], ":"), (_C["reddish_purple"], (0, (5, 1, 1, 1, 1, 1))),
             (_C["sky_blue"], (0, (3, 1, 1, 1))), (_C["black"], (0, (1, 1))),
             (_C["yellow"], (0, (6, 2)))]

#: Display names of the selection rules (keys as in ``summary.json["selected"]``).
RULE_LABELS = {
    "gcv": "GCV", "loo": "LOO", "cv": "K-fold CV", "one_se": "one-SE", "one-se": "one-SE",
    "df": "target df", "fraction": "target fraction", "hkb": "HKB", "lw": "LW",
    "isotropic": "isotropic plug-in", "test": "test rows (oracle)", "reml": "REML",
    "ml": "ML",
}

#: Rule families, the headings of the rule strip and of the report's rules table.
RULE_FAMILIES = (
    ("prediction-error estimates", ("gcv", "loo", "cv", "one_se", "one-se")),
    ("plug-in constants", ("hkb", "lw", "isotropic")),
    ("targets", ("df", "fraction")),
    ("likelihood", ("reml", "ml")),
    ("oracle (test rows)", ("test",)),
)
#: The curve each prediction-error rule minimises (its marker sits on it).
_RULE_CURVE = {"gcv": "gcv", "loo": "loo", "cv": "cv", "one_se": "cv", "one-se": "cv",
               "test": "test"}
_EXTRA_MARKERS = ("X", "p", "h", "*", "d", "<", ">")

#: Text sizes in points at the saved width (print: nothing below 7 pt).
LABEL_PT = 8.0
TICK_PT = 7.0
NOTE_PT = 7.0
_RULE_STYLE = {"gcv": "gcv", "loo": "loo", "cv": "cv", "one_se": "one_se", "one-se": "one_se",
               "test": "test"}
_METHOD_LABELS = {
    "min_norm": "min-norm / OLS", "ridge_fixed": "ridge, fixed λ", "ridge_gcv": "ridge, GCV λ",
    "ridge_oracle": "ridge, oracle λ (test)", "baseline_mean": "baseline: training mean",
    "baseline_best_feature": "baseline: best single feature",
}

#: The penalty convention, short enough for an axis label.
CONVENTION_SHORT = "loss ‖y − b₀ − Xβ‖² + λ‖β‖²"


@dataclass(frozen=True)
class Trace:
    """One drawn series: what the CSV of a figure records.

    Attributes
    ----------
    series : str
        Its name (a feature, a criterion, a rule, a method).
    kind : str
        ``"line"``, ``"band"``, ``"marker"``, ``"reference"`` (horizontal or
        vertical reference line), ``"bar"`` or ``"histogram"``.
    x, y : ndarray
    low, high : ndarray or None
        Band limits (``kind == "band"``) or error bars.
    """

    series: str
    kind: str
    x: np.ndarray
    y: np.ndarray
    low: np.ndarray | None = None
    high: np.ndarray | None = None


@dataclass(frozen=True)
class Artists:
    """What a plot helper drew.

    Attributes
    ----------
    ax : matplotlib.axes.Axes
    lines : dict
        Series name -> ``Line2D`` (or ``LineCollection`` for unlabelled features).
    markers : dict
        Rule name -> marker ``Line2D`` at the selected penalty.
    refs : dict
        Name -> reference line (``axvline``/``axhline``).
    texts : list
        Labels written on the axes.
    bands : dict
        Series name -> ``PolyCollection`` of a ±1 SE (or repeat) band.
    traces : list of Trace
        Exactly the data drawn.
    x_quantity, y_quantity : str
        The axis labels (quantity and convention).
    notes : list of str
        What was skipped and why.
    """

    ax: Any
    lines: dict = field(default_factory=dict)
    markers: dict = field(default_factory=dict)
    refs: dict = field(default_factory=dict)
    texts: list = field(default_factory=list)
    bands: dict = field(default_factory=dict)
    traces: list = field(default_factory=list)
    x_quantity: str = ""
    y_quantity: str = ""
    notes: list = field(default_factory=list)


# ---------------------------------------------------------------- accessors
def _n_fixed(result) -> int:
    """Unpenalized parameters df counts: the intercept and any unpenalized columns."""
    design = _get(result, "design")
    if design is not None and hasattr(design, "n_fixed"):
        return int(design.n_fixed)
    fixed = _get(result, "n_unpenalized")
    return int(fixed) if fixed is not None else int(bool(_get(result, "fit_intercept", True)))


def _get(obj, name, default=None):
    """``obj[name]`` for mappings, ``obj.name`` otherwise; ``default`` when absent."""
    if obj is None:
        return default
    if isinstance(obj, Mapping):
        return obj.get(name, default)
    return getattr(obj, name, default)


def _first(obj, *names, default=None):
    for n in names:
        v = _get(obj, n)
        if v is not None:
            return v
    return default


def _arr(a, target: int = 0):
    """Float array with the target axis (last, when 2-D per-penalty) dropped."""
    if a is None:
        return None
    a = np.asarray(a, dtype=np.float64)
    if a.ndim == 2:
        a = a[:, target]
    return a


def _new_axes(ax):
    if ax is not None:
        return ax
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(3.5, 2.6), layout="constrained")
    FigureCanvasAgg(fig)
    return fig.add_subplot()


def _style(key, **override):
    s = dict(STYLES.get(key, {}))
    s.update({k: v for k, v in override.items() if v is not None})
    return s


def _line_kw(key, style):
    s = _style(key)
    s.pop("marker", None)
    s.setdefault("linewidth", 1.2)
    s.update(style)
    return s


def _penalty_label(standardize) -> str:
    scale = "X standardized" if standardize else "X centered"
    return f"penalty log₁₀ λ, {scale}" + "\n" + f"({CONVENTION_SHORT})"


def _df_label() -> str:
    return ("effective df = tr H(λ) (incl. intercept)" + "\n"
            + rf"(ridge, {CONVENTION_SHORT})")


def _x_of(result, x: str):
    """The x values of a path and their axis label; ``x`` is ``"log_lambda"`` or ``"df"``."""
    lam = _arr(_get(result, "lambdas"))
    if lam is None:
        raise InputError("the result has no 'lambdas'; pass a RidgePath or a mapping with "
                         "'lambdas' (and 'df')")
    if x in ("log_lambda", "lambda", "loglambda"):
        with np.errstate(divide="ignore"):
            xv = np.where(lam > 0, np.log10(np.where(lam > 0, lam, 1.0)), np.nan)
        return xv, _penalty_label(_get(result, "standardize", True))
    if x == "df":
        df = _arr(_get(result, "df"))
        if df is None:
            raise InputError("x='df' needs the result's 'df'; pass a RidgePath or include 'df'")
        return df, _df_label()
    raise InputError(f"x must be 'log_lambda' or 'df'; got {x!r}")


def _x_of_penalty(result, lam: float, df: float | None, x: str) -> float:
    if x == "df":
        if df is not None:
            return float(df)
        d = _arr(_get(result, "singular_values"))
        if d is None:
            return float("nan")
        return float(_n_fixed(result)) + float(penalized_df(d, lam))
    return float(np.log10(lam)) if lam > 0 else float("nan")


def selections_of(result, selected=None, *, target: int = 0) -> dict:
    """The selected penalties to mark, as ``{rule: {"lambda", "df", "index"?}}``.

    Parameters
    ----------
    result : RidgePath or mapping
    selected : mapping, optional
        ``{rule: {"lambda": ..., "df": ...}}`` (the ``summary.json`` form), or
        ``{rule: float}``, or objects with ``lambda_``/``lam`` attributes.  Default:
        ``result["selected"]`` for a mapping; for a path, the grid minima of GCV
        and LOO (and of the test error, as an oracle, when a test set is present).
    """
    if selected is None:
        selected = _get(result, "selected")
    if selected is None and hasattr(result, "index_min"):
        selected = {}
        for rule in ("gcv", "loo") + (("test",) if _get(result, "test_mse") is not None else ()):
            i = result.index_min(rule, target)
            selected[rule] = {"lambda": float(result.lambdas[i]), "df": float(result.df[i]),
                              "index": i}
    out = {}
    for rule, sel in (selected or {}).items():
        if isinstance(sel, (int, float, np.floating, np.integer)):
            lam, df, idx = float(sel), None, None
        else:
            lam = _first(sel, "lambda", "lambda_", "lam", "alpha")
            if lam is None:
                continue
            lam = float(np.asarray(lam, dtype=float).ravel()[min(target, np.size(lam) - 1)])
            df = _get(sel, "df")
            df = None if df is None else float(np.asarray(df, dtype=float).ravel()[0])
            idx = _get(sel, "index")
        out[str(rule)] = {"lambda": lam, "df": df, "index": idx}
    return out


def _rule_label(rule: str) -> str:
    return RULE_LABELS.get(rule, rule)


def rule_family(rule: str) -> str:
    """The family heading a rule is listed under (:data:`RULE_FAMILIES`); ``"other"`` if none."""
    for family, rules in RULE_FAMILIES:
        if rule in rules:
            return family
    return "other"


def _rule_color(rule: str, k: int):
    key = _RULE_STYLE.get(rule)
    if key is not None:
        return STYLES[key]["color"], STYLES[key]["marker"]
    c, _ = _SEQUENCE[(k + 3) % len(_SEQUENCE)]
    return c, _EXTRA_MARKERS[k % len(_EXTRA_MARKERS)]


_SUPERSCRIPT = str.maketrans("0123456789-", "⁰¹²³⁴⁵⁶⁷⁸⁹⁻")


def power_of_ten(k) -> str:
    """``10ᵏ`` in plain Unicode (superscript glyphs of the text font: no math-text scripts
    below the label size)."""
    return "10" + str(int(k)).translate(_SUPERSCRIPT)


def unicode_log_ticks(fig) -> None:
    """Label every log axis of ``fig`` at its decades as ``10ᵏ`` (:func:`power_of_ten`)."""
    from matplotlib.ticker import FuncFormatter, LogLocator, NullFormatter

    def label(v, _pos=None):
        if v <= 0:
            return ""
        k = np.log10(v)
        return power_of_ten(round(k)) if abs(k - round(k)) < 1e-9 else ""

    for ax in fig.get_axes():
        for axis, scale in ((ax.xaxis, ax.get_xscale()), (ax.yaxis, ax.get_yscale())):
            if scale == "log" and not isinstance(axis.get_major_formatter(),
                                                 _scalar_formatter_type()):
                axis.set_major_locator(LogLocator(base=10))
                axis.set_major_formatter(FuncFormatter(label))
                axis.set_minor_formatter(NullFormatter())


def _scalar_formatter_type():
    from matplotlib.ticker import ScalarFormatter

    return ScalarFormatter


def _log_df(xv) -> bool:
    """A log df axis when df spans more than a factor 6 (the choice then sits in the left
    sixth of a linear axis); common practice for ranges over an order of magnitude, no source."""
    v = np.asarray(xv, dtype=float)
    v = v[np.isfinite(v) & (v > 0)]
    return v.size > 1 and v.max() / v.min() > 6.0


def _set_x_scale(ax, xv, x):
    """Log df axis for a wide df range; a log-λ axis runs from large to small λ, so on both
    axes the model grows to the right and λ → 0 is the right end."""
    if x != "df":
        if not ax.xaxis_inverted():
            ax.invert_xaxis()
        return
    if _log_df(xv):
        ax.set_xscale("log")
        from matplotlib.ticker import LogLocator, NullFormatter, ScalarFormatter

        ax.xaxis.set_major_locator(LogLocator(base=10, subs=(1.0, 2.0, 5.0)))
        ax.xaxis.set_major_formatter(ScalarFormatter())
        ax.xaxis.set_minor_formatter(NullFormatter())


def _xfrac(ax, xs) -> np.ndarray:
    """Axis-fraction positions of data x values (respecting a log scale)."""
    xs = np.atleast_1d(np.asarray(xs, dtype=float))
    pts = np.column_stack([xs, np.ones_like(xs)])
    return ax.transLimits.transform(ax.transScale.transform(pts))[:, 0]


def _lambda_of_x(result, xs, x):
    """The penalty at axis position(s) ``xs`` (log10 λ, or df by the closed form on d)."""
    if x != "df":
        return 10.0 ** np.asarray(xs, dtype=float)
    lam = _arr(_get(result, "lambdas"))
    df = _arr(_get(result, "df"))
    order = np.argsort(df)
    with np.errstate(divide="ignore"):
        return 10.0 ** np.interp(xs, df[order], np.log10(lam[order]))


def _min_norm_x(result, xv, x) -> float:
    """Where λ → 0 is drawn: at its df (rank + intercept) on a df axis, at the left edge of
    a log-λ axis (where it cannot be placed; an axis-break note says so)."""
    if x == "df":
        mn = _get(result, "min_norm")
        df0 = _get(mn, "df")
        if df0 is None:
            d = _arr(_get(result, "singular_values"))
            if d is None:
                return float(np.nanmax(xv))
            df0 = float(_n_fixed(result)) + float(np.sum(d > 0))
        return float(df0)
    lo, hi = float(np.nanmin(xv)), float(np.nanmax(xv))
    return lo - 0.07 * (hi - lo)


def _lambda_axis(art: Artists, result, x: str, x0=None):
    """A secondary axis on top giving λ at decades (and 0 at the min-norm end ``x0``), when
    the main x axis is effective df.  Ticks closer than 9% of the axis width to a kept one
    are dropped, so labels never touch."""
    if x != "df":
        return None
    ax = art.ax
    lam = _arr(_get(result, "lambdas"))
    df = _arr(_get(result, "df"))
    good = lam > 0
    if good.sum() < 2:
        return None
    ll, dd = np.log10(lam[good]), df[good]
    order = np.argsort(ll)
    ll, dd = ll[order], dd[order]
    decades = np.arange(np.ceil(ll.min()), np.floor(ll.max()) + 1)
    xs = np.interp(decades, ll, dd)
    cand = [(float(xp), power_of_ten(k), 10.0 ** k) for xp, k in zip(xs, decades)]
    kept = []
    if x0 is not None:
        kept.append((float(x0), "0", 0.0))
    for item in sorted(cand, key=lambda c: -c[0]):
        f = _xfrac(ax, item[0])[0]
        if all(abs(f - _xfrac(ax, k[0])[0]) >= 0.09 for k in kept) and 0 <= f <= 1:
            kept.append(item)
    kept.sort()
    sec = ax.secondary_xaxis("top")
    sec.set_xticks([k[0] for k in kept], [k[1] for k in kept])
    sec.xaxis.set_minor_locator(_null_locator())
    sec.tick_params(labelsize=TICK_PT, length=2.5, width=0.6, pad=1.5)
    sec.set_xlabel("penalty λ (0: min-norm fit)" if x0 is not None
                   else "penalty λ", fontsize=LABEL_PT, labelpad=2)
    art.texts.append(sec)
    art.traces.append(Trace("lambda_axis", "axis", np.asarray([k[0] for k in kept]),
                            np.asarray([k[2] for k in kept])))
    return sec


def _place_labels(ys, lo, hi, min_gap):
    """Spread label positions (data units, sorted) so neighbours are ``min_gap`` apart, inside
    [lo, hi]; returns the positions in the input order."""
    ys = np.asarray(ys, dtype=float)
    order = np.argsort(ys)
    pos = ys[order].copy()
    for i in range(1, pos.size):
        pos[i] = max(pos[i], pos[i - 1] + min_gap)
    if pos.size and pos[-1] > hi:
        pos -= pos[-1] - hi
        for i in range(pos.size - 2, -1, -1):
            pos[i] = min(pos[i], pos[i + 1] - min_gap)
    pos = np.maximum(pos, lo) if pos.size and pos[0] < lo else pos
    out = np.empty_like(pos)
    out[order] = pos
    return out


def _axes_height_pt(ax) -> float:
    fig = ax.figure
    return max(ax.get_position().height * fig.get_figheight() * 72.0, 20.0)


# ---------------------------------------------------------------- the path
def plot_coef_path(result, ax=None, *, x: str = "df", scale: str = "standardized",
                   n_labels: int = 5, selected=None, reported: str | None = None,
                   target: int = 0, **style) -> Artists:
    """Coefficient paths against effective df (λ on a top axis) or :math:`\\log_{10}\\lambda`.

    The ``n_labels`` features with the largest \\|β\\| at the reported penalty are
    drawn and named at the line ends; the other features are summarised by
    their range (a grey envelope: the smallest and largest coefficient at each
    penalty), so the figure and its CSV stay small for any number of features.
    The reported penalty is a dot on each named line and a wedge on the x axis.

    Parameters
    ----------
    result : RidgePath or mapping
        Needs ``lambdas`` and ``coef`` (k × p); ``df`` for ``x="df"``.
    ax : matplotlib Axes, optional
    x : {"df", "log_lambda"}
    scale : {"standardized", "original"}
        Coefficients on the scale the penalty acts on (default; comparable
        across features) or on the original feature scale.
    n_labels : int
        How many features to draw and name.
    selected : mapping, optional
        Penalties (see :func:`selections_of`).
    reported : str, optional
        The rule whose penalty is the reported model (default: the first selected).
    **style
        Passed to the named lines (e.g. ``linewidth``).

    Returns
    -------
    Artists
        ``lines[name]`` per named feature, ``bands["others"]`` (the envelope),
        ``markers["reported"]`` (the wedge), ``texts`` (the end labels).
    """
    ax = _new_axes(ax)
    xv, xlabel = _x_of(result, x)
    coef = _coef_on_scale(result, scale, target)
    names = list(_get(result, "feature_names") or [f"x{j}" for j in range(coef.shape[1])])
    unpen = set(_get(result, "unpenalized") or [])  # said on the curve: not shrunk
    names = [f"{c} (unpenalized)" if c in unpen else c for c in names]
    sels = selections_of(result, selected, target=target)
    art = Artists(ax=ax, x_quantity=xlabel,
                  y_quantity="coefficient (standardized scale)" if scale == "standardized"
                  and _get(result, "coef_std") is not None else "coefficient (original scale)")
    ref_i, ref_rule = _reported_index(result, sels, reported, xv, x)
    top = np.argsort(-np.abs(coef[ref_i]))[:max(0, min(n_labels, coef.shape[1]))]
    others = np.setdiff1d(np.arange(coef.shape[1]), top)
    ok = np.isfinite(xv)
    if others.size:
        lo, hi = coef[ok][:, others].min(axis=1), coef[ok][:, others].max(axis=1)
        band = ax.fill_between(xv[ok], lo, hi, color="#D9D9D9", linewidth=0, zorder=1,
                               label=f"range of the other {others.size}")
        art.bands["others"] = band
        art.traces.append(Trace(f"range of the other {others.size} features", "band",
                                xv[ok], 0.5 * (lo + hi), lo, hi))
    for k, j in enumerate(top):
        c, ls = _SEQUENCE[k % len(_SEQUENCE)]
        kw = dict(color=c, linestyle=ls, linewidth=1.2)
        kw.update(style)
        (ln,) = ax.plot(xv[ok], coef[ok, j], label=names[j], zorder=3, **kw)
        art.lines[names[j]] = ln
        art.traces.append(Trace(names[j], "line", xv[ok], coef[ok, j]))
    ax.axhline(0.0, color="#555555", linewidth=0.5, zorder=1)
    _set_x_scale(ax, xv, x)
    ax.autoscale_view()
    _end_labels(art, xv[ok], coef[ok][:, top], [names[j] for j in top], x)
    if ref_rule is not None and top.size:
        _mark_reported(art, result, sels[ref_rule], ref_rule, xv[ok], coef[ok][:, top], x)
    if others.size:
        art.texts.append(ax.legend(handles=[art.bands["others"]], loc="upper left",
                                   fontsize=NOTE_PT, frameon=False, handlelength=1.4,
                                   borderaxespad=0.2))
    ax.set_xlabel(xlabel)
    ax.set_ylabel(art.y_quantity)
    _lambda_axis(art, result, x)
    return art


def _coef_on_scale(result, scale: str, target: int) -> np.ndarray:
    """The coefficients (k × p) of one target on the asked scale."""
    if scale == "standardized":
        coef = _first(result, "coef_std", "coef")
    elif scale == "original":
        coef = _get(result, "coef")
    else:
        raise InputError(f"scale must be 'standardized' or 'original'; got {scale!r}")
    if coef is None:
        raise InputError("the result has no 'coef'; pass a RidgePath or a mapping with 'coef'")
    coef = np.asarray(coef, dtype=np.float64)
    if coef.ndim == 3:
        coef = coef[:, :, target]
    return coef


def _reported_index(result, sels, reported, xv, x):
    """``(index, rule)`` of the reported penalty: the rule ``reported`` first, then the first
    selected; without one, the least penalized end of the grid and ``None``."""
    lam = np.asarray(_get(result, "lambdas"), dtype=float)
    ref_i, ref_rule = None, None
    for rule, sel in sorted(sels.items(), key=lambda kv: kv[0] != reported):
        if sel["lambda"] is None:
            continue
        ref_rule = rule
        ref_i = sel["index"] if sel.get("index") is not None else \
            int(np.argmin(np.abs(np.log(lam + 1e-300) - np.log(max(sel["lambda"], 1e-300)))))
        break
    if ref_i is None:
        ref_i = int(np.nanargmax(xv)) if x == "df" else int(np.nanargmin(xv))
    return ref_i, ref_rule


def _mark_reported(art: Artists, result, sel, rule, xs_all, coefs, x) -> None:
    """Dots on the named lines and a labelled wedge on the x axis at the reported penalty."""
    ax = art.ax
    xs = _x_of_penalty(result, sel["lambda"], sel["df"], x)
    if not np.isfinite(xs):
        return
    ys = [float(np.interp(xs, *_sorted_xy(xs_all, c))) for c in coefs.T]
    (dots,) = ax.plot([xs] * len(ys), ys, linestyle="none", marker="o", markersize=3,
                      color="black", zorder=6, label="_nolegend_")
    art.markers["reported_coefficients"] = dots
    art.traces.append(Trace(f"at reported ({_rule_label(rule)})", "marker",
                            np.full(len(ys), xs), np.asarray(ys)))
    (wedge,) = ax.plot([xs], [0.0], transform=ax.get_xaxis_transform(), marker="^",
                       markersize=6, color="black", clip_on=False, zorder=6,
                       linestyle="none", label="_nolegend_")
    art.markers["reported"] = wedge
    right = _xfrac(ax, xs)[0] > 0.6
    art.texts.append(ax.annotate(f"reported ({_rule_label(rule)})", (xs, 0.0),
                                 xycoords=ax.get_xaxis_transform(),
                                 xytext=(-6 if right else 4, 3),
                                 textcoords="offset points", fontsize=NOTE_PT,
                                 ha="right" if right else "left", va="bottom",
                                 bbox=dict(boxstyle="square,pad=0.1",
                                           facecolor="white", edgecolor="none",
                                           alpha=0.85)))


def _sorted_xy(xs, ys):
    order = np.argsort(xs)
    return xs[order], ys[order]


def _end_labels(art: Artists, xs, ys, names, x):
    """Name each line at its least-penalized end, spread vertically so names never touch."""
    if not names:
        return
    ax = art.ax
    end = int(np.argmax(xs)) if x == "df" else int(np.argmin(xs))
    yend = ys[end]
    lo, hi = ax.get_ylim()
    gap = (hi - lo) * (NOTE_PT * 1.25) / _axes_height_pt(ax)
    pos = _place_labels(yend, lo + 0.5 * gap, hi - 0.5 * gap, gap)
    side, ha = 1.0, "left"  # the least-penalized end is on the right on both axes
    trans = ax.get_yaxis_transform()
    for name, y0, yp, ln in zip(names, yend, pos, [art.lines[n] for n in names]):
        t = ax.annotate(str(name), xy=(side, y0), xycoords=trans, xytext=(side, yp),
                        textcoords=trans, fontsize=NOTE_PT, color=ln.get_color(), ha=ha,
                        va="center", annotation_clip=False)
        t.set_in_layout(True)
        art.texts.append(t)


def _cv_of(result, cv, xv, target, art):
    """(mean, se, label) of K-fold CV on the path's grid, or None."""
    if cv is None:
        cv = _get(result, "cv")
        if cv is None and _get(result, "cv_mse") is not None:
            cv = {"mean": _get(result, "cv_mse"), "se": _get(result, "cv_se")}
    if cv is None:
        return None
    mean = _arr(_first(cv, "mean", "cv_mse", "mse", "mean_mse"), target)
    se = _arr(_first(cv, "se", "cv_se", "std_error", "se_mse"), target)
    if mean is None:
        return None
    if mean.shape != xv.shape:
        art.notes.append("K-fold CV is on a different grid than the path; not drawn")
        return None
    kfold = _first(cv, "n_folds", "k", "folds")
    label = "K-fold CV" if kfold is None or not np.isscalar(kfold) else f"{kfold}-fold CV"
    return mean, se, label


def plot_errors(result, ax=None, *, x: str = "df", cv=None, selected=None,
                target: int = 0, yscale: str = "log", min_norm: bool = True,
                **style) -> Artists:
    """Error curves along the path, each rule's choice a named marker on the curve it minimises.

    Training MSE, GCV, exact leave-one-out, K-fold CV and test MSE against
    effective df (λ on a top axis) or :math:`\\log_{10}\\lambda`.  A rule that
    minimises a drawn curve is a marker on that curve, named beside it; the
    one-SE choice sits on the CV curve with its ±1 SE whisker.  The λ → 0⁺
    (min-norm) fit's errors are hollow markers at the λ → 0 end: at its df on a
    df axis, at the left edge (after a break) on a log-λ axis.  Rules that
    minimise no drawn curve are listed by :func:`plot_rule_strip`.

    Parameters
    ----------
    result : RidgePath or mapping
        ``lambdas`` plus any of ``train_mse``, ``gcv``, ``loo_mse``, ``test_mse``;
        ``min_norm`` (with the same keys) for the λ → 0⁺ markers.
    cv : mapping or object, optional
        K-fold CV on the same grid: ``mean`` (or ``mse``) and ``se``.
    selected : mapping, optional
        Penalties to mark (see :func:`selections_of`).
    x : {"df", "log_lambda"}
    yscale : {"log", "linear"}
    min_norm : bool
        Draw the min-norm fit's errors at the λ → 0 end.

    Returns
    -------
    Artists
        ``lines`` keyed ``train``, ``gcv``, ``loo``, ``cv``, ``test``;
        ``markers[rule]``; ``markers["min_norm:<criterion>"]``;
        ``bands["cv:<rule>"]`` (the SE whisker at a CV-based choice).
    """
    ax = _new_axes(ax)
    xv, xlabel = _x_of(result, x)
    art = Artists(ax=ax, x_quantity=xlabel, y_quantity="mean squared error"
                  + (" (log scale)" if yscale == "log" else ""))
    ax.set_yscale(yscale)
    curves = {}
    series = [("train", "training MSE", ("train_mse",)), ("gcv", "GCV", ("gcv",)),
              ("loo", "leave-one-out", ("loo_mse",)), ("test", "test MSE", ("test_mse",))]
    ok = np.isfinite(xv)
    for key, label, names in series:
        y = _arr(_first(result, *names), target)
        if y is None:
            continue
        (ln,) = ax.plot(xv[ok], y[ok], label=label, **_line_kw(key, style))
        art.lines[key] = ln
        curves[key] = (xv[ok], y[ok])
        art.traces.append(Trace(key, "line", xv[ok], y[ok]))
    cvd = _cv_of(result, cv, xv, target, art)
    se_curve = None
    if cvd is not None:
        mean, se, label = cvd
        (ln,) = ax.plot(xv[ok], mean[ok], label=label, **_line_kw("cv", style))
        art.lines["cv"] = ln
        curves["cv"] = (xv[ok], mean[ok])
        art.traces.append(Trace("cv", "line", xv[ok], mean[ok]))
        se_curve = None if se is None else (xv[ok], se[ok])
    if not curves:
        raise InputError("the result has none of train_mse, gcv, loo_mse, test_mse or CV; "
                         "pass a RidgePath or a mapping with those keys")
    _set_x_scale(ax, xv, x)
    bottom = _error_limits(art, curves, yscale)
    x0 = _min_norm_markers(art, result, xv, x, target, yscale, bottom) if min_norm else None
    ax.autoscale_view()
    sels = selections_of(result, selected, target=target)
    _mark_on_curves(art, result, sels, x, curves, se_curve)
    ax.set_xlabel(xlabel)
    ax.set_ylabel(art.y_quantity)
    art.texts.append(ax.legend(loc="best", fontsize=NOTE_PT, frameon=True, framealpha=0.85,
                               edgecolor="none", handlelength=2.4, borderaxespad=0.3,
                               labelspacing=0.3))
    _lambda_axis(art, result, x, x0)
    return art


def _error_limits(art, curves, yscale):
    """Log-axis limits from the criteria; training MSE may run below them (noted)."""
    if yscale != "log":
        return None
    pos = lambda a: a[np.isfinite(a) & (a > 0)]  # noqa: E731
    crit = [pos(c[1]) for k, c in curves.items() if k != "train"]
    crit = np.concatenate(crit) if crit else np.array([])
    every = np.concatenate([pos(c[1]) for c in curves.values()])
    if not every.size:
        return None
    bottom = float(every.min())
    if crit.size and bottom < crit.min() / 100:
        bottom = float(crit.min()) / 100
        art.notes.append("training MSE runs below the axis near interpolation")
    art.ax.set_ylim(bottom / 1.3, float(every.max()) * 1.6)
    return bottom


def _min_norm_markers(art, result, xv, x, target, yscale, bottom):
    """Hollow markers for the min-norm fit's errors at the λ → 0 end of the axis; returns
    the x position used (or None)."""
    ax = art.ax
    mn = _get(result, "min_norm")
    if mn is None:
        return None
    x0 = _min_norm_x(result, xv, x)
    drawn = []
    for key, names in (("train", ("train_mse",)), ("gcv", ("gcv",)), ("loo", ("loo_mse",)),
                       ("test", ("test_mse",))):
        v = _first(mn, *names)
        if key not in art.lines or v is None:
            continue
        v = float(np.asarray(v, dtype=float).ravel()[min(target, np.size(v) - 1)])
        if yscale == "log" and not (v > 0 and (bottom is None or v >= bottom / 1.3)):
            art.notes.append(f"min-norm {key} = {v:.3g} lies below the log axis; not drawn")
            continue
        s = STYLES[key]
        (m,) = ax.plot([x0], [v], linestyle="none", marker=s["marker"], markersize=5,
                       markerfacecolor="white", markeredgecolor=s["color"], markeredgewidth=1.1,
                       zorder=6, clip_on=False, label="_nolegend_")
        art.markers[f"min_norm:{key}"] = m
        art.traces.append(Trace(f"min_norm:{key}", "marker", np.array([x0]), np.array([v])))
        drawn.append(v)
    if not drawn:
        return None
    if x != "df":
        lo, hi = sorted(ax.get_xlim())
        ax.set_xlim(hi, min(lo, x0 - 0.03 * (hi - lo)))  # decreasing: λ → 0 on the right
        brk = x0 + 0.035 * (hi - lo)
        art.refs["axis_break"] = ax.plot([brk, brk], [0, 0.04], transform=ax.get_xaxis_transform(),
                                         color="black", linewidth=0.8, clip_on=False)[0]
    return x0


def _mark_on_curves(art, result, sels, x, curves, se_curve):
    """Each rule minimising a drawn curve: a filled marker on it, named next to it."""
    ax = art.ax
    placed = []
    for k, (rule, sel) in enumerate(sels.items()):
        curve_key = _RULE_CURVE.get(rule)
        if curve_key not in curves:
            continue
        xs = _x_of_penalty(result, sel["lambda"], sel["df"], x)
        if not np.isfinite(xs):
            art.notes.append(f"rule {rule}: lambda = 0 is the min-norm end (marked there)")
            continue
        color, marker = _rule_color(rule, k)
        cx, cy = _sorted_xy(*curves[curve_key])
        good = np.isfinite(cx) & np.isfinite(cy)
        ys = float(np.interp(xs, cx[good], cy[good]))
        (m,) = ax.plot([xs], [ys], linestyle="none", marker=marker, color=color,
                       markersize=6, markeredgecolor="black", markeredgewidth=0.6, zorder=7,
                       label="_nolegend_")
        art.markers[rule] = m
        art.traces.append(Trace(f"selected:{rule}", "marker", np.array([xs]), np.array([ys])))
        if curve_key == "cv" and se_curve is not None and rule in ("cv", "one_se", "one-se"):
            sx, sy = _sorted_xy(*se_curve)
            s = float(np.interp(xs, sx, sy))
            eb = ax.errorbar([xs], [ys], yerr=[[min(s, 0.9 * ys)], [s]], fmt="none",
                             ecolor=color, elinewidth=0.9, capsize=2.0, zorder=6)
            art.bands[f"cv:{rule}"] = eb
            art.traces.append(Trace(f"selected:{rule}", "error bar", np.array([xs]),
                                    np.array([ys]), np.array([ys - s]), np.array([ys + s])))
        placed.append((xs, ys, rule))
    _name_markers(art, placed)


def _name_markers(art, placed):
    """One name block per cluster of markers, above the cluster with a leader line; the names
    in the cluster's left-to-right order.  Clusters whose blocks would touch (width estimated
    at 0.6 em per character) are merged, so blocks never overlap."""
    ax = art.ax
    if not placed:
        return
    placed.sort(key=lambda p: float(_xfrac(ax, p[0])[0]))
    fr = _xfrac(ax, [p[0] for p in placed])
    width_pt = max(ax.get_position().width * ax.figure.get_figwidth() * 72.0, 20.0)

    def text_of(g):
        names = [_rule_label(placed[i][2]) for i in g]
        return "\n".join(", ".join(names[k:k + 2]) for k in range(0, len(names), 2))

    def half(g):
        longest = max(len(line) for line in text_of(g).split("\n"))
        return 0.5 * (longest * 0.6 * NOTE_PT + 6) / width_pt

    groups = [[i] for i in range(len(placed))]
    merged = True
    while merged and len(groups) > 1:
        merged = False
        for k in range(len(groups) - 1):
            a, b = groups[k], groups[k + 1]
            ca, cb = np.mean(fr[a]), np.mean(fr[b])
            if cb - ca < half(a) + half(b):
                groups[k:k + 2] = [a + b]
                merged = True
                break
    for g in groups:
        f = float(np.mean(fr[g]))
        xs = float(ax.transScale.inverted().transform(
            ax.transLimits.inverted().transform((f, 0.5)))[0])
        ytop = max(placed[i][1] for i in g)
        ybot = min(placed[i][1] for i in g)
        ha = "left" if f < 0.25 else ("right" if f > 0.75 else "center")
        # above the cluster, unless it sits in the upper half: then below it
        high = ax.transLimits.transform(ax.transScale.transform((xs, ytop)))[1] > 0.55
        t = ax.annotate(text_of(g), (xs, ybot if high else ytop),
                        xytext=(0, -14 if high else 14), textcoords="offset points",
                        fontsize=NOTE_PT, ha=ha, va="top" if high else "bottom",
                        linespacing=1.0,
                        arrowprops=dict(arrowstyle="-", linewidth=0.5, color="#444444",
                                        shrinkA=0, shrinkB=4),
                        bbox=dict(boxstyle="square,pad=0.1", facecolor="white",
                                  edgecolor="none", alpha=0.85))
        art.texts.append(t)


def plot_rule_strip(result, ax=None, *, selected=None, x: str = "df", target: int = 0,
                    **style) -> Artists:
    """Every rule's choice on a compact strip: a row per rule, grouped by family.

    Families: prediction-error estimates, plug-in constants, targets,
    likelihood and the test-row oracle (:data:`RULE_FAMILIES`); each family's
    name heads its rows.  Each rule is a marker at its penalty on the same x
    axis as the error curves (effective df or :math:`\\log_{10}\\lambda`); a
    choice at λ → 0 sits at the min-norm end.  Rules with no penalty (e.g. a
    target that was not given) are left out (noted).

    Returns
    -------
    Artists
        ``markers[rule]``; ``texts`` (the family headings); ``notes``.
    """
    ax = _new_axes(ax)
    xv, xlabel = _x_of(result, x)
    sels = selections_of(result, selected, target=target)
    art = Artists(ax=ax, x_quantity=xlabel, y_quantity="rule")
    fams = [f for f, _ in RULE_FAMILIES] + ["other"]
    rows = {}
    for rule, sel in sels.items():
        if sel["lambda"] is None or not np.isfinite(sel["lambda"]):
            art.notes.append(f"rule {rule}: no penalty; not drawn")
            continue
        rows.setdefault(rule_family(rule), []).append(rule)
    x0 = _min_norm_x(result, xv, x)
    _set_x_scale(ax, xv, x)
    labels, k, y = [], 0, 0.0
    heads = []
    for fam in [f for f in fams if f in rows]:
        heads.append((y, fam))
        y += 1.0
        for rule in rows[fam]:
            sel = sels[rule]
            xs = x0 if sel["lambda"] == 0 else _x_of_penalty(result, sel["lambda"], sel["df"], x)
            color, marker = _rule_color(rule, k)
            k += 1
            ax.axhline(y, color="#E5E5E5", linewidth=0.6, zorder=0)
            (m,) = ax.plot([xs], [y], linestyle="none", marker=marker, color=color,
                           markersize=5, markeredgecolor="black", markeredgewidth=0.5,
                           zorder=3, clip_on=False)
            art.markers[rule] = m
            art.traces.append(Trace(f"rule:{rule}", "marker", np.array([xs]), np.array([y])))
            labels.append((y, _rule_label(rule)))
            y += 1.0
    ax.set_ylim(y - 0.4, -0.6)
    ax.set_yticks([a for a, _ in labels], [b for _, b in labels], fontsize=NOTE_PT)
    ax.tick_params(axis="y", length=0, pad=2)
    ax.spines["left"].set_visible(False)
    for yh, fam in heads:
        art.texts.append(ax.text(0.0, yh, fam, transform=ax.get_yaxis_transform(),
                                 fontsize=NOTE_PT, fontstyle="italic", ha="left",
                                 va="center", color="#333333"))
    ax.set_xlabel(xlabel)
    return art


def _choice(result, lam, selected, target):
    """(lambda, label) of the penalty to show: ``lam`` or the first selected rule."""
    if lam is not None:
        return float(lam), "given"
    sels = selections_of(result, selected, target=target)
    for rule in ("cv", "one_se", "gcv", "loo"):
        if rule in sels:
            return sels[rule]["lambda"], rule
    if sels:
        rule, sel = next(iter(sels.items()))
        return sel["lambda"], rule
    raise InputError("no penalty to show; pass lam= or selected=")


def plot_shrinkage(result, ax=None, *, lam=None, selected=None, target: int = 0,
                   **style) -> Artists:
    """Shrinkage per principal component, :math:`d_j^2/(d_j^2+\\lambda)`, with the singular values.

    Parameters
    ----------
    result : RidgePath or mapping
        Needs ``singular_values``.
    lam : float, optional
        The penalty; default the first of the CV, one-SE, GCV, LOO choices present.

    Returns
    -------
    Artists
        ``lines["shrinkage"]`` (component index vs factor) and
        ``lines["singular_values"]`` (on a twin log axis, ``texts[0]``'s axes).

    Notes
    -----
    The factor :math:`f_j` multiplies the least-squares coefficient along the
    j-th principal direction; :math:`\\sum_j f_j` is the effective df (Hastie,
    Tibshirani & Friedman, *Elements of Statistical Learning*, 2nd ed., eq. 3.50).
    """
    ax = _new_axes(ax)
    d = _arr(_get(result, "singular_values"))
    if d is None:
        raise InputError("the result has no 'singular_values'; pass a RidgePath or summary")
    lam, rule = _choice(result, lam, selected, target)
    j = np.arange(1, d.size + 1, dtype=float)
    f = fractions(d, [lam])[:, 0]
    who = _rule_label(rule) if rule != "given" else "given"
    art = Artists(ax=ax, x_quantity="component j, by decreasing dⱼ",
                  y_quantity="shrinkage dⱼ²/(dⱼ² + λ)")
    kw = dict(color=_C["blue"], linestyle="-", marker="o", markersize=2.5, linewidth=1.0)
    kw.update(style)
    (ln,) = ax.plot(j, f, label=f"fⱼ at λ = {lam:.3g} ({who}); "
                    f"Σ fⱼ = {f.sum():.3g}", **kw)
    art.lines["shrinkage"] = ln
    art.traces.append(Trace("shrinkage", "line", j, f))
    ax.set_ylim(-0.03, 1.03)
    ax.set_xlabel(art.x_quantity)
    ax.set_ylabel(art.y_quantity, color=_C["blue"])
    twin = ax.twinx()
    (sv,) = twin.plot(j, d, color=_C["vermillion"], linestyle="--", linewidth=1.0,
                      label="singular value dⱼ")
    twin.set_yscale("log")
    twin.spines["right"].set_visible(True)
    twin.set_ylabel("singular value dⱼ (log)", color=_C["vermillion"])
    art.lines["singular_values"] = sv
    art.traces.append(Trace("singular_values", "line", j, d))
    ref = ax.axhline(0.5, color="#999999", linewidth=0.5, linestyle=":")
    art.refs["half"] = ref
    hs = [ln, sv]
    leg = ax.legend(hs, [h.get_label() for h in hs], loc="lower left",
                    bbox_to_anchor=(0.0, 1.01, 1.0, 0.1), mode="expand", ncol=1,
                    fontsize=NOTE_PT, frameon=False, borderaxespad=0.0)
    art.texts.append(twin)
    art.texts.append(leg)
    return art


def marchenko_pastur_density(x, gamma: float) -> np.ndarray:
    """Continuous part of the Marchenko–Pastur density for aspect ratio ``gamma`` = p/n.

    .. math:: \\rho(x) = \\frac{\\sqrt{(b-x)(x-a)}}{2\\pi\\gamma x},\\quad
              a, b = (1 \\mp \\sqrt{\\gamma})^2,

    zero outside :math:`[a, b]`; for :math:`\\gamma > 1` a point mass
    :math:`1 - 1/\\gamma` at zero completes it (not included here).  It is the
    limiting eigenvalue density of :math:`X^TX/n` for unit-variance entries
    (Marchenko & Pastur 1967).
    """
    if not gamma > 0:
        raise InputError(f"gamma must be positive; got {gamma}")
    x = np.asarray(x, dtype=np.float64)
    a, b = (1 - np.sqrt(gamma)) ** 2, (1 + np.sqrt(gamma)) ** 2
    inside = (x > a) & (x < b) & (x > 0)
    out = np.zeros_like(x)
    xi = x[inside]
    out[inside] = np.sqrt((b - xi) * (xi - a)) / (2 * np.pi * gamma * xi)
    return out


def _eigen_scaled(result):
    """Eigenvalues of the design's Gram divided by its average, the ratio γ, and q."""
    d = _arr(_get(result, "singular_values"))
    if d is None:
        raise InputError("the result has no 'singular_values'; pass a RidgePath or summary")
    n = int(_get(result, "n_samples"))
    design = _get(result, "design")
    q = int(np.count_nonzero(design.active)) if design is not None else \
        int(_get(result, "n_features")) - len(_get(result, "constant_features") or [])
    m = n - _n_fixed(result)
    eig = d**2 / (np.sum(d**2) / q)
    return eig, q / m, q, m


def plot_spectrum(result, ax=None, *, bins: int | None = None, **style) -> Artists:
    r"""Sample eigenvalues of the (standardized) design against the Marchenko–Pastur density.

    Drawn on a log eigenvalue axis, so that spikes from correlated features and
    the near-zero eigenvalues of a design near p ≈ n show on one picture.

    Parameters
    ----------
    result : RidgePath or mapping
        Needs ``singular_values``, ``n_samples`` and ``n_features``.
    bins : int, optional

    Returns
    -------
    Artists
        ``lines["marchenko_pastur"]``, ``bands["histogram"]`` (the bar container),
        ``refs["edge_low"]``/``refs["edge_high"]`` at the support edges.

    Notes
    -----
    The eigenvalues are those of :math:`Z^TZ` scaled to unit average over the
    q active columns (exactly :math:`d_j^2/n` for standardized columns), against
    the law for γ = q/m (m = n − 1 with an intercept).  On the axis
    :math:`t = \log_{10} x` the density is :math:`\rho(x)\, x \ln 10`; the
    histogram puts mass 1/q on each non-zero eigenvalue, so with q > m it
    integrates to m/q, the continuous part of the law.  Isotropic features
    follow the curve; spikes above the upper edge are structure (correlated
    features); eigenvalues near zero — present whenever γ is near 1 — are what
    makes the min-norm variance explode.
    """
    ax = _new_axes(ax)
    eig, gamma, q, m = _eigen_scaled(result)
    a, b = (1 - np.sqrt(gamma)) ** 2, (1 + np.sqrt(gamma)) ** 2
    art = Artists(ax=ax,
                  x_quantity="log₁₀ eigenvalue of ZᵀZ/n" + "\n"
                  + r"(Z: centered, standardized design; mean eigenvalue 1)",
                  y_quantity="density per unit log₁₀")
    t = np.log10(eig)
    lo_edge = np.log10(a) if a > 1e-12 else t.min()
    lo = min(t.min(), lo_edge) - 0.1
    hi = max(t.max(), np.log10(b)) + 0.1
    nb = bins or int(np.clip(2 * np.sqrt(eig.size), 12, 40))
    edges = np.linspace(lo, hi, nb + 1)
    counts, _ = np.histogram(t, bins=edges)
    dens = counts / q / np.diff(edges)
    bars = ax.bar(edges[:-1], dens, width=np.diff(edges), align="edge", color=_C["sky_blue"],
                  edgecolor="white", linewidth=0.3, label=f"sample ({eig.size} non-zero)")
    art.bands["histogram"] = bars
    mid = 0.5 * (edges[:-1] + edges[1:])
    art.traces.append(Trace("sample eigenvalues", "histogram", mid, dens,
                            edges[:-1], edges[1:]))
    xs = np.geomspace(max(a, 10.0 ** lo), b, 400)[1:-1]
    rho = marchenko_pastur_density(xs, gamma) * xs * np.log(10.0)
    kw = dict(color=_C["black"], linestyle="-", linewidth=1.2)
    kw.update(style)
    (ln,) = ax.plot(np.log10(xs), rho, label=f"Marchenko–Pastur, γ = {gamma:.3g}",
                    **kw)
    art.lines["marchenko_pastur"] = ln
    art.traces.append(Trace("marchenko_pastur", "line", np.log10(xs), rho))
    for name, v in (("edge_low", a), ("edge_high", b)):
        if v > 0:
            art.refs[name] = ax.axvline(np.log10(v), color="#777777", linestyle=":",
                                        linewidth=0.7)
    ymax = max(float(dens.max()), float(rho.max()) if rho.size else 0.0)
    ax.set_ylim(0, 1.25 * ymax if ymax > 0 else 1)
    if gamma > 1:
        art.notes.append(f"point mass {1 - 1 / gamma:.3g} at zero not drawn")
        ax.plot([], [], linestyle="none", label=f"(+ mass {1 - 1 / gamma:.2f} at 0, not drawn)")
    ax.set_xlabel(art.x_quantity)
    ax.set_ylabel(art.y_quantity)
    art.texts.append(ax.legend(loc="upper right", fontsize=NOTE_PT, frameon=False))
    return art


def plot_variance_share(result, ax=None, **style) -> Artists:
    """Each component's share of the min-norm coefficient variance, :math:`d_j^{-2}/\\sum_k d_k^{-2}`.

    Under homoscedastic noise :math:`\\sigma^2` the min-norm coefficients have
    total variance :math:`\\sigma^2 \\sum_j d_j^{-2}`, so the smallest singular
    values dominate it: the spike of the test error near p ≈ n.

    Returns
    -------
    Artists
        ``lines["share"]`` (component index vs share, log y axis).
    """
    ax = _new_axes(ax)
    d = _arr(_get(result, "singular_values"))
    if d is None:
        raise InputError("the result has no 'singular_values'; pass a RidgePath or summary")
    inv = 1.0 / d**2
    share = inv / inv.sum()
    j = np.arange(1, d.size + 1, dtype=float)
    art = Artists(ax=ax, x_quantity="component j, by decreasing dⱼ",
                  y_quantity="share of min-norm variance σ²/dⱼ²")
    kw = dict(color=_C["vermillion"], linestyle="-", marker="o", markersize=2.5, linewidth=1.0)
    kw.update(style)
    (ln,) = ax.plot(j, share, label="dⱼ⁻²/Σ dₖ⁻²", **kw)
    art.lines["share"] = ln
    art.traces.append(Trace("variance_share", "line", j, share))
    ax.set_yscale("log")
    t = ax.text(0.03, 0.95, f"last component: {100 * share[-1]:.2g}%",
                transform=ax.transAxes, va="top", fontsize=NOTE_PT)
    art.texts.append(t)
    ax.set_xlabel(art.x_quantity)
    ax.set_ylabel(art.y_quantity)
    return art


def plot_reml_profile(result, ax=None, **style) -> Artists:
    """The restricted log-likelihood profile :math:`\\ell(\\lambda) - \\ell(\\hat\\lambda)` of each target.

    With the REML choice :math:`\\hat\\lambda` marked and the cut
    :math:`-\\chi^2_{1,0.95}/2` whose crossings bound the approximate 95%
    likelihood-ratio interval (:mod:`paths.selection.reml`).

    Parameters
    ----------
    result : RidgePath
        An in-memory path (its left singular vectors are needed).

    Returns
    -------
    Artists
        ``lines[target]``, ``markers[target]`` and ``refs["cut"]``.
    """
    from paths.selection.reml import CHI2_1_95, reml_estimate, reml_loglik

    ax = _new_axes(ax)
    lam = _arr(_get(result, "lambdas"))
    if lam is None or _get(result, "factorization") is None:
        raise InputError("the REML profile needs a RidgePath from fit_path")
    ll = np.asarray(reml_loglik(result), dtype=float).reshape(lam.size, -1)
    art = Artists(ax=ax, x_quantity=_penalty_label(_get(result, "standardize", True)),
                  y_quantity=r"REML $\ell(\lambda)-\ell(\hat\lambda)$")
    xv = np.log10(np.where(lam > 0, lam, np.nan))
    names = ["y"] if ll.shape[1] == 1 else [f"target {j}" for j in range(ll.shape[1])]
    if len(names) > len(_SEQUENCE):  # one line per target: the first few, the rest said
        art.notes.append(f"{len(names) - len(_SEQUENCE)} more targets not drawn")
        names = names[:len(_SEQUENCE)]
    for j, name in enumerate(names):
        est = reml_estimate(result, j)
        color, dash = _SEQUENCE[j % len(_SEQUENCE)]
        kw = dict(color=color, linestyle=dash, linewidth=1.2)
        kw.update(style)
        rel = ll[:, j] - est.loglik
        (ln,) = ax.plot(xv, rel, label=f"REML profile ({name})" if len(names) > 1
                        else "REML profile", **kw)
        art.lines[name] = ln
        art.traces.append(Trace(f"reml_loglik {name}", "line", xv, rel))
        if est.lam > 0:
            xm = float(np.log10(est.lam))
            (mk,) = ax.plot([xm], [0.0], marker="o", color=color, linestyle="none",
                            markersize=4, label=f"REML λ = {est.lam:.3g}")
            art.markers[name] = mk
            art.traces.append(Trace(f"reml choice {name}", "marker", np.array([xm]),
                                    np.array([0.0])))
    cut = -0.5 * CHI2_1_95
    art.refs["cut"] = ax.axhline(cut, color="#777777", linestyle=(0, (1, 1)), linewidth=0.8,
                                 label="95% likelihood-ratio cut")
    art.traces.append(Trace("chi2 cut", "reference", np.array([np.nanmin(xv), np.nanmax(xv)]),
                            np.array([cut, cut])))
    finite = np.isfinite(ll - ll.max(axis=0))
    low = float(np.min((ll - ll.max(axis=0))[finite])) if finite.any() else cut
    ax.set_ylim(max(low, 12 * cut), 0.5)
    ax.set_xlabel(art.x_quantity)
    ax.set_ylabel(art.y_quantity)
    art.texts.append(ax.legend(fontsize=NOTE_PT, loc="lower center", frameon=True, framealpha=0.85))
    return art


# ------------------------------------------------------------------ many targets
def plot_target_penalties(choices, ax=None, *, reported: str | None = None, standardize=True,
                          bins: int = 30, **style) -> Artists:
    """How the chosen penalty spreads across targets: one histogram of log10 λ per rule.

    Parameters
    ----------
    choices : mapping
        ``{rule: array of penalties, one per target}`` (NaN: no choice; 0: the
        minimum-norm limit, counted in a note, not drawn on the log axis).
    reported : str, optional
        The reported rule: drawn filled (light grey under a black outline), the
        others as step outlines, each in its own colour and dash pattern.
    bins : int
        Bins shared by every rule (the figure's size does not grow with the
        number of targets).

    Returns
    -------
    Artists
        ``lines[rule]`` (the histogram patches) and one ``"histogram"`` trace per
        rule (bin centres, counts).
    """
    ax = _new_axes(ax)
    art = Artists(ax=ax, x_quantity=_penalty_label(standardize),
                  y_quantity="number of targets")
    logs = {r: np.log10(np.asarray(v, dtype=float)[np.asarray(v, dtype=float) > 0])
            for r, v in choices.items()}
    logs = {r: v[np.isfinite(v)] for r, v in logs.items()}
    drawn = [r for r, v in logs.items() if v.size]
    if not drawn:
        art.notes.append("no rule chose a positive penalty for any target")
        return art
    allv = np.concatenate([logs[r] for r in drawn])
    lo, hi = float(allv.min()), float(allv.max())
    if hi - lo < 1e-9:
        lo, hi = lo - 0.5, hi + 0.5
    edges = np.linspace(lo, hi, int(bins) + 1)
    centres = 0.5 * (edges[1:] + edges[:-1])
    order = ([reported] if reported in drawn else []) + [r for r in drawn if r != reported]
    for k, rule in enumerate(order):
        counts, _ = np.histogram(logs[rule], bins=edges)
        label = RULE_LABELS.get(rule, rule) + (" (reported)" if rule == reported else "")
        zeros = int(np.sum(np.asarray(choices[rule], dtype=float) == 0))
        if zeros:  # not on the log axis: said in the legend
            art.notes.append(f"{label}: {zeros} target(s) at the minimum-norm limit λ → 0")
            label += f"; {zeros} at λ → 0"
        if rule == reported:
            kw = dict(histtype="stepfilled", facecolor="#d9d9d9", edgecolor=_C["black"],
                      linewidth=1.0)
        else:
            key = _RULE_STYLE.get(rule)
            color, dash = ((_style(key)["color"], _style(key)["linestyle"]) if key
                           else _SEQUENCE[k % len(_SEQUENCE)])
            kw = dict(histtype="step", color=color, linestyle=dash, linewidth=1.2)
        kw.update(style)
        *_, patches = ax.hist(logs[rule], bins=edges, label=label, **kw)
        art.lines[rule] = patches
        art.traces.append(Trace(f"{rule} penalty per target", "histogram", centres,
                                counts.astype(float)))
    ax.set_xlabel(art.x_quantity)
    ax.set_ylabel(art.y_quantity)
    art.texts.append(ax.legend(fontsize=NOTE_PT, loc="upper right", frameon=True,
                               framealpha=0.85))
    return art


# ---------------------------------------------------------------- threshold
def _columns(table) -> dict:
    """A ``threshold.csv``-like table (DataFrame, dict of columns, object with .table) as arrays.

    A :class:`paths.threshold.ThresholdResult` is read through
    :func:`paths.threshold.threshold_table`, so the figure draws what the CSV holds.
    """
    if hasattr(table, "bias2") and hasattr(table, "sweep"):  # paths.simulate.SimulationResult
        from paths.threshold.simulate import bias_variance_table

        header, rows = bias_variance_table(table)
        cols = {h: np.array([r[i] for r in rows], dtype=object) for i, h in enumerate(header)}
        for h in header:
            if h not in ("over", "method"):
                cols[h] = np.array([np.nan if v is None else v for v in cols[h]], dtype=float)
        return cols
    if hasattr(table, "band_of") and hasattr(table, "methods"):
        from paths.threshold.sweep import threshold_table

        header, rows = threshold_table(table)
        cols = {h: np.array([r[i] for r in rows], dtype=object) for i, h in enumerate(header)}
        for h in header:
            if h not in ("over", "method"):
                cols[h] = np.array([np.nan if v is None else v for v in cols[h]], dtype=float)
        return cols
    for attr in ("table", "frame", "points"):
        inner = _get(table, attr) if not isinstance(table, Mapping) else None
        if inner is not None:
            table = inner
            break
    if hasattr(table, "to_frame") and not hasattr(table, "columns"):
        table = table.to_frame()
    if hasattr(table, "columns") and hasattr(table, "to_numpy"):
        return {str(c): table[c].to_numpy() for c in table.columns}
    if isinstance(table, Mapping):
        return {str(k): np.asarray(v) for k, v in table.items()}
    raise InputError("the sweep must be a threshold table (DataFrame or dict of columns "
                     "with 'ratio', 'method', 'test_mse')")


def _aggregate(cols: dict, method: str, value: str):
    """Per-ratio mean and standard error over repeats of ``value`` for ``method``."""
    sel = cols["method"].astype(str) == method
    if not sel.any() or value not in cols:
        return None
    ratio = np.asarray(cols["ratio"], dtype=float)[sel]
    v = np.asarray(cols[value], dtype=float)[sel]
    keep = np.isfinite(v)
    ratio, v = ratio[keep], v[keep]
    if ratio.size == 0:
        return None
    xs = np.unique(ratio)
    mean = np.array([v[ratio == r].mean() for r in xs])
    cnt = np.array([(ratio == r).sum() for r in xs])
    se = np.array([v[ratio == r].std(ddof=1) / np.sqrt(c) if c > 1 else 0.0
                   for r, c in zip(xs, cnt)])
    return xs, mean, se, int(cnt.max())


def _ratio_label(cols) -> str:
    over = cols.get("over")
    if over is not None and np.size(over) and str(np.asarray(over)[0]) == "samples":
        return "ratio p/n′\n(features / training rows)"
    return "ratio p′/n\n(model features / training rows)"


def interpolation_ratio(cols) -> float:
    """Where the fit starts to interpolate, on the sweep's ratio axis.

    With an intercept the centered design has n − 1 rows, so least squares
    interpolates at p′ + 1 = n: ratio p′/n = (n − 1)/n for a sweep over features
    (n = ``n_train``), p/n′ = p/(p + 1) for a sweep over training rows (p =
    ``n_features``); without an intercept at ratio 1.
    """
    icpt = cols.get("fit_intercept")
    icpt = True if icpt is None or not np.size(icpt) else bool(np.asarray(icpt).ravel()[0])
    if not icpt:
        return 1.0
    over = cols.get("over")
    over = str(np.asarray(over).ravel()[0]) if over is not None and np.size(over) else "features"
    if over == "samples":
        p = cols.get("n_features")
        if p is not None and np.size(p):
            p = float(np.asarray(p, dtype=float).ravel()[0])
            return p / (p + 1.0)
        return 1.0
    n = cols.get("n_train")
    if n is not None and np.size(n):
        n = float(np.asarray(n, dtype=float).ravel()[0])
        return (n - 1.0) / n
    return 1.0


def _ratio_axis(art: Artists, cols, label: bool = True):
    """Log ratio axis when the sweep runs past 4 times the threshold (so the threshold
    region is not a hairline at the left); the interpolation line at p′ + 1 = n."""
    ax = art.ax
    r = np.asarray(cols["ratio"], dtype=float)
    r = r[np.isfinite(r) & (r > 0)]
    if r.size and r.max() > 4.0 and r.max() / r.min() > 8.0:
        from matplotlib.ticker import LogLocator, NullFormatter, ScalarFormatter

        ax.set_xscale("log")
        ax.xaxis.set_major_locator(LogLocator(base=10, subs=(1.0, 2.0, 5.0)))
        fmt = ScalarFormatter()
        fmt.set_scientific(False)
        ax.xaxis.set_major_formatter(fmt)
        ax.xaxis.set_minor_formatter(NullFormatter())
        art.notes.append("ratio axis logarithmic: the sweep runs past 4 times the threshold")
    xi = interpolation_ratio(cols)
    over = cols.get("over")
    samples = over is not None and np.size(over) and str(np.asarray(over).ravel()[0]) == "samples"
    art.refs["threshold"] = ax.axvline(xi, color="#444444", linewidth=0.8, linestyle="-",
                                       zorder=1)
    art.traces.append(Trace("interpolation", "reference", np.array([xi]), np.array([np.nan])))
    if label:
        txt = "p + 1 = n′" if samples else "p′ + 1 = n"
        art.texts.append(ax.text(xi, 0.98, f" {txt}", transform=ax.get_xaxis_transform(),
                                 fontsize=NOTE_PT, ha="left", va="top", color="#444444",
                                 bbox=dict(boxstyle="square,pad=0.1", facecolor="white",
                                           edgecolor="none", alpha=0.85)))


def plot_threshold(sweep, ax=None, *, theory=None, methods=None, band: bool = True,
                   **style) -> Artists:
    """Test MSE against p′/n across the interpolation threshold (log error axis).

    Parameters
    ----------
    sweep : DataFrame, mapping of columns, or an object with ``.table``
        The ``threshold.csv`` table: ``ratio``, ``method``, ``repeat``,
        ``test_mse`` (and ``n_train``, ``over``).
    theory : mapping, optional
        Theory curves: ``{"ratio": r, name: values, ...}`` (e.g. ``min_norm``,
        ``ridge_optimal``); each drawn as a thin black line.
    methods : list of str, optional
        Which methods to draw (default all present).
    band : bool
        Shade ±1 standard error over the repeats.

    Returns
    -------
    Artists
        ``lines[method]``, ``bands[method]``, ``lines["theory:<name>"]``,
        ``refs["threshold"]`` (the line where least squares starts to interpolate,
        p′ + 1 = n with an intercept: :func:`interpolation_ratio`).  The ratio axis is
        logarithmic when the sweep runs past 4 times the threshold.
    """
    ax = _new_axes(ax)
    cols = _columns(sweep)
    for need in ("ratio", "method", "test_mse"):
        if need not in cols:
            raise InputError(f"the sweep table has no {need!r} column; pass threshold.csv's table")
    art = Artists(ax=ax, x_quantity=_ratio_label(cols), y_quantity="test MSE (log scale)")
    present = list(dict.fromkeys(np.asarray(cols["method"]).astype(str)))
    order = [m for m in _METHOD_LABELS if m in present] + \
        [m for m in present if m not in _METHOD_LABELS]
    for k, method in enumerate(methods or order):
        agg = _aggregate(cols, method, "test_mse")
        if agg is None:
            continue
        xs, mean, se, reps = agg
        base = method.startswith("baseline")
        kw = _line_kw(method, style) if method in STYLES else \
            dict(color=_SEQUENCE[k % 8][0], linestyle=_SEQUENCE[k % 8][1], linewidth=1.2)
        if base:
            kw["linewidth"] = 0.9
        label = _METHOD_LABELS.get(method, method)
        (ln,) = ax.plot(xs, mean, label=label, **kw)
        art.lines[method] = ln
        art.traces.append(Trace(method, "line", xs, mean))
        if band and reps > 1 and not base:
            lo = np.where(mean - se > 0, mean - se, mean)
            b = ax.fill_between(xs, lo, mean + se, color=kw["color"], alpha=0.18, linewidth=0)
            art.bands[method] = b
            art.traces.append(Trace(method, "band", xs, mean, lo, mean + se))
    if not art.lines:
        raise InputError("the sweep table has no rows with a finite test_mse to draw")
    if theory is None and hasattr(sweep, "band_of"):
        theory = sweep
    if theory is not None:
        _draw_theory(art, theory, keys_skip=("train", "train_mse", "training"))
    _ratio_axis(art, cols)
    reps = int(np.max(cols["repeat"])) + 1 if "repeat" in cols and np.size(cols["repeat"]) else 1
    ax.set_yscale("log")
    ax.set_xlabel(art.x_quantity)
    ax.set_ylabel(art.y_quantity)
    art.texts.append(ax.legend(loc="lower left", bbox_to_anchor=(0.0, 1.01, 1.0, 0.1),
                               mode="expand", ncol=2, borderaxespad=0.0, fontsize=NOTE_PT,
                               frameon=False, handlelength=2.2,
                               title=f"band: ±1 SE over {reps} repeats" if reps > 1 and band
                               else None, title_fontsize=NOTE_PT))
    return art


def theory_of(theory) -> dict | None:
    """Theory curves as ``{"ratio": r, name: values}`` from a mapping, a
    :class:`paths.threshold.TheoryCurves`, a ThresholdResult (its ``.theory``) or the
    ``theory`` record of ``threshold.json``.  The training-error law is under ``"train"``."""
    if theory is None:
        return None
    if hasattr(theory, "band_of"):
        theory = getattr(theory, "theory", None)
        if theory is None:
            return None
    if not isinstance(theory, Mapping):
        theory = {k: getattr(theory, k) for k in ("ratio", "min_norm_test_mse",
                                                   "ridge_optimal_test_mse",
                                                   "ridge_fixed_test_mse", "ls_train_mse")
                  if getattr(theory, k, None) is not None}
    names = {"min_norm_test_mse": "min-norm", "ridge_optimal_test_mse": "optimal ridge",
             "ridge_fixed_test_mse": "ridge, fixed λ", "ls_train_mse": "train"}
    out = {}
    for k, v in theory.items():
        if k in ("gamma", "noise_variance", "signal_variance", "source", "nesting", "applies",
                 "note", "references"):
            continue
        if v is None or isinstance(v, (str, bool)):
            continue
        out[names.get(k, k)] = np.array([np.nan if e is None else e for e in np.ravel(v)],
                                        dtype=float)
    return out if "ratio" in out else None


def theory_applies(theory) -> bool:
    """False when the theory record says its assumptions do not hold for this sweep
    (``applies: false``, e.g. a screening order); True otherwise."""
    if theory is None:
        return True
    if hasattr(theory, "band_of"):
        theory = getattr(theory, "theory", None)
    v = _get(theory, "applies", True)
    return True if v is None else bool(v)


def _draw_theory(art: Artists, theory, keys_skip=(), keys_only=None):
    ax = art.ax
    tc = theory_of(theory)
    if tc is None:
        art.notes.append("no theory curves with a 'ratio'; not drawn")
        return
    ratio = np.asarray(tc["ratio"], dtype=float)
    applies = theory_applies(theory)
    if not applies:
        art.notes.append("theory curves drawn as reference only (their assumptions do not hold)")
    styles = [(0, (2, 1)), (0, (4, 1, 1, 1)), (0, (1, 1)), (0, (6, 1, 1, 1, 1, 1))]
    k = 0
    for name, v in tc.items():
        if name == "ratio" or name in keys_skip or (keys_only and name not in keys_only):
            continue
        try:
            v = np.asarray(v, dtype=float)
        except (TypeError, ValueError):
            continue
        if v.shape != ratio.shape:
            continue
        ok = np.isfinite(v) & (v > 0)
        if applies:
            kw = dict(color=_C["black"], linewidth=0.9, linestyle=styles[k % len(styles)])
            label = f"theory: {name.replace('_', ' ')}"
        else:  # thin grey dots: shown for reference, its assumptions do not hold here
            kw = dict(color="#8C8C8C", linewidth=0.7, linestyle=(0, (1, 2)), alpha=0.9)
            label = f"theory, reference only: {name.replace('_', ' ')}"
        (ln,) = ax.plot(ratio[ok], v[ok], label=label, **kw)
        art.lines[f"theory:{name}"] = ln
        art.traces.append(Trace(f"theory:{name}", "line", ratio[ok], v[ok]))
        k += 1


def plot_training_law(sweep, ax=None, *, noise_variance=None, theory=None,
                      method: str = "min_norm", **style) -> Artists:
    """Training MSE of least squares / min-norm against p′/n, over the law σ²(1 − p′/n).

    Parameters
    ----------
    sweep : threshold table (see :func:`plot_threshold`)
    noise_variance : float, optional
        σ² for the law :math:`E[\\text{train MSE}] = \\sigma^2 (1 - p'/n)` (with an
        intercept, :math:`\\sigma^2 (n - p' - 1)/n`), zero past the threshold
        (common practice, no source: the projection argument).  Not needed when
        ``theory`` carries a ``train`` curve (e.g. with the per-point
        :math:`\\sigma^2_\\text{eff}(p')` of a feature-wise sweep).
    theory : mapping, optional
        ``{"ratio": r, "train": values}``.

    Returns
    -------
    Artists
        ``lines["measured"]``, ``bands["measured"]``, ``lines["law"]``.
    """
    ax = _new_axes(ax)
    cols = _columns(sweep)
    art = Artists(ax=ax, x_quantity=_ratio_label(cols), y_quantity="training MSE")
    agg = _aggregate(cols, method, "train_mse")
    if agg is None:
        raise InputError(f"the sweep table has no train_mse rows for method {method!r}")
    xs, mean, se, reps = agg
    kw = _line_kw(method, style)
    (ln,) = ax.plot(xs, mean, label=f"measured ({_METHOD_LABELS.get(method, method)})", **kw)
    art.lines["measured"] = ln
    art.traces.append(Trace("measured", "line", xs, mean))
    if reps > 1:
        b = ax.fill_between(xs, mean - se, mean + se, color=kw["color"], alpha=0.18, linewidth=0)
        art.bands["measured"] = b
        art.traces.append(Trace("measured", "band", xs, mean, mean - se, mean + se))
    law = None
    if theory is None and hasattr(sweep, "band_of"):
        theory = sweep
    if noise_variance is None and hasattr(sweep, "variances"):
        noise_variance = getattr(sweep.variances, "noise_variance", None)
    tc = theory_of(theory)
    if tc is not None:
        for key in ("train", "train_mse", "training"):
            if tc.get(key) is not None:
                law = (np.asarray(tc["ratio"], float), np.asarray(tc[key], float),
                       "theory: σ²_eff (1 − p′/n)")
                break
    if law is None and noise_variance is not None:
        nt = cols.get("n_train")
        n = float(np.asarray(nt, float)[0]) if nt is not None and np.size(nt) else np.inf
        xs_f = np.linspace(0.0, max(1.0, float(xs.max())), 200)
        v = float(noise_variance) * np.clip(1.0 - xs_f - 1.0 / n, 0.0, None)
        law = (xs_f, v, "law σ²(1 − (p′+1)/n), σ² = " + f"{noise_variance:.3g}")
    if law is not None:
        (lw,) = ax.plot(law[0], law[1], color=_C["black"], linestyle=(0, (2, 1)), linewidth=0.9,
                        label=law[2])
        art.lines["law"] = lw
        art.traces.append(Trace("law", "line", law[0], law[1]))
    else:
        art.notes.append("no noise variance or theory curve: the law is not drawn")
    _ratio_axis(art, cols, label=False)
    ax.set_ylim(bottom=0)
    ax.set_xlabel(art.x_quantity)
    ax.set_ylabel(art.y_quantity)
    art.texts.append(ax.legend(loc="best", fontsize=NOTE_PT, frameon=False))
    return art


def plot_bias_variance(sim, ax=None, *, method: str = "min_norm", **style) -> Artists:
    """Exact bias² and variance of an estimator against p′/n (simulation, truth known).

    Parameters
    ----------
    sim : table with ``ratio``, ``method`` and ``bias2`` (or ``bias_sq``/``bias``)
        and ``variance`` columns (one row per point × repeat × method).
    method : str
        Which estimator's decomposition to show.

    Returns
    -------
    Artists
        ``lines["bias2"]``, ``lines["variance"]``, ``lines["total"]`` (their sum).
    """
    ax = _new_axes(ax)
    cols = _columns(sim)
    bkey = next((k for k in ("bias2", "bias_sq", "bias_squared", "bias") if k in cols), None)
    if bkey is None or "variance" not in cols:
        raise InputError("bias/variance needs 'bias2' and 'variance' columns (simulation output)")
    art = Artists(ax=ax, x_quantity=_ratio_label(cols), y_quantity="excess risk (log scale)")
    b = _aggregate(cols, method, bkey)
    v = _aggregate(cols, method, "variance")
    if b is None or v is None:
        raise InputError(f"no bias/variance rows for method {method!r}")
    kw = dict(linewidth=1.2)
    kw.update(style)
    (lb,) = ax.plot(b[0], b[1], color=_C["blue"], linestyle="--", label="bias²", **kw)
    (lv,) = ax.plot(v[0], v[1], color=_C["vermillion"], linestyle="-.", label="variance", **kw)
    common, ib, iv = np.intersect1d(b[0], v[0], return_indices=True)
    tot = b[1][ib] + v[1][iv]
    (lt,) = ax.plot(common, tot, color=_C["black"], linestyle="-", label="bias² + variance", **kw)
    art.lines.update(bias2=lb, variance=lv, total=lt)
    art.traces.extend([Trace("bias2", "line", b[0], b[1]), Trace("variance", "line", v[0], v[1]),
                       Trace("total", "line", common, tot)])
    _ratio_axis(art, cols, label=False)
    ax.set_yscale("log")
    ax.set_xlabel(art.x_quantity)
    ax.set_ylabel(art.y_quantity)
    art.texts.append(ax.legend(loc="best", fontsize=NOTE_PT, frameon=False,
                               title=_METHOD_LABELS.get(method, method),
                               title_fontsize=NOTE_PT))
    return art


def _null_locator():
    from matplotlib.ticker import NullLocator

    return NullLocator()
