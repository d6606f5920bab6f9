"""Tests for paths.threshold.theory against quadrature, Monte Carlo and the published formulas.

Every Monte Carlo check uses a fixed seed and compares within three standard
errors of the Monte Carlo mean, plus a stated finite-n allowance where the
reference is an n, p -> infinity limit.
"""
import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import integrate, stats

from error_bounds import U, gamma as gamma_n
from paths import InputError
from paths.threshold import theory as T

# numerical reference checks against outside references: CI reruns them under a
# forced OpenBLAS kernel (.ci/run)
pytestmark = pytest.mark.reference


@pytest.fixture(autouse=True, scope="module")
def _one_blas_thread():
    """Run the Monte Carlo loops on one BLAS thread (small matrices; avoids contention)."""
    from threadpoolctl import threadpool_limits

    with threadpool_limits(limits=1, user_api="blas"):
        yield

GAMMAS_CONT = [0.25, 0.5, 2.0, 4.0]


@pytest.mark.parametrize("gamma", GAMMAS_CONT)
def test_mp_density_integrates_to_one(gamma):
    """Marchenko & Pastur (1967): the law has total mass 1 — the continuous part
    (scipy.integrate.quad of mp_density over [a, b]) plus the atom 1 - 1/gamma at 0
    when gamma > 1.  Tolerance: quad's own error estimate (QUADPACK), which must itself meet
    scipy's default requested accuracy (epsabs 1.49e-8)."""
    a, b = T.mp_edges(gamma)
    mass, err = integrate.quad(lambda x: float(T.mp_density(x, gamma)), float(a), float(b),
                               limit=200)
    atom = max(0.0, 1.0 - 1.0 / gamma)
    # spec: QUADPACK met the requested accuracy; bound: its estimate plus two additions
    assert err < 1.49e-8
    assert_allclose(mass + atom, 1.0, rtol=0, atol=err + 2 * U)


@pytest.mark.parametrize("gamma", GAMMAS_CONT)
def test_mp_cdf_matches_quadrature(gamma):
    """The closed-form CDF equals scipy.integrate.quad of the density (plus the atom),
    at interior points; tolerance: quad's error estimate per point plus the closed form's
    few roundings (gamma_16 of a value <= 1)."""
    a, b = (float(v) for v in T.mp_edges(gamma))
    atom = max(0.0, 1.0 - 1.0 / gamma)
    xs = a + (b - a) * np.array([0.05, 0.3, 0.5, 0.8, 0.99])
    quads = [integrate.quad(lambda t: float(T.mp_density(t, gamma)), a, x, limit=200)
             for x in xs]
    ref = np.array([atom + q[0] for q in quads])
    # spec + bound: docstring
    errs = np.array([q[1] for q in quads])
    assert np.all(np.abs(T.mp_cdf(xs, gamma) - ref) <= errs + gamma_n(16))
    # exact: outside the support the CDF is 0 or 1 by definition
    assert_allclose(T.mp_cdf([a - 1.0 if a > 1 else -1.0, b + 1.0], gamma), [0.0, 1.0],
                    rtol=0, atol=0)


def test_mp_ks_against_simulated_eigenvalues():
    """Kolmogorov–Smirnov (scipy.stats.kstest) of the eigenvalues of X'X/n, X 2000 x 500
    i.i.d. N(0, 1) (gamma = 0.25, fixed seed), against mp_cdf: no rejection at 1%.
    The same eigenvalues against the law for gamma = 0.35 are rejected (the test has
    power)."""
    rng = np.random.default_rng(20260)
    n, p = 2000, 500
    X = rng.standard_normal((n, p))
    eig = np.linalg.eigvalsh(X.T @ X / n)
    res = stats.kstest(eig, lambda x: T.mp_cdf(x, p / n))
    # sampling: a level-1% test: a correct law is rejected with probability 1% (fixed seed)
    assert res.pvalue > 0.01
    wrong = stats.kstest(eig, lambda x: T.mp_cdf(x, 0.35))
    assert wrong.pvalue < 0.01


