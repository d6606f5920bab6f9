"""Writing results without losing anything: one output folder per run, claimed, staged, swapped.

An output folder is used through :class:`OutputFolder` (every command does):

1. **Claim** (``__enter__``): the folder is created if needed and locked
   (``.paths-lock``, an advisory ``flock``); a second run into the same folder is
   refused in one line.  Leftovers of killed runs (hidden ``.paths-staging-*``
   folders, ``.NAME.XXXXXXXX.tmp`` files, a half-finished swap) are recognised and
   cleaned; a half-finished swap is completed first.  A folder holding anything
   else is refused unless ``force``.
2. **Stage**: every output is written into a fresh hidden folder
   ``.paths-staging-XXXX`` inside the target (same file system, so the swap is a
   rename); :meth:`OutputFolder.path` confines every name to it (no absolute
   names, no ``..``).
3. **Swap** (``__exit__`` without an exception): every staged file is checked
   against the inputs of the run (resolved path and inode identity) before
   anything is moved; a journal ``.paths-commit`` is written, the previous run's
   outputs (from its manifest ``.paths-manifest.json``) are removed, the new files
   are renamed into place and the manifest is rewritten.  An interrupted swap
   leaves the journal, which marks the folder as a mix and is finished by the
   next run.  On an exception, the staging folder is removed and a folder this
   run created is removed again: nothing is left behind.

Every file is written to a temporary file in its destination folder and renamed
into place (``os.replace`` is atomic on POSIX and Windows), so an interrupted
run never leaves a half-written file under a final name.

CSV files are spreadsheet-safe: a text cell a spreadsheet would evaluate as a
formula (starting with ``=``, ``+``, ``-``, ``@``, a tab or a carriage return) gets
a leading apostrophe (the usual practice, OWASP "CSV Injection"); numbers are
written as numbers.
"""
from __future__ import annotations

import io
import json
import os
import re
import shutil
import tempfile
import time
from pathlib import Path

import numpy as np

from paths.data.validation import InputError

__all__ = ["OutputError", "OutputFolder", "prepare_out_dir", "write_text", "write_bytes", "write_columns",
           "write_json", "write_csv", "safe_cell", "confined_name", "input_at"]

LOCK = ".paths-lock"
MANIFEST = ".paths-manifest.json"
JOURNAL = ".paths-commit"
STAGING_PREFIX = ".paths-staging-"
#: hidden names a killed run may leave: staging folders, write probes, atomic-write temporaries
_LEFTOVER = re.compile(r"^(\.paths-staging-.+|\.paths-probe\..+|\..+\.[A-Za-z0-9_]{8}\.tmp)$")
_OWN = {LOCK, MANIFEST, JOURNAL}


class OutputError(InputError):
    """The output location cannot be used (exists, not writable, not a folder, an input)."""


def confined_name(name: str, what: str = "output name") -> str:
    """Return ``name`` as a relative path that stays inside its folder, or refuse it.

    Refused: empty names, absolute paths, drive letters, ``..`` components,
    NUL bytes and backslashes (a separator on Windows).
    """
    text = str(name)
    parts = text.split("/")
    if (not text or "\x00" in text or "\\" in text or text.startswith("/")
            or re.match(r"^[A-Za-z]:", text) or any(p in ("", ".", "..") for p in parts)):
        raise OutputError(f"{what} {text!r} is not a plain name inside the output folder "
                          "(no '/', '..', '\\' or absolute paths); use letters, digits, '-', '_', '.'")
    return text


def input_at(dest, inputs) -> Path | None:
    """The input ``dest`` would overwrite (same resolved path or same inode), else None."""
    dest = Path(dest)
    rdest = dest.resolve()
    for src in inputs:
        s = Path(src)
        try:
            if s.resolve() == rdest:
                return s
            if dest.exists() and s.exists() and os.path.samefile(dest, s):
                return s
        except OSError:
            continue
    return None


