"""Option declarations shared by the commands, and the options dataclasses built from them.

A command's parameter is named like the field of the options dataclass it fills
(:mod:`paths.workflows.options`), so :func:`build` fills a dataclass from the
command's arguments by name, and the error boundary (:mod:`paths.cli.app`) can
turn a parameter named in a library error into the flag that sets it.
Declaring the shared options once here gives every command that reads a table
the same flags, help and defaults.
"""
from __future__ import annotations

import dataclasses
from enum import Enum
from pathlib import Path

import typer

from paths.workflows import options as o

__all__ = ["build", "Solver", "Encode", "DropMissing", "FoldScheme", "CVScaling", "Engine",
           "IntervalMethod", "Over", "Order", "FeatureMap", "Band", "Covariance", "Coefficients"]


class Solver(str, Enum):
    auto = "auto"
    svd = "svd"
    gram = "gram"


class Encode(str, Enum):
    none = "none"
    onehot = "onehot"


class DropMissing(str, Enum):
    rows = "rows"
    columns = "columns"


class FoldScheme(str, Enum):
    shuffled = "shuffled"
    blocked = "blocked"


class CVScaling(str, Enum):
    global_ = "global"
    per_fold = "per-fold"


class IntervalMethod(str, Enum):
    jackknife_plus = "jackknife+"
    cv_plus = "cv+"
    split = "split"


class Engine(str, Enum):
    auto = "auto"
    memory = "memory"
    stream = "stream"
    dask = "dask"


class Over(str, Enum):
    features = "features"
    samples = "samples"


class Order(str, Enum):
    given = "given"
    random = "random"
    screening = "screening"


class FeatureMap(str, Enum):
    relu = "relu"
    fourier = "fourier"


class Band(str, Enum):
    se = "se"
    quantile = "quantile"


class Covariance(str, Enum):
    isotropic = "isotropic"
    ar1 = "ar1"
    spiked = "spiked"


class Coefficients(str, Enum):
    dense = "dense"
    sparse = "sparse"
    aligned = "aligned"


def build(cls, values: dict, **overrides):
    """The options dataclass ``cls`` from a command's arguments (matched by field name).

    Enum members become their values; empty lists (a repeatable option not
    given) become ``None``.
    """
    kw = {}
    for f in dataclasses.fields(cls):
        if f.name in values:
            v = values[f.name]
            v = v.value if isinstance(v, Enum) else v
            kw[f.name] = None if isinstance(v, list) and not v else v
    kw.update(overrides)
    return cls(**kw)


# ------------------------------------------------------------------ reading and preparing a table
DATA_HELP = ("Data file: CSV/TSV (delimiter and header detected), Parquet, or NumPy "
             ".npy/.npz; - reads CSV from standard input.")
TARGET = typer.Option(..., "--target", "-t", help="Response column; repeat (or comma-separate) "
                      "for several.")
SEP = typer.Option(None, "--sep", help="Delimiter of a text file (e.g. ',', ';', tab); detected "
                   "by default.")
FEATURES = typer.Option(None, "--features", help="Feature columns: names or glob patterns "
                        "(repeat or comma-separate); default all others.")
EXCLUDE = typer.Option(None, "--exclude", help="Columns (names or glob patterns) left out of "
                       "the features.")
ID_COLUMN = typer.Option(None, "--id", help="Identifier column, kept out of the design.")
ENCODE = typer.Option(Encode(o.DataOptions.encode or "none"), "--encode", help="Categorical (text) columns: refused (none) "
                      "or one-hot encoded, reference level dropped.")
DROP_MISSING = typer.Option(None, "--drop-missing", help="Missing values: refused by default; "
                            "drop the rows or the columns.")
TEST_FILE = typer.Option(None, "--test", help="Separate test file with the same columns (in any "
                         "order: matched by name).")
HOLDOUT = typer.Option(o.DataOptions.holdout, "--holdout", help="Hold out this fraction of "
                       "rows as test rows, seeded by --seed (threshold: "
                       f"{o.DEFAULT_THRESHOLD_HOLDOUT:g} without --test).")
GROUPS = typer.Option(None, "--groups", help="Column of group labels (subjects, sites, "
                      "batches): whole groups are held out together; not a feature.")

# ------------------------------------------------------------------ shared settings
SEED = typer.Option(o.FitOptions.seed, "--seed", help="Seed of every random choice (holdout, folds, orders, "
                    "random features, draws).")
REPEATS = typer.Option(o.FitOptions.repeats, "--repeats", help="Repetitions (seeded): of the K-fold partition, of "
                       "the sweep's random orders or features, of the simulated draws.")
STANDARDIZE = typer.Option(o.FitOptions.standardize, "--standardize/--no-standardize", help="Scale columns to unit "
                           "population SD before penalizing.")
SOLVER = typer.Option(Solver(o.FitOptions.solver), "--solver", help="Factorization route.")
N_LAMBDAS = typer.Option(o.FitOptions.n_lambdas, "--n-lambdas", help="Number of penalties on the default grid.")
N_POINTS = typer.Option(o.ThresholdOptions.n_points, "--n-points", help="Sweep points, dense around the threshold.")

# ------------------------------------------------------------------ figures and output
FORMATS = typer.Option(",".join(o.FigureOptions.formats), "--format", help="Figure formats, comma-separated: svg "
                       "(vector, inlined in the report), pdf (TrueType fonts), png (300 dpi); or "
                       "none.")
