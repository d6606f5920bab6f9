"""NIST StRD linear least-squares datasets through the OLS (lambda -> 0+) limit.

Reference: NIST Statistical Reference Datasets, linear regression
(https://www.itl.nist.gov/div898/strd/lls/lls.shtml), certified values computed
by NIST in multiple precision, rounded to 15 significant digits; copied unchanged
into ``tests/data/nist/`` (see its README).

The score is the log relative error LRE = -log10(|est - cert| / |cert|)
(-log10|est| when cert = 0), the number of matching significant digits, capped
at 15.  The thresholds below were set by measuring what ``fit_path`` reaches on
each dataset (standardize=True, numpy 2.4 / scipy 1.17 / OpenBLAS, 2 cores) and
subtracting one digit, never going below the float64 acceptance table of the
NIST folder's README (Norris, NoInt1, NoInt2 >= 11; Longley >= 10; Wampler1-3
>= 8.5; Wampler4 >= 7; Wampler5 >= 5; Pontius >= 5.5; Filip >= 6 or a reported
rank deficiency), and never demanding more than 14 digits (a 15-digit rounded
certified value only allows 14.3-15 even for an exact answer).
"""
from __future__ import annotations

import csv
import json
import math
from pathlib import Path

import numpy as np
import pytest
from numpy.testing import assert_allclose

from paths import fit_path

NIST_DIR = Path(__file__).resolve().parent / "data" / "nist"

ORDER = ["Norris", "Pontius", "NoInt1", "NoInt2", "Filip", "Longley",
         "Wampler1", "Wampler2", "Wampler3", "Wampler4", "Wampler5"]
LOWER_AVERAGE = {"Norris", "Pontius", "NoInt1", "NoInt2"}  # issue: >= 9 digits

# float64 acceptance thresholds for the coefficients (README of the NIST folder)
ACCEPT = {"Norris": 11, "NoInt1": 11, "NoInt2": 11, "Longley": 10, "Wampler1": 8.5,
          "Wampler2": 8.5, "Wampler3": 8.5, "Wampler4": 7, "Wampler5": 5, "Pontius": 5.5,
          "Filip": 6}

# Measured here (standardize=True): minimum coefficient LRE, residual-SD LRE,
# R^2 LRE, for the "svd" and "auto" routes.  "auto" takes the Gram route on
# Norris, Pontius and NoInt1/2 (cond <= 10) and the SVD route on the others.
MEASURED = {
    #             svd: coef   s      R2     auto: coef  s      R2
    "Norris":   ((12.32, 14.08, 15.00), (12.22, 14.21, 15.00)),
    "Pontius":  ((12.03, 12.90, 15.00), (11.98, 12.73, 15.00)),
    "NoInt1":   ((14.77, 14.30, 15.00), (14.72, 14.86, 15.00)),
    "NoInt2":   ((15.00, 14.87, 15.00), (15.00, 15.00, 15.00)),
    "Filip":    ((7.29, 8.42, 10.60), (7.29, 8.42, 10.60)),
    "Longley":  ((13.31, 14.31, 15.00), (13.31, 14.31, 15.00)),
    "Wampler1": ((9.16, 9.43, 15.00), (9.16, 9.43, 15.00)),
    "Wampler2": ((13.08, 14.18, 15.00), (13.08, 14.18, 15.00)),
    "Wampler3": ((9.16, 14.09, 15.00), (9.16, 14.09, 15.00)),
    "Wampler4": ((8.15, 14.83, 15.00), (8.15, 14.83, 15.00)),
    "Wampler5": ((6.12, 14.85, 13.10), (6.12, 14.85, 13.10)),
}
# Residual SD: the NIST README's float64 column (a) shows >= 13 digits for
# Norris, NoInt1/2, Longley and Wampler3-5 ("easy"): demand 13 there.
S_EASY = {"Norris", "NoInt1", "NoInt2", "Longley", "Wampler3", "Wampler4", "Wampler5"}
# R^2 is easy (>= 13 digits) everywhere except Filip (README) and, on reflection,
# Wampler5: its R^2 = 0.0022, so the relative error of R^2 is that of the RSS
# times (1 - R^2)/R^2 ~ 450, i.e. 2.7 digits fewer than the RSS's ~15.
R2_HARD = {"Filip", "Wampler5"}


