"""Commands end to end: what a user waits for, against a plain script doing the same job.

Every figure here is a whole child process, interpreter start-up included, with
the BLAS thread pool pinned through the environment (``OPENBLAS_NUM_THREADS``,
``OMP_NUM_THREADS``, ``MKL_NUM_THREADS`` = 1), so it is the wall-clock time and
the peak resident memory (``VmHWM``, :data:`harness.RECORD_PRELUDE`) a person at
the terminal sees.  The command and its plain script alternate run by run, so a
change of load on a shared machine hits both; the note of each ratio lists the
pairs.  Each explore case also runs both as functions in this one process
(imports done, BLAS pinned by threadpoolctl): the ratio without start-up.

Cases (synthetic data generated here, seeded, written to Parquet once and cached
under the temp folder), on wide 400 × 4000, tall 4000 × 400, a 64 × 6829 wide
table, 200 000 × 50 (not with ``--quick`` unless ``--large``) and
1 000 000 × 20 (``--large``):

- **explore**: ``paths explore FILE -t y`` with its defaults (default grid,
  every rule, figures, report) against a pandas + scikit-learn program that reads
  the same file, standardizes, runs ``RidgeCV`` over 100 log-spaced penalties and
  saves one matplotlib figure (it computes much less: no path, no df, no GCV, no
  report).  Peak memory over the data (float64) above two floors: an idle child
  with the libraries (the plain script's included), and one with exactly what
  explore loads (no scikit-learn; the modules of paths).
- **predict**: ``paths predict fit.npz FILE`` (the fit of one explore run)
  against unpickling a scikit-learn ``StandardScaler`` + ``Ridge`` pipeline fitted at
  the same penalty, reading the rows with pandas, predicting and writing a CSV.
- **threshold**: ``paths threshold FILE -t y`` (holdout 0.25, 40 points) against
  a script with the same reading, holdout fraction and p′ grid that fits min-norm
  least squares, ``Ridge`` at the same fixed penalty and ``RidgeCV`` at every
  point and draws one figure (wide tables: a feature-wise sweep must cross p′ = n).
- **simulate**: ``paths simulate`` with its defaults against the same sweep on one
  seeded isotropic draw of the same size.
- **start-up**: ``paths --help`` against ``python -c "import numpy, scipy.linalg"``
  (target ≤ 1.5×).

Ratios are ``plain / paths`` (> 1: the command is faster), from medians of the
repeats, both measured in the same run.
"""
from __future__ import annotations

import json
import os
import statistics
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

BENCH = "e2e"
CACHE = Path(os.environ.get("PATHS_BENCH_CACHE", Path(tempfile.gettempdir()) / "paths-bench"))

_HWM = H.RECORD_PRELUDE  # peak RSS and inner seconds, written at exit

_PATHS_CLI = _HWM + r"""
from paths.cli import main
sys.argv = ["paths", *sys.argv[1:]]
main()
"""

_IMPORT_FLOOR = _HWM + "import numpy, scipy.linalg\n"

# an idle child holding every library a run loads: the resident floor under any run
_IDLE = _HWM + f"import {H.IDLE_LIBRARIES}\n"
# exactly what an explore run loads (its libraries without scikit-learn, which it never
# imports, and the modules of paths: code, not data): the floor under its data
_IDLE_PATHS = _HWM + ("import numpy, scipy.linalg, scipy.optimize, pandas, pyarrow.parquet, "
                      "matplotlib.pyplot, rich, paths.cli, paths.workflows.explore, "
                      "paths.present.figures, paths.present.report, paths.present.fitfile, "
                      "paths.selection.rules, paths.core.path, paths.data.tables, "
                      "matplotlib.backends.backend_svg\n")

_PLAIN = _HWM + r"""
import numpy as np, pandas as pd
from sklearn.linear_model import RidgeCV
import matplotlib
matplotlib.use("Agg")
import matplotlib.pyplot as plt
data, target, out = sys.argv[1], sys.argv[2], sys.argv[3]
df = pd.read_parquet(data)
y = df.pop(target).to_numpy()
X = df.to_numpy(dtype=float)
X = (X - X.mean(axis=0)) / X.std(axis=0)
alphas = np.logspace(-3, 5, 100) * X.shape[0]
model = RidgeCV(alphas=alphas).fit(X, y)
fig, ax = plt.subplots(figsize=(3.5, 2.6))
ax.plot(np.arange(X.shape[1]), model.coef_, lw=0.5)
ax.set_xlabel("feature"); ax.set_ylabel("coefficient")
fig.savefig(out + "/coef.png", dpi=300)
"""


