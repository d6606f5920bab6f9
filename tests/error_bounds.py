"""Published error bounds the reference tests derive their tolerances from.

Every tolerance in the numerical reference tests is one of these bounds, never
the digits one machine happened to reach: OpenBLAS picks different kernels on
different processors (``OPENBLAS_CORETYPE``), and their rounding differs.

Notation: ``u`` is the unit roundoff (``eps / 2``), ``kappa = d_1 / d_r`` the
2-norm condition number of the centered (scaled) design that is factored,
``m x p`` its shape.

References
----------
Higham, N. J. (2002). *Accuracy and Stability of Numerical Algorithms*, 2nd ed.
SIAM.  Theorem 20.1 (Wedin's perturbation bound for least squares), Theorem
20.3 (backward stability of orthogonal-factorization solvers), section 20.4
(normal equations: forward error of order ``kappa**2 u``), section 2.8 (rounding
errors accumulate like the square root of the worst-case constant: the "rule of
thumb" replacing a constant ``f(n)`` in a bound by ``sqrt(f(n))``), section 3.1
(inner products: error ``gamma_n = n u / (1 - n u)`` relative to
``|x|^T |y|``).
Golub, G. H. and Van Loan, C. F. (2013). *Matrix Computations*, 4th ed. Johns
Hopkins.  Corollary 8.6.2 (Weyl: a perturbation ``E`` moves every singular
value by at most ``||E||_2``), Theorem 8.1.4 (the same for the eigenvalues of a
symmetric matrix).
"""
from __future__ import annotations

import math

import numpy as np

U = np.finfo(np.float64).eps / 2  # unit roundoff
#: NIST StRD certified values are rounded to 15 significant digits: half a unit
#: in the 15th digit is at most 5e-15 relative (leading digit 1).
CERT_ROUND = 5e-15


def backward_eps(m: int, p: int) -> float:
    """Backward error of an orthogonal-factorization least-squares solve.

    Higham (2002) Theorem 20.3 gives ``||dA||_F <= gamma~_{mp} ||A||_F`` with
    ``gamma~_{mp} = c m p u``; with the rule of thumb of section 2.8 (rounding
    errors accumulate like a random walk) the constant is ``sqrt(m p)``.  A
    further factor 4 covers the small constant ``c`` and the centering and
    scaling passes (each one rounding per entry).
    """
    return 4.0 * math.sqrt(m * p) * U


def ls_coef_bound(kappa: float, rho: float, eps: float, *, gram: bool = False) -> float:
    """Normwise relative forward error of a least-squares solution.

    Higham (2002) Theorem 20.1: with a backward error ``eps`` and
    ``rho = ||r|| / (||A|| ||x||)``,
    ``||dx|| / ||x|| <= kappa eps / (1 - kappa eps) * (2 + (kappa + 1) rho)``.
    A Gram (normal-equations) route has a forward error of order
    ``kappa**2 eps`` instead (section 20.4): ``gram=True`` adds that term.
    """
    k = kappa * eps
    if k >= 1.0:
        return math.inf
    bound = k / (1.0 - k) * (2.0 + (kappa + 1.0) * rho)
    if gram:
        bound += 2.0 * kappa**2 * eps
    return bound


def ls_residual_bound(kappa: float, eps: float, *, gram: bool = False) -> float:
    """Normwise forward error of the residual, relative to ``||b||``.

    Higham (2002) Theorem 20.1: ``||dr|| / ||b|| <= (1 + 2 kappa) eps``; the
    Gram route forms the residual from factors whose span carries an error of
    order ``kappa**2 eps`` (section 20.4), hence the extra term.
    """
    return (1.0 + 2.0 * kappa) * eps + (2.0 * kappa**2 * eps if gram else 0.0)


def singular_value_bound(kappa_j, eps: float, *, gram: bool = False):
    """Relative error of singular values ``d_j`` with ``kappa_j = d_1 / d_j``.

    A backward-stable SVD moves each singular value by at most
    ``eps ||A||`` (Golub and Van Loan 2013, Corollary 8.6.2), a relative
    error ``eps kappa_j``.  Through the Gram matrix the eigenvalue
    ``w_j = d_j**2`` moves by ``eps ||A||**2`` (Theorem 8.1.4), a relative error
    ``eps kappa_j**2`` on ``w_j`` and half that on ``d_j``.
    """
    kappa_j = np.asarray(kappa_j, dtype=float)
    return eps * kappa_j * (1.0 + (kappa_j if gram else 0.0))
