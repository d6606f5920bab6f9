"""Reading data into a design and a response, with every problem named.

Sources
-------
- Delimited text (``.csv``, ``.tsv``, ``.tab``, ``.txt``, ``.dat``; any other
  suffix is read as text too): the delimiter is detected among tab,
  semicolon, comma and pipe unless ``sep`` is given; a header row is detected
  (a first row whose every field is a number is data, and the columns are then
  named ``x0, x1, ...``).  The bytes must be UTF-8 (a byte-order mark is
  accepted).
- Parquet (``.parquet``, ``.pq``) through pyarrow; nested columns (lists,
  structs, maps) are refused when they are used.
- NumPy ``.npy`` (a 2-D array, columns ``x0, x1, ...``, or a structured array,
  columns named by its fields) and ``.npz`` (each 1-D array is a column named by
  its key, each 2-D array ``K`` of width ``c`` gives columns ``K0 ... K{c-1}``).
- From Python: a pandas DataFrame, a 2-D NumPy array, a structured array or a
  mapping of column name to 1-D array (:func:`as_frame`).

Files are opened read-only and never modified.

Selection (:func:`select`) turns a table into a :class:`Dataset`: targets, the
features (names or glob patterns, minus exclusions), an identifier column kept
out of the design, categorical columns refused or one-hot encoded, missing
values refused or dropped (rows or columns), constant and exactly duplicated
columns reported.  A separate test table is aligned to the training columns by
:func:`select_like`.

Every problem raises :class:`~paths._validation.InputError` with a one-line
message naming the file, the column or line, and the fix.
"""
from __future__ import annotations

import contextlib
import csv
import difflib
import fnmatch
import hashlib
import io as _io
import os
import re
import sys
import zipfile
from collections import defaultdict
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from paths.data.validation import InputError, all_finite, check_memory, column_range

__all__ = [
    "Dataset",
    "is_numeric_dtype",
    "numeric_block",
    "NA_TOKENS",
    "TextBlock",
    "TextLayout",
    "as_frame",
    "is_number_text",
    "number_problem",
    "parse_number",
    "load_dataset",
    "open_npy",
    "read_table",
    "read_text_block",
    "read_text_chunks",
    "select",
    "select_like",
    "sha256_of",
    "text_blocks",
    "text_layout",
]

#: Cell contents read as a missing value (pandas' defaults, minus nothing, plus nothing).
NA_TOKENS = (
    "", "#N/A", "#N/A N/A", "#NA", "-1.#IND", "-1.#QNAN", "-NaN", "-nan", "1.#IND",
    "1.#QNAN", "<NA>", "N/A", "NA", "NULL", "NaN", "None", "n/a", "nan", "null",
)
_NA_SET = frozenset(NA_TOKENS)
_TEXT_SUFFIXES = (".csv", ".tsv", ".tab", ".txt", ".dat")
_PARQUET_SUFFIXES = (".parquet", ".pq")
_DELIMITERS = ("\t", ";", ",", "|")
_DELIM_NAMES = {"\t": "tab", ";": "semicolon", ",": "comma", "|": "pipe", " ": "space"}
_SHOW = 6  # names shown in a message before "and N more"

# numbers written for people rather than for machines
_THOUSANDS_COMMA = re.compile(r"^[+-]?\d{1,3}(,\d{3})+(\.\d*)?$")
_THOUSANDS_DOT = re.compile(r"^[+-]?\d{1,3}(\.\d{3})+(,\d*)?$")
_THOUSANDS_SPACE = re.compile(r"^[+-]?\d{1,3}([ '\u00a0\u202f]\d{3})+([.,]\d*)?$")
_DECIMAL_COMMA = re.compile(r"^[+-]?\d*,\d+([eE][+-]?\d+)?$")
# the one number syntax of every reader: ASCII digits, '.', an exponent, inf/nan; Python's
# float() also takes '1_000' (PEP 515 digit grouping), '1e5j'-free complex aside, and
# non-ASCII digits, which a data file must not be read with
_NUMBER = re.compile(r"^[+-]?(?:(?:[0-9]+\.?[0-9]*|\.[0-9]+)(?:[eE][+-]?[0-9]+)?"
                     r"|inf|infinity|nan)$", re.IGNORECASE)
_UNDERSCORE = re.compile(r"^[+-]?[0-9][0-9_]*_[0-9_]*(\.[0-9_]*)?([eE][+-]?[0-9_]+)?$")
_COMPLEX = re.compile(r"^\(?[+-]?(?:[0-9.]+(?:[eE][+-]?[0-9]+)?[+-])?[0-9.]*(?:[eE][+-]?[0-9]+)?"
                      r"[jJiI]\)?$")


def is_number_text(s: str) -> bool:
    """Whether the (stripped) text ``s`` is a number in the one syntax every reader accepts.

    Examples
    --------
    >>> [is_number_text(t) for t in ("1.5", "-2e-3", ".5", "inf", "1_000", "1+2j", "١")]
    [True, True, True, True, False, False, False]
    """
    return bool(_NUMBER.match(s))


def parse_number(s: str) -> float:
    """``float(s)`` for text that :func:`is_number_text` accepts; ``ValueError`` otherwise."""
    if not _NUMBER.match(s):
        raise ValueError(f"not a number: {s!r}")
    return float(s)


def number_problem(s: str) -> str | None:
    """Why the text ``s`` looks like a number but is not read as one, or None.

    One of ``"thousands"``, ``"decimal"``, ``"underscore"``, ``"complex"``.
    """
    if _THOUSANDS_COMMA.match(s) or _THOUSANDS_SPACE.match(s) or _THOUSANDS_DOT.match(s):
        return "thousands"
    if _DECIMAL_COMMA.match(s):
        return "decimal"
    if _UNDERSCORE.match(s):
        return "underscore"
    if _COMPLEX.match(s) and any(ch.isdigit() for ch in s):
        return "complex"
    return None


_PROBLEM_FIX = {
    "decimal": "numbers with a decimal comma (e.g. {ex} on {at}); re-export the file with '.' "
               "as the decimal mark",
    "thousands": "numbers with thousands separators (e.g. {ex} on {at}); re-export the file "
                 "without thousands separators",
    "underscore": "numbers with underscores (e.g. {ex} on {at}), which are not read as digit "
                  "grouping; remove the underscores",
    "complex": "complex numbers (e.g. {ex} on {at}); split them into real and imaginary "
               "columns",
}


def _one_line(text: str) -> str:
    return " ".join(str(text).split())


def _names(items, show: int = _SHOW) -> str:
    items = [repr(str(x)) for x in items]
    more = "" if len(items) <= show else f" and {len(items) - show} more"
    return ", ".join(items[:show]) + more


def _fail(where: str, message: str) -> InputError:
    return InputError(_one_line(f"{where}{message}"))


@dataclass(frozen=True)
class Dataset:
    """A design and a response read from a table.

    Attributes
    ----------
    X : ndarray, shape (n, p)
    y : ndarray, shape (n,) or (n, t)
        One-dimensional for a single target.
    feature_names : list of str
        Design columns (one-hot columns are named ``COLUMN=LEVEL``).
    target_names : list of str
    source : str
        Where the data came from (a path, or a description).
    notes : list of str
        What the reader did or found that the report must say (header
        detection, dropped rows or columns, encodings, constant and duplicate
        columns), one sentence each.
    ids : ndarray or None
        The identifier column's values for the kept rows (``id_column``).
    id_column : str or None
    source_columns : list of str
        The table columns the design was built from, before encoding.
    encoding : dict
        ``{column: [reference, level1, level2, ...]}`` for one-hot encoded
        columns; the reference level (first, in sorted order) has no column.
    dropped_rows : list of int
        Lines (text files) or 1-based rows of the rows dropped for missing values.
    dropped_columns : list of str
        Columns dropped for missing values.
    constant_columns : list of str
        Design columns with a single value (left out of the fit, coefficient 0).
    duplicate_columns : list of list of str
        Groups of design columns that are exact copies of each other (kept).
    drop_missing : {None, "rows", "columns"}
        How missing values were handled.
    rows : ndarray of int or None
        Positions (0-based) in the table of the rows kept, when some were dropped;
        ``None`` when every row was kept.  Use it to align per-row side data
        (e.g. group labels read from the same file).
    """

    X: np.ndarray
    y: np.ndarray
    feature_names: list
    target_names: list
    source: str = ""
    notes: list = field(default_factory=list)
    ids: np.ndarray | None = None
    id_column: str | None = None
    source_columns: list = field(default_factory=list)
    encoding: dict = field(default_factory=dict)
    dropped_rows: list = field(default_factory=list)
    dropped_columns: list = field(default_factory=list)
    constant_columns: list = field(default_factory=list)
    duplicate_columns: list = field(default_factory=list)
    drop_missing: str | None = None
    rows: np.ndarray | None = None

    def record(self) -> dict:
        """The preparation record written to ``summary.json`` (JSON-serializable)."""
        return {
            "source": self.source,
            "n_rows": int(self.X.shape[0]),
            "n_features": int(self.X.shape[1]),
            "targets": list(self.target_names),
            "id_column": self.id_column,
            "drop_missing": self.drop_missing,
            "dropped_rows": [int(r) for r in self.dropped_rows],
            "dropped_columns": list(self.dropped_columns),
            "encoding": {k: {"reference": v[0], "levels": list(v)} for k, v in self.encoding.items()},
            "constant_columns": list(self.constant_columns),
            "duplicate_columns": [list(g) for g in self.duplicate_columns],
            "notes": list(self.notes),
        }


