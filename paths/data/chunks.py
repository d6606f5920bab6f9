"""Reading data in pieces: row chunks for tall data, column blocks for wide data.

A *row source* yields ``(start, block)`` pairs, ``block`` a float64 array of
shape (rows, p + t) holding the feature columns then the target columns of
consecutive rows, ``start`` the 0-based index of its first data row.  A
*column source* yields ``(start, block)`` with ``block`` of shape (n, b): a
group of consecutive feature columns of every row.  Sources can be iterated
more than once (one pass each); nothing but the current piece is held.

Every problem raises :class:`~paths._validation.InputError` with one line naming
the file, the column and the data-row range (1-based, as a spreadsheet counts
data rows below the header), and the fix.
"""
from __future__ import annotations

import os
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from paths.data.validation import InputError

__all__ = ["RowSource", "ArrayRows", "ParquetRows", "CSVRows", "open_rows",
           "ColumnSource", "ArrayColumns", "ParquetColumns", "open_columns",
           "DEFAULT_CHUNK_ROWS", "DEFAULT_BLOCK_COLUMNS"]

DEFAULT_CHUNK_ROWS = 65_536
DEFAULT_BLOCK_COLUMNS = 4_096
_PARQUET_SUFFIXES = (".parquet", ".pq", ".parq")


def _check_chunk_rows(chunk_rows) -> int:
    if int(chunk_rows) != chunk_rows or chunk_rows < 1:
        raise InputError(f"chunk_rows must be a positive integer; got {chunk_rows!r}")
    return int(chunk_rows)


def _finite_or_raise(block: np.ndarray, start: int, names, where: str) -> None:
    bad = ~np.isfinite(block)
    if bad.any():
        j = int(np.flatnonzero(bad.any(axis=0))[0])
        i = int(np.flatnonzero(bad[:, j])[0])
        raise InputError(
            f"{where}rows {start + 1}-{start + block.shape[0]}: column {names[j]!r} has "
            f"{int(bad[:, j].sum())} missing or infinite value(s) (first at data row "
            f"{start + i + 1}); remove or impute them"
        )


@dataclass
class RowSource:
    """Base class of row sources: ``columns`` names the p + t columns of each block."""

    columns: list
    n_features: int
    n_rows: int | None = None
    source: str = ""
    chunk_rows: int = DEFAULT_CHUNK_ROWS
    nbytes_per_row: int = field(default=0)

    @property
    def feature_names(self) -> list:
        return list(self.columns[: self.n_features])

    @property
    def target_names(self) -> list:
        return list(self.columns[self.n_features:])

    def __iter__(self):  # pragma: no cover - abstract
        raise NotImplementedError


class ArrayRows(RowSource):
    """Row chunks of in-memory (or memory-mapped) arrays ``X`` (n, p) and ``y`` (n,) / (n, t)."""

    def __init__(self, X, y, *, chunk_rows: int = DEFAULT_CHUNK_ROWS, feature_names=None,
                 target_names=None, source: str = "arrays"):
        X = np.asarray(X) if not isinstance(X, np.memmap) else X
        y = np.asarray(y)
        if X.ndim != 2:
            raise InputError(f"X must be 2-D (n_samples, n_features); got shape {X.shape}")
        if y.ndim == 1:
            y = y[:, None]
        if y.ndim != 2 or y.shape[0] != X.shape[0]:
            raise InputError(f"y has shape {y.shape} but X has {X.shape[0]} rows; "
                             "pass one response row per sample")
        if X.shape[0] == 0 or X.shape[1] == 0:
            raise InputError(f"X has shape {X.shape}; pass at least 2 rows and 1 column")
        for name, a in (("X", X), ("y", y)):
            if not (np.issubdtype(a.dtype, np.number) or a.dtype == bool):
                raise InputError(f"{name} is not numeric (dtype {a.dtype}); convert it to floats")
        p, t = X.shape[1], y.shape[1]
        fn = list(feature_names) if feature_names is not None else [f"x{j}" for j in range(p)]
        tn = list(target_names) if target_names is not None else (
            ["y"] if t == 1 else [f"y{j}" for j in range(t)])
        super().__init__(columns=fn + tn, n_features=p, n_rows=X.shape[0], source=source,
                         chunk_rows=_check_chunk_rows(chunk_rows), nbytes_per_row=8 * (p + t))
        self._X, self._y = X, y

    def __iter__(self):
        n, step = self._X.shape[0], self.chunk_rows
        for s in range(0, n, step):
            e = min(s + step, n)
            block = np.empty((e - s, len(self.columns)))
            block[:, : self.n_features] = self._X[s:e]
            block[:, self.n_features:] = self._y[s:e]
            _finite_or_raise(block, s, self.columns, "")
            yield s, block


