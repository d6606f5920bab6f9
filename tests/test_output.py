"""Atomic, non-clobbering output (paths/output.py).

References: POSIX ``rename(2)`` replaces the destination atomically (so a reader
sees the old file or the new one, never a mix); Python's ``csv`` and ``json``
modules parse what we write back to the same values (``repr`` of a float round
trips exactly, a fact of binary64 since Python 3.1).
"""
from __future__ import annotations

import csv
import json

import numpy as np
import pytest

from paths.data.output import (OutputError, prepare_out_dir, write_bytes, write_columns,
                               write_csv, write_json, write_text, safe_cell)


def test_prepare_out_dir_creates_and_refuses(tmp_path):
    out = prepare_out_dir(tmp_path / "a" / "b")
    assert out.is_dir() and list(out.iterdir()) == []  # the write probe leaves nothing
    (out / "x").write_text("1")
    with pytest.raises(OutputError) as info:
        prepare_out_dir(out)
    assert "force=True" in str(info.value) and "\n" not in str(info.value)  # the parameter
    assert prepare_out_dir(out, force=True) == out
    assert (out / "x").read_text() == "1"  # --force does not empty the folder


def test_prepare_out_dir_file_and_uncreatable(tmp_path):
    f = tmp_path / "f"
    f.write_text("")
    for bad in (f, f / "sub"):
        with pytest.raises(OutputError) as info:
            prepare_out_dir(bad)
        assert "\n" not in str(info.value)


def test_write_csv_round_trips_floats(tmp_path):
    """Floats are written with repr: csv + float() give the same binary64 numbers."""
    vals = np.random.default_rng(0).standard_normal((5, 3)) * np.array([1e-300, 1.0, 1e300])
    write_csv(tmp_path / "t.csv", ["a", "b", "c"], [list(map(float, r)) + [] for r in vals])
    with open(tmp_path / "t.csv", newline="") as fh:
        rows = list(csv.reader(fh))
    assert rows[0] == ["a", "b", "c"]
    np.testing.assert_array_equal(np.array(rows[1:], dtype=float), vals)


def test_write_csv_none_is_empty(tmp_path):
    write_csv(tmp_path / "t.csv", ["a", "b"], [[1.0, None]])
    assert (tmp_path / "t.csv").read_text() == "a,b\n1.0,\n"


def test_write_json_strict(tmp_path):
    """JSON is strict (RFC 8259 has no NaN): NaN is refused, nothing is left behind."""
    write_json(tmp_path / "s.json", {"a": [1.5, 2]})
    assert json.loads((tmp_path / "s.json").read_text()) == {"a": [1.5, 2]}
    with pytest.raises(ValueError):
        write_json(tmp_path / "n.json", {"a": float("nan")})
    assert sorted(p.name for p in tmp_path.iterdir()) == ["s.json"]


def test_replace_keeps_old_file_until_done(tmp_path, monkeypatch):
    """An interrupted write (KeyboardInterrupt inside the write) keeps the old content under
    the final name and removes the temporary file."""
    dest = tmp_path / "r.txt"
    write_text(dest, "old\n")
    import paths.data.output as po

    real_fsync = po.os.fsync

    def boom(fd):
        raise KeyboardInterrupt

    monkeypatch.setattr(po.os, "fsync", boom)
    with pytest.raises(KeyboardInterrupt):
        write_text(dest, "new content that never lands\n")
    monkeypatch.setattr(po.os, "fsync", real_fsync)
    assert dest.read_text() == "old\n"
    assert [p.name for p in tmp_path.iterdir()] == ["r.txt"]


def test_write_error_is_one_line_output_error(tmp_path, monkeypatch):
    """A failing disk (ENOSPC) becomes a one-line OutputError, temp removed."""
    import errno

    import paths.data.output as po

    def full(fd):
        raise OSError(errno.ENOSPC, "No space left on device")

    monkeypatch.setattr(po.os, "fsync", full)
    with pytest.raises(OutputError) as info:
        write_bytes(tmp_path / "b.bin", b"123")
    assert "No space left" in str(info.value) and "\n" not in str(info.value)
    assert list(tmp_path.iterdir()) == []


def test_write_over_a_folder_refused(tmp_path):
    (tmp_path / "d").mkdir()
    with pytest.raises(OutputError):
        write_text(tmp_path / "d", "x")


def test_write_columns_is_write_csv_of_the_rows(tmp_path):
    """Column-wise writing gives the very text of row-wise writing, and Python's csv module
    (the reference reader) reads back every cell: floats by repr round trip exactly, text
    (with commas, quotes, CR and LF: RFC 4180 quoting) as safe_cell made it."""
    rng = np.random.default_rng(3)
    n = 200
    alphabet = list("ab,\"\r\n =+-@1.5 ") + ["\t"]
    text = np.array(["".join(rng.choice(alphabet, size=rng.integers(0, 6))) for _ in range(n)],
                    dtype=object)
    text[:4] = ["-1.5", "=SUM(1)", "", "a,b"]
    ints = rng.integers(-10**12, 10**12, size=n)
    floats = rng.standard_normal(n) * 10.0 ** rng.integers(-300, 300, size=n)
    flags = rng.random(n) < 0.5
    header = ["id", "=name", "x", "flag"]
    cols = [ints, text, floats, flags]
    rows = [[ints[i].item(), text[i], float(floats[i]), flags[i].item()] for i in range(n)]
    a = write_csv(tmp_path / "rows.csv", header, rows).read_bytes()
    b = write_columns(tmp_path / "cols.csv", header, cols).read_bytes()
    assert a == b
    with open(tmp_path / "cols.csv", newline="", encoding="utf-8") as fh:
        back = list(csv.reader(fh))
    assert len(back) == n + 1 and back[0][1] == "'=name"
    assert [float(r[2]) for r in back[1:]] == floats.tolist()  # repr round trip: exact
    assert [int(r[0]) for r in back[1:]] == ints.tolist()
    assert [r[1] for r in back[1:]] == [safe_cell(t) for t in text]
    assert [r[3] for r in back[1:]] == [str(f) for f in flags.tolist()]
