"""One-hot encoding and missing values for data read in row chunks, as the in-memory reader does.

:func:`paths.data.tables.select` decides from the whole table which feature
columns hold text (one-hot encoded with ``encode="onehot"``: every level in
sorted order, the first dropped as the reference) and which rows or columns
hold missing values (dropped with ``drop_missing="rows"`` / ``"columns"``).
The streamed engines never hold the table, so a *pre-pass* over the chunks
collects the same facts — text columns and their levels (on the rows kept),
missing values per column, the rows kept — into a :class:`RowPreparation`;
every later pass then turns each parsed chunk into the same float columns, in
the same order and with the same names (``COLUMN=LEVEL``), as the in-memory
reader.  Rows are numbered after dropping: the holdout and the folds
(:mod:`paths.data.folds`) are assigned on the kept rows, as in memory.

A text column whose values look like numbers in some chunks would be parsed
as numbers there (``"1.50"`` read as 1.5); its levels are then collected in a
second pre-pass that keeps the column's text as written.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from paths.data.validation import InputError

__all__ = ["RowPreparation", "LevelScan", "scan_frames"]

_SHOW = 5


def _names(items) -> str:
    items = list(items)
    out = ", ".join(repr(c) for c in items[:_SHOW])
    return out + (f" and {len(items) - _SHOW} more" if len(items) > _SHOW else "")


def _numeric(dt) -> bool:
    import pandas as pd

    return ((pd.api.types.is_numeric_dtype(dt) and not pd.api.types.is_complex_dtype(dt))
            or pd.api.types.is_bool_dtype(dt))


@dataclass(frozen=True)
class RowPreparation:
    """What the pre-pass decided: the columns, their levels and the rows kept.

    Attributes
    ----------
    features : tuple of str
        Source feature columns kept (after ``drop_missing="columns"``), in order.
    targets : tuple of str
    levels : dict
        ``{text column: sorted levels}`` (the first is the reference, dropped).
    drop_missing : {None, "rows", "columns"}
    n_rows : int
        Rows kept.
    notes : tuple of str
        What was encoded and dropped, as the in-memory reader says it.
    kept : tuple of int
        Rows kept in each chunk of the pre-pass, in order.
    """

    features: tuple
    targets: tuple
    levels: dict
    drop_missing: str | None
    n_rows: int
    notes: tuple = ()
    kept: tuple = field(default=(), repr=False)

    @property
    def names(self) -> list:
        """The design's column names: numeric columns, then ``COLUMN=LEVEL`` in place."""
        out = []
        for c in self.features:
            out += [f"{c}={lv}" for lv in self.levels[c][1:]] if c in self.levels else [c]
        return out

    @property
    def text_columns(self) -> tuple:
        return tuple(self.levels)

    def record(self) -> dict:
        """The preparation as ``fit.npz`` and ``summary.json`` record it."""
        return {"source_columns": list(self.features), "encoding": {
            c: list(v) for c, v in self.levels.items()}, "drop_missing": self.drop_missing}

    def kept_mask(self, frame) -> np.ndarray:
        """Which rows of a parsed chunk are kept (all, unless ``drop_missing="rows"``)."""
        if self.drop_missing != "rows":
            return np.ones(frame.shape[0], dtype=bool)
        used = list(self.features) + list(self.targets)
        return ~frame[used].isna().to_numpy().any(axis=1)

    def block(self, frame, start: int, source: str) -> np.ndarray:
        """The kept rows of one parsed chunk as float64 (rows, len(names) + t):
        the design columns, then the targets.  ``start``: kept rows before this chunk."""
        from paths.data.chunks import frame_block

        used = list(self.features) + list(self.targets)
        lines = frame.attrs.get("paths_lines")
        if self.drop_missing == "rows":
            keep = self.kept_mask(frame)
            if not keep.all():
                frame = frame.loc[keep]
                if lines is not None:
                    frame.attrs["paths_lines"] = np.asarray(lines)[keep]
        numeric = [c for c in used if c not in self.levels]
        num = frame_block(frame, numeric, start, source)  # missing or non-numeric: one line
        at = {c: j for j, c in enumerate(numeric)}
        out = np.empty((frame.shape[0], len(self.names) + len(self.targets)))
        j = 0
        for c in self.features:
            if c not in self.levels:
                out[:, j] = num[:, at[c]]
                j += 1
                continue
            levels = self.levels[c]
            vals = frame[c].astype(str).to_numpy()
            unseen = sorted(set(vals.tolist()) - set(levels))
            if unseen:
                raise InputError(f"{source}: column {c!r} has the level {unseen[0]!r}, which "
                                 f"the training rows do not have (levels: {_names(levels)}); "
                                 "drop those rows or recode")
            for lv in levels[1:]:
                out[:, j] = vals == lv
                j += 1
        for k, c in enumerate(self.targets):
            out[:, j + k] = num[:, at[c]]
        return out


