"""Issue 12 items 10-12: messages that mislead, and refusals that came too late.

Contract (house rules, a fact of the trade): one line naming the problem and the fix,
``InputError`` in Python, exit status 2 on the command line.
"""
from __future__ import annotations

import socket
import threading

import numpy as np
import pytest
from typer.testing import CliRunner

import paths.data.validation as validation
from paths import InputError, fit_path
from paths.cli import app
from paths.data.tables import load_dataset
from paths.selection.cv import make_folds

runner = CliRunner()


def test_unbalanced_groups_are_named_not_blamed_on_the_fold_count():
    """39 rows in one group and 1 in the other: no number of folds helps (it used to say
    "use more folds")."""
    groups = np.array(["a"] * 39 + ["b"])
    with pytest.raises(InputError) as info:
        make_folds(40, 2, groups=groups)
    msg = str(info.value)
    assert "unbalanced" in msg and "more folds" not in msg and "\n" not in msg


def test_no_numpy_scalar_reprs_in_messages():
    """``np.float64(3.0)`` (NumPy >= 2 repr) never appears in a message."""
    X = np.random.default_rng(0).standard_normal((6, 2))
    with pytest.raises(InputError) as info:
        fit_path(X, np.full(6, 3.0))
    assert "np.float64" not in str(info.value) and "every value 3" in str(info.value)
    with pytest.raises(InputError) as info:
        fit_path(X, X[:, 0], lambdas=[np.float64(-1.0)])
    assert "np.float64" not in str(info.value)


def test_wide_text_file_refused_before_reading(tmp_path, monkeypatch):
    """The rows x columns of a text file are estimated from its header and line count and
    compared with the memory available before pandas reads it (a 1 000 000-column header
    took 3.4 GB and 87 s before its error); the available memory is set small here."""
    f = tmp_path / "wide.csv"
    names = [f"c{j}" for j in range(2000)] + ["y"]
    f.write_text(",".join(names) + "\n" + ",".join(["1"] * len(names)) + "\n")
    monkeypatch.setattr(validation, "available_memory", lambda: 1_000_000)
    with pytest.raises(InputError) as info:
        load_dataset(f, "y")
    msg = str(info.value)
    assert "2001 columns" in msg and "engine='stream'" in msg and "\n" not in msg


def test_non_dask_service_is_named(tmp_path):
    """A service that is not a dask scheduler (here: a fake HTTP server) used to give
    "Unable to allocate 2.82 EiB" and a traceback."""
    pytest.importorskip("distributed")
    srv = socket.socket()
    srv.bind(("127.0.0.1", 0))
    srv.listen(4)
    port = srv.getsockname()[1]
    stop = threading.Event()

    def serve():
        srv.settimeout(0.2)
        while not stop.is_set():
            try:
                conn, _ = srv.accept()
            except OSError:
                continue
            conn.sendall(b"HTTP/1.1 200 OK\r\nContent-Length: 5\r\n\r\nhello" * 20)
            conn.close()

    t = threading.Thread(target=serve, daemon=True)
    t.start()
    data = tmp_path / "d.csv"
    rng = np.random.default_rng(1)
    rows = rng.standard_normal((10, 3))
    data.write_text("a,b,y\n" + "\n".join(",".join(map(str, r)) for r in rows) + "\n")
    try:
        res = runner.invoke(app, ["explore", str(data), "-t", "y", "--engine", "dask",
                                  "--scheduler", f"tcp://127.0.0.1:{port}",
                                  "--scheduler-timeout", "5", "--out", str(tmp_path / "o")])
    finally:
        stop.set()
        t.join(timeout=5)
        srv.close()
    assert res.exit_code == 2, res.output
    err = res.stderr.strip()
    assert "\n" not in err and ("not answer as a dask scheduler" in err
                                or "could not connect" in err), err
    assert not (tmp_path / "o").exists()
