"""Readers and selection (paths/io.py) against outside references.

References: numbers written by ``numpy.savetxt`` / ``numpy.save`` and tables
written by pandas and pyarrow must come back exactly (IEEE round trip of
``repr``/``%.17g``, a fact of binary64); one-hot columns equal
``pandas.get_dummies(drop_first=True)``; missing-value counts equal
``DataFrame.isna().sum()``.  Messages are one line (house rule).
"""
from __future__ import annotations

import hashlib
import os

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from numpy.testing import assert_array_equal

from error_bounds import ridge_bounds
from paths import InputError
from paths.data.tables import as_frame, load_dataset, read_table, select, select_like, sha256_of

RNG = np.random.default_rng(20261202)
ARR = RNG.standard_normal((7, 4)) * np.array([1e-8, 1.0, 1e5, 3.0])


def _one_line_error(fn, *args, **kw) -> str:
    with pytest.raises(InputError) as info:
        fn(*args, **kw)
    msg = str(info.value)
    assert msg and "\n" not in msg, msg
    return msg


def _write(path, text: str | bytes):
    data = text.encode() if isinstance(text, str) else text
    path.write_bytes(data)
    return path


# ----------------------------------------------------------------- delimiters, header


@pytest.mark.parametrize("delim,suffix", [(",", ".csv"), ("\t", ".tsv"), ("\t", ".txt"),
                                          (";", ".csv"), ("|", ".dat")])
def test_delimited_text_round_trips_numpy_savetxt(tmp_path, delim, suffix):
    """Values written by numpy.savetxt ('%.17g', exact round trip for binary64) are read
    back bit for bit, whatever the delimiter (detected, not given)."""
    f = tmp_path / f"d{suffix}"
    np.savetxt(f, ARR, delimiter=delim, fmt="%.17g", header=delim.join("abcy"), comments="")
    df = read_table(f)
    assert list(df.columns) == list("abcy")
    assert_array_equal(df.to_numpy(), ARR)


def test_explicit_sep_overrides_detection(tmp_path):
    """``sep`` given: the file is split on it (a ';' file read with sep=';')."""
    f = _write(tmp_path / "s.csv", "a;b\n1;2\n3;4\n")
    assert_array_equal(read_table(f, sep=";").to_numpy(), [[1, 2], [3, 4]])
    assert_array_equal(read_table(f, sep="semicolon").to_numpy(), [[1, 2], [3, 4]])
    _one_line_error(read_table, f, sep="ab")


def test_headerless_file_gets_x_names(tmp_path):
    """A first row of numbers is data (common practice, no source): columns x0, x1, ..."""
    f = tmp_path / "h.csv"
    np.savetxt(f, ARR, delimiter=",", fmt="%.17g")
    df = read_table(f)
    assert list(df.columns) == ["x0", "x1", "x2", "x3"]
    assert_array_equal(df.to_numpy(), ARR)
    assert any("no header" in n for n in df.attrs["paths_notes"])
    d = load_dataset(f, "x3")
    assert d.feature_names == ["x0", "x1", "x2"]
    assert_array_equal(d.y, ARR[:, 3])


def test_header_detected_with_text_columns(tmp_path):
    """A header over a text column and numeric columns is recognised as a header."""
    f = _write(tmp_path / "c.csv", "site,a,y\nnorth,1,2\nsouth,3,4\nnorth,5,7\n")
    df = read_table(f)
    assert list(df.columns) == ["site", "a", "y"] and df.shape == (3, 3)


def test_quoted_fields_and_crlf(tmp_path):
    """RFC 4180 quoting (a delimiter inside quotes) and CRLF line ends, as Python's csv writes."""
    f = tmp_path / "q.csv"
    pd.DataFrame({"name, with comma": ["a,b", "c", "d"], "x": [1.5, 2.5, 3.5],
                  "y": [1, 2, 4]}).to_csv(f, index=False, lineterminator="\r\n")
    df = read_table(f)
    assert list(df.columns) == ["name, with comma", "x", "y"]
    assert df["name, with comma"].tolist() == ["a,b", "c", "d"]
    assert_array_equal(df["x"].to_numpy(), [1.5, 2.5, 3.5])


