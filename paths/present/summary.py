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

__all__ = ["versions", "path_table", "coefficient_table", "summary_dict", "selections",
           "model_table", "choice_errors", "shared_rows", "add_choice_errors", "reported_lambdas",
           "write_coefficients", "COEFFICIENTS_CSV_LIMIT", "interval_table", "interval_record",
           "TARGET_TABLE_RULES", "target_choices", "targets_table"]


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


def _reml_column(result: RidgePath):
    """The restricted log-likelihood along the grid (None where the engine kept no U)."""
    if result.factorization.u.shape[0] == 0:  # streamed: left singular vectors never formed
        return None
    from paths.selection.reml import reml_loglik

    cache = getattr(result, "cache", None)  # once per path, not once per target's table
    if cache is None:
        return reml_loglik(result)
    if "reml_loglik" not in cache:
        cache["reml_loglik"] = reml_loglik(result)
    return cache["reml_loglik"]


def path_table(result: RidgePath, target: int = 0):
    """``path.csv``: one row per penalty (``reml_loglik``: :mod:`paths.selection.reml`)."""
    header = ["lambda", "df", "train_mse", "gcv", "loo_mse", "test_mse", "coef_norm",
              "reml_loglik"]

    def col(a):
        if a is None:
            return [None] * result.lambdas.size
        return a if a.ndim == 1 else a[:, target]

    cols = [result.lambdas, result.df, col(result.train_mse), col(result.gcv),
            col(result.loo_mse), col(result.test_mse), col(result.coef_norm),
            col(_reml_column(result))]
    rows = [[None if c[i] is None else float(c[i]) for c in cols]
            for i in range(result.lambdas.size)]
    return header, rows


def coefficient_table(result: RidgePath, target: int = 0):
    """``coefficients.csv``: one row per penalty, the intercept then one column per feature."""
    coef = result.coef_of(target)  # one target's path: never the (k, p, t) array
    icpt = result.intercept if result.intercept.ndim == 1 else result.intercept[:, target]
    header = ["lambda", "intercept", *result.feature_names]
    rows = [[float(result.lambdas[i]), float(icpt[i]), *map(float, coef[i])]
            for i in range(result.lambdas.size)]
    return header, rows


def interval_table(pi, rows, targets=None):
    """``intervals.csv``: ``row, prediction, lower, upper`` per test row (``target`` first
    with several targets, the rows of each stacked).

    ``pi`` is a :class:`paths.selection.intervals.PredictionIntervals`, ``rows`` the
    test rows' labels (row numbers in their file).
    """
    if pi.prediction.ndim == 1:
        return (["row", "prediction", "lower", "upper"],
                [[r, float(a), float(b), float(c)]
                 for r, a, b, c in zip(rows, pi.prediction, pi.lower, pi.upper)])
    out = []
    for j, name in enumerate(targets):
        out.extend([name, r, float(a), float(b), float(c)] for r, a, b, c in
                   zip(rows, pi.prediction[:, j], pi.lower[:, j], pi.upper[:, j]))
    return ["target", "row", "prediction", "lower", "upper"], out


def interval_record(pi, y_test) -> dict:
    """``summary.json["intervals"]``: level, method, lambda, coverage of the test rows,
    mean width (lists over targets with several targets) and the guarantee."""
    width = np.mean(pi.upper - pi.lower, axis=0)
    return {"level": pi.level, "method": pi.method, "lambda": _list(pi.lam),
            "coverage": _list(pi.coverage(y_test)), "mean_width": _list(width),
            "guarantee": pi.guarantee, "n_test": int(pi.prediction.shape[0]),
            "n_folds": pi.n_folds, "n_calibration": pi.n_calibration}


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
        "n_unpenalized": int(result.design.n_fixed),
        "unpenalized": list(getattr(result, "unpenalized", [])),
        "weighted": bool(getattr(result, "weighted", False)),
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


def _target_names(result: RidgePath, targets) -> list:
    if targets is None:
        return ["y"] if not result.multi_target else [f"y{j}" for j in range(result.uty.shape[1])]
    return [str(t) for t in ([targets] if isinstance(targets, str) else targets)]


