"""Reading data files into a design and a response.

The reader returns a :class:`Dataset`; every problem raises
:class:`~paths._validation.InputError` with a one-line message naming the file,
the column or row, and the fix.
"""
from __future__ import annotations

import hashlib
import os
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from ._validation import InputError

__all__ = ["Dataset", "read_table", "select", "sha256_of"]


@dataclass(frozen=True)
class Dataset:
    """A design and a response read from a table.

    Attributes
    ----------
    X : ndarray, shape (n, p)
    y : ndarray, shape (n,) or (n, t)
    feature_names : list of str
    target_names : list of str
    source : str
        Where the data came from (a path, or a description).
    notes : list of str
        What the reader did that the report should say (dropped columns, ...).
    """

    X: np.ndarray
    y: np.ndarray
    feature_names: list
    target_names: list
    source: str = ""
    notes: list = field(default_factory=list)


def sha256_of(path: str | os.PathLike) -> str:
    """SHA-256 of a file's bytes, read in blocks (the file is opened read-only)."""
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


def read_table(path: str | os.PathLike, *, sep: str | None = None) -> pd.DataFrame:
    """Read a CSV or TSV file (delimiter sniffed unless ``sep``) into a DataFrame."""
    p = Path(path)
    if not p.exists():
        raise InputError(f"{p}: no such file; check the path")
    if p.is_dir():
        raise InputError(f"{p} is a folder, not a data file; pass the file inside it")
    if sep is None and p.suffix.lower() in (".tsv", ".tab"):
        sep = "\t"
    try:
        df = pd.read_csv(p, sep=sep, engine="python" if sep is None else "c")
    except pd.errors.EmptyDataError:
        raise InputError(f"{p} is empty; pass a file with a header row and data rows") from None
    except UnicodeDecodeError as exc:
        raise InputError(f"{p} is not UTF-8 text (byte {exc.start}); re-save it as UTF-8") from None
    except (pd.errors.ParserError, ValueError) as exc:
        msg = str(exc).strip().splitlines()[-1]
        raise InputError(f"{p} could not be parsed ({msg}); check the delimiter (--sep)") from None
    if df.shape[0] == 0:
        raise InputError(f"{p} has a header but no data rows; add data rows")
    return df


def select(df: pd.DataFrame, target, *, features=None, source: str = "") -> Dataset:
    """Split a table into the response column(s) ``target`` and numeric features.

    Parameters
    ----------
    df : DataFrame
    target : str or list of str
    features : list of str, optional
        Feature columns; default every column except the targets.
    """
    where = f"{source}: " if source else ""
    targets = [target] if isinstance(target, str) else list(target)
    missing = [t for t in targets if t not in df.columns]
    if missing:
        cols = ", ".join(map(str, df.columns[:8])) + (" ..." if df.shape[1] > 8 else "")
        raise InputError(f"{where}target column {missing[0]!r} not found; columns are: {cols}")
    if features is None:
        features = [c for c in df.columns if c not in targets]
    else:
        absent = [c for c in features if c not in df.columns]
        if absent:
            raise InputError(f"{where}feature column {absent[0]!r} not found; check --features")
    if not features:
        raise InputError(f"{where}no feature columns left besides the target; add features")
    X = df[features]
    nonnum = [c for c in features if not pd.api.types.is_numeric_dtype(X[c])]
    if nonnum:
        shown = ", ".join(map(str, nonnum[:5])) + (" ..." if len(nonnum) > 5 else "")
        raise InputError(f"{where}non-numeric feature column(s): {shown}; "
                         "drop them or encode them as numbers")
    Y = df[targets]
    nonnum = [c for c in targets if not pd.api.types.is_numeric_dtype(Y[c])]
    if nonnum:
        raise InputError(f"{where}target column {nonnum[0]!r} is not numeric; "
                         "choose a numeric target")
    Xa = X.to_numpy(dtype=np.float64)
    Ya = Y.to_numpy(dtype=np.float64)
    for name, arr, cols in (("feature", Xa, features), ("target", Ya, targets)):
        bad = ~np.isfinite(arr)
        if bad.any():
            j = int(np.flatnonzero(bad.any(axis=0))[0])
            i = int(np.flatnonzero(bad[:, j])[0])
            raise InputError(
                f"{where}{name} column {cols[j]!r} has {int(bad[:, j].sum())} missing or "
                f"infinite value(s) (first at data row {i + 1}); remove or impute them"
            )
    y = Ya[:, 0] if len(targets) == 1 else Ya
    return Dataset(X=Xa, y=y, feature_names=[str(c) for c in features],
                   target_names=[str(t) for t in targets], source=source)
