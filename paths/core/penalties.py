"""Which columns are penalized, and how much: unpenalized columns and relative penalties.

The penalty generalizes to :math:`\\lambda \\sum_j \\omega_j \\beta_j^2` with
:math:`\\omega_j = 0` for unpenalized columns (age, sex, batch beside thousands
of features) and :math:`\\omega_j > 0` a relative penalty (1 by default).  Columns
are named by name or glob pattern (``"age"``, ``"batch_*"``), or by position.
"""
from __future__ import annotations

from fnmatch import fnmatchcase

import numpy as np

from paths.data.validation import InputError

__all__ = ["unpenalized_mask", "penalty_factors"]


def _match(spec, names: list, what: str) -> np.ndarray:
    """Boolean mask of the columns one spec names: an index, a name or a glob pattern."""
    p = len(names)
    if isinstance(spec, (int, np.integer)) and not isinstance(spec, bool):
        if not -p <= int(spec) < p:
            raise InputError(f"{what} column index {spec} is out of range for {p} columns")
        mask = np.zeros(p, dtype=bool)
        mask[int(spec)] = True
        return mask
    pattern = str(spec)
    mask = np.array([fnmatchcase(str(c), pattern) for c in names], dtype=bool)
    if not mask.any():
        raise InputError(f"{what} {pattern!r} matches no column; columns are: "
                         f"{', '.join(map(str, names[:8]))}{' ...' if p > 8 else ''}")
    return mask


def unpenalized_mask(spec, names: list) -> np.ndarray | None:
    """Mask (p,) of the unpenalized columns, or None when ``spec`` is empty.

    ``spec``: a boolean mask of length p, or a sequence of indices, names and
    glob patterns (a single string is one pattern).
    """
    if spec is None:
        return None
    if isinstance(spec, (str, int, np.integer)):
        spec = [spec]
    arr = np.asarray(spec)
    if arr.dtype == bool:
        if arr.shape != (len(names),):
            raise InputError(f"unpenalized mask has shape {arr.shape}; pass one entry per "
                             f"column ({len(names)})")
        return arr.copy() if arr.any() else None
    mask = np.zeros(len(names), dtype=bool)
    for item in spec:
        mask |= _match(item, names, "unpenalized")
    return mask if mask.any() else None


def penalty_factors(spec, names: list) -> np.ndarray | None:
    """Relative penalties (p,) from a mapping ``{pattern: W}`` or an array, or None.

    Each ``W`` must be a finite number > 0; a column named twice takes the
    last match.
    """
    if spec is None:
        return None
    p = len(names)
    if isinstance(spec, dict):
        out = np.ones(p)
        for key, value in spec.items():
            out[_match(key, names, "relative penalty")] = _positive(value, key)
    else:
        out = np.asarray(spec, dtype=np.float64)
        if out.shape != (p,):
            raise InputError(f"relative_penalty has shape {out.shape}; pass one factor per "
                             f"column ({p}) or a mapping of column pattern to factor")
        for j, v in enumerate(out):
            _positive(v, names[j])
    return None if np.all(out == 1.0) else out


def _positive(value, key) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise InputError(f"relative penalty for {key!r} must be a number > 0; got "
                         f"{value!r}") from None
    if not (np.isfinite(v) and v > 0):
        raise InputError(f"relative penalty for {key!r} must be a finite number > 0 (it "
                         f"multiplies lambda); got {value!r} — use unpenalized for 0")
    return v
