"""Shared fixtures for the reference tests of the numerical core.

Kept small on purpose: seeded synthetic problems (labelled synthetic, generated
here).
"""
from __future__ import annotations

import os

import numpy as np
import pytest
from hypothesis import settings

# Property tests draw the same examples on every run (derandomized), so that a CI run is
# reproducible; HYPOTHESIS_PROFILE=explore draws fresh ones to search for failures.
settings.register_profile("repeatable", derandomize=True)
settings.register_profile("explore", derandomize=False)
settings.load_profile(os.environ.get("HYPOTHESIS_PROFILE", "repeatable"))

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
