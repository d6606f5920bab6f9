"""The options of every workflow, as frozen dataclasses shared by the command line and case files.

A command-line flag and a case-file key are two spellings of one field here:
``--n-lambdas 50`` on the command line is ``n_lambdas = 50`` in a case file's
``[fit]`` table, and both become ``FitOptions(n_lambdas=50)``.  The defaults
live here and nowhere else, so a case file and the command line that gives the
same options produce the same numbers and the same files.

Tables of a case file and the dataclass each one fills:

========== ===================== =====================================================
table      dataclass             used by
========== ===================== =====================================================
[data]     :class:`DataOptions`  every workflow that reads a table (or a generator)
[fit]      :class:`FitOptions`   explore
[engine]   :class:`EngineOptions` explore (out-of-memory engines)
[threshold] :class:`ThresholdOptions` threshold and simulate (the sweep)
[truth]    :class:`TruthOptions` simulate (the known truth)
[simulate] :class:`DrawOptions`  simulate (rows drawn from the truth)
[figures]  :class:`FigureOptions` every workflow that draws
========== ===================== =====================================================

Values are checked where they are used (the library validates at its public
boundary); the constructors only normalise list-valued options to tuples.
"""
from __future__ import annotations

import dataclasses
from dataclasses import dataclass, field
from pathlib import Path

__all__ = ["DataOptions", "FitOptions", "EngineOptions", "ThresholdOptions", "TruthOptions",
           "DrawOptions", "FigureOptions", "OutputOptions", "PlanOptions", "option_names",
           "parse_relative_penalties",
           "DEFAULT_THRESHOLD_HOLDOUT", "DEFAULT_OUT_DIRS", "CASE_OUT_DIR", "DEMO_CASE"]

#: The built-in case ``paths demo`` runs.
DEMO_CASE = "calibration"
#: Fraction of rows held out as test rows by the threshold sweep when no test file is given.
DEFAULT_THRESHOLD_HOLDOUT = 0.25
#: Each command's default output folder.
DEFAULT_OUT_DIRS = {"explore": "paths-out", "threshold": "paths-threshold",
                    "simulate": "paths-simulate", "plan": "paths-plan", "demo": "paths-demo"}
#: ``paths run CASE``'s default output folder (the case's name goes in).
CASE_OUT_DIR = "paths-{case}"


def _names(values) -> tuple | None:
    """Repeatable or comma-separated names as a tuple (``None`` when empty)."""
    if values is None:
        return None
    if isinstance(values, str):
        values = [values]
    out = tuple(x.strip() for v in values for x in str(v).split(",") if x.strip())
    return out or None


def _set(obj, name, value) -> None:
    object.__setattr__(obj, name, value)


@dataclass(frozen=True)
class DataOptions:
    """Where the data come from and how the table is prepared (``[data]``).

    Exactly one of ``file`` (a table on disk) and ``generator`` (a seeded
    synthetic generator of :mod:`paths.data.synthetic`, case files only) is
    given.  ``features``/``exclude`` are column names or glob patterns;
    ``encode`` is ``None`` (text columns refused) or ``"onehot"``;
    ``drop_missing`` is ``None`` (missing values refused), ``"rows"`` or
    ``"columns"``; ``groups`` names a column of group labels and ``weights`` a
    column of positive row weights (both kept out of the features; a test file
    with the weights column is weighted too); ``test_file`` is a second table
    with the same columns in any order, aligned by name; ``holdout`` a fraction
    of rows held out instead.
    """

    file: Path | None = None
    target: tuple = ()
    sep: str | None = None
    features: tuple | None = None
    exclude: tuple | None = None
    id_column: str | None = None
    encode: str | None = None
    drop_missing: str | None = None
    groups: str | None = None
    weights: str | None = None
    test_file: Path | None = None
    holdout: float | None = None
    generator: str | None = None
    params: dict = field(default_factory=dict)

    def __post_init__(self):
        _set(self, "target", _names(self.target) or ())
        _set(self, "features", _names(self.features))
        _set(self, "exclude", _names(self.exclude))
        if self.file is not None:
            _set(self, "file", Path(self.file))
        if self.test_file is not None:
            _set(self, "test_file", Path(self.test_file))
        if self.encode == "none":
            _set(self, "encode", None)


@dataclass(frozen=True)
class FitOptions:
    """The explore fit: grid, scaling, factorization, K-fold CV and the reported rule (``[fit]``).

    ``n_folds`` (K-fold cross-validation, exact from the one factorization),
    ``repeats`` seeded repetitions of the partition, ``fold_scheme``
    ``"shuffled"`` or ``"blocked"``, ``cv_scaling`` ``"global"`` or
    ``"per-fold"``; ``seed`` seeds the holdout and the folds.  ``unpenalized``
    names columns (or glob patterns) fitted without penalty; ``relative_penalty``
    maps patterns to penalty factors (``{"gene_*": 2.0}``, or ``"PATTERN=W"``
    strings as on the command line).  ``intervals`` asks for prediction intervals
    at that level for the test rows (``interval_method`` ``"jackknife+"``,
    ``"cv+"`` or ``"split"``; :mod:`paths.selection.intervals`).
    """

    n_lambdas: int = 100
    standardize: bool = True
    solver: str = "auto"
    n_folds: int | None = None
    repeats: int = 1
    fold_scheme: str = "shuffled"
    cv_scaling: str = "global"
    rule: str | None = None
    seed: int = 0
    unpenalized: tuple | None = None
    relative_penalty: dict | None = None
    intervals: float | None = None
    interval_method: str = "jackknife+"

    def __post_init__(self):
        _set(self, "unpenalized", _names(self.unpenalized))
        if self.relative_penalty is not None and not isinstance(self.relative_penalty, dict):
            _set(self, "relative_penalty", parse_relative_penalties(self.relative_penalty))
        if not self.relative_penalty:
            _set(self, "relative_penalty", None)


