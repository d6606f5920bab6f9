"""Streaming and wide engines: peak resident memory, throughput, accuracy vs in memory.

Cases (synthetic data generated here, seeded):

- **tall, streamed from Parquet**: ``paths explore FILE --engine stream`` in a
  child process (progress bar and per-pass throughput on its stderr/stdout),
  its peak resident set size from ``getrusage`` in the child; the passes'
  rows/s against a plain NumPy Gram product ``B.T @ B`` on one in-memory chunk
  of the same width, measured in the same run.  Shapes: (200 000, 100) quick,
  (1 000 000, 100) default, (10⁷, 100) with ``--large`` (an 8 GB Parquet file,
  cached under the temp folder between runs).
- **accuracy**: the streamed Gram and TSQR routes against ``fit_path`` in
  memory on (200 000, 100) rows (max relative error over coefficients, GCV,
  LOO).
- **wide**: :func:`paths.engines.wide.wide_path` over column blocks produced by a
  seeded generator (so the figure is the algorithm's memory, not a file
  cache's), in a child process: (500, 20 000) quick, (1000, 50 000) default,
  (2000, 200 000) with ``--large``; throughput against NumPy's ``z @ z.T`` on
  one block.

Memory is the child's peak RSS (``VmHWM`` of ``/proc/self/status``; on Linux
``getrusage``'s ``ru_maxrss`` carries the parent's resident size over fork and
exec, so it is only the fallback), which includes the
interpreter and imported libraries (~150 MB; reported separately as the
``baseline`` row of an idle child that imports the same modules).
"""
from __future__ import annotations

import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
if str(HERE) not in sys.path:
    sys.path.insert(0, str(HERE))

import harness as H  # noqa: E402

BENCH = "stream"
GIB = 1 << 30
CACHE = Path(os.environ.get("PATHS_BENCH_CACHE", Path(tempfile.gettempdir()) / "paths-bench"))


def _make_parquet(path: Path, n: int, p: int, *, seed: int = 0, group: int = 131_072) -> Path:
    """Synthetic tall data: shifted Gaussian columns, y = X beta + noise, written in row groups."""
    import pyarrow as pa
    import pyarrow.parquet as pq

    if path.exists():
        try:
            meta = pq.read_metadata(path)
            if meta.num_rows == n and meta.num_columns == p + 1:
                return path
        except Exception:  # noqa: BLE001 - rewrite a damaged cache file
            pass
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_suffix(".tmp")
    rng = np.random.default_rng(seed)
    beta = rng.standard_normal(p) / np.sqrt(p)
    shift = rng.uniform(-3, 3, p)
    names = [f"x{j:03d}" for j in range(p)]
    schema = pa.schema([(nm, pa.float64()) for nm in names] + [("y", pa.float64())])
    with pq.ParquetWriter(tmp, schema, compression="none") as w:
        for s in range(0, n, group):
            b = min(group, n - s)
            X = rng.standard_normal((b, p)) + shift
            y = 1.0 + (X - shift) @ beta + rng.standard_normal(b)
            w.write_table(pa.table({**{nm: X[:, j] for j, nm in enumerate(names)}, "y": y},
                                   schema=schema), row_group_size=group)
    os.replace(tmp, path)
    return path


_PRELUDE = H.RSS_PRELUDE  # the peak-RSS probe of every child

_CHILD_CLI = _PRELUDE + r"""
import time
from paths.cli import app
args, out = json.loads(sys.argv[1]), sys.argv[2]
t0 = time.perf_counter()
code = 0
try:
    app(args, standalone_mode=False)
except SystemExit as exc:
    code = exc.code or 0
with open(out, "w") as fh:
    json.dump({"maxrss_kb": _hwm_kb(),
               "seconds": time.perf_counter() - t0, "code": code}, fh)
"""

_CHILD_IDLE = _PRELUDE + f"import {H.IDLE_LIBRARIES}\n" + r"""
import paths, paths.cli, paths.engines.stream, paths.engines.wide
with open(sys.argv[1], "w") as fh:
    json.dump({"maxrss_kb": _hwm_kb()}, fh)
"""

