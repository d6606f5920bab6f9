"""Standard input as a data file: a temporary copy, named "standard input" in every output.

``-`` as the data argument of a command reads the table from standard input.
Readers and engines need a file (the out-of-memory engines read it more than
once), so the bytes are copied to a temporary file, removed at exit; every
record of the run (``summary.json``, the report, the methods paragraph,
``fit.npz``, error messages) names it :data:`STDIN_SOURCE`, never the temporary
path, and its SHA-256 is the digest of the bytes read.
"""
from __future__ import annotations

import os
from pathlib import Path

__all__ = ["STDIN_SOURCE", "copy_stdin", "source_name", "stdin_copies"]

#: how a table read from standard input is named in every output
STDIN_SOURCE = "standard input"
_COPIES: set = set()


def copy_stdin(stream=None, *, suffix: str = ".csv") -> Path:
    """Copy ``stream`` (default: standard input, bytes) to a temporary file removed at exit.

    Raises :class:`~paths.InputError` when the stream is empty.
    """
    import atexit
    import sys
    import tempfile

    from paths.data.validation import InputError

    raw = (stream if stream is not None else sys.stdin.buffer).read()
    if not raw.strip():
        raise InputError("'-' reads the data from standard input, but it was empty; pipe a "
                         "CSV file in (e.g. cat data.csv | paths explore - --target y)")
    fd, name = tempfile.mkstemp(prefix="paths-stdin-", suffix=suffix)
    with open(fd, "wb") as fh:
        fh.write(raw)
    path = Path(name)
    atexit.register(path.unlink, missing_ok=True)
    _COPIES.add(os.path.abspath(path))
    return path


def source_name(path) -> str:
    """``"standard input"`` for a copy made by :func:`copy_stdin`, else the path as text.

    >>> source_name("data/table.csv")
    'data/table.csv'
    """
    return STDIN_SOURCE if os.path.abspath(path) in _COPIES else str(path)


def stdin_copies() -> tuple:
    """The temporary copies made in this process (absolute paths as text)."""
    return tuple(sorted(_COPIES))
