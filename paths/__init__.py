"""paths: the whole ridge regularization path from one factorization.

Penalty convention: minimize ||y - b0 - X beta||^2 + lambda ||beta||^2 with X
the column-centered (optionally standardized) design and b0 unpenalized.

The public names below are imported on first use, so ``import paths`` loads
numpy only; scikit-learn, pandas, pyarrow, matplotlib and dask are loaded by
the functions that need them.
"""
from __future__ import annotations

import importlib

__version__ = "0.1.0"

_PUBLIC = {
    "InputError": "paths.data.validation",
    "Factorization": "paths.core.factor",
    "factorize": "paths.core.factor",
    "default_grid": "paths.core.grid",
    "effective_df": "paths.core.grid",
    "lambda_for_df": "paths.core.grid",
    "PENALTY_CONVENTION": "paths.core.path",
    "MinNormFit": "paths.core.path",
    "RidgePath": "paths.core.path",
    "fit_path": "paths.core.path",
    "CostModel": "paths.selection.cv",
    "CVResult": "paths.selection.cv",
    "cross_validate": "paths.selection.cv",
    "make_folds": "paths.selection.cv",
    "NoiseEstimate": "paths.selection.rules",
    "Selection": "paths.selection.rules",
    "SelectionReport": "paths.selection.rules",
    "noise_variance": "paths.selection.rules",
    "select_penalty": "paths.selection.rules",
    "PredictionIntervals": "paths.selection.intervals",
    "prediction_intervals": "paths.selection.intervals",
    "RidgePathRegressor": "paths.selection.estimator",
    "StreamPath": "paths.engines.stream",
    "stream_path": "paths.engines.stream",
    "WidePath": "paths.engines.wide",
    "wide_path": "paths.engines.wide",
    "dask_path": "paths.engines.dask_cluster",
    "SavedFit": "paths.present.fitfile",
    "load_fit": "paths.present.fitfile",
    "ThresholdResult": "paths.threshold.sweep",
    "TheoryCurves": "paths.threshold.sweep",
    "threshold_sweep": "paths.threshold.sweep",
    "SimulationResult": "paths.threshold.simulate",
    "Truth": "paths.threshold.simulate",
    "make_truth": "paths.threshold.simulate",
    "sweep_with_truth": "paths.threshold.simulate",
    "PlanResult": "paths.threshold.plan",
    "Panel": "paths.present.figures",
    "path_figure": "paths.present.figures",
    "spectrum_figure": "paths.present.figures",
    "threshold_figure": "paths.present.figures",
    "save_figure": "paths.present.figures",
    "DataOptions": "paths.workflows.options",
    "FitOptions": "paths.workflows.options",
    "EngineOptions": "paths.workflows.options",
    "ThresholdOptions": "paths.workflows.options",
    "TruthOptions": "paths.workflows.options",
    "DrawOptions": "paths.workflows.options",
    "FigureOptions": "paths.workflows.options",
    "OutputOptions": "paths.workflows.options",
    "PlanOptions": "paths.workflows.options",
    "prepare": "paths.workflows.prepare",
    "run_explore": "paths.workflows.explore",
    "run_threshold": "paths.workflows.threshold",
    "run_simulate": "paths.workflows.threshold",
    "run_plan": "paths.workflows.plan",
    "Case": "paths.workflows.cases",
    "load_case": "paths.workflows.cases",
    "run_case": "paths.workflows.cases",
}

__all__ = [*_PUBLIC, "__version__"]


def __getattr__(name: str):
    """Import a public name's module on first access (PEP 562)."""
    module = _PUBLIC.get(name)
    if module is None:
        raise AttributeError(f"module 'paths' has no attribute {name!r}")
    value = getattr(importlib.import_module(module), name)
    globals()[name] = value
    return value


def __dir__():
    return sorted(__all__)