def model_table(result: RidgePath, lambdas, targets=None):
    """``model.csv``: the final model, intercept first, on the original feature scale.

    Two columns per target: the coefficients at the reported penalty
    ``lambdas[j]`` (any non-negative value, on the grid or refined off it,
    computed from the factors) and at the λ → 0⁺ limit (the minimum-norm fit).

    Parameters
    ----------
    result : RidgePath
    lambdas : float or sequence of float
        The reported penalty of each target.
    targets : str or list of str, optional
        Target names (column headings).

    Returns
    -------
    (header, rows)
        ``header = ["term", "<target> at lambda=<value>", "<target> min-norm", ...]``;
        the first row is the intercept.
    """
    names = _target_names(result, targets)
    lams = np.atleast_1d(np.asarray(lambdas, dtype=float))
    if lams.size == 1 and len(names) > 1:
        lams = np.repeat(lams, len(names))
    header, cols = ["term"], []
    mn_coef = np.asarray(result.min_norm.coef, dtype=float).reshape(result.n_features, -1)
    mn_icpt = np.atleast_1d(np.asarray(result.min_norm.intercept, dtype=float))
    for j, name in enumerate(names):
        lam = float(lams[j])
        coef = np.asarray(result.coef_at(lam), dtype=float).reshape(result.n_features, -1)[:, j]
        icpt = float(result.design.y_mean.ravel()[j]
                     - result.design.x_mean @ coef) if result.fit_intercept else 0.0
        # (with row weights or unpenalized columns the means are weighted; same formula)
        header += [f"{name} at lambda={lam:.6g}", f"{name} min-norm (lambda -> 0)"]
        cols += [np.concatenate([[icpt], coef]),
                 np.concatenate([[mn_icpt[min(j, mn_icpt.size - 1)]], mn_coef[:, j]])]
    terms = ["(intercept)", *map(str, result.feature_names)]
    rows = [[t, *(float(c[i]) for c in cols)] for i, t in enumerate(terms)]
    return header, rows


def choice_errors(result: RidgePath, lam: float, target: int = 0, *, X_test=None,
                  y_test=None) -> dict:
    """Training MSE, GCV, leave-one-out MSE (and test MSE) at the penalty ``lam`` itself.

    Closed forms on the path's factors (:meth:`RidgePath.criteria_at`), so a
    penalty refined off the grid gets its own errors, not the nearest grid
    point's; the test MSE is that of :meth:`RidgePath.predict` at ``lam``.
    """
    state = getattr(result, "state", None)
    if result.multi_target and state is not None and state.u is not None:
        from paths.core import algebra  # this target only: O(n r), not O(n r t)

        lam1, j = np.array([float(lam)]), [int(target)]
        out = {"train_mse": float(algebra.rss(state, lam1)[0, target] / state.total_weight),
               "gcv": float(algebra.gcv_paired(state, lam1, targets=j)[0]),
               "loo_mse": float(algebra.loo_paired(state, lam1, targets=j)[0][0])}
    else:
        crit = result.criteria_at(float(lam))

        def pick(v):
            v = np.asarray(v, dtype=float).reshape(np.shape(v)[0], -1)
            return float(v[0, min(target, v.shape[1] - 1)])

        out = {"train_mse": pick(crit.train_mse), "gcv": pick(crit.gcv),
               "loo_mse": pick(crit.loo_mse)}
    if X_test is not None and y_test is not None:
        pred = np.asarray(result.predict(X_test, float(lam)), dtype=float)
        yt = np.asarray(y_test, dtype=float)
        if pred.ndim == 2:
            pred, yt = pred[:, target], yt.reshape(yt.shape[0], -1)[:, target]
        out["test_mse"] = float(np.mean((yt.ravel() - pred.ravel()) ** 2))
    return out


def shared_rows(X_train, X_test) -> int:
    """How many test rows also occur (exactly, feature for feature) among the training rows.

    A test set that shares rows with the training set is not held out; the
    report says so wherever it names a test error.
    """
    if X_test is None:
        return 0
    a = np.ascontiguousarray(np.asarray(X_train, dtype=np.float64))
    b = np.ascontiguousarray(np.asarray(X_test, dtype=np.float64))
    if a.ndim != 2 or b.ndim != 2 or a.shape[1] != b.shape[1]:
        return 0
    seen = {row.tobytes() for row in a}
    return int(sum(row.tobytes() in seen for row in b))


def add_choice_errors(summary: dict, result: RidgePath, *, X_train=None, X_test=None,
                      y_test=None) -> dict:
    """Add each rule's errors at its own penalty (``at_choice``) and the test-set overlap.

    For every rule with a penalty in ``summary["selected"]`` (and per target in
    ``summary["by_target"]``), ``at_choice`` holds :func:`choice_errors`;
    ``summary["test_shared_rows"]`` counts the test rows that are also training
    rows (:func:`shared_rows`).  Returns the same dict, updated.
    """
    def fill(selected, j):
        for sel in (selected or {}).values():
            if isinstance(sel, dict) and sel.get("lambda") is not None:
                sel["at_choice"] = choice_errors(result, sel["lambda"], j, X_test=X_test,
                                                 y_test=y_test)

    fill(summary.get("selected"), 0)
    for j, name in enumerate(summary.get("targets") or []):
        fill(((summary.get("by_target") or {}).get(name) or {}).get("selected"), j)
    if X_train is not None and X_test is not None:
        summary["test_shared_rows"] = shared_rows(X_train, X_test)
    return summary


