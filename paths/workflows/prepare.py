"""Read and prepare: one table (or a seeded generator) to a design, a response and a test set.

Every workflow that reads a table (explore, threshold, plan with a pilot, case
files) goes through :func:`prepare`, so the same options (``features``,
``exclude``, ``id_column``, ``encode``, ``drop_missing``, ``sep``, ``groups``)
mean the same thing and fail with the same messages everywhere.  A test file is
aligned to the training columns by name (:func:`paths.data.tables.select_like`),
whatever order its columns come in; :func:`train_test` then gives the training
and test arrays, splitting off a seeded holdout when asked.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from paths.data.validation import InputError
from paths.workflows.options import DataOptions

__all__ = ["Prepared", "TrainTest", "prepare", "train_test", "group_labels", "GENERATORS"]

#: Seeded synthetic generators a case file may name (``[data] generator = "..."``).
GENERATORS = ("calibration", "panel", "isotropic")
# the response column of each generator's frame, when [data] target is not given
_GENERATOR_TARGETS = ("analyte", "demand", "y")


@dataclass(frozen=True)
class Prepared:
    """Prepared data: the training :class:`~paths.data.tables.Dataset`, the aligned test set.

    ``digests`` maps each input file to its SHA-256; ``groups`` holds one group
    label per training row (``None`` without a group column); ``weights`` and
    ``test_weights`` the row weights (``None`` without a weights column);
    ``generator`` records a synthetic generator's name and arguments.
    """

    train: object
    test: object = None
    digests: dict = field(default_factory=dict)
    groups: np.ndarray | None = None
    generator: dict | None = None
    weights: np.ndarray | None = None
    test_weights: np.ndarray | None = None
    test_rows: np.ndarray | None = None  # 0-based rows of the test rows in their table

    @property
    def notes(self) -> list:
        """The reader's notes on the training data, then those on the test data."""
        test = [f"test data: {n}" for n in (self.test.notes if self.test is not None else [])]
        return list(self.train.notes) + test


@dataclass(frozen=True)
class TrainTest:
    """Training and test arrays after the split; ``split`` is the holdout record (or ``None``)."""

    X: np.ndarray
    y: np.ndarray
    X_test: np.ndarray | None
    y_test: np.ndarray | None
    groups: np.ndarray | None
    split: dict | None
    weights: np.ndarray | None = None
    test_weights: np.ndarray | None = None
    test_rows: np.ndarray | None = None  # 0-based rows of the test rows in their table


def _generator(name: str):
    from paths.data import synthetic

    return {"calibration": synthetic.make_calibration, "panel": synthetic.make_panel,
            "isotropic": synthetic.make_isotropic}[name]


def generator_parameters(name: str):
    """The parameters (name → :class:`inspect.Parameter`) the generator ``name`` accepts."""
    import inspect

    return inspect.signature(_generator(name)).parameters


def _resolve(path: Path, base_dir) -> Path:
    return path if path.is_absolute() or base_dir is None else Path(base_dir) / path


def _frame(options: DataOptions, base_dir):
    """The raw table: (frame, source description, digests, generator record)."""
    from paths.data.stdin import source_name
    from paths.data.tables import read_table, sha256_of

    if options.generator is not None:
        if options.generator not in GENERATORS:
            raise InputError(f"unknown generator {options.generator!r}; choose "
                             f"{', '.join(GENERATORS)}")
        frame = _generator(options.generator)(**options.params)
        desc = frame.attrs.get("description", options.generator)
        source = desc if "synthetic" in desc else f"synthetic: {desc}"
        gen = {"name": options.generator, "params": dict(options.params),
               "seed": options.params.get("seed", 0)}
        return frame, source, {}, gen
    if options.file is None:
        raise InputError("no data: give a data file (or a generator in a case file)")
    path = _resolve(options.file, base_dir)
    name = source_name(path)  # "standard input" for '-'
    return read_table(path, sep=options.sep), name, {name: sha256_of(path)}, None


def group_labels(frame, column: str, source: str) -> np.ndarray:
    """The group labels in ``column`` (one per row, none missing), as read."""
    if column not in frame.columns:
        raise InputError(f"{source}: groups column {column!r} not found; columns are: "
                         f"{', '.join(map(str, list(frame.columns)[:8]))}")
    values = frame[column]
    if values.isna().any():
        raise InputError(f"{source}: groups column {column!r} has {int(values.isna().sum())} "
                         "missing value(s); give every row a group")
    return values.to_numpy()


