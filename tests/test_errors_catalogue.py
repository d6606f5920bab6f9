"""The catalogue of bad inputs in docs/errors.md, each entry run as a test.

Every row of the catalogue table (``| E01 | what | `message` |``) names a case of
:data:`CASES` below; the test builds the bad input in a fresh folder, runs it (the
command line through ``typer.testing.CliRunner``, or the Python API), and checks the
house rules (a fact of the trade, no source): exit status 2 and exactly one line
``error: ...`` on stderr (``InputError`` with a one-line message in Python), with the
documented message, ``…`` standing for a part that depends on the machine (memory
sizes).  A catalogue row without a case, or a case without a row, fails the suite.
"""
from __future__ import annotations

import json
import os
import re
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from typer.testing import CliRunner

from paths import InputError
from paths.cli import app

DOC = Path(__file__).resolve().parent.parent / "docs" / "errors.md"
ROW = re.compile(r"^\| (E\d{2,3}) \| (.+?) \| `(.+)` \|$")
runner = CliRunner()


def _rows(n=12, p=3, seed=5):
    rng = np.random.default_rng(seed)
    X = rng.standard_normal((n, p))
    y = X @ np.arange(1, p + 1) + 0.1 * rng.standard_normal(n)
    return X, y


def _good(p=3, n=12, names=None):
    X, y = _rows(n, p)
    names = names or [f"f{j}" for j in range(p)]
    lines = [",".join([*names, "y"])] + [",".join(repr(float(v)) for v in (*r, t))
                                         for r, t in zip(X, y)]
    return "\n".join(lines) + "\n"


GOOD = _good()
WIDE = _good(p=40, n=30)


def _text(name, body):
    def make(d):
        (d / name).write_text(body)
    return make


def _bytes(name, body):
    def make(d):
        (d / name).write_bytes(body)
    return make


def _npy(name, arr, **kw):
    def make(d):
        np.save(d / name, arr, **kw)
    return make


def _many(*makers):
    def make(d):
        for m in makers:
            m(d)
    return make


def _parquet(name, table):
    def make(d):
        pq.write_table(table, d / name)
    return make


def _symlink(d):
    os.symlink("nowhere.csv", d / "link.csv")


def _fifo(d):
    os.mkfifo(d / "pipe.csv")


def _folder(d):
    (d / "runs").mkdir()


def _nonempty_out(d):
    (d / "good.csv").write_text(GOOD)
    (d / "runs").mkdir()
    (d / "runs" / "old.txt").write_text("x")


def _out_file(d):
    (d / "good.csv").write_text(GOOD)
    (d / "results").write_text("x")


def _truncated_npy(d):
    np.save(d / "t.npy", np.ones((10, 3)))
    raw = (d / "t.npy").read_bytes()
    (d / "t.npy").write_bytes(raw[:-40])


def _case(name, body):
    return _text(name, body)


def _api(fn):
    return ("api", fn)


def _fit(*args, **kw):
    from paths import fit_path

    def run(d):
        fit_path(*args, **kw)
    return run