@dataclass(frozen=True)
class EngineOptions:
    """Where the path is computed (``[engine]``): in memory, streamed, or on a dask cluster.

    ``"auto"`` (the default) runs in memory unless the table would take more than a
    stated share of the available memory, and then streams it
    (:mod:`paths.workflows.choose_engine`); ``"memory"`` forces memory.
    """

    engine: str = "auto"
    scheduler: str | None = None
    scheduler_timeout: float = 10.0
    chunk_rows: int | None = None
    accurate: bool = False
    rank: int | None = None

    @property
    def name(self) -> str:
        """The engine that runs: a scheduler implies dask, ``rank`` implies an out-of-memory one."""
        if self.engine in ("memory", "auto") and self.scheduler is not None:
            return "dask"
        if self.engine in ("memory", "auto") and self.rank is not None:
            return "stream"
        return self.engine


@dataclass(frozen=True)
class ThresholdOptions:
    """The sweep across the interpolation threshold (``[threshold]``), for data and simulations.

    See :func:`paths.threshold.sweep.threshold_sweep` for each field;
    ``random_features``/``feature_map``/``solver`` apply to data only.
    """

    over: str = "features"
    order: str = "given"
    repeats: int = 1
    seed: int = 0
    n_points: int = 40
    random_features: int | None = None
    feature_map: str = "relu"
    ridge_lambda: float | None = None
    ridge_df_fraction: float | None = None
    band: str = "se"
    fit_intercept: bool = True
    standardize: bool = True
    solver: str = "auto"

    def sweep_keywords(self) -> dict:
        """Keyword arguments of :func:`paths.threshold.sweep.threshold_sweep`."""
        return dataclasses.asdict(self)


@dataclass(frozen=True)
class TruthOptions:
    """A known truth for simulations (``[truth]``): :func:`paths.threshold.simulate.make_truth`."""

    n_features: int = 600
    covariance: str = "isotropic"
    rho: float = 0.5
    n_spikes: int = 3
    spike_strength: float = 20.0
    coefficients: str = "dense"
    sparsity: int = 10
    snr: float = 1.0
    noise_variance: float = 1.0
    seed: int = 0


@dataclass(frozen=True)
class DrawOptions:
    """Rows drawn from the truth per repeat (``[simulate]``)."""

    n_train: int = 200
    n_test: int = 1000


@dataclass(frozen=True)
class FigureOptions:
    """Figures and the report (``[figures]``): formats, width, the x axis of path figures
    (``figure_x``: ``"df"`` or ``"log_lambda"``), report."""

    formats: tuple = ("svg",)  # vector, and what the report inlines; png/pdf on request
    width: str = "single"
    figure_x: str = "df"
    report: bool = True

    def __post_init__(self):
        if isinstance(self.formats, str) and self.formats.strip().lower() == "none":
            _set(self, "formats", ())  # --format none: no figure files
        elif isinstance(self.formats, str):
            _set(self, "formats", _names(self.formats) or ())
        else:
            _set(self, "formats", tuple(self.formats or ()))


@dataclass(frozen=True)
class PlanOptions:
    """The sample-size plan: features, variances or SNR, a spectrum file, the tolerance."""

    n_features: int | None = None
    snr: float | None = None
    noise_variance: float | None = None
    signal_variance: float | None = None
    spectrum: Path | None = None
    tolerance: float = 0.05


@dataclass(frozen=True)
class OutputOptions:
    """Where the files go: the folder, ``force`` to replace a previous run's files, the command line.

    ``inputs`` lists files the run reads besides its data (e.g. a case file):
    no output may land on them (:class:`paths.data.output.OutputFolder`).
    """

    out_dir: Path = Path("paths-out")
    force: bool = False
    command_line: tuple = ()
    inputs: tuple = ()

    def __post_init__(self):
        _set(self, "out_dir", Path(self.out_dir))
        _set(self, "command_line", tuple(self.command_line or ()))
        _set(self, "inputs", tuple(Path(p) for p in self.inputs or () if p is not None))

    def folder(self, inputs=()):
        """The :class:`~paths.data.output.OutputFolder` of a run that reads ``inputs``."""
        from paths.data.output import OutputFolder

        return OutputFolder(self.out_dir, force=self.force, inputs=[*self.inputs, *inputs])


def parse_relative_penalties(specs) -> dict | None:
    """``["gene_*=2", "age=0.5"]`` → ``{"gene_*": 2.0, "age": 0.5}``.

    >>> parse_relative_penalties(["gene_*=2", "age=0.5"])
    {'gene_*': 2.0, 'age': 0.5}
    """
    import math

    if not specs:
        return None
    out = {}
    for spec in [specs] if isinstance(specs, str) else specs:
        pattern, eq, value = str(spec).rpartition("=")
        try:
            w = float(value)
        except ValueError:
            w = None
        if not eq or not pattern or w is None or not (math.isfinite(w) and w > 0):
            from paths.data.validation import InputError

            raise InputError(f"relative_penalty takes PATTERN=W with W a number > 0 (e.g. "
                             f"'gene_*=2'); got {spec!r}")
        out[pattern] = w
    return out


def option_names(cls) -> tuple:
    """The field names of an options dataclass (the valid keys of its case-file table)."""
    return tuple(f.name for f in dataclasses.fields(cls))