def coef_threshold(name, solver):
    measured = MEASURED[name][solver == "auto"][0]
    return min(14.0, max(ACCEPT[name], measured - 1.0))


def lre(est, cert):
    """Log relative error (NIST StRD convention), capped at 15."""
    err = abs(est - cert) if cert == 0 else abs(est - cert) / abs(cert)
    return 15.0 if err == 0 else min(15.0, -math.log10(err))


def load(name):
    """(X, y, meta) with the design built as the NIST README says: columns
    x, x^2, ..., x^d for the polynomial models (intercept handled by
    fit_intercept), the predictors x1..x6 for Longley."""
    meta = json.loads((NIST_DIR / f"{name.lower()}.certified.json").read_text())
    with open(NIST_DIR / meta["csv"], newline="") as f:
        rows = list(csv.reader(f))
    header, body = rows[0], rows[1:]
    assert header == meta["csv_columns"] and len(body) == meta["n_observations"]
    cols = {h: np.array([float(r[i]) for r in body]) for i, h in enumerate(header)}
    model = meta["model"]
    if model["kind"] == "polynomial":
        X = np.column_stack([cols["x"] ** k for k in range(1, model["degree"] + 1)])
    else:
        X = np.column_stack([cols[c] for c in header if c != "y"])
    assert X.shape[1] + model["intercept"] == model["n_parameters"]
    return X, cols["y"], meta


def estimates(res, meta):
    """Our estimates in NIST's parameter order (B0 = intercept first, if any)."""
    coef = list(res.min_norm.coef)
    return ([float(res.min_norm.intercept)] if meta["model"]["intercept"] else []) + coef


def fit(name, solver):
    X, y, meta = load(name)
    res = fit_path(X, y, [0.0], fit_intercept=meta["model"]["intercept"], standardize=True,
                   solver=solver)
    return X, y, meta, res


@pytest.mark.parametrize("solver", ["svd", "auto"])
@pytest.mark.parametrize("name", ORDER)
def test_certified_coefficients(name, solver):
    """Certified NIST StRD parameter estimates through the OLS limit
    (``min_norm.coef`` / ``.intercept``, standardized columns): every parameter
    to at least the per-dataset number of significant digits (see module notes);
    the lower- and average-difficulty sets to >= 9 digits (issue 2)."""
    X, y, meta, res = fit(name, solver)
    cert = [p["estimate_float"] for p in meta["certified"]["parameters"]]
    est = estimates(res, meta)
    digits = min(lre(e, c) for e, c in zip(est, cert))
    need = coef_threshold(name, solver)
    assert digits >= need, f"{name} ({solver}): {digits:.2f} digits < {need:.2f}"
    if name in LOWER_AVERAGE:
        assert digits >= 9
    # full column rank on the standardized design: nothing silently dropped
    assert res.rank == X.shape[1]
    # the grid value at lambda = 0 is the same fit: the gains d/d^2 (path) and
    # 1/d (min-norm) are one rounding apart, amplified in each coefficient by
    # the cancellation in sum_j v_ij g_j c_j, at most ~cond * eps: rtol 10 cond eps
    tol = 10 * res.condition_number * np.finfo(float).eps
    assert_allclose(res.coef[0], res.min_norm.coef, rtol=tol)


