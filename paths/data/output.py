"""Writing results without losing anything: refuse to clobber, write atomically.

Every file is written to a temporary file in its destination folder and renamed
into place (``os.replace`` is atomic on POSIX and Windows), so an interrupted
run never leaves a half-written file under a final name.
"""
from __future__ import annotations

import csv
import io
import json
import os
import tempfile
from pathlib import Path

from paths.data.validation import InputError

__all__ = ["OutputError", "prepare_out_dir", "write_text", "write_bytes", "write_json",
           "write_csv"]


class OutputError(InputError):
    """The output location cannot be used (exists, not writable, not a folder)."""


def prepare_out_dir(path: str | os.PathLike, *, force: bool = False) -> Path:
    """Create ``path`` (and parents) for output, refusing a non-empty folder without ``force``."""
    out = Path(path)
    if out.exists() and not out.is_dir():
        raise OutputError(f"--out {out} exists and is not a folder; choose another --out")
    if out.is_dir() and any(out.iterdir()) and not force:
        raise OutputError(
            f"output folder {out} exists and is not empty; choose another --out "
            "or pass --force to overwrite the files it writes"
        )
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise OutputError(f"cannot create output folder {out} ({exc.strerror}); "
                          "choose a writable --out") from None
    if not os.access(out, os.W_OK | os.X_OK):
        raise OutputError(f"output folder {out} is not writable; choose a writable --out")
    try:  # os.access says yes to root and on some network file systems: try for real
        fd, probe = tempfile.mkstemp(prefix=".paths-probe.", dir=out)
        os.close(fd)
        os.unlink(probe)
    except OSError as exc:
        raise OutputError(f"output folder {out} is not writable ({exc.strerror}); "
                          "choose a writable --out") from None
    return out


def write_bytes(path: str | os.PathLike, data: bytes) -> Path:
    """Write ``data`` to ``path`` atomically (temporary file in the same folder, then rename)."""
    dest = Path(path)
    if dest.is_dir():
        raise OutputError(f"{dest} is a folder; cannot write a file over it: remove it or "
                          "choose another --out")
    try:
        fd, tmp = tempfile.mkstemp(prefix=f".{dest.name}.", suffix=".tmp", dir=dest.parent)
    except OSError as exc:
        raise OutputError(f"cannot write in {dest.parent} ({exc.strerror}); "
                          "choose a writable --out") from None
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
            # mkstemp makes the file private (0600); give it the usual mode for new files
            os.fchmod(fh.fileno(), 0o666 & ~_umask())
        os.replace(tmp, dest)
    except BaseException as exc:  # includes KeyboardInterrupt: never leave the temporary behind
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        if isinstance(exc, OSError) and exc.errno is not None:
            raise OutputError(f"cannot write {dest} ({exc.strerror}); free space or choose "
                              "another --out") from None
        raise
    return dest


def write_text(path: str | os.PathLike, text: str) -> Path:
    """Write ``text`` as UTF-8, atomically."""
    return write_bytes(path, text.encode("utf-8"))


def write_json(path: str | os.PathLike, obj) -> Path:
    """Write ``obj`` as indented JSON, atomically; NaN and infinity are refused (strict JSON)."""
    return write_text(path, json.dumps(obj, indent=2, allow_nan=False) + "\n")


def write_csv(path: str | os.PathLike, header, rows) -> Path:
    """Write a CSV (header row, then ``rows``) atomically; floats at full precision (repr)."""
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(header)
    for row in rows:
        w.writerow(["" if v is None else (repr(float(v)) if isinstance(v, float) else v)
                    for v in row])
    return write_text(path, buf.getvalue())


def _umask() -> int:
    """The process umask (read by setting and restoring it)."""
    mask = os.umask(0o022)
    os.umask(mask)
    return mask