X12, Y12 = _rows()
CLI = "cli"
#: id -> (kind, make files, argv or callable)
CASES = {
    "E01": (CLI, None, ["explore", "data.csv", "-t", "y"]),
    "E02": (CLI, _folder, ["explore", "runs", "-t", "y"]),
    "E03": (CLI, _text("data.csv", ""), ["explore", "data.csv", "-t", "y"]),
    "E04": (CLI, _text("data.csv", "a,b,y\n"), ["explore", "data.csv", "-t", "y"]),
    "E05": (CLI, _text("data.csv", "a,y\n1,2\n"), ["explore", "data.csv", "-t", "y"]),
    "E06": (CLI, _bytes("data.csv", b"a,y\n1,2\ncaf\xe9,3\n"), ["explore", "data.csv", "-t", "y"]),
    "E07": (CLI, _bytes("data.csv", b"a,y\x00\n1,2\n"), ["explore", "data.csv", "-t", "y"]),
    "E08": (CLI, _text("data.csv", "a,b,y\n1,2,3\n4,5\n6,7,8\n"),
            ["explore", "data.csv", "-t", "y"]),
    "E09": (CLI, _text("data.csv", "a,b,y\n1,2,3\n3,1,200,0.5\n6,7,8\n"),
            ["explore", "data.csv", "-t", "y"]),
    "E10": (CLI, _text("data.csv", 'a,y\n"1,200",3\n"2,300",4\n"3,100",5\n'),
            ["explore", "data.csv", "-t", "y"]),
    "E11": (CLI, _text("data.csv", "a;y\n1,5;3\n2,5;4\n3,25;5\n"),
            ["explore", "data.csv", "-t", "y"]),
    "E12": (CLI, _text("data.csv", "a,a,y\n1,2,3\n4,5,6\n7,8,1\n"),
            ["explore", "data.csv", "-t", "y"]),
    "E13": (CLI, _text("data.csv", "a,b,y\n1,2,3\n4,,6\n7,8,1\n"),
            ["explore", "data.csv", "-t", "y"]),
    "E14": (CLI, _text("data.csv", "a,b,y\n1,,3\n4,,6\n7,,1\n"),
            ["explore", "data.csv", "-t", "y"]),
    "E15": (CLI, _text("data.csv", "a,b,y\n1,2,3\n4,inf,6\n7,8,1\n"),
            ["explore", "data.csv", "-t", "y"]),
    "E16": (CLI, _text("data.csv", GOOD), ["explore", "data.csv", "-t", "z"]),
    "E17": (CLI, _text("data.csv", "a,y\n1,2\n2,x\n3,4\n"), ["explore", "data.csv", "-t", "y"]),
    "E18": (CLI, _text("data.csv", "a,y\n1,3\n2,3\n3,3\n"), ["explore", "data.csv", "-t", "y"]),
    "E19": (CLI, _text("data.csv", "a,site,y\n1,north,3\n2,south,4\n3,north,1\n"),
            ["explore", "data.csv", "-t", "y"]),
    "E20": (CLI, _text("data.csv", GOOD), ["explore", "data.csv", "-t", "y", "--exclude", "f9"]),
    "E21": (CLI, _text("data.csv", GOOD),
            ["explore", "data.csv", "-t", "y", "--exclude", "f0,f1,f2"]),
    "E22": (CLI, _text("data.csv", "a,b,y\n1_5,2,3\n2,3,4\n3,1,2\n"),
            ["explore", "data.csv", "-t", "y"]),
    "E23": (CLI, _text("data.csv", "a,y\n1,2\n2,3\n3,1_000\n"), ["explore", "data.csv", "-t", "y"]),
    "E24": (CLI, _text("data.csv", "a,b,y\n1+2j,2,3\n2,3,4\n3,1,2\n"),
            ["explore", "data.csv", "-t", "y"]),
    "E25": (CLI, _text("data.csv", "a,y\n1,2\n2,3\n3,\u0663\n"), ["explore", "data.csv", "-t", "y"]),
    "E26": (CLI, _symlink, ["explore", "link.csv", "-t", "y"]),
    "E27": (CLI, _fifo, ["explore", "pipe.csv", "-t", "y"]),
    "E28": (CLI, _fifo, ["explore", "pipe.csv", "-t", "y", "--engine", "stream"]),
    "E29": (CLI, _npy("v.npy", np.arange(5.0)), ["explore", "v.npy", "-t", "y"]),
    "E30": (CLI, _npy("o.npy", np.array([{"a": 1}, None], dtype=object), allow_pickle=True),
            ["explore", "o.npy", "-t", "x1"]),
    "E31": (CLI, _truncated_npy, ["explore", "t.npy", "-t", "x2"]),
    "E32": (CLI, _npy("c.npy", np.ones((4, 2)) + 1j), ["explore", "c.npy", "-t", "x1"]),
    "E33": (CLI, lambda d: np.savez(d / "d.npz", a=np.ones(4), y=np.ones(5)),
            ["explore", "d.npz", "-t", "y"]),
    "E34": (CLI, _parquet("t.parquet", pa.table({"tags": pa.array([[1], [2, 3], [4]]),
                                                 "y": [1.0, 2.0, 3.0]})),
            ["explore", "t.parquet", "-t", "y"]),
    "E35": (CLI, _bytes("t.parquet", b"PAR1 not really parquet"),
            ["explore", "t.parquet", "-t", "y"]),
    "E36": (CLI, _parquet("b.parquet", pa.table({"b": pa.array([True, None, False, True]),
                                                 "a": [1.0, 2.0, 3.0, 4.0],
                                                 "y": [1.0, 2.0, 4.0, 3.0]})),
            ["explore", "b.parquet", "-t", "y"]),
    "E37": (CLI, _many(_text("good.csv", GOOD), _text("test.csv", "f0,f2,y\n1,2,3\n2,3,4\n")),
            ["explore", "good.csv", "-t", "y", "--test", "test.csv"]),
    "E38": (CLI, _many(_text("good.csv", GOOD), _text("test.csv", GOOD)),
            ["explore", "good.csv", "-t", "y", "--test", "test.csv", "--holdout", "0.2"]),
    "E39": (CLI, _text("good.csv", GOOD), ["explore", "good.csv", "-t", "y", "--sep", "::"]),
    "E40": (CLI, _out_file, ["explore", "good.csv", "-t", "y", "--out", "results"]),
    "E41": (CLI, _nonempty_out, ["explore", "good.csv", "-t", "y", "--out", "runs"]),
    "E42": (CLI, _text("report.md", GOOD),
            ["explore", "report.md", "-t", "y", "--out", ".", "--force", "--format", "svg"]),
    "E43": (CLI, _text("plan.csv", _good(n=30)),
            ["plan", "--pilot", "plan.csv", "-t", "y", "--out", ".", "--force"]),
    "E44": (CLI, _text("threshold.csv", WIDE),
            ["threshold", "threshold.csv", "-t", "y", "--out", ".", "--force", "--n-points", "4",
             "--no-report"]),
    "E45": ("locked", _text("good.csv", GOOD), ["explore", "good.csv", "-t", "y", "--out", "o"]),
    "E46": (CLI, _case("c.toml", '[case]\nname = "x/../../elsewhere"\n[data]\n'
                                 'generator = "isotropic"\n'), ["run", "c.toml"]),
    "E47": (CLI, _case("c.toml", "[case\nname = 1\n"), ["run", "c.toml"]),
    "E48": (CLI, _case("c.toml", '[case]\nname = "c"\n[model]\nx = 1\n'), ["run", "c.toml"]),
    "E49": (CLI, _case("c.toml", '[case]\nname = "c"\n[data]\ngenerator = "isotropic"\n'
                                 '[fit]\nn_lambdas = "many"\n'), ["run", "c.toml"]),
    "E50": (CLI, _case("c.toml", '[case]\nname = "c"\n[data]\ngenerator = "isotropic"\n'
                                 'params = { n_samples = "x" }\n'), ["run", "c.toml"]),
    "E51": (CLI, _case("c.toml", '[case]\nname = "c"\n[data]\ngenerator = "isotropic"\n'
                                 'params = { n_samples = 1000000000000, n_features = 100000 }\n'),
            ["run", "c.toml"]),
    "E52": (CLI, _case("c.toml", '[case]\nname = "c"\n[data]\ngenerator = "spectra"\n'),
            ["run", "c.toml"]),
    "E53": (CLI, _text("good.csv", GOOD),
            ["explore", "good.csv", "-t", "y", "--seed", "-1", "--holdout", "0.25"]),
    "E54": (CLI, _text("good.csv", GOOD),
            ["explore", "good.csv", "-t", "y", "--n-lambdas", "99999999999999999999"]),
    "E55": (CLI, _text("good.csv", GOOD), ["explore", "good.csv", "-t", "y", "--n-lambdas", "abc"]),
    "E56": (CLI, _text("good.csv", GOOD), ["explore", "good.csv", "-t", "y", "--bogus"]),
    "E57": (CLI, _text("good.csv", GOOD),
            ["explore", "good.csv", "-t", "y", "--engine", "dask", "--scheduler",
             "tcp://127.0.0.1:9", "--scheduler-timeout", "nan"]),
    "E58": (CLI, _text("good.csv", GOOD),
            ["explore", "good.csv", "-t", "y", "--engine", "dask", "--scheduler",
             "tcp://127.0.0.1:9", "--scheduler-timeout", "-1"]),
    "E59": (CLI, _text("good.csv", GOOD),
            ["explore", "good.csv", "-t", "y", "--engine", "dask", "--scheduler",
             "tcp://127.0.0.1:9", "--scheduler-timeout", "1e308"]),
    "E60": (CLI, _text("good.csv", GOOD),
            ["explore", "good.csv", "-t", "y", "--engine", "dask", "--scheduler", "not an address"]),
    "E61": (CLI, _text("good.csv", GOOD),
            ["explore", "good.csv", "-t", "y", "--engine", "dask", "--scheduler", "http://h:1"]),
    "E62": (CLI, _text("good.csv", GOOD),
            ["explore", "good.csv", "-t", "y", "--engine", "stream", "--scheduler",
             "tcp://127.0.0.1:9"]),
    "E63": (CLI, _text("good.csv", GOOD), ["explore", "good.csv", "-t", "y", "--accurate"]),
    "E64": (CLI, _text("good.csv", GOOD),
            ["explore", "good.csv", "-t", "y", "--chunk-rows", "1000"]),
    "E65": (CLI, _text("good.csv", GOOD),
            ["explore", "good.csv", "-t", "y", "--engine", "stream", "--chunk-rows", "0"]),
    "E66": (CLI, _text("good.csv", GOOD), ["explore", "good.csv", "-t", "y", "--groups", "y"]),
    "E67": (CLI, _text("data.csv", "a,y,g\n1,2,u\n2,3,u\n3,1,u\n4,5,u\n"),
            ["explore", "data.csv", "-t", "y", "--groups", "g"]),
    "E68": (CLI, _text("good.csv", GOOD), ["explore", "good.csv", "-t", "y", "--n-folds", "20"]),
    "E69": (CLI, _text("good.csv", GOOD), ["explore", "good.csv", "-t", "y", "--holdout", "1.5"]),
    "E70": (CLI, _text("good.csv", GOOD), ["explore", "good.csv", "-t", "y", "--repeats", "3"]),
    "E71": (CLI, _text("good.csv", GOOD), ["explore", "good.csv", "-t", "y", "--format", "tiff"]),
    "E72": (CLI, _text("good.csv", GOOD), ["explore", "good.csv", "-t", "y", "--figure-x", "n"]),
    "E73": (CLI, _text("w.csv", WIDE),
            ["threshold", "w.csv", "-t", "y", "--random-features", "100000000000"]),
    "E74": (CLI, None, ["simulate", "--n-features", "10000000"]),
    "E75": (CLI, None, ["simulate", "--n-train", "100000000000", "--n-features", "50"]),
    "E76": (CLI, None, ["simulate", "--seed", "-5"]),
    "E77": (CLI, None, ["plan", "--n-features", "10", "--snr", "nan"]),
    "E78": (CLI, None, ["plan", "--snr", "1"]),
    "E79": ("api", None, _fit(X12 + 1j, Y12)),
    "E80": ("api", None, _fit(X12, Y12, n_lambdas=2.5)),
    "E81": ("api", None, lambda d: __import__("paths").fit_path(
        __import__("scipy.sparse", fromlist=["csr_matrix"]).csr_matrix(X12), Y12)),
    "E82": ("api", None, _fit(np.ma.masked_array(X12, mask=np.eye(12, 3, dtype=bool)), Y12)),
    "E83": ("api", None, lambda d: __import__("paths").fit_path(
        __import__("pandas").DataFrame(X12, columns=["a", "a", "b"]), Y12)),
    "E84": ("api", None, _fit(X12, Y12[:-1])),
    "E85": ("api", None, _fit(X12, Y12, lambdas=[1.0, -2.0])),
    "E86": ("api", None, _fit(X12[:, 0], Y12)),
    "E87": ("api", None, _fit(X12, Y12, n_lambdas=10**20)),
    "E88": (CLI, _text("data.csv", "a,b,y\n\n"),
            ["explore", "data.csv", "-t", "y", "--engine", "stream"]),
    "E89": (CLI, _npy("o.npy", np.array([{"a": 1}, None], dtype=object), allow_pickle=True),
            ["explore", "o.npy", "-t", "x1", "--engine", "stream"]),
    "E90": (CLI, _truncated_npy, ["explore", "t.npy", "-t", "x2", "--engine", "stream"]),
    "E91": (CLI, _text("data.csv", "a,b,y\n1,2,3\n2,1,5\n3,5,4\n4,3,9\n"),
            ["explore", "data.csv", "-t", "y", "--engine", "stream", "--accurate", "--solver",
             "gram"]),
    "E92": (CLI, lambda d: ((d / "data.csv").write_text(
        "a,site,y\n1,p,3\n2,q,5\n3,p,4\n4,q,9\n5,p,2\n"), (d / "test.csv").write_text(
        "a,site,y\n1,p,3\n2,z,5\n")),
        ["explore", "data.csv", "-t", "y", "--engine", "stream", "--encode", "onehot",
         "--test", "test.csv"]),
}


