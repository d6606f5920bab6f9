"""Which rows go where: seeded K-fold labels and the holdout split, one function for every engine.

Every assignment is a function of the row's index, the number of rows and the
seed alone — never of how the rows arrive — so the in-memory engine, the
row-streamed engine (whatever the chunk size), the dask engine (whatever the
blocks) and the wide engine give every row the same fold and the same side of
the holdout split, and therefore the same cross-validation errors.

The shuffle is a keyed pseudo-random permutation :math:`\\pi` of
:math:`\\{0, \\dots, n-1\\}`, evaluated one index at a time: a balanced Feistel
network on the smallest even number of bits covering :math:`n`, with cycle
walking back into the range (Black & Rogaway 2002).  Shuffled folds are the
blocked folds of the permuted order (sizes :math:`\\lfloor n/K \\rfloor` or one
more, the larger ones first, as :func:`numpy.array_split`); the holdout test
rows are those with :math:`\\pi(i) < n_{test}`.  No permutation of :math:`n`
entries is ever held, so a streamed pass needs O(chunk) memory for its labels.

Grouped folds deal whole groups (largest first, ties in a seeded random order)
to the currently smallest fold; they depend only on the groups' sizes in the
sorted order of their labels, which one pass over the group column collects.

References
----------
Luby, M. and Rackoff, C. (1988). How to construct pseudorandom permutations from
pseudorandom functions. *SIAM J. Comput.* 17, 373–386.

Black, J. and Rogaway, P. (2002). Ciphers with arbitrary finite domains.
*CT-RSA 2002*, LNCS 2271, 114–130.

Steele, G. L., Lea, D. and Flood, C. H. (2014). Fast splittable pseudorandom
number generators. *OOPSLA 2014*, 453–472 (the SplitMix64 finalizer).
"""
from __future__ import annotations

import numpy as np

from paths.data.validation import InputError

__all__ = ["permuted_index", "fold_labels", "holdout_mask", "holdout_count", "group_folds",
           "SCHEMES", "KFOLD_STAGE", "FoldCount"]

SCHEMES = ("shuffled", "blocked", "grouped")
#: The progress stage under which every engine counts its folds (``paths.workflows.stages.KFOLD``).
KFOLD_STAGE = "K-fold cross-validation"
_MASK64 = (1 << 64) - 1
_ROUNDS = 6
_PURPOSE = {"folds": 0x66_6F_6C_64_73, "holdout": 0x68_6F_6C_64_6F_75_74}


def _mix_int(x: int) -> int:
    """SplitMix64 finalizer on a Python int (exact, no overflow warnings)."""
    x = (x + 0x9E3779B97F4A7C15) & _MASK64
    x = ((x ^ (x >> 30)) * 0xBF58476D1CE4E5B9) & _MASK64
    x = ((x ^ (x >> 27)) * 0x94D049BB133111EB) & _MASK64
    return x ^ (x >> 31)


def _mix(x: np.ndarray) -> np.ndarray:
    """SplitMix64 finalizer on a uint64 array (wrapping arithmetic)."""
    x = x ^ (x >> np.uint64(30))
    x = x * np.uint64(0xBF58476D1CE4E5B9)
    x = x ^ (x >> np.uint64(27))
    x = x * np.uint64(0x94D049BB133111EB)
    return x ^ (x >> np.uint64(31))


def _keys(seed: int, repeat: int, purpose: str) -> list[int]:
    if isinstance(seed, bool) or int(seed) != seed or seed < 0:
        raise InputError(f"seed must be a non-negative integer; got {seed!r}")
    k = _mix_int(_mix_int(_mix_int(int(seed) & _MASK64) ^ int(repeat)) ^ _PURPOSE[purpose])
    keys = []
    for _ in range(_ROUNDS):
        k = _mix_int(k)
        keys.append(k)
    return keys


