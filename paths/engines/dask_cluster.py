"""The ridge path with dask: the design as a ``dask.array``, on one machine or a cluster.

The design and response form one array ``W = [X | Y]`` chunked by rows (one
column chunk).  Pass 1 maps every row block to its moments
(:func:`paths.stream.chunk_moments`: mean, centered cross products, extremes)
and merges them pairwise in a tree (Chan, Golub & LeVeque), or, with
``accurate=True``, computes the column means and extremes and then
:func:`dask.array.linalg.tsqr` of the centered array (only its R factor is
computed).  The p × p result is factored on the client exactly as the
streaming engine does (:func:`paths.stream.factor_moments`).  Pass 2 maps every
row block to its leave-one-out (and K-fold) sums with
:func:`dask.array.map_blocks`, and test rows to their squared errors the same
way; the blocks' small partial sums are added on the cluster.  Only p × p,
k × p and k × t objects come back to the client.

A scheduler that does not answer raises :class:`~paths._validation.InputError`
after ``timeout`` seconds.  A worker lost mid-computation is the scheduler's
business: its tasks are recomputed elsewhere from the same inputs, so the
result is unchanged; if the scheduler gives up (every worker gone), the error
is reported as one line.
"""
from __future__ import annotations

import glob as _glob
import time
from contextlib import contextmanager
from dataclasses import replace
from pathlib import Path

import numpy as np

from paths.data.validation import InputError, as_lambdas
from paths.core.grid import default_grid
from paths.engines.stream import (HatPass, LooPasses, Moments, PassInfo, StreamPath, check_cv_options,
                                  check_moment_ranges, check_scheme, solver_route,
                                  chunk_moments, factor_moments, fold_plan, hat_results,
                                  merge_moments, path_from_moments)

__all__ = ["dask_path", "connect", "as_dask_design", "prepared_design"]

DEFAULT_TIMEOUT = 10.0
_PARQUET = (".parquet", ".pq", ".parq")


_SCHEMES = ("tcp", "tls", "inproc", "ucx", "ws", "wss")


def check_address(scheduler: str) -> None:
    """Refuse a malformed scheduler address before any connection is tried.

    An address is ``SCHEME://HOST:PORT`` (scheme tcp, tls, inproc, ucx, ws or wss;
    ``tcp://`` may be left out) with a port between 1 and 65535.

    Examples
    --------
    >>> check_address("tcp://10.0.0.5:8786")
    >>> check_address("10.0.0.5")
    Traceback (most recent call last):
    ...
    paths.data.validation.InputError: scheduler '10.0.0.5' is not an address SCHEME://HOST:PORT (no port); use e.g. tcp://10.0.0.5:8786
    """
    text = str(scheduler).strip()
    scheme, sep, rest = text.partition("://")
    if not sep:
        scheme, rest = "tcp", text
    problem = None
    if scheme not in _SCHEMES:
        problem = f"unknown scheme {scheme!r}"
    elif scheme != "inproc":
        host, colon, port = rest.rpartition(":")
        if not colon or not port:
            problem = "no port"
        elif not port.isdigit() or not 1 <= int(port) <= 65535:
            problem = f"port {port!r} is not a number from 1 to 65535"
        elif not host or any(ch.isspace() for ch in host) or "/" in host:
            problem = f"host {host!r} is not a host name"
    if problem:
        raise InputError(f"scheduler {scheduler!r} is not an address SCHEME://HOST:PORT "
                         f"({problem}); use e.g. tcp://10.0.0.5:8786")


def _disarm(tb, client_type) -> None:
    """Keep a half-built ``Client`` (left in the traceback) from closing its wedged event loop
    at garbage collection, which waits 20 s and prints a traceback of its own."""
    while tb is not None:
        obj = tb.tb_frame.f_locals.get("self")
        if isinstance(obj, client_type):
            obj._Client__loop = None  # Client.__del__ skips close() for a client without loop
        tb = tb.tb_next


