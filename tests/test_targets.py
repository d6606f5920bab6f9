"""Many targets: per-target criteria, choices and coefficients without a dense
penalties x features x targets array (issue 16, item 6).

References are scikit-learn (``Ridge`` with one alpha per target,
``RidgeCV(alpha_per_target=True)``, ``RidgeCV(store_cv_results=True)``) and the
hat matrix formed explicitly with numpy.
"""
from __future__ import annotations

import tracemalloc

import numpy as np
import pytest
from numpy.testing import assert_allclose
from sklearn.linear_model import Ridge, RidgeCV

from paths import fit_path
from paths.core import algebra
from paths.core import path as path_module
from paths.data.validation import InputError


def rel_err(a, b):
    return float(np.linalg.norm(np.asarray(a) - b) / max(np.linalg.norm(b), 1e-300))


def _problem(n, p, t, seed=0):
    rng = np.random.default_rng(seed)
    X = rng.standard_normal((n, p)) + rng.standard_normal(p)
    B = rng.standard_normal((p, t)) / np.sqrt(p) * rng.uniform(0.0, 2.0, t)
    Y = 1.0 + X @ B + rng.standard_normal((n, t))
    return X, Y


@pytest.mark.reference
@pytest.mark.parametrize("shape", [(40, 15), (30, 60)], ids=["p<n", "p>n"])
def test_coef_per_target_matches_sklearn_ridge_alpha_array(shape):
    """Each target at its own penalty equals scikit-learn ``Ridge(alpha=array)``
    (one alpha per target), norm-wise relative error <= 1e-8.  bound: both are
    backward stable (SVD) solves and these designs have cond <= ~1e2, so the
    agreement expected is ~cond^2 eps ~ 1e-12; 1e-8 is the package's agreed bound
    with Ridge (tests/test_path.py), intercepts alike."""
    n, p = shape
    X, Y = _problem(n, p, 7, seed=3)
    lams = np.geomspace(1e-2, 1e2, 7)
    path = fit_path(X, Y, lams, standardize=False)
    coef = path.coef_per_target(lams[::-1])  # target j at lams[::-1][j]
    ref = Ridge(alpha=lams[::-1], solver="svd").fit(X, Y)
    for j in range(7):
        assert rel_err(coef[:, j], ref.coef_[j]) <= 1e-8
    # one target's whole path, against Ridge at every penalty
    c2 = path.coef_of(2)
    for i, lam in enumerate(lams):
        assert rel_err(c2[i], Ridge(alpha=lam, solver="svd").fit(X, Y[:, 2]).coef_) <= 1e-8
    # intercepts from the factors (no coefficients formed), against Ridge
    for i, lam in enumerate(lams):
        m = Ridge(alpha=lam, solver="svd").fit(X, Y)
        assert_allclose(path.intercept[i], m.intercept_, rtol=1e-8, atol=1e-8 * abs(Y).max())


@pytest.mark.reference
def test_blocked_loo_over_targets_matches_ridgecv(monkeypatch):
    """Leave-one-out and the test error computed in blocks of a few targets (budget
    forced down to force 20+ blocks) equal ``RidgeCV(store_cv_results=True)`` and
    ``Ridge`` predictions, rtol 1e-8.  bound: the LOO bound of tests/test_path.py
    (residuals of size lam/d^2 divided by leverages of the same size, ~1e-10
    relative) and the Ridge bound above for the test error."""
    X, Y = _problem(45, 50, 23, seed=5)
    X, Xt, Y, Yt = X[:35], X[35:], Y[:35], Y[35:]
    lams = np.geomspace(1e3, 1e-2, 12)
    monkeypatch.setattr(algebra, "LOO_BLOCK_ELEMS", 50 * 13)  # one target per block
    assert algebra.loo_blocks(34, 13, 23, 35)[0] == 1
    res = fit_path(X, Y, lams, standardize=False, X_test=Xt, y_test=Yt)
    cv = RidgeCV(alphas=lams, store_cv_results=True).fit(X, Y)
    assert_allclose(res.loo_mse, cv.cv_results_.mean(axis=0).T, rtol=1e-8)
    for i, lam in enumerate(lams):  # the test error, in blocks of targets too (Ridge: 1e-8)
        m = Ridge(alpha=lam, solver="svd").fit(X, Y)
        assert_allclose(res.test_mse[i], np.mean((Yt - m.predict(Xt)) ** 2, axis=0), rtol=1e-8)


