"""Progress of every command: the stages each workflow reports, and how the CLI draws them.

Checks of a protocol, not of numbers: every workflow reports
``progress(stage, done, total)`` for each step that can take long, in pipeline
order, each stage starting at 0 and ending at ``done == total``; the command
line draws them on standard error only when it is a terminal and ``--quiet`` is
off (common practice of command-line tools, no source: progress is for a person
watching, never for a pipe or a log).
"""
from __future__ import annotations

import io

import numpy as np
import pytest
from typer.testing import CliRunner

from paths.cli import app
from paths.workflows import stages as S
from paths.workflows.options import (DataOptions, EngineOptions, FigureOptions, FitOptions,
                                     OutputOptions, PlanOptions, ThresholdOptions)

runner = CliRunner()
OURS = {getattr(S, k) for k in S.__all__ if k.isupper()}


@pytest.fixture(scope="module")
def table(tmp_path_factory):
    """A small invented table (seeded) and a test table, as CSV files."""
    folder = tmp_path_factory.mktemp("progress")
    rng = np.random.default_rng(7)
    paths = []
    for name, n in (("train.csv", 30), ("test.csv", 12)):
        X = rng.standard_normal((n, 40))
        y = X[:, 0] - 0.5 * X[:, 1] + 0.3 * rng.standard_normal(n)
        lines = [",".join([*(f"x{j}" for j in range(40)), "y"])]
        lines += [",".join(f"{v:.6f}" for v in (*row, t)) for row, t in zip(X, y)]
        (folder / name).write_text("\n".join(lines) + "\n")
        paths.append(folder / name)
    return paths


class Recorder:
    def __init__(self):
        self.calls = []

    def __call__(self, stage, done, total):
        self.calls.append((stage, done, total))

    def stages(self):
        """Stage names in the order they first appear."""
        return list(dict.fromkeys(c[0] for c in self.calls))

    def check_protocol(self):
        for name in self.stages():
            mine = [(d, t) for s, d, t in self.calls if s == name]
            done = [d for d, _ in mine]
            ours = name in OURS  # the engines report a pass after each chunk, not at 0
            assert done[0] == 0 or not ours, (name, mine)
            assert done == sorted(done), (name, mine)
            assert mine[-1][1] is None or mine[-1][0] == mine[-1][1], (name, mine)


def test_explore_in_memory_reports_every_stage_in_pipeline_order(table, tmp_path):
    from paths.workflows.explore import run_explore

    train, test = table
    rec = Recorder()
    run_explore(DataOptions(file=train, target="y", test_file=test),
                FitOptions(n_lambdas=20, n_folds=3, intervals=0.8),
                FigureOptions(formats=("svg",)), OutputOptions(out_dir=tmp_path / "o"),
                progress=rec)
    assert rec.stages() == [S.READ, S.FACTOR, S.KFOLD, S.SELECT, S.INTERVALS, S.RECORD,
                            S.TABLES, S.FIGURES, S.REPORT, S.SAVE_FIT]
    rec.check_protocol()
    figures = [c for c in rec.calls if c[0] == S.FIGURES]
    assert figures[-1][1] == 2  # the path figure and the spectrum figure


def test_explore_without_optional_steps_reports_no_such_stage(table, tmp_path):
    from paths.workflows.explore import run_explore

    rec = Recorder()
    run_explore(DataOptions(file=table[0], target="y"), FitOptions(n_lambdas=10),
                FigureOptions(formats=(), report=False), OutputOptions(out_dir=tmp_path / "o"),
                progress=rec)
    assert rec.stages() == [S.READ, S.FACTOR, S.SELECT, S.RECORD, S.TABLES, S.SAVE_FIT]


def test_stream_engine_reports_its_passes_then_the_workflow_stages(table, tmp_path):
    from paths.workflows.explore import run_explore

    rec = Recorder()
    run_explore(DataOptions(file=table[0], target="y"), FitOptions(n_lambdas=10),
                FigureOptions(formats=("svg",)), OutputOptions(out_dir=tmp_path / "o"),
                engine=EngineOptions(engine="stream", accurate=True), progress=rec)
    names = rec.stages()
    assert any(n.startswith("pass 1") for n in names), names
    ours = [n for n in names if n in (S.SELECT, S.TABLES, S.FIGURES, S.REPORT)]
    assert ours == [S.SELECT, S.TABLES, S.FIGURES, S.REPORT]
    assert names.index(S.TABLES) > max(i for i, n in enumerate(names) if "pass" in n)
    rec.check_protocol()