class OutputFolder:
    """The output folder of one run: claimed (locked), staged, checked against inputs, swapped.

    Use as a context manager; write into :attr:`stage` (or :meth:`path`)::

        with OutputFolder("runs/a", force=False, inputs=["data.csv"]) as folder:
            write_csv(folder.path("path.csv"), header, rows)
        folder.final_paths(files)  # where they are now

    Parameters
    ----------
    path : path
        The output folder (created with its parents if missing).
    force : bool
        Replace the outputs of a previous run; without it a non-empty folder is refused.
    inputs : iterable of paths
        Every file the run reads; no output may land on one, even with ``force``.
    """

    def __init__(self, path, *, force: bool = False, inputs=()):
        self.target = Path(path)
        self.force = force
        self.inputs = [Path(p) for p in inputs if p is not None]
        self.stage: Path | None = None
        self.committed: list[Path] = []
        self._lock_fd = None
        self._created = False

    # -------------------------------------------------------------- claim
    def __enter__(self) -> "OutputFolder":
        out = self.target
        if out.exists() and not out.is_dir():
            which = input_at(out, self.inputs)
            extra = " (it is an input of this run)" if which is not None else ""
            raise OutputError(f"out_dir={out} exists and is not a folder{extra}; "
                              "choose another out_dir=")
        for src in self.inputs:  # the folder itself must not be an input (a Parquet folder)
            if src.is_dir() and input_at(out, [src]) is not None:
                raise OutputError(f"out_dir={out} is the input folder {src}; "
                                  "choose another out_dir=")
        self._created = not out.exists()
        try:
            out.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise OutputError(f"cannot create output folder {out} ({exc.strerror}); "
                              "choose a writable out_dir=") from None
        try:
            self._lock()
            recover(out)
            self._check_empty()
            try:
                self.stage = Path(tempfile.mkdtemp(prefix=STAGING_PREFIX, dir=out))
            except OSError as exc:
                raise OutputError(f"output folder {out} is not writable ({exc.strerror}); "
                                  "choose a writable out_dir=") from None
        except BaseException:
            self._release(remove_created=True)
            raise
        return self

    def _lock(self) -> None:
        out = self.target
        for _ in range(5):
            try:
                fd = os.open(out / LOCK, os.O_RDWR | os.O_CREAT, 0o644)
            except OSError as exc:
                raise OutputError(f"output folder {out} is not writable ({exc.strerror}); "
                                  "choose a writable out_dir=") from None
            if not _try_flock(fd):
                holder = _read_small(fd)
                os.close(fd)
                raise OutputError(f"output folder {out} is in use by another paths run "
                                  f"({holder or 'unknown process'}); wait for it to finish or "
                                  "choose another out_dir=")
            try:  # the file may have been unlinked by the previous holder between open and lock
                same = os.fstat(fd).st_ino == os.stat(out / LOCK).st_ino
            except FileNotFoundError:
                same = False
            if same:
                os.ftruncate(fd, 0)
                os.write(fd, f"pid {os.getpid()} since {time.strftime('%H:%M:%S')}".encode())
                self._lock_fd = fd
                return
            os.close(fd)
        raise OutputError(f"could not lock output folder {out}; try again or choose another "
                          "out_dir=")

    def _check_empty(self) -> None:
        out = self.target
        present = [e.name for e in out.iterdir() if e.name not in _OWN]
        if present and not self.force:
            shown = ", ".join(sorted(present)[:3]) + (" ..." if len(present) > 3 else "")
            raise OutputError(
                f"output folder {out} exists and is not empty ({shown}); choose another out_dir= "
                "or pass force=True to replace the outputs of the previous run")

    # -------------------------------------------------------------- stage
    def path(self, name: str) -> Path:
        """Where to write the output ``name`` (a relative name, confined to the folder)."""
        if self.stage is None:
            raise RuntimeError("OutputFolder.path() outside its with-block")
        dest = self.stage / confined_name(name)
        dest.parent.mkdir(parents=True, exist_ok=True)
        return dest

    def final(self, staged) -> Path:
        """The final location of a file written under :attr:`stage`."""
        p = Path(staged)
        try:
            return self.target / p.relative_to(self.stage)
        except ValueError:
            return p

    def final_paths(self, staged) -> list[Path]:
        """:meth:`final` of each path in ``staged``."""
        return [self.final(p) for p in staged]

    # -------------------------------------------------------------- swap
    def __exit__(self, kind, exc, tb) -> None:
        try:
            if kind is None:
                self.committed = self._commit()
        finally:
            self._release(remove_created=kind is not None)

    def _commit(self) -> list[Path]:
        out, stage = self.target, self.stage
        names = sorted(str(f.relative_to(stage)) for f in stage.rglob("*")
                       if f.is_file() and not _LEFTOVER.match(f.name))
        for rel in names:  # every check before anything is moved
            confined_name(rel)
            dest = out / rel
            src = input_at(dest, self.inputs)
            if src is not None:
                raise OutputError(f"out_dir={out} would overwrite the input file {src} ({rel}); "
                                  "choose another out_dir=")
            if dest.is_dir():
                raise OutputError(f"{dest} is a folder; cannot write a file over it: remove it "
                                  "or choose another out_dir=")
        old = [r for r in _manifest(out) if r not in names
               and input_at(out / r, self.inputs) is None]
        write_json(out / JOURNAL, {"staging": stage.name, "files": names, "remove": old})
        finish_swap(out)
        return [out / r for r in names]

    def _release(self, *, remove_created: bool) -> None:
        out = self.target
        swapping = (out / JOURNAL).exists()  # killed mid-swap: the next claim finishes it
        if self.stage is not None and self.stage.exists() and not swapping:
            shutil.rmtree(self.stage, ignore_errors=True)
        if self._lock_fd is not None:
            try:
                os.unlink(out / LOCK)
            except OSError:
                pass
            os.close(self._lock_fd)  # closing releases the flock
            self._lock_fd = None
        if remove_created and self._created:
            try:
                out.rmdir()  # only if empty: never removes anything but our own empty folder
            except OSError:
                pass