def test_utf8_bom_and_blank_lines(tmp_path):
    """A UTF-8 byte-order mark (Excel's 'CSV UTF-8') and blank lines are accepted;
    line numbers in messages still count the blank lines."""
    f = _write(tmp_path / "b.csv", b"\xef\xbb\xbfa,y\n1,2\n\n   \n3,4\n5,x\n")
    df = read_table(f)
    assert list(df.columns) == ["a", "y"]
    msg = _one_line_error(select, df, "y")
    assert "'y'" in msg and "line 6" in msg


# ------------------------------------------------------------------ other formats


def test_parquet_round_trip_and_nested_columns(tmp_path):
    """Parquet written by pyarrow reads back exactly; a nested (list) column is refused
    by name when used and ignored when excluded."""
    f = tmp_path / "t.parquet"
    table = pa.table({"a": ARR[:, 0], "b": ARR[:, 1], "y": ARR[:, 3],
                      "tags": pa.array([[1, 2]] * ARR.shape[0], type=pa.list_(pa.int64()))})
    pq.write_table(table, f)
    msg = _one_line_error(load_dataset, f, "y")
    assert "'tags'" in msg and "nested" in msg and "exclude=tags" in msg  # a parameter; the CLI says --exclude
    d = load_dataset(f, "y", exclude=["tags"])
    assert d.feature_names == ["a", "b"]
    assert_array_equal(d.X, ARR[:, :2])
    assert_array_equal(d.y, ARR[:, 3])


def test_float_parquet_read_in_column_batches_equals_pandas(tmp_path, monkeypatch):
    """An all-float Parquet file (float32 and float64 columns, nulls, several row groups),
    read a few columns at a time into one block, equals ``pandas.read_parquet`` (values as
    float64, nulls as NaN); a file with a stored (float) pandas index takes the general
    reader: its columns are pyarrow's without the pandas metadata, the index one of them."""
    import paths.data.tables as tables

    monkeypatch.setattr(tables, "_PARQUET_BATCH_BYTES", 8 * 50 * 2)  # two columns a batch
    X = RNG.standard_normal((50, 5))
    cols = {f"c{j}": pa.array(X[:, j], type=pa.float32() if j == 1 else pa.float64())
            for j in range(5)}
    cols["c3"] = pa.array([None if i % 7 == 0 else float(v) for i, v in enumerate(X[:, 3])])
    f = tmp_path / "floats.parquet"
    pq.write_table(pa.table(cols), f, row_group_size=16)
    got, ref = read_table(f), pd.read_parquet(f)
    assert list(got.columns) == list(ref.columns)
    assert_array_equal(got.to_numpy(dtype=np.float64), ref.to_numpy(dtype=np.float64))
    frame = pd.DataFrame(X[:, :2], columns=["a", "b"], index=np.arange(50) * 0.5)
    g = tmp_path / "indexed.parquet"
    frame.to_parquet(g)
    back, plain = read_table(g), pq.read_table(g).to_pandas(ignore_metadata=True)
    assert list(back.columns) == list(plain.columns) and len(plain.columns) == 3
    assert_array_equal(back.to_numpy(), plain.to_numpy())


def test_duplicate_columns_found_across_row_blocks():
    """Exact duplicate columns are grouped when the rows are hashed in many blocks; the
    groups equal those of ``numpy.unique(axis=1)`` (numpy reference)."""
    from paths.data.tables import _duplicate_groups as groups_of  # noqa: PLC2701 (the unit)

    X = RNG.standard_normal((301, 6))
    X[:, 4] = X[:, 1]
    X[:, 5] = X[:, 1]
    X[-1, 5] += 1.0  # differs in the last block only
    names = [f"x{j}" for j in range(6)]
    found = groups_of(X, names, block_bytes=8 * 6 * 10)
    _, inverse, counts = np.unique(X, axis=1, return_inverse=True, return_counts=True)
    ref = [[names[j] for j in np.flatnonzero(inverse == g)] for g in np.flatnonzero(counts > 1)]
    assert found == ref == [["x1", "x4"]]