@pytest.mark.reference
@pytest.mark.parametrize("shape", [(40, 15), (30, 60)], ids=["p<n", "p>n"])
def test_paired_criteria_match_explicit_hat_matrix(shape):
    """GCV and leave-one-out of target j at penalty lam[j] equal the textbook
    formulas on the explicit hat matrix H = 11'/n + Xc (Xc'Xc + lam I)^-1 Xc'
    (numpy ``solve``): GCV n RSS/(n - tr H)^2 (Golub, Heath & Wahba 1979) and
    LOO mean of (e_i/(1 - H_ii))^2; rtol 1e-8.  bound: cond(Xc'Xc + lam I) <= 1e6
    here, so the explicit solve is good to ~1e-10; the SE's one-pass variance loses
    ~1.5 n eps (Gaussian residuals, paths.core.algebra.loo_standard_error), far below
    1e-6; the subset repeats the same arithmetic on fewer columns, which BLAS may
    block differently (reorder bound ~ r eps ~ 1e-13 < 1e-12)."""
    n, p = shape
    X, Y = _problem(n, p, 5, seed=11)
    path = fit_path(X, Y, [1.0], standardize=False)
    lams = np.array([0.3, 3.0, 30.0, 1.5, 300.0])
    Xc = X - X.mean(axis=0)
    gcv = algebra.gcv_paired(path.state, lams)
    loo, se = algebra.loo_paired(path.state, lams)
    for j, lam in enumerate(lams):
        H = 1.0 / n + Xc @ np.linalg.solve(Xc.T @ Xc + lam * np.eye(p), Xc.T)
        e = Y[:, j] - H @ Y[:, j]
        assert_allclose(gcv[j], n * (e @ e) / (n - np.trace(H)) ** 2, rtol=1e-8)
        e_loo = e / (1.0 - np.diag(H))
        assert_allclose(loo[j], np.mean(e_loo ** 2), rtol=1e-8)
        assert_allclose(se[j], np.std(e_loo ** 2, ddof=1) / np.sqrt(n), rtol=1e-6)
    sub = algebra.loo_paired(path.state, lams[[3, 1]], targets=[3, 1])[0]
    assert_allclose(sub, loo[[3, 1]], rtol=1e-12)  # same arithmetic, a subset


def test_dense_coefficients_refused_above_the_limit(monkeypatch):
    """Asking for the dense (k, p, t) array above the limit is a one-line
    InputError naming the two methods that avoid it (common practice: refuse
    before allocating, say the fix)."""
    X, Y = _problem(20, 30, 4)
    path = fit_path(X, Y, n_lambdas=10)
    monkeypatch.setattr(path_module, "DENSE_COEF_LIMIT", 8.0 * 10 * 30 * 4 - 1)
    with pytest.raises(InputError, match="coef_per_target") as info:
        path.coef
    assert "\n" not in str(info.value)
    assert path.coef_of(1).shape == (10, 30)  # one target's path is still there


def test_fit_path_never_forms_the_dense_coefficient_array():
    """fit_path on 40 x 2000 with 300 targets and 100 penalties: the dense
    coefficient array would be 100 x 2000 x 300 floats (458 MiB); the traced peak
    (tracemalloc counts numpy buffers) stays below a quarter of it — the
    leave-one-out blocks are bounded by algebra.LOO_BLOCK_ELEMS (32 MiB) and a few
    of them are alive at once."""
    X, Y = _problem(40, 2000, 300, seed=2)
    dense = 8.0 * 100 * 2000 * 300
    tracemalloc.start()
    try:
        tracemalloc.reset_peak()
        path = fit_path(X, Y, n_lambdas=100)
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert path.loo_mse.shape == (100, 300)
    assert peak < dense / 4, (peak / 2**20, dense / 2**20)