@contextmanager
def connect(scheduler: str | None, timeout: float = DEFAULT_TIMEOUT):
    """A ``distributed.Client`` for ``scheduler`` (closed on exit), or None for the default.

    Raises
    ------
    InputError
        The scheduler does not answer within ``timeout`` seconds, or the
        address is malformed.
    """
    if scheduler is None:
        yield None
        return
    try:
        from distributed import Client
    except ImportError:  # pragma: no cover - optional dependency
        raise InputError("scheduler needs dask.distributed; pip install 'ridgepaths[dask]'") from None
    check_address(scheduler)
    try:
        client = Client(scheduler, timeout=timeout, set_as_default=False)
    except MemoryError as exc:  # the reply was not a dask message: its "length" was garbage
        _disarm(exc.__traceback__, Client)
        raise InputError(f"the service at {scheduler} did not answer as a dask scheduler; check "
                         "the address and port (a dask scheduler listens on 8786 by default)"
                         ) from None
    except (OSError, TimeoutError) as exc:
        raise InputError(
            f"could not connect to the dask scheduler at {scheduler} within {timeout:g} s "
            f"({type(exc).__name__}); check the address (e.g. tcp://10.0.0.5:8786) and that "
            "the scheduler is running and reachable"
        ) from None
    except (ValueError, TypeError) as exc:
        raise InputError(f"scheduler {scheduler!r} is not a valid address ({exc}); "
                         "use e.g. tcp://10.0.0.5:8786") from None
    try:
        yield client
    finally:
        client.close()


def _npy_stack(files):
    import dask
    import dask.array as da

    parts = []
    for f in files:
        head = np.load(f, mmap_mode="r")  # reads the header only
        shape, dtype = head.shape, head.dtype
        del head
        if len(shape) != 2:
            raise InputError(f"{f}: expected a 2-D array (rows, features + target); got shape {shape}")
        parts.append(da.from_delayed(dask.delayed(np.load)(str(f)), shape=shape, dtype=dtype))
    widths = {p.shape[1] for p in parts}
    if len(widths) != 1:
        raise InputError(f"the .npy stack has arrays of {len(widths)} different widths "
                         f"({sorted(widths)}); give every file the same columns")
    return da.concatenate(parts, axis=0)


def as_dask_design(data, y=None, *, target=None, features=None, chunk_rows=None):
    """``(W, feature_names, target_names)``: the design and response as one dask array.

    Parameters
    ----------
    data : dask array, numpy array, path or list of ``.npy`` paths
        A Parquet file or folder, a CSV file (both via :mod:`dask.dataframe`),
        a ``.npy`` file, a glob or list of ``.npy`` files stacked by rows (the
        last column is the target), or an array (with ``y``).
    """
    import dask.array as da

    if isinstance(data, (list, tuple)) or (isinstance(data, str) and any(ch in data for ch in "*?[")):
        files = sorted(_glob.glob(data)) if isinstance(data, str) else [str(f) for f in data]
        if not files:
            raise InputError(f"{data}: no .npy files match; check the pattern")
        W = _npy_stack(files)
        p = W.shape[1] - 1
        names, tnames = [f"x{j}" for j in range(p)], ["y"]
    elif isinstance(data, (str, Path)):
        path = Path(data)
        if not path.exists():
            raise InputError(f"{path}: no such file or folder; check the path")
        if path.suffix.lower() == ".npy":
            W = _npy_stack([path])
            p = W.shape[1] - 1
            names, tnames = [f"x{j}" for j in range(p)], ["y"]
        else:
            W, names, tnames = _from_dataframe(path, target, features)
    else:
        if y is None:
            raise InputError("pass the response y with an array design (or a file and target=)")
        X = data if isinstance(data, da.Array) else da.from_array(
            np.asarray(data, dtype=np.float64), chunks=(chunk_rows or 65_536, -1))
        Y = y if isinstance(y, da.Array) else da.from_array(np.asarray(y, dtype=np.float64),
                                                            chunks=(X.chunks[0],) + (
                                                                (-1,) if np.ndim(y) == 2 else ()))
        if X.ndim != 2:
            raise InputError(f"X must be 2-D (n_samples, n_features); got shape {X.shape}")
        if Y.ndim == 1:
            Y = Y[:, None]
        if Y.shape[0] != X.shape[0]:
            raise InputError(f"y has {Y.shape[0]} rows but X has {X.shape[0]}; "
                             "pass one response row per sample")
        Y = Y.rechunk((X.chunks[0], -1))
        W = da.concatenate([X.rechunk((X.chunks[0], -1)).astype(np.float64),
                            Y.astype(np.float64)], axis=1)
        p = X.shape[1]
        names = [f"x{j}" for j in range(p)]
        tnames = ["y"] if Y.shape[1] == 1 else [f"y{j}" for j in range(Y.shape[1])]
    if chunk_rows is not None:
        W = W.rechunk((int(chunk_rows), -1))
    else:
        W = W.rechunk((W.chunks[0], -1))
    return W, names, tnames