def test_parquet_struct_and_unreadable(tmp_path):
    """A struct column is nested too; bytes that are not Parquet give a one-line error."""
    f = tmp_path / "s.parquet"
    pq.write_table(pa.table({"a": [1.0, 2.0, 3.0], "y": [1.0, 0.0, 2.0],
                             "s": [{"u": 1}, {"u": 2}, {"u": 3}]}), f)
    assert "nested" in _one_line_error(load_dataset, f, "y", features=["a", "s"])
    bad = _write(tmp_path / "bad.parquet", b"PAR1 this is not parquet")
    assert "Parquet" in _one_line_error(read_table, bad)


def test_npy_npz_round_trip(tmp_path):
    """numpy.save / numpy.savez files: 2-D arrays give columns x0.. (or KEY0..), 1-D
    arrays a column named by the key, structured arrays their field names."""
    np.save(tmp_path / "a.npy", ARR)
    d = load_dataset(tmp_path / "a.npy", "x3")
    assert_array_equal(d.X, ARR[:, :3]) and d.feature_names == ["x0", "x1", "x2"]
    np.savez(tmp_path / "b.npz", X=ARR[:, :3], y=ARR[:, 3])
    d = load_dataset(tmp_path / "b.npz", "y")
    assert d.feature_names == ["X0", "X1", "X2"]
    assert_array_equal(d.X, ARR[:, :3]) and assert_array_equal(d.y, ARR[:, 3]) is None
    rec = np.zeros(5, dtype=[("u", "f8"), ("v", "f8"), ("resp", "f8")])
    rec["u"], rec["v"], rec["resp"] = np.arange(5), np.arange(5) ** 2, [1, 3, 2, 5, 4]
    np.save(tmp_path / "r.npy", rec)
    d = load_dataset(tmp_path / "r.npy", "resp")
    assert d.feature_names == ["u", "v"]
    assert_array_equal(d.y, rec["resp"])


def test_npy_object_array_and_bad_npz(tmp_path):
    """Object arrays (pickles) are refused (allow_pickle=False); so are mismatched lengths."""
    np.save(tmp_path / "o.npy", np.array([[1, "a"]], dtype=object), allow_pickle=True)
    assert "NumPy" in _one_line_error(read_table, tmp_path / "o.npy")
    np.savez(tmp_path / "m.npz", a=np.arange(3.0), y=np.arange(4.0))
    assert "rows" in _one_line_error(read_table, tmp_path / "m.npz")
    np.save(tmp_path / "c.npy", np.ones((3, 2), dtype=complex))
    assert "complex" in _one_line_error(read_table, tmp_path / "c.npy")


def test_dataframe_and_array_inputs():
    """A DataFrame, a 2-D array and a mapping of arrays give the same Dataset."""
    frame = pd.DataFrame(ARR, columns=["x0", "x1", "x2", "x3"])
    ref = select(frame, "x3")
    for src in (ARR, {f"x{j}": ARR[:, j] for j in range(4)}):
        d = load_dataset(src, "x3")
        assert d.feature_names == ref.feature_names
        assert_array_equal(d.X, ref.X)
        assert_array_equal(d.y, ref.y)
    assert_array_equal(as_frame(ARR).to_numpy(), ARR)
    _one_line_error(as_frame, ARR[:, 0])


# ---------------------------------------------------------------------- selection


@pytest.fixture()
def table():
    rng = np.random.default_rng(3)
    n = 12
    return pd.DataFrame({
        "sample": [f"s{i}" for i in range(n)],
        "band_1": rng.standard_normal(n), "band_2": rng.standard_normal(n),
        "band_10": rng.standard_normal(n), "temp": rng.standard_normal(n),
        "y1": rng.standard_normal(n), "y2": rng.standard_normal(n),
    })


def test_features_globs_exclude_and_id(table):
    """Glob patterns (fnmatch, as the shell), exclusions and an id column kept out."""
    d = select(table, "y1", features=["band_*"], exclude=["band_1?"], id_column="sample")
    assert d.feature_names == ["band_1", "band_2"]
    assert_array_equal(d.X, table[["band_1", "band_2"]].to_numpy())
    assert d.ids.tolist() == table["sample"].tolist()
    d = select(table, "y1", features=["band_1,temp"], exclude=["y2"], id_column="sample")
    assert d.feature_names == ["band_1", "temp"]
    assert "matches no column" in _one_line_error(select, table, "y1", features=["nope*"])
    assert "matches no column" in _one_line_error(select, table, "y1", exclude=["nope"])
    msg = _one_line_error(select, table, "y1", features=["band_1"], exclude=["band_*"])
    assert "p = 0" in msg


