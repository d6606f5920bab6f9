"""Tables and the JSON summary of a path (pure functions; writing is in :mod:`paths.output`).

The ``summary.json`` schema (keys are a contract; see the README):

``n_samples``, ``n_features``, ``n_test``, ``p_over_n``, ``rank``, ``rank_tol``,
``condition_number``, ``solver``, ``solver_reason``, ``fit_intercept``,
``standardize``, ``penalty_convention``, ``lambdas``, ``df``, ``train_mse``,
``gcv``, ``loo_mse``, ``test_mse`` (null without a test set), ``coef_norm``,
``selected`` (``{"gcv": {"lambda", "df", "index"}, "loo": {...}}``),
``min_norm`` (``train_mse``, ``test_mse``, ``gcv``, ``loo_mse``, ``df``,
``coef_norm``), ``versions``, ``input_sha256``.
"""
from __future__ import annotations

import platform

import numpy as np

from paths.core.path import RidgePath

__all__ = ["versions", "path_table", "coefficient_table", "summary_dict", "selections"]


def versions() -> dict:
    """Versions of Python and the numerical stack, for the reproducibility record.

    Read from the installed distributions' metadata, so that recording them
    imports nothing (scikit-learn and matplotlib take about a second to import).
    """
    from importlib.metadata import PackageNotFoundError, version

    from paths import __version__

    def installed(dist):
        try:
            return version(dist)
        except PackageNotFoundError:
            return None

    return {"paths": __version__, "python": platform.python_version(), "numpy": np.__version__,
            "scipy": installed("scipy"), "scikit-learn": installed("scikit-learn"),
            "matplotlib": installed("matplotlib")}


def _list(a):
    return None if a is None else np.asarray(a, dtype=float).tolist()


def selections(result: RidgePath, target: int = 0) -> dict:
    """Grid minima of GCV and leave-one-out (and test error, when present)."""
    sel = {}
    for key, crit in (("gcv", "gcv"), ("loo", "loo"), ("test", "test")):
        if crit == "test" and result.test_mse is None:
            continue
        i = result.index_min(crit, target)
        values = getattr(result, {"gcv": "gcv", "loo": "loo_mse", "test": "test_mse"}[crit])
        v = values[i] if values.ndim == 1 else values[i, target]
        sel[key] = {"lambda": float(result.lambdas[i]), "df": float(result.df[i]),
                    "index": i, "value": float(v)}
    return sel


def path_table(result: RidgePath, target: int = 0):
    """``path.csv``: one row per penalty."""
    header = ["lambda", "df", "train_mse", "gcv", "loo_mse", "test_mse", "coef_norm"]

    def col(a):
        if a is None:
            return [None] * result.lambdas.size
        return a if a.ndim == 1 else a[:, target]

    cols = [result.lambdas, result.df, col(result.train_mse), col(result.gcv),
            col(result.loo_mse), col(result.test_mse), col(result.coef_norm)]
    rows = [[None if c[i] is None else float(c[i]) for c in cols]
            for i in range(result.lambdas.size)]
    return header, rows


def coefficient_table(result: RidgePath, target: int = 0):
    """``coefficients.csv``: one row per penalty, the intercept then one column per feature."""
    coef = result.coef if result.coef.ndim == 2 else result.coef[:, :, target]
    icpt = result.intercept if result.intercept.ndim == 1 else result.intercept[:, target]
    header = ["lambda", "intercept", *result.feature_names]
    rows = [[float(result.lambdas[i]), float(icpt[i]), *map(float, coef[i])]
            for i in range(result.lambdas.size)]
    return header, rows


def summary_dict(result: RidgePath, **extra) -> dict:
    """The ``summary.json`` record of a path; ``extra`` keys are added verbatim."""
    mn = result.min_norm
    out = {
        "n_samples": result.n_samples,
        "n_features": result.n_features,
        "n_test": result.n_test,
        "p_over_n": result.n_features / result.n_samples,
        "rank": result.rank,
        "rank_tol": result.rank_tol,
        "condition_number": result.condition_number,
        "solver": result.solver,
        "solver_reason": result.solver_reason,
        "fit_intercept": result.fit_intercept,
        "standardize": result.standardize,
        "penalty_convention": result.penalty_convention,
        "lambdas": _list(result.lambdas),
        "df": _list(result.df),
        "train_mse": _list(result.train_mse),
        "gcv": _list(result.gcv),
        "loo_mse": _list(result.loo_mse),
        "test_mse": _list(result.test_mse),
        "coef_norm": _list(result.coef_norm),
        "singular_values": _list(result.singular_values),
        "constant_features": [result.feature_names[j] for j in result.design.constant],
        "selected": selections(result),
        "min_norm": {
            "train_mse": _list(mn.train_mse),
            "test_mse": _list(mn.test_mse),
            "gcv": _list(mn.gcv),
            "loo_mse": _list(mn.loo_mse),
            "df": mn.df,
            "coef_norm": _list(mn.coef_norm),
        },
        "versions": versions(),
    }
    out.update(extra)
    return out
