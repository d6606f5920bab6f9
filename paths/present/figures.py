"""Publication figures: panels composed from :mod:`paths.plot`, and ONE save function.

Settings (all applied by :func:`publication_style` and kept with the panel so
that saving renders with them):

- width ``single`` ≈ 3.5 in or ``double`` ≈ 7.2 in, the common journal column
  widths (common practice, no source);
- 300 dpi rasters; PDF fonts embedded as TrueType (``pdf.fonttype = 42``);
  SVG text as paths (renders identically everywhere, including inlined in the
  HTML report);
- the Okabe & Ito (2008) colour-blind-safe palette, each colour with its own
  line style so that curves survive greyscale printing;
- every axis labelled with its quantity; penalty axes carry the convention.

:func:`save_figure` writes ``NAME.<format>`` for each requested format and
``NAME.csv``, the tidy table of exactly what the panel draws (one row per
drawn point: panel, series, kind, quantities, x, y, band limits), so that the
figure can be redrawn in any tool.  Writes are atomic (:mod:`paths.output`).
The non-interactive Agg canvas is used throughout; pyplot is never imported.
"""
from __future__ import annotations

import io
import re
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from paths.data.validation import InputError
from paths.data.output import write_bytes, write_csv
from paths.present.plot import (LABEL_PT, NOTE_PT, OKABE_ITO, TICK_PT, Artists,
                                plot_bias_variance, plot_coef_path, plot_errors,
                                plot_reml_profile, plot_rule_strip, plot_shrinkage,
                                plot_spectrum, plot_target_penalties, plot_threshold,
                                plot_training_law,
                                plot_variance_share, unicode_log_ticks)

__all__ = ["FORMATS", "WIDTHS", "Panel", "parse_formats", "parse_width", "publication_style",
           "path_figure", "spectrum_figure", "reml_figure", "targets_figure", "threshold_figure",
           "figure_table",
           "save_figure"]

#: Output formats :func:`save_figure` can write.
FORMATS = ("png", "pdf", "svg")
#: Figure widths in inches: common journal column widths (common practice, no source).
WIDTHS = {"single": 3.5, "double": 7.2}
DPI = 300
CSV_HEADER = ["panel", "series", "kind", "x_quantity", "y_quantity", "x", "y", "y_low", "y_high"]


def parse_formats(spec) -> tuple:
    """``"png,pdf"`` or a sequence -> a tuple of known formats, in order, without repeats;
    ``"none"`` -> an empty tuple (no figure files).

    Raises
    ------
    InputError
        An unknown or empty format list (one line, listing the valid ones).
    """
    if isinstance(spec, str) and spec.strip().lower() == "none":
        return ()  # no figure files (the report still inlines its figures)
    items = spec.split(",") if isinstance(spec, str) else list(spec)
    out = []
    for item in items:
        f = str(getattr(item, "value", item)).strip().lower().lstrip(".")
        if not f:
            continue
        if f not in FORMATS:
            raise InputError(f"unknown figure format {f!r}; choose from {', '.join(FORMATS)} "
                             "(comma-separated, e.g. formats='png,pdf') or none")
        if f not in out:
            out.append(f)
    if not out:
        raise InputError(f"no figure format given; choose from {', '.join(FORMATS)} "
                         "(or none)")
    return tuple(out)


def parse_width(spec) -> str:
    """``"single"`` or ``"double"`` (case-insensitive); anything else is an InputError."""
    w = str(getattr(spec, "value", spec)).strip().lower()
    if w not in WIDTHS:
        raise InputError(f"unknown figure width {spec!r}; choose single (3.5 in) or "
                         "double (7.2 in)")
    return w


