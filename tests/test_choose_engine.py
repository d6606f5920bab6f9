"""``engine="auto"`` (``paths/workflows/choose_engine.py``): in memory unless the table would
take more than the stated share of the available memory, then streamed, and said so.

References: the table's size is its number of values times 8 bytes (float64, a fact of
IEEE 754 binary64), its shape read back with pyarrow / numpy; the streamed run's
coefficients against scikit-learn ``Ridge`` on ``StandardScaler``-scaled features (the
README's penalty convention).  The available memory is replaced by a small number so
that a small table crosses the threshold.
"""
from __future__ import annotations

import csv
import json

import numpy as np
import pandas as pd
import pyarrow.parquet as pq
from numpy.testing import assert_allclose
from sklearn.linear_model import Ridge
from sklearn.preprocessing import StandardScaler
from typer.testing import CliRunner

from error_bounds import ridge_bounds
import paths.workflows.choose_engine as ce
from paths.cli import app
from paths.workflows.options import DataOptions, EngineOptions, FitOptions


def _table(tmp_path, n=400, p=6, seed=3):
    rng = np.random.default_rng(seed)
    X = rng.standard_normal((n, p))
    y = X[:, 0] - X[:, 1] + rng.standard_normal(n)
    frame = pd.DataFrame(X, columns=[f"c{j}" for j in range(p)]).assign(resp=y)
    f = tmp_path / "t.parquet"
    frame.to_parquet(f, index=False)
    return f, frame, X, y


def test_table_bytes_from_metadata_and_text(tmp_path):
    """Parquet and .npy: rows x columns x 8 from the file's own shape (pyarrow / numpy);
    a regular CSV read in full by the estimate counts its fields exactly."""
    f, frame, _, _ = _table(tmp_path)
    meta = pq.read_metadata(f)
    assert ce.table_bytes(f) == 8.0 * meta.num_rows * meta.num_columns
    g = tmp_path / "t.npy"
    np.save(g, np.zeros((37, 5)))
    assert ce.table_bytes(g) == 8.0 * 37 * 5
    h = tmp_path / "t.csv"
    frame.round(3).to_csv(h, index=False)
    lines = len(h.read_text().splitlines())
    assert ce.table_bytes(h) == 8.0 * lines * frame.shape[1]
    assert ce.table_bytes(tmp_path) is None and ce.table_bytes(tmp_path / "none.csv") is None


def test_choice_by_share_of_available_memory(tmp_path, monkeypatch):
    """Above MEMORY_SHARE of the available memory (MEMORY_FACTOR x the table) auto streams;
    below it, or with engine memory, it stays in memory; an option only the in-memory
    engine offers keeps it in memory, with the reason."""
    f, *_ = _table(tmp_path)
    size = ce.table_bytes(f)
    data, fit, auto = DataOptions(file=f, target=("resp",)), FitOptions(), EngineOptions()
    assert auto.engine == "auto"
    limit = ce.MEMORY_FACTOR * size / ce.MEMORY_SHARE  # the available memory at the switch
    monkeypatch.setattr(ce, "available_memory", lambda: int(limit * 1.01))
    calm = ce.choose_engine(data, fit, auto)
    assert calm.options.engine == "memory" and calm.record is None
    monkeypatch.setattr(ce, "available_memory", lambda: int(limit * 0.99))
    busy = ce.choose_engine(data, fit, auto)
    assert busy.options.engine == "stream" and busy.record["engine"] == "stream"
    assert "streamed" in busy.note and "engine memory" in busy.note
    forced = ce.choose_engine(data, fit, EngineOptions(engine="memory"))
    assert forced.options.engine == "memory" and forced.note is None
    kept = ce.choose_engine(DataOptions(file=f, target=("resp",), weights="c5"), fit, auto)
    assert kept.options.engine == "memory" and "weights" in kept.note


def test_auto_switch_end_to_end(tmp_path, monkeypatch):
    """``paths explore`` without --engine on a table too large for the (small) available
    memory streams it: the note is printed and recorded in summary.json (engine_choice and
    the data notes), the engine record is there, and the coefficients equal scikit-learn
    ``Ridge`` (to within the two solvers' error bounds).  ``--engine memory`` runs in memory with no engine record."""
    f, _, X, y = _table(tmp_path)
    monkeypatch.setattr(ce, "available_memory", lambda: 1000)
    out = tmp_path / "out"
    res = CliRunner().invoke(app, ["explore", str(f), "-t", "resp", "--n-lambdas", "10",
                                   "--format", "none", "--no-report", "--out", str(out)])
    assert res.exit_code == 0, res.output
    assert "streamed from the file instead" in res.output
    summary = json.loads((out / "summary.json").read_text())
    assert summary["engine_choice"]["engine"] == "stream"
    assert "engine" in summary and any("streamed" in n for n in summary["data_notes"])
    with open(out / "coefficients.csv", newline="") as fh:
        rows = list(csv.reader(fh))
    coefs = np.array([[float(v) for v in r] for r in rows[1:]])
    scaler = StandardScaler().fit(X)
    m = Ridge(alpha=coefs[4, 0]).fit(scaler.transform(X), y)
    # bound: the streamed Gram route and sklearn's solver, each backward stable on the
    # standardized design (ridge_bounds with gram=True: Wedin plus the kappa^2 eps term)
    ref = m.coef_ / scaler.scale_
    b = ridge_bounds(X, y, coefs[4, 0], gram=True)
    assert np.linalg.norm(coefs[4, 2:] - ref) <= b.coef * np.linalg.norm(ref)
    mem = tmp_path / "mem"
    res = CliRunner().invoke(app, ["explore", str(f), "-t", "resp", "--n-lambdas", "10",
                                   "--format", "none", "--no-report", "--engine", "memory",
                                   "--out", str(mem)])
    assert res.exit_code == 0, res.output
    summary = json.loads((mem / "summary.json").read_text())
    assert "engine_choice" not in summary and "engine" not in summary