def _from_dataframe(path: Path, target, features):
    import dask.dataframe as dd
    import pandas as pd

    from paths.data.chunks import select_columns

    try:
        if path.is_dir() or path.suffix.lower() in _PARQUET:
            from paths.data.chunks import ParquetRows

            ParquetRows(path, target, features=features)  # schema checks, one line each
            df = dd.read_parquet(str(path))
        else:
            return _from_text(path, target, features)
    except InputError:
        raise
    except Exception as exc:  # noqa: BLE001 - dask/pyarrow raise many types for bad files
        raise InputError(f"{path}: could not be read by dask.dataframe "
                         f"({type(exc).__name__}: {str(exc).splitlines()[0][:120]}); check the file") from None
    feats, targets = select_columns([str(c) for c in df.columns], target, features, f"{path}: ")
    df = df[feats + targets]
    nonnum = [c for c in feats + targets if not pd.api.types.is_numeric_dtype(df.dtypes[c])]
    if nonnum:
        raise InputError(f"{path}: non-numeric column(s): {', '.join(nonnum[:5])}; drop them "
                         "(features=) or encode them as numbers")
    try:
        W = df.to_dask_array(lengths=True).astype(np.float64)
    except Exception as exc:  # noqa: BLE001 - a block that does not parse as numbers
        if "Mismatched dtypes" in str(exc):
            raise InputError(f"{path}: a later row block has non-numeric values in a column "
                             "the first block showed as numeric (dask's dtype inference); "
                             "engine='stream' reports the column and row range") from None
        msg = " ".join(str(exc).split())[:160]
        raise InputError(f"{path}: a row block could not be read as numbers "
                         f"({type(exc).__name__}: {msg}); engine='stream' reports the row "
                         "range") from None
    return W, feats, targets


def _text_block(layout, block, cols, start):
    from paths.data.chunks import frame_block
    from paths.data.tables import read_text_block

    frame = read_text_block(layout, block)
    if frame is None:
        return np.empty((0, len(cols)))
    return frame_block(frame, cols, start, layout.path)


def _from_text(path: Path, target, features, sep=None):
    """A CSV/TSV file as row blocks parsed under the in-memory reader's rules
    (:func:`paths.data.tables.text_blocks`, one dask task per block)."""
    import dask
    import dask.array as da

    from paths.data.chunks import CSVRows
    from paths.data.tables import text_blocks

    rows = CSVRows(path, target, features=features, sep=sep)  # layout, columns: one line each
    cols = rows.columns
    parts, start = [], 0
    for blk in text_blocks(rows.layout):
        if blk.records:
            parts.append(da.from_delayed(dask.delayed(_text_block, pure=True)(
                rows.layout, blk, cols, start), shape=(blk.records, len(cols)),
                dtype=np.float64))
            start += blk.records
    if not parts:
        raise InputError(f"{path} has a header row but no data rows; add data rows")
    return da.concatenate(parts, axis=0), rows.feature_names, rows.target_names


