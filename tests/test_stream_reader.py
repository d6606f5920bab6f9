"""The streamed engines read files under exactly the in-memory reader's rules (issue 12, item 2).

Reference: the in-memory reader :func:`paths.data.tables.read_table` — each
file below is refused by it (or, for the digit-group underscore, by Python's
own rule that a data value "1_5" is not the number 15: PEP 515 allows the
underscores in source code literals, not in data), and every streamed engine
must refuse it too, with the same one-line message, exit status 2 on the
command line (never a silent misread, never an internal error).
"""
from __future__ import annotations

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from numpy.testing import assert_allclose
from typer.testing import CliRunner

from error_bounds import ridge_bounds
from paths import InputError
from paths.cli import app
from paths.data.tables import read_table
from paths.engines.stream import stream_path

BAD_CSV = {
    # an unquoted thousands separator: one field too many (was read as b=1, y=200)
    "extra-field": ("a,b,y\n1,2,3\n3,1,200,0.5\n2,2,5\n4,1,6\n",
                    "line 3 has 4 fields but the header has 3"),
    "short-row": ("a,b,y\n1,2,3\n3,1\n2,2,5\n4,1,6\n", "line 3 has 2 fields but the header has 3"),
    "duplicate-name": ("a,a,y\n1,2,3\n3,1,2\n2,2,5\n4,1,6\n",
                       "column name 'a' appears twice in the header"),
    "header-only": ("a,b,y\n", "has a header row but no data rows"),
    "underscore": ("a,b,y\n1_5,2,3\n3,1,2\n2,2,5\n4,1,6\n", "'a'"),
    "not-utf8": (b"a,b,y\n1,2,3\n3,\xff1,2\n2,2,5\n".decode("latin-1"), None),
}


def _write(tmp_path, name, text):
    f = tmp_path / f"{name}.csv"
    if name == "not-utf8":
        f.write_bytes(b"a,b,y\n1,2,3\n3,\xff1,2\n2,2,5\n4,1,6\n")
    else:
        f.write_text(text)
    return f


@pytest.mark.parametrize("name", sorted(BAD_CSV))
def test_stream_reader_refuses_what_memory_refuses(tmp_path, name):
    """Every bad CSV: the in-memory reader refuses it, and the row-streamed reader
    refuses it with the same message (small chunks: the defect is in a later chunk)."""
    f = _write(tmp_path, name, BAD_CSV[name][0])
    with pytest.raises(InputError) as mem:
        from paths.data.tables import load_dataset
        load_dataset(f, "y")
    with pytest.raises(InputError) as eng:
        stream_path(f, target="y", chunk_rows=2)
    want = BAD_CSV[name][1]
    if want is not None:
        assert want in str(mem.value) and want in str(eng.value)
    assert str(eng.value) == str(mem.value)  # the text rules themselves: word for word


@pytest.mark.parametrize("engine", ["stream", "dask"])
@pytest.mark.parametrize("name", ["extra-field", "duplicate-name", "header-only", "underscore"])
def test_cli_engines_exit_2_on_bad_csv(tmp_path, engine, name):
    """Through the command line: exit 2, one line, no traceback, for both engines."""
    f = _write(tmp_path, name, BAD_CSV[name][0])
    r = CliRunner().invoke(app, ["explore", str(f), "-t", "y", "--engine", engine,
                                 "--out", str(tmp_path / "o")])
    assert r.exit_code == 2, r.output
    assert "Traceback" not in r.output and "internal error" not in r.output


def test_underscore_is_not_a_digit_group_in_memory_either(tmp_path):
    """The in-memory reader does not read "1_5" as 15 (Python's float() would)."""
    f = _write(tmp_path, "underscore", BAD_CSV["underscore"][0])
    with pytest.raises(InputError, match="underscores"):
        read_table(f)


def test_stream_detects_delimiter_and_header_as_memory(tmp_path):
    """A semicolon-delimited file and a file without a header row: the streamed
    reader decides the layout as the in-memory reader does and gets its numbers
    (the in-memory fit as reference; the same rows, 1e-12 relative)."""
    from paths.core.path import fit_path
    rng = np.random.default_rng(1)
    X = rng.standard_normal((40, 3))
    y = X[:, 0] + rng.standard_normal(40)
    f = tmp_path / "semi.csv"
    f.write_text("a;b;c;y\n" + "\n".join(";".join(repr(float(v)) for v in [*X[i], y[i]])
                                         for i in range(40)) + "\n")
    res = stream_path(f, [1.0], target="y", chunk_rows=7)
    ref = fit_path(X, y, [1.0])
    # bound: the streamed Gram route and the in-memory route (ridge_bounds, Gram term);
    # the text holds repr() floats (exact round trip)
    tol = ridge_bounds(X, y, 1.0, gram=True).coef * np.linalg.norm(ref.coef)
    assert np.linalg.norm(res.coef - ref.coef) <= tol
    g = tmp_path / "nohead.csv"
    g.write_text("\n".join(",".join(repr(float(v)) for v in [*X[i], y[i]]) for i in range(40)))
    res2 = stream_path(g, [1.0], target="x3", chunk_rows=9)
    assert np.linalg.norm(res2.coef - ref.coef) <= tol  # bound: as above


