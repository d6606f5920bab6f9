"""One fuzz target per reader (hypothesis, bounded budget): Parquet, ``.npy``/``.npz``, case TOML.

The text reader (CSV/TSV) has its targets in tests/test_fuzz.py.  Each target here
builds inputs from the structure the reader parses (random tables written by pyarrow
and then byte-mutated; random arrays and headers written by numpy and then mutated;
TOML documents over the case keys with values of every TOML type) and checks the
contract of the house rules: the reader returns a table (or a case) or raises
``InputError`` with a one-line message, nothing else (no other exception, no
RuntimeWarning: pyproject.toml turns warnings into errors).  Seeds are fixed
(``derandomize``); the functions ``*_one_input`` are the atheris entry points of the
longer run described in DEVELOPERS.md.
"""
from __future__ import annotations

import io
import tempfile
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from paths import InputError
from paths.data.tables import read_table, select
from paths.workflows.cases import parse_case

FUZZ = settings(max_examples=60, deadline=None, derandomize=True, database=None,
                suppress_health_check=list(HealthCheck))


def _contract(fn):
    try:
        fn()
        return True
    except InputError as exc:
        msg = str(exc)
        assert msg and "\n" not in msg and "\r" not in msg, repr(msg)
        return False


def _load(path: Path):
    df = read_table(path)
    if df.shape[1]:
        select(df, str(df.columns[-1]), encode="onehot", drop_missing="rows")


def _mutate(data: bytes, edits) -> bytes:
    buf = bytearray(data)
    for op, pos, byte in edits:
        if not buf:
            break
        pos %= len(buf)
        if op == 0:
            buf[pos] = byte
        elif op == 1:
            del buf[pos]
        else:
            buf[pos:pos] = bytes([byte])
    return bytes(buf)


EDITS = st.lists(st.tuples(st.integers(0, 2), st.integers(0, 1 << 20), st.integers(0, 255)),
                 max_size=4)


def file_one_input(data: bytes, suffix: str) -> bool:
    """Atheris entry point: ``data`` as a file with ``suffix`` through the reader."""
    with tempfile.TemporaryDirectory() as tmp:
        f = Path(tmp) / f"fuzz{suffix}"
        f.write_bytes(data)
        return _contract(lambda: _load(f))


# ------------------------------------------------------------------------ Parquet
COLUMN = st.one_of(
    st.lists(st.floats(allow_nan=True, allow_infinity=True), min_size=3, max_size=3),
    st.lists(st.one_of(st.none(), st.booleans()), min_size=3, max_size=3),
    st.lists(st.one_of(st.none(), st.text(max_size=4)), min_size=3, max_size=3),
    st.lists(st.integers(-2**63, 2**63 - 1), min_size=3, max_size=3),
    st.lists(st.lists(st.integers(0, 3), max_size=2), min_size=3, max_size=3),
)


@FUZZ
@given(st.dictionaries(st.text(min_size=1, max_size=3), COLUMN, min_size=1, max_size=4), EDITS)
def test_parquet_reader(columns, edits):
    buf = io.BytesIO()
    pq.write_table(pa.table({k: pa.array(v) for k, v in columns.items()}), buf)
    file_one_input(_mutate(buf.getvalue(), edits), ".parquet")


# ------------------------------------------------------------------------ .npy / .npz
DTYPES = st.sampled_from(["<f8", "<f4", "<i8", "|u1", "|b1", "<c16", "<U3", "|S2", ">f8",
                          "<m8[s]", "<M8[D]"])


@FUZZ
@given(DTYPES, st.lists(st.integers(0, 4), min_size=0, max_size=3), EDITS,
       st.booleans(), st.integers(0, 2**32 - 1))
def test_numpy_reader(dtype, shape, edits, npz, seed):
    rng = np.random.default_rng(seed)
    arr = (rng.standard_normal(int(np.prod(shape)) if shape else 1) * 5).astype(
        "<f8").reshape(shape).astype(dtype)
    buf = io.BytesIO()
    if npz:
        np.savez(buf, a=arr, y=arr)
    else:
        np.save(buf, arr)
    file_one_input(_mutate(buf.getvalue(), edits), ".npz" if npz else ".npy")


# ------------------------------------------------------------------------ case TOML
KEYS = {"case": ["name", "title", "analysis", "synthetic", "description"],
        "data": ["generator", "file", "target", "params", "holdout", "seed"],
        "fit": ["n_lambdas", "cv", "rule", "standardize", "solver", "repeats"],
        "figures": ["formats", "width", "figure_x", "report"],
        "threshold": ["n_points", "repeats", "over", "ridge_lambda"],
        "truth": ["p", "snr"], "simulate": ["n_train", "repeats"], "model": ["x"]}
VALUES = st.one_of(st.integers(-3, 10**12).map(str), st.floats(allow_nan=True).map(
    lambda v: repr(v).replace("inf", "inf").replace("nan", "nan")), st.booleans().map(
    lambda b: "true" if b else "false"), st.text(max_size=8).map(
    lambda t: '"' + t.replace("\\", "\\\\").replace('"', '\\"') + '"'),
    st.sampled_from(['"isotropic"', '"panel"', '"x/../../y"', '["svg"]', "[1, 2]",
                     "{ n_samples = 5 }", '"explore"', '"threshold"', '"simulate"', "1979-05-27",
                     '"gcv"', "{ }", "[[1]]"]))


def case_one_input(text: str) -> bool:
    """Atheris entry point: ``text`` as a case file through the case parser."""
    return _contract(lambda: parse_case(text))


@FUZZ
@given(st.data())
def test_case_parser(data):
    tables = data.draw(st.lists(st.sampled_from(sorted(KEYS)), max_size=4, unique=True))
    lines = []
    for t in tables:
        lines.append(f"[{t}]")
        for key in data.draw(st.lists(st.sampled_from(KEYS[t]), max_size=4, unique=True)):
            lines.append(f"{key} = {data.draw(VALUES)}")
    text = "\n".join(lines) + "\n"
    text = data.draw(st.one_of(st.just(text), st.builds(
        lambda e: _mutate(text.encode(), e).decode("utf-8", "replace"), EDITS)))
    case_one_input(text)