def permuted_index(index, n: int, *, seed: int = 0, repeat: int = 0,
                   purpose: str = "folds") -> np.ndarray:
    """:math:`\\pi(i)` for the rows ``index`` of ``n``: a seeded permutation of ``range(n)``.

    Parameters
    ----------
    index : array_like of int
        Row indices in ``[0, n)``.
    n : int
        Number of rows.
    seed, repeat : int
        The permutation's key; repetition ``repeat`` of ``seed`` is another
        independent permutation.
    purpose : {"folds", "holdout"}
        Independent permutations for the two uses.

    Returns
    -------
    ndarray of int64, shape like ``index``

    Examples
    --------
    >>> import numpy as np
    >>> p = permuted_index(np.arange(10), 10, seed=3)
    >>> sorted(p.tolist()) == list(range(10))
    True
    """
    idx = np.asarray(index, dtype=np.int64)
    n = int(n)
    if n < 1:
        raise InputError(f"the number of rows must be at least 1; got {n}")
    if idx.size and (idx.min() < 0 or idx.max() >= n):
        raise InputError(f"row indices must lie in [0, {n}); got {idx.min()}..{idx.max()}")
    half = max(1, ((n - 1).bit_length() + 1) // 2)
    hmask = np.uint64((1 << half) - 1)
    sh = np.uint64(half)
    keys = [np.uint64(k) for k in _keys(seed, repeat, purpose)]
    x = idx.astype(np.uint64).ravel()
    todo = np.ones(x.size, dtype=bool)
    out = np.empty(x.size, dtype=np.uint64)
    limit = np.uint64(n)
    while todo.any():  # cycle walking: at most a few rounds (the domain is < 4n)
        v = x[todo]
        left, right = v >> sh, v & hmask
        for k in keys:
            left, right = right, left ^ (_mix(right ^ k) & hmask)
        v = (left << sh) | right
        inside = v < limit
        pos = np.flatnonzero(todo)
        out[pos[inside]] = v[inside]
        x[pos[~inside]] = v[~inside]
        todo[pos[inside]] = False
    return out.astype(np.int64).reshape(idx.shape)


def _blocked(pos: np.ndarray, n: int, K: int) -> np.ndarray:
    """Fold of position ``pos`` when ``n`` ordered rows are cut into K near-equal blocks."""
    q, r = divmod(n, K)
    edge = r * (q + 1)
    big = pos < edge
    out = np.empty(pos.shape, dtype=np.intp)
    out[big] = pos[big] // (q + 1)
    out[~big] = r + (pos[~big] - edge) // q  # q >= 1: K <= n is checked by the callers
    return out


def fold_labels(index, n: int, n_folds: int, *, scheme: str = "shuffled", seed: int = 0,
                repeat: int = 0) -> np.ndarray:
    """Fold labels ``0 .. K-1`` of the rows ``index`` of ``n`` (shuffled or blocked).

    Parameters
    ----------
    index : array_like of int
        Row indices in ``[0, n)`` (any subset, any order, any chunking).
    n : int
    n_folds : int
        K, 2 to n.
    scheme : {"shuffled", "blocked"}
        Blocked: K contiguous blocks in row order; shuffled: the blocks of the
        seeded permutation (:func:`permuted_index`).
    seed, repeat : int

    Returns
    -------
    ndarray of intp, shape like ``index``

    Examples
    --------
    >>> fold_labels(range(6), 6, 3, scheme="blocked").tolist()
    [0, 0, 1, 1, 2, 2]
    """
    K = int(n_folds)
    if not 2 <= K <= n:
        raise InputError(f"the number of folds must lie in [2, {n}] for {n} rows; got {n_folds}")
    idx = np.asarray(index, dtype=np.int64)
    if scheme == "blocked":
        return _blocked(idx, n, K)
    if scheme != "shuffled":
        raise InputError(f"fold scheme must be shuffled or blocked here; got {scheme!r}")
    return _blocked(permuted_index(idx, n, seed=seed, repeat=repeat), n, K)


def holdout_count(n: int, fraction: float) -> int:
    """Number of test rows of a holdout ``fraction`` of ``n`` rows: ``round(fraction * n)``.

    Raises
    ------
    InputError
        A fraction outside (0, 1), or one that leaves no test row or fewer than
        two training rows.
    """
    if not 0.0 < fraction < 1.0:
        raise InputError(f"holdout= must lie strictly between 0 and 1; got {fraction}")
    n_test = int(round(fraction * n))
    if n_test < 1 or n - n_test < 2:
        raise InputError(
            f"holdout={fraction} leaves {n_test} test and {n - n_test} training rows of {n}; "
            "choose a fraction that keeps at least 1 test and 2 training rows"
        )
    return n_test


def holdout_mask(index, n: int, fraction: float, *, seed: int = 0) -> np.ndarray:
    """True for the rows ``index`` of ``n`` that the seeded holdout puts in the test set.

    Exactly :func:`holdout_count` of the ``n`` rows are test rows: those whose
    permuted position :math:`\\pi(i)` (purpose ``"holdout"``) is below that count.

    Examples
    --------
    >>> int(holdout_mask(range(20), 20, 0.25, seed=1).sum())
    5
    """
    n_test = holdout_count(n, fraction)
    return permuted_index(index, n, seed=seed, purpose="holdout") < n_test


def group_folds(counts, n_folds: int, *, seed: int = 0, repeat: int = 0) -> np.ndarray:
    """Fold of each group, from the groups' sizes (in the sorted order of their labels).

    Groups are dealt largest first — ties in the order of a seeded permutation
    of the groups — each to the fold with the fewest rows so far.

    Parameters
    ----------
    counts : array_like of int, shape (G,)
        Rows per group, groups in sorted label order.
    n_folds : int
        K, 2 to G.
    seed, repeat : int

    Returns
    -------
    ndarray of intp, shape (G,)

    Examples
    --------
    >>> group_folds([5, 1, 1, 3], 2).tolist()
    [0, 1, 1, 1]
    """
    counts = np.asarray(counts, dtype=np.int64)
    G, K = counts.size, int(n_folds)
    if G < 2:
        raise InputError(
            "the group column has a single group; grouped folds need at least 2 groups "
            "(and at least as many groups as folds)"
        )
    if K < 2:
        raise InputError(f"the number of folds must be at least 2; got {K} (valid: 2 to {G})")
    if G < K:
        raise InputError(f"{G} groups but {K} folds requested; choose 2 to {G} folds")
    perm = permuted_index(np.arange(G), G, seed=seed, repeat=repeat)
    order = perm[np.argsort(-counts[perm], kind="stable")]  # largest first, seeded ties
    fold_of = np.empty(G, dtype=np.intp)
    load = np.zeros(K, dtype=np.int64)
    for grp in order:
        f = int(np.argmin(load))
        fold_of[grp] = f
        load[f] += counts[grp]
    return fold_of


class FoldCount:
    """Report finished folds as ``progress(KFOLD_STAGE, done, total)``.

    ``(KFOLD_STAGE, 0, total)`` when made, then one more fold at each
    :meth:`tick`; ``total`` is the number of folds times the repeats.  With
    ``progress=None`` nothing is reported (and nothing else changes).

    Examples
    --------
    >>> seen = []
    >>> count = FoldCount(lambda *a: seen.append(a[1:]), 2)
    >>> [count.tick(x) for x in "ab"]
    ['a', 'b']
    >>> seen
    [(0, 2), (1, 2), (2, 2)]
    """

    def __init__(self, progress, total: int):
        self.progress, self.total, self.done = progress, int(total), 0
        if progress is not None:
            progress(KFOLD_STAGE, 0, self.total)

    def tick(self, value=None):
        """Count one more finished fold; returns ``value`` (to count inside an expression)."""
        self.done += 1
        if self.progress is not None:
            self.progress(KFOLD_STAGE, self.done, self.total)
        return value