def test_threshold_plan_and_predict_report_their_stages(table, tmp_path):
    from paths.workflows.explore import run_explore
    from paths.workflows.plan import run_plan
    from paths.workflows.predict import predict_file
    from paths.workflows.threshold import run_threshold

    train, test = table
    rec = Recorder()
    run_threshold(DataOptions(file=train, target="y", test_file=test),
                  ThresholdOptions(n_points=4), FigureOptions(formats=("svg",)),
                  OutputOptions(out_dir=tmp_path / "t"), progress=rec)
    assert rec.stages() == [S.READ, "sweep", S.TABLES, S.FIGURES, S.REPORT]
    rec.check_protocol()
    rec = Recorder()
    run_plan(PlanOptions(), OutputOptions(out_dir=tmp_path / "p"),
             pilot=DataOptions(file=train, target="y"), progress=rec)
    assert rec.stages() == [S.READ, S.PLAN, S.TABLES]
    rec.check_protocol()
    run_explore(DataOptions(file=train, target="y"), FitOptions(n_lambdas=10),
                FigureOptions(formats=(), report=False), OutputOptions(out_dir=tmp_path / "e"))
    rec = Recorder()
    predict_file(tmp_path / "e" / "fit.npz", test, out=tmp_path / "pred.csv", intervals=0.8,
                 progress=rec)
    assert rec.stages() == [S.READ, S.PREDICT, S.INTERVALS, S.TABLES]
    rec.check_protocol()


# ------------------------------------------------------------ the K-fold stage, fold by fold
@pytest.fixture(scope="module")
def tall(tmp_path_factory):
    """A small invented tall table (seeded; more rows than columns: the row engines)."""
    path = tmp_path_factory.mktemp("progress_tall") / "tall.csv"
    rng = np.random.default_rng(11)
    X = rng.standard_normal((60, 5))
    y = X[:, 0] - 0.5 * X[:, 1] + 0.3 * rng.standard_normal(60)
    lines = [",".join([*(f"x{j}" for j in range(5)), "y"])]
    lines += [",".join(f"{v:.6f}" for v in (*row, t)) for row, t in zip(X, y)]
    path.write_text("\n".join(lines) + "\n")
    return path


def assert_counts_folds(rec, total):
    """The K-fold stage went 0, 1, .., total (folds times repeats), in order, once."""
    calls = [(d, t) for s, d, t in rec.calls if s == S.KFOLD]
    assert [d for d, _ in calls] == list(range(total + 1)), calls
    assert {t for _, t in calls} == {total}, calls
    names = rec.stages()
    assert names.index(S.KFOLD) < names.index(S.SELECT), names


def _explore(file, out, engine, scaling, progress):
    from paths.workflows.explore import run_explore

    return run_explore(DataOptions(file=file, target="y"),
                       FitOptions(n_lambdas=10, n_folds=3, repeats=2, cv_scaling=scaling),
                       FigureOptions(formats=(), report=False), OutputOptions(out_dir=out),
                       engine=EngineOptions(engine=engine), progress=progress)


# memory on wide and tall data (the dual and the primal exact routes; per-fold: refits),
# stream and dask on tall data (rows), stream on wide data (the wide engine, columns)
ENGINE_CASES = [("memory", "table"), ("memory", "tall"), ("stream", "tall"), ("dask", "tall"),
                ("stream", "table")]


@pytest.mark.parametrize("scaling", ["global", "per-fold"])
@pytest.mark.parametrize("engine,data", ENGINE_CASES)
def test_kfold_stage_counts_folds_times_repeats_on_every_engine(table, tall, tmp_path, engine,
                                                                data, scaling):
    """3 folds x 2 repeats: the K-fold stage reports 0..6 of 6, and the numbers of
    the run are the same bit for bit with and without a progress callback."""
    if engine == "dask":
        pytest.importorskip("dask.array")
    file = table[0] if data == "table" else tall
    rec = Recorder()
    run = _explore(file, tmp_path / "a", engine, scaling, rec)
    assert_counts_folds(rec, 6)
    rec.check_protocol()
    if data == "table" and engine == "stream":
        assert run.summary["engine"]["engine"] == "wide"
    quiet = _explore(file, tmp_path / "b", engine, scaling, None)
    # exact: the same operations in the same order; the callback only counts
    assert quiet.summary["cv"] == run.summary["cv"]
    assert quiet.summary["selected"]["cv"] == run.summary["selected"]["cv"]


@pytest.mark.parametrize("kind", ["dual", "primal", "refit"])
def test_cross_validate_counts_folds_and_keeps_its_numbers(kind):
    """Every route of :func:`cross_validate` counts the folds x repeats in order;
    the errors are bit-identical with and without the callback."""
    from paths.selection.cv import cross_validate

    rng = np.random.default_rng(3)
    n, p = (20, 40) if kind == "dual" else (60, 5)
    X = rng.standard_normal((n, p))
    y = X[:, 0] + rng.standard_normal(n)
    kw = dict(n_folds=4, repeats=3, seed=2,
              scaling="per-fold" if kind == "refit" else "global")
    seen = []
    cv = cross_validate(X, y, [0.1, 1.0, 10.0], progress=lambda *a: seen.append(a), **kw)
    ref = cross_validate(X, y, [0.1, 1.0, 10.0], **kw)
    assert cv.form == kind
    assert seen == [(S.KFOLD, d, 12) for d in range(13)]
    # exact: the same operations in the same order; the callback only counts
    assert np.array_equal(cv.fold_mse, ref.fold_mse) and np.array_equal(cv.mse, ref.mse)
    assert np.array_equal(cv.se, ref.se) and np.array_equal(cv.se_repeats, ref.se_repeats)