_CHILD_WIDE = _PRELUDE + r"""
import time, warnings
import numpy as np
from paths.data.chunks import ColumnSource
from paths.engines.wide import wide_path
n, p, block, rank, out = int(sys.argv[1]), int(sys.argv[2]), int(sys.argv[3]), sys.argv[4], sys.argv[5]

class Gen(ColumnSource):
    def __iter__(self):
        for s in range(0, self.n_features, self.block_columns):
            b = min(self.block_columns, self.n_features - s)
            rng = np.random.default_rng([7, s])
            yield s, rng.standard_normal((self.n_rows, b)) + 0.5

src = Gen(feature_names=[f"g{j}" for j in range(p)], n_rows=n, source="generator",
          block_columns=block)
y = np.random.default_rng(1).standard_normal(n)
t0 = time.perf_counter()
with warnings.catch_warnings():
    warnings.simplefilter("ignore")
    res = wide_path(src, y, rank=None if rank == "none" else int(rank))
sec = time.perf_counter() - t0
with open(out, "w") as fh:
    json.dump({"maxrss_kb": _hwm_kb(), "seconds": sec,
               "passes": [q.as_dict() for q in res.passes], "rank": res.rank,
               "captured_share": res.captured_share}, fh)
"""


def _child(code: str, *args) -> dict:
    with tempfile.TemporaryDirectory() as d:
        out = Path(d) / "out.json"
        proc = subprocess.run([sys.executable, "-c", code, *map(str, args), str(out)],
                              capture_output=True, text=True)
        if proc.returncode != 0 or not out.exists():
            raise RuntimeError(f"benchmark child failed ({proc.returncode}): "
                               f"{proc.stderr.strip()[-800:]}")
        rec = json.loads(out.read_text())
        rec["stdout"] = proc.stdout
        return rec


def _numpy_gram_rows_per_s(rows: int, cols: int, repeats: int = 5) -> float:
    """Rows per second of a plain in-memory ``B.T @ B`` (the Gram pass's arithmetic)."""
    B = np.random.default_rng(0).standard_normal((rows, cols))
    m = H.measure(lambda: B.T @ B, repeats=repeats, warmup=1)
    return rows / m["median"]


def _stream_case(n: int, p: int, quick: bool) -> list[dict]:
    case = f"({n}, {p}) streamed from Parquet"
    path = _make_parquet(CACHE / f"tall_{n}x{p}.parquet", n, p)
    rows = []
    base = _child(_CHILD_IDLE)["maxrss_kb"] * 1024
    rows.append(H.row(BENCH, case, "baseline RSS: interpreter + imports", base / 2**20, "MiB",
                      kind="memory"))
    with tempfile.TemporaryDirectory() as d:
        for accurate in (False, True) if not quick else (False,):
            label = "tsqr" if accurate else "gram"
            out = Path(d) / label
            args = ["explore", str(path), "--target", "y", "--engine", "stream", "--out",
                    str(out)] + (["--accurate"] if accurate else [])
            before = _numpy_gram_rows_per_s(65_536, p + 1)
            rec = _child(_CHILD_CLI, json.dumps(args))
            after = _numpy_gram_rows_per_s(65_536, p + 1)
            if rec["code"] not in (0, None):
                raise RuntimeError(f"paths explore failed with status {rec['code']}")
            summ = json.loads((out / "summary.json").read_text())
            rss = rec["maxrss_kb"] * 1024
            rows.append(H.row(BENCH, case, f"peak RSS, {label} route (whole CLI run)",
                              rss / 2**20, "MiB", kind="memory", target="<= 1024",
                              ok=H.check(rss / 2**20, "<= 1024")))
            rows.append(H.row(BENCH, case, f"wall time, {label} route (CLI, all passes)",
                              rec["seconds"], "s"))
            for pas in summ["engine"]["passes"]:
                rows.append(H.row(BENCH, case, f"{label}: {pas['label']}",
                                  pas["rows_per_second"], "rows/s", kind="throughput",
                                  mb_per_second=pas["mb_per_second"], seconds=pas["seconds"]))
            # the machine may be shared: the faster of the NumPy rates measured just before
            # and just after the child is the reference (a conservative ratio)
            numpy_rate = max(before, after)
            for k, pas in enumerate(summ["engine"]["passes"]):
                rows.append(H.row(BENCH, case, f"{label}: pass {k + 1} rows/s / NumPy B.T@B rows/s",
                                  pas["rows_per_second"] / numpy_rate, "×", kind="ratio",
                                  note=f"NumPy in-memory Gram on (65536, {p + 1}): "
                                       f"{before:,.0f} rows/s before, {after:,.0f} after"))
    return rows