def test_multi_target_selection(table):
    """Several targets give y of shape (n, t) in the order given."""
    d = select(table, ["y2", "y1"], id_column="sample")
    assert d.y.shape == (12, 2) and d.target_names == ["y2", "y1"]
    assert_array_equal(d.y, table[["y2", "y1"]].to_numpy())
    assert "y1" not in d.feature_names and "sample" not in d.feature_names
    assert "twice" in _one_line_error(select, table, ["y1", "y1"], id_column="sample")


def test_unknown_target_names_close_match(table):
    msg = _one_line_error(select, table, "y3", id_column="sample")
    assert "'y3'" in msg and "not found" in msg and "'y1'" in msg


def test_categorical_refused_then_onehot_matches_pandas(table):
    """Text columns are refused by name; ``encode="onehot"`` equals
    ``pandas.get_dummies(drop_first=True)`` (reference level = first sorted level)."""
    t = table.assign(site=["b", "a", "c"] * 4)
    msg = _one_line_error(select, t, "y1", id_column="sample")
    assert "'site'" in msg and "encode='onehot'" in msg  # the parameter (CLI: --encode onehot)
    d = select(t, "y1", features=["temp", "site"], encode="onehot")
    ref = pd.get_dummies(t[["temp", "site"]], columns=["site"], drop_first=True, prefix_sep="=",
                         dtype=float)
    assert d.feature_names == list(ref.columns)
    assert_array_equal(d.X, ref.to_numpy())
    assert d.encoding == {"site": ["a", "b", "c"]}
    assert any("reference level 'a' dropped" in n for n in d.notes)


def test_test_set_alignment(table, tmp_path):
    """A test table may reorder columns and carry extra ones; missing ones are named;
    one-hot uses the training levels; an unseen level is refused."""
    t = table.assign(site=["b", "a", "c"] * 4)
    train = select(t, "y1", features=["band_2", "site", "temp"], encode="onehot")
    test_df = t[["temp", "y1", "site", "band_2", "y2"]].iloc[:5][::-1]
    test = select_like(test_df, train)
    assert test.feature_names == train.feature_names
    assert_array_equal(test.X, train.X[:5][::-1])
    msg = _one_line_error(select_like, test_df.drop(columns=["band_2", "temp"]), train)
    assert "'band_2'" in msg and "'temp'" in msg
    bad = test_df.assign(site=["a", "zz", "b", "c", "a"])
    assert "'zz'" in _one_line_error(select_like, bad, train)


def test_missing_values_counted_refused_or_dropped(table):
    """Missing values: counts per column as DataFrame.isna().sum(); rows or columns dropped
    and reported."""
    t = table.copy()
    t.loc[[1, 4], "band_2"] = np.nan
    t.loc[7, "temp"] = np.nan
    msg = _one_line_error(select, t, "y1", id_column="sample", exclude=["y2"])
    assert "'band_2' (2, first on row 2)" in msg and "'temp' (1, first on row 8)" in msg
    d = select(t, "y1", id_column="sample", exclude=["y2"], drop_missing="rows")
    keep = t[["band_1", "band_2", "band_10", "temp", "y1"]].notna().all(axis=1)
    assert_array_equal(d.X, t.loc[keep, ["band_1", "band_2", "band_10", "temp"]].to_numpy())
    assert d.dropped_rows == [2, 5, 8] and d.ids.tolist() == t.loc[keep, "sample"].tolist()
    d = select(t, "y1", id_column="sample", exclude=["y2"], drop_missing="columns")
    assert d.feature_names == ["band_1", "band_10"] and d.dropped_columns == ["band_2", "temp"]
    assert d.X.shape[0] == 12
    t.loc[3, "y1"] = np.nan
    assert "drop_missing='rows'" in _one_line_error(
        select, t, "y1", id_column="sample", exclude=["y2"], drop_missing="columns")