@dataclass
class LevelScan:
    """The pre-pass: feed it every parsed chunk (:meth:`add`), then :meth:`result`."""

    features: list
    targets: list
    encode: str | None
    drop_missing: str | None
    source: str = ""

    def __post_init__(self):
        self.used = list(self.targets) + list(self.features)
        self.n0 = 0
        self.missing = np.zeros(len(self.used), dtype=np.int64)
        self.first_missing = {}
        self.kept, self.dropped_lines = [], []
        self.text, self.levels, self.numeric_seen = set(), {}, set()
        self.exact = None  # the second pre-pass: levels of the text as written

    def add(self, frame) -> None:
        """One parsed chunk (columns by name; ``attrs["paths_lines"]``: file lines)."""
        lines = frame.attrs.get("paths_lines")
        rows = frame.shape[0]
        miss = frame[self.used].isna().to_numpy()
        counts = miss.sum(axis=0)
        for j in np.flatnonzero(counts):
            c = self.used[j]
            if c not in self.first_missing:
                i = int(np.argmax(miss[:, j]))
                self.first_missing[c] = (f"line {int(lines[i])}" if lines is not None
                                         else f"row {self.n0 + i + 1}")
        self.missing += counts
        keep = ~miss.any(axis=1) if self.drop_missing == "rows" else np.ones(rows, bool)
        self.kept.append(int(keep.sum()))
        if self.drop_missing == "rows" and len(self.dropped_lines) < 11:
            gone = np.flatnonzero(~keep)[:11]
            self.dropped_lines += [int(lines[i]) if lines is not None else self.n0 + int(i) + 1
                                   for i in gone]
        for c in self.features:
            s = frame[c]
            if _numeric(s.dtype):
                if s.notna().any():
                    self.numeric_seen.add(c)
                continue
            vals = s[keep & s.notna().to_numpy()]
            if vals.size:
                self.text.add(c)
                self.levels.setdefault(c, set()).update(vals.astype(str).tolist())
        self.n0 += rows

    def needs_text_pass(self) -> list:
        """Text columns parsed as numbers in some chunk: their levels need the text as
        written (a second pre-pass with these columns kept as text, :meth:`add_text`)."""
        return sorted(self.text & self.numeric_seen & set(self._kept_features()))

    def add_text(self, frame) -> None:
        """Second pre-pass: a chunk parsed with the :meth:`needs_text_pass` columns as text."""
        cols = self.needs_text_pass()
        if self.exact is None:
            self.exact = {c: set() for c in cols}
        used = self.used
        miss = frame[used].isna().to_numpy()
        keep = ~miss.any(axis=1) if self.drop_missing == "rows" else np.ones(frame.shape[0], bool)
        for c in cols:
            s = frame[c]
            vals = s[keep & s.notna().to_numpy()]
            self.exact[c].update(vals.astype(str).tolist())

    def _kept_features(self) -> list:
        if self.drop_missing != "columns":
            return list(self.features)
        return [c for c in self.features if self.missing[self.used.index(c)] == 0]

    def result(self) -> RowPreparation:
        """The :class:`RowPreparation`, with the in-memory reader's checks and notes."""
        where = f"{self.source}: " if self.source else ""
        if self.n0 == 0:
            raise InputError(f"{where}no data rows; add data rows")
        notes = []
        text = [c for c in self.features if c in self.text]
        if text and self.encode != "onehot":
            raise InputError(f"{where}non-numeric (categorical) feature column(s): "
                             f"{_names(text)}; pass encode='onehot' to one-hot encode them, "
                             "or exclude= them")
        counts = {c: int(k) for c, k in zip(self.used, self.missing) if k}
        for t in self.targets:
            if counts.get(t) == self.n0:
                raise InputError(f"{where}target column {t!r} is entirely missing; choose "
                                 "another target")
        every = [c for c in self.features if counts.get(c) == self.n0]
        if every and self.drop_missing != "columns":
            raise InputError(f"{where}column(s) {_names(every)} are entirely missing (all "
                             f"{self.n0} values); exclude= them or pass drop_missing='columns'")
        feats = list(self.features)
        if counts:
            detail = ", ".join(f"{c!r} ({counts[c]}, first on {self.first_missing[c]})"
                               for c in list(counts)[:_SHOW])
            if self.drop_missing is None:
                raise InputError(f"{where}missing values in {len(counts)} column(s): {detail}; "
                                 "remove or impute them, or pass drop_missing=rows|columns")
            if self.drop_missing == "columns":
                bad_t = [t for t in self.targets if t in counts]
                if bad_t:
                    raise InputError(f"{where}target column {bad_t[0]!r} has "
                                     f"{counts[bad_t[0]]} missing value(s); a target cannot "
                                     "be dropped: use drop_missing='rows'")
                gone = [c for c in feats if c in counts]
                feats = [c for c in feats if c not in counts]
                notes.append(f"dropped {len(gone)} column(s) with missing values: "
                             + ", ".join(f"{c!r} ({counts[c]})" for c in gone))
                if not feats:
                    raise InputError(f"{where}every feature column has missing values: none "
                                     "is left (p = 0) after drop_missing='columns'; impute "
                                     "them or use drop_missing='rows'")
            else:
                n_kept = sum(self.kept)
                shown = ", ".join(map(str, self.dropped_lines[:10])) + (
                    " ..." if len(self.dropped_lines) > 10 else "")
                notes.append(f"dropped {self.n0 - n_kept} of {self.n0} row(s) with missing "
                             f"values (lines {shown})")
                if n_kept == 0:
                    raise InputError(f"{where}every row has a missing value in the used "
                                     "columns; nothing is left after drop_missing='rows'; try "
                                     "drop_missing='columns'")
        levels = {}
        for c in feats:
            if c in self.text:
                found = self.exact[c] if self.exact and c in self.exact else self.levels[c]
                levels[c] = sorted(found)
        for c, lv in levels.items():
            if len(lv) == 1:
                notes.append(f"categorical column {c!r} has the single level {lv[0]!r}: "
                             "no column (constant)")
            else:
                notes.append(f"one-hot encoded {c!r} ({len(lv)} levels): reference level "
                             f"{lv[0]!r} dropped, columns " + ", ".join(
                                 repr(f"{c}={v}") for v in lv[1:4])
                             + (" ..." if len(lv) > 4 else ""))
        prep = RowPreparation(features=tuple(feats), targets=tuple(self.targets),
                              levels=levels, drop_missing=self.drop_missing,
                              n_rows=int(sum(self.kept)), notes=tuple(notes),
                              kept=tuple(self.kept))
        names = prep.names
        if not names:
            raise InputError(f"{where}no feature columns left (p = 0): every feature is a "
                             "single-level categorical; keep at least one varying feature")
        if len(set(names)) != len(names):
            dup = next(nm for nm in names if names.count(nm) > 1)
            raise InputError(f"{where}one-hot column {dup!r} clashes with an existing column "
                             "name; rename that column")
        return prep


def scan_frames(frames, text_frames, features, targets, *, encode=None, drop_missing=None,
                source: str = "", progress=None) -> RowPreparation:
    """The pre-pass over parsed chunks (``frames()`` yields them) and, when a text
    column was read as numbers somewhere, the second pre-pass over
    ``text_frames(columns)`` (the same chunks with ``columns`` kept as text)."""
    if encode in ("none", ""):
        encode = None
    if encode not in (None, "onehot"):
        raise InputError(f"encode must be onehot or None; got {encode!r}")
    if drop_missing not in (None, "rows", "columns"):
        raise InputError(f"drop_missing must be rows, columns or None; got {drop_missing!r}")
    scan = LevelScan(list(features), list(targets), encode, drop_missing, source)
    for frame in frames():
        scan.add(frame)
        if progress:
            progress("pass 0: text levels and missing values", scan.n0, None)
    redo = scan.needs_text_pass()
    if redo and encode == "onehot":
        for frame in text_frames(redo):
            scan.add_text(frame)
    return scan.result()
