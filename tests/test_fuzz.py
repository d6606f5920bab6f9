"""Fuzzing the readers (hypothesis): any bytes either load or raise the one-line InputError.

Three generators: arbitrary bytes; bytes over the alphabet that CSV parsers care
about (delimiters, quotes, line ends, signs, exponents, NA tokens, invalid
UTF-8, NUL); and byte-level mutations (insert, delete, replace) of a valid CSV.
Each file goes through :func:`paths.data.tables.read_table` and, when it loads,
:func:`paths.data.tables.select` with the last column as target (one-hot encoding and
dropping missing rows on, to reach those paths).  The contract (house rules):
the only exception is ``InputError`` with a one-line message; no
RuntimeWarning escapes (pyproject.toml turns them into errors).  Seeds are
fixed (``derandomize``) so CI sees the same examples every run.
"""
from __future__ import annotations

import numpy as np
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from paths import InputError
from paths.data.tables import read_table, select

FUZZ = settings(max_examples=150, deadline=None, derandomize=True, database=None,
                suppress_health_check=list(HealthCheck))

ALPHABET = list(b'0123456789,;\t|\n\r" .-+eEaNnIifxy') + [0xFF, 0xC3, 0xA9, 0x00, 0xEF, 0xBB,
                                                            0xBF]
VALID = (b"a,b,c,y\n1.5,2,x,3\n-0.25,4e-3,y,1\n7,8,x,2.5\n1e300,0,y,4\n3,3,x,-1\n")


def _exercise(tmp_path, data: bytes, suffix: str = ".csv"):
    f = tmp_path / f"fuzz{suffix}"
    f.write_bytes(data)
    try:
        df = read_table(f)
        if df.shape[1]:
            select(df, str(df.columns[-1]), encode="onehot", drop_missing="rows")
        return True
    except InputError as exc:
        msg = str(exc)
        assert msg and "\n" not in msg and "\r" not in msg, repr(msg)
        return False


@FUZZ
@given(st.binary(max_size=300), st.sampled_from([".csv", ".tsv", ".txt", ".npy", ".npz",
                                                 ".parquet"]))
def test_arbitrary_bytes(tmp_path_factory, data, suffix):
    _exercise(tmp_path_factory.mktemp("f"), data, suffix)


@FUZZ
@given(st.lists(st.sampled_from(ALPHABET), max_size=300).map(bytes))
def test_csv_alphabet(tmp_path_factory, data):
    _exercise(tmp_path_factory.mktemp("f"), data)


@FUZZ
@given(st.lists(st.tuples(st.sampled_from(["ins", "del", "rep"]), st.integers(0, len(VALID)),
                          st.sampled_from(ALPHABET)), min_size=0, max_size=4))
def test_mutated_valid_csv(tmp_path_factory, edits):
    data = bytearray(VALID)
    for op, pos, byte in edits:
        pos = min(pos, len(data))
        if op == "ins":
            data[pos:pos] = bytes([byte])
        elif op == "del" and data:
            del data[min(pos, len(data) - 1)]
        elif data:
            data[min(pos, len(data) - 1)] = byte
    _exercise(tmp_path_factory.mktemp("f"), bytes(data))


@FUZZ
@given(st.lists(st.lists(st.one_of(st.floats(allow_nan=True, allow_infinity=True).map(repr),
                                   st.sampled_from(["", "NA", "abc", "1,5", '"q"', "1 000",
                                                    "-", "1e999"])),
                         min_size=2, max_size=4), min_size=1, max_size=8))
def test_table_like_text(tmp_path_factory, rows):
    width = len(rows[0])
    rows = [r[:width] + [""] * (width - len(r)) for r in rows]  # mostly rectangular
    data = ("\n".join(",".join(r) for r in rows) + "\n").encode()
    _exercise(tmp_path_factory.mktemp("f"), data)


def test_valid_file_loads_and_mutation_sanity(tmp_path):
    """The seed file of the mutation fuzzer loads (so mutations start from a loadable file)."""
    assert _exercise(tmp_path, VALID)
    df = read_table(tmp_path / "fuzz.csv")
    d = select(df, "y", encode="onehot")
    np.testing.assert_array_equal(d.y, [3, 1, 2.5, 4, -1])