def test_all_missing_column_and_target(table):
    t = table.assign(empty=np.nan)
    msg = _one_line_error(select, t, "y1", id_column="sample")
    assert "'empty'" in msg and "entirely missing" in msg
    d = select(t, "y1", id_column="sample", drop_missing="columns")
    assert "empty" not in d.feature_names
    t = table.assign(y1=np.nan)
    assert "entirely missing" in _one_line_error(select, t, "y1", id_column="sample")


def test_infinite_values_named(table):
    t = table.copy()
    t.loc[5, "temp"] = np.inf
    msg = _one_line_error(select, t, "y1", id_column="sample")
    assert "'temp'" in msg and "infinite" in msg and "row 6" in msg


def test_constant_target_and_too_few_rows(table):
    assert "constant" in _one_line_error(select, table.assign(y1=2.0), "y1", id_column="sample")
    assert "at least 2" in _one_line_error(select, table.iloc[:1], "y1", id_column="sample")


def test_constant_and_duplicate_columns_reported(table):
    """Constant and exactly duplicated columns are named in the notes and kept."""
    t = table.assign(const=4.0, copy_of_temp=table["temp"], band_2b=table["band_2"])
    d = select(t, "y1", id_column="sample")
    assert d.constant_columns == ["const"]
    assert sorted(map(sorted, d.duplicate_columns)) == [["band_2", "band_2b"],
                                                        ["copy_of_temp", "temp"]]
    assert "const" in d.feature_names and "copy_of_temp" in d.feature_names
    rec = d.record()
    assert rec["constant_columns"] == ["const"] and len(rec["duplicate_columns"]) == 2


# ------------------------------------------------------------ file-level errors


@pytest.mark.parametrize("content,needle", [
    (b"", "empty"),
    (b"\n\n  \n", "empty"),
    (b"a,b,y\n", "no data rows"),
    (b"a,b,y\n1,2,3\n4,5\n", "line 3 has 2 fields"),
    (b"a,b\xff,y\n1,2,3\n", "not UTF-8"),
    (b"\xff\xfea\x00,\x00", "UTF-16"),
    (b"a,y\n1,2\n\x00\x01,3\n", "NUL"),
    (b'a;b;y\n1,5;2,0;3\n2,5;3,5;4\n', "decimal comma"),
    (b'a,b,y\n"1,234",2,3\n"12,345",4,5\n', "thousands separators"),
    (b'a;b;y\n1.234,5;2;3\n12.345,0;4;5\n', "thousands separators"),
    (b"a,b,y\n1,234,2,3\n", "thousands separator"),
    (b"a,a,y\n1,2,3\n4,5,6\n", "appears twice"),
])
def test_file_errors_one_line(tmp_path, content, needle):
    """Each malformed file gives one line naming the file and the problem."""
    f = _write(tmp_path / "bad.csv", content)
    msg = _one_line_error(load_dataset, f, "y")
    assert needle in msg and "bad.csv" in msg, msg


def test_missing_file_and_folder(tmp_path):
    assert "no such file" in _one_line_error(read_table, tmp_path / "nothing.csv")
    assert "folder" in _one_line_error(read_table, tmp_path)


def test_reader_never_modifies_input(tmp_path):
    """Reading opens files read-only: bytes (SHA-256, hashlib) and mtime unchanged."""
    f = tmp_path / "r.csv"
    np.savetxt(f, ARR, delimiter=",", fmt="%.17g", header="a,b,c,y", comments="")
    os.chmod(f, 0o444)
    before = (f.stat().st_mtime_ns, hashlib.sha256(f.read_bytes()).hexdigest())
    load_dataset(f, "y")
    assert sha256_of(f) == before[1]
    assert (f.stat().st_mtime_ns, hashlib.sha256(f.read_bytes()).hexdigest()) == before


# ------------------------------------------------------- end to end through the CLI