@pytest.mark.parametrize("solver", ["svd", "auto"])
@pytest.mark.parametrize("name", ORDER)
def test_certified_residual_sd_and_r_squared(name, solver):
    """Certified residual SD s = sqrt(RSS/(n - p)) and R^2 (centered, or
    uncentered 1 - RSS/sum(y^2) for NoInt1/2, as NIST defines it) from
    ``min_norm.train_mse``: 13 digits where the NIST README shows them to be
    easy in float64, otherwise the measured value minus one digit."""
    X, y, meta, res = fit(name, solver)
    n, p = y.size, meta["model"]["n_parameters"]
    cert = meta["certified"]
    rss = res.min_norm.train_mse * n
    s = math.sqrt(rss / (n - p))
    tss = np.sum((y - y.mean()) ** 2) if meta["model"]["intercept"] else np.sum(y**2)
    r2 = 1.0 - rss / tss
    assert ("uncentered" in cert["r_squared_definition"]) == (not meta["model"]["intercept"])
    m_s, m_r2 = MEASURED[name][solver == "auto"][1:]
    need_s = 13.0 if name in S_EASY else m_s - 1.0
    need_r2 = m_r2 - 1.0 if name in R2_HARD else 13.0
    got_s = lre(s, cert["residual_standard_deviation_float"])
    got_r2 = lre(r2, cert["r_squared_float"])
    assert got_s >= need_s, f"{name} s: {got_s:.2f} < {need_s:.2f}"
    assert got_r2 >= need_r2, f"{name} R2: {got_r2:.2f} < {need_r2:.2f}"


@pytest.mark.parametrize("name", ORDER)
def test_auto_route_as_accurate_as_svd(name):
    """``solver="auto"`` against the backward-stable SVD route (LAPACK gesdd,
    the reference here) on every NIST design: the smallest singular value and
    the min-norm coefficients agree to 1e-12 relative norm-wise (measured
    <= 6e-14 where "auto" takes the Gram route, 0 where it takes the SVD
    route)."""
    _, y, _, a = fit(name, "svd")
    *_, b = fit(name, "auto")
    assert a.rank == b.rank
    assert_allclose(b.singular_values[-1], a.singular_values[-1], rtol=1e-12)
    assert_allclose(b.singular_values, a.singular_values, rtol=1e-12)
    err = np.linalg.norm(b.min_norm.coef - a.min_norm.coef) / np.linalg.norm(a.min_norm.coef)
    assert err <= 1e-12
    assert_allclose(b.min_norm.intercept, a.min_norm.intercept, rtol=1e-12,
                    atol=1e-12 * np.abs(y).max())


def test_filip_unscaled_reports_rank_deficiency_or_gets_digits():
    """Filip on the raw (unscaled) design, cond ~ 1e15 before centering: a
    float64 solver must either reach >= 6 digits or report the
    near-rank-deficiency (NIST folder README); it must not silently return a
    truncated full-rank answer."""
    X, y, meta = load("Filip")
    cert = [p["estimate_float"] for p in meta["certified"]["parameters"]]
    for solver in ("svd", "auto"):
        res = fit_path(X, y, [0.0], standardize=False, solver=solver)
        digits = min(lre(e, c) for e, c in zip(estimates(res, meta), cert))
        assert digits >= 6 or res.rank < X.shape[1], (solver, digits, res.rank)
        assert np.all(np.isfinite(res.min_norm.coef))


def test_wampler1_2_exact_fits():
    """Wampler1 and Wampler2 are exact polynomials (NIST: residual SD 0, R^2 = 1):
    the min-norm fit interpolates them to rounding level (absolute residual SD
    <= 1e-8 * max|y|, measured 4e-10 for Wampler1)."""
    for name in ("Wampler1", "Wampler2"):
        X, y, meta, res = fit(name, "svd")
        assert meta["certified"]["residual_standard_deviation_float"] == 0.0
        s = math.sqrt(res.min_norm.train_mse * y.size / (y.size - 6))
        assert s <= 1e-8 * np.abs(y).max()


@pytest.mark.parametrize("name", ORDER)
def test_auto_route_reaches_the_svd_digits(name):
    """Per coefficient, ``solver="auto"`` reaches the same number of
    significant digits against the NIST certified values as the SVD route,
    within half a digit (where "auto" takes a route as accurate as the SVD, the
    measured difference is <= 0.1 digit: Norris, Pontius, NoInt1/2)."""
    X, y, meta, a = fit(name, "svd")
    *_, b = fit(name, "auto")
    cert = [p["estimate_float"] for p in meta["certified"]["parameters"]]
    da = min(lre(e, c) for e, c in zip(estimates(a, meta), cert))
    db = min(lre(e, c) for e, c in zip(estimates(b, meta), cert))
    assert db >= da - 0.5, f"{name}: auto {db:.2f} digits vs svd {da:.2f}"
