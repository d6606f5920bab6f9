"""A small benchmark harness of our own: timing, peak memory, BLAS pinning, records.

Everything a benchmark module needs and nothing else:

- :func:`measure` times a callable (median / min / max of ``repeats`` runs
  after ``warmup`` runs, :func:`time.perf_counter`), optionally with an untimed
  ``setup`` per run, and measures its peak traced memory in one extra, untimed
  run under :mod:`tracemalloc` (numpy registers its data buffers with
  tracemalloc, so every array the callable allocates is counted; memory that
  BLAS/LAPACK allocate internally with ``malloc`` is not, but scipy's LAPACK
  wrappers allocate their workspaces as numpy arrays, which are).
- :func:`blas_threads` pins the BLAS thread pool (threadpoolctl); benchmark
  modules run each case once per entry of :data:`THREAD_SETTINGS`.
- :func:`machine_info` records cores, BLAS libraries and package versions.
- :func:`row` builds the one record format every module returns;
  :func:`write_record` writes a run atomically to ``benchmarks/results/``;
  :func:`render_markdown` turns a record into Markdown tables.

Timings are wall-clock on a possibly shared machine: compare ratios measured
side by side in one process, not absolute seconds across runs.
"""
from __future__ import annotations

import gc
import json
import os
import platform
import resource
import statistics
import sys
import tempfile
import time
import tracemalloc
from contextlib import contextmanager
from datetime import datetime, timezone
from pathlib import Path

__all__ = ["THREAD_SETTINGS", "RESULTS_DIR", "measure", "peak_memory", "blas_threads",
           "machine_info", "row", "write_record", "latest_record", "load_record",
           "render_markdown", "RSS_PRELUDE", "RECORD_PRELUDE", "IDLE_LIBRARIES", "load_average"]

THREAD_SETTINGS = (1, 2)
RESULTS_DIR = Path(__file__).resolve().parent / "results"
SCHEMA = 1


# ------------------------------------------------------------- child processes
#: Source every benchmark child process starts with: ``_hwm_kb()``, the peak resident
#: set size of this process image in kB (``VmHWM`` of ``/proc/self/status``; on Linux
#: ``getrusage``'s ``ru_maxrss`` carries the parent's resident size over fork + exec,
#: so it is only the fallback).
RSS_PRELUDE = r"""
import atexit, json, resource, sys, time
_T0 = time.perf_counter()
def _hwm_kb():
    try:
        for line in open("/proc/self/status"):
            if line.startswith("VmHWM:"):
                return int(line.split()[1])
    except OSError:
        pass
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
"""

#: :data:`RSS_PRELUDE` plus a record written at exit to the path given as the first
#: argument (removed from ``sys.argv``): ``{"maxrss_kb", "inner_seconds"}``.
RECORD_PRELUDE = RSS_PRELUDE + r"""
_OUT = sys.argv.pop(1)
@atexit.register
def _report():
    with open(_OUT, "w") as fh:
        json.dump({"maxrss_kb": _hwm_kb(), "inner_seconds": time.perf_counter() - _T0}, fh)
"""

#: Every library a command run loads: an idle child importing them is the resident
#: floor under any run (the "idle libraries" of the memory figures).
IDLE_LIBRARIES = "numpy, scipy.linalg, pandas, pyarrow.parquet, sklearn, matplotlib.pyplot, rich"


def load_average() -> str:
    """The 1, 5 and 15 minute load averages (``uptime``), recorded with timings."""
    try:
        return " ".join(f"{v:.2f}" for v in os.getloadavg())
    except OSError:
        return "?"


# --------------------------------------------------------------------- timing
def _call(fn, setup):
    if setup is None:
        t0 = time.perf_counter()
        fn()
        return time.perf_counter() - t0
    arg = setup()
    t0 = time.perf_counter()
    fn(arg)
    return time.perf_counter() - t0


def peak_memory(fn, setup=None) -> int:
    """Peak bytes traced by :mod:`tracemalloc` while ``fn`` (``fn(setup())``) runs.

    Memory allocated before the call (its inputs, the ``setup`` result) is not
    counted; the figure is the high-water mark of what the call itself holds.
    """
    arg = setup() if setup is not None else None
    gc.collect()
    was_tracing = tracemalloc.is_tracing()
    if not was_tracing:
        tracemalloc.start()
    try:
        tracemalloc.reset_peak()
        base, _ = tracemalloc.get_traced_memory()
        out = fn() if setup is None else fn(arg)
        _, peak = tracemalloc.get_traced_memory()
        del out
    finally:
        if not was_tracing:
            tracemalloc.stop()
    return int(peak - base)