def test_explore_data_options_end_to_end(tmp_path):
    """`paths explore` with --sep, two --target, --features globs, --exclude, --id,
    --encode onehot, --drop-missing rows and a reordered test file: the coefficients
    written per target equal scikit-learn Ridge on the same standardized, one-hot design
    (pandas.get_dummies); the notes land in summary.json; the inputs are unchanged."""
    import csv as _csv
    import json

    from sklearn.linear_model import Ridge
    from typer.testing import CliRunner

    from paths.cli import app

    rng = np.random.default_rng(12)
    n = 30
    frame = pd.DataFrame({
        "id": [f"r{i}" for i in range(n)],
        "g_1": rng.standard_normal(n), "g_2": rng.standard_normal(n),
        "noise": rng.standard_normal(n),
        "site": rng.choice(["north", "east", "south"], n),
    })
    frame["y1"] = frame.g_1 - 2 * frame.g_2 + 0.1 * rng.standard_normal(n)
    frame["y2"] = frame.g_2 + (frame.site == "east") + 0.1 * rng.standard_normal(n)
    frame.loc[4, "g_1"] = np.nan
    train, test = tmp_path / "train.csv", tmp_path / "test.csv"
    frame.iloc[:24].to_csv(train, sep=";", index=False)
    frame.iloc[24:, ::-1].assign(extra=1.0).to_csv(test, sep=";", index=False)
    stamp = {f: (f.stat().st_mtime_ns, sha256_of(f)) for f in (train, test)}
    out = tmp_path / "out"
    res = CliRunner().invoke(app, [
        "explore", str(train), "--sep", ";", "--target", "y1", "--target", "y2",
        "--features", "g_*,site,noise", "--exclude", "noise", "--id", "id",
        "--encode", "onehot", "--drop-missing", "rows", "--test", str(test),
        "--n-lambdas", "5", "--out", str(out)])
    assert res.exit_code == 0, res.output
    assert {f: (f.stat().st_mtime_ns, sha256_of(f)) for f in (train, test)} == stamp
    summary = json.loads((out / "summary.json").read_text())
    assert summary["targets"] == ["y1", "y2"] and set(summary["by_target"]) == {"y1", "y2"}
    assert any("reference level 'east' dropped" in s for s in summary["data_notes"])
    assert summary["data_preparation"]["dropped_rows"] == [6]  # header is line 1
    with open(out / "coefficients.csv", newline="") as fh:
        rows = list(_csv.reader(fh))
    assert rows[0] == ["target", "lambda", "intercept", "g_1", "g_2", "site=north",
                       "site=south"]
    kept = frame.iloc[:24].drop(index=4)
    design = pd.get_dummies(kept[["g_1", "g_2", "site"]], columns=["site"], drop_first=True,
                            prefix_sep="=", dtype=float).to_numpy()
    sd = design.std(axis=0)
    for row in rows[1:]:
        lam, coef = float(row[1]), np.array(row[3:], dtype=float)
        sk = Ridge(alpha=lam).fit(design / sd, kept[row[0]].to_numpy())
        # bound: ours and scikit-learn's Cholesky (Gram bound covers both routes), two solvers
        b = ridge_bounds(design, kept[row[0]].to_numpy(), lam, gram=True)
        assert np.linalg.norm(coef - sk.coef_ / sd) <= b.coef * np.linalg.norm(sk.coef_ / sd)
    assert sum(r[0] == "y2" for r in rows[1:]) == 5


@pytest.mark.parametrize("quoted", [False, True])
def test_lines_longer_than_the_csv_field_limit(tmp_path, quoted):
    """Wide files: a line of 150 000 characters (beyond Python csv's default 131 072-char
    field limit, met while sniffing the delimiter) reads like any other."""
    p = 25_000
    rng = np.random.default_rng(1)
    X = rng.integers(0, 9, size=(4, p)) / 8.0
    q = '"' if quoted else ""
    header = ",".join(f"{q}c{j}{q}" for j in range(p)) + ",y"
    body = [",".join(repr(float(v)) for v in row) + f",{i}" for i, row in enumerate(X)]
    f = _write(tmp_path / "wide.csv", "\n".join([header, *body]) + "\n")
    d = load_dataset(f, "y")
    assert d.X.shape == (4, p)
    assert_array_equal(d.X, X)