def _rc(width: str, name: str) -> dict:
    from cycler import cycler

    base = LABEL_PT
    colors = [OKABE_ITO[k] for k in ("blue", "vermillion", "bluish_green", "orange",
                                     "reddish_purple", "sky_blue", "black", "yellow")]
    styles = ["-", "--", "-.", ":", (0, (5, 1, 1, 1, 1, 1)), (0, (3, 1, 1, 1)), (0, (1, 1)),
              (0, (6, 2))]
    return {
        "font.family": "DejaVu Sans", "font.size": base, "axes.titlesize": base,
        "axes.labelsize": base, "xtick.labelsize": TICK_PT, "ytick.labelsize": TICK_PT,
        "legend.fontsize": NOTE_PT, "legend.title_fontsize": NOTE_PT, "axes.linewidth": 0.6, "lines.linewidth": 1.0,
        "xtick.major.width": 0.6, "ytick.major.width": 0.6, "xtick.major.size": 2.5,
        "ytick.major.size": 2.5, "axes.prop_cycle": cycler(color=colors) + cycler(linestyle=styles),
        "pdf.fonttype": 42, "ps.fonttype": 42, "svg.fonttype": "path",
        "svg.hashsalt": f"paths-{name}", "savefig.dpi": DPI, "figure.dpi": 100,
        "mathtext.fontset": "dejavusans", "axes.spines.top": False, "axes.spines.right": False,
    }


@contextmanager
def publication_style(width: str = "single", name: str = "figure"):
    """Context manager applying the publication rc settings (fonts, palette, TrueType)."""
    import matplotlib as mpl

    with mpl.rc_context(_rc(parse_width(width), name)):
        yield


@dataclass(frozen=True)
class Panel:
    """A composed figure: the matplotlib Figure and each sub-panel's :class:`Artists`.

    Attributes
    ----------
    figure : matplotlib.figure.Figure
    artists : dict
        Sub-panel label (``"a"``, ``"b"``, …) -> Artists.
    name : str
        Default file stem.
    caption : str
        One-sentence description for the report, penalty convention included.
    width : str
    rc : dict
        The rc settings to render with.
    """

    figure: object = field(repr=False)
    artists: dict = field(repr=False)
    name: str
    caption: str = field(repr=False)
    width: str
    rc: dict = field(repr=False, default_factory=dict)

    def _repr_png_(self) -> bytes:
        """Shown inline by Jupyter (a notebook cell ending in a Panel draws the figure)."""
        import matplotlib as mpl

        buf = io.BytesIO()
        with mpl.rc_context(self.rc):
            self.figure.savefig(buf, format="png", dpi=150)
        return buf.getvalue()


def _new_figure(width: str, height: float, rows: int, cols: int, name: str):
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(WIDTHS[width], height), layout="constrained")
    FigureCanvasAgg(fig)
    axes = fig.subplots(rows, cols, squeeze=False).ravel()
    return fig, list(axes)


def _letter(art: Artists, letter: str):
    art.ax.set_title(f"({letter})", loc="left", fontweight="bold", fontsize=LABEL_PT, pad=3)


def _compose(name, width, caption, layout, drawers):
    """Draw each ``drawer(ax) -> Artists`` into a grid; single width stacks, double lays out in a row."""
    width = parse_width(width)
    k = len(drawers)
    rows, cols, height = layout[width](k)
    rc = _rc(width, name)
    import matplotlib as mpl

    with mpl.rc_context(rc):
        fig, axes = _new_figure(width, height, rows, cols, name)
        arts = {}
        for i, (ax, draw) in enumerate(zip(axes, drawers)):
            letter = "abcdefgh"[i]
            art = draw(ax)
            if k > 1:
                _letter(art, letter)
            arts[letter] = art
        for ax in axes[k:]:
            ax.set_visible(False)
        unicode_log_ticks(fig)
    return Panel(figure=fig, artists=arts, name=name, caption=caption, width=width, rc=rc)


def _stack_or_row(h_single, h_double):
    return {"single": lambda k: (k, 1, h_single * k + 0.3),
            "double": lambda k: (1, k, h_double)}


def _convention(result) -> str:
    std = getattr(result, "standardize", None)
    if std is None and isinstance(result, dict):
        std = result.get("standardize", True)
    return ("Penalty convention: minimize ‖y − b0 − Xβ‖² + λ‖β‖², X centered"
            + (" and standardized (population SD)" if std in (None, True) else "")
            + ", intercept unpenalized")


def _families(selected) -> int:
    from paths.present.plot import rule_family, selections_of

    try:
        sels = selections_of({"lambdas": [1.0]}, selected)
    except InputError:
        return 1
    drawn = [r for r, v in sels.items() if v["lambda"] is not None]
    return max(1, len(drawn) + len({rule_family(r) for r in drawn}))