WIDTH = typer.Option(o.FigureOptions.width, "--width", help="Figure width: single (3.5 in) or double "
                     "(7.2 in) journal column.")
FIGURE_X = typer.Option(o.FigureOptions.figure_x, "--figure-x", help="Path figures against log_lambda or df "
                        "(effective degrees of freedom).")
REPORT = typer.Option(o.FigureOptions.report, "--report/--no-report", help="Write report.md and a self-contained "
                      "report.html (with the figures).")
FORCE = typer.Option(o.OutputOptions.force, "--force", help="Replace what an earlier run "
                     "wrote at --out (inputs are never overwritten).")
FORMATS_OF_CASE = typer.Option(None, "--format", help="Figure formats, comma-separated: png, "
                               "pdf, svg; or none (default: the case's).")
WIDTH_OF_CASE = typer.Option(None, "--width", help="Figure width: single (3.5 in) or double "
                             "(7.2 in) journal column (default: the case's).")


def out_dir(command: str):
    """The ``--out`` option with a command's default folder (``options.DEFAULT_OUT_DIRS``)."""
    default = o.DEFAULT_OUT_DIRS.get(command)
    where = "" if default is not None else f" (default ./{o.CASE_OUT_DIR.format(case='CASE')})"
    return typer.Option(None if default is None else Path(default), "--out", "-o",
                        help=f"Output folder{where}.")


# ------------------------------------------------------------------ explore: fit, CV, engines
WEIGHTS = typer.Option(None, "--weights", help="Column of positive row weights "
                       "(survey weights, counts, precisions); not a feature. Every "
                       "error is then weighted.")
UNPENALIZED = typer.Option(None, "--unpenalized", help="Columns (names or glob "
                           "patterns, repeatable) fitted without penalty, like "
                           "the intercept (e.g. age, sex, batch).")
RELATIVE_PENALTY = typer.Option(None, "--relative-penalty", help="PATTERN=W: "
                                "penalize those columns by W x lambda (W > 0; "
                                "repeatable).")
INTERVALS = typer.Option(o.FitOptions.intervals, "--intervals", help="Prediction intervals "
                         "at this level, e.g. 0.9: for explore's test rows (--test or "
                         "--holdout; intervals.csv), for predict's new rows (columns lower, "
                         "upper).")
INTERVAL_METHOD = typer.Option(IntervalMethod(o.FitOptions.interval_method), "--interval-method",
                               help="jackknife+ (coverage >= 1 - 2 alpha), cv+ (the --n-folds "
                               "folds) or split (half the training rows calibrate).")
N_FOLDS = typer.Option(None, "--n-folds", help="K-fold cross-validation with K folds "
                       "(exact, from the one factorization).")
FOLD_SCHEME = typer.Option(FoldScheme(o.FitOptions.fold_scheme), "--fold-scheme",
                           help="Seeded shuffle, or contiguous blocks for "
                           "ordered rows.")
CV_SCALING = typer.Option(CVScaling(o.FitOptions.cv_scaling), "--cv-scaling", help="Column "
                          "scales learned on all rows (fast, slightly "
                          "optimistic) or inside each fold (exact, refits).")
RULE = typer.Option(None, "--rule", help="Reported choice: gcv, loo, cv, one-se, "
                    "df=VALUE, fraction=VALUE, hkb, lw, isotropic or reml (default: cv with "
                    "--n-folds, else gcv).")
ENGINE = typer.Option(Engine(o.EngineOptions.engine), "--engine", help="auto: in memory "
                      "unless the table would take more than half the available memory, then "
                      "stream; memory: read everything (forced); "
                      "stream: row chunks (tall) or column blocks (wide Parquet) "
                      "in bounded memory; dask: a dask cluster (docs/scaling.md).")
SCHEDULER = typer.Option(None, "--scheduler", help="Address of a running dask "
                         "scheduler, e.g. tcp://10.0.0.5:8786 (--engine dask).")
SCHEDULER_TIMEOUT = typer.Option(o.EngineOptions.scheduler_timeout, "--scheduler-timeout",
                                 help="Seconds to wait for --scheduler to answer.")
CHUNK_ROWS = typer.Option(None, "--chunk-rows", help="Rows per chunk (stream/dask; "
                          "columns per block for wide data). Default 65536 / 4096.")
ACCURATE = typer.Option(o.EngineOptions.accurate, "--accurate", help="Chunked TSQR instead of the Gram "
                        "matrix (stream/dask): backward stable, ~2x the arithmetic.")
RANK = typer.Option(None, "--rank", help="Keep the top K principal components "
                    "(randomized SVD for wide data): approximate, see the warning.")

# ------------------------------------------------------------------ threshold sweeps
OVER = typer.Option(Over(o.ThresholdOptions.over), "--over", help="Grow the features or the samples.")
ORDER = typer.Option(Order(o.ThresholdOptions.order), "--order", help="Nesting order: given, random (per repeat) or "
                     "screening (|correlation| on the training rows).")
RIDGE_LAMBDA = typer.Option(None, "--ridge-lambda", help="Fixed ridge penalty (package "
                            "convention); default 0.1 x (n_train - 1).")
RIDGE_DF_FRACTION = typer.Option(None, "--ridge-df-fraction", help="Instead: the penalty leaving "
                                 "this fraction of the rank as df.")
BAND = typer.Option(Band(o.ThresholdOptions.band), "--band", help="Band over repeats: se or quantile (10-90%).")