def sha256_of(path: str | os.PathLike) -> str:
    """SHA-256 of a file's bytes, read in blocks (the file is opened read-only)."""
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


# --------------------------------------------------------------------------- reading


def _check_path(p: Path) -> None:
    if p.is_dir():
        raise _fail("", f"{p} is a folder, not a data file; pass the file inside it")
    if p.is_symlink() and not p.exists():
        raise _fail("", f"{p} is a symbolic link to {os.readlink(p)}, which does not exist; "
                        "fix the link or pass the file itself")
    if not p.exists():
        near = ""
        if p.parent.is_dir():
            close = difflib.get_close_matches(
                p.name, [c.name for c in p.parent.iterdir() if c.name != p.name], n=1)
            if close:
                near = f" (did you mean {close[0]!r}?)"
        raise _fail("", f"{p}: no such file{near}; check the path")
    if not p.is_file():
        raise _fail("", f"{p} is not a regular file; pass a data file")


def _parse_sep(sep: str) -> str:
    aliases = {"\\t": "\t", "tab": "\t", "comma": ",", "semicolon": ";", "pipe": "|",
               "space": " "}
    s = aliases.get(sep.lower(), sep) if isinstance(sep, str) else sep
    if not isinstance(s, str) or len(s) != 1 or s in "\"\r\n" or s.isalnum() or s == ".":
        raise InputError(
            f"sep= must be one delimiter character (',', ';', '|', or 'tab'); got {sep!r}"
        )
    return s


def _decode(data: bytes, p: Path, first_line: int = 1) -> str:
    if data[:2] in (b"\xff\xfe", b"\xfe\xff"):
        raise _fail("", f"{p} is UTF-16 text; re-save it as UTF-8")
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError as exc:
        line = data[:exc.start].count(b"\n") + first_line
        byte = data[exc.start:exc.start + 1].hex().upper()
        raise _fail("", f"{p} is not UTF-8 text (byte 0x{byte} on line {line}, offset "
                        f"{exc.start}); re-save it as UTF-8") from None
    if text.startswith("\ufeff"):
        text = text[1:]
    if "\x00" in text:
        line = text[:text.index("\x00")].count("\n") + first_line
        raise _fail("", f"{p} contains NUL bytes (line {line}); it looks like a binary file, "
                        "not delimited text; pass a CSV/TSV, Parquet or .npy/.npz file")
    return text.replace("\r\n", "\n").replace("\r", "\n")


def _scan(text: str, sep: str):
    """Start line and field count of every non-blank record, and the first records' fields.

    Returns ``(lines, counts, head)``; ``head`` holds the fields of the first six records
    (for header detection).  Fields are only materialized for those; the rest are counted.
    """
    lines, counts, head = [], [], []
    if '"' not in text:
        for i, line in enumerate(text.split("\n")):
            if line:
                lines.append(i + 1)
                counts.append(line.count(sep) + 1)
                if len(head) < 6:
                    head.append(line.split(sep))
        return lines, counts, head
    reader = csv.reader(_io.StringIO(text), delimiter=sep)
    last = 0
    try:
        with _wide_fields():
            for row in reader:  # fields of one record at a time
                start, last = last + 1, reader.line_num
                if row:
                    lines.append(start)
                    counts.append(len(row))
                    if len(head) < 6:
                        head.append(row)
    except csv.Error as exc:
        raise InputError(_one_line(f"line {reader.line_num + 1}: {exc}")) from None
    return lines, counts, head


@contextlib.contextmanager
def _wide_fields():
    """Let the csv module read fields of any length (its default limit is 131072 chars)."""
    old = csv.field_size_limit()
    csv.field_size_limit(min(sys.maxsize, 2**31 - 1))
    try:
        yield
    finally:
        csv.field_size_limit(old)


def _sniff(text: str) -> str:
    """The delimiter that splits the first lines into the same number (> 1) of fields."""
    sample = []
    for line in text.split("\n", 2000)[:2000]:
        if line.strip():
            sample.append(line)
            if len(sample) >= 50:
                break
    best, best_score = ",", (0, 0)
    for cand in _DELIMITERS:
        if '"' not in "".join(sample):
            counts = [line.count(cand) + 1 for line in sample]
        else:
            try:
                with _wide_fields():
                    counts = [len(r) for r in csv.reader(sample, delimiter=cand)]
            except csv.Error:
                continue
        if not counts:
            continue
        modal = max(set(counts), key=counts.count)
        consistent = all(c == counts[0] for c in counts)
        if modal > 1 and consistent:
            return cand
        score = (counts.count(modal), modal) if modal > 1 else (0, 0)
        if score > best_score:
            best, best_score = cand, score
    return best


def _is_number(s: str) -> bool:
    s = s.strip()
    if s in _NA_SET:
        return True
    return is_number_text(s)


def _has_header(head) -> bool:
    """A header row has a non-number field in a column the next rows hold numbers in,
    or holds no numbers at all."""
    first = head[0]
    if all(_is_number(f) for f in first):
        return False
    rest = head[1:6]
    if not rest:
        return True
    for j, f in enumerate(first):
        if not _is_number(f) and all(j < len(r) and _is_number(r[j]) for r in rest):
            return True
    return not any(_is_number(f) and f.strip() for f in first)


_BLANK = re.compile(r"(?m)^[ \t]+$")


@dataclass(frozen=True)
class TextLayout:
    """How a delimited text file is laid out, as the reader's rules decide it.

    Attributes
    ----------
    path : Path
    sep : str
        The delimiter (given, tab for ``.tsv``/``.tab``, or detected).
    header : bool
        Whether the first record is a header (given or detected).
    names : list of str
        Column names (from the header, or ``x0, x1, ...``).
    width : int
        Fields per record.
    data_line : int
        1-based line of the first data record.
    notes : list of str
        What the reader detected (delimiter, header, unnamed columns).
    """

    path: Path
    sep: str
    header: bool
    names: list
    width: int
    data_line: int
    notes: list


def _clean_text(text: str) -> str:
    if (text[:1] in (" ", "\t") or "\n " in text or "\n\t" in text) and _BLANK.search(text):
        text = _BLANK.sub("", text)
    return text


def _layout(p: Path, text: str, sep, header) -> tuple[TextLayout, list, list]:
    """The layout of ``text`` (the whole file, or its first lines), with the records'
    start lines and field counts (``_scan``)."""
    if not text or text.isspace():
        raise _fail("", f"{p} is empty; pass a file with a header row and data rows")
    notes = []
    if sep is None:
        if p.suffix.lower() in (".tsv", ".tab"):
            sep = "\t"
        else:
            sep = _sniff(text)
            notes.append(f"delimiter detected: {_DELIM_NAMES.get(sep, repr(sep))}")
    else:
        sep = _parse_sep(sep)
    try:
        starts, counts, head = _scan(text, sep)
    except InputError as exc:
        raise _fail(f"{p}: ", f"{exc}; check the quoting") from None
    if header is None:
        header = _has_header(head)
        if not header:
            notes.append("no header row detected: columns named x0, x1, ...")
    width = int(counts[0])
    if header:
        names = [f.strip() for f in head[0]]
        for j, nm in enumerate(names):
            if nm == "":
                names[j] = f"unnamed_{j + 1}"
                notes.append(f"column {j + 1} has no name in the header: named {names[j]!r}")
        seen = {}
        for j, nm in enumerate(names):
            if nm in seen:
                raise _fail(f"{p}: ", f"column name {nm!r} appears twice in the header "
                                      f"(columns {seen[nm] + 1} and {j + 1}); rename one")
            seen[nm] = j
    else:
        names = [f"x{j}" for j in range(width)]
    body = starts[1:] if header else starts
    layout = TextLayout(path=p, sep=sep, header=bool(header), names=names, width=width,
                        data_line=int(body[0]) if body else 0, notes=notes)
    return layout, starts, counts