@pytest.mark.parametrize("scaling", ["global", "per-fold"])
def test_stream_path_counts_folds_once(scaling):
    """The streamed engine counts its folds on its pass; the workflow's CV result from
    the same fold statistics at the grid reuses those errors (no second count)."""
    from paths.engines.stream import stream_path
    from paths.selection.cv import cv_from_fold_stats

    rng = np.random.default_rng(5)
    X = rng.standard_normal((90, 4))
    y = X[:, 0] + rng.standard_normal(90)
    rec = Recorder()
    res = stream_path(X, y=y, chunk_rows=25, n_lambdas=8, n_folds=5, repeats=2,
                      cv_scaling=scaling, progress=rec)
    ref = stream_path(X, y=y, chunk_rows=25, n_lambdas=8, n_folds=5, repeats=2,
                      cv_scaling=scaling)
    calls = [c for c in rec.calls if c[0] == S.KFOLD]
    assert calls == [(S.KFOLD, d, 10) for d in range(11)]
    # exact: the same operations in the same order; the callback only counts
    assert np.array_equal(res.cv_mse, ref.cv_mse) and np.array_equal(res.cv_se, ref.cv_se)
    again = Recorder()
    cv = cv_from_fold_stats(res.fold_stats, res.fold_plan, res.lambdas, multi_target=False,
                            progress=again)
    assert again.calls == []
    assert np.array_equal(cv.mse, ref.cv_mse)  # exact: the pass's own errors, reused


@pytest.fixture()
def terminal(monkeypatch):
    """Standard error as a terminal (rich's force_terminal) writing into a buffer."""
    import sys

    from rich.console import Console

    cli_app = sys.modules["paths.cli.app"]  # the module (the package's ``app`` is the Typer app)
    buf = io.StringIO()
    monkeypatch.setattr(cli_app, "err_console",
                        Console(file=buf, force_terminal=True, width=120, highlight=False))
    return buf


def _explore_args(table, out):
    return ["explore", str(table[0]), "--target", "y", "--n-folds", "3", "--out", str(out),
            "--format", "svg"]


def test_cli_draws_the_stages_on_a_terminal(table, tmp_path, terminal):
    res = runner.invoke(app, _explore_args(table, tmp_path / "o"))
    assert res.exit_code == 0, res.output
    drawn = terminal.getvalue()
    for name in (S.READ, S.FACTOR, S.KFOLD, S.FIGURES, S.REPORT):
        assert name in drawn, name
    assert S.READ not in res.stdout  # progress never goes to standard output


def test_cli_quiet_silences_progress(table, tmp_path, terminal):
    res = runner.invoke(app, ["--quiet", *_explore_args(table, tmp_path / "o")])
    assert res.exit_code == 0, res.output
    assert terminal.getvalue() == "" and res.stdout == ""


@pytest.mark.parametrize("engine", ["memory", "stream"])
def test_cli_quiet_prints_nothing_with_folds_and_repeats(tall, tmp_path, terminal, engine):
    res = runner.invoke(app, ["--quiet", "explore", str(tall), "--target", "y", "--n-folds",
                              "4", "--repeats", "2", "--engine", engine, "--out",
                              str(tmp_path / "o"), "--format", "none", "--no-report"])
    assert res.exit_code == 0, res.output
    assert terminal.getvalue() == "" and res.stdout == "" and res.stderr == ""


def test_cli_draws_the_fold_count(tall, tmp_path, terminal):
    res = runner.invoke(app, ["explore", str(tall), "--target", "y", "--n-folds", "4",
                              "--repeats", "2", "--out", str(tmp_path / "o"), "--format",
                              "none", "--no-report"])
    assert res.exit_code == 0, res.output
    assert S.KFOLD in terminal.getvalue() and "/8" in terminal.getvalue()


def test_cli_json_keeps_standard_output_for_the_json(table, tmp_path, terminal):
    import json

    res = runner.invoke(app, ["--json", *_explore_args(table, tmp_path / "o")])
    assert res.exit_code == 0, res.output
    json.loads(res.stdout)  # nothing else on standard output
    assert S.FACTOR in terminal.getvalue()  # progress stays on standard error


def test_cli_draws_nothing_when_standard_error_is_not_a_terminal(table, tmp_path):
    res = runner.invoke(app, _explore_args(table, tmp_path / "o"))
    assert res.exit_code == 0, res.output
    assert res.stderr == ""  # not even a blank line