def _catalogue():
    rows = {}
    for line in DOC.read_text(encoding="utf-8").splitlines():
        m = ROW.match(line)
        if m:
            assert m.group(1) not in rows, f"{m.group(1)} twice in docs/errors.md"
            rows[m.group(1)] = m.group(3).replace("\\|", "|")
    return rows


CATALOGUE = _catalogue()


def test_catalogue_and_cases_match():
    """Every documented bad input has a test case and every case is documented (>= 60)."""
    assert set(CATALOGUE) == set(CASES), sorted(set(CATALOGUE) ^ set(CASES))
    assert len(CATALOGUE) >= 60


def _pattern(doc: str) -> re.Pattern:
    return re.compile("^" + ".*".join(map(re.escape, doc.split("…"))) + "$")


def _run(kind, make, action, d: Path) -> str:
    if make is not None:
        make(d)
    if kind == "api":
        with pytest.raises(InputError) as info:
            action(d)
        return str(info.value)
    if kind == "locked":
        from paths.data.output import OutputFolder

        with OutputFolder(d / "o"):
            res = runner.invoke(app, action)
    else:
        res = runner.invoke(app, action)
    assert res.exit_code == 2, (res.exit_code, res.output)
    err = res.stderr.strip()
    assert "\n" not in err and "Traceback" not in res.output, err
    assert err.startswith("error: "), err
    return err[len("error: "):]


@pytest.mark.parametrize("key", sorted(CASES))
def test_catalogue_entry(key, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    kind, make, action = CASES[key]
    msg = _run(kind, make, action, tmp_path)
    assert "\n" not in msg and msg, msg
    doc = CATALOGUE.get(key)
    assert doc is not None, f"{key} is not in docs/errors.md: add | {key} | ... | `{msg}` |"
    assert _pattern(doc).match(msg), (key, msg, doc)
    # nothing written next to the inputs: no output folder left behind by a refused run
    assert not (tmp_path / "paths-out").exists()


if __name__ == "__main__":  # print the catalogue rows from the current messages
    import tempfile

    for key in sorted(CASES):
        with tempfile.TemporaryDirectory() as tmp:
            os.chdir(tmp)
            kind, make, action = CASES[key]
            try:
                msg = _run(kind, make, action, Path(tmp))
            except BaseException as exc:  # noqa: BLE001 - a report for the maintainer
                msg = f"FAILED {type(exc).__name__}: {exc}"
            print(f"| {key} | ? | `{msg}` |")
    print(json.dumps(len(CASES)))