def parquet_files(path: Path) -> list[Path]:
    """The Parquet file ``path``, or the part files of the folder ``path`` (sorted)."""
    if path.is_dir():
        files = sorted(f for f in path.rglob("*") if f.is_file()
                       and f.suffix.lower() in _PARQUET_SUFFIXES)
        if not files:
            raise InputError(f"{path}: folder holds no .parquet files; pass a Parquet file or folder")
        return files
    return [path]


def _is_numeric(pa_type) -> bool:
    import pyarrow as pa

    return (pa.types.is_integer(pa_type) or pa.types.is_floating(pa_type)
            or pa.types.is_boolean(pa_type))


def select_columns(names, target, features, where):
    """(features, targets) among the column names: targets checked, features default the rest."""
    targets = [target] if isinstance(target, str) else list(target or [])
    if not targets:
        raise InputError(f"{where}no target column given; pass --target COLUMN")
    missing = [t for t in targets if t not in names]
    if missing:
        shown = ", ".join(map(str, names[:8])) + (" ..." if len(names) > 8 else "")
        raise InputError(f"{where}target column {missing[0]!r} not found; columns are: {shown}")
    if features is None:
        features = [c for c in names if c not in targets]
    else:
        features = list(features)
        absent = [c for c in features if c not in names]
        if absent:
            raise InputError(f"{where}feature column {absent[0]!r} not found; check --features")
    if not features:
        raise InputError(f"{where}no feature columns left besides the target; add features")
    return features, targets