def path_figure(result, *, selected=None, cv=None, x: str = "df", width: str = "single",
                n_labels: int = 5, reported: str | None = None, target: int = 0,
                name: str = "fig-path") -> Panel:
    """Error curves with each rule's choice (a), the rules by family (b), coefficients (c).

    The x axis of every panel is the effective degrees of freedom (λ on a top
    axis) by default, so the λ → 0 (min-norm) end is drawn at its own df;
    ``x="log_lambda"`` puts it at the left edge after an axis break.

    Parameters
    ----------
    result : RidgePath or mapping
    selected : mapping, optional
        Every rule's choice (see :func:`paths.present.plot.selections_of`).
    reported : str, optional
        The reported rule (its model is dotted in panel c); default the first selected.
    cv : optional
        K-fold CV on the path's grid (:func:`paths.present.plot.plot_errors`).
    x : {"df", "log_lambda"}
    width : {"single", "double"}
    target : int
        Which target of a multi-target path.

    Returns
    -------
    Panel
    """
    import matplotlib as mpl
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    width = parse_width(width)
    rc = _rc(width, name)
    rows = _families(selected) if selected is not None else 3
    strip_h = 0.45 + 0.125 * rows
    with mpl.rc_context(rc):
        if width == "single":
            fig = Figure(figsize=(WIDTHS[width], 2.5 + strip_h + 2.3 + 0.3), layout="constrained")
            gs = fig.add_gridspec(3, 1, height_ratios=[2.5, strip_h, 2.3])
            ax_e, ax_s, ax_c = (fig.add_subplot(gs[i, 0]) for i in range(3))
        else:
            fig = Figure(figsize=(WIDTHS[width], 2.7 + strip_h + 0.4), layout="constrained")
            gs = fig.add_gridspec(2, 2, height_ratios=[2.7, strip_h])
            ax_e, ax_s = fig.add_subplot(gs[0, 0]), fig.add_subplot(gs[1, 0])
            ax_c = fig.add_subplot(gs[:, 1])
        FigureCanvasAgg(fig)
        ax_s.sharex(ax_e)
        arts = {"a": plot_errors(result, ax_e, x=x, cv=cv, selected=selected, target=target),
                "b": plot_rule_strip(result, ax_s, x=x, selected=selected, target=target),
                "c": plot_coef_path(result, ax_c, x=x, selected=selected, n_labels=n_labels,
                                    reported=reported, target=target)}
        ax_e.set_xlabel("")
        for letter, art in arts.items():
            _letter(art, letter)
        unicode_log_ticks(fig)
    axis = ("effective degrees of freedom tr(H) (penalty lambda on the top axis)" if x == "df"
            else "log10 lambda")
    caption = ("(a) Training error, GCV, exact leave-one-out"
               + (", K-fold cross-validation" if cv is not None else "")
               + " and test error (where a test set was given) against " + axis
               + "; each rule's choice is a marker on the curve it minimises, the hollow markers "
               "are the minimum-norm fit (lambda -> 0), a whisker is ±1 cross-validation SE. "
               "(b) Every rule's choice by family. (c) The coefficients of the features largest "
               "at the reported penalty (standardized scale, named at the lambda -> 0 end; dots: "
               "the reported model), the other features as a grey range. "
               + _convention(result) + ".")
    return Panel(figure=fig, artists=arts, name=name, caption=caption, width=width, rc=rc)


def spectrum_figure(result, *, lam=None, selected=None, width: str = "single",
                    name: str = "fig-spectrum") -> Panel:
    """Shrinkage per component at the chosen λ (a), the spectrum vs Marchenko–Pastur (b),
    and each component's share of the min-norm variance (c)."""
    drawers = [lambda ax: plot_shrinkage(result, ax, lam=lam, selected=selected),
               lambda ax: plot_spectrum(result, ax),
               lambda ax: plot_variance_share(result, ax)]
    caption = ("(a) Shrinkage d_j^2/(d_j^2 + lambda) of each principal component at the chosen "
               "penalty, with the singular values; (b) eigenvalues of the centered, "
               "standardized design against the Marchenko–Pastur density for its ratio; "
               "(c) each component's share sigma^2/d_j^2 of the min-norm coefficient variance. "
               + _convention(result) + ".")
    layout = {"single": lambda k: (3, 1, 6.9), "double": lambda k: (1, 3, 2.5)}
    return _compose(name, width, caption, layout, drawers)