def _read_unit(kind, layout, cols, unit, keep_text=()):
    """One parsed piece of a file: a text block (CSV) or a row group (Parquet)."""
    import pandas as pd

    if kind == "csv":
        from paths.data.tables import read_text_block

        frame = read_text_block(layout, unit, keep_text)
        if frame is None:
            frame = pd.DataFrame({c: pd.Series([], dtype=object) for c in cols})
            frame.attrs["paths_lines"] = None
        return frame
    import pyarrow.parquet as pq

    f, g = unit
    frame = pq.ParquetFile(f, pre_buffer=False).read_row_group(g, columns=cols).to_pandas()
    frame.attrs["paths_lines"] = None
    return frame


def _prepared_block(kind, layout, cols, unit, prep, start, source):
    """The prepared float rows of one piece (:meth:`paths.data.rowprep.RowPreparation.block`)."""
    frame = _read_unit(kind, layout, cols, unit, prep.text_columns)
    return prep.block(frame, start, source)


def prepared_design(path, target, features=None, *, encode=None, drop_missing=None, sep=None,
                    like=None):
    """``(W, preparation)``: a CSV or Parquet file prepared as the in-memory reader does
    (``encode``, ``drop_missing``; :mod:`paths.data.rowprep`), one dask block per text
    block or row group.  A pre-pass on the client collects the levels and the rows kept
    per block (the blocks' shapes); with ``like`` (test rows) the training preparation
    is applied and the blocks' row counts are left unknown."""
    import dask
    import dask.array as da

    from paths.data.chunks import CSVRows, parquet_files, select_columns
    from paths.data.rowprep import scan_frames

    path = Path(path)
    if not path.exists():
        raise InputError(f"{path}: no such file or folder; check the path")
    if path.is_dir() or path.suffix.lower() in _PARQUET:
        import pyarrow.parquet as pq

        files = parquet_files(path)
        kind, layout = "parquet", None
        names = list(pq.read_schema(files[0]).names)
        units = [(str(f), g) for f in files for g in range(pq.ParquetFile(f).num_row_groups)]
    elif path.suffix.lower() == ".npy":
        raise InputError(f"{path}: encode and drop_missing need named columns; pass a CSV or "
                         "Parquet file")
    else:
        from paths.data.tables import text_blocks

        layout = CSVRows(path, list(like.targets) if like else target, sep=sep).layout
        kind, names, units = "csv", list(layout.names), text_blocks(layout)
    feats, targets = select_columns(names, list(like.targets) if like else target,
                                    list(like.features) if like else features, f"{path}: ")
    cols = feats + targets
    if like is None:
        prep = scan_frames(lambda: (_read_unit(kind, layout, cols, u) for u in units),
                           lambda keep: (_read_unit(kind, layout, cols, u, keep) for u in units),
                           feats, targets, encode=encode, drop_missing=drop_missing,
                           source=str(path))
        kept = prep.kept
    else:
        from dataclasses import replace as _replace

        prep, kept = _replace(like, n_rows=None, notes=(), kept=()), [np.nan] * len(units)
    width = len(prep.names) + len(prep.targets)
    parts, start = [], 0
    for u, k in zip(units, kept):
        if k == 0:
            continue
        parts.append(da.from_delayed(dask.delayed(_prepared_block, pure=True)(
            kind, layout, cols, u, prep, start, str(path)), shape=(k, width), dtype=np.float64))
        start = start + k if like is None else 0
    if not parts:
        raise InputError(f"{path}: no data rows left; add data rows")
    return da.concatenate(parts, axis=0), prep


def _offsets(chunks):
    return np.concatenate([[0], np.cumsum(chunks)])[:-1]


def _checked_moments(block, start, names, accurate):
    bad = ~np.isfinite(block)
    if bad.any():
        j = int(np.flatnonzero(bad.any(axis=0))[0])
        i = int(np.flatnonzero(bad[:, j])[0])
        raise InputError(f"rows {start + 1}-{start + block.shape[0]}: column {names[j]!r} has "
                         f"{int(bad[:, j].sum())} missing or infinite value(s) (first at data "
                         f"row {start + i + 1}); remove or impute them")
    return chunk_moments(np.asarray(block, dtype=np.float64), accurate=accurate)