# ------------------------------------------------------------ per-target selection
from scipy.optimize import minimize_scalar  # noqa: E402

from paths import cross_validate, select_penalty  # noqa: E402
from paths.selection.targets import select_targets  # noqa: E402


def _sk_loo(X, y, lam):
    """Leave-one-out MSE of scikit-learn RidgeCV at one penalty (its efficient LOO)."""
    cv = RidgeCV(alphas=[lam], store_cv_results=True).fit(X, y)
    return float(cv.cv_results_.mean())


def _explicit_gcv(X, y, lam):
    """GCV n RSS/(n - tr H)^2 on the explicit hat matrix (Golub, Heath & Wahba 1979)."""
    n, p = X.shape
    Xc = X - X.mean(axis=0)
    H = 1.0 / n + Xc @ np.linalg.solve(Xc.T @ Xc + lam * np.eye(p), Xc.T)
    e = y - H @ y
    return n * (e @ e) / (n - np.trace(H)) ** 2


@pytest.mark.reference
def test_per_target_loo_grid_choice_equals_ridgecv_alpha_per_target():
    """The leave-one-out grid choice of every target is scikit-learn's
    ``RidgeCV(alpha_per_target=True)`` choice on the same grid (exact: both argmin
    the same LOO errors, which agree to ~1e-10 relative, far below the gaps
    between grid values on this case)."""
    X, Y = _problem(40, 90, 25, seed=13)
    lams = np.geomspace(1e4, 1e-1, 30)
    path = fit_path(X, Y, lams, standardize=False)
    sel = select_targets(path)
    ref = RidgeCV(alphas=lams, alpha_per_target=True).fit(X, Y).alpha_
    assert_allclose(lams[sel.rules["loo"].index], ref, rtol=0)


@pytest.mark.reference
@pytest.mark.parametrize("shape", [(40, 15), (30, 60)], ids=["p<n", "p>n"])
def test_refined_per_target_minima_against_scipy_on_reference_criteria(shape):
    """The refined GCV and LOO choices of each target minimize the reference
    criteria (explicit hat matrix; scikit-learn's LOO): the reference criterion at
    our penalty is within 1e-7 (relative) of its minimum found by scipy's bounded
    Brent search (xatol 1e-10).  bound: golden section keeps the best point of a
    bracket of COARSE = 1e-3 in log(lambda) around the minimum, so the criterion is
    within curvature * COARSE^2 / 2 of the minimum (curvature in log(lambda) by
    central differences, computed here), plus the references' own rounding (the
    LOO bound 1e-8); the value reported is its own, to that LOO bound."""
    n, p = shape
    X, Y = _problem(n, p, 4, seed=17)
    lams = np.geomspace(1e3, 1e-2, 25)
    sel = select_targets(fit_path(X, Y, lams, standardize=False))
    for j in range(4):
        for rule, fun in (("gcv", _explicit_gcv), ("loo", _sk_loo)):
            ch = sel.rules[rule]
            if ch.extended[j]:
                continue
            f = lambda u: fun(X, Y[:, j], np.exp(u))  # noqa: E731
            i = int(ch.index[j])
            lo, hi = np.log(lams[min(i + 1, 24)]), np.log(lams[max(i - 1, 0)])
            best = minimize_scalar(f, bounds=(lo, hi), method="bounded",
                                   options={"xatol": 1e-10})
            ours = fun(X, Y[:, j], ch.lam[j])
            h = 0.05
            curv = abs(f(best.x - h) - 2 * best.fun + f(best.x + h)) / h ** 2
            from paths.selection.targets import COARSE
            assert ours <= best.fun + curv * COARSE ** 2 / 2 + 1e-8 * best.fun, (rule, j)
            assert_allclose(ch.est_mse[j], ours, rtol=1e-8)  # the value reported is its own


