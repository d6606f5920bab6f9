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

__all__ = ["RowSource", "ArrayRows", "ParquetRows", "CSVRows", "open_rows", "count_rows",
           "HoldoutRows", "GroupValues", "CSVColumns", "is_text_path", "frame_block", "RowSubsetColumns",
           "ColumnSource", "ArrayColumns", "ParquetColumns", "open_columns",
           "PreparedRows", "PreparedGroups", "file_frames", "open_prepared",
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
            if np.issubdtype(a.dtype, np.complexfloating):
                raise InputError(f"{name} holds complex numbers (dtype {a.dtype}); split them "
                                 "into real and imaginary columns")
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
        raise InputError(f"{where}no target column given; pass target=COLUMN")
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
            raise InputError(f"{where}feature column {absent[0]!r} not found; check features=")
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
        if len(set(names)) != len(names):
            dup = next(c for c in names if names.count(c) > 1)
            raise InputError(f"{path}: column name {dup!r} appears twice; rename one")
        features, targets = select_columns(names, target, features, where)
        nonnum = [c for c in features + targets if not _is_numeric(first.field(c).type)]
        if nonnum:
            shown = ", ".join(f"{c} ({first.field(c).type})" for c in nonnum[:5])
            raise InputError(f"{where}non-numeric column(s): {shown}; drop them (features=), "
                             "encode them as numbers or pass encode='onehot'")
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
    """Row chunks of a CSV/TSV file, under exactly the in-memory reader's rules.

    The layout (delimiter, header, column names) is decided on the first lines
    by :func:`paths.data.tables.text_layout` and the records parsed by
    :func:`paths.data.tables.read_text_chunks` — the functions
    :func:`paths.data.tables.read_table` uses — so a record with a field too
    many or too few, a repeated column name, a number with digit-group
    underscores or thousands separators, or a non-UTF-8 byte is refused with
    the message the in-memory engine gives.

    Raises
    ------
    InputError
        A missing column, a ragged record, a non-numeric value (the column, the
        value and its line), a missing or infinite value.
    """

    def __init__(self, path, target, *, features=None, sep: str | None = None,
                 chunk_rows: int = DEFAULT_CHUNK_ROWS):
        from paths.data.tables import text_layout

        path = Path(path)
        if path.is_dir():
            raise InputError(f"{path} is a folder, not a CSV file; pass the file inside it")
        self._layout = text_layout(path, sep=sep)
        self._sep = self._layout.sep
        names = list(self._layout.names)
        features, targets = select_columns(names, target, features, f"{path}: ")
        self._path = path
        super().__init__(columns=features + targets, n_features=len(features), n_rows=None,
                         source=str(path), chunk_rows=_check_chunk_rows(chunk_rows),
                         nbytes_per_row=8 * (len(features) + len(targets)))

    @property
    def layout(self):
        """The file's :class:`~paths.data.tables.TextLayout` (delimiter, header, names)."""
        return self._layout

    @property
    def notes(self) -> list:
        """What the reader detected (delimiter, header), as the in-memory reader says it."""
        return list(self._layout.notes)

    def __iter__(self):
        from paths.data.tables import read_text_chunks

        start = 0
        for frame in read_text_chunks(self._layout, self.chunk_rows):
            block = frame_block(frame, self.columns, start, self._path)
            yield start, block
            start += block.shape[0]


def frame_block(frame, cols, start: int, source) -> np.ndarray:
    """The columns ``cols`` of a parsed text chunk as float64, every value checked: a
    non-numeric value or a missing or infinite one is refused with its line."""
    lines = frame.attrs.get("paths_lines")
    rows = frame.shape[0]
    block = np.empty((rows, len(cols)))
    for j, name in enumerate(cols):
        s = frame[name]
        if not _numeric_series(s):
            import pandas as pd

            num = pd.to_numeric(s.astype(object).where(s.notna(), None), errors="coerce")
            bad = np.flatnonzero(num.isna().to_numpy() & s.notna().to_numpy())
            i = int(bad[0]) if bad.size else 0
            at = f"line {int(lines[i])}" if lines is not None else f"data row {start + i + 1}"
            raise InputError(
                f"{source}: rows {start + 1}-{start + rows}: column {name!r} has a "
                f"non-numeric value {str(s.iloc[i])!r} on {at}; fix or drop that value"
            )
        block[:, j] = s.to_numpy(dtype=np.float64, na_value=np.nan)
    _finite_or_raise(block, start, cols, f"{source}: ")
    return block


def _numeric_series(s) -> bool:
    import pandas as pd

    return (pd.api.types.is_numeric_dtype(s) and not pd.api.types.is_complex_dtype(s)) or \
        pd.api.types.is_bool_dtype(s) or bool(s.isna().all())


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
            from paths.data.tables import open_npy

            arr = open_npy(path)
            if y is None:
                if arr.ndim != 2 or arr.shape[1] < 2:
                    raise InputError(f"{path}: expected a 2-D array with the target as its last "
                                     f"column; got shape {arr.shape}")
                return ArrayRows(arr[:, :-1], arr[:, -1], chunk_rows=chunk_rows, source=str(path))
            return ArrayRows(arr, y, chunk_rows=chunk_rows, source=str(path))
        return CSVRows(path, target, features=features, sep=sep, chunk_rows=chunk_rows)
    if y is None:
        raise InputError("pass the response y with an array design (or a file path and target=)")
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
        self.named = feature_names is not None  # else messages say "column j", as in memory
        names = list(feature_names) if feature_names is not None else [
            f"x{j}" for j in range(X.shape[1])]
        super().__init__(feature_names=names, n_rows=int(X.shape[0]), source=source,
                         block_columns=int(block_columns))
        self._X = X

    def read_columns(self, names) -> np.ndarray:
        """The named columns of every row, as float64 (n, len(names))."""
        pos = [self.feature_names.index(c) for c in names]
        block = self._X[:, pos]
        if hasattr(block, "compute"):
            block = block.compute()
        return np.array(block, dtype=np.float64)

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
            raise InputError(f"{path}: feature column {absent[0]!r} not found; check features=")
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
            from paths.data.tables import open_npy

            return ArrayColumns(open_npy(path), block_columns=block_columns, source=str(path))
        raise InputError(f"{path}: a CSV/TSV file is read in column blocks with its target "
                         "column named (target=); or pass Parquet or .npy")
    cols = getattr(data, "columns", None)
    if cols is not None and not hasattr(data, "compute"):
        feature_names = [str(c) for c in cols]
        data = data.to_numpy(dtype=np.float64)
    if not hasattr(data, "ndim"):
        data = np.asarray(data, dtype=np.float64)
    return ArrayColumns(data, block_columns=block_columns, feature_names=feature_names)


# --------------------------------------------------------------------------- row subsets, groups
def count_rows(src: RowSource, progress=None) -> int:
    """Rows of a source: from its metadata, or by one reading pass (CSV)."""
    if src.n_rows is not None:
        return int(src.n_rows)
    n = 0
    for start, block in src:
        n = start + block.shape[0]
        if progress:
            progress("pass 0: counting rows (for the holdout)", n, None)
    return n


class HoldoutRows(RowSource):
    """The training (``test=False``) or test rows of a source under the seeded holdout split.

    The split is :func:`paths.data.folds.holdout_mask` of the row index, so it
    is the in-memory engine's split whatever the chunk size; ``start`` counts
    the kept rows only.
    """

    def __init__(self, src: RowSource, n_all: int, fraction: float, seed: int, *, test: bool):
        from paths.data.folds import holdout_count

        n_test = holdout_count(n_all, fraction)
        super().__init__(columns=list(src.columns), n_features=src.n_features,
                         n_rows=n_test if test else n_all - n_test,
                         source=f"{src.source} ({'held-out' if test else 'training'} rows)",
                         chunk_rows=src.chunk_rows, nbytes_per_row=src.nbytes_per_row)
        self._src, self._n_all, self._fraction, self._seed, self._test = (
            src, n_all, fraction, seed, test)

    def keep(self, start: int, rows: int) -> np.ndarray:
        """Which of the rows ``start .. start + rows - 1`` of the whole source are kept."""
        from paths.data.folds import holdout_mask

        held = holdout_mask(np.arange(start, start + rows), self._n_all, self._fraction,
                            seed=self._seed)
        return held if self._test else ~held

    def __iter__(self):
        out = 0
        for start, block in self._src:
            sel = self.keep(start, block.shape[0])
            if sel.any():
                kept = block[sel]
                yield out, kept
                out += kept.shape[0]


class GroupValues:
    """Group labels per row, read in pieces alongside a row source (grouped folds).

    ``groups`` is an array (one label per row) or the name of a column of the
    source's CSV/Parquet file.  :meth:`counts` makes one pass over the labels
    (rows per group, groups in sorted label order, as :func:`numpy.unique`);
    :meth:`codes` then gives each row its group's position in that order.
    """

    def __init__(self, groups, src: RowSource, *, sep=None, keep=None):
        self._groups, self._src, self._sep, self._keep = groups, src, sep, keep
        self._index = None
        if isinstance(groups, str):
            if not isinstance(src, (CSVRows, ParquetRows)):
                raise InputError(f"groups={groups!r} names a column; the data ({src.source}) "
                                 "have none: pass the group labels as an array")
            names = _file_columns(src)
            if groups not in names:
                shown = ", ".join(map(str, names[:8])) + (" ..." if len(names) > 8 else "")
                raise InputError(f"{src.source}: groups= column {groups!r} not found; columns "
                                 f"are: {shown}")
        else:
            g = np.asarray(groups)
            if g.ndim != 1 or (src.n_rows is not None and g.shape[0] != src.n_rows):
                raise InputError(f"groups has shape {g.shape} but there are {src.n_rows} rows; "
                                 "pass one group label per row")

    def subset(self, rows: "HoldoutRows") -> "GroupValues":
        """The labels of the rows a :class:`HoldoutRows` keeps."""
        return GroupValues(self._groups, self._src, sep=self._sep, keep=rows.keep)

    def _raw(self):
        """``(start, labels)`` pieces over the whole source, in row order."""
        if not isinstance(self._groups, str):
            g = np.asarray(self._groups)
            step = self._src.chunk_rows
            for s in range(0, g.shape[0], step):
                yield s, g[s:s + step]
            return
        import pandas as pd

        if isinstance(self._src, CSVRows):
            reader = pd.read_csv(self._src._path, sep=self._src._sep, usecols=[self._groups],
                                 chunksize=self._src.chunk_rows)
            start = 0
            with reader:
                for frame in reader:
                    yield start, frame[self._groups].to_numpy()
                    start += frame.shape[0]
            return
        import pyarrow.parquet as pq

        start = 0
        for f in self._src._files:
            pf = pq.ParquetFile(f, pre_buffer=False)
            for g in range(pf.num_row_groups):
                col = pf.read_row_group(g, columns=[self._groups]).column(0)
                vals = col.to_pandas().to_numpy()
                yield start, vals
                start += vals.shape[0]

    def _pieces(self):
        out = 0
        for start, vals in self._raw():
            if pd_isna(vals).any():
                i = int(np.flatnonzero(pd_isna(vals))[0])
                raise InputError(f"{self._src.source}: groups= column has a missing value at "
                                 f"data row {start + i + 1}; give every row a group")
            if self._keep is not None:
                vals = vals[self._keep(start, vals.shape[0])]
            yield out, vals
            out += vals.shape[0]

    def counts(self, progress=None) -> np.ndarray:
        """Rows per group, groups in sorted label order (one pass over the labels)."""
        tally: dict = {}
        for start, vals in self._pieces():
            keys, cnt = np.unique(vals, return_counts=True) if vals.dtype != object else \
                _unique_objects(vals)
            for k, c in zip(keys.tolist(), cnt.tolist()):
                tally[k] = tally.get(k, 0) + c
            if progress:
                progress("group labels: counting rows per group", start + vals.shape[0], None)
        keys = list(tally)
        try:
            order = sorted(keys)
        except TypeError:  # mixed types: compare as text, as numpy.unique does after astype(str)
            order = sorted(keys, key=str)
        self._index = {k: i for i, k in enumerate(order)}
        return np.array([tally[k] for k in order], dtype=np.int64)

    def codes(self) -> "_Aligned":
        """Group codes of the rows, taken in row order (after :meth:`counts`)."""
        if self._index is None:
            self.counts()
        index = self._index

        def coded():
            for start, vals in self._pieces():
                yield start, np.fromiter((index[v] for v in vals.tolist()), dtype=np.intp,
                                         count=vals.shape[0])
        return _Aligned(coded())


def _unique_objects(vals):
    import pandas as pd

    vc = pd.Series(vals).value_counts(sort=False)
    return np.asarray(vc.index.tolist(), dtype=object), vc.to_numpy()


def pd_isna(vals) -> np.ndarray:
    import pandas as pd

    return np.asarray(pd.isna(vals), dtype=bool).reshape(-1)


def _file_columns(src) -> list:
    import pandas as pd

    if isinstance(src, CSVRows):
        return [str(c) for c in pd.read_csv(src._path, sep=src._sep, nrows=0).columns]
    return list(src._schema.names)


class _Aligned:
    """Take consecutive runs of values from a stream of ``(start, values)`` pieces."""

    def __init__(self, pieces):
        self._pieces, self._buf, self._at = iter(pieces), np.empty(0, dtype=np.intp), 0

    def take(self, start: int, rows: int) -> np.ndarray:
        if start != self._at:
            raise InputError(f"group labels out of step with the rows (row {start}, labels at "
                             f"{self._at}); do not modify the input while it is read")
        while self._buf.shape[0] < rows:
            try:
                _, vals = next(self._pieces)
            except StopIteration:
                raise InputError("the group column has fewer values than the data have rows; "
                                 "give every row a group") from None
            self._buf = np.concatenate([self._buf, vals])
        out, self._buf = self._buf[:rows], self._buf[rows:]
        self._at += rows
        return out


def is_text_path(path) -> bool:
    """True for a path read as delimited text: not Parquet (file or folder), not ``.npy``."""
    p = Path(path)
    return not p.is_dir() and p.suffix.lower() not in (*_PARQUET_SUFFIXES, ".npy")


class CSVColumns(ArrayColumns):
    """Column blocks of a wide CSV/TSV file, read once by rows under the in-memory reader's rules.

    The records are parsed in chunks of about 32 MiB by
    :func:`paths.data.tables.read_text_chunks` (the delimiter, header, ragged
    records, number syntax and messages of :func:`paths.data.tables.read_table`)
    and the numeric feature columns written to a temporary memory-mapped
    float64 file (n × p on disk, deleted with this object; missing values as
    NaN); column blocks are then read from it, so memory stays at one chunk
    plus one block.  Kept in memory as read, one value per row: the target
    columns (``raw[name]``), the ``side`` columns (``raw[name]``, e.g. group
    labels or identifiers) and the feature columns that hold text
    (``text[name]``; ``mixed`` names those that are numbers in some chunks and
    text in others).  ``lines`` are the file lines of the rows.  Iterating
    refuses missing, infinite and text values (:class:`ArrayColumns`);
    :meth:`frame` gives the columns as read, for the in-memory selection rules
    (:mod:`paths.data.wide_select`).
    """

    def __init__(self, path, target, *, features=None, sep=None, side=(),
                 block_columns: int = DEFAULT_BLOCK_COLUMNS, progress=None):
        import tempfile
        import weakref

        from paths.data.tables import read_text_chunks

        rows = CSVRows(path, target, features=features, sep=sep)
        chunk = max(1, (32 << 20) // (8 * len(rows.columns)))  # ~32 MiB a chunk
        feats = rows.feature_names
        tmp = tempfile.TemporaryDirectory(prefix="paths-wide-")
        weakref.finalize(self, tmp.cleanup)
        raw_path = Path(tmp.name) / "design.f64"
        keep = [*rows.target_names, *[c for c in side if c not in rows.target_names]]
        raw, text, lines, n = {c: [] for c in keep}, {}, [], 0
        with open(raw_path, "wb") as fh:
            for frame in read_text_chunks(rows.layout, chunk):
                b = frame.shape[0]
                block = _text_chunk_block(frame, feats, text, n)
                np.ascontiguousarray(block).tofile(fh)
                for c in keep:
                    raw[c].append(frame[c].to_numpy())
                got = frame.attrs.get("paths_lines")
                lines.append(np.arange(n + 2, n + 2 + b) if got is None else np.asarray(got))
                n += b
                if progress:
                    progress("pass 0: CSV rows to a memory-mapped column store", n, None)
        if n == 0:
            raise InputError(f"{path} has a header row but no data rows; add data rows")
        X = np.memmap(raw_path, dtype=np.float64, mode="r", shape=(n, len(feats)))
        super().__init__(X, block_columns=block_columns, feature_names=feats, source=str(path))
        self.target_names = rows.target_names
        self.raw = {c: _joined(v) for c, v in raw.items()}
        self.side = {c: self.raw[c] for c in side}
        self.lines = np.concatenate(lines)
        self.text, self.mixed = {}, set()
        for c, parts in text.items():
            self.text[c], mixed = _text_column(parts, X[:, feats.index(c)])
            if mixed:
                self.mixed.add(c)
        self.notes = rows.notes
        self._tmp = tmp

    @property
    def targets(self) -> np.ndarray:
        """The target columns as float64 (n, t); a non-numeric value is refused with its line."""
        import pandas as pd

        frame = pd.DataFrame({c: self.raw[c] for c in self.target_names})
        frame.attrs["paths_lines"] = self.lines
        return frame_block(frame, self.target_names, 0, self.source)

    def __iter__(self):
        if self.text:
            c = next(iter(self.text))
            raise InputError(f"{self.source}: non-numeric (categorical) feature column(s): "
                             f"{c!r}; encode or exclude it")
        yield from super().__iter__()

    def frame(self, names):
        """The columns ``names`` as read (numbers as float64 with NaN, text as objects)."""
        import pandas as pd

        pos = [self.feature_names.index(c) for c in names]
        block = np.array(self._X[:, pos], dtype=np.float64)
        frame = pd.DataFrame(block, columns=list(names))
        for c in names:
            if c in self.text:
                frame[c] = self.text[c]
        return frame


def _text_chunk_block(frame, feats, text: dict, start: int) -> np.ndarray:
    """The numeric feature columns of a parsed chunk as float64 (text cells as NaN); the
    values of the columns that hold text kept in ``text[name]`` as ``(start, values)``."""
    from paths.data.tables import is_numeric_dtype, numeric_block

    dtypes = frame.dtypes
    nums = [c for c in feats if is_numeric_dtype(dtypes[c]) or bool(frame[c].isna().all())
            ] if any(not is_numeric_dtype(dtypes[c]) for c in feats) else feats
    if len(nums) == len(feats):
        return numeric_block(frame, feats)
    block = np.full((frame.shape[0], len(feats)), np.nan)
    pos = {c: j for j, c in enumerate(feats)}
    block[:, [pos[c] for c in nums]] = numeric_block(frame, nums)
    num_set = set(nums)
    for c in feats:
        if c not in num_set:
            text.setdefault(c, []).append((start, frame[c].to_numpy(dtype=object)))
    return block


def _text_column(parts, numbers) -> tuple:
    """A text column over every row: its text chunks, and the numbers read elsewhere (as
    floats, missing as None); True when some chunks were numbers (mixed)."""
    out = np.empty(numbers.shape[0], dtype=object)
    done = np.zeros(numbers.shape[0], dtype=bool)
    for start, vals in parts:
        out[start:start + vals.shape[0]] = vals
        done[start:start + vals.shape[0]] = True
    rest = np.flatnonzero(~done)
    vals = np.asarray(numbers[rest], dtype=np.float64)
    out[rest] = [None if np.isnan(v) else float(v) for v in vals]
    return out, bool(np.any(~np.isnan(vals)))


def _joined(parts) -> np.ndarray:
    """Chunks of one column joined; object when any chunk was text."""
    if any(p.dtype == object for p in parts):
        return np.concatenate([p.astype(object) for p in parts])
    return np.concatenate(parts)


class RowSubsetColumns(ColumnSource):
    """The rows ``rows`` (a boolean mask) of every column block of another column source
    (the training or the held-out rows of a wide file)."""

    def __init__(self, src: ColumnSource, rows: np.ndarray):
        rows = np.asarray(rows, dtype=bool)
        super().__init__(feature_names=list(src.feature_names), n_rows=int(rows.sum()),
                         source=src.source, block_columns=src.block_columns)
        self._src, self._rows = src, rows

    def read_columns(self, names) -> np.ndarray:
        return self._src.read_columns(names)[self._rows]

    def __iter__(self):
        for s, block in self._src:
            yield s, block[self._rows]


# --------------------------------------------------------------------------- prepared rows
class PreparedRows(RowSource):
    """Row chunks of a CSV or Parquet file prepared as the in-memory reader prepares the
    table (``encode``, ``drop_missing``; :mod:`paths.data.rowprep`): text columns one-hot
    encoded with the levels of the pre-pass, rows or columns with missing values dropped.
    ``start`` counts the kept rows only (the holdout and the folds are assigned on them)."""

    def __init__(self, frames, prep, *, source: str, chunk_rows: int = DEFAULT_CHUNK_ROWS):
        names = prep.names + list(prep.targets)
        super().__init__(columns=names, n_features=len(prep.names), n_rows=prep.n_rows,
                         source=source, chunk_rows=_check_chunk_rows(chunk_rows),
                         nbytes_per_row=8 * len(names))
        self._frames, self.preparation = frames, prep

    def __iter__(self):
        start = 0
        for frame in self._frames(self.preparation.text_columns):
            block = self.preparation.block(frame, start, self.source)
            for off in range(0, block.shape[0], self.chunk_rows):
                yield start + off, block[off:off + self.chunk_rows]
            start += block.shape[0]


def file_frames(path, *, sep=None, chunk_rows: int = DEFAULT_CHUNK_ROWS, columns=None):
    """``(names, frames)``: the column names of a CSV/TSV or Parquet file and
    ``frames(keep_text)``, an iterator of its parsed chunks (CSV: ``chunk_rows``
    records under the in-memory reader's rules, the ``keep_text`` columns as written;
    Parquet: a row group of the ``columns``)."""
    path = Path(path)
    if path.is_dir() or path.suffix.lower() in _PARQUET_SUFFIXES:
        import pyarrow.parquet as pq

        files = parquet_files(path)

        try:
            names = list(pq.read_schema(files[0]).names)
        except Exception as exc:  # pyarrow raises ArrowInvalid / OSError subclasses
            raise InputError(f"{path}: not a readable Parquet file ({exc}); check the file") \
                from None

        def frames(keep_text=()):
            for f in files:
                pf = pq.ParquetFile(f, pre_buffer=False)
                for g in range(pf.num_row_groups):
                    frame = pf.read_row_group(g, columns=columns).to_pandas()
                    frame.attrs["paths_lines"] = None
                    yield frame
        return names, frames
    if path.suffix.lower() == ".npy":
        raise InputError(f"{path}: encode and drop_missing need named columns; pass a CSV or "
                         "Parquet file")
    from paths.data.tables import read_text_chunks, text_layout

    layout = text_layout(path, sep=sep)

    def frames(keep_text=()):
        return read_text_chunks(layout, chunk_rows, keep_text=tuple(keep_text))
    return list(layout.names), frames


class PreparedGroups(GroupValues):
    """Group labels of the rows a :class:`PreparedRows` keeps, read from the same parsed
    chunks (the ``groups`` column) with the same rows dropped."""

    def __init__(self, groups: str, src: PreparedRows, *, keep=None):
        if groups not in src.file_columns:
            shown = ", ".join(map(str, src.file_columns[:8]))
            raise InputError(f"{src.source}: groups= column {groups!r} not found; columns are: "
                             f"{shown}")
        self._groups, self._src, self._sep, self._keep = groups, src, None, keep
        self._index = None

    def subset(self, rows: "HoldoutRows") -> "PreparedGroups":
        return PreparedGroups(self._groups, self._src, keep=rows.keep)

    def _raw(self):
        prep, start = self._src.preparation, 0
        for frame in self._src._frames(prep.text_columns):
            vals = frame[self._groups].to_numpy()[prep.kept_mask(frame)]
            yield start, vals
            start += vals.shape[0]


def open_prepared(data, target, *, features=None, sep=None,
                  chunk_rows: int = DEFAULT_CHUNK_ROWS, encode=None, drop_missing=None,
                  like=None, extra=(), progress=None) -> PreparedRows:
    """A :class:`PreparedRows` source for a CSV or Parquet file: the pre-pass
    (:func:`paths.data.rowprep.scan_frames`) decides the columns, levels and rows kept;
    with ``like`` (the training rows' :class:`~paths.data.rowprep.RowPreparation`), test
    rows are prepared as the training rows were (their levels, their columns)."""
    from dataclasses import replace

    from paths.data.rowprep import scan_frames

    if not isinstance(data, (str, os.PathLike)):
        raise InputError("encode and drop_missing need a CSV or Parquet file; pass its path")
    path = Path(data)
    if not path.exists():
        raise InputError(f"{path}: no such file or folder; check the path")
    names, _ = file_frames(path, sep=sep)
    if features is None and extra:  # the extra (groups) columns are not features
        tl = [target] if isinstance(target, str) else list(target or [])
        features = [c for c in names if c not in tl and c not in extra]
    feats, targets = select_columns(names, target if like is None else list(like.targets),
                                    features if like is None else list(like.features),
                                    f"{path}: ")
    _, frames = file_frames(path, sep=sep, chunk_rows=chunk_rows,
                            columns=feats + targets + [c for c in extra if c in names])
    if like is None:
        prep = scan_frames(lambda: frames(()), frames, feats, targets, encode=encode,
                           drop_missing=drop_missing, source=str(path), progress=progress)
    else:
        prep = replace(like, n_rows=None, notes=(), kept=())
    rows = PreparedRows(frames, prep, source=str(path), chunk_rows=chunk_rows)
    rows.file_columns = names
    return rows
