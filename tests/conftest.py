"""Shared fixtures for the reference tests of the numerical core.

Kept small on purpose: seeded synthetic problems (labelled synthetic, generated
here).
"""
from __future__ import annotations

import numpy as np
import pytest

def _gaussian_problem(n, p, *, seed=0, t=None, noise=0.5, shift=3.0, spread=True):
    """Synthetic regression problem: Gaussian design with non-zero means and
    unequal column scales (so centering and scaling matter), a dense signal and
    Gaussian noise.  ``t`` targets give y of shape (n, t)."""
    rng = np.random.default_rng(seed)
    scales = np.geomspace(0.2, 5.0, p) if spread else np.ones(p)
    X = rng.standard_normal((n, p)) * scales + shift * rng.standard_normal(p)
    shape = (p,) if t is None else (p, t)
    beta = rng.standard_normal(shape) / np.sqrt(p)
    y = 1.5 + X @ beta + noise * rng.standard_normal((n,) if t is None else (n, t))
    return X, y


@pytest.fixture
def make_problem():
    """Factory ``make_problem(n, p, seed=0, t=None, noise=0.5) -> (X, y)``."""
    return _gaussian_problem