def reml_figure(result, *, width: str = "single", name: str = "fig-reml") -> Panel:
    """The restricted log-likelihood profile of each target (:func:`paths.plot.plot_reml_profile`)."""
    caption = ("Restricted log-likelihood of the penalty (REML; Patterson & Thompson 1971, "
               "Harville 1977) relative to its maximum, with the REML choice marked; penalties "
               "above the dotted line at -1.92 form the approximate 95% likelihood-ratio "
               "interval. " + _convention(result) + ".")
    layout = {"single": lambda k: (1, 1, 2.6), "double": lambda k: (1, 1, 2.6)}
    return _compose(name, width, caption, layout, [lambda ax: plot_reml_profile(result, ax)])


def targets_figure(choices, *, reported: str | None = None, standardize=True,
                   width: str = "single", name: str = "fig-targets") -> Panel:
    """The distribution across targets of the penalty of the reported rule and of GCV,
    leave-one-out, K-fold CV and REML where present (:func:`paths.plot.plot_target_penalties`);
    its size does not grow with the targets."""
    t = max((np.size(v) for v in choices.values()), default=0)
    keep = [reported] + [r for r in ("gcv", "loo", "cv", "reml") if r != reported]
    choices = {r: choices[r] for r in keep if r in choices}  # at most four outlines: readable
    caption = (f"Penalty chosen for each of the {t} targets, by rule: number of targets per bin "
               "of log10 lambda" + (f"; the reported rule ({reported}) filled" if reported
                                    else "") + ". "
               + _convention({"standardize": standardize}) + ".")
    layout = {"single": lambda k: (1, 1, 2.6), "double": lambda k: (1, 1, 2.8)}
    return _compose(name, width, caption, layout, [
        lambda ax: plot_target_penalties(choices, ax, reported=reported,
                                         standardize=standardize)])


def threshold_figure(sweep, *, theory=None, noise_variance=None, bias_variance=None,
                     width: str = "single", name: str = "fig-threshold") -> Panel:
    """Test MSE across p′ = n (a), the training curve over its law (b), and — in
    simulation — bias² and variance of the min-norm fit (c).

    ``sweep`` may be a :class:`paths.threshold.ThresholdResult`, a
    :class:`paths.simulate.SimulationResult` (then panel (c) is drawn from its exact
    bias² and variance), or a ``threshold.csv``-like table.
    """
    if hasattr(sweep, "bias2") and hasattr(sweep, "sweep"):
        if bias_variance is None:
            bias_variance = sweep
        sweep = sweep.sweep
    drawers = [lambda ax: plot_threshold(sweep, ax, theory=theory),
               lambda ax: plot_training_law(sweep, ax, noise_variance=noise_variance,
                                            theory=theory)]
    if bias_variance is not None:
        drawers.append(lambda ax: plot_bias_variance(bias_variance, ax))
    caption = ("(a) Test MSE against the ratio of features to training samples for the "
               "min-norm fit and ridge at fixed and tuned penalties, with baselines and "
               "theory curves (log error axis; the vertical line is where least squares starts to "
               "interpolate, p' + 1 = n with the intercept; theory drawn as thin grey dots is "
               "for reference only, its assumptions do not hold); (b) training MSE of "
               "least squares over the law sigma^2 (1 - p'/n)"
               + ("; (c) exact bias^2 and variance of the min-norm fit" if bias_variance
                  is not None else "") + ". Penalty convention: minimize ‖y − b0 − Xβ‖² "
               "+ λ‖β‖², intercept unpenalized.")
    layout = {"single": lambda k: (k, 1, 2.6 * k + 1.0), "double": lambda k: (1, k, 3.2)}
    panel = _compose(name, width, caption, layout, drawers)
    _legend_below(panel, "a", ncol=2 if panel.width == "single" else 4)
    return panel