# the threshold sweep by hand: the same reading and holdout fraction, the same p' grid (passed
# in), min-norm least squares, ridge at the same fixed penalty and RidgeCV-tuned ridge at every
# point, one figure
_PLAIN_SWEEP = r"""
def sweep(Xtr, ytr, Xte, yte, sizes, out):
    import numpy as np
    from sklearn.linear_model import Ridge, RidgeCV
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    mu, sd = Xtr.mean(axis=0), Xtr.std(axis=0)
    Xtr = (Xtr - mu) / sd; Xte = (Xte - mu) / sd
    ym = ytr.mean(); n = Xtr.shape[0]
    lam = 0.1 * (n - 1)
    rows = []
    for k in sizes:
        b = np.linalg.lstsq(Xtr[:, :k], ytr - ym, rcond=None)[0]
        e0 = np.mean((yte - ym - Xte[:, :k] @ b) ** 2)
        e1 = np.mean((yte - Ridge(alpha=lam).fit(Xtr[:, :k], ytr).predict(Xte[:, :k])) ** 2)
        cv = RidgeCV(alphas=np.logspace(-3, 5, 100) * n).fit(Xtr[:, :k], ytr)
        e2 = np.mean((yte - cv.predict(Xte[:, :k])) ** 2)
        rows.append((k, e0, e1, e2))
    a = np.array(rows)
    fig, ax = plt.subplots(figsize=(3.5, 2.6))
    for j, lab in ((1, "min-norm"), (2, "ridge"), (3, "tuned ridge")):
        ax.plot(a[:, 0], a[:, j], lw=0.8, label=lab)
    ax.set_yscale("log"); ax.set_xlabel("features"); ax.set_ylabel("test MSE"); ax.legend()
    fig.savefig(out + "/threshold.png", dpi=300)
"""

_PLAIN_THRESHOLD = _HWM + _PLAIN_SWEEP + r"""
import numpy as np, pandas as pd
data, target, out, sizes = sys.argv[1], sys.argv[2], sys.argv[3], sys.argv[4]
df = pd.read_parquet(data)
y = df.pop(target).to_numpy()
X = df.to_numpy(dtype=float)
idx = np.random.default_rng(0).permutation(X.shape[0])
held = idx[: int(round(0.25 * X.shape[0]))]; keep = idx[held.size:]
sweep(X[keep], y[keep], X[held], y[held], [int(v) for v in sizes.split(",")], out)
"""

_PLAIN_SIMULATE = _HWM + _PLAIN_SWEEP + r"""
import numpy as np
out, sizes = sys.argv[1], sys.argv[2]
rng = np.random.default_rng(0)
n, m, p = 200, 1000, 600
beta = rng.standard_normal(p); beta /= np.linalg.norm(beta)  # signal variance 1: snr 1
X = rng.standard_normal((n + m, p)); y = X @ beta + rng.standard_normal(n + m)
sweep(X[:n], y[:n], X[n:], y[n:], [int(v) for v in sizes.split(",")], out)
"""

# predictions from a saved model by hand: unpickle a fitted scikit-learn pipeline, read the new
# rows with pandas, predict, write a CSV
_PLAIN_PREDICT = _HWM + r"""
import pickle
import pandas as pd
model, data, target, out = sys.argv[1], sys.argv[2], sys.argv[3], sys.argv[4]
with open(model, "rb") as fh:
    pipe = pickle.load(fh)
df = pd.read_parquet(data)
X = df.drop(columns=[target]).to_numpy(dtype=float)
pd.DataFrame({"row": range(X.shape[0]), "prediction": pipe.predict(X)}).to_csv(
    out + "/predictions.csv", index=False)
"""

