"""Plot helpers: the drawn artists read back against the result arrays (no pixel comparisons).

References named beside each check: the result arrays of :func:`paths.fit_path`
(themselves checked against scikit-learn in tests/test_path.py), numpy for the
closed forms, scipy quadrature for the Marchenko–Pastur density (Marchenko &
Pastur 1967: a probability density on [(1-√γ)², (1+√γ)²]).
"""
from __future__ import annotations

import numpy as np
import pytest
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.colors import to_hex
from matplotlib.figure import Figure
from numpy.testing import assert_allclose
from scipy.integrate import quad

from error_bounds import U, gamma as gamma_n, reorder_bound
from paths import fit_path
from paths.present import plot
from paths.data.validation import InputError

# bound: float64 arrays go into matplotlib unchanged; the helper and the test may
# evaluate the same elementwise expression in another way (log10 vs log / log 10, a
# quotient): at most 8 operations of at most one ulp each (numpy's elementary
# functions), gamma_8 relative (Higham 2002 section 3.1).
TOL = gamma_n(8)


def _axes():
    fig = Figure(figsize=(4, 3))
    FigureCanvasAgg(fig)
    return fig.add_subplot()


@pytest.fixture(scope="module")
def path():
    """Synthetic wide problem (seeded): 40 rows, 60 columns, with a held-out test set."""
    rng = np.random.default_rng(3)
    X = rng.standard_normal((55, 60))
    beta = np.zeros(60)
    beta[:5] = [3.0, -2.0, 1.5, 1.0, -0.5]
    y = X @ beta + rng.standard_normal(55)
    return fit_path(X[:40], y[:40], X_test=X[40:], y_test=y[40:], n_lambdas=40)


@pytest.mark.parametrize("x", ["log_lambda", "df"])
def test_coef_path_lines_equal_the_path(path, x):
    """Each named line's data equal the path's standardized coefficients (RidgePath.coef_std)
    against log10(lambdas) (numpy) or the effective df; the other features are one envelope
    whose limits are their smallest and largest coefficient at each penalty (numpy min/max)."""
    art = plot.plot_coef_path(path, _axes(), x=x, n_labels=4)
    xs = np.log10(path.lambdas) if x == "log_lambda" else path.df
    labelled = list(art.lines)
    assert len(labelled) == 4
    for name in labelled:
        j = path.feature_names.index(name)
        line = art.lines[name]
        assert_allclose(line.get_xdata(), xs, rtol=TOL)
        assert_allclose(line.get_ydata(), path.coef_std[:, j], rtol=TOL, atol=0)
    rest = [j for j in range(path.n_features) if path.feature_names[j] not in labelled]
    band = next(t for t in art.traces if t.kind == "band")
    assert_allclose(band.low, path.coef_std[:, rest].min(axis=1), rtol=TOL)
    assert_allclose(band.high, path.coef_std[:, rest].max(axis=1), rtol=TOL)
    # the named ones are the largest |beta| at the least-penalized end without a choice
    i = int(np.argmin(path.lambdas))
    top = set(np.argsort(-np.abs(path.coef_std[i]))[:4])
    assert {path.feature_names.index(n) for n in labelled} == top
    names = {t.get_text() for t in art.texts if hasattr(t, "get_text")}
    assert set(labelled) <= names  # named at the line ends
    assert art.ax.get_xlabel() and art.ax.get_ylabel()


def test_coef_path_dots_the_reported_model(path):
    """The reported rule's coefficients are dots on the named lines at its df (closed form
    1 + sum d^2/(d^2 + lambda), ESL eq. 3.50), and a wedge on the axis."""
    sel = {"gcv": {"lambda": float(path.lambdas[10]), "df": float(path.df[10]), "index": 10},
           "hkb": {"lambda": 2.5, "df": None}}
    art = plot.plot_coef_path(path, _axes(), selected=sel, reported="hkb", x="df")
    d = path.singular_values
    df = 1 + np.sum(d**2 / (d**2 + 2.5))
    # bound: the same sum of r same-sign terms in another order (reorder_bound)
    tol = reorder_bound(d.size, ops=3)
    assert_allclose(art.markers["reported"].get_xdata()[0], df, rtol=tol)
    dots = art.markers["reported_coefficients"]
    assert_allclose(dots.get_xdata(), df, rtol=tol)
    texts = " ".join(t.get_text() for t in art.texts if hasattr(t, "get_text"))
    assert "reported (HKB)" in texts


