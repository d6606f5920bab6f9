"""Dask engine (paths/dask_engine.py) on a local multi-process cluster.

The cluster is a ``dask.distributed.LocalCluster`` with two worker
processes on loopback (127.0.0.1 only), started once for the module.
References: the in-memory engine ``fit_path`` (checked against NIST and
scikit-learn in its own tests) and the streaming engine on the same bytes; the
scheduler's documented behaviour on worker loss (tasks of a lost worker are
recomputed elsewhere, distributed docs, "Resilience").  Data are synthetic.
"""
from __future__ import annotations

import os
import signal
import socket
import sys
import threading
import time

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from typer.testing import CliRunner

distributed = pytest.importorskip("distributed")
da = pytest.importorskip("dask.array")

import cloudpickle  # noqa: E402  (installed with distributed)

from error_bounds import RecordView, check_same_path  # noqa: E402
from paths import InputError, fit_path  # noqa: E402
from paths.cli import app  # noqa: E402
from paths.engines.dask_cluster import dask_path  # noqa: E402
from paths.engines.stream import stream_path  # noqa: E402

cloudpickle.register_pickle_by_value(sys.modules[__name__])  # workers need the helpers below

FIELDS = ["lambdas", "coef", "intercept", "df", "train_mse", "gcv", "loo_mse", "test_mse",
          "singular_values"]


def problem(n=4000, p=8, seed=0):
    """Synthetic: shifted, unequally scaled Gaussian columns and a linear signal."""
    rng = np.random.default_rng(seed)
    X = rng.standard_normal((n, p)) * np.geomspace(0.5, 3.0, p) + rng.uniform(-4, 4, p)
    y = 1.0 + X @ rng.standard_normal(p) + rng.standard_normal(n)
    return X, y


def relerr(a, b):
    a, b = np.asarray(a, float), np.asarray(b, float)
    return float(np.max(np.abs(a - b)) / np.max(np.abs(b)))


@pytest.fixture(scope="module")
def cluster():
    cl = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  host="127.0.0.1", dashboard_address=None,
                                  silence_logs=50, worker_class=distributed.Nanny)
    client = distributed.Client(cl, set_as_default=False)
    yield cl, client
    client.close()
    cl.close()


@pytest.mark.parametrize("accurate", [False, True])
def test_cluster_equals_in_memory_engine(cluster, accurate):
    """Gram accumulation over row blocks (and dask.array.linalg.tsqr with
    accurate=True) on two worker processes equals ``fit_path``: every field within the Gram
    route's bounds (error_bounds.check_same_path)."""
    cl, _ = cluster
    X, y = problem()
    Xt, yt = problem(n=300, seed=1)
    ref = fit_path(X, y, X_test=Xt, y_test=yt)
    res = dask_path(da.from_array(X, chunks=(500, 8)), y=y, test=Xt, y_test=yt,
                    accurate=accurate, scheduler=cl.scheduler_address)
    assert res.engine == "dask" and res.solver.startswith("dask-")
    check_same_path(res, ref, X, y, FIELDS, Xt=Xt, yt=yt)  # bound: docstring


def test_parquet_and_npy_stack_equal_streaming(cluster, tmp_path):
    """A Parquet folder read through dask.dataframe and a stack of .npy files
    give the streaming engine's result on the same numbers (1e-12), with
    5-fold CV equal too."""
    cl, _ = cluster
    X, y = problem(n=3000, p=5, seed=2)
    names = [f"c{j}" for j in range(5)]
    d = tmp_path / "parts"
    d.mkdir()
    for i, (s, e) in enumerate([(0, 1200), (1200, 3000)]):
        pq.write_table(pa.table({**{nm: X[s:e, j] for j, nm in enumerate(names)},
                                 "target": y[s:e]}), d / f"part{i}.parquet")
        np.save(tmp_path / f"stack{i}.npy", np.column_stack([X[s:e], y[s:e]]))
    ref = stream_path(d, target="target", n_folds=5)
    a = dask_path(d, target="target", n_folds=5, scheduler=cl.scheduler_address)
    b = dask_path(str(tmp_path / "stack*.npy"), n_folds=5, scheduler=cl.scheduler_address)
    assert a.feature_names == names
    # bound: both engines within the Gram route's bounds of one problem (check_same_path;
    # folds: contiguous blocks, as the engines assign them without a seed)
    labels = np.arange(len(y)) * 5 // len(y)
    for res in (a, b):
        check_same_path(res, ref, X, y, ("coef", "gcv", "loo_mse", "cv_mse"), cv_labels=labels)


def _slow_block(i, rows, p):
    """Block i of a synthetic design, deterministic in i, produced slowly (a
    stand-in for reading from a slow store), so that a worker can be killed
    while the computation runs."""
    time.sleep(0.1)
    return _block(i, rows, p)


def _block(i, rows, p):
    rng = np.random.default_rng(1000 + i)
    X = rng.standard_normal((rows, p)) + 2.0
    y = X @ np.linspace(-1, 1, p) + rng.standard_normal(rows)
    return np.column_stack([X, y])