def finish_swap(out: Path) -> None:
    """Carry out the journal ``out/.paths-commit`` (idempotent: safe to rerun after a kill)."""
    journal = out / JOURNAL
    rec = json.loads(journal.read_text(encoding="utf-8"))
    stage = out / confined_name(rec["staging"])
    for rel in rec["remove"]:
        try:
            (out / confined_name(rel)).unlink()
        except (FileNotFoundError, IsADirectoryError):
            pass
    for rel in rec["files"]:
        src, dest = stage / confined_name(rel), out / rel
        if src.exists():
            dest.parent.mkdir(parents=True, exist_ok=True)
            os.replace(src, dest)
    write_json(out / MANIFEST, {"files": rec["files"],
                                "written": time.strftime("%Y-%m-%dT%H:%M:%S%z")})
    journal.unlink()
    shutil.rmtree(stage, ignore_errors=True)


def recover(out: Path) -> list[str]:
    """Finish a half-done swap and remove leftovers of killed runs; the names cleaned.

    Call only while holding the folder's lock (no live run owns these names).
    """
    cleaned = []
    if (out / JOURNAL).exists():
        try:
            finish_swap(out)
            cleaned.append(JOURNAL)
        except (OSError, ValueError, KeyError, TypeError):
            (out / JOURNAL).unlink()  # unreadable journal: the staged set is incomplete
            cleaned.append(JOURNAL)
    for entry in out.iterdir():
        if _LEFTOVER.match(entry.name):
            if entry.is_dir() and not entry.is_symlink():
                shutil.rmtree(entry, ignore_errors=True)
            else:
                entry.unlink()
            cleaned.append(entry.name)
    return cleaned


def _manifest(out: Path) -> list[str]:
    try:
        files = json.loads((out / MANIFEST).read_text(encoding="utf-8"))["files"]
        return [confined_name(f) for f in files]
    except (OSError, ValueError, KeyError, TypeError):
        return []


def _try_flock(fd: int) -> bool:
    try:
        import fcntl
    except ImportError:  # pragma: no cover - Windows: the O_CREAT file alone
        return True
    try:
        fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        return True
    except OSError:
        return False


def _read_small(fd: int) -> str:
    try:
        return os.pread(fd, 200, 0).decode("utf-8", "replace").strip()
    except OSError:
        return ""


def prepare_out_dir(path: str | os.PathLike, *, force: bool = False) -> Path:
    """Create ``path`` (and parents) for output, refusing a non-empty folder without ``force``.

    A direct write into the folder, without staging, lock or input check: kept for
    callers outside the commands; the commands use :class:`OutputFolder`.
    """
    out = Path(path)
    if out.exists() and not out.is_dir():
        raise OutputError(f"{out} exists and is not a folder; choose another path")
    if out.is_dir() and any(out.iterdir()) and not force:
        raise OutputError(
            f"output folder {out} exists and is not empty; choose another path "
            "or pass force=True to overwrite the files it writes"
        )
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise OutputError(f"cannot create output folder {out} ({exc.strerror}); "
                          "choose a writable path") from None
    if not os.access(out, os.W_OK | os.X_OK):
        raise OutputError(f"output folder {out} is not writable; choose a writable path")
    try:  # os.access says yes to root and on some network file systems: try for real
        fd, probe = tempfile.mkstemp(prefix=".paths-probe.", dir=out)
        os.close(fd)
        os.unlink(probe)
    except OSError as exc:
        raise OutputError(f"output folder {out} is not writable ({exc.strerror}); "
                          "choose a writable path") from None
    return out


def write_bytes(path: str | os.PathLike, data: bytes) -> Path:
    """Write ``data`` to ``path`` atomically (temporary file in the same folder, then rename)."""
    return write_with(path, lambda fh: fh.write(data))