def test_error_curves_equal_the_path_and_markers_sit_on_them(path):
    """Train/GCV/LOO/test lines equal the path arrays; each rule's marker is at (log10 λ, the
    criterion at λ); min-norm markers at the MinNormFit errors, at the axis edge."""
    art = plot.plot_errors(path, _axes(), x="log_lambda")
    lx = np.log10(path.lambdas)
    for key, arr in (("train", path.train_mse), ("gcv", path.gcv), ("loo", path.loo_mse),
                     ("test", path.test_mse)):
        assert_allclose(art.lines[key].get_xdata(), lx, rtol=TOL)
        assert_allclose(art.lines[key].get_ydata(), arr, rtol=TOL)
    for rule, arr in (("gcv", path.gcv), ("loo", path.loo_mse), ("test", path.test_mse)):
        i = path.index_min(rule)
        m = art.markers[rule]
        assert_allclose(m.get_xdata()[0], lx[i], rtol=TOL)  # bound: TOL
        assert_allclose(m.get_ydata()[0], arr[i], rtol=TOL)
    for key, v in (("gcv", path.min_norm.gcv), ("loo", path.min_norm.loo_mse),
                   ("test", path.min_norm.test_mse)):
        m = art.markers[f"min_norm:{key}"]
        assert_allclose(m.get_ydata()[0], v, rtol=TOL)  # bound: TOL
        assert m.get_xdata()[0] < lx.min()  # left of the grid: lambda = 0 after the break
    assert art.ax.get_yscale() == "log"
    labels = [t.get_text() for t in art.ax.get_legend().get_texts()]
    assert {"training MSE", "GCV", "leave-one-out", "test MSE"} <= set(labels)
    assert not art.refs.get("rule:gcv")  # no full-height vertical lines


def test_error_curves_min_norm_at_its_df_on_a_df_axis(path):
    """On the df axis the lambda -> 0 markers sit at df = rank + 1 (MinNormFit.df), and the
    top axis labels that position 0."""
    art = plot.plot_errors(path, _axes(), x="df")
    # exact: an integer-valued float, exactly representable
    assert_allclose(art.markers["min_norm:gcv"].get_xdata()[0], path.rank + 1, rtol=0)
    axis = next(t for t in art.traces if t.series == "lambda_axis")
    assert 0.0 in axis.y and path.rank + 1 in axis.x


def test_error_curves_draw_cv_and_its_se_at_the_choice():
    """Plain arrays/dicts are accepted; the CV curve is the mean and the chosen penalty carries
    a ±1 SE whisker (numpy arithmetic), not a band."""
    lam = np.geomspace(100, 0.01, 20)
    mean = 1 + (np.log10(lam) - 0.5) ** 2
    se = np.full(20, 0.1)
    res = {"lambdas": lam, "df": np.linspace(1, 10, 20), "gcv": mean * 1.1}
    art = plot.plot_errors(res, _axes(), cv={"mse": mean, "se": se, "n_folds": 5},
                           selected={"cv": {"lambda": lam[7], "df": None}}, x="log_lambda")
    assert set(art.lines) == {"gcv", "cv"}
    # bound: TOL; the whisker is one addition on each side (u relative)
    assert_allclose(art.lines["cv"].get_ydata(), mean, rtol=TOL)
    bar = next(t for t in art.traces if t.kind == "error bar")
    assert_allclose([bar.low[0], bar.high[0]], [mean[7] - 0.1, mean[7] + 0.1], rtol=2 * U)
    assert_allclose(art.markers["cv"].get_ydata()[0], mean[7], rtol=TOL)
    assert "5-fold CV" in [t.get_text() for t in art.ax.get_legend().get_texts()]