def _legend_below(panel: Panel, letter: str, ncol: int) -> None:
    """Move panel ``letter``'s legend under the whole figure (one row per ``ncol`` entries), so
    a long legend never crowds a narrow panel."""
    import matplotlib as mpl

    art = panel.artists[letter]
    leg = art.ax.get_legend()
    if leg is None:
        return
    handles, labels = leg.legend_handles, [t.get_text() for t in leg.get_texts()]
    title = leg.get_title().get_text()
    leg.remove()
    art.texts[:] = [t for t in art.texts if t is not leg]
    with mpl.rc_context(panel.rc):
        new = panel.figure.legend(handles, labels, loc="outside lower center", ncol=ncol,
                                  frameon=False, fontsize=NOTE_PT, title=title or None,
                                  title_fontsize=NOTE_PT, handlelength=2.2, columnspacing=1.2)
    art.texts.append(new)


_PLAIN = [(r"\log_{10}", "log10 "), (r"\lambda", "λ"), (r"\beta", "β"), (r"\gamma", "γ"),
          (r"\sigma", "σ"), (r"\Sigma", "Σ"), (r"\|", "‖"), (r"\to", "→"), (r"\mathrm{tr}", "tr"),
          (r"\,", " "), ("^2", "²"), ("^+", "⁺"), ("^T", "ᵀ"), ("_0", "₀"), ("{", ""), ("}", ""),
          ("$", ""), ("\n", " ")]


def _plain(label: str) -> str:
    for a, b in _PLAIN:
        label = label.replace(a, b)
    return re.sub(r"\s+", " ", label).strip()


def figure_table(panel: Panel):
    """``(header, rows)``: the tidy table of every point the panel draws."""
    rows = []
    for letter, art in panel.artists.items():
        xq, yq = _plain(art.x_quantity), _plain(art.y_quantity)
        for tr in art.traces:
            x = np.atleast_1d(np.asarray(tr.x, dtype=float))
            y = np.atleast_1d(np.asarray(tr.y, dtype=float))
            lo = None if tr.low is None else np.atleast_1d(np.asarray(tr.low, dtype=float))
            hi = None if tr.high is None else np.atleast_1d(np.asarray(tr.high, dtype=float))
            for i in range(x.size):
                rows.append([letter, tr.series, tr.kind, xq, yq,
                             _num(x[i]), _num(y[i] if y.size == x.size else y[0]),
                             None if lo is None else _num(lo[i]),
                             None if hi is None else _num(hi[i])])
    return CSV_HEADER, rows


def _num(v):
    v = float(v)
    return v if np.isfinite(v) else None


def save_figure(panel: Panel, out_dir, name: str | None = None, *, formats=("png",),
                close: bool = False) -> list:
    """Write the panel as ``NAME.<format>`` for each format, and ``NAME.csv`` (what it plots).

    Parameters
    ----------
    panel : Panel
    out_dir : path
        An existing folder (see :func:`paths.output.prepare_out_dir`).
    name : str, optional
        File stem; default ``panel.name``.
    formats : str or sequence
        Any of ``png`` (300 dpi), ``pdf`` (TrueType fonts embedded), ``svg``; empty:
        only the CSV.
    close : bool
        Release the figure's memory after writing.

    Returns
    -------
    list of pathlib.Path
        The files written, figures first, then the CSV.

    Raises
    ------
    InputError
        An unknown format.
    """
    import matplotlib as mpl

    fmts = parse_formats(formats) if formats else ()
    out = Path(out_dir)
    stem = name or panel.name
    files = []
    meta = {"png": {"Software": "paths (matplotlib)"}, "svg": {"Date": None},
            "pdf": {"CreationDate": None, "Creator": "paths (matplotlib)"}}
    with mpl.rc_context(panel.rc):
        for fmt in fmts:
            buf = io.BytesIO()
            panel.figure.savefig(buf, format=fmt, dpi=DPI, metadata=meta[fmt])
            files.append(write_bytes(out / f"{stem}.{fmt}", buf.getvalue()))
            # the layout is solved once (at the first format): the others reuse it, and with
            # no engine at all (not "none", a placeholder) savefig skips its layout pre-draw
            panel.figure.set_layout_engine(None)
    files.append(write_csv(out / f"{stem}.csv", *figure_table(panel)))
    if close:
        panel.figure.clear()
    return files