@pytest.mark.reference
def test_multi_target_kfold_choices_against_sklearn_refits():
    """K-fold with 5 targets: each target's CV curve equals the refits of
    scikit-learn ``Ridge`` on the same folds (rtol 1e-8, the bound of
    tests/test_cv.py), the cv rule's grid choice is that curve's argmin, its
    fine-grid refinement never does worse than the grid, and the one-SE choice
    lies at or above it with an error within the minimum plus one SE.  bound: the
    refit bound 1e-8 of tests/test_cv.py; exact: the same grid penalties picked,
    and the best value evaluated is kept (grid values included); bound: the one-SE
    value recomputed in another batch of penalties differs by reordering only
    (~ r eps < 1e-12 relative)."""
    X, Y = _problem(60, 20, 5, seed=19)
    lams = np.geomspace(1e3, 1e-2, 15)
    path = fit_path(X, Y, lams, standardize=False)
    cv = cross_validate(X, Y, lams, n_folds=5, standardize=False)
    labels = cv.labels[0]
    ref = np.zeros((lams.size, 5))
    for f in range(5):
        tr, te = labels != f, labels == f
        for i, lam in enumerate(lams):
            m = Ridge(alpha=lam, solver="svd").fit(X[tr], Y[tr])
            ref[i] += np.sum((Y[te] - m.predict(X[te])) ** 2, axis=0)
    ref /= X.shape[0]
    assert_allclose(cv.mse, ref, rtol=1e-8)
    sel = select_targets(path, cv)
    ch, one = sel.rules["cv"], sel.rules["one-se"]
    assert_allclose(lams[ch.index], lams[np.argmin(ref, axis=0)], rtol=0)
    assert np.all(ch.est_mse <= np.asarray(cv.mse).min(axis=0))
    mse_one, _ = cv.at(one.lam)
    assert np.all(one.lam >= ch.lam)
    assert np.all(np.diag(mse_one) <= ch.est_mse + ch.est_se + 1e-12 * ch.est_mse)


def test_select_penalty_with_many_targets_is_per_target_and_complete():
    """select_penalty on several targets returns every rule for every target
    (the vectorized selection behind it): penalties positive or the documented
    None, df inside (1, rank + 1], and the reported rule's penalties per target.
    bound: df sums rank fractions, each in [0, 1], to rounding rank eps < 1e-12;
    the df rule's brentq stops at 1e-12 in log(lambda) (paths/core/grid.py) and
    |d df / d log lambda| <= rank/4, so df is within ~1e-11 of its target; the
    fraction rule bisects log(lambda) 80 times (to ~1e-22) and |d fraction /
    d log lambda| <= 1, so rounding of the norms (~r eps) dominates, far below 1e-9."""
    X, Y = _problem(30, 70, 12, seed=23)
    path = fit_path(X, Y, n_lambdas=40)
    rep = select_penalty(path, df_target=5.0, fraction_target=0.5)
    assert len(rep.per_target) == 12
    for sels in rep.per_target:
        assert set(sels) == {"gcv", "loo", "cv", "one-se", "df", "fraction", "hkb", "lw",
                             "reml", "isotropic"}
        for name in ("gcv", "loo", "df", "fraction", "hkb", "lw", "reml"):
            s = sels[name]
            assert s.lam is not None and s.lam >= 0
            assert 1.0 < s.df <= path.rank + 1 + 1e-12
        assert_allclose(sels["df"].df, 5.0, rtol=1e-9)  # the df rule hits its target
        assert_allclose(sels["fraction"].fraction, 0.5, rtol=1e-9)
        assert sels["cv"].lam is None
    assert rep.chosen_lambdas().shape == (12,)