_MAKE_MODEL = r"""
import pickle, sys
import pandas as pd
from sklearn.linear_model import Ridge
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler
data, target, dest, lam = sys.argv[1], sys.argv[2], sys.argv[3], float(sys.argv[4])
df = pd.read_parquet(data)
y = df.pop(target).to_numpy()
pipe = make_pipeline(StandardScaler(), Ridge(alpha=lam)).fit(df.to_numpy(dtype=float), y)
with open(dest, "wb") as fh:
    pickle.dump(pipe, fh)
"""


def _table(n: int, p: int, *, seed: int) -> Path:
    """A seeded synthetic Parquet table ``x0..x{p-1}, y`` (cached by shape and seed)."""
    import pyarrow as pa
    import pyarrow.parquet as pq

    CACHE.mkdir(parents=True, exist_ok=True)
    path = CACHE / f"e2e-{n}x{p}-s{seed}.parquet"
    if path.exists():
        return path
    rng = np.random.default_rng(seed)
    X = rng.standard_normal((n, p))
    beta = np.zeros(p)
    k = min(p, 20)
    beta[:k] = rng.standard_normal(k)
    y = X @ beta + rng.standard_normal(n)
    cols = {f"x{j}": X[:, j] for j in range(p)}
    cols["y"] = y
    tmp = path.with_suffix(".tmp")
    pq.write_table(pa.table(cols), tmp)
    tmp.replace(path)
    return path


def _env(threads: int) -> dict:
    env = dict(os.environ)
    for var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
        env[var] = str(threads)
    env.setdefault("MPLBACKEND", "Agg")
    return env


def _run(code: str, args: list, threads: int) -> dict:
    """One child process: wall seconds, peak RSS (MB), exit status."""
    with tempfile.TemporaryDirectory() as tmp:
        rec = Path(tmp) / "rec.json"
        t0 = time.perf_counter()
        proc = subprocess.run([sys.executable, "-c", code, str(rec), *map(str, args)],
                              env=_env(threads), capture_output=True, text=True)
        wall = time.perf_counter() - t0
        info = json.loads(rec.read_text()) if rec.exists() else {"maxrss_kb": float("nan")}
    if proc.returncode != 0:
        raise RuntimeError(f"child failed ({proc.returncode}): {proc.stderr.strip()[-400:]}")
    return {"seconds": wall, "rss_mb": info["maxrss_kb"] / 1024}


def _repeat(code: str, args_fn, threads: int, repeats: int) -> dict:
    runs = []
    for _ in range(repeats):
        with tempfile.TemporaryDirectory() as out:
            runs.append(_run(code, args_fn(out), threads))
    secs = [r["seconds"] for r in runs]
    return {"median": statistics.median(secs), "min": min(secs), "max": max(secs),
            "rss_mb": max(r["rss_mb"] for r in runs)}


def _explore_vs_plain(case: str, data: Path, n: int, p: int, threads: int,
                      repeats: int, target: str, floors: dict) -> list:
    rows = _side_by_side(case, "explore",
                         lambda out: ["explore", data, "-t", "y", "--out", out, "--force"],
                         _PLAIN, lambda out: [data, "y", out], threads, repeats, target,
                         "plain script (pandas + RidgeCV + 1 figure)")
    peak = rows[-1]["value"]
    data_mb = n * (p + 1) * 8 / 2**20
    # the ≤ 3× target is about data that dominate the footprint (issue 16: 78 MB and up);
    # on small tables the figure is informative only
    mem_target = "<= 3" if data_mb >= 50 else None
    for label, floor in floors.items():
        over = (peak - floor) / data_mb
        rows.append(H.row(BENCH, case, f"(paths explore peak RSS − {label}) / data", over, "×",
                          threads=threads, kind="memory",
                          target=mem_target if label == "idle libraries" else None,
                          ok=H.check(over, mem_target) if mem_target and label ==
                          "idle libraries" else None,
                          note=f"data {data_mb:.1f} MB as float64; idle child with the "
                               f"{label} {floor:.0f} MB"))
    return rows


