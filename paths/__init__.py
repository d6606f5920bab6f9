"""paths: the whole ridge regularization path from one factorization.

Penalty convention: minimize ||y - b0 - X beta||^2 + lambda ||beta||^2 with X
the column-centered (optionally standardized) design and b0 unpenalized.
"""
from ._validation import InputError
from .factor import Factorization, factorize
from .grid import default_grid, effective_df, lambda_for_df
from .path import PENALTY_CONVENTION, MinNormFit, RidgePath, fit_path
from .cv import CostModel, CVResult, cross_validate, make_folds
from .select import NoiseEstimate, Selection, SelectionReport, noise_variance, select_penalty
from .estimator import RidgePathRegressor
from .stream import StreamPath, stream_path
from .wide import WidePath, wide_path
from .dask_engine import dask_path
from .threshold import ThresholdResult, TheoryCurves, threshold_sweep
from .simulate import SimulationResult, Truth, make_truth, sweep_with_truth
from .plan import PlanResult
from .figures import Panel, path_figure, save_figure, spectrum_figure, threshold_figure
from .cases import Case, load_case, run_case

__version__ = "0.1.0"

__all__ = [
    "InputError",
    "Factorization",
    "factorize",
    "default_grid",
    "effective_df",
    "lambda_for_df",
    "PENALTY_CONVENTION",
    "MinNormFit",
    "RidgePath",
    "fit_path",
    "CostModel",
    "CVResult",
    "cross_validate",
    "make_folds",
    "NoiseEstimate",
    "Selection",
    "SelectionReport",
    "noise_variance",
    "select_penalty",
    "RidgePathRegressor",
    "StreamPath",
    "stream_path",
    "WidePath",
    "wide_path",
    "dask_path",
    "ThresholdResult",
    "TheoryCurves",
    "threshold_sweep",
    "SimulationResult",
    "Truth",
    "make_truth",
    "sweep_with_truth",
    "PlanResult",
    "Panel",
    "path_figure",
    "spectrum_figure",
    "threshold_figure",
    "save_figure",
    "Case",
    "load_case",
    "run_case",
    "__version__",
]
