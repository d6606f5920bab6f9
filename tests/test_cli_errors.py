"""The error catalogue (docs/errors.md) through the command line.

Every user error: exit status 2, exactly one line on stderr naming the file /
column / line and the fix, no traceback.  Internal failures: exit status 1 with
a hint to report them; ``paths --debug`` shows the traceback.  These are the
house rules of the project (common practice for command-line tools, no source;
exit status 2 for usage errors follows the BSD ``sysexits``/getopt convention
from memory).  Driven through ``typer.testing.CliRunner`` on ``paths.cli.app``.
"""
from __future__ import annotations

import hashlib
import os
import subprocess
import sys

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from typer.testing import CliRunner

from paths import InputError
from paths.cli import app

runner = CliRunner()
RNG = np.random.default_rng(11)


def _good_rows(n=12, p=3):
    X = RNG.standard_normal((n, p))
    y = X @ np.arange(1, p + 1) + 0.1 * RNG.standard_normal(n)
    return X, y


def _csv(path, X, y, names=None, target="y"):
    names = names or [f"f{j}" for j in range(X.shape[1])]
    lines = [",".join(names + [target])]
    lines += [",".join(repr(float(v)) for v in (*row, t)) for row, t in zip(X, y)]
    path.write_text("\n".join(lines) + "\n")
    return path


def _user_error(args, needles=()):
    res = runner.invoke(app, [str(a) for a in args])
    assert res.exit_code == 2, (res.exit_code, res.output)
    err = res.stderr.strip()
    assert err.startswith("error: "), err
    assert "\n" not in err, err
    assert "Traceback" not in res.output
    for needle in needles:
        assert needle in err, (needle, err)
    return err


@pytest.fixture()
def good(tmp_path):
    X, y = _good_rows()
    return _csv(tmp_path / "good.csv", X, y)


CASES = {
    # name: (file bytes, extra args, needles in the message)
    "empty file": (b"", [], ["empty"]),
    "header only": (b"f0,f1,y\n", [], ["no data rows"]),
    "one row": (b"f0,f1,y\n1,2,3\n", [], ["1 data row", "at least 2"]),
    "non-UTF-8 bytes": (b"f0,f1,y\n1,2,3\n4,5,\xe96\n", [], ["not UTF-8", "line 3"]),
    "ragged rows": (b"f0,f1,y\n1,2,3\n4,5\n7,8,9\n", [], ["line 3 has 2 fields"]),
    "thousands separators": (b'f0,f1,y\n"1,200",2,3\n"3,400",5,6\n"2,000",1,1\n', [],
                             ["'f0'", "thousands separators"]),
    "decimal commas": (b"f0;f1;y\n1,5;2,1;3\n3,25;5,5;6\n2,0;1,5;1\n", [],
                       ["'f0'", "decimal comma"]),
    "infinite value": (b"f0,f1,y\n1,2,3\n4,inf,6\n7,8,10\n", [], ["'f1'", "infinite", "line 3"]),
    "missing value": (b"f0,f1,y\n1,2,3\n4,NA,6\n7,8,10\n", [], ["'f1' (1, first on line 3)",
                                                               "--drop-missing"]),
    "NaN in target": (b"f0,f1,y\n1,2,3\n4,5,nan\n7,8,10\n", [], ["'y'"]),
    "target constant": (b"f0,f1,y\n1,2,3\n4,5,3\n7,8,3\n", [], ["'y'", "constant"]),
    "target missing (not a column)": (b"f0,f1,z\n1,2,3\n4,5,6\n7,8,9\n", [],
                                      ["'y'", "not found"]),
    "column of all NaN": (b"f0,f1,y\n1,,3\n4,,6\n7,,10\n", [], ["'f1'", "entirely missing"]),
    "p = 0 after exclusions": (b"f0,f1,y\n1,2,3\n4,5,6\n7,8,10\n", ["--exclude", "f*"],
                               ["p = 0"]),
    "categorical refused": (b"f0,site,y\n1,a,3\n4,b,6\n7,a,10\n", [], ["'site'",
                                                                       "--encode onehot"]),
    "target missing under --drop-missing columns": (
        b"f0,f1,y\n1,2,3\n4,5,\n7,8,10\n", ["--drop-missing", "columns"], ["--drop-missing rows"]),
}