def measure(fn, repeats: int = 5, warmup: int = 1, *, setup=None, memory: bool = False,
            budget: float | None = None) -> dict:
    """Time ``fn`` and (optionally) its peak memory.

    Parameters
    ----------
    fn : callable
        ``fn()``, or ``fn(setup())`` when ``setup`` is given.
    repeats : int
        Timed runs; the median is the headline figure.
    warmup : int
        Untimed runs first (page faults, BLAS thread start-up, caches).
    setup : callable, optional
        Called before every run, untimed; its result is passed to ``fn``
        (e.g. a fresh copy of an array that ``fn`` overwrites).
    memory : bool
        Also measure peak traced memory, in one extra untimed run.
    budget : float, optional
        Seconds: when a single run takes longer than ``budget / repeats``, the
        number of timed runs is cut to what fits, but never below 3.

    Returns
    -------
    dict
        ``median``, ``min``, ``max`` (seconds), ``repeats``, ``times`` and
        ``peak_bytes`` (None unless ``memory``).
    """
    for _ in range(warmup):
        _call(fn, setup)
    times = [_call(fn, setup)]
    n = repeats
    if budget is not None and times[0] * repeats > budget:
        n = max(min(3, repeats), int(budget // max(times[0], 1e-9)))
        n = min(n, repeats)
    while len(times) < n:
        times.append(_call(fn, setup))
    peak = peak_memory(fn, setup) if memory else None
    return {
        "median": statistics.median(times),
        "min": min(times),
        "max": max(times),
        "repeats": len(times),
        "times": times,
        "peak_bytes": peak,
    }


@contextmanager
def blas_threads(n: int):
    """Limit the BLAS thread pools (OpenBLAS, MKL, BLIS) to ``n`` threads."""
    from threadpoolctl import threadpool_limits

    with threadpool_limits(limits=n, user_api="blas"):
        yield


# ---------------------------------------------------------------- environment
def machine_info() -> dict:
    """Cores, BLAS libraries (threadpoolctl) and package versions."""
    import numpy as np
    import scipy
    from threadpoolctl import threadpool_info

    info = {
        "python": sys.version.split()[0],
        "platform": platform.platform(),
        "machine": platform.machine(),
        "cpu_count": os.cpu_count(),
        "affinity_cores": len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else None,
        "numpy": np.__version__,
        "scipy": scipy.__version__,
    }
    try:
        import sklearn

        info["sklearn"] = sklearn.__version__
    except ImportError:  # pragma: no cover - sklearn is a runtime dependency
        info["sklearn"] = None
    try:
        from importlib.metadata import version

        info["ridgepaths"] = version("ridgepaths")
    except Exception:  # noqa: BLE001 - not installed as a distribution
        info["ridgepaths"] = None
    import scipy.linalg  # noqa: F401  (load scipy's BLAS so threadpoolctl sees it)

    info["blas"] = [
        {k: lib.get(k) for k in ("internal_api", "version", "num_threads", "threading_layer",
                                  "architecture", "prefix")}
        for lib in threadpool_info() if lib.get("user_api") == "blas"
    ]
    return info


def max_rss_bytes() -> int:
    """The process's peak resident set size so far (``getrusage``; kB on Linux)."""
    rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    return int(rss if sys.platform == "darwin" else rss * 1024)


# -------------------------------------------------------------------- records
def row(bench: str, case: str, name: str, value: float, unit: str, *, threads: int | None = None,
        kind: str = "time", target: str | None = None, ok: bool | None = None,
        note: str = "", **extra) -> dict:
    """One result line: the common record format of every benchmark module.

    ``kind`` is ``"time"`` (seconds, with ``min``/``max``/``repeats`` in
    ``extra``), ``"ratio"`` (dimensionless, ``target`` like ``">= 1.5"`` and
    ``ok``) or ``"memory"``; ``threads`` is the BLAS thread limit (None when
    the figure does not depend on it).
    """
    out = {"bench": bench, "case": case, "name": name, "value": float(value), "unit": unit,
           "threads": threads, "kind": kind, "target": target, "ok": ok, "note": note}
    out.update(extra)
    return out


def check(value: float, target: str | None) -> bool | None:
    """Evaluate a target string ``">= 1.5"`` / ``"<= 0.5"`` against ``value``."""
    if not target:
        return None
    op, _, num = target.partition(" ")
    bound = float(num)
    return {">=": value >= bound, "<=": value <= bound, ">": value > bound,
            "<": value < bound}[op]


def write_record(rows: list[dict], *, quick: bool, argv=None, extra: dict | None = None,
                 directory: Path | None = None) -> Path:
    """Write one run (rows + machine info) to ``<directory>/<UTC timestamp>.json`` atomically."""
    directory = Path(directory) if directory is not None else RESULTS_DIR
    directory.mkdir(parents=True, exist_ok=True)
    now = datetime.now(timezone.utc)
    record = {
        "schema": SCHEMA,
        "created_utc": now.isoformat(timespec="seconds"),
        "argv": list(sys.argv if argv is None else argv),
        "quick": bool(quick),
        "machine": machine_info(),
        "max_rss_bytes": max_rss_bytes(),
        "load_average": load_average(),
        "rows": rows,
    }
    if extra:
        record.update(extra)
    stem = now.strftime("%Y%m%dT%H%M%SZ")
    dest = directory / f"{stem}.json"
    i = 1
    while dest.exists():
        dest = directory / f"{stem}-{i}.json"
        i += 1
    fd, tmp = tempfile.mkstemp(prefix=f".{dest.stem}.", suffix=".tmp", dir=directory)
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as fh:
            json.dump(record, fh, indent=1, allow_nan=True)
            fh.write("\n")
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, dest)
    except BaseException:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        raise
    return dest


def load_record(path) -> dict:
    with open(path, encoding="utf-8") as fh:
        return json.load(fh)


def latest_record(directory: Path | None = None) -> Path | None:
    """The newest ``*.json`` record in ``directory`` (by name: names are UTC timestamps)."""
    directory = Path(directory) if directory is not None else RESULTS_DIR
    files = sorted(p for p in directory.glob("*.json"))
    return files[-1] if files else None


# ------------------------------------------------------------------ rendering
def _fmt(value: float, unit: str) -> str:
    if value != value:  # NaN
        return "n/a"
    if unit == "s":
        return f"{value:.3f}" if value < 10 else f"{value:.1f}"
    if unit == "MB":
        return f"{value:.1f}"
    if value != 0 and (abs(value) < 0.01 or abs(value) >= 1e6):
        return f"{value:.3g}"
    if abs(value) >= 100:
        return f"{value:.0f}"
    if abs(value) >= 10:
        return f"{value:.1f}"
    return f"{value:.2f}"


def _mark(ok):
    return "" if ok is None else (" ✓" if ok else " ✗")


def render_markdown(record: dict, benches=None) -> str:
    """Markdown tables of a record: per benchmark and kind, one column per thread setting.

    Rows are keyed by (case, name); a figure that does not depend on the
    thread setting (``threads`` None) goes in its own column.
    """
    rows = record["rows"]
    lines = []
    m = record.get("machine", {})
    blas = ", ".join(f"{b.get('internal_api')} {b.get('version')}" for b in m.get("blas", []))
    lines.append(
        f"Measured {record.get('created_utc', '?')} on {m.get('cpu_count', '?')} cores "
        f"({m.get('machine', '?')}), BLAS {blas or '?'}; numpy {m.get('numpy')}, "
        f"scipy {m.get('scipy')}, scikit-learn {m.get('sklearn')}"
        + (f"; load average {record['load_average']} (1, 5, 15 min) at the end"
           if record.get("load_average") else "")
        + (" — quick mode (fewer repeats)" if record.get("quick") else "") + "."
    )
    order_bench = []
    for r in rows:
        if r["bench"] not in order_bench:
            order_bench.append(r["bench"])
    kinds = ("ratio", "time", "memory")
    titles = {"ratio": "ratios", "time": "median seconds", "memory": "memory"}
    for bench in order_bench:
        if benches and bench not in benches:
            continue
        for kind in kinds:
            sel = [r for r in rows if r["bench"] == bench and r["kind"] == kind]
            if not sel:
                continue
            threads = sorted({r["threads"] for r in sel if r["threads"] is not None})
            has_none = any(r["threads"] is None for r in sel)
            keys = []
            cell = {}
            meta = {}
            for r in sel:
                key = (r["case"], r["name"])
                if key not in keys:
                    keys.append(key)
                cell[key, r["threads"]] = _fmt(r["value"], r["unit"]) + _mark(r.get("ok"))
                meta.setdefault(key, (r.get("unit", ""), r.get("target") or "", r.get("note", "")))
            cols = [f"{t} thread{'s' if t != 1 else ''}" for t in threads]
            if has_none:
                cols.append("value")
            lines.append("")
            lines.append(f"**{bench}: {titles[kind]}**")
            lines.append("")
            head = ["case", "quantity", *cols, "target", "note"]
            lines.append("| " + " | ".join(head) + " |")
            lines.append("|" + "---|" * len(head))
            for key in keys:
                unit, target, note = meta[key]
                vals = [cell.get((key, t), "") for t in threads]
                if has_none:
                    vals.append(cell.get((key, None), ""))
                name = key[1] + (f" [{unit}]" if unit and kind != "ratio" else "")
                lines.append("| " + " | ".join([key[0], name, *vals, target, note]) + " |")
    return "\n".join(lines) + "\n"
