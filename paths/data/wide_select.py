"""The in-memory reader's selection rules on a wide file, one block of whole columns at a time.

:func:`paths.data.tables.select` decides, for the whole table, which values are
refused (text columns without ``encode``, missing and infinite values, a bad
target), which rows or columns are dropped (``drop_missing``) and how text
columns are one-hot encoded (``encode="onehot"``).  Every one of those rules
looks at one column at a time, except that the messages list every offending
column and that dropping rows needs every column.  So for a wide file,
:func:`select_wide` makes one pass over the column blocks that collects the
*offending* columns (text, missing or infinite values) and then runs
:func:`~paths.data.tables.select` itself on a small table of the targets, the
identifiers, every offending column and one clean column: it refuses with
exactly the in-memory message, or returns the rows kept, the columns dropped
and the levels of every encoded column.  :class:`SelectedColumns` then gives
the design a block at a time under those decisions, as
:func:`~paths.data.tables.select` builds it.
"""
from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np

from paths.data.chunks import DEFAULT_BLOCK_COLUMNS, ColumnSource
from paths.data.validation import InputError, check_memory

__all__ = ["ParquetFrames", "WideSelection", "select_wide", "SelectedColumns"]


class ParquetFrames:
    """Columns of one Parquet file as read (text as objects), a block at a time."""

    def __init__(self, path, feature_names):
        import pyarrow.parquet as pq

        self._path = Path(path)
        self.feature_names = list(feature_names)
        self.n_rows = int(pq.read_metadata(self._path).num_rows)
        self.source = str(self._path)
        self.lines = None

    def frame(self, names):
        import pyarrow as pa
        import pyarrow.parquet as pq

        table = pq.read_table(self._path, columns=list(names))
        cols = {f.name: (a.cast(pa.float64()) if pa.types.is_decimal(f.type) else a)
                for f, a in zip(table.schema, table.columns)}
        return pa.table(cols).to_pandas()


@dataclass(frozen=True)
class WideSelection:
    """What :func:`select_wide` decided: ``rows`` kept (indices, or None for all), the
    source ``features`` kept (in order), the ``encoding`` (levels per text column),
    the design's ``feature_names``, ``y``, ``ids`` and the reader's ``notes``."""

    rows: np.ndarray | None
    features: list
    encoding: dict
    feature_names: list
    y: np.ndarray
    ids: np.ndarray | None
    notes: list


def _offenders(frames, block_columns: int):
    """The feature columns with text, missing or infinite values (their values as read),
    and the first clean column (or None), in one pass over the blocks."""
    from paths.data.tables import is_numeric_dtype, numeric_block

    names = frames.feature_names
    bad, clean = {}, None
    for s in range(0, len(names), block_columns):
        frame = frames.frame(names[s:s + block_columns])
        nums = [c for c, dt in zip(frame.columns, frame.dtypes) if is_numeric_dtype(dt)]
        num_set = set(nums)
        for c in frame.columns:
            if c not in num_set:  # text, or no value at all (a null-typed column)
                bad[c] = frame[c]
        if nums:
            X = numeric_block(frame, nums)
            off = ~np.isfinite(X).all(axis=0)
            for j in np.flatnonzero(off):
                bad[nums[j]] = frame[nums[j]]
            if clean is None and not off.all():
                clean = nums[int(np.flatnonzero(~off)[0])]
        check_memory(8.0 * len(bad) * frames.n_rows, f"{len(bad)} columns with text, missing "
                     "or infinite values", "fix them in the file (or use engine memory)")
    return bad, clean