def test_rule_strip_groups_rules_by_family(path):
    """A row per rule under its family heading; markers at each rule's df (closed form)."""
    sel = {"gcv": {"lambda": 1.0, "df": None}, "hkb": {"lambda": 2.5, "df": None},
           "df": {"lambda": None, "df": None}, "cv": {"lambda": 0.5, "df": None}}
    art = plot.plot_rule_strip(path, _axes(), selected=sel, x="df")
    d = path.singular_values
    for rule, lam in (("gcv", 1.0), ("hkb", 2.5), ("cv", 0.5)):
        # bound: the same sum in another order (reorder_bound)
        assert_allclose(art.markers[rule].get_xdata()[0], 1 + np.sum(d**2 / (d**2 + lam)),
                        rtol=reorder_bound(d.size, ops=3))
    heads = [t.get_text() for t in art.texts]
    assert heads == ["prediction-error estimates", "plug-in constants"]
    assert "df" not in art.markers  # a target that was not given: no penalty, not drawn
    ticks = [t.get_text() for t in art.ax.get_yticklabels()]
    assert ticks == ["GCV", "K-fold CV", "HKB"]


def test_shrinkage_factors_at_the_chosen_lambda(path):
    """f_j = d_j²/(d_j² + λ) (the ridge shrinkage factor, ESL eq. 3.47) from the singular values."""
    lam = 3.7
    art = plot.plot_shrinkage(path, _axes(), lam=lam)
    d = path.singular_values
    # bound: TOL (same elementwise expression)
    assert_allclose(art.lines["shrinkage"].get_ydata(), d**2 / (d**2 + lam), rtol=TOL)
    assert_allclose(art.lines["singular_values"].get_ydata(), d, rtol=TOL)
    # exact: component numbers are small integers
    assert_allclose(art.lines["shrinkage"].get_xdata(), np.arange(1, d.size + 1), rtol=0)
    # their sum is the penalized part of the effective df (ESL eq. 3.50); bound:
    # the same sum in another order (reorder_bound)
    assert_allclose(np.sum(art.lines["shrinkage"].get_ydata()) + 1,
                    path.criteria_at([lam]).df[0], rtol=reorder_bound(d.size, ops=4))


@pytest.mark.parametrize("gamma", [0.3, 1.0, 2.5])
def test_marchenko_pastur_density_integrates_to_its_continuous_mass(gamma):
    """scipy quad: the continuous part integrates to min(1, 1/γ) (Marchenko & Pastur 1967)."""
    a, b = (1 - np.sqrt(gamma)) ** 2, (1 + np.sqrt(gamma)) ** 2
    val, err = quad(lambda x: float(plot.marchenko_pastur_density(np.array([x]), gamma)[0]),
                    a, b, limit=200)
    # spec: QUADPACK's accuracy, the larger of its error estimate and the requested
    # relative accuracy (scipy's default epsrel = 1.49e-8)
    assert_allclose(val, min(1.0, 1.0 / gamma), rtol=1.49e-8, atol=err)


def test_spectrum_histogram_and_curve(path):
    """Histogram mass equals (number of non-zero eigenvalues)/q; the MP curve is the published
    density times x·ln10 on the log10 axis; the support edges are (1 ∓ √γ)²."""
    art = plot.plot_spectrum(path, _axes())
    hist = next(t for t in art.traces if t.kind == "histogram")
    widths = hist.high - hist.low
    q = path.n_features
    # bound: counts / (q width) * width summed over the bins: reorder_bound
    assert_allclose(np.sum(hist.y * widths), path.rank / q, rtol=reorder_bound(widths.size, ops=4))
    gamma = q / (path.n_samples - 1)
    t = art.lines["marchenko_pastur"].get_xdata()
    x = 10.0 ** t
    # bound: the same expression (TOL), whose 10**t amplifies t's rounding by
    # |t| ln 10 (the condition number of 10**t)
    amp = 1 + np.abs(t) * np.log(10)
    assert_allclose(art.lines["marchenko_pastur"].get_ydata(),
                    plot.marchenko_pastur_density(x, gamma) * x * np.log(10),
                    rtol=TOL * amp.max() * 4)
    # bound: a log10 / 10** round trip (2 ulp) amplified by |t| ln 10, plus the
    # edge's own roundings (gamma_4)
    te = art.refs["edge_high"].get_xdata()[0]
    assert_allclose(10 ** te, (1 + np.sqrt(gamma)) ** 2,
                    rtol=4 * U * (1 + abs(te) * np.log(10)) + gamma_n(4))
    assert any("mass" in n for n in art.notes)  # gamma > 1: the point mass is stated