# ------------------------------------------------------------ report: every target
def _many_targets_frame(n=40, p=60, t=30, seed=29):
    """Invented data (seeded): t targets with signals of different strengths."""
    import pandas as pd

    from paths.data.tables import select

    X, Y = _problem(n, p, t, seed=seed)
    frame = pd.DataFrame(np.hstack([X, Y]), columns=[f"f{j}" for j in range(p)]
                         + [f"y{j}" for j in range(t)])
    return select(frame, [f"y{j}" for j in range(t)], source="synthetic many targets")


def test_explore_with_many_targets_writes_one_row_per_target_and_bounded_report(tmp_path):
    """targets.csv holds one row per target with the reported rule's choice (equal to
    select_penalty's on the same path); report.html keeps to MAX_TARGET_SECTIONS
    target sections and a bounded "All targets" table; fig-targets.csv counts every
    target's choice per bin (numpy.histogram is the reference).  exact: the same
    selection recomputed on the same path, written with repr (paths.data.output
    round-trips floats; rtol 1e-12 only allows a different BLAS reduction order,
    bound ~ r eps); the counts are integers."""
    import csv

    from paths.present.report import MAX_TARGET_SECTIONS
    from paths.workflows.explore import explore_prepared
    from paths.workflows.options import FigureOptions, FitOptions, OutputOptions
    from paths.workflows.prepare import Prepared

    run = explore_prepared(Prepared(train=_many_targets_frame()), FitOptions(n_lambdas=30),
                           FigureOptions(formats=("svg",)), OutputOptions(out_dir=tmp_path / "o"))
    out = tmp_path / "o"
    with open(out / "targets.csv", newline="") as fh:
        rows = list(csv.DictReader(fh))
    assert [r["target"] for r in rows] == [f"y{j}" for j in range(30)]
    ref = select_penalty(run.result).chosen_lambdas()
    assert_allclose([float(r["lambda"]) for r in rows], ref, rtol=1e-12)
    html = (out / "report.html").read_text()
    assert html.count('<h2 class="target">') == MAX_TARGET_SECTIONS
    assert "All targets" in html and "targets.csv" in html
    section = html.split('id="all-targets"')[1].split("<h2")[0]
    assert section.count("<tr>") == 1 + 7  # header + the 7 quantile rows
    with open(out / "fig-targets.csv", newline="") as fh:
        fig = [r for r in csv.DictReader(fh) if r["series"].startswith("gcv ")]
    lam = ref[ref > 0]
    assert sum(float(r["y"]) for r in fig) == lam.size  # every positive choice counted once
    from paths.present.summary import target_choices

    drawn = [v[v > 0] for r, v in target_choices(run.summary).items()
             if r in ("gcv", "loo", "cv", "reml")]  # the rules fig-targets draws
    logs = np.log10(np.concatenate(drawn))
    edges = np.linspace(logs.min(), logs.max(), 31)  # 30 shared bins over every drawn choice
    counts, _ = np.histogram(np.log10(lam), bins=edges)
    assert_allclose([float(r["y"]) for r in fig], counts, rtol=0)


# --------------------------------- the per-penalty leave-one-out kernel (many targets)
import test_path as _tp  # noqa: E402  (tests/ is on sys.path: pytest rootdir conftest)
import test_weights as _tw  # noqa: E402