def _tree(items, fn):
    import dask

    merge = dask.delayed(fn, pure=True)
    while len(items) > 1:
        nxt = [merge(items[i], items[i + 1]) for i in range(0, len(items) - 1, 2)]
        if len(items) % 2:
            nxt.append(items[-1])
        items = nxt
    return items[0]


def _moments(W, names, accurate, compute, checks=None):
    import dask
    import dask.array as da

    blocks = W.to_delayed().ravel()
    starts = _offsets(W.chunks[0])
    if not accurate:
        parts = [dask.delayed(_checked_moments, pure=True)(b, int(s), names, False)
                 for b, s in zip(blocks, starts)]
        return compute(_tree(parts, merge_moments))[0]
    # accurate: extremes and means first, then dask's TSQR of the centered array
    parts = [dask.delayed(_checked_moments, pure=True)(b, int(s), names, False)
             for b, s in zip(blocks, starts)]
    summary = _tree(parts, merge_moments)
    mom = compute(summary)[0]
    if checks is not None:  # the range checks before the squares are formed in dask's TSQR
        checks(mom)
    c = W.shape[1]
    Wc = W - mom.mean
    rows_min = min(W.chunks[0])
    if rows_min < c:  # tsqr wants blocks at least as tall as they are wide
        Wc = Wc.rechunk((max(c, 2 * rows_min), -1))
    _, R = da.linalg.tsqr(Wc)
    R = compute(R)[0]
    return Moments(n=mom.n, mean=mom.mean, m2=None, r=R, lo=mom.lo, hi=mom.hi, absmax=mom.absmax)


def _hat_part(block, start, fit, lam, p, plan, cv_scaling="global"):
    """The second-pass statistics of one row block (a :class:`HatPass`)."""
    hp = HatPass(fit, lam, folds=plan, cv_scaling=cv_scaling)
    hp.add(int(start), np.asarray(block, dtype=np.float64), p)
    return hp


def _others_part(block, start, fit, lam, p):
    """Third pass of one row block: the triangular factor of its ordinary rows."""
    hp = HatPass(fit, lam)
    hp.add_others(int(start), np.asarray(block, dtype=np.float64), p)
    return hp.r_other


def _merge_r(a, b):
    from paths.core import algebra

    return algebra.tsqr([a, b], a.shape[1])


def _merge_hat(a: HatPass, b: HatPass) -> HatPass:
    a.merge(b)
    return a


def _test_block(block, fit, lam, p):
    from paths.core import algebra

    des, fac = fit.design, fit.fac
    block = np.asarray(block, dtype=np.float64)
    proj = des.transform(block[:, :p]) @ fac.vt.T
    yc = block[:, p:] - des.y_mean
    sums, sums0 = algebra.test_sums(fit.state, lam, proj, yc)
    out = np.concatenate([sums.ravel(), sums0, [block.shape[0]]])
    return out[None, :]


def _computer(client):
    """``compute(*objs)`` on ``client`` (or dask's default), cluster failures as one line."""
    def compute(*objs):
        try:
            if client is not None:
                return client.compute(list(objs), sync=True)
            import dask

            return dask.compute(*objs)
        except InputError:
            raise
        except Exception as exc:  # noqa: BLE001 - the cluster's failure, reported as one line
            from distributed import KilledWorker
            if isinstance(exc, KilledWorker):
                raise InputError(f"the dask cluster lost the workers running this "
                                 f"computation ({exc}); check the workers' memory limits "
                                 "and logs, then retry") from None
            raise
    return compute