def test_variance_share_sums_to_one(path):
    """share_j = d_j^-2 / Σ d_k^-2 (the min-norm variance σ² Σ d_j^-2 split by component)."""
    art = plot.plot_variance_share(path, _axes())
    share = art.lines["share"].get_ydata()
    d = path.singular_values
    # bound: the same quotient of a sum of r positive terms (reorder_bound)
    tol = reorder_bound(d.size, ops=3)
    assert_allclose(share, d**-2.0 / np.sum(d**-2.0), rtol=tol)
    assert_allclose(share.sum(), 1.0, rtol=2 * tol)
    assert art.ax.get_yscale() == "log"


def _sweep_table():
    """A threshold.csv-like table (contract columns), two repeats, invented values."""
    ratio = np.array([0.5, 0.9, 1.0, 1.2, 2.0])
    rows = {k: [] for k in ("over", "n_train", "n_features", "ratio", "repeat", "method",
                            "train_mse", "test_mse")}
    rng = np.random.default_rng(0)
    for rep in range(2):
        for r in ratio:
            for meth, base in (("min_norm", 1 / abs(1 - r + 1e-1)), ("ridge_gcv", 1.2),
                               ("baseline_mean", 2.0)):
                rows["over"].append("features"); rows["n_train"].append(50)
                rows["n_features"].append(int(50 * r)); rows["ratio"].append(r)
                rows["repeat"].append(rep); rows["method"].append(meth)
                rows["train_mse"].append(max(0.0, 1 - r) + 0.01 * rng.random())
                rows["test_mse"].append(base * (1 + 0.1 * rng.random()))
    return {k: np.array(v) for k, v in rows.items()}


def test_threshold_lines_are_repeat_means_with_se_bands():
    """Each method's line is the mean over repeats per ratio; the band ± SD(ddof=1)/√R (numpy)."""
    tab = _sweep_table()
    theory = {"ratio": np.array([0.5, 0.9, 1.2, 2.0]), "min_norm": np.array([2.0, 10, 6, 2.1])}
    art = plot.plot_threshold(tab, _axes(), theory=theory)
    for meth in ("min_norm", "ridge_gcv", "baseline_mean"):
        sel = tab["method"] == meth
        xs = np.unique(tab["ratio"][sel])
        v = np.array([tab["test_mse"][sel][tab["ratio"][sel] == r] for r in xs])
        # exact: the ratios are copied values; bound: a mean of 2 (reorder_bound)
        assert_allclose(art.lines[meth].get_xdata(), xs, rtol=0)
        assert_allclose(art.lines[meth].get_ydata(), v.mean(axis=1), rtol=reorder_bound(2))
    band = next(t for t in art.traces if t.kind == "band" and t.series == "min_norm")
    sel = tab["method"] == "min_norm"
    v = np.array([tab["test_mse"][sel][tab["ratio"][sel] == r] for r in np.unique(tab["ratio"])])
    # bound: a stable SD of R values errs by gamma_{R+3} (1 + |mean| / sd) relative
    # (Chan, Golub & LeVeque 1983, Am. Stat. 37, 242), on each side, plus the band's
    # subtraction (u |high| / (high - y))
    sd = v.std(axis=1, ddof=1)
    rtol = 2 * gamma_n(5) * (1 + np.abs(v.mean(axis=1)) / sd) + 2 * U * band.high / (band.high - band.y)
    assert np.all(np.abs(band.high - band.y - sd / np.sqrt(2)) <= rtol * sd / np.sqrt(2))
    # with an intercept least squares interpolates at p' + 1 = n: ratio (n - 1)/n, n = 50;
    # exact: the same division of small integers, and the theory values are copied
    assert_allclose(art.refs["threshold"].get_xdata()[0], 49 / 50, rtol=0)
    assert_allclose(art.lines["theory:min_norm"].get_ydata(), theory["min_norm"], rtol=0)
    assert art.ax.get_xscale() == "linear"  # the sweep stops at 2 n
    assert art.ax.get_yscale() == "log"
    assert to_hex(art.lines["min_norm"].get_color()) == plot.STYLES["min_norm"]["color"].lower()