def _check_ragged(layout: TextLayout, starts, counts, first_line: int) -> None:
    """Refuse records whose field count differs from the header's (lines as in the file)."""
    counts = np.asarray(counts)
    ragged = np.flatnonzero(counts != layout.width)
    if not ragged.size:
        return
    k = int(ragged[0])
    sep, width = layout.sep, layout.width
    what = "the header" if layout.header else f"line {first_line}"
    hint = (" (a ',' inside an unquoted number, e.g. a thousands separator, splits it"
            " in two: quote it or remove the separators)"
            if sep == "," and counts[k] > width else "")
    raise _fail(f"{layout.path}: ", f"line {starts[k]} has {counts[k]} fields but {what} has "
                                    f"{width} ({_DELIM_NAMES.get(sep, repr(sep))}-delimited; "
                                    f"{ragged.size} ragged line(s)){hint}; make every row the "
                                    "same length or pass the right sep=")


def _parse_records(layout: TextLayout, text, skiprows: int, body,
                   keep_text=()) -> pd.DataFrame:
    """The data records of ``text`` (str, or UTF-8 bytes already checked) as a frame
    (numbers as numbers, the NA tokens as missing), ``attrs["paths_lines"]`` their lines;
    the ``keep_text`` columns stay text (stripped) even where they hold only numbers."""
    raw = text.encode("utf-8") if isinstance(text, str) else text
    try:
        df = pd.read_csv(
            _io.BytesIO(raw), sep=layout.sep, header=None, encoding="utf-8",
            skiprows=skiprows, names=layout.names, na_values=list(NA_TOKENS),
            keep_default_na=False, skipinitialspace=True, skip_blank_lines=True, engine="c",
            low_memory=False, quotechar='"', index_col=False,
            dtype={c: str for c in keep_text} if keep_text else None,
        )
    except (pd.errors.ParserError, pd.errors.EmptyDataError, ValueError, csv.Error,
            OverflowError) as exc:
        msg = _one_line(str(exc).strip().splitlines()[-1] if str(exc).strip() else type(exc).__name__)
        raise _fail(f"{layout.path}: ", f"could not be parsed ({msg}); check the delimiter "
                                        "(sep=) and the quoting") from None
    lines = np.asarray(body, dtype=np.int64)
    if df.shape[0] != lines.size:  # pandas read the quoting differently: positions only
        lines = None
    df = _numeric_text_columns(df, layout.path, lines, keep_text)
    df.attrs["paths_lines"] = lines
    return df


def _read_text(p: Path, sep: str | None, header: bool | None) -> pd.DataFrame:
    with open(p, "rb") as fh:
        data = fh.read()
    text = _clean_text(_decode(data, p))
    layout, starts, counts = _layout(p, text, sep, header)
    width = layout.width
    # pandas holds each column as an object (about 4 KiB each) plus the text and the floats
    check_memory(width * 4096.0 + len(counts) * width * 8.0 * 3,
                 f"{p}: {len(counts)} rows x {width} columns read in memory",
                 "use engine='stream' (row chunks; column blocks for wide Parquet) or keep "
                 "fewer columns")
    _check_ragged(layout, starts, counts, starts[0])
    body = starts[1:] if layout.header else starts
    if not body:
        raise _fail("", f"{p} has a header row but no data rows; add data rows")
    df = _parse_records(layout, text, starts[1] - 1 if layout.header else 0, body)
    df.attrs["paths_notes"] = list(layout.notes)
    return df


_HEAD_BYTES = 1 << 20  # the delimiter and the header are decided on the first MiB (2000 lines)


def text_layout(path, *, sep: str | None = None, header: bool | None = None) -> TextLayout:
    """The layout of a delimited text file, decided on its first lines as :func:`read_table` does.

    Raises
    ------
    InputError
        A missing file, empty file, a header without data rows, non-UTF-8 bytes,
        duplicate column names, a bad ``sep``.
    """
    p = Path(path)
    _check_path(p)
    with open(p, "rb") as fh:
        data = fh.read(_HEAD_BYTES)
        if len(data) == _HEAD_BYTES:  # complete the last line
            data += fh.readline()
    text = _clean_text(_decode(data, p))
    if text and not text.isspace():
        text = "\n".join(text.split("\n", 2000)[:2000])
    layout, starts, counts = _layout(p, text, sep, header)
    if not layout.data_line:
        raise _fail("", f"{p} has a header row but no data rows; add data rows")
    return layout


@dataclass(frozen=True)
class TextBlock:
    """A run of whole records of a text file: ``length`` bytes from ``offset``, starting on
    line ``first_line``, holding ``records`` data records."""

    offset: int
    length: int
    first_line: int
    records: int


def text_blocks(layout: TextLayout, block_bytes: int = 64 << 20) -> list:
    """Split the data records of a text file into blocks of about ``block_bytes`` bytes,
    each ending on a record boundary (never inside a quoted field), for parallel reading
    with :func:`read_text_block`."""
    out = []
    with open(layout.path, "rb") as fh:
        for _ in range(layout.data_line - 1):
            fh.readline()
        start, first, line, records, odd = fh.tell(), layout.data_line, layout.data_line, 0, False
        for raw in fh:
            odd ^= bool(raw.count(b'"') % 2)
            line += 1
            if not odd and raw.strip(b" \t\r\n"):
                records += 1
            if not odd and fh.tell() - start >= block_bytes:
                out.append(TextBlock(start, fh.tell() - start, first, records))
                start, first, records = fh.tell(), line, 0
        if fh.tell() > start:
            out.append(TextBlock(start, fh.tell() - start, first, records))
    return out


def read_text_block(layout: TextLayout, block: TextBlock, keep_text=()) -> pd.DataFrame:
    """The records of one :class:`TextBlock`, under the rules of :func:`read_text_chunks`."""
    with open(layout.path, "rb") as fh:
        fh.seek(block.offset)
        buf = fh.read(block.length)
    return _records_of(layout, buf, block.first_line, tuple(keep_text))


_WS = np.zeros(256, dtype=bool)
_WS[[9, 13, 32]] = True  # tab, carriage return, space


def _scan_bytes(buf: bytes, sep: str):
    """``_scan`` for UTF-8 bytes without quotes or carriage returns, vectorized: start
    lines (1-based) and field counts of the non-blank lines; None when a line holds only
    spaces or tabs (the text route then cleans it as the whole-file reader does)."""
    a = np.frombuffer(buf, dtype=np.uint8)
    if not a.size:
        return [], []
    nl = np.flatnonzero(a == 10)
    ends = nl if a[-1] == 10 else np.append(nl, a.size)
    begins = np.concatenate([[0], ends[:-1] + 1])
    filled = np.flatnonzero(ends > begins)
    if not filled.size:
        return [], []
    for i in filled[_WS[a[begins[filled]]]]:  # lines that start blank: whitespace only?
        if not buf[begins[i]:ends[i]].strip(b" \t"):
            return None
    sp = np.flatnonzero(a == ord(sep))
    counts = np.searchsorted(sp, ends[filled]) - np.searchsorted(sp, begins[filled]) + 1
    return (filled + 1).tolist(), counts.tolist()


def _records_of(layout: TextLayout, buf: bytes, line: int, keep_text=()):
    p = layout.path
    fast = None
    if b'"' not in buf and b"\x00" not in buf and b"\r" not in buf and \
            not buf.startswith(b"\xef\xbb\xbf"):  # else the text route (quotes, NUL, CR, BOM)
        fast = _scan_bytes(buf, layout.sep)
    if fast is not None:
        try:
            buf.decode("utf-8")
        except UnicodeDecodeError:
            _decode(buf, p, first_line=line)  # raises with the line
        (starts, counts), text = fast, buf
    else:
        text = _clean_text(_decode(buf, p, first_line=line))
        try:
            starts, counts, _ = _scan(text, layout.sep)
        except InputError as exc:
            raise _fail(f"{p}: ", f"{exc}; check the quoting") from None
    starts = [line + s - 1 for s in starts]
    if not starts:
        return None
    _check_ragged(layout, starts, counts, layout.data_line - int(layout.header))
    return _parse_records(layout, text, 0, starts, keep_text)