@pytest.mark.parametrize("case", list(CASES))
def test_bad_data_file(tmp_path, case):
    content, extra, needles = CASES[case]
    f = tmp_path / "data.csv"
    f.write_bytes(content)
    err = _user_error(["explore", f, "--target", "y", "--out", tmp_path / "o", *extra], needles)
    assert "data.csv" in err


def test_file_does_not_exist(tmp_path):
    _user_error(["explore", tmp_path / "absent.csv", "-t", "y", "--out", tmp_path / "o"],
                ["absent.csv", "no such file"])


def test_directory_given_as_file(tmp_path):
    _user_error(["explore", tmp_path, "-t", "y", "--out", tmp_path / "o"], ["folder"])


def test_unwritable_out(tmp_path, good):
    """--out below a regular file cannot be created (works as root too)."""
    blocker = tmp_path / "blocker"
    blocker.write_text("x")
    _user_error(["explore", good, "-t", "y", "--out", blocker / "sub"], ["--out"])
    _user_error(["explore", good, "-t", "y", "--out", blocker], ["not a folder"])


def test_unwritable_out_permissions(tmp_path, good):
    """A read-only folder is refused (skipped as root, who may write anywhere)."""
    if os.geteuid() == 0:
        pytest.skip("root ignores folder permissions")
    ro = tmp_path / "ro"
    ro.mkdir()
    ro.chmod(0o500)
    try:
        _user_error(["explore", good, "-t", "y", "--out", ro / "o"], ["writable"])
    finally:
        ro.chmod(0o700)


def test_non_empty_out_refused_without_force(tmp_path, good):
    out = tmp_path / "o"
    out.mkdir()
    (out / "keep.txt").write_text("mine")
    _user_error(["explore", good, "-t", "y", "--out", out], ["--force"])
    assert (out / "keep.txt").read_text() == "mine"


def test_output_never_overwrites_input(tmp_path):
    """Even with --force, an input named like an output file is not overwritten."""
    X, y = _good_rows()
    f = _csv(tmp_path / "path.csv", X, y)
    before = hashlib.sha256(f.read_bytes()).hexdigest()
    _user_error(["explore", f, "-t", "y", "--out", tmp_path, "--force"], ["overwrite the input"])
    assert hashlib.sha256(f.read_bytes()).hexdigest() == before


def test_parquet_nested_type(tmp_path):
    f = tmp_path / "nested.parquet"
    pq.write_table(pa.table({"f0": [1.0, 2.0, 3.0], "y": [1.0, 3.0, 2.0],
                             "lst": pa.array([[1], [2, 3], []])}), f)
    _user_error(["explore", f, "-t", "y", "--out", tmp_path / "o"], ["'lst'", "nested"])


def test_test_file_missing_columns(tmp_path, good):
    X, y = _good_rows(5, 2)
    t = _csv(tmp_path / "test.csv", X, y, names=["f0", "f2"])
    _user_error(["explore", good, "-t", "y", "--test", t, "--out", tmp_path / "o"],
                ["test.csv", "'f1'"])


def test_bad_sep(tmp_path, good):
    _user_error(["explore", good, "-t", "y", "--sep", "::", "--out", tmp_path / "o"], ["--sep"])


def test_fewer_rows_than_the_requested_cv(tmp_path):
    """K-fold CV with more folds than the rows allow is refused at the boundary, naming the
    file and the valid range of --cv."""
    X, y = _good_rows(4, 2)
    f = _csv(tmp_path / "small.csv", X, y)
    _user_error(["explore", f, "-t", "y", "--n-folds", "10", "--out", tmp_path / "o"],
                ["small.csv", "10-fold", "--n-folds between 2 and 4"])
    assert not (tmp_path / "o").exists() or not any((tmp_path / "o").iterdir())



# ------------------------------------------- library errors name parameters, the CLI flags


def _python_error(call):
    with pytest.raises(InputError) as info:
        call()
    msg = str(info.value)
    assert "\n" not in msg and "--" not in msg, msg  # a parameter, never a flag
    return msg