def _in_process(case: str, data: Path, repeats: int) -> list:
    """The explore workflow and the plain script's work as functions in THIS process
    (imports done, BLAS pinned to one thread by threadpoolctl), alternated run by run:
    the ratio without interpreter start-up and imports, and robust to the machine's load."""
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    import pandas as pd
    from sklearn.linear_model import RidgeCV

    from paths.workflows.explore import run_explore
    from paths.workflows.options import DataOptions, EngineOptions, OutputOptions

    def plain(out):
        df = pd.read_parquet(data)
        y = df.pop("y").to_numpy()
        X = df.to_numpy(dtype=float)
        X = (X - X.mean(axis=0)) / X.std(axis=0)
        model = RidgeCV(alphas=np.logspace(-3, 5, 100) * X.shape[0]).fit(X, y)
        fig, ax = plt.subplots(figsize=(3.5, 2.6))
        ax.plot(np.arange(X.shape[1]), model.coef_, lw=0.5)
        fig.savefig(out + "/coef.png", dpi=300)
        plt.close(fig)

    def ours(out):
        run_explore(DataOptions(file=data, target=("y",)),
                    output=OutputOptions(out_dir=Path(out), force=True),
                    engine=EngineOptions(engine="memory"))

    pairs = []
    with H.blas_threads(1):
        for k in range(repeats + 1):  # the first pair warms caches and lazy imports
            times = []
            for fn in (ours, plain):
                with tempfile.TemporaryDirectory() as out:
                    t0 = time.perf_counter()
                    fn(out)
                    times.append(time.perf_counter() - t0)
            if k:
                pairs.append(times)
    a = np.array(pairs)
    ratio = float(np.median(a[:, 1] / a[:, 0]))
    return [H.row(BENCH, case, "in one process: plain work / explore workflow", ratio, "×",
                  threads=1, kind="ratio",
                  note=f"medians {np.median(a[:, 0]):.3f} s (explore) and "
                       f"{np.median(a[:, 1]):.3f} s (plain), {len(pairs)} pairs, imports "
                       "excluded")]


def _side_by_side(case: str, what: str, ours_args, plain_code: str, plain_args, threads: int,
                  repeats: int, target: str | None, plain_label: str) -> list:
    """``paths WHAT`` and its plain-script equivalent, alternated run by run (so a change
    of load hits both), their medians and the ratio ``plain / paths``."""
    ours_runs, plain_runs = [], []
    for _ in range(repeats):
        with tempfile.TemporaryDirectory() as out:
            ours_runs.append(_run(_PATHS_CLI, ours_args(out), threads))
        with tempfile.TemporaryDirectory() as out:
            plain_runs.append(_run(plain_code, plain_args(out), threads))
    ours, plain = _summary(ours_runs), _summary(plain_runs)
    ratio = plain["median"] / ours["median"]
    pair = [p["seconds"] / o["seconds"] for o, p in zip(ours_runs, plain_runs)]
    return [
        H.row(BENCH, case, f"paths {what}", ours["median"], "s", threads=threads, kind="time",
              min=ours["min"], max=ours["max"]),
        H.row(BENCH, case, plain_label, plain["median"], "s", threads=threads, kind="time",
              min=plain["min"], max=plain["max"]),
        H.row(BENCH, case, f"plain script / paths {what}", ratio, "×", threads=threads,
              kind="ratio", target=target, ok=H.check(ratio, target) if target else None,
              note="pairs (one run each, back to back): "
                   + ", ".join(f"{v:.2f}" for v in pair)),
        H.row(BENCH, case, f"paths {what} peak RSS", ours["rss_mb"], "MB", threads=threads,
              kind="memory"),
    ]


def _summary(runs: list) -> dict:
    secs = [r["seconds"] for r in runs]
    return {"median": statistics.median(secs), "min": min(secs), "max": max(secs),
            "rss_mb": max(r["rss_mb"] for r in runs)}


def _threshold_grid(n: int, p: int) -> str:
    from paths.threshold.sweep import sweep_sizes

    n_train = n - int(round(0.25 * n))
    return ",".join(str(int(v)) for v in sweep_sizes(1, p, n_train - 1, 40))


def _threshold_vs_plain(case, data, n, p, threads, repeats) -> list:
    grid = _threshold_grid(n, p)
    return _side_by_side(case, "threshold",
                         lambda out: ["threshold", data, "-t", "y", "--out", out, "--force"],
                         _PLAIN_THRESHOLD, lambda out: [data, "y", out, grid], threads, repeats,
                         None, "plain script (lstsq + Ridge + RidgeCV per point, 1 figure)")