@pytest.mark.parametrize("kind", ["object", "truncated", "complex"])
@pytest.mark.parametrize("engine", ["stream"])
def test_bad_npy_is_one_line_exit_2(tmp_path, kind, engine):
    """Object (pickled) arrays are never loaded, truncated files and complex values are
    refused: one line, exit 2 (they were internal errors, exit 1, or a silently dropped
    imaginary part)."""
    f = tmp_path / "d.npy"
    if kind == "object":
        np.save(f, np.array([[1, "a"], [2, "b"], [3, "c"]], dtype=object), allow_pickle=True)
    elif kind == "truncated":
        np.save(f, np.random.default_rng(0).standard_normal((100, 4)))
        f.write_bytes(f.read_bytes()[:1000])
    else:
        np.save(f, np.ones((20, 3)) + 1j)
    r = CliRunner().invoke(app, ["explore", str(f), "-t", "y", "--engine", engine,
                                 "--out", str(tmp_path / "o")])
    assert r.exit_code == 2, r.output
    assert "Traceback" not in r.output and "internal error" not in r.output


def test_complex_arrays_refused_by_the_stream_engine():
    """Complex input loses its imaginary part silently no more (numpy's float cast would)."""
    X = np.ones((10, 2)) + 1j * np.arange(20).reshape(10, 2)
    with pytest.raises(InputError, match="complex"):
        stream_path(X, y=np.arange(10.0))


def test_parquet_duplicate_names_refused(tmp_path):
    """A Parquet file with a repeated column name: refused (the in-memory reader
    refuses it too, through pyarrow)."""
    t = pa.Table.from_arrays([pa.array([1.0, 2.0, 3.0])] * 2 + [pa.array([1.0, 0.0, 2.0])],
                             names=["a", "a", "y"])
    f = tmp_path / "d.parquet"
    pq.write_table(t, f)
    with pytest.raises(InputError):
        read_table(f)
    with pytest.raises(InputError, match="'a' appears twice"):
        stream_path(f, target="y")


@pytest.mark.parametrize("variant", ["plain", "blank-lines", "spaces-line", "crlf", "bom",
                                     "quoted", "no-trailing-newline", "tab"])
def test_chunked_text_equals_whole_file_reader(tmp_path, variant):
    """The chunked reader (vectorized route for plain chunks, text route for quotes,
    carriage returns, byte-order marks and whitespace-only lines) reads exactly the
    numbers and lines of the whole-file reader :func:`read_table` (the reference)."""
    from paths.data.tables import read_text_chunks, text_layout

    rng = np.random.default_rng(7)
    X = np.round(rng.standard_normal((23, 3)), 6)
    sep = "\t" if variant == "tab" else ","
    rows = [sep.join(repr(float(v)) for v in r) for r in X]
    if variant == "quoted":
        rows = [f'"{r.split(",")[0]}",' + ",".join(r.split(",")[1:]) for r in rows]
    lines = [sep.join(["a", "b", "y"]), *rows]
    if variant == "blank-lines":
        lines.insert(5, "")
        lines.insert(12, "")
    if variant == "spaces-line":
        lines.insert(7, "   ")
    nl = "\r\n" if variant == "crlf" else "\n"
    text = nl.join(lines) + ("" if variant == "no-trailing-newline" else nl)
    raw = ("\ufeff" if variant == "bom" else "") + text
    f = tmp_path / ("d.tsv" if variant == "tab" else "d.csv")
    f.write_bytes(raw.encode("utf-8"))
    whole = read_table(f)
    parts = list(read_text_chunks(text_layout(f), 4))
    got = np.vstack([p[["a", "b", "y"]].to_numpy(dtype=float) for p in parts])
    # exact: the same text parsed by the same number rules, chunked or whole
    assert_allclose(got, whole[["a", "b", "y"]].to_numpy(dtype=float), rtol=0, atol=0)
    lines_got = np.concatenate([p.attrs["paths_lines"] for p in parts])
    assert lines_got.tolist() == list(whole.attrs["paths_lines"])


def test_subnormal_column_refused_not_dropped():
    """A feature whose values are all below sqrt(tiny) ≈ 1.5e-154 has squares in the
    subnormal range (IEEE 754: float64's smallest normal number is 2.2e-308), so its
    spread cannot be computed from moments; it was dropped as 'constant' without a word.
    Now it is refused in one line naming the column."""
    rng = np.random.default_rng(0)
    X = rng.standard_normal((200, 3))
    X[:, 1] *= 1e-310
    y = X[:, 0] + rng.standard_normal(200)
    with pytest.raises(InputError, match="'x1' has values no larger than"):
        stream_path(X, y=y, chunk_rows=50)