class ParquetRows(RowSource):
    """Row chunks of a Parquet file, or of a folder of Parquet part files (read in name order).

    Batches come from :meth:`pyarrow.parquet.ParquetFile.iter_batches`, so only
    one batch (plus the row group being decoded) is in memory; write files with
    row groups of at most a few hundred thousand rows for bounded memory.

    Raises
    ------
    InputError
        A missing target or feature column, a non-numeric column, a part whose
        schema differs from the first part's, a null value (with its row range).
    """

    def __init__(self, path, target, *, features=None, chunk_rows: int = DEFAULT_CHUNK_ROWS):
        import pyarrow.parquet as pq

        path = Path(path)
        if not path.exists():
            raise InputError(f"{path}: no such file or folder; check the path")
        self._files = parquet_files(path)
        where = f"{path}: "
        try:
            schemas = [pq.read_schema(f) for f in self._files]
            metas = [pq.read_metadata(f) for f in self._files]
        except Exception as exc:  # pyarrow raises ArrowInvalid / OSError subclasses
            raise InputError(f"{where}not a readable Parquet file ({exc}); check the file") from None
        first = schemas[0]
        for f, s in zip(self._files[1:], schemas[1:]):
            if not s.equals(first):
                diff = _schema_difference(first, s)
                raise InputError(
                    f"{f}: schema differs from {self._files[0].name} ({diff}); "
                    "rewrite the parts with one schema"
                )
        names = list(first.names)
        features, targets = select_columns(names, target, features, where)
        nonnum = [c for c in features + targets if not _is_numeric(first.field(c).type)]
        if nonnum:
            shown = ", ".join(f"{c} ({first.field(c).type})" for c in nonnum[:5])
            raise InputError(f"{where}non-numeric column(s): {shown}; drop them (--features) "
                             "or encode them as numbers")
        self._schema = first
        super().__init__(columns=features + targets, n_features=len(features),
                         n_rows=int(sum(m.num_rows for m in metas)), source=str(path),
                         chunk_rows=_check_chunk_rows(chunk_rows),
                         nbytes_per_row=8 * (len(features) + len(targets)))

    def __iter__(self):
        import pyarrow as pa
        import pyarrow.parquet as pq

        start = 0
        cols = self.columns
        pool = pa.default_memory_pool()
        for f in self._files:
            pf = pq.ParquetFile(f, pre_buffer=False)
            # one row group at a time, a few columns at a time (iter_batches reads ahead and
            # holds several whole groups); the pool's unused memory is released as we go
            for g in range(pf.num_row_groups):
                rows = pf.metadata.row_group(g).num_rows
                block = np.empty((rows, len(cols)))
                step = max(1, int((32 << 20) // max(8 * rows, 1)))
                for c0 in range(0, len(cols), step):
                    part = pf.read_row_group(g, columns=cols[c0:c0 + step])
                    self._fill(block, c0, part, f, start)
                    del part
                    pool.release_unused()
                _finite_or_raise(block, start, cols, f"{f}: ")
                for off in range(0, rows, self.chunk_rows):
                    yield start + off, block[off:off + self.chunk_rows]
                start += rows
                del block

    def _fill(self, block, c0, table, f, start):
        rows = table.num_rows
        for j in range(table.num_columns):
            col = table.column(j)
            name = self.columns[c0 + j]
            if col.null_count:
                i = _first_null(col)
                raise InputError(
                    f"{f}: rows {start + 1}-{start + rows}: column {name!r} has "
                    f"{col.null_count} null value(s) (first at data row {start + i + 1}); "
                    "remove or impute them"
                )
            block[:, c0 + j] = col.to_numpy()


def _first_null(col) -> int:
    mask = np.asarray(col.is_null().to_numpy(zero_copy_only=False))
    return int(np.flatnonzero(mask)[0])


def _schema_difference(a, b) -> str:
    an, bn = set(a.names), set(b.names)
    if an - bn:
        return f"column {sorted(an - bn)[0]!r} missing"
    if bn - an:
        return f"extra column {sorted(bn - an)[0]!r}"
    for name in a.names:
        if a.field(name).type != b.field(name).type:
            return f"column {name!r} is {b.field(name).type}, was {a.field(name).type}"
    return "column order differs"


class CSVRows(RowSource):
    """Row chunks of a CSV/TSV file (pandas' C parser, ``chunksize`` rows at a time).

    Raises
    ------
    InputError
        A missing column, a non-numeric value (the column, the value and the
        row range of its chunk), a missing or infinite value.
    """

    def __init__(self, path, target, *, features=None, sep: str | None = None,
                 chunk_rows: int = DEFAULT_CHUNK_ROWS):
        import pandas as pd

        path = Path(path)
        if not path.exists():
            raise InputError(f"{path}: no such file; check the path")
        if path.is_dir():
            raise InputError(f"{path} is a folder, not a CSV file; pass the file inside it")
        if sep is None:
            sep = "\t" if path.suffix.lower() in (".tsv", ".tab") else ","
        self._sep = sep
        try:
            header = pd.read_csv(path, sep=sep, nrows=0)
        except pd.errors.EmptyDataError:
            raise InputError(f"{path} is empty; pass a file with a header row and data rows") from None
        except (UnicodeDecodeError, pd.errors.ParserError, ValueError) as exc:
            raise InputError(f"{path} could not be read ({type(exc).__name__}); "
                             "check that it is UTF-8 CSV and the delimiter (--sep)") from None
        names = [str(c) for c in header.columns]
        features, targets = select_columns(names, target, features, f"{path}: ")
        self._path = path
        super().__init__(columns=features + targets, n_features=len(features), n_rows=None,
                         source=str(path), chunk_rows=_check_chunk_rows(chunk_rows),
                         nbytes_per_row=8 * (len(features) + len(targets)))

    def __iter__(self):
        import pandas as pd

        cols = self.columns
        start = 0
        reader = pd.read_csv(self._path, sep=self._sep, usecols=cols, chunksize=self.chunk_rows)
        with reader:
            for frame in reader:
                rows = frame.shape[0]
                block = np.empty((rows, len(cols)))
                for j, name in enumerate(cols):
                    s = frame[name]
                    if not pd.api.types.is_numeric_dtype(s):
                        num = pd.to_numeric(s, errors="coerce")
                        bad = np.flatnonzero(num.isna().to_numpy() & s.notna().to_numpy())
                        if bad.size:
                            i = int(bad[0])
                            raise InputError(
                                f"{self._path}: rows {start + 1}-{start + rows}: column {name!r} "
                                f"has a non-numeric value {str(s.iloc[i])!r} at data row "
                                f"{start + i + 1}; fix or drop that value"
                            )
                        s = num
                    block[:, j] = s.to_numpy(dtype=np.float64, na_value=np.nan)
                _finite_or_raise(block, start, cols, f"{self._path}: ")
                yield start, block
                start += rows


def open_rows(data, target=None, *, features=None, sep=None,
              chunk_rows: int = DEFAULT_CHUNK_ROWS, y=None) -> RowSource:
    """A row source for ``data``: a :class:`RowSource`, a path, or an array with ``y``.

    Parameters
    ----------
    data : RowSource, path or array_like
        ``.parquet``/``.pq`` file or a folder of them: Parquet; ``.npy``: a
        memory-mapped NumPy array whose last column is the target (unless ``y``);
        anything else: CSV/TSV.
    target : str or list of str
        Target column(s), for files.
    y : array_like, optional
        The response, when ``data`` is an array.
    """
    if isinstance(data, RowSource):
        return data
    if isinstance(data, (str, os.PathLike)):
        path = Path(data)
        if path.is_dir() or path.suffix.lower() in _PARQUET_SUFFIXES:
            return ParquetRows(path, target, features=features, chunk_rows=chunk_rows)
        if path.suffix.lower() == ".npy":
            if not path.exists():
                raise InputError(f"{path}: no such file; check the path")
            arr = np.load(path, mmap_mode="r")
            if y is None:
                if arr.ndim != 2 or arr.shape[1] < 2:
                    raise InputError(f"{path}: expected a 2-D array with the target as its last "
                                     f"column; got shape {arr.shape}")
                return ArrayRows(arr[:, :-1], arr[:, -1], chunk_rows=chunk_rows, source=str(path))
            return ArrayRows(arr, y, chunk_rows=chunk_rows, source=str(path))
        return CSVRows(path, target, features=features, sep=sep, chunk_rows=chunk_rows)
    if y is None:
        raise InputError("pass the response y with an array design (or a file path and --target)")
    names = None
    cols = getattr(data, "columns", None)
    if cols is not None:
        names = [str(c) for c in cols]
        data = data.to_numpy(dtype=np.float64)
    return ArrayRows(data, y, chunk_rows=chunk_rows, feature_names=names)


# --------------------------------------------------------------------------- columns
@dataclass
class ColumnSource:
    """Base class of column sources for wide data: ``n_rows`` rows, ``feature_names`` columns."""

    feature_names: list
    n_rows: int
    source: str = ""
    block_columns: int = DEFAULT_BLOCK_COLUMNS

    @property
    def n_features(self) -> int:
        return len(self.feature_names)

    def __iter__(self):  # pragma: no cover - abstract
        raise NotImplementedError


class ArrayColumns(ColumnSource):
    """Column blocks of an in-memory or memory-mapped array (n, p), or of a dask array."""

    def __init__(self, X, *, block_columns: int = DEFAULT_BLOCK_COLUMNS, feature_names=None,
                 source: str = "array"):
        if X.ndim != 2 or X.shape[0] == 0 or X.shape[1] == 0:
            raise InputError(f"X must be a non-empty 2-D array (n, p); got shape {X.shape}")
        if int(block_columns) != block_columns or block_columns < 1:
            raise InputError(f"block_columns must be a positive integer; got {block_columns!r}")
        names = list(feature_names) if feature_names is not None else [
            f"x{j}" for j in range(X.shape[1])]
        super().__init__(feature_names=names, n_rows=int(X.shape[0]), source=source,
                         block_columns=int(block_columns))
        self._X = X

    def __iter__(self):
        p = self._X.shape[1]
        for s in range(0, p, self.block_columns):
            e = min(s + self.block_columns, p)
            block = self._X[:, s:e]
            if hasattr(block, "compute"):  # dask array: fetch one column block
                block = block.compute()
            block = np.array(block, dtype=np.float64, order="C")
            bad = ~np.isfinite(block)
            if bad.any():
                j = int(np.flatnonzero(bad.any(axis=0))[0])
                raise InputError(f"{self.source}: column {self.feature_names[s + j]!r} has "
                                 f"{int(bad[:, j].sum())} missing or infinite value(s); "
                                 "remove or impute them")
            yield s, block


class ParquetColumns(ColumnSource):
    """Column blocks of one Parquet file (columns are read selectively, a group at a time)."""

    def __init__(self, path, *, features=None, exclude=(), block_columns: int = DEFAULT_BLOCK_COLUMNS):
        import pyarrow.parquet as pq

        path = Path(path)
        if not path.exists():
            raise InputError(f"{path}: no such file; check the path")
        try:
            schema = pq.read_schema(path)
            meta = pq.read_metadata(path)
        except Exception as exc:
            raise InputError(f"{path}: not a readable Parquet file ({exc}); check the file") from None
        names = list(schema.names)
        if features is None:
            features = [c for c in names if c not in set(exclude)]
        absent = [c for c in features if c not in names]
        if absent:
            raise InputError(f"{path}: feature column {absent[0]!r} not found; check --features")
        nonnum = [c for c in features if not _is_numeric(schema.field(c).type)]
        if nonnum:
            raise InputError(f"{path}: non-numeric column(s): {', '.join(nonnum[:5])}; "
                             "drop them or encode them as numbers")
        if int(block_columns) != block_columns or block_columns < 1:
            raise InputError(f"block_columns must be a positive integer; got {block_columns!r}")
        super().__init__(feature_names=list(features), n_rows=int(meta.num_rows),
                         source=str(path), block_columns=int(block_columns))
        self._path = path

    def read_columns(self, names) -> np.ndarray:
        import pyarrow.parquet as pq

        table = pq.read_table(self._path, columns=list(names))
        out = np.empty((table.num_rows, len(names)))
        for j, name in enumerate(names):
            col = table.column(name)
            if col.null_count:
                raise InputError(f"{self._path}: column {name!r} has {col.null_count} null "
                                 "value(s); remove or impute them")
            out[:, j] = col.to_numpy()
        bad = ~np.isfinite(out)
        if bad.any():
            j = int(np.flatnonzero(bad.any(axis=0))[0])
            raise InputError(f"{self._path}: column {names[j]!r} has missing or infinite "
                             "value(s); remove or impute them")
        return out

    def __iter__(self):
        names = self.feature_names
        for s in range(0, len(names), self.block_columns):
            yield s, self.read_columns(names[s:s + self.block_columns])


def open_columns(data, *, features=None, exclude=(), block_columns: int = DEFAULT_BLOCK_COLUMNS,
                 feature_names=None) -> ColumnSource:
    """A column source for ``data``: a :class:`ColumnSource`, a Parquet path, a ``.npy`` path, or an array."""
    if isinstance(data, ColumnSource):
        return data
    if isinstance(data, (str, os.PathLike)):
        path = Path(data)
        if path.suffix.lower() in _PARQUET_SUFFIXES:
            return ParquetColumns(path, features=features, exclude=exclude,
                                  block_columns=block_columns)
        if path.suffix.lower() == ".npy":
            if not path.exists():
                raise InputError(f"{path}: no such file; check the path")
            return ArrayColumns(np.load(path, mmap_mode="r"), block_columns=block_columns,
                                source=str(path))
        raise InputError(f"{path}: wide data must be Parquet or .npy (columns are read in "
                         "blocks); convert the file, e.g. with pandas.DataFrame.to_parquet")
    cols = getattr(data, "columns", None)
    if cols is not None and not hasattr(data, "compute"):
        feature_names = [str(c) for c in cols]
        data = data.to_numpy(dtype=np.float64)
    if not hasattr(data, "ndim"):
        data = np.asarray(data, dtype=np.float64)
    return ArrayColumns(data, block_columns=block_columns, feature_names=feature_names)