def _hat_tree(W, fit, lam, p, plan, compute, cv_scaling="global") -> HatPass:
    """The second pass as a delayed tree (and the third, when rows of leverage near 1
    were kept)."""
    import dask

    starts = _offsets(W.chunks[0])
    parts = [dask.delayed(_hat_part, pure=True)(b, int(s0), fit, lam, p, plan, cv_scaling)
             for b, s0 in zip(W.to_delayed().ravel(), starts)]
    hp = compute(_tree(parts, _merge_hat))[0]
    if hp.needs_others:  # rows of leverage near 1: the complement of the others
        parts = [dask.delayed(_others_part, pure=True)(b, int(s0), fit, lam, p)
                 for b, s0 in zip(W.to_delayed().ravel(), starts)]
        hp.r_other = compute(_tree(parts, _merge_r))[0]
    return hp


def _holdout_split(W, fraction: float, seed: int):
    """(training rows, held-out rows) of a row-blocked array: the seeded holdout of
    :func:`paths.data.folds.holdout_mask`, the in-memory engine's rows."""
    from paths.data.folds import holdout_mask

    n = W.shape[0]
    if n is None or n != n:  # unknown row count (NaN chunks): the mask needs it
        W.compute_chunk_sizes()
        n = W.shape[0]
    held = holdout_mask(np.arange(int(n)), int(n), fraction, seed=seed)
    return W[~held], W[held]


def _checked_options(solver, accurate, fold_scheme, n_folds, repeats, cv_scaling, test,
                     holdout, chunk_rows, n_lambdas):
    """``(accurate, fold scheme)``, the options checked before any connection."""
    accurate = solver_route(solver, accurate)
    scheme = check_scheme(fold_scheme)
    check_cv_options(n_folds, scheme, repeats, cv_scaling)
    if test is not None and holdout is not None:
        raise InputError("pass either a test set or a holdout fraction, not both")
    if chunk_rows is not None and (int(chunk_rows) != chunk_rows or chunk_rows < 1):
        raise InputError(f"chunk_rows must be a positive integer; got {chunk_rows!r}")
    if n_lambdas < 1:
        raise InputError(f"n_lambdas must be at least 1; got {n_lambdas}")
    return accurate, scheme


def _open_design(data, y, target, features, chunk_rows, encode, drop_missing, holdout, seed):
    """``(W, held-out W or None, feature names, target names, preparation or None)``."""
    prep = None
    if encode or drop_missing is not None:
        if not isinstance(data, (str, Path)):
            raise InputError("encode and drop_missing need a CSV or Parquet file; pass "
                             "its path")
        W, prep = prepared_design(data, target, features, encode=encode,
                                  drop_missing=drop_missing)
        names, tnames = prep.names, list(prep.targets)
        if chunk_rows is not None:
            W = W.rechunk((int(chunk_rows), -1))
    else:
        W, names, tnames = as_dask_design(data, y, target=target, features=features,
                                          chunk_rows=chunk_rows)
    W_test = None
    if holdout is not None:
        W, W_test = _holdout_split(W, holdout, seed)
    return W, W_test, names, tnames, prep


def _moment_pass(W, data, names, tnames, accurate, compute, fit_intercept, standardize, label,
                 passes, progress) -> Moments:
    """The first pass: the moments of the row blocks, their ranges checked."""
    p = len(names)
    if progress:
        progress(label, 0, W.shape[0])
    t0 = time.perf_counter()
    def checks(m):
        check_moment_ranges(m, p, fit_intercept=fit_intercept, standardize=standardize,
                            names=names + tnames, source=str(data) if isinstance(
                                data, (str, Path)) else "")

    mom = _moments(W, names + tnames, accurate, compute, checks)
    checks(mom)
    passes.append(PassInfo(label + (" (dask tsqr)" if accurate else ""), mom.n,
                           time.perf_counter() - t0, mom.n * W.shape[1] * 8))
    if progress:
        progress(label, mom.n, mom.n)
    if fit_intercept and mom.n < 2:
        raise InputError(f"the data have {mom.n} row; at least 2 samples are needed")
    return mom