def read_text_chunks(layout: TextLayout, chunk_rows: int, keep_text=()):
    """The data records of a text file, ``chunk_rows`` lines at a time, under the rules of
    :func:`read_table`: every record as wide as the header, the NA tokens, numbers with
    thousands separators or decimal commas named, UTF-8 only.  The ``keep_text``
    columns stay text as written (stripped), even in chunks where they hold only numbers.

    Yields
    ------
    DataFrame
        Columns ``layout.names``; ``attrs["paths_lines"]`` holds the file line of each row.
    """
    import itertools

    p = layout.path
    with open(p, "rb") as fh:
        for _ in range(layout.data_line - 1):
            fh.readline()
        line = layout.data_line
        while True:
            lines = list(itertools.islice(fh, chunk_rows))
            if not lines:
                return
            buf = b"".join(lines)
            while b'"' in buf and buf.count(b'"') % 2:  # a quoted field runs on
                more = fh.readline()
                if not more:
                    break
                lines.append(more)
                buf += more
            frame = _records_of(layout, buf, line, tuple(keep_text))
            if frame is not None:
                yield frame
            line += len(lines)


def _as_floats(values: list):
    """``values`` (str or None) as float64 with NaN for None, or the index of the first
    value that is not a number."""
    try:
        return np.array([np.nan if v is None else parse_number(v) for v in values],
                        dtype=np.float64)
    except ValueError:
        pass
    for i, v in enumerate(values):
        if v is not None and not is_number_text(v):
            return i
    return None  # pragma: no cover (the fast path would have succeeded)


def _numeric_text_columns(df: pd.DataFrame, p: Path, lines, keep_text=()) -> pd.DataFrame:
    """Convert text columns that hold numbers (not the ``keep_text`` ones); name the
    column when numbers are written with thousands separators or decimal commas."""
    out = {}
    text_cols = [c for c, dt in zip(df.columns, df.dtypes) if not pd.api.types.is_numeric_dtype(dt)]
    for col in text_cols:
        raw = df[col].to_numpy(dtype=object)
        stripped = [None if (v is None or v is pd.NA or (isinstance(v, float) and v != v))
                    else str(v).strip() for v in raw]
        stripped = [None if v is None or v in _NA_SET else v for v in stripped]
        if col in keep_text:
            out[col] = np.array(stripped, dtype=object)
            continue
        conv = _as_floats(stripped)
        if isinstance(conv, np.ndarray):
            out[col] = conv
            continue
        i = conv
        bad = [v for v in stripped if v is not None and not _is_number(v)][:200]
        kinds = [k for k in map(number_problem, bad) if k is not None]
        if bad and len(kinds) / len(bad) >= 0.5:
            kind = max(set(kinds), key=kinds.count)
            j = next(k for k, v in enumerate(stripped)
                     if v is not None and number_problem(v) == kind)
            at = f"line {lines[j]}" if lines is not None else f"row {j + 1}"
            raise _fail(f"{p}: ", f"column {col!r} has " + _PROBLEM_FIX[kind].format(
                ex=repr(stripped[j]), at=at))
        out[col] = np.array(stripped, dtype=object)
    if not out:
        return df
    if len(out) > 50:  # rebuild once rather than inserting column by column
        return pd.DataFrame({c: out[c] if c in out else df[c].to_numpy() for c in df.columns},
                            index=df.index)
    df = df.copy()
    for col, values in out.items():
        df[col] = values
    return df


#: Bytes of Arrow columns held at a time while a float table is copied into its frame.
_PARQUET_BATCH_BYTES = 4 << 20