def select_wide(frames, raw: dict, target, *, id_column=None, encode=None, drop_missing=None,
                block_columns: int = DEFAULT_BLOCK_COLUMNS) -> WideSelection:
    """:func:`paths.data.tables.select` on a wide file, with one pass over its column blocks.

    Parameters
    ----------
    frames : ParquetFrames or paths.data.chunks.CSVColumns
        The feature columns as read (``frame(names)``, ``feature_names``, ``lines``).
    raw : dict
        The target and identifier columns as read, one value per row.
    target, id_column, encode, drop_missing
        As for :func:`~paths.data.tables.select`.

    Raises
    ------
    InputError
        Exactly what :func:`~paths.data.tables.select` raises on the whole table.
    """
    import pandas as pd

    from paths.data.tables import select

    targets = [target] if isinstance(target, str) else list(target)
    bad, clean = _offenders(frames, block_columns)
    feats = frames.feature_names
    small = [c for c in feats if c in bad or c == clean]
    cols = {c: raw[c] for c in [*targets, *([id_column] if id_column else [])]}
    frame = pd.DataFrame({**cols, **{c: (bad[c].to_numpy() if c in bad else
                                         frames.frame([c])[c].to_numpy()) for c in small}})
    if getattr(frames, "lines", None) is not None:
        frame.attrs["paths_lines"] = frames.lines
    mixed = sorted(set(getattr(frames, "mixed", ())) & set(small))
    if mixed and encode == "onehot":
        raise InputError(f"{frames.source}: column {mixed[0]!r} holds numbers in some rows and "
                         "text in others, whose text the column store does not keep; encode "
                         "it beforehand or use engine memory")
    ds = select(frame, targets, features=small, id_column=id_column, encode=encode,
                drop_missing=drop_missing, source=frames.source)
    dropped = set(ds.dropped_columns)
    kept = [c for c in feats if c not in dropped]
    names = []
    for c in kept:
        levels = ds.encoding.get(c)
        names += [c] if levels is None else [f"{c}={lv}" for lv in levels[1:]]
    if len(set(names)) != len(names):
        dup = next(nm for nm in names if names.count(nm) > 1)
        raise InputError(f"{frames.source}: one-hot column {dup!r} clashes with an existing "
                         "column name; rename that column")
    if not names:
        raise InputError(f"{frames.source}: no feature columns left (p = 0): every feature is "
                         "a single-level categorical; keep at least one varying feature")
    notes = [nt for nt in ds.notes if not nt.startswith(("constant column", "exact duplicate"))]
    return WideSelection(rows=ds.rows, features=kept, encoding=dict(ds.encoding),
                         feature_names=names, y=ds.y, ids=ds.ids, notes=notes)


class SelectedColumns(ColumnSource):
    """The design of a wide file under a :class:`WideSelection`, a block of source columns
    at a time: the kept rows, the kept columns, text columns one-hot encoded with the
    selection's levels (reference level dropped), as :func:`paths.data.tables.select`
    builds it."""

    def __init__(self, frames, selection: WideSelection, *,
                 block_columns: int = DEFAULT_BLOCK_COLUMNS):
        super().__init__(feature_names=list(selection.feature_names),
                         n_rows=int(frames.n_rows if selection.rows is None
                                    else selection.rows.size),
                         source=frames.source, block_columns=int(block_columns))
        self._frames, self._sel = frames, selection

    def _design(self, cols) -> np.ndarray:
        from paths.data.tables import numeric_block

        frame = self._frames.frame(cols)
        if self._sel.rows is not None:
            frame = frame.iloc[self._sel.rows]
        enc = self._sel.encoding
        nums = [c for c in cols if c not in enc]
        num = numeric_block(frame, nums)  # one conversion for every numeric column
        if len(nums) == len(cols):
            return num
        pos = {c: j for j, c in enumerate(nums)}
        parts = []
        for c in cols:
            levels = enc.get(c)
            if levels is None:
                parts.append(num[:, pos[c]:pos[c] + 1])
            elif len(levels) > 1:
                vals = frame[c].astype(str).to_numpy()
                parts.append(np.column_stack([(vals == lv).astype(np.float64)
                                              for lv in levels[1:]]))
        return np.hstack(parts) if parts else np.zeros((frame.shape[0], 0))

    def __iter__(self):
        feats, out = self._sel.features, 0
        for s in range(0, len(feats), self.block_columns):
            block = self._design(feats[s:s + self.block_columns])
            if block.shape[1]:
                yield out, block
                out += block.shape[1]

    def read_columns(self, names) -> np.ndarray:
        """The named design columns (without encoding: the source columns themselves)."""
        if self._sel.encoding:
            raise InputError("encoded wide data read as test columns: not available; use a "
                             "holdout (or engine memory)")
        return self._design(list(names))
