"""The one fold and holdout assignment (paths/data/folds.py): a function of the row index only.

References: a Feistel network is a bijection whatever its round functions
(Luby & Rackoff 1988), and cycle walking restricts a permutation of a larger
domain to a permutation of [0, n) (Black & Rogaway 2002); fold sizes as
numpy.array_split cuts n rows into K parts (numpy as the reference).
"""
from __future__ import annotations

import numpy as np
import pytest

from error_bounds import backward_eps, refit_loo_rtol
from paths.data.folds import fold_labels, group_folds, holdout_mask, permuted_index
from paths.data.synthetic import split_holdout
from paths.selection.cv import make_folds


@pytest.mark.parametrize("n", [1, 2, 7, 64, 1000, 4097])
def test_permutation_is_a_bijection(n):
    """π is a permutation of range(n) for every n."""
    pi = permuted_index(np.arange(n), n, seed=5)
    assert sorted(pi.tolist()) == list(range(n))


def test_folds_independent_of_chunking_and_balanced():
    """A row's fold depends on its index only (any split of the indices gives the
    same labels); fold sizes are those of numpy.array_split; another seed or
    repetition gives another partition."""
    n, K = 1003, 7
    whole = fold_labels(np.arange(n), n, K, seed=9)
    pieces = np.concatenate([fold_labels(np.arange(s, min(s + 97, n)), n, K, seed=9)
                             for s in range(0, n, 97)])
    assert np.array_equal(whole, pieces)
    assert sorted(np.bincount(whole).tolist()) == sorted(
        len(a) for a in np.array_split(np.arange(n), K))
    assert not np.array_equal(whole, fold_labels(np.arange(n), n, K, seed=10))
    assert not np.array_equal(whole, fold_labels(np.arange(n), n, K, seed=9, repeat=1))


def test_make_folds_is_the_one_assignment():
    """The in-memory K-fold labels are the fold function's (shuffled and blocked)."""
    for scheme in ("shuffled", "blocked"):
        assert np.array_equal(make_folds(50, 4, scheme=scheme, seed=3, repeat=1),
                              fold_labels(np.arange(50), 50, 4, scheme=scheme, seed=3, repeat=1))


def test_holdout_count_and_seed():
    """round(fraction·n) test rows; split_holdout is the same split; another seed, another split."""
    m = holdout_mask(np.arange(200), 200, 0.3, seed=1)
    assert int(m.sum()) == 60
    train, test = split_holdout(200, 0.3, seed=1)
    assert np.array_equal(test, np.flatnonzero(m)) and np.array_equal(train, np.flatnonzero(~m))
    assert not np.array_equal(m, holdout_mask(np.arange(200), 200, 0.3, seed=2))


def test_group_folds_deal_largest_first():
    """Greedy dealing of groups, largest first, to the smallest fold (the
    longest-processing-time rule, Graham 1969): loads differ by at most the
    largest group."""
    counts = np.array([9, 1, 4, 4, 7, 2, 3])
    f = group_folds(counts, 3, seed=0)
    loads = np.bincount(f, weights=counts, minlength=3)
    assert loads.max() - loads.min() <= counts.max()


@pytest.mark.parametrize("scheme", ["shuffled", "blocked"])
def test_streamed_engines_draw_the_in_memory_folds(scheme):
    """The same seed gives the same K-fold CV errors in every engine: the row-streamed
    engine (two chunk sizes) and the dask engine against the in-memory
    cross_validate (exact route).  Tolerance: the held-out errors are functions of the
    data; each engine stays within the refits' Wedin bound (error_bounds.refit_loo_rtol
    over the folds), the Gram/eigh route with its extra kappa eps_b acting as a backward
    error kappa times larger (extra_eps)."""
    import dask

    from paths.engines.dask_cluster import dask_path
    from paths.engines.stream import stream_path
    from paths.selection.cv import cross_validate

    rng = np.random.default_rng(2)
    X = rng.standard_normal((300, 6))
    y = X @ rng.standard_normal(6) + rng.standard_normal(300)
    lam = [0.1, 3.0, 100.0]
    ref = cross_validate(X, y, lam, n_folds=5, scheme=scheme, seed=0, method="exact")
    # bound: docstring (per penalty: the Gram route's bound plus the exact route's)
    Xs = (X - X.mean(axis=0)) / X.std(axis=0)
    s = np.linalg.svd(Xs - Xs.mean(axis=0), compute_uv=False)
    extra = s[0] / s[-1] * backward_eps(*X.shape)
    labels = ref.labels[0]
    tol = np.array([refit_loo_rtol(Xs, y, v, labels=labels, extra_eps=extra)
                    + refit_loo_rtol(Xs, y, v, labels=labels) for v in lam])
    for chunk in (37, 300):
        res = stream_path(X, lam, y=y, chunk_rows=chunk, n_folds=5, fold_scheme=scheme)
        np.testing.assert_allclose(res.cv_mse, ref.mse, rtol=tol.max())
    with dask.config.set(scheduler="synchronous"):
        res = dask_path(X, lam, y=y, chunk_rows=41, n_folds=5, fold_scheme=scheme)
    np.testing.assert_allclose(res.cv_mse, ref.mse, rtol=tol.max())