_CASES = [
    ("brute force p<n", lambda mp: _tp.test_loo_against_brute_force_refits(mp, (20, 6), True)),
    ("brute force p>n", lambda mp: _tp.test_loo_against_brute_force_refits(mp, (15, 40), False)),
    ("min-norm pinv", lambda mp: _tp.test_min_norm_loo_against_brute_force_pinv_refits(mp)),
    ("no intercept", lambda mp: _tp.test_min_norm_loo_without_intercept_against_pinv_refits(
        (20, 5))),
    ("RidgeCV square", lambda mp: _tp.test_loo_against_sklearn_ridgecv(mp, (30, 30), True)),
    ("row blocks", lambda mp: _tp.test_loo_across_row_blocks_against_sklearn_ridgecv(False)),
    ("leverage one", lambda mp: _tp.test_loo_with_a_leverage_one_sample(mp)),
    ("high leverage", lambda mp: _tp.test_loo_with_a_high_leverage_sample(1e4)),
    ("near interpolation", lambda mp: _tp.test_loo_gcv_near_interpolation_against_mpmath(mp, 10)),
    ("weights p<n", lambda mp: _tw.test_weighted_loo_against_brute_force((25, 8))),
    ("weights p>n", lambda mp: _tw.test_weighted_loo_against_brute_force((20, 30))),
]


@pytest.mark.reference
@pytest.mark.parametrize("case", _CASES, ids=[c[0] for c in _CASES])
def test_per_penalty_loo_kernel_passes_the_loo_reference_tests(case, monkeypatch):
    """With many targets leave-one-out is summed one penalty at a time
    (algebra.LOO_PER_PENALTY_TARGETS); forced on for one target, that kernel passes
    the leave-one-out reference tests of tests/test_path.py and tests/test_weights.py
    (brute-force scikit-learn refits, numpy pinv refits, RidgeCV, mpmath), with
    their own stated tolerances."""
    from conftest import _gaussian_problem

    monkeypatch.setattr(algebra, "LOO_PER_PENALTY_TARGETS", 1)
    case[1](_gaussian_problem)


@pytest.mark.reference
def test_choice_errors_of_one_target_among_many():
    """The errors at a rule's own penalty for one of 20 targets (computed for that
    target alone) equal the references: scikit-learn's leave-one-out and Ridge's
    training error, the explicit-hat-matrix GCV; rtol 1e-8.  bound: the LOO and
    Ridge bounds above."""
    from paths.present.summary import choice_errors

    X, Y = _problem(30, 45, 20, seed=31)
    path = fit_path(X, Y, n_lambdas=20, standardize=False)
    lam, j = 3.7, 5
    ce = choice_errors(path, lam, j)
    m = Ridge(alpha=lam, solver="svd").fit(X, Y[:, j])
    assert_allclose(ce["train_mse"], np.mean((Y[:, j] - m.predict(X)) ** 2), rtol=1e-8)
    assert_allclose(ce["gcv"], _explicit_gcv(X, Y[:, j], lam), rtol=1e-8)
    assert_allclose(ce["loo_mse"], _sk_loo(X, Y[:, j], lam), rtol=1e-8)


@pytest.mark.reference
def test_paired_loo_with_row_weights_against_weighted_refits():
    """Row weights, several targets, one penalty per target: the leave-one-out error
    sum_i w_i e_(i)^2 / sum_i w_i equals brute-force scikit-learn
    ``Ridge(alpha).fit(..., sample_weight=w)`` refits without row i; rtol 1e-8.
    bound: the weighted refits' bound of tests/test_weights.py (cond <= ~1e2 here)."""
    rng = np.random.default_rng(37)
    X, Y = _problem(22, 9, 4, seed=37)
    w = rng.uniform(0.5, 2.0, 22)
    lams = np.array([0.3, 3.0, 30.0, 1.0])
    path = fit_path(X, Y, [1.0], standardize=False, sample_weight=w)
    loo, _ = algebra.loo_paired(path.state, lams)
    for j, lam in enumerate(lams):
        e = np.empty(22)
        for i in range(22):
            keep = np.arange(22) != i
            m = Ridge(alpha=lam, solver="svd").fit(X[keep], Y[keep, j], sample_weight=w[keep])
            e[i] = Y[i, j] - m.predict(X[i:i + 1])[0]
        assert_allclose(loo[j], np.sum(w * e ** 2) / w.sum(), rtol=1e-8)