@pytest.mark.parametrize("gamma", [0.5, 3.0])
@pytest.mark.parametrize("lam", [0.01, 1.0, 50.0])
def test_stieltjes_transform_and_derivative_match_quadrature(gamma, lam):
    """m(-lam) = int dF(x)/(x + lam) and m'(-lam) = int dF(x)/(x + lam)^2 over the MP law
    (continuous part by scipy quad at epsrel 1e-12, the atom exactly); tolerance: quad's
    requested accuracy and estimate, plus the closed form's rounding, which a cancellation
    in -b + sqrt(b^2 + 4 gamma lam) amplifies by (|b| + sqrt(disc)) / |-b + sqrt(disc)|
    (b = 1 - gamma + lam; Higham 2002 section 1.8), times 4 for the derivative's products."""
    a, b = (float(v) for v in T.mp_edges(gamma))
    atom = max(0.0, 1.0 - 1.0 / gamma)
    m_q = integrate.quad(lambda x: float(T.mp_density(x, gamma)) / (x + lam), a, b,
                         limit=200, epsabs=0.0, epsrel=1e-12)
    dm_q = integrate.quad(lambda x: float(T.mp_density(x, gamma)) / (x + lam) ** 2, a, b,
                          limit=200, epsabs=0.0, epsrel=1e-12)
    m_ref, dm_ref = m_q[0] + atom / lam, dm_q[0] + atom / lam ** 2
    bb = 1 - gamma + lam
    disc = np.sqrt(bb * bb + 4 * gamma * lam)
    canc = (abs(bb) + disc) / abs(-bb + disc)
    # spec + bound: docstring
    assert_allclose(T.mp_stieltjes(lam, gamma), m_ref,
                    rtol=1e-12 + m_q[1] / m_ref + gamma_n(8) * canc)
    assert_allclose(T.mp_stieltjes_derivative(lam, gamma), dm_ref,
                    rtol=1e-12 + dm_q[1] / dm_ref + 4 * gamma_n(8) * canc)


def test_min_norm_risk_closed_forms():
    """Hastie, Montanari, Rosset & Tibshirani (2022), Thm 1: sigma^2 gamma/(1-gamma) below
    the threshold, r^2(1-1/gamma) + sigma^2/(gamma-1) above (values by hand: gamma = 0.5
    -> 1 * 0.5/0.5 = 1; gamma = 2, r^2 = 3 -> 1.5 + 1 = 2.5), infinite at gamma = 1; and the
    ridge risk tends to it as lambda -> 0+ (Dobriban & Wager 2018)."""
    # exact: dyadic operands and results (0.5 / 0.5, 3 * 0.5 + 1 / 1)
    assert_allclose(T.min_norm_risk([0.5, 2.0], 1.0, [1.0, 3.0]), [1.0, 2.5], rtol=0)
    assert np.isinf(T.min_norm_risk(1.0, 1.0, 1.0))
    for g in (0.3, 2.5):
        # bound: first-order Taylor remainder lam |R'(0)| / R(0); R is analytic at 0 for
        # |1 - gamma| >= 0.6 (Dobriban & Wager 2018, Thm 2.1), the derivatives of m(-lam)
        # at 0 being of order (1 - min(gamma, 1/gamma))^-3 <= 5, so 1e3 lam covers it
        assert_allclose(T.ridge_risk(1e-9, g, 1.3, 0.7), T.min_norm_risk(g, 1.3, 0.7),
                        rtol=1e3 * 1e-9)


def _min_norm(X, y):
    n, p = X.shape
    if p < n:
        return np.linalg.solve(X.T @ X, X.T @ y)
    return X.T @ np.linalg.solve(X @ X.T, y)


def _ridge(X, y, lam):
    n, p = X.shape
    if p <= n:
        return np.linalg.solve(X.T @ X + lam * np.eye(p), X.T @ y)
    return X.T @ np.linalg.solve(X @ X.T + lam * np.eye(n), y)


def _finite_n_min_norm(n, p, s2, r2):
    """Exact finite-n excess risk of min-norm least squares for N(0, I) rows: the inverse
    Wishart mean E[(X'X)^-1] = I/(n-p-1) below the threshold; above it, the projection of
    beta on the row space (rotational invariance, mean n/p of r^2 kept) plus
    sigma^2 E tr (XX')^-1 = sigma^2 n/(p-n-1).  (From memory; common practice, e.g. Belkin,
    Hsu & Xu, SIAM J. Math. Data Sci. 2, 2020.)"""
    if p < n:
        return s2 * p / (n - p - 1)
    return r2 * (1 - n / p) + s2 * n / (p - n - 1)