def test_killed_worker_result_unchanged(cluster):
    """A worker process killed (SIGKILL) mid-computation: the scheduler
    recomputes its tasks on the other workers (and the nanny restarts it), and
    the result equals the streaming engine on the same blocks (check_same_path)."""
    import dask

    cl, client = cluster
    nb, rows, p = 30, 200, 4
    parts = [da.from_delayed(dask.delayed(_slow_block, pure=True)(i, rows, p),
                             shape=(rows, p + 1), dtype=float) for i in range(nb)]
    W = da.concatenate(parts)
    full = np.vstack([_block(i, rows, p) for i in range(nb)])
    ref = stream_path(full[:, :p], y=full[:, p], chunk_rows=rows)
    client.wait_for_workers(2, timeout=30)
    pids_before = client.run(os.getpid)
    box = {}

    def run():
        try:
            box["res"] = dask_path(W[:, :p], y=W[:, p], scheduler=cl.scheduler_address)
        except Exception as exc:  # noqa: BLE001 - reported below
            box["err"] = exc

    th = threading.Thread(target=run)
    th.start()
    for _ in range(200):  # wait until tasks are running somewhere
        if any(client.processing().values()):
            break
        time.sleep(0.05)
    victim_addr, victim_pid = sorted(pids_before.items())[0]
    was_running = th.is_alive()
    os.kill(victim_pid, signal.SIGKILL)
    th.join(timeout=120)
    assert was_running, "the computation finished before the worker was killed"
    assert not th.is_alive()
    if "err" in box:  # a clean one-line report is the other accepted outcome
        assert isinstance(box["err"], InputError) and "\n" not in str(box["err"])
        return
    res = box["res"]
    # bound: the same problem on another set of workers (check_same_path)
    check_same_path(res, ref, full[:, :p], full[:, p], ("coef", "gcv", "loo_mse", "singular_values"))
    assert victim_addr not in client.scheduler_info()["workers"] or \
        victim_pid not in client.run(os.getpid).values()


def _free_port():
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def test_unreachable_scheduler_clear_error():
    """A scheduler address nobody listens on: one-line InputError naming the
    address and the timeout (issue 7); the CLI exits with status 2."""
    addr = f"tcp://127.0.0.1:{_free_port()}"
    X, y = problem(n=100, p=2)
    with pytest.raises(InputError, match=r"could not connect to the dask scheduler at "
                                         rf"{addr} within 1.5 s") as ei:
        dask_path(X, y=y, scheduler=addr, timeout=1.5)
    assert "\n" not in str(ei.value)


def test_cli_dask_engine_through_cluster(cluster, tmp_path):
    """``paths explore DATA --engine dask --scheduler ADDR`` writes the same
    path.csv numbers as the in-memory engine (1e-10 relative), and a dead
    address exits with status 2 and one line."""
    cl, _ = cluster
    X, y = problem(n=1500, p=3, seed=4)
    names = ["a", "b", "c"]
    pq.write_table(pa.table({"a": X[:, 0], "b": X[:, 1], "c": X[:, 2], "y": y}),
                   tmp_path / "d.parquet")
    runner = CliRunner()
    out = tmp_path / "out"
    r = runner.invoke(app, ["explore", str(tmp_path / "d.parquet"), "--target", "y",
                            "--engine", "dask", "--scheduler", cl.scheduler_address,
                            "--out", str(out)])
    assert r.exit_code == 0, r.output
    import json

    summ = json.loads((out / "summary.json").read_text())
    ref = fit_path(X, y)
    assert summ["engine"]["engine"] == "dask"
    # bound: check_same_path on the record (JSON floats round-trip)
    check_same_path(RecordView(summ), ref, X, y, ("lambdas", "gcv", "loo_mse"))
    addr = f"tcp://127.0.0.1:{_free_port()}"
    r = runner.invoke(app, ["explore", str(tmp_path / "d.parquet"), "--target", "y",
                            "--engine", "dask", "--scheduler", addr, "--scheduler-timeout", "1",
                            "--out", str(tmp_path / "out2")])
    assert r.exit_code == 2
    assert "could not connect" in r.output and names


def test_csv_later_block_non_numeric_is_input_error(tmp_path, monkeypatch):
    """A CSV file is split into byte blocks read in parallel under the in-memory
    reader's rules (paths.data.tables.text_blocks); a text value in a later block
    is one line naming the column, the value and its file line (issue 7), not an
    internal error."""
    import paths.data.tables as tables

    from paths.engines.dask_cluster import dask_path

    f = tmp_path / "d.csv"
    lines = ["a,y"] + [f"{i},{i % 7}" for i in range(20000)]
    lines[15000] = "zz,1"
    f.write_text("\n".join(lines) + "\n")
    orig = tables.text_blocks
    monkeypatch.setattr(tables, "text_blocks", lambda layout: orig(layout, block_bytes=50_000))
    assert len(tables.text_blocks(tables.text_layout(f))) > 1  # several blocks
    with pytest.raises(InputError, match="non-numeric value 'zz' on line 15001") as ei:
        dask_path(str(f), target="y", lambdas=[1.0])
    assert "\n" not in str(ei.value)