def _accuracy_case(n: int, p: int) -> list[dict]:
    from paths import fit_path
    from paths.engines.stream import stream_path

    case = f"({n}, {p}) accuracy vs in memory"
    rng = np.random.default_rng(3)
    X = rng.standard_normal((n, p)) * np.geomspace(0.3, 3, p) + rng.uniform(-3, 3, p)
    y = 1.0 + X @ (rng.standard_normal(p) / np.sqrt(p)) + rng.standard_normal(n)
    ref = fit_path(X, y)
    rows = []
    for accurate in (False, True):
        res = stream_path(X, y=y, accurate=accurate)
        err = max(float(np.max(np.abs(getattr(res, f) - getattr(ref, f)))
                        / np.max(np.abs(getattr(ref, f))))
                  for f in ("coef", "gcv", "loo_mse", "singular_values"))
        rows.append(H.row(BENCH, case, f"max relative error, {'tsqr' if accurate else 'gram'}",
                          err, "", kind="accuracy", target="<= 1e-10", ok=H.check(err, "<= 1e-10")))
    return rows


def _wide_case(n: int, p: int, block: int = 4096, rank=None) -> list[dict]:
    case = f"wide ({n}, {p}) column blocks" + (f", rank {rank}" if rank else "")
    zb0 = np.random.default_rng(0).standard_normal((n - 1, block))
    before = block / H.measure(lambda: zb0 @ zb0.T, repeats=3, warmup=1)["median"]
    rec = _child(_CHILD_WIDE, n, p, block, rank or "none")
    rows = [H.row(BENCH, case, "peak RSS (generator source, whole run)",
                  rec["maxrss_kb"] * 1024 / 2**20, "MiB", kind="memory",
                  note=f"n x n Gram {n * n * 8 / 2**20:.0f} MiB; X would be "
                       f"{n * p * 8 / 2**20:.0f} MiB"),
            H.row(BENCH, case, "wall time (all passes)", rec["seconds"], "s")]
    for pas in rec["passes"]:
        rows.append(H.row(BENCH, case, pas["label"], pas["rows"] / pas["seconds"], "columns/s",
                          kind="throughput", seconds=pas["seconds"]))
    if rank:
        rows.append(H.row(BENCH, case, "captured share of ||X||_F^2", rec["captured_share"], "",
                          kind="accuracy"))
    zb = np.random.default_rng(0).standard_normal((n - 1, block))
    m = H.measure(lambda: zb @ zb.T, repeats=3, warmup=1)
    np_rate = max(block / m["median"], before)
    first = rec["passes"][0]
    rows.append(H.row(BENCH, case, "pass 1 columns/s / NumPy z@z.T columns/s",
                      (first["rows"] / first["seconds"]) / np_rate, "×", kind="ratio",
                      note=f"NumPy z@z.T on ({n - 1}, {block}): {np_rate:,.0f} columns/s"))
    return rows


def run(quick: bool = False) -> list[dict]:
    """Tall streamed, accuracy and wide cases; the issue's full shapes with ``PATHS_BENCH_LARGE=1``."""
    large = os.environ.get("PATHS_BENCH_LARGE") == "1"
    rows = []
    if quick:
        rows += _stream_case(200_000, 100, quick=True)
        rows += _accuracy_case(50_000, 50)
        rows += _wide_case(500, 20_000)
        return rows
    rows += _stream_case(10_000_000 if large else 1_000_000, 100, quick=False)
    rows += _accuracy_case(200_000, 100)
    rows += _wide_case(2000, 200_000) if large else _wide_case(1000, 50_000)
    rows += _wide_case(2000 if large else 1000, 200_000 if large else 50_000, rank=200)
    return rows


if __name__ == "__main__":  # python benchmarks/bench_stream.py [--quick]
    t0 = time.perf_counter()
    out = run(quick="--quick" in sys.argv)
    for r in out:
        print(f"{r['case']:<42} {r['name']:<62} {r['value']:>14.6g} {r['unit']}")
    print(f"({time.perf_counter() - t0:.0f} s)")