def _second_pass(W, fit, lam, p, n, cv, scheme, seed, repeats, fit_intercept, cv_scaling,
                 compute, passes, progress, notes):
    """``(hat pass, fold plan, loo MSE, min-norm loo MSE, loo SE, K-fold result or None)``."""
    label2 = ("pass 2/2: hat diagonals for exact leave-one-out (dask delayed tree)"
              + (f" and {cv}-fold CV" if cv else ""))
    if progress:
        progress(label2, 0, n)
    t0 = time.perf_counter()
    plan = None if not cv else fold_plan(
        n, cv, scheme=scheme, seed=int(seed), repeats=repeats, fit_intercept=fit_intercept)
    hp = _hat_tree(W, fit, lam, p, plan, compute, cv_scaling)
    passes.append(PassInfo(label2, n, time.perf_counter() - t0, n * W.shape[1] * 8))
    if progress:
        progress(label2, n, n)
    return (hp, plan, *hat_results(hp, plan, cv_scaling, notes, progress))


def _test_design(W_test, test, y_test, prep, target, names, tnames, chunk_rows):
    """The test rows as a row-blocked array: the holdout, or the test data prepared alike."""
    if W_test is not None:
        return W_test
    if prep is not None:
        return prepared_design(test, None, like=prep)[0]
    return as_dask_design(
        test, y_test, target=target if target is not None else tnames,
        features=names if not hasattr(test, "shape") else None,
        chunk_rows=chunk_rows)[0]


def _test_pass(Wt, W, fit, lam, p, tnames, compute, passes):
    """``(test MSE, min-norm test MSE, n_test)`` from the test rows' blocks on the cluster."""
    if Wt.shape[1] != W.shape[1]:
        raise InputError(f"the test data have {Wt.shape[1] - len(tnames)} feature "
                         f"columns but the training data {p}; pass the same features")
    k, t = lam.size, fit.uty.shape[1]
    t0 = time.perf_counter()
    parts = Wt.map_blocks(_test_block, fit, lam, p,
                          chunks=((1,) * Wt.numblocks[0], (k * t + t + 1,)),
                          dtype=np.float64, meta=np.empty((0, 0)))
    vec = np.asarray(compute(parts.sum(axis=0))[0])
    n_test = int(round(vec[-1]))
    if n_test == 0:
        raise InputError("the test data have no rows; pass test rows")
    test_res = (vec[:k * t].reshape(k, t) / n_test, vec[k * t:k * t + t] / n_test, n_test)
    passes.append(PassInfo("test rows: test error (dask delayed tree)", n_test,
                           time.perf_counter() - t0, n_test * Wt.shape[1] * 8))
    return test_res


