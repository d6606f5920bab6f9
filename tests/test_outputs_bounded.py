"""Bounded outputs on wide data: figure CSVs hold what is drawn, report.html stays small,
the full coefficient table goes to Parquet when large.

References: pandas reads the Parquet file back (pyarrow engine) and the CSV
(``csv`` module) against the path's own arrays; the size bound (a few MB for a
report that is e-mailed or archived) is common practice, no source.
"""
from __future__ import annotations

import csv

import numpy as np
import pandas as pd
from numpy.testing import assert_allclose

from paths.data.tables import select
from paths.present import summary as summary_mod
from paths.workflows.explore import explore_prepared
from paths.workflows.options import FigureOptions, FitOptions, OutputOptions
from paths.workflows.prepare import Prepared


def _wide(p=3000, n=40, seed=3):
    """Invented wide data (seeded): n rows, p Gaussian features, a sparse signal."""
    rng = np.random.default_rng(seed)
    X = rng.standard_normal((n, p))
    y = X[:, :10].sum(axis=1) + rng.standard_normal(n)
    frame = pd.DataFrame(X, columns=[f"f{j}" for j in range(p)])
    frame["y"] = y
    return select(frame, "y", source="synthetic wide")


def test_wide_run_outputs_are_bounded(tmp_path, monkeypatch):
    monkeypatch.setattr(summary_mod, "COEFFICIENTS_CSV_LIMIT", 10_000)
    run = explore_prepared(Prepared(train=_wide()), FitOptions(n_lambdas=40),
                           FigureOptions(formats=("svg",)), OutputOptions(out_dir=tmp_path / "o"))
    out = tmp_path / "o"
    # report.html: a few hundred kB for 3000 features (figures summarise, never one line each)
    assert (out / "report.html").stat().st_size < 3_000_000
    with open(out / "fig-path.csv", newline="") as fh:
        rows = list(csv.DictReader(fh))
    series = {r["series"] for r in rows}
    assert len(series) < 40 and len(rows) < 20 * 40 + 100  # not 3000 lines
    # the full table, as Parquet past the limit, equals the path's coefficients
    assert not (out / "coefficients.csv").exists()
    table = pd.read_parquet(out / "coefficients.parquet")
    # exact: Parquet stores the float64 values unchanged
    assert_allclose(table["lambda"].to_numpy(), run.result.lambdas, rtol=0)
    assert_allclose(table[run.result.feature_names].to_numpy(), run.result.coef, rtol=0)


def test_explorer_covers_every_target_within_its_byte_budget(tmp_path):
    """Two targets on wide data: the explorer's inline data carry both (one selector option
    each) and report.html stays under a few MB; under a tiny budget the first target stays and
    the page names the one left out (the size bound is common practice, no source)."""
    import json
    import re

    from paths.present.interactive import explorer_section, explorer_targets

    train = _wide()
    rng = np.random.default_rng(5)
    frame = pd.DataFrame(train.X, columns=train.feature_names)
    frame["y"] = train.y
    frame["z"] = train.X[:, 100:103].sum(axis=1) + rng.standard_normal(train.X.shape[0])
    data = select(frame, ["y", "z"], source="synthetic wide, two targets")
    run = explore_prepared(Prepared(train=data), FitOptions(n_lambdas=40),
                           FigureOptions(formats=("svg",)), OutputOptions(out_dir=tmp_path / "o"))
    html = (tmp_path / "o" / "report.html").read_text()
    assert len(html.encode()) < 3_000_000
    blob = re.search(r'id="paths-explorer-data">(.*?)</script>', html, re.S).group(1)
    record = json.loads(blob)
    assert [t["name"] for t in record["targets"]] == ["y", "z"] and record["left_out"] == []
    assert len(record["shared"]["d"]) == run.result.factorization.d.size  # stored once
    small = explorer_targets(run.result, run.summary, max_bytes=1)
    assert [t["name"] for t in small["targets"]] == ["y"] and small["left_out"] == ["z"]
    page = explorer_section(run.result, run.summary, max_bytes=1)
    assert "left out: z" in page and '<option value="1">' not in page


def test_coefficient_parquet_of_several_targets(tmp_path, monkeypatch):
    """Two targets past the CSV limit: the Parquet table (read back by pandas) holds each
    target's rows under a text ``target`` column, the float64 values unchanged."""
    from paths import fit_path
    from paths.workflows.explore import per_target

    monkeypatch.setattr(summary_mod, "COEFFICIENTS_CSV_LIMIT", 100)
    rng = np.random.default_rng(5)
    X, Y = rng.standard_normal((30, 60)), rng.standard_normal((30, 2))
    res = fit_path(X, Y, n_lambdas=12)
    written = summary_mod.write_coefficients(
        tmp_path, *per_target(summary_mod.coefficient_table, res, ["a", "b"]))
    assert written.name == "coefficients.parquet"
    table = pd.read_parquet(written)
    assert list(table.columns[:3]) == ["target", "lambda", "intercept"]
    for j, name in enumerate(["a", "b"]):  # exact: Parquet stores float64 values unchanged
        part = table[table["target"] == name]
        assert_allclose(part[res.feature_names].to_numpy(), res.coef_of(j), rtol=0)  # exact:
        assert_allclose(part["lambda"].to_numpy(), res.lambdas, rtol=0)  # exact: as stored