def _simulate_vs_plain(threads, repeats) -> list:
    from paths.threshold.sweep import sweep_sizes

    grid = ",".join(str(int(v)) for v in sweep_sizes(1, 600, 199, 40))
    return _side_by_side("simulate (defaults: 200 + 1000 rows, 600 features)", "simulate",
                         lambda out: ["simulate", "--out", out, "--force"], _PLAIN_SIMULATE,
                         lambda out: [out, grid], threads, repeats, None,
                         "plain script (draw, lstsq + Ridge + RidgeCV per point, 1 figure)")


def _predict_vs_plain(case, data, threads, repeats) -> list:
    """``paths predict`` with the fit of one explore run against an unpickled scikit-learn
    pipeline fitted at the same penalty (both made once, untimed), on the same rows."""
    with tempfile.TemporaryDirectory() as tmp:
        fit_dir = Path(tmp) / "fit"
        _run(_PATHS_CLI, ["explore", data, "-t", "y", "--out", fit_dir, "--force",
                          "--format", "none", "--no-report"], 1)
        lam = json.loads((fit_dir / "summary.json").read_text())["report"]["lambda"]
        model = Path(tmp) / "model.pkl"
        subprocess.run([sys.executable, "-c", _MAKE_MODEL, str(data), "y", str(model), str(lam)],
                       env=_env(1), check=True, capture_output=True)
        return _side_by_side(case, "predict",
                             lambda out: ["predict", fit_dir / "fit.npz", data, "-o",
                                          Path(out) / "pred.csv", "--force"],
                             _PLAIN_PREDICT, lambda out: [model, data, "y", out], threads,
                             repeats, None, "plain script (unpickle, pandas, predict, CSV)")


def _startup(threads: int, repeats: int) -> list:
    ours = _repeat(_PATHS_CLI, lambda out: ["--help"], threads, repeats)
    floor = _repeat(_IMPORT_FLOOR, lambda out: [], threads, repeats)
    ratio = ours["median"] / floor["median"]
    return [
        H.row(BENCH, "start-up", "paths --help", ours["median"], "s", threads=threads,
              kind="time", min=ours["min"], max=ours["max"]),
        H.row(BENCH, "start-up", "import numpy, scipy.linalg", floor["median"], "s",
              threads=threads, kind="time", min=floor["min"], max=floor["max"]),
        H.row(BENCH, "start-up", "paths --help / numpy+scipy import", ratio, "×",
              threads=threads, kind="ratio", target="<= 1.5", ok=H.check(ratio, "<= 1.5")),
    ]


def run(quick: bool) -> list:
    repeats = 1 if quick else 5
    shapes = [("wide 400×4000", 400, 4000, ">= 1"), ("tall 4000×400", 4000, 400, ">= 2"),
              ("wide table 64×6829", 64, 6829, ">= 1")]
    if not quick or os.environ.get("PATHS_BENCH_LARGE"):
        shapes.append(("very tall 200000×50", 200_000, 50, ">= 2"))
    if os.environ.get("PATHS_BENCH_LARGE"):
        shapes.append(("very tall 1000000×20", 1_000_000, 20, ">= 2"))
    rows = []
    threads = 1  # the stable figure; whole processes at two threads vary too much here
    rows += _startup(threads, 3 if quick else 7)
    floors = {"idle libraries": _repeat(_IDLE, lambda out: [], threads, 1)["rss_mb"],
              "modules explore loads": _repeat(_IDLE_PATHS, lambda out: [], threads,
                                               1)["rss_mb"]}
    for label, mb in floors.items():
        rows.append(H.row(BENCH, "baseline", f"idle child with the {label}", mb, "MB",
                          threads=threads, kind="memory"))
    for case, n, p, target in shapes:
        data = _table(n, p, seed=4400 if n * p == 1_600_000 else n + p)
        rows += _explore_vs_plain(case, data, n, p, threads, repeats, target, floors)
        rows += _in_process(case, data, max(repeats, 3) if n * p < 10**7 else repeats)
        rows += _predict_vs_plain(case, data, threads, repeats)
        if p > n:  # a feature-wise sweep must cross p' = n_train (tall tables are refused)
            rows += _threshold_vs_plain(case, data, n, p, threads, repeats)
    rows += _simulate_vs_plain(threads, repeats)
    for r in rows:
        r.setdefault("load_average", H.load_average())
    return rows