def write_with(path: str | os.PathLike, writer) -> Path:
    """Write ``path`` atomically with ``writer(fh)`` (a binary file open for writing), so
    large outputs stream to the disk instead of being built in memory first."""
    dest = Path(path)
    if dest.is_dir():
        raise OutputError(f"{dest} is a folder; cannot write a file over it: remove it or "
                          "choose another path")
    try:
        fd, tmp = tempfile.mkstemp(prefix=f".{dest.name}.", suffix=".tmp", dir=dest.parent)
    except OSError as exc:
        raise OutputError(f"cannot write in {dest.parent} ({exc.strerror}); "
                          "choose a writable folder") from None
    try:
        with os.fdopen(fd, "wb") as fh:
            writer(fh)
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
                              "another path") from None
        raise
    return dest


def write_text(path: str | os.PathLike, text: str) -> Path:
    """Write ``text`` as UTF-8, atomically."""
    return write_bytes(path, text.encode("utf-8"))


def write_json(path: str | os.PathLike, obj) -> Path:
    """Write ``obj`` as indented JSON, atomically; NaN and infinity are refused (strict JSON)."""
    return write_text(path, json.dumps(obj, indent=2, allow_nan=False) + "\n")


_FORMULA_START = ("=", "+", "-", "@", "\t", "\r")


def safe_cell(value):
    """A CSV cell a spreadsheet will not evaluate: text starting with ``= + - @``, tab or CR
    gets a leading apostrophe; numbers (and text that is a number, like ``-1.5``) are kept.

    Examples
    --------
    >>> safe_cell("=SUM(1)"), safe_cell("-2+3"), safe_cell("-1.5"), safe_cell(-2.0)
    ("'=SUM(1)", "'-2+3", '-1.5', -2.0)
    """
    if isinstance(value, str) and value.startswith(_FORMULA_START):
        try:
            float(value)
            if "_" not in value and value.strip() == value:
                return value
        except ValueError:
            pass
        return "'" + value
    return value


def write_csv(path: str | os.PathLike, header, rows) -> Path:
    """Write a CSV (header row, then ``rows``) atomically; floats at full precision (repr).

    Text cells that a spreadsheet would evaluate are neutralised (:func:`safe_cell`).
    """
    buf = io.StringIO()
    buf.write(",".join(_cell_text(str(h)) for h in header) + "\n")
    for row in rows:
        try:  # a row of floats only (the wide tables): joined directly, the same text
            buf.write(",".join(map(float.__repr__, row)) + "\n")
        except TypeError:
            buf.write(",".join(map(_cell_text, row)) + "\n")
    return write_text(path, buf.getvalue())


def write_columns(path: str | os.PathLike, header, columns) -> Path:
    """Write a CSV given column by column (equal lengths); the same text as :func:`write_csv`
    of the rows, each column formatted once instead of cell by cell.

    A float column is written at full precision (repr), an integer column as
    integers, anything else cell by cell as :func:`write_csv` does (text made
    safe for spreadsheets, :func:`safe_cell`, and quoted where the CSV needs it).

    Examples
    --------
    >>> import io, numpy as np, tempfile, os
    >>> f = os.path.join(tempfile.mkdtemp(), "t.csv")
    >>> _ = write_columns(f, ["id", "y"], [np.array(["a,b", "=1"], dtype=object),
    ...                                    np.array([0.1, 2.0])])
    >>> print(open(f).read(), end="")
    id,y
    "a,b",0.1
    '=1,2.0
    """
    cols = [_column_text(c) for c in columns]
    buf = io.StringIO()
    buf.write(",".join(_cell_text(str(h)) for h in header) + "\n")
    if cols and len(cols[0]):
        buf.write("\n".join(map(",".join, zip(*cols))) + "\n")
    return write_text(path, buf.getvalue())


def _column_text(col) -> list:
    a = np.asarray(col)
    if a.dtype.kind == "f":
        return list(map(float.__repr__, a.astype(np.float64).tolist()))
    if a.dtype.kind in "iu":
        return list(map(str, a.tolist()))
    return [_cell_text(v.item() if hasattr(v, "item") else v) for v in a.tolist()]


def _cell_text(v) -> str:
    """One cell: empty for None, floats by repr, text made safe (:func:`safe_cell`) and
    quoted (RFC 4180) when it holds a comma, a quote, CR or LF."""
    v = "" if v is None else (repr(float(v)) if isinstance(v, float) else safe_cell(v))
    text = v if isinstance(v, str) else str(v)
    if any(ch in text for ch in ',"\r\n'):
        return '"' + text.replace('"', '""') + '"'
    return text


def _umask() -> int:
    """The process umask (read by setting and restoring it)."""
    mask = os.umask(0o022)
    os.umask(mask)
    return mask