def test_sweep_errors_name_parameters_and_the_cli_prints_flags(tmp_path):
    """One error, two spellings: the Python call names the parameter as Python passes it
    (``random_features=N``, ``repeats=3``, ``snr=1``), the command line prints the same
    message with the command's flags (``paths/cli/app.py:as_flags``)."""
    from paths.threshold.plan import plan
    from paths.threshold.simulate import make_truth, simulate
    from paths.threshold.sweep import threshold_sweep

    X, y = _good_rows(40, 5)
    f = _csv(tmp_path / "d.csv", X, y)
    out = ["--out", tmp_path / "o"]
    # too few features for the feature-wise sweep: more random features, or a larger holdout
    msg = _python_error(lambda: threshold_sweep(X[:30], y[:30], X[30:], y[30:]))
    assert "(random_features=N, N >= 30)" in msg and "(holdout=)" in msg
    err = _user_error(["threshold", f, "-t", "y", *out],
                      ["(--random-features N, N >= 30)", "(--holdout)"])
    assert "random_features" not in err and "holdout=" not in err
    # repeats that repeat nothing in the given order
    msg = _python_error(lambda: threshold_sweep(X[:30], y[:30], X[30:], y[30:], repeats=3,
                                                over="samples"))
    assert "repeats=3 repeats nothing" in msg and "use order='random' or repeats=1" in msg
    _user_error(["threshold", f, "-t", "y", "--repeats", "3", "--over", "samples", *out],
                ["--repeats 3 repeats nothing", "use --order random or --repeats 1"])
    # the SNR of a simulation; too few simulated features; an SNR and a signal variance
    assert "(pass e.g. snr=1)" in _python_error(lambda: make_truth(5, snr=0.0))
    _user_error(["simulate", "--snr", "0", *out], ["(pass e.g. --snr 1)"])
    assert "(n_features=) or fewer training rows (n_train=)" in _python_error(
        lambda: simulate(100, make_truth(20)))  # the simulation's own fix, not the sweep's
    _user_error(["simulate", "--n-train", "100", "--n-features", "20", *out],
                ["(--n-features) or fewer training rows (--n-train)"])
    assert "either snr= or signal_variance=" in _python_error(
        lambda: plan(10, snr=1.0, signal_variance=2.0))
    _user_error(["plan", "--n-features", "10", "--snr", "1", "--signal-variance", "2", *out],
                ["either --snr or --signal-variance"])


def test_fit_errors_name_parameters_and_the_cli_prints_flags(tmp_path):
    """The same for explore: a library name that differs from the command's
    (``cross_validate(scaling=)`` is ``--cv-scaling``), the wide engine's options, and
    the output folder (``OutputOptions(out_dir=, force=)`` is ``--out``, ``--force``)."""
    from paths.engines.wide import wide_path
    from paths.selection.cv import cross_validate
    from paths.workflows.options import OutputOptions

    X, y = _good_rows(40, 5)
    w = 1.0 + np.arange(40) % 3
    f = _csv(tmp_path / "w.csv", np.column_stack([X, w]), y, names=["f0", "f1", "f2", "f3",
                                                                     "f4", "w"])
    out = ["--out", tmp_path / "o"]
    msg = _python_error(lambda: cross_validate(X, y, n_folds=3, scaling="per-fold",
                                               sample_weight=w))
    assert msg.endswith("use scaling='global'"), msg
    err = _user_error(["explore", f, "-t", "y", "--weights", "w", "--n-folds", "3",
                       "--cv-scaling", "per-fold", *out])
    assert err.endswith("use --cv-scaling global"), err
    wide = _csv(tmp_path / "wide.csv", *_good_rows(10, 20))
    assert "either accurate=True or rank=, not both" in _python_error(
        lambda: wide_path(X[:4].T, X[0], rank=2, accurate=True))
    _user_error(["explore", wide, "-t", "y", "--rank", "2", "--accurate", *out],
                ["pass either --accurate or --rank, not both"])
    full = tmp_path / "full"
    full.mkdir()
    (full / "keep.txt").write_text("mine")
    msg = _python_error(lambda: OutputOptions(out_dir=full).folder().__enter__())
    assert "choose another out_dir= or pass force=True" in msg
    _user_error(["explore", f, "-t", "y", "--out", full], ["choose another --out or pass --force"])