def _float_parquet(p: Path):
    """An all-float Parquet table as a frame over ONE float64 block, or None.

    The columns are read a few at a time (about :data:`_PARQUET_BATCH_BYTES`) and
    copied into one ``(columns, rows)`` array that the frame wraps without a copy,
    so the file's data are held once (plus one batch of Arrow columns), not as an
    Arrow table and a pandas frame side by side.  None (the general reader) for
    any other column type, repeated names, or a stored pandas index.
    """
    import pyarrow as pa
    import pyarrow.parquet as pq

    try:
        pf = pq.ParquetFile(p)
    except (pa.ArrowException, OSError, ValueError):
        return None  # the general reader states why, in its own words
    schema = pf.schema_arrow
    names = schema.names
    n = pf.metadata.num_rows
    if n == 0 or not names or len(set(names)) != len(names):
        return None
    if not all(pa.types.is_float32(f.type) or pa.types.is_float64(f.type) for f in schema):
        return None
    meta = schema.pandas_metadata
    if meta is not None and (any(not isinstance(i, dict) for i in meta.get("index_columns", []))
                             or any(c.get("name") != c.get("field_name")
                                    for c in meta.get("columns", []))):
        return None
    block = np.empty((len(names), n))
    per = max(1, _PARQUET_BATCH_BYTES // (8 * n))
    for s in range(0, len(names), per):
        part = pf.read(columns=None if per >= len(names) else names[s:s + per],
                       use_pandas_metadata=False)
        for j, col in enumerate(part.columns):
            at = 0
            for chunk in col.chunks:
                block[s + j, at:at + len(chunk)] = chunk.to_numpy(zero_copy_only=False)
                at += len(chunk)
            if at != n:
                return None
        del part
    pa.default_memory_pool().release_unused()
    df = pd.DataFrame(block.T, columns=list(names), copy=False)
    df.attrs["paths_nested"] = {}
    return df


def _read_parquet(p: Path) -> pd.DataFrame:
    import pyarrow as pa
    import pyarrow.parquet as pq

    try:
        fast = _float_parquet(p)
        if fast is not None:
            return fast
        table = pq.read_table(p)
    except (pa.ArrowException, OSError, ValueError) as exc:
        msg = _one_line(str(exc)) or type(exc).__name__
        raise _fail("", f"{p} is not a readable Parquet file ({msg[:160]}); check the file "
                        "or re-export it") from None
    nested = {}
    keep = []
    for i, fld in enumerate(table.schema):
        if pa.types.is_nested(fld.type) or pa.types.is_union(fld.type):
            nested[fld.name] = str(fld.type)
        else:
            keep.append(i)
    names = table.schema.names
    if len(set(names)) != len(names):
        dup = next(n for n in names if names.count(n) > 1)
        raise _fail(f"{p}: ", f"column name {dup!r} appears twice; rename one")
    table = table.select(keep)
    cols = {}
    for fld, arr in zip(table.schema, table.columns):
        if pa.types.is_decimal(fld.type):
            arr = arr.cast(pa.float64())
        cols[fld.name] = arr
    table = pa.table(cols) if cols else table
    df = table.to_pandas()
    del table, cols
    pa.default_memory_pool().release_unused()
    if df.shape[0] == 0:
        raise _fail("", f"{p} has columns but no rows; add data rows")
    df.attrs["paths_nested"] = nested
    return df


def _frame_from_arrays(arrays: dict, p, default_prefix: str) -> pd.DataFrame:
    cols = {}
    length = None
    for key, arr in arrays.items():
        arr = np.asarray(arr)
        if arr.dtype.names:
            for name in arr.dtype.names:
                sub = arr[name]
                if sub.ndim != 1:
                    raise _fail(f"{p}: ", f"field {name!r} of {key!r} is not a scalar field; "
                                          "store one value per row and field")
                cols[name] = sub
            n_rows = arr.shape[0] if arr.ndim else 1
        elif arr.ndim == 1:
            if key is None:  # a lone .npy vector has no column to name or to take as target
                raise _fail(f"{p}: ", f"the array is 1-D (shape {arr.shape}): one column without "
                                      "a name; save the table as 2-D (rows x columns, target "
                                      "included: columns x0, x1, ...) or as a .npz of named "
                                      "columns")
            cols[key] = arr
            n_rows = arr.shape[0]
        elif arr.ndim == 2:
            prefix = default_prefix if key is None else key
            for j in range(arr.shape[1]):
                cols[f"{prefix}{j}"] = arr[:, j]
            n_rows = arr.shape[0]
        else:
            raise _fail(f"{p}: ", f"array {key or ''!r} has {arr.ndim} dimensions (shape "
                                  f"{arr.shape}); a table needs 2-D (rows x columns)")
        if arr.dtype.kind == "c":
            raise _fail(f"{p}: ", f"array {key or ''!r} holds complex numbers; split them into "
                                  "real and imaginary columns")
        if length is None:
            length = n_rows
        elif n_rows != length:
            raise _fail(f"{p}: ", f"array {key!r} has {n_rows} rows but the others have "
                                  f"{length}; every array must have one entry per row")
    if not cols:
        raise _fail("", f"{p} holds no arrays; pass a file with data")
    df = pd.DataFrame(cols)
    if df.shape[0] == 0:
        raise _fail("", f"{p} has no rows; pass data with at least 2 rows")
    return df


def _numpy_error(p: Path, exc: BaseException) -> InputError:
    msg = _one_line(str(exc)) or type(exc).__name__
    return _fail("", f"{p} is not a readable NumPy file ({msg[:160]}); save it with "
                     "numpy.save / numpy.savez, without object arrays")


def open_npy(path) -> np.ndarray:
    """A ``.npy`` file memory-mapped read-only, under the reader's rules: never unpickled,
    a truncated or object array refused, complex numbers refused (one line each).

    Raises
    ------
    InputError
        A missing or unreadable file, object/pickled or truncated data, complex values.
    """
    p = Path(path)
    _check_path(p)
    try:
        arr = np.load(p, mmap_mode="r", allow_pickle=False)
    except (ValueError, OSError, EOFError) as exc:
        raise _numpy_error(p, exc) from None
    if arr.dtype.kind == "c":
        raise _fail(f"{p}: ", "the array holds complex numbers; split them into real and "
                              "imaginary columns")
    if arr.dtype.kind not in "biuf":
        raise _fail(f"{p}: ", f"the array has dtype {arr.dtype} (not numbers); save a numeric "
                              "2-D array (or read structured arrays with engine='memory')")
    return arr


def _read_numpy(p: Path) -> pd.DataFrame:
    try:
        if p.suffix.lower() == ".npy":
            arr = np.load(p, mmap_mode="r", allow_pickle=False)
            return _frame_from_arrays({None: arr}, p, "x")
        with np.load(p, allow_pickle=False) as z:
            arrays = {k: z[k] for k in z.files}
    except InputError:
        raise
    except (ValueError, OSError, EOFError, zipfile.BadZipFile, KeyError) as exc:
        raise _numpy_error(p, exc) from None
    return _frame_from_arrays(arrays, p, "x")


def read_table(path: str | os.PathLike, *, sep: str | None = None,
               header: bool | None = None) -> pd.DataFrame:
    """Read a data file into a DataFrame (text, Parquet, ``.npy``/``.npz``).

    Parameters
    ----------
    path : path-like
        The file; its suffix picks the reader (text for anything not Parquet
        or NumPy).
    sep : str, optional
        Delimiter for text files (one character, or ``"tab"``); detected when
        omitted (tab for ``.tsv``/``.tab``).
    header : bool, optional
        Whether a text file's first row is a header; detected when omitted.

    Returns
    -------
    DataFrame
        Numeric columns as numbers, others as text.  ``attrs["paths_lines"]``
        maps rows to file lines (text files), ``attrs["paths_notes"]`` lists
        what the reader detected, ``attrs["paths_nested"]`` the nested Parquet
        columns left out.

    Raises
    ------
    InputError
        A missing file or a folder, empty file, header without data, non-UTF-8
        bytes, ragged rows, numbers with thousands separators or decimal
        commas, duplicate column names, an unreadable Parquet/NumPy file.
    """
    p = Path(path)
    _check_path(p)
    suffix = p.suffix.lower()
    if suffix in _PARQUET_SUFFIXES:
        df = _read_parquet(p)
    elif suffix in (".npy", ".npz"):
        df = _read_numpy(p)
    else:
        df = _read_text(p, sep, header)
    df.attrs.setdefault("paths_notes", [])
    df.attrs["paths_source"] = str(p)
    return df


def as_frame(data) -> pd.DataFrame:
    """A DataFrame view of in-memory data: a DataFrame, a 2-D or structured NumPy array
    (columns ``x0, x1, ...`` or the field names), or a mapping of names to 1-D arrays."""
    if isinstance(data, pd.DataFrame):
        return _nullable_booleans(data)
    if isinstance(data, dict):
        return _frame_from_arrays(data, "data", "x")
    arr = np.asarray(data)
    if arr.ndim == 1 and not arr.dtype.names:
        raise InputError(f"data is 1-D with shape {arr.shape}; pass a 2-D array (rows x columns)")
    return _frame_from_arrays({None: arr}, "data", "x")


def _nullable_booleans(df: pd.DataFrame) -> pd.DataFrame:
    """Object columns of true/false with missing values (a Parquet boolean column with
    nulls) as pandas' nullable boolean: read as 0/1 with missing values, not as text."""
    cols = [c for c, dt in zip(df.columns, df.dtypes) if dt == object and df[c].isna().any()
            and df[c].notna().any()
            and df[c].dropna().map(type).isin([bool, np.bool_]).all()]
    if not cols:
        return df
    df = df.copy()
    for c in cols:
        df[c] = df[c].astype("boolean")
    return df


# --------------------------------------------------------------------------- selection



def _refuse_infinite(where, sub_lines, *blocks):
    """One-line error for the first infinite value in ``(array, column names, kind)`` blocks."""
    for arr, cols, kind in blocks:
        if all_finite(arr):
            continue
        bad = ~np.isfinite(arr)
        if bad.any():
            j = int(np.flatnonzero(bad.any(axis=0))[0])
            i = int(np.flatnonzero(bad[:, j])[0])
            raise _fail(where, f"{kind} column {cols[j]!r} has {int(bad[:, j].sum())} infinite "
                               f"value(s) (first on {_row_label(sub_lines, i)}); replace them "
                               "with finite numbers or remove those rows")

def _row_label(lines, i: int) -> str:
    return f"line {int(lines[i])}" if lines is not None else f"row {i + 1}"


def _expand(patterns, columns, what: str, where: str) -> list:
    """Columns matching names or glob patterns, in file order per pattern, no repeats."""
    chosen = []
    for pat in patterns:
        pat = str(pat)
        if pat in columns:
            hits = [pat]
        else:
            hits = [c for c in columns if fnmatch.fnmatchcase(c, pat)]
        if not hits:
            close = difflib.get_close_matches(pat, columns, n=3)
            hint = f" (close: {_names(close)})" if close else ""
            raise _fail(where, f"{what} {pat!r} matches no column{hint}; columns are: "
                               f"{_names(columns, 8)}")
        chosen.extend(h for h in hits if h not in chosen)
    return chosen


def _split_list(values, columns) -> list:
    """Accept repeated options and comma-separated lists (unless a name has a comma)."""
    if values is None:
        return None
    if isinstance(values, str):
        values = [values]
    out = []
    for v in values:
        v = str(v)
        if v in columns or "," not in v:
            out.append(v)
        else:
            out.extend(s.strip() for s in v.split(",") if s.strip())
    return out


def _is_numeric(s: pd.Series) -> bool:
    return (pd.api.types.is_numeric_dtype(s) and not pd.api.types.is_complex_dtype(s)) or \
        pd.api.types.is_bool_dtype(s)


def _float_column(s: pd.Series) -> np.ndarray:
    if pd.api.types.is_bool_dtype(s) or pd.api.types.is_extension_array_dtype(s):
        return s.astype("float64").to_numpy(dtype=np.float64, na_value=np.nan)
    return s.to_numpy(dtype=np.float64)


def _first_non_number(s: pd.Series) -> int:
    num = pd.to_numeric(s.astype(object).where(s.notna(), None), errors="coerce")
    bad = (num.isna() & s.notna()).to_numpy()
    return int(np.argmax(bad)) if bad.any() else int(np.argmax(s.notna().to_numpy()))


def _is_numeric_dtype(dt) -> bool:
    return (pd.api.types.is_numeric_dtype(dt) and not pd.api.types.is_complex_dtype(dt)) or \
        pd.api.types.is_bool_dtype(dt)


def _plain_float_frame(frame: pd.DataFrame) -> bool:
    return all(dt.kind in "fiu" and not pd.api.types.is_extension_array_dtype(dt)
               for dt in frame.dtypes)


def _missing_block(frame: pd.DataFrame, cols) -> np.ndarray:
    """Missing-value mask (n, len(cols)); one array operation for an all-numeric table."""
    if _plain_float_frame(frame):
        values = frame.to_numpy(dtype=np.float64)  # a view for a one-block float frame
        step = max(1, (1 << 20) // max(values.shape[1], 1))
        if not any(np.isnan(values[s:s + step]).any()  # row blocks: no table-sized mask
                   for s in range(0, values.shape[0], step)):
            return np.zeros((values.shape[0], len(cols)), dtype=bool)
        return np.isnan(values[:, frame.columns.get_indexer(cols)])
    return frame[list(cols)].isna().to_numpy()


def _float_block(frame: pd.DataFrame, cols) -> np.ndarray:
    """Numeric columns as one float64 array (n, len(cols)), missing as NaN."""
    if not cols:
        return np.zeros((frame.shape[0], 0))
    if _plain_float_frame(frame):  # one conversion, then columns by position (no block takes)
        values = frame.to_numpy(dtype=np.float64)  # a view for a one-block float frame
        pos = frame.columns.get_indexer(cols)
        out = np.empty((values.shape[0], len(cols)))  # row-major: the design's layout
        step = max(1, (8 << 20) // (8 * len(cols)))  # row blocks: no whole-table temporary
        for s in range(0, values.shape[0], step):
            out[s:s + step] = values[s:s + step, pos]
        return out
    block = frame[list(cols)]
    if all(dt.kind in "fiu" and not pd.api.types.is_extension_array_dtype(dt)
           for dt in block.dtypes):
        return block.to_numpy(dtype=np.float64)
    return np.column_stack([_float_column(block[c]) for c in cols])


def is_numeric_dtype(dt) -> bool:
    """Whether :func:`select` reads a column of dtype ``dt`` as numbers (numbers or booleans)."""
    return _is_numeric_dtype(dt)


def numeric_block(frame: pd.DataFrame, cols) -> np.ndarray:
    """Numeric columns of ``frame`` as float64 (n, len(cols)), missing as NaN, converted as
    :func:`select` converts them (booleans and nullable types included)."""
    return _float_block(frame, list(cols))


def _missing_mask(s: pd.Series) -> np.ndarray:
    return s.isna().to_numpy()


@dataclass(frozen=True)
class _SelectFrame:
    """A table as :func:`select` reads it: a bare frame with string column names, plus what the
    reader left in its attributes."""
    df: pd.DataFrame
    source: str
    where: str  # message prefix ("file: " or "")
    lines: object  # the file line of each row, or None
    nested: dict  # nested-type column -> its type
    notes: tuple  # the reader's notes


@dataclass(frozen=True)
class _Columns:
    """The columns :func:`select` uses, in order."""
    targets: list
    features: list
    id_column: str | None


@dataclass(frozen=True)
class _Rows:
    """What the missing values leave: the kept rows and feature columns, and what was dropped."""
    keep: np.ndarray  # boolean, one per row
    features: list
    categorical: list
    dropped_rows: list
    dropped_columns: list
    notes: tuple


@dataclass(frozen=True)
class _Design:
    """The design matrix built from the kept rows, with its column names."""
    X: np.ndarray
    names: list
    encoding: dict  # categorical column -> its sorted levels
    notes: tuple


@dataclass(frozen=True)
class _DesignNotes:
    """Constant and exactly duplicated design columns, and the notes about them."""
    constant: list
    duplicates: list
    notes: tuple


def _select_frame(df, source: str) -> _SelectFrame:
    """The table as a bare frame (no attrs) with string column names, and its reader attrs."""
    df = as_frame(df)
    attrs = dict(df.attrs)
    if attrs:  # pandas deep-copies attrs on every column access: work on a bare view
        df = df.copy(deep=False)
        df.attrs = {}
    source = source or attrs.get("paths_source", "")
    df = df.rename(columns=str) if any(not isinstance(c, str) for c in df.columns) else df
    return _SelectFrame(df=df, source=source, where=f"{source}: " if source else "",
                        lines=attrs.get("paths_lines"),
                        nested=dict(attrs.get("paths_nested") or {}),
                        notes=tuple(attrs.get("paths_notes") or []))


def _select_options(encode, drop_missing):
    """The ``encode`` option normalised ("none" and "" mean None); both options checked."""
    if encode in ("none", ""):
        encode = None
    if encode not in (None, "onehot"):
        raise InputError(f"encode must be 'onehot' or None; got {encode!r}")
    if drop_missing not in (None, "rows", "columns"):
        raise InputError(f"drop_missing must be 'rows', 'columns' or None; got {drop_missing!r}")
    return encode


def _choose_targets(target, id_column, all_columns, where: str) -> list:
    """The target column names, checked to exist, be distinct and differ from the id column."""
    targets = _split_list(target, all_columns) or []
    if not targets:
        raise InputError(f"{where}no target given; pass target=COLUMN")
    for t in targets:
        if t not in all_columns:
            close = difflib.get_close_matches(t, all_columns, n=3)
            hint = f" (close: {_names(close)})" if close else ""
            raise _fail(where, f"target column {t!r} not found{hint}; columns are: "
                               f"{_names(all_columns, 8)}")
    if len(set(targets)) != len(targets):
        raise _fail(where, "a target column is given twice; pass each target= once")
    if id_column is not None:
        if id_column not in all_columns:
            raise _fail(where, f"id_column= column {id_column!r} not found; columns are: "
                               f"{_names(all_columns, 8)}")
        if id_column in targets:
            raise _fail(where, f"column {id_column!r} is both the id_column= and a target=; "
                               "choose one")
    return targets


def _choose_features(features, exclude, reserved: set, all_columns, where: str) -> list:
    """Feature columns from the ``features=`` and ``exclude=`` names or patterns."""
    if features is None:
        feats = [c for c in all_columns if c not in reserved]
    else:
        feats = _expand(_split_list(features, all_columns), all_columns, "features= pattern",
                        where)
        named = [f for f in feats if f in reserved]
        explicit = [f for f in named if f in _split_list(features, all_columns)]
        if explicit:
            raise _fail(where, f"column {explicit[0]!r} is given as a feature and as the "
                               "target or id_column=; remove it from features=")
        feats = [f for f in feats if f not in reserved]
    if exclude:
        gone = _expand(_split_list(exclude, all_columns), all_columns, "exclude= pattern", where)
        feats = [f for f in feats if f not in gone]
    if not feats:
        raise _fail(where, "no feature columns left (p = 0) after the target, id_column=, features= "
                           "and exclude=; keep at least one feature column")
    return feats


def _choose_columns(frame: _SelectFrame, target, features, exclude, id_column) -> _Columns:
    """The target, feature and identifier columns; nested-type columns among them refused."""
    where, nested = frame.where, frame.nested
    all_columns = [str(c) for c in frame.df.columns] + list(nested)
    targets = _choose_targets(target, id_column, all_columns, where)
    reserved = set(targets) | ({id_column} if id_column else set())
    feats = _choose_features(features, exclude, reserved, all_columns, where)
    for c in targets + feats + ([id_column] if id_column else []):
        if c in nested:
            raise _fail(where, f"column {c!r} has the nested type {nested[c]}; flatten it "
                               f"into scalar columns or leave it out (exclude={c})")
    return _Columns(targets=targets, features=feats, id_column=id_column)


def _refuse_text_targets(frame: _SelectFrame, targets) -> None:
    """One-line error for the first target column that holds something other than numbers."""
    for t in targets:
        s = frame.df[t]
        if not _is_numeric(s) and not s.isna().all():
            i = _first_non_number(s)
            raise _fail(frame.where, f"target column {t!r} is not numeric (e.g. "
                                     f"{str(s.iloc[i])!r} on {_row_label(frame.lines, i)}); "
                                     "choose a numeric target or recode it as numbers")


def _categorical_features(frame: _SelectFrame, feats, encode) -> list:
    """The categorical (text) feature columns; dates, times and complex numbers refused, and
    categorical columns refused unless ``encode="onehot"``."""
    df, where = frame.df, frame.where
    categorical, dates = [], []
    dtypes = dict(zip([str(c) for c in df.columns], df.dtypes))
    for c in feats:
        if _is_numeric_dtype(dtypes[c]):
            continue
        s = df[c]
        if s.isna().all():
            continue
        if pd.api.types.is_datetime64_any_dtype(s) or pd.api.types.is_timedelta64_dtype(s):
            dates.append(c)
        elif pd.api.types.is_complex_dtype(s):
            raise _fail(where, f"column {c!r} holds complex numbers; split it into real and "
                               "imaginary columns")
        else:
            categorical.append(c)
    if dates:
        raise _fail(where, f"column(s) {_names(dates)} hold dates or times; convert them to "
                           "numbers (e.g. days since a start) or exclude= them")
    if categorical and encode != "onehot":
        raise _fail(where, f"non-numeric (categorical) feature column(s): {_names(categorical)}; "
                           "pass encode='onehot' to one-hot encode them, or exclude= them")
    return categorical


def _missing_detail(cols, counts: dict, first: dict, lines) -> str:
    """``'a' (3, first on line 7), ...`` for the first columns with missing values."""
    return ", ".join(
        f"{c!r} ({counts[c]}, first on {_row_label(lines, first[c])})"
        for c in cols[:_SHOW]) + (f" and {len(cols) - _SHOW} more" if len(cols) > _SHOW
                                   else "")


def _drop_missing_columns(n0: int, targets, feats, categorical, counts: dict,
                          where: str) -> _Rows:
    """Drop the feature columns with a missing value (``drop_missing="columns"``)."""
    bad_t = [t for t in targets if t in counts]
    if bad_t:
        raise _fail(where, f"target column {bad_t[0]!r} has {counts[bad_t[0]]} missing "
                           "value(s); a target cannot be dropped: use "
                           "drop_missing='rows'")
    dropped_cols = [c for c in feats if c in counts]
    feats = [c for c in feats if c not in counts]
    note = (f"dropped {len(dropped_cols)} column(s) with missing values: "
            + ", ".join(f"{c!r} ({counts[c]})" for c in dropped_cols))
    if not feats:
        raise _fail(where, "every feature column has missing values: none is left (p = 0) "
                           "after drop_missing='columns'; impute them or use "
                           "drop_missing='rows'")
    return _Rows(keep=np.ones(n0, dtype=bool), features=feats,
                 categorical=[c for c in categorical if c in feats],
                 dropped_rows=[], dropped_columns=dropped_cols, notes=(note,))


def _drop_missing_rows(M: np.ndarray, feats, categorical, lines, where: str) -> _Rows:
    """Drop the rows with a missing value in a used column (``drop_missing="rows"``)."""
    n0 = M.shape[0]
    keep = ~M.any(axis=1)
    gone = np.flatnonzero(~keep)
    dropped_rows = [int(lines[i]) if lines is not None else int(i + 1) for i in gone]
    word = "line" if lines is not None else "row"
    shown = ", ".join(map(str, dropped_rows[:10])) + (" ..." if len(gone) > 10 else "")
    note = f"dropped {gone.size} of {n0} row(s) with missing values ({word}s {shown})"
    if not keep.any():
        raise _fail(where, f"every row has a missing value in the used columns; "
                           f"nothing is left after drop_missing='rows'; try "
                           "drop_missing='columns'")
    return _Rows(keep=keep, features=feats, categorical=categorical, dropped_rows=dropped_rows,
                 dropped_columns=[], notes=(note,))


def _handle_missing(frame: _SelectFrame, targets, feats, categorical, drop_missing) -> _Rows:
    """Missing values in the used columns: refused (with a count per column) or dropped."""
    df, where, lines = frame.df, frame.where, frame.lines
    n0 = df.shape[0]
    used = targets + feats
    M = _missing_block(df, used)
    n_miss = M.sum(axis=0)
    all_missing = [c for c, k in zip(used, n_miss) if k == n0]
    for t in targets:
        if n_miss[used.index(t)] == n0:
            raise _fail(where, f"target column {t!r} is entirely missing; choose another target")
    if all_missing and drop_missing != "columns":  # "columns" drops them below
        raise _fail(where, f"column(s) {_names(all_missing)} are entirely missing (all {n0} "
                           "values); exclude= them or pass drop_missing='columns'")
    counts = {used[j]: int(n_miss[j]) for j in np.flatnonzero(n_miss)}
    if not counts:
        return _Rows(keep=np.ones(n0, dtype=bool), features=feats, categorical=categorical,
                     dropped_rows=[], dropped_columns=[], notes=())
    if drop_missing is None:
        cols = list(counts)
        first = {c: int(np.argmax(M[:, used.index(c)])) for c in cols[:_SHOW]}
        raise _fail(where, f"missing values in {len(cols)} column(s): "
                           f"{_missing_detail(cols, counts, first, lines)}; "
                           "remove or impute them, or pass drop_missing=rows|columns")
    if drop_missing == "columns":
        return _drop_missing_columns(n0, targets, feats, categorical, counts, where)
    return _drop_missing_rows(M, feats, categorical, lines, where)


def _one_hot(c: str, s: pd.Series) -> tuple:
    """0/1 columns ``c=LEVEL`` of a categorical column (reference level dropped): returns
    ``(columns, names, levels, note)``."""
    vals = s.astype(str).to_numpy()
    levels = sorted(set(vals.tolist()))
    if len(levels) == 1:
        return [], [], levels, (f"categorical column {c!r} has the single level "
                                f"{levels[0]!r}: no column (constant)")
    cols = [(vals == lvl).astype(np.float64) for lvl in levels[1:]]
    names = [f"{c}={lvl}" for lvl in levels[1:]]
    note = (f"one-hot encoded {c!r} ({len(levels)} levels): reference level "
            f"{levels[0]!r} dropped, columns " + ", ".join(
                repr(f"{c}={lv}") for lv in levels[1:4])
            + (" ..." if len(levels) > 4 else ""))
    return cols, names, levels, note


def _build_design(sub: pd.DataFrame, feats, categorical, where: str) -> _Design:
    """The design matrix: numeric features as floats, categorical ones one-hot encoded."""
    blocks, names, encoding, notes = [], [], {}, []
    numeric = [c for c in feats if c not in categorical]
    num_block = _float_block(sub, numeric)
    num_at = {c: j for j, c in enumerate(numeric)}
    for c in feats:
        if c in num_at:
            blocks.append(num_block[:, num_at[c]])
            names.append(c)
        elif c in categorical:
            cols, cnames, encoding[c], note = _one_hot(c, sub[c])
            blocks.extend(cols)
            names.extend(cnames)
            notes.append(note)
    if len(set(names)) != len(names):
        dup = next(nm for nm in names if names.count(nm) > 1)
        raise _fail(where, f"one-hot column {dup!r} clashes with an existing column name; "
                           "rename that column")
    if not blocks:
        raise _fail(where, "no feature columns left (p = 0): every feature is a single-level "
                           "categorical; keep at least one varying feature")
    if not categorical:
        X = np.ascontiguousarray(num_block)
    else:
        X = np.ascontiguousarray(np.column_stack(blocks), dtype=np.float64)
    return _Design(X=X, names=names, encoding=encoding, notes=tuple(notes))


def _check_values(design: _Design, Y: np.ndarray, targets, sub_lines, where: str) -> None:
    """Refuse infinite feature or target values and a constant target."""
    _refuse_infinite(where, sub_lines, (design.X, design.names, "feature"),
                     (Y, targets, "target"))
    for j, t in enumerate(targets):
        if Y[:, j].max() == Y[:, j].min():
            raise _fail(where, f"target column {t!r} is constant (every value {Y[0, j]:g}); "
                               "there is nothing to fit: choose another target")


def _design_notes(X: np.ndarray, names) -> _DesignNotes:
    """Constant design columns (left out of the fit) and groups of exact duplicates."""
    notes = []
    x_lo, x_hi = column_range(X)  # finite: infinite values were refused before
    constant = [names[j] for j in np.flatnonzero(x_hi == x_lo)]
    if constant:
        notes.append(f"constant column(s) {_names(constant)}: left out of the fit "
                     "(coefficient 0)")
    duplicates = _duplicate_groups(X, names, skip=set(constant))
    if duplicates:
        notes.append("exact duplicate columns (kept; ridge shares the weight between copies): "
                     + "; ".join(" = ".join(map(repr, g)) for g in duplicates[:_SHOW])
                     + (" ..." if len(duplicates) > _SHOW else ""))
    return _DesignNotes(constant=constant, duplicates=duplicates, notes=tuple(notes))


def select(df, target, *, features=None, exclude=None, id_column=None, encode=None,
           drop_missing=None, source: str = "", min_rows: int = 2) -> Dataset:
    """Split a table into the response column(s) and the numeric design.

    Parameters
    ----------
    df : DataFrame (or anything :func:`as_frame` accepts)
    target : str or list of str
        Response column(s); several give a multi-target fit.
    features : list of str, optional
        Feature column names or glob patterns (``"x*"``, ``"band_[0-9]*"``);
        default every column except the targets and the identifier.
    exclude : list of str, optional
        Names or glob patterns removed from the features.
    id_column : str, optional
        An identifier column, kept out of the design (its values are kept in
        ``Dataset.ids``).
    encode : {None, "onehot"}
        Categorical (text) feature columns are refused by default; ``"onehot"``
        encodes each as 0/1 columns ``COLUMN=LEVEL``, dropping the reference
        level (the first in sorted order).
    drop_missing : {None, "rows", "columns"}
        Missing values are refused by default (with a count per column);
        ``"rows"`` drops the rows with a missing value in a used column,
        ``"columns"`` drops the feature columns with one.
    source : str
        Name used in messages (default: the file the table was read from).
    min_rows : int
        Fewest rows accepted after dropping (2: an intercept and a slope).

    Returns
    -------
    Dataset

    Raises
    ------
    InputError
        Unknown columns or patterns, no feature left, non-numeric targets,
        categorical features without ``encode``, missing or infinite values,
        all-missing columns, too few rows, a constant target.
    """
    frame = _select_frame(df, source)
    encode = _select_options(encode, drop_missing)
    chosen = _choose_columns(frame, target, features, exclude, id_column)
    targets = chosen.targets
    _refuse_text_targets(frame, targets)
    categorical = _categorical_features(frame, chosen.features, encode)
    rows = _handle_missing(frame, targets, chosen.features, categorical, drop_missing)
    keep, feats = rows.keep, rows.features
    sub = frame.df if keep.all() else frame.df.loc[keep]
    sub_lines = None if frame.lines is None else np.asarray(frame.lines)[keep]
    n = sub.shape[0]
    if n < min_rows:
        after = " after dropping rows with missing values" if rows.dropped_rows else ""
        raise _fail(frame.where, f"{n} data row{'s' if n != 1 else ''}{after}; at least "
                                 f"{min_rows} are needed to fit an intercept and a slope; "
                                 "add rows")
    design = _build_design(sub, feats, rows.categorical, frame.where)
    Y = _float_block(sub, targets)
    _check_values(design, Y, targets, sub_lines, frame.where)
    checked = _design_notes(design.X, design.names)
    notes = list(frame.notes) + list(rows.notes) + list(design.notes) + list(checked.notes)
    ids = None
    if id_column is not None:
        ids = sub[id_column].to_numpy()
        if len(pd.unique(ids)) != n:
            notes.append(f"identifier column {id_column!r} has repeated values")
    return Dataset(
        X=design.X, y=Y[:, 0] if len(targets) == 1 else Y, feature_names=design.names,
        target_names=list(targets), source=frame.source, notes=notes, ids=ids,
        id_column=id_column, source_columns=list(feats), encoding=design.encoding,
        dropped_rows=rows.dropped_rows, dropped_columns=rows.dropped_columns,
        constant_columns=checked.constant, duplicate_columns=checked.duplicates,
        drop_missing=drop_missing, rows=None if keep.all() else np.flatnonzero(keep),
    )


def _duplicate_groups(X: np.ndarray, names, skip=(), block_bytes: int = 8 << 20) -> list:
    """Groups of exactly equal columns (by a hash of each column, then compared)."""
    keep = [j for j in range(X.shape[1]) if names[j] not in skip]
    hashes = [hashlib.blake2b(digest_size=16) for _ in keep]
    step = max(1, block_bytes // max(8 * len(keep), 1))
    for s in range(0, X.shape[0], step):  # row blocks transposed: no copy of the whole design
        part = np.ascontiguousarray(X[s:s + step, keep].T)
        for h, row in zip(hashes, part):
            h.update(row.tobytes())
    groups = defaultdict(list)
    for j, h in zip(keep, hashes):
        groups[h.digest()].append(j)
    out = []
    for idx in groups.values():
        if len(idx) > 1:
            first = X[:, idx[0]]
            same = [j for j in idx if np.array_equal(X[:, j], first)]
            if len(same) > 1:
                out.append([names[j] for j in same])
    return out


def select_like(df, like: Dataset, *, source: str = "", targets: bool = True) -> Dataset:
    """Build a test set with the training design's columns, in the training order.

    Column order in ``df`` may differ and extra columns are ignored; missing
    ones are named.  With ``targets=False`` (new rows to predict) the target
    columns are neither needed nor read, and ``y`` is ``None``; ``rows`` then
    holds the table positions of the rows kept.  One-hot columns use the training levels (a level unseen in
    training is refused); rows with missing values are dropped only when the
    training set was read with ``drop_missing="rows"``.

    Raises
    ------
    InputError
        Missing training or target columns, unseen levels, non-numeric values,
        missing or infinite values.
    """
    df = as_frame(df)
    attrs = dict(df.attrs)
    source = source or attrs.get("paths_source", "")
    where = f"{source}: " if source else ""
    lines = attrs.get("paths_lines")
    nested = attrs.get("paths_nested") or {}
    df = df.rename(columns=str) if any(not isinstance(c, str) for c in df.columns) else df
    columns = set(map(str, df.columns))
    need = list(like.source_columns) + (list(like.target_names) if targets else [])
    role = "test data" if targets else "the data"
    missing = [c for c in need if c not in columns]
    if missing:
        nest = [c for c in missing if c in nested]
        if nest:
            raise _fail(where, f"column {nest[0]!r} has the nested type {nested[nest[0]]}; "
                               "give it the training column as scalars")
        raise _fail(where, f"{role} lack {len(missing)} training column(s): "
                           f"{_names(missing)}; give the {'test ' if targets else ''}file the "
                           "training columns (order may differ; extra columns are ignored)")
    for c in need:
        s = df[c]
        if c not in like.encoding and not _is_numeric(s) and not s.isna().all():
            i = _first_non_number(s)
            raise _fail(where, f"column {c!r} is numeric in the training data but holds "
                               f"{str(s.iloc[i])!r} on {_row_label(lines, i)}; fix that value")
    miss = {c: _missing_mask(df[c]) for c in need}
    counts = {c: int(m.sum()) for c, m in miss.items() if m.any()}
    keep = np.ones(df.shape[0], dtype=bool)
    notes = list(attrs.get("paths_notes") or [])
    if counts:
        if like.drop_missing != "rows":
            shown = ", ".join(f"{c!r} ({k})" for c, k in list(counts.items())[:_SHOW])
            raise _fail(where, f"missing values in {'the test data' if targets else 'the data'}: {shown}; remove or impute "
                               "them, or pass drop_missing='rows'")
        for m in miss.values():
            keep &= ~m
        notes.append(f"dropped {int((~keep).sum())} {'test ' if targets else ''}row(s) with "
                     "missing values")
        if not keep.any():
            raise _fail(where, f"every {'test ' if targets else ''}row has a missing value; "
                               "nothing is left")
    sub = df if keep.all() else df.loc[keep]
    sub_lines = None if lines is None else np.asarray(lines)[keep]
    blocks = []
    for c in like.source_columns:
        s = sub[c]
        if c in like.encoding:
            levels = like.encoding[c]
            vals = s.astype(str).to_numpy()
            unseen = sorted(set(vals.tolist()) - set(levels))
            if unseen:
                i = int(np.flatnonzero(vals == unseen[0])[0])
                raise _fail(where, f"column {c!r} has the level {unseen[0]!r} (on "
                                   f"{_row_label(sub_lines, i)}) that the training data do not "
                                   f"have (levels: {_names(levels)}); drop those rows or recode")
            for lvl in levels[1:]:
                blocks.append((vals == lvl).astype(np.float64))
        else:
            blocks.append(_float_column(s))
    X = np.column_stack(blocks) if blocks else np.zeros((sub.shape[0], 0))
    if targets:
        Y = np.column_stack([_float_column(sub[t]) for t in like.target_names])
        _refuse_infinite(where, sub_lines, (X, like.feature_names, "feature"),
                         (Y, like.target_names, "target"))
        y = Y[:, 0] if len(like.target_names) == 1 else Y
    else:
        _refuse_infinite(where, sub_lines, (X, like.feature_names, "feature"))
        y = None
    ids = sub[like.id_column].to_numpy() if like.id_column and like.id_column in columns else None
    return Dataset(X=np.ascontiguousarray(X), y=y, feature_names=list(like.feature_names),
                   target_names=list(like.target_names), source=source, notes=notes, ids=ids,
                   id_column=like.id_column, source_columns=list(like.source_columns),
                   encoding=dict(like.encoding), drop_missing=like.drop_missing,
                   rows=None if targets else np.flatnonzero(keep))


def load_dataset(data, target, *, sep=None, header=None, features=None, exclude=None,
                 id_column=None, encode=None, drop_missing=None, like: Dataset | None = None,
                 min_rows: int = 2) -> Dataset:
    """Read (a path) or take (a DataFrame or array) data and select a :class:`Dataset`.

    With ``like`` (a training Dataset), the data are aligned to its columns as a
    test set (:func:`select_like`); otherwise :func:`select` is applied with the
    given options.
    """
    if isinstance(data, (str, os.PathLike)):
        frame = read_table(data, sep=sep, header=header)
        source = str(data)
    else:
        frame = as_frame(data)
        source = frame.attrs.get("paths_source", "")
    if like is not None:
        return select_like(frame, like, source=source)
    return select(frame, target, features=features, exclude=exclude, id_column=id_column,
                  encode=encode, drop_missing=drop_missing, source=source, min_rows=min_rows)