def _row_weights(frame, column: str, source: str, *, required: bool = True):
    """The positive row weights in ``column`` (``None`` if absent and not ``required``)."""
    import pandas as pd

    from paths.data.validation import as_weights

    if column not in frame.columns:
        if not required:
            return None
        raise InputError(f"{source}: weights column {column!r} not found; columns are: "
                         f"{', '.join(map(str, list(frame.columns)[:8]))}")
    values = pd.to_numeric(frame[column], errors="coerce")
    if values.isna().any():
        i = int(np.flatnonzero(values.isna().to_numpy())[0])
        raise InputError(f"{source}: weights column {column!r} has a missing or non-numeric "
                         f"value ({frame[column].iloc[i]!r}, data row {i + 1}); give every row "
                         "a positive weight")
    return as_weights(values.to_numpy(dtype=float), len(values), f"{source}: weights {column!r}")


def _default_target(frame) -> tuple:
    found = [c for c in _GENERATOR_TARGETS if c in frame.columns]
    if not found:
        raise InputError("no target: name the response column (target)")
    return (found[0],)


def prepare(options: DataOptions, *, base_dir=None) -> Prepared:
    """Read the table (or run the generator), select the design, align the test file.

    Parameters
    ----------
    options : DataOptions
    base_dir : path, optional
        Folder that relative ``file``/``test_file`` paths are read from (a case
        file's folder); default the working directory.

    Returns
    -------
    Prepared
    """
    from paths.data.tables import select, sha256_of

    if options.test_file is not None and options.holdout is not None:
        raise InputError("pass either test_file or holdout, not both")
    frame, source, digests, gen = _frame(options, base_dir)
    target = options.target or (_default_target(frame) if gen else ())
    if not target:
        raise InputError("no target: name the response column (target)")
    exclude = options.exclude
    groups = weights = test_weights = None
    if options.groups is not None:
        groups = group_labels(frame, options.groups, source)
        exclude = (*(exclude or ()), options.groups)
    if options.weights is not None:
        weights = _row_weights(frame, options.weights, source)
        exclude = (*(exclude or ()), options.weights)
    train = select(frame, list(target), features=options.features, exclude=exclude,
                   id_column=options.id_column, encode=options.encode,
                   drop_missing=options.drop_missing, source=source)
    if train.rows is not None:  # rows dropped (drop_missing="rows"): align the side columns
        groups = None if groups is None else groups[train.rows]
        weights = None if weights is None else weights[train.rows]
    test = None
    if options.test_file is not None:
        from paths.data.tables import read_table, select_like

        tpath = _resolve(options.test_file, base_dir)
        tframe = read_table(tpath, sep=options.sep)
        test = select_like(tframe, train, source=str(tpath))
        digests[str(tpath)] = sha256_of(tpath)
        if options.weights is not None:  # the test file's own weights, if it has the column
            test_weights = _row_weights(tframe, options.weights, str(tpath), required=False)
            if test_weights is not None and test.rows is not None:
                test_weights = test_weights[test.rows]
    return Prepared(train=train, test=test, digests=digests, groups=groups, generator=gen,
                    weights=weights, test_weights=test_weights)


def train_test(prepared: Prepared, *, holdout: float | None = None, seed: int = 0) -> TrainTest:
    """Training and test arrays: the test file's rows, or a seeded holdout of the training rows."""
    from paths.data.synthetic import split_holdout

    X, y, groups, w = prepared.train.X, prepared.train.y, prepared.groups, prepared.weights
    if prepared.test is not None:
        if holdout is not None:
            raise InputError("pass either test_file or holdout, not both")
        test = prepared.test
        rows = test.rows if test.rows is not None else np.arange(test.X.shape[0])
        return TrainTest(X, y, test.X, test.y, groups, None, w, prepared.test_weights, rows)
    if holdout is None:
        return TrainTest(X, y, None, None, groups, None, w)
    train, held = split_holdout(X.shape[0], holdout, seed)
    split = {"holdout": holdout, "seed": seed, "n_test": int(held.size)}
    rows = held if prepared.train.rows is None else prepared.train.rows[held]
    return TrainTest(X[train], y[train], X[held], y[held],
                     None if groups is None else groups[train], split,
                     None if w is None else w[train], None if w is None else w[held], rows)