def reported_lambdas(summary: dict) -> list:
    """The reported penalty of each target (``summary["report"]``, per target under
    ``by_target``), for :func:`model_table`."""
    rep = summary.get("report") or {}
    targets = summary.get("targets")
    if not targets:
        return [float(rep["lambda"])]
    rule = rep.get("rule")
    out = []
    for name in targets:
        sel = (((summary.get("by_target") or {}).get(name) or {}).get("selected") or {}).get(rule)
        out.append(float(sel["lambda"]) if sel and sel.get("lambda") is not None
                   else float(rep["lambda"]))
    return out


#: Above this many numbers the full coefficient table is written as Parquet, not CSV
#: (a CSV of 10^6 numbers is ~20 MB and slow to write; Parquet is compact and typed).
COEFFICIENTS_CSV_LIMIT = 500_000


def write_coefficients(out_dir, header, rows):
    """``coefficients.csv`` (or ``coefficients.parquet`` past :data:`COEFFICIENTS_CSV_LIMIT`
    numbers): the full per-penalty coefficient table; returns the path written."""
    from pathlib import Path

    from paths.data.output import write_bytes, write_csv

    out = Path(out_dir)
    if len(rows) * len(header) <= COEFFICIENTS_CSV_LIMIT or len(set(header)) < len(header):
        return write_csv(out / "coefficients.csv", header, rows)
    import io

    import pyarrow as pa
    import pyarrow.parquet as pq

    # column by column straight to Arrow (a pandas frame of thousands of columns is slow);
    # plain encoding, no compression: distinct doubles gain nothing from either
    table = pa.Table.from_arrays([pa.array(col) for col in zip(*rows)],
                                 names=[str(h) for h in header])
    buf = io.BytesIO()
    pq.write_table(table, buf, use_dictionary=False, compression="none", write_statistics=False)
    return write_bytes(out / "coefficients.parquet", buf.getvalue())


# ------------------------------------------------------------------- many targets
#: rules whose penalty per target the targets table lists (when the run has them)
TARGET_TABLE_RULES = ("gcv", "loo", "cv", "one-se", "reml")


def _num(v):
    if isinstance(v, list):
        v = v[0] if v else None
    return np.nan if v is None else float(v)


def target_choices(summary: dict) -> dict:
    """``{rule: ndarray (t,)}``: each target's penalty per rule of a multi-target record
    (NaN where a rule gave none; rules giving none for every target are left out)."""
    names = summary.get("targets") or []
    by = summary.get("by_target") or {}
    rules = [r for r, v in ((by.get(names[0]) or {}).get("selected") or {}).items()
             if isinstance(v, dict) and r != "test"] if names else []
    out = {}
    for rule in rules:
        lam = np.array([_num((((by.get(n) or {}).get("selected") or {}).get(rule) or {})
                             .get("lambda")) for n in names])
        if np.isfinite(lam).any():
            out[rule] = lam
    return out


def targets_table(summary: dict):
    """``targets.csv``: one row per target — the reported rule's penalty, df and error
    estimate (with its SE and source), then the penalty of each rule of
    :data:`TARGET_TABLE_RULES` the run has.  Returns ``(header, rows)``."""
    names = summary.get("targets") or []
    by = summary.get("by_target") or {}
    rule = (summary.get("report") or {}).get("rule") or summary.get("reported") or "gcv"
    choices = target_choices(summary)
    others = [r for r in TARGET_TABLE_RULES if r in choices]
    header = ["target", "reported_rule", "lambda", "df", "est_mse", "est_se", "est_source",
              *[f"lambda_{r.replace('-', '_')}" for r in others]]
    rows = []
    for j, name in enumerate(names):
        sel = ((by.get(name) or {}).get("selected") or {}).get(rule) or {}
        est = sel.get("est_mse", sel.get("value"))
        rows.append([name, rule, _num(sel.get("lambda")), _num(sel.get("df")), _num(est),
                     _num(sel.get("est_se")), sel.get("est_source") or "",
                     *[float(choices[r][j]) for r in others]])
    return header, rows