def test_threshold_axis_is_logarithmic_past_four_n_and_reference_theory_is_grey():
    """A sweep to p' = 8 n gets a log ratio axis (else the threshold is a hairline); theory
    marked ``applies: false`` is drawn thin, grey and dotted and labelled reference only."""
    tab = _sweep_table()
    tab = {k: np.concatenate([v, v]) for k, v in tab.items()}
    half = tab["ratio"].size // 2
    tab["ratio"][half:] *= 4.0
    theory = {"ratio": np.array([0.5, 0.9, 1.2, 8.0]), "min_norm": np.array([2.0, 10, 6, 2.1]),
              "applies": False}
    art = plot.plot_threshold(tab, _axes(), theory=theory)
    assert art.ax.get_xscale() == "log"
    ln = art.lines["theory:min_norm"]
    assert to_hex(ln.get_color()) == "#8c8c8c" and ln.get_linewidth() < 0.9
    assert "reference only" in ln.get_label()
    applies = plot.plot_threshold(tab, _axes(), theory={**theory, "applies": True})
    assert to_hex(applies.lines["theory:min_norm"].get_color()) == "#000000"


def test_interpolation_ratio_of_a_sweep_over_rows():
    """Over training rows (p fixed) least squares interpolates at n' = p + 1: ratio p/(p + 1)."""
    cols = {"over": np.array(["samples"]), "n_features": np.array([30]), "ratio": np.array([1.0])}
    assert_allclose(plot.interpolation_ratio(cols), 30 / 31, rtol=2 * U)  # bound: one division, 1 ulp


def test_training_law_is_sigma2_times_one_minus_ratio():
    """E[train MSE] = σ²(1 − (p′+1)/n), zero past the threshold (projection argument;
    common practice, no source)."""
    tab = _sweep_table()
    art = plot.plot_training_law(tab, _axes(), noise_variance=1.0)
    xs = art.lines["law"].get_xdata()
    # bound: three operations on numbers <= 1 on each side: absolute error <= 3u
    # each (Higham 2002 section 2.2); relative tolerance would be meaningless at 0
    assert_allclose(art.lines["law"].get_ydata(), np.clip(1 - xs - 1 / 50, 0, None),
                    rtol=0, atol=6 * U)


def test_bias_variance_total_is_the_sum():
    tab = {"ratio": np.array([0.5, 2.0]), "method": np.array(["min_norm"] * 2),
           "bias2": np.array([0.0, 0.5]), "variance": np.array([1.0, 0.9])}
    art = plot.plot_bias_variance(tab, _axes())
    # bound: one rounded addition against the rounded literal: 1 ulp
    assert_allclose(art.lines["total"].get_ydata(), [1.0, 1.4], rtol=2 * U)


def test_missing_inputs_are_one_line_errors():
    with pytest.raises(InputError, match="lambdas"):
        plot.plot_errors({"gcv": [1, 2]}, _axes())
    with pytest.raises(InputError, match="x must be"):
        plot.plot_coef_path({"lambdas": [1.0], "coef": [[1.0]]}, _axes(), x="lambda_n")
    with pytest.raises(InputError, match="test_mse"):
        plot.plot_threshold({"ratio": [1.0], "method": ["min_norm"]}, _axes())


def test_okabe_ito_palette_values():
    """The eight Okabe & Ito (2008) colours (values as published on their CUD page; from memory)."""
    assert set(plot.OKABE_ITO.values()) == {"#000000", "#E69F00", "#56B4E9", "#009E73",
                                            "#F0E442", "#0072B2", "#D55E00", "#CC79A7"}
    dashes = {str(s["linestyle"]) for k, s in plot.STYLES.items()
              if k in ("train", "gcv", "loo", "cv", "test")}
    assert len(dashes) == 5  # distinct line styles: curves survive greyscale