def test_predict_errors_name_parameters_and_the_cli_prints_flags(tmp_path):
    """``predict_file(lam=, rule=, intervals=, out=, force=)`` is ``paths predict --lambda,
    --rule, --intervals, --out, --force``: the same message in each spelling."""
    from paths.workflows.predict import predict_file

    f = _csv(tmp_path / "d.csv", *_good_rows(40, 5))
    res = runner.invoke(app, ["explore", str(f), "-t", "y", "--out", str(tmp_path / "fit"),
                              "--format", "none", "--no-report"])
    assert res.exit_code == 0, res.output
    fit, dest = tmp_path / "fit" / "fit.npz", tmp_path / "p.csv"
    cases = [({"lam": 1.0, "rule": "gcv"}, ["--lambda", "1", "--rule", "gcv"],
              "pass either lam= or rule=, not both", "pass either --lambda or --rule, not both"),
             ({"intervals": 1.5}, ["--intervals", "1.5"],
              "intervals= is a level in (0, 1), e.g. intervals=0.9",
              "--intervals is a level in (0, 1), e.g. --intervals 0.9")]
    for kw, flags, py, cli in cases:
        assert py in _python_error(lambda: predict_file(fit, f, out=dest, **kw))
        _user_error(["predict", fit, f, "--out", dest, *flags], [cli])
    dest.write_text("mine")
    assert "choose another out= or pass force=True" in _python_error(
        lambda: predict_file(fit, f, out=dest))
    _user_error(["predict", fit, f, "--out", dest], ["choose another --out or pass --force"])


# --------------------------------------------------------------- internal failures


def test_internal_error_exit_1_with_hint(tmp_path, good, monkeypatch):
    """A bug (any non-InputError exception) exits 1 with one line asking for a report."""
    import paths.core.path

    def broken(*a, **k):
        raise RuntimeError("synthetic failure")

    monkeypatch.setattr(paths.core.path, "fit_path", broken)
    res = runner.invoke(app, ["explore", str(good), "-t", "y", "--out", str(tmp_path / "o")])
    assert res.exit_code == 1
    err = res.stderr.strip()
    assert "\n" not in err and "bug" in err and "--debug" in err and "Traceback" not in res.output


def test_debug_shows_traceback(tmp_path):
    """``paths --debug`` lets the traceback through (a real process, to see stderr)."""
    f = tmp_path / "empty.csv"
    f.write_bytes(b"")
    code = "from paths.cli import main; main()"
    proc = subprocess.run([sys.executable, "-c", code, "--debug", "explore", str(f), "-t", "y",
                           "--out", str(tmp_path / "o")], capture_output=True, text=True,
                          timeout=120)
    assert proc.returncode != 0
    assert "Traceback" in proc.stderr and "InputError" in proc.stderr
    proc = subprocess.run([sys.executable, "-c", code, "explore", str(f), "-t", "y",
                           "--out", str(tmp_path / "o")], capture_output=True, text=True,
                          timeout=120)
    assert proc.returncode == 2 and "Traceback" not in proc.stderr
    assert len(proc.stderr.strip().splitlines()) == 1


def test_ctrl_c_during_write_leaves_no_partial_file(tmp_path, good, monkeypatch):
    """KeyboardInterrupt while a file is being written: exit 130; the outputs were staged,
    so nothing lands under a final name, no temporary is left and the folder this run
    created is removed again (issue 12 item 7: a folder holds one run's complete set)."""
    import paths.data.output

    real = paths.data.output.os.replace
    calls = {"n": 0}

    def interrupted(src, dst):
        calls["n"] += 1
        if calls["n"] == 2:  # path.csv staged, then Ctrl-C before coefficients.csv
            raise KeyboardInterrupt
        return real(src, dst)

    monkeypatch.setattr(paths.data.output.os, "replace", interrupted)
    out = tmp_path / "o"
    res = runner.invoke(app, ["explore", str(good), "-t", "y", "--out", str(out)])
    assert res.exit_code == 130
    assert not out.exists()
    assert not [p.name for p in tmp_path.iterdir() if p.name.startswith(".")]