@pytest.mark.parametrize("gamma", [0.5, 2.0, 4.0])
def test_min_norm_and_optimal_ridge_monte_carlo(gamma):
    """Monte Carlo over isotropic Gaussian designs, n = 400 (no intercept), sigma^2 = 1,
    r^2 = ||beta||^2 = 1 exactly (random direction), 40 designs: the mean excess risk
    ||beta_hat - beta||^2 of (a) the min-norm fit lies within 3 standard errors of the
    Hastie et al. (2022, Thm 1) limit, with the finite-n allowance |exact finite-n value
    - limit| (0.005 at gamma = 0.5, 0.0025 at 2, 0.0003 at 4); (b) ridge at lambda* =
    p sigma^2/r^2 lies within 3 SE of the Dobriban & Wager (2018) optimum sigma^2 gamma
    m(-gamma sigma^2/r^2), with an allowance of 1/n relative (O(1/n) finite-size bias of
    linear spectral statistics of Gaussian matrices; Bai & Silverstein, Ann. Probab. 32,
    2004)."""
    rng = np.random.default_rng(int(gamma * 1000) + 7)
    n, s2, r2 = 400, 1.0, 1.0
    p = int(gamma * n)
    mn, rd = [], []
    for _ in range(40):
        X = rng.standard_normal((n, p))
        beta = rng.standard_normal(p)
        beta *= np.sqrt(r2) / np.linalg.norm(beta)
        y = X @ beta + rng.normal(0.0, np.sqrt(s2), n)
        mn.append(np.sum((_min_norm(X, y) - beta) ** 2))
        rd.append(np.sum((_ridge(X, y, p * s2 / r2) - beta) ** 2))
    mn, rd = np.array(mn), np.array(rd)
    se_mn = mn.std(ddof=1) / np.sqrt(mn.size)
    se_rd = rd.std(ddof=1) / np.sqrt(rd.size)
    # sampling: 3 SE (false failure 0.27 % per check, CLT over 40 designs; fixed seed)
    lim = float(T.min_norm_risk(gamma, s2, r2))
    allowance = abs(_finite_n_min_norm(n, p, s2, r2) - lim)
    assert abs(mn.mean() - lim) <= 3 * se_mn + allowance
    opt = float(T.optimal_ridge_risk(gamma, s2, r2))
    assert abs(rd.mean() - opt) <= 3 * se_rd + opt / n
    # the optimal penalty is optimal: the risk curve is higher on either side
    lam_n = float(T.optimal_ridge_lambda(gamma, s2, r2))
    assert T.ridge_risk(lam_n * 0.5, gamma, s2, r2) > opt
    assert T.ridge_risk(lam_n * 2.0, gamma, s2, r2) > opt
    # bound: two closed forms of at most ~20 operations on positive terms at lambda*
    # (no cancellation there): gamma_40 relative
    assert_allclose(T.ridge_risk(lam_n, gamma, s2, r2), opt, rtol=gamma_n(40))


@pytest.mark.parametrize("p", [10, 50, 90])
def test_training_error_law_monte_carlo(p):
    """The projection argument (common practice, no source): least squares with an intercept,
    E[train MSE] = sigma^2 (n - p - 1)/n for any full-rank design.  Fixed skewed design
    (exponential entries, n = 100), sigma^2 = 2, 300 noise draws fitted with numpy.linalg.lstsq:
    the mean training MSE is within 3 SE of ls_train_mse."""
    rng = np.random.default_rng(p)
    n, s2 = 100, 2.0
    X = rng.exponential(size=(n, p))
    A = np.column_stack([np.ones(n), X])
    beta = rng.standard_normal(p)
    mse = []
    for _ in range(300):
        y = 3.0 + X @ beta + rng.normal(0.0, np.sqrt(s2), n)
        coef, *_ = np.linalg.lstsq(A, y, rcond=None)
        mse.append(np.mean((y - A @ coef) ** 2))
    mse = np.array(mse)
    se = mse.std(ddof=1) / np.sqrt(mse.size)
    # sampling: 3 SE, false failure 0.27 % (CLT over 300 draws; fixed seed)
    assert abs(mse.mean() - float(T.ls_train_mse(n, p, s2))) <= 3 * se
    assert float(T.ls_train_mse(n, n, s2)) == 0.0
    # bound: three operations on each side (gamma_3)
    assert_allclose(T.ls_train_mse(n, p, s2, fit_intercept=False), s2 * (n - p) / n,
                    rtol=2 * gamma_n(3))


