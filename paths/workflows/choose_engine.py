"""Which engine runs ``explore`` when none is named: in memory, or streamed when the table is large.

With ``engine="auto"`` (the default), :func:`choose_engine` estimates what an
in-memory run would hold, :data:`MEMORY_FACTOR` times the table's numbers as
float64 (one working copy of the design beside the data while it is read and
factored; ``benchmarks/bench_e2e.py`` measures the peak), and streams the file
(:func:`paths.workflows.engines.explore_engine`) when that exceeds
:data:`MEMORY_SHARE` of the available memory
(:func:`paths.data.validation.available_memory`).  The switch is stated: a
``note:`` line on the terminal, ``engine_choice`` and a data note in
``summary.json``.  ``engine="memory"`` forces the in-memory engine.
"""
from __future__ import annotations

from dataclasses import dataclass, replace
from pathlib import Path

from paths.data.validation import available_memory
from paths.workflows.options import DataOptions, EngineOptions, FitOptions

__all__ = ["EngineChoice", "choose_engine", "table_bytes", "MEMORY_FACTOR", "MEMORY_SHARE"]

#: In-memory explore holds about this many times the table (float64) at its peak.
MEMORY_FACTOR = 3.0
#: Above this share of the available memory, ``engine="auto"`` streams the file.
MEMORY_SHARE = 0.5
_TEXT_SAMPLE = 1 << 18  # bytes read from a text file to estimate its number of fields


@dataclass(frozen=True)
class EngineChoice:
    """The engine options that run, and (when the choice is worth stating) why.

    ``record`` is ``summary.json``'s ``engine_choice`` (None when nothing was
    switched or noted); ``note`` the one line printed and added to the data notes.
    """

    options: EngineOptions
    record: dict | None = None
    note: str | None = None

    @property
    def extra(self) -> dict:
        """Keys to add to ``summary.json``."""
        return {} if self.record is None else {"engine_choice": self.record}


def _size(nbytes: float) -> str:
    for unit, scale in (("GiB", 1 << 30), ("MiB", 1 << 20), ("KiB", 1 << 10)):
        if nbytes >= scale:
            return f"{nbytes / scale:.1f} {unit}"
    return f"{nbytes:.0f} bytes"


def _text_numbers(path: Path, sep: str | None) -> float:
    """Fields in a delimited text file, estimated from its first :data:`_TEXT_SAMPLE` bytes."""
    size = path.stat().st_size
    with open(path, "rb") as fh:
        head = fh.read(_TEXT_SAMPLE)
    lines = head.count(b"\n") or 1
    first = head.split(b"\n", 1)[0]
    if sep in (None, ""):
        seps = (b",", b"\t", b";", b"|")
        delim = max(seps, key=first.count)
    else:
        delim = b"\t" if sep == "tab" else sep.encode()
    fields = first.count(delim) + 1
    return fields * lines * (size / max(len(head), 1))


def table_bytes(path, sep: str | None = None) -> float | None:
    """The table's numbers as float64, in bytes, from metadata (Parquet, ``.npy``) or an
    estimate from the first bytes (text); None when unknown (``.npz``, a folder).

    Examples
    --------
    >>> import numpy as np, tempfile, os
    >>> f = os.path.join(tempfile.mkdtemp(), "t.npy"); np.save(f, np.zeros((100, 4)))
    >>> table_bytes(f)
    3200.0
    """
    p = Path(path)
    if not p.is_file():
        return None
    suffix = p.suffix.lower()
    try:
        if suffix in (".parquet", ".pq", ".parq"):
            import pyarrow.parquet as pq

            meta = pq.read_metadata(p)
            return 8.0 * meta.num_rows * meta.num_columns
        if suffix == ".npy":
            import numpy as np

            arr = np.load(p, mmap_mode="r", allow_pickle=False)
            return 8.0 * arr.size
        if suffix == ".npz":
            return None
        return 8.0 * _text_numbers(p, sep)
    except Exception:  # noqa: BLE001 - unreadable: the reader itself says why, in memory
        return None


def choose_engine(data: DataOptions, fit: FitOptions, engine: EngineOptions) -> EngineChoice:
    """Resolve ``engine="auto"`` to the in-memory or the streaming engine (module notes).

    Any other engine is returned as given (``memory`` is never switched).
    """
    if engine.engine != "auto":
        return EngineChoice(engine)
    if engine.name != "auto":  # a scheduler or a rank names the engine
        return EngineChoice(replace(engine, engine=engine.name))
    memory = EngineChoice(replace(engine, engine="memory"))
    size = None if data.file is None else table_bytes(data.file, data.sep)
    avail = available_memory()
    if size is None or avail is None:
        return memory
    need = MEMORY_FACTOR * size
    if need <= MEMORY_SHARE * avail:
        return memory
    from paths.workflows.engines import unsupported_options

    why = (f"in memory the table ({_size(size)} as float64) would need about {_size(need)}, "
           f"more than {MEMORY_SHARE:.0%} of the {_size(avail)} available")
    record = {"requested": "auto", "table_bytes": size, "estimated_bytes": need,
              "available_bytes": avail, "share": MEMORY_SHARE, "factor": MEMORY_FACTOR}
    bad = unsupported_options(data, fit)
    if bad or Path(data.file).suffix.lower() == ".npz":
        held = bad[0] if bad else "a .npz file"
        note = f"{why}; kept in memory because {held} needs the in-memory engine"
        return EngineChoice(memory.options, {**record, "engine": "memory", "note": note}, note)
    note = f"{why}: streamed from the file instead (engine memory forces memory)"
    return EngineChoice(replace(engine, engine="stream"),
                        {**record, "engine": "stream", "note": note}, note)