def dask_path(
    data,
    lambdas=None,
    *,
    y=None,
    target=None,
    features=None,
    chunk_rows: int | None = None,
    accurate: bool = False,
    solver: str = "auto",
    scheduler: str | None = None,
    timeout: float = DEFAULT_TIMEOUT,
    fit_intercept: bool = True,
    standardize: bool = True,
    test=None,
    y_test=None,
    n_lambdas: int = 100,
    rtol: float | None = None,
    loo: bool = True,
    n_folds: int | None = None,
    fold_scheme: str = "shuffled",
    cv_scaling: str = "global",
    repeats: int = 1,
    holdout: float | None = None,
    seed: int = 0,
    rank: int | None = None,
    encode: str | None = None,
    drop_missing: str | None = None,
    progress=None,
) -> StreamPath:
    """The ridge path of a design held as a dask array (``engine="dask"``).

    Parameters
    ----------
    data : dask array, array, path, or list/glob of ``.npy`` files
        See :func:`as_dask_design`; with an array, pass ``y``.
    lambdas : array_like, optional
        Penalties; default from the spectrum as in :func:`paths.path.fit_path`.
    chunk_rows : int, optional
        Rechunk to this many rows per block (default: keep the input's chunks).
    accurate : bool
        :func:`dask.array.linalg.tsqr` of the centered design instead of the
        Gram matrix.
    scheduler : str, optional
        Address of a running dask scheduler (``tcp://host:8786``); default: the
        current client if one is set up, else dask's local threads.
    timeout : float
        Seconds to wait for the scheduler.
    test, y_test : optional
        Test rows, in any form ``data`` accepts.
    solver, loo, n_folds, fold_scheme, cv_scaling, repeats, holdout, seed, rank
    fit_intercept, standardize, n_lambdas, rtol, encode, drop_missing
        As in :func:`paths.engines.stream.stream_path` (the same folds and the
        same holdout rows; the holdout's row mask, one byte per row, is made on
        the client).
    progress : callable, optional
        ``progress(label, done, total)`` at the start and end of each pass; with
        ``n_folds``, also the K-fold stage (:data:`paths.data.folds.KFOLD_STAGE`)
        once per fold (times the repeats), as in :func:`paths.engines.stream.stream_path`.

    Returns
    -------
    StreamPath
        With ``engine="dask"``; equal to :func:`paths.stream.stream_path`.

    Raises
    ------
    InputError
        Unreachable scheduler (after ``timeout`` s), bad files or values (with
        the row range), a computation the cluster could not finish.

    Examples
    --------
    >>> import numpy as np, dask.array as da
    >>> rng = np.random.default_rng(0)
    >>> X = da.from_array(rng.standard_normal((4000, 5)), chunks=(1000, 5))
    >>> y = X[:, 0] + 1.0
    >>> dask_path(X, y=y, lambdas=[1.0, 0.1], loo=False).coef.shape
    (2, 5)
    """
    accurate, scheme = _checked_options(solver, accurate, fold_scheme, n_folds, repeats,
                                        cv_scaling, test, holdout, chunk_rows, n_lambdas)
    cv = n_folds
    lam_user = None if lambdas is None else as_lambdas(lambdas)
    with connect(scheduler, timeout) as client:
        compute = _computer(client)
        W, W_test, names, tnames, prep = _open_design(data, y, target, features, chunk_rows,
                                                      encode, drop_missing, holdout, seed)
        p = len(names)
        passes = []
        label1 = "pass 1/2: moments on the cluster" if (loo or cv) else "pass 1/1: moments"
        mom = _moment_pass(W, data, names, tnames, accurate, compute, fit_intercept, standardize,
                           label1, passes, progress)
        fit = factor_moments(mom, p, fit_intercept=fit_intercept, standardize=standardize,
                             rtol=rtol, rank=rank, names=names + tnames, requested=solver)
        fac = replace(fit.fac, solver=fit.fac.solver.replace("stream-", "dask-"))
        fit = replace(fit, fac=fac)
        lam = default_grid(fit.fac.d, n_lambdas) if lam_user is None else lam_user
        loo_mse = loo0 = loo_se = cvres = hp = plan = None
        notes = [f"dask engine: {W.numblocks[0]} row blocks"
                 + (f", scheduler {scheduler}" if scheduler else "")]
        notes += [] if prep is None else list(prep.notes)
        if loo or cv:
            hp, plan, loo_mse, loo0, loo_se, cvres = _second_pass(
                W, fit, lam, p, mom.n, cv, scheme, seed, repeats, fit_intercept, cv_scaling,
                compute, passes, progress, notes)
        test_res = None
        if test is not None or W_test is not None:
            Wt = _test_design(W_test, test, y_test, prep, target, names, tnames, chunk_rows)
            test_res = _test_pass(Wt, W, fit, lam, p, tnames, compute, passes)
    def one_pass(lam_new):  # leave-one-out at new penalties: the cluster again
        with connect(scheduler, timeout) as client2:
            return _hat_tree(W, fit, as_lambdas(lam_new), p, None,
                             _computer(client2)).loo_with_se()

    return path_from_moments(fit, lam, feature_names=names, loo=loo_mse, loo0=loo0,
                             test=test_res, cv=cvres, n_folds=cv or 0, engine="dask",
                             passes=passes, notes=notes,
                             fold_stats=None if hp is None else hp.fold_factors(),
                             fold_plan=plan, loo_at=LooPasses(one_pass, lam, loo_mse, loo_se)
                             if loo else None,
                             preparation=None if prep is None else prep.record())