def test_misspecified_model_monte_carlo():
    """Hastie et al. (2022), sec. 5: a model on p' of p isotropic features with the signal
    spread evenly sees sigma_eff^2 = sigma^2 + r^2(1 - p'/p) and r_eff^2 = r^2 p'/p.  Monte
    Carlo, n = 200, p = 800, p' in {100, 400}, 30 designs: the min-norm test MSE on the
    p' leading features (population risk ||beta_hat - beta_S||^2 + ||beta_rest||^2 +
    sigma^2) is within 3 SE of sigma_eff^2 + min_norm_risk(p'/n, sigma_eff^2, r_eff^2), with
    the finite-n allowance of the previous test (the omitted Gaussian signal is exactly
    independent noise)."""
    rng = np.random.default_rng(11)
    n, p, s2, r2 = 200, 800, 1.0, 2.0
    for k in (100, 400):
        vals = []
        for _ in range(30):
            X = rng.standard_normal((n, p))
            beta = rng.standard_normal(p)
            beta *= np.sqrt(r2) / np.linalg.norm(beta)
            y = X @ beta + rng.normal(0.0, np.sqrt(s2), n)
            bh = _min_norm(X[:, :k], y)
            vals.append(np.sum((bh - beta[:k]) ** 2) + np.sum(beta[k:] ** 2) + s2)
        vals = np.array(vals)
        eff = T.misspecified_variances(k, p, s2, r2)
        s2e, r2e = float(eff.noise_variance), float(eff.signal_variance)
        # bound: at most four operations on positive numbers each side
        assert_allclose([s2e, r2e], [s2 + r2 * (1 - k / p), r2 * k / p], rtol=2 * gamma_n(4))
        pred = s2e + float(T.min_norm_risk(k / n, s2e, r2e))
        allowance = abs(_finite_n_min_norm(n, k, s2e, r2e) - (pred - s2e))
        se = vals.std(ddof=1) / np.sqrt(vals.size)
        # sampling: 3 SE (0.27 % false failure, CLT over 30 designs) + finite-n allowance
        assert abs(vals.mean() - pred) <= 3 * se + allowance


@pytest.mark.parametrize("gamma", [0.5, 2.0])
@pytest.mark.parametrize("lam", [0.0, 0.2, 3.0])
def test_spectrum_form_reduces_to_isotropic_formulas(gamma, lam):
    """For Sigma = I the deterministic equivalent (Bach 2024) must reproduce the isotropic
    closed forms of Hastie et al. (2022, Thm 1) at lambda = 0 and of Dobriban & Wager (2018)
    at lambda > 0 (p = gamma n, n = 400).  Tolerance (spec): the equivalent's effective
    regularization kappa is found by brentq to xtol 1e-14 of its bracket and rtol 8 eps
    (paths/threshold/theory.py); 1e-9 relative allows the risk a sensitivity to kappa of
    up to 1e4 (a stated allowance, not a derived bound)."""
    n = 400
    p = int(gamma * n)
    got = T.spectrum_ridge_risk(lam, n, np.ones(p), 1.0, 1.5 / p).risk
    ref = T.min_norm_risk(gamma, 1.0, 1.5) if lam == 0 else T.ridge_risk(lam, gamma, 1.0, 1.5)
    # spec: docstring
    assert_allclose(got, ref, rtol=1e-9)


def test_bad_gamma_is_one_line_input_error():
    """Bad input (house rule): a non-positive aspect ratio is a one-line InputError."""
    with pytest.raises(InputError) as exc:
        T.min_norm_risk(0.0, 1.0, 1.0)
    assert "\n" not in str(exc.value)
