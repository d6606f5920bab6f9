"""The saved fit, ``fit.npz``: the factors of a ridge path, to predict at any penalty later.

Format (``format_version`` 1)
-----------------------------
A NumPy ``.npz`` archive of plain numeric arrays, read with
``allow_pickle=False`` (no Python object is ever unpickled):

``header``
    UTF-8 JSON as a ``uint8`` array: ``format`` (``"paths-fit"``),
    ``format_version``, versions, the penalty convention, feature and target
    names in design order, the scaling, weights and unpenalized columns used,
    the reported rule and penalty, every rule's penalty, the data preparation
    (source columns, one-hot levels, identifier column), the input files'
    SHA-256 and the shape of every array below.
``design_x_mean``, ``design_x_scale`` (p,), ``design_active`` (p,) bool, ``design_y_mean`` (t,)
    The centering and scaling learned on the training rows.
``design_zy`` (m, t), ``fac_u`` (m, r), ``fac_d`` (r,), ``fac_vt`` (r, q)
    The reduced response and the thin SVD :math:`Z = U D V^T` of the reduced
    design: enough to recompute every coefficient, criterion and leave-one-out
    residual at any penalty, so prediction intervals need no refit.
``lambdas`` (k,)
    The penalty grid of the run.
``reported_lambda`` (t,), ``coef`` (p, t), ``intercept`` (t,)
    The reported penalty and the model at it, on the original feature scale:
    :math:`\\hat y = b_0 + x^T \\beta` needs nothing but these two arrays.

Reading (:func:`load_fit`) checks the header first, then each array's size in
the archive before it is read, its dtype, shape and finiteness: a file that is
not such a fit, from another format version, or damaged (pickled objects,
wrong shapes, missing keys) is refused in one line.
"""
from __future__ import annotations

import io
import json
import platform
import struct
import zipfile
import zlib
from dataclasses import dataclass, field
from functools import cached_property
from pathlib import Path

import numpy as np

from paths.data.validation import InputError, as_design, as_lambdas
from paths.core import algebra
from paths.core.design import Design
from paths.core.factor import Factorization
from paths.core.path import (PENALTY_CONVENTION, RidgePath, path_from_factors,
                              predict_from_factors)

__all__ = ["FORMAT", "FORMAT_VERSION", "SavedFit", "fit_header", "load_fit", "save_fit",
           "fit_bytes"]

FORMAT = "paths-fit"
FORMAT_VERSION = 1
_HEADER_LIMIT = 16 << 20  # a header larger than 16 MiB is not one we wrote
_NPY_OVERHEAD = 4096  # bytes of .npy header allowed beyond an array's data
_OUT_OF_RANGE = ("the saved factors leave the float64 range when the path is rebuilt; the file "
                 "is damaged")


def _arrays_of(path: RidgePath, reported: np.ndarray) -> dict:
    design, fac = path.design, path.factorization
    t = path.uty.shape[1]
    coefs = np.zeros((path.n_features, t))
    icpt = np.zeros(t)
    for j, lam in enumerate(reported):  # each target at its own reported penalty
        c = path.coef_at(float(lam))
        coefs[:, j] = c[:, j] if c.ndim == 2 else c
    icpt[:] = design.y_mean - design.x_mean @ coefs
    extra = {}
    if design.span is not None:
        sp = design.span
        extra = {"span_reflectors": sp.reflectors, "span_tau": sp.tau, "span_r": sp.r,
                 "span_q1": sp.q1, "span_sqrt_w": sp.sqrt_w, "span_qty": sp.qty,
                 "span_qtx": sp.qtx, "design_unpenalized": (
                     design.unpenalized if design.unpenalized is not None
                     else np.zeros(design.n_features, dtype=bool)),
                 "design_penalty_factor": (design.penalty_factor if design.penalty_factor
                                           is not None else np.ones(design.n_features)),
                 "design_sample_weight": (design.sample_weight if design.sample_weight
                                          is not None else np.ones(design.n_samples))}
    if _has_left_factor(path):
        extra.update(design_zy=design.zy, fac_u=fac.u)
    else:  # an out-of-memory engine: the projections U^T y stand for U and zy
        extra.update(fac_uty=path.uty)
    return {**extra,
        "design_x_mean": design.x_mean, "design_x_scale": design.x_scale,
        "design_active": design.active, "design_y_mean": design.y_mean,
        "fac_d": fac.d, "fac_vt": fac.vt,
        "lambdas": path.lambdas, "reported_lambda": reported, "coef": coefs,
        "intercept": icpt,
    }


def _has_left_factor(path: RidgePath) -> bool:
    """True for an in-memory path (left factors and reduced response kept)."""
    return path.factorization.u.shape[0] == path.n_samples - path.design.n_fixed


def _expected_shapes(h: dict) -> dict:
    n, p, t, m, r, q, k = (h["n_samples"], h["n_features"], h["n_targets"], h["m"],
                           h["rank"], h["n_active"], h["n_lambdas"])
    f, b = "float64", "bool"
    left = ({"design_zy": ((m, t), f), "fac_u": ((m, r), f)} if h.get("kind", "full") == "full"
            else {"fac_uty": ((r, t), f)})
    return {
        "design_x_mean": ((p,), f), "design_x_scale": ((p,), f), "design_active": ((p,), b),
        "design_y_mean": ((t,), f), **left,
        "fac_d": ((r,), f), "fac_vt": ((r, q), f), "lambdas": ((k,), f),
        "reported_lambda": ((t,), f), "coef": ((p, t), f), "intercept": ((t,), f),
        **_span_shapes(h),
    }


def _span_shapes(h: dict) -> dict:
    """Arrays of the unpenalized span (row weights, unpenalized columns), when there is one."""
    span = h.get("span")
    if span is None:
        return {}
    n, p, t, q, c = h["n_samples"], h["n_features"], h["n_targets"], h["n_active"], span["c"]
    f = "float64"
    return {"span_reflectors": ((n, c), f), "span_tau": ((c,), f), "span_r": ((c, c), f),
            "span_q1": ((n, c), f), "span_sqrt_w": ((n,), f), "span_qty": ((c, t), f),
            "span_qtx": ((c, q), f), "design_unpenalized": ((p,), "bool"),
            "design_penalty_factor": ((p,), f), "design_sample_weight": ((n,), f)}


def fit_header(path: RidgePath, *, reported_rule: str, reported: np.ndarray, rules=None,
               preparation=None, input_sha256=None, weights=None, unpenalized=(),
               relative_penalty=None) -> dict:
    """The JSON header of a saved fit (see the module notes)."""
    import paths

    fac = path.factorization
    t = path.uty.shape[1]
    return {
        "format": FORMAT,
        "format_version": FORMAT_VERSION,
        "kind": "full" if _has_left_factor(path) else "predict-only",
        "versions": {"paths": paths.__version__, "numpy": np.__version__,
                     "python": platform.python_version()},
        "penalty_convention": PENALTY_CONVENTION,
        "feature_names": [str(c) for c in path.feature_names],
        "target_names": list((preparation or {}).get("target_names") or
                             (["y"] if t == 1 else [f"y{j}" for j in range(t)])),
        "n_samples": int(path.n_samples), "n_features": int(path.n_features),
        "n_targets": int(t), "m": int(path.n_samples - path.design.n_fixed),
        "rank": int(fac.rank),
        "n_active": int(np.count_nonzero(path.design.active)),
        "n_lambdas": int(path.lambdas.size), "multi_target": bool(path.multi_target),
        "fit_intercept": bool(path.fit_intercept), "standardize": bool(path.standardize),
        "scaling": ("centered, scaled to unit population SD (ddof=0)" if path.standardize
                    else "centered only") if path.fit_intercept else (
                    "scaled to unit population SD (ddof=0), not centered" if path.standardize
                    else "neither centered nor scaled"),
        "weights": weights if weights is not None else (
            "row weights" if path.design.sample_weight is not None else None),
        "unpenalized": list(unpenalized) or list(getattr(path, "unpenalized", [])),
        "relative_penalty": dict(relative_penalty or {}),
        "span": None if path.design.span is None else {
            "c": int(path.design.span.c), "intercept": bool(path.design.span.intercept),
            "total_weight": float(path.design.span.total_weight)},
        "solver": fac.solver, "solver_reason": fac.reason, "rank_tol": float(fac.tol),
        "d_max": float(fac.d_max), "d_min": float(fac.d_min),
        "reported": {"rule": reported_rule, "lambda": [float(v) for v in reported]},
        "rules": dict(rules or {}),
        "preparation": dict(preparation or {}),
        "input_sha256": dict(input_sha256 or {}),
    }


def fit_bytes(path: RidgePath, *, reported, reported_rule: str = "given", **header_kw) -> bytes:
    """The bytes of a ``fit.npz`` for ``path`` with the reported penalty ``reported``.

    ``reported`` is one penalty, or one per target.  Keyword arguments go to
    :func:`fit_header`.
    """
    buf = io.BytesIO()
    _write_fit(buf, path, reported=reported, reported_rule=reported_rule, **header_kw)
    return buf.getvalue()


def _write_fit(fh, path: RidgePath, *, reported, reported_rule: str, **header_kw) -> None:
    """Write the ``fit.npz`` archive of ``path`` to the binary file ``fh``."""
    t = path.uty.shape[1]
    rep = np.broadcast_to(as_lambdas(reported), (t,)).astype(np.float64)
    header = fit_header(path, reported_rule=reported_rule, reported=rep, **header_kw)
    header["arrays"] = {k: [list(s), dt] for k, (s, dt) in _expected_shapes(header).items()}
    text = json.dumps(header, allow_nan=False, sort_keys=True).encode("utf-8")
    arrays = _arrays_of(path, rep)  # memory order kept (np.save writes Fortran order as such)
    savez_streamed(fh, {"header": np.frombuffer(text, dtype=np.uint8), **arrays})


def savez_streamed(fh, arrays: dict) -> None:
    """``numpy.savez`` (stored, not compressed) without its copy of each array.

    The same archive members, byte for byte (``.npy`` format 1.0 headers from
    :mod:`numpy.lib.format`), but every array's memory is written as it is (a
    contiguous array, or the transpose of a Fortran-ordered one) instead of in
    16 MiB copies: the left factor of a tall design is as large as the data.
    """
    fmt = np.lib.format
    with zipfile.ZipFile(fh, mode="w", compression=zipfile.ZIP_STORED, allowZip64=True) as zf:
        for name, value in arrays.items():
            arr = np.asanyarray(value)
            if arr.dtype.hasobject:
                raise ValueError(f"{name}: object arrays are not saved")
            with zf.open(f"{name}.npy", "w", force_zip64=True) as out:
                fmt.write_array_header_1_0(out, fmt.header_data_from_array_1_0(arr))
                if arr.flags.c_contiguous:
                    out.write(memoryview(arr).cast("B") if arr.size else b"")
                elif arr.flags.f_contiguous:  # the header says Fortran order: write the memory
                    out.write(memoryview(arr.T).cast("B") if arr.size else b"")
                else:
                    out.write(np.ascontiguousarray(arr).tobytes())


def save_fit(dest, path: RidgePath, *, reported, reported_rule: str = "given",
             **header_kw) -> Path:
    """Write ``fit.npz`` atomically (see :func:`fit_bytes`), streamed to the file (the left
    factor of a tall design is as large as the data); returns the path written."""
    from paths.data.output import write_with

    return write_with(dest, lambda fh: _write_fit(fh, path, reported=reported,
                                                  reported_rule=reported_rule, **header_kw))


# ------------------------------------------------------------------------- reading
def _refuse(src, why: str) -> InputError:
    return InputError(f"{src}: {why}")


def _read_header(zf: zipfile.ZipFile, src) -> dict:
    names = set(zf.namelist())
    if "header.npy" not in names:
        raise _refuse(src, "not a saved paths fit (no header in the archive); pass the fit.npz "
                           "written by paths explore")
    if zf.getinfo("header.npy").file_size > _HEADER_LIMIT + _NPY_OVERHEAD:
        raise _refuse(src, "the fit header is implausibly large; the file is damaged or not a "
                           "paths fit")
    with zf.open("header.npy") as fh:
        fmt = np.lib.format
        try:
            version = fmt.read_magic(fh)
            reader = fmt.read_array_header_1_0 if version == (1, 0) else fmt.read_array_header_2_0
            shape, _, dtype = reader(fh)
        except (ValueError, TypeError, SyntaxError):
            raise _refuse(src, "the fit header is not a valid .npy member; the file is "
                               "damaged") from None
        if dtype != np.uint8 or len(shape) != 1 or shape[0] > _HEADER_LIMIT:
            raise _refuse(src, "the fit header is not UTF-8 JSON bytes; the file is not a "
                               "paths fit")
        raw = np.frombuffer(fh.read(shape[0]), dtype=np.uint8)
    try:
        header = json.loads(raw.tobytes().decode("utf-8"))
    except (UnicodeDecodeError, json.JSONDecodeError, RecursionError):
        raise _refuse(src, "the fit header is not valid JSON; the file is damaged") from None
    if not isinstance(header, dict) or header.get("format") != FORMAT:
        raise _refuse(src, "not a saved paths fit (format is not 'paths-fit'); pass the fit.npz "
                           "written by paths explore")
    version = header.get("format_version")
    if version != FORMAT_VERSION:
        raise _refuse(src, f"saved with fit format version {version!r}; this paths "
                           f"({_paths_version()}) reads version {FORMAT_VERSION} only: refit "
                           "with paths explore")
    return header


def _paths_version() -> str:
    import paths

    return paths.__version__


def _check_header(h: dict, src) -> None:
    ints = ("n_samples", "n_features", "n_targets", "m", "rank", "n_active", "n_lambdas")
    for key in ints:
        v = h.get(key)
        if not isinstance(v, int) or isinstance(v, bool) or v < 0:
            raise _refuse(src, f"header field {key!r} is missing or not a count; the file is "
                               "damaged")
    for key in ("fit_intercept", "standardize", "multi_target"):
        if not isinstance(h.get(key), bool):
            raise _refuse(src, f"header field {key!r} is missing or not true/false; the file is "
                               "damaged")
    names = h.get("feature_names")
    if (not isinstance(names, list) or len(names) != h["n_features"]
            or not all(isinstance(c, str) for c in names)):
        raise _refuse(src, "header 'feature_names' does not list n_features names; the file is "
                           "damaged")
    targets = h.get("target_names")
    if (not isinstance(targets, list) or len(targets) != h["n_targets"]
            or not all(isinstance(c, str) for c in targets)):
        raise _refuse(src, "header 'target_names' does not list n_targets names; the file is "
                           "damaged")
    n, m, r, q = h["n_samples"], h["m"], h["rank"], h["n_active"]
    if h.get("kind", "full") not in ("full", "predict-only"):
        raise _refuse(src, f"unknown fit kind {h.get('kind')!r}; the file is damaged")
    span = h.get("span")
    if span is not None:
        c = span.get("c") if isinstance(span, dict) else None
        if (not isinstance(c, int) or isinstance(c, bool) or not 0 <= c < n
                or not isinstance(span.get("intercept"), bool)
                or not isinstance(span.get("total_weight"), (int, float))
                or not span["total_weight"] > 0):
            raise _refuse(src, "header 'span' is malformed; the file is damaged")
    fixed = span["c"] if span is not None else int(h["fit_intercept"])
    if m != n - fixed or r > min(m, q) or q > h["n_features"] or r < 1:
        raise _refuse(src, f"inconsistent dimensions (n={n}, m={m}, rank={r}, active={q}); the "
                           "file is damaged")
    if not (h["n_targets"] >= 1 and (h["multi_target"] or h["n_targets"] == 1)):
        raise _refuse(src, "inconsistent number of targets; the file is damaged")
    _check_records(h, src)


def _check_records(h: dict, src) -> None:
    """The header's records (reported rule, rules, preparation, solver) have their types."""
    def bad(key):
        return _refuse(src, f"header field {key!r} is malformed; the file is damaged")

    rep = h.get("reported")
    if not isinstance(rep, dict) or not isinstance(rep.get("rule"), str):
        raise bad("reported")
    rules = h.get("rules", {})
    if not isinstance(rules, dict) or not all(
            v is None or (isinstance(v, list) and all(
                isinstance(x, (int, float)) and not isinstance(x, bool) for x in v))
            for v in rules.values()):
        raise bad("rules")
    prep = h.get("preparation", {})
    if not isinstance(prep, dict):
        raise bad("preparation")
    enc = prep.get("encoding") or {}
    cols = prep.get("source_columns") or []
    if (not isinstance(enc, dict) or not all(isinstance(v, list) and all(
            isinstance(x, str) for x in v) for v in enc.values())
            or not isinstance(cols, list) or not all(isinstance(c, str) for c in cols)
            or not isinstance(prep.get("id_column") or "", str)
            or prep.get("drop_missing") not in (None, "rows", "columns")):
        raise bad("preparation")
    for key in ("rank_tol", "d_max", "d_min"):
        v = h.get(key, 0.0)
        if not isinstance(v, (int, float)) or isinstance(v, bool):
            raise bad(key)
    for key in ("solver", "solver_reason"):
        if not isinstance(h.get(key, ""), str):
            raise bad(key)


def _read_arrays(zf: zipfile.ZipFile, h: dict, src) -> dict:
    expected = _expected_shapes(h)
    present = {name[:-4] for name in zf.namelist() if name.endswith(".npy")} - {"header"}
    missing = sorted(set(expected) - present)
    if missing:
        raise _refuse(src, f"missing array(s) {', '.join(missing)}; the file is damaged or not "
                           "a complete paths fit")
    extra = sorted(present - set(expected))
    if extra:
        raise _refuse(src, f"unexpected array(s) {', '.join(extra[:5])}; not a paths fit of "
                           f"format version {FORMAT_VERSION}")
    out = {}
    for key, (shape, dtype) in expected.items():
        nbytes = int(np.prod(shape, dtype=np.int64)) * np.dtype(dtype).itemsize
        if zf.getinfo(key + ".npy").file_size > nbytes + _NPY_OVERHEAD:
            raise _refuse(src, f"array {key} is larger than its header says {tuple(shape)}; "
                               "the file is damaged")
        with zf.open(key + ".npy") as fh:
            a = _read_npy(fh, tuple(shape), np.dtype(dtype), key, src)
        if a.dtype.kind == "f" and not np.all(np.isfinite(a)):
            raise _refuse(src, f"array {key} has non-finite values; the file is damaged")
        a.flags.writeable = False
        out[key] = a
    return out


def _read_npy(fh, shape: tuple, dtype: np.dtype, key: str, src) -> np.ndarray:
    """One ``.npy`` member: its own header checked against ``shape``/``dtype`` before any
    data is read or memory allocated (a crafted header cannot ask for a huge array, and
    object dtypes are refused before anything could be unpickled)."""
    fmt = np.lib.format
    try:
        version = fmt.read_magic(fh)
        reader = fmt.read_array_header_1_0 if version == (1, 0) else fmt.read_array_header_2_0
        got_shape, fortran, got_dtype = reader(fh)
    except (ValueError, TypeError, SyntaxError) as exc:
        raise _refuse(src, f"array {key} has no valid .npy header ({type(exc).__name__}); the "
                           "file is damaged") from None
    if got_dtype.hasobject:
        raise _refuse(src, f"array {key} holds Python objects (refused: never unpickled); the "
                           "file is damaged or not a paths fit")
    if got_dtype != dtype or tuple(got_shape) != shape:
        raise _refuse(src, f"array {key} has {got_dtype} shape {tuple(got_shape)}, expected "
                           f"{dtype} shape {shape}; the file is damaged")
    nbytes = int(np.prod(shape, dtype=np.int64)) * dtype.itemsize
    data = fh.read(nbytes)
    if len(data) != nbytes:
        raise _refuse(src, f"array {key} is truncated; the file is damaged")
    return np.frombuffer(data, dtype=dtype).reshape(shape, order="F" if fortran else "C").copy(
        order="F" if fortran else "C")


def _check_values(a: dict, h: dict, src) -> None:
    d = a["fac_d"]
    if np.any(d <= 0) or np.any(np.diff(d) > 0):
        raise _refuse(src, "singular values are not positive and descending; the file is damaged")
    with np.errstate(over="ignore"):
        if not np.all(np.isfinite(np.square(d[:1]))):  # every formula takes d^2 (d[0] largest)
            raise _refuse(src, _OUT_OF_RANGE)
    if np.any(a["design_x_scale"] <= 0):
        raise _refuse(src, "column scales are not positive; the file is damaged")
    if "span_sqrt_w" in a and (np.any(a["span_sqrt_w"] <= 0)
                               or np.any(a["design_penalty_factor"] <= 0)):
        raise _refuse(src, "row weights or relative penalties are not positive; the file is "
                           "damaged")
    if int(np.count_nonzero(a["design_active"])) != h["n_active"]:
        raise _refuse(src, "active-column mask disagrees with the header; the file is damaged")
    if np.any(a["lambdas"] < 0) or np.any(a["reported_lambda"] < 0):
        raise _refuse(src, "negative penalties; the file is damaged")


@dataclass(frozen=True)
class SavedFit:
    """A ridge path read back from ``fit.npz``, ready to predict at any penalty.

    Attributes
    ----------
    path : RidgePath or None
        The path rebuilt from the saved factors on the saved grid: the same
        coefficients and criteria, bit for bit, as the run that saved it.  Built
        on first use (every criterion on the grid is O(n r k)); predictions do
        not need it.  None for a ``"predict-only"`` fit (from ``--engine stream``
        or ``dask``, which keep no left factors): it predicts at any penalty, but
        has no criteria and no prediction intervals.
    header : dict
        The JSON header (see the module notes).
    reported_lambda : ndarray, shape (t,)
        The reported penalty (per target).
    coef : ndarray, shape (p,) or (p, t)
    intercept : float or ndarray, shape (t,)
        The model at the reported penalty, on the original feature scale.
    source : str
        The file read.
    design : Design
    singular_values, vt, uty : ndarray
        The factors predictions at any penalty are made from.
    """

    header: dict
    reported_lambda: np.ndarray
    coef: np.ndarray
    intercept: np.ndarray | float
    source: str = ""
    preparation: dict = field(default_factory=dict)
    design: Design | None = None
    singular_values: np.ndarray | None = None
    vt: np.ndarray | None = None
    uty: np.ndarray | None = None
    factorization: Factorization | None = None  # with the left factor (a full fit)
    lambdas: np.ndarray | None = None

    @cached_property
    def path(self) -> RidgePath | None:
        if self.factorization is None:
            return None
        try:
            with np.errstate(over="raise", invalid="raise", divide="raise"):
                return path_from_factors(self.design, self.factorization, self.lambdas,
                                         feature_names=self.header["feature_names"],
                                         multi_target=self.header["multi_target"])
        except (FloatingPointError, np.linalg.LinAlgError):
            raise _refuse(self.source, _OUT_OF_RANGE) from None

    @property
    def feature_names(self) -> list:
        return list(self.header["feature_names"])

    @property
    def n_features(self) -> int:
        return int(self.header["n_features"])

    @property
    def target_names(self) -> list:
        return list(self.header["target_names"])

    def lambda_for(self, rule: str) -> np.ndarray:
        """The penalty (per target, shape (t,)) of a selection rule.

        Rules chosen at fit time (gcv, loo, cv, one-se, hkb, lw, isotropic, ...)
        are read from the header; ``df=VALUE`` and ``fraction=VALUE`` are solved
        on the saved factors.
        """
        from paths.selection.rules import lambda_for_fraction, parse_rule

        name, value = parse_rule(rule)
        t = self.reported_lambda.size
        if name == "df":
            from paths.core.grid import lambda_for_df

            lo = float(self.design.n_fixed)
            hi = lo + self.singular_values.size
            if not lo < value <= hi:
                raise InputError(f"df target {value:g} is outside ({lo:g}, {hi:g}] for this fit")
            lam = 0.0 if value == hi else lambda_for_df(self.singular_values, value - lo)
            return np.full(t, lam)
        if name == "fraction":
            if self.path is None:
                raise InputError("fraction=VALUE needs the full fit; this predict-only fit "
                                 "(out-of-memory engine) takes lam=, df=VALUE or a saved rule")
            if not 0.0 < value <= 1.0:
                raise InputError(f"target shrinkage fraction must lie in (0, 1]; got {value:g}")
            return np.array([lambda_for_fraction(self.path, value, j) for j in range(t)])
        lams = self.header.get("rules", {}).get(name)
        if lams is None or any(v is None for v in np.atleast_1d(lams).tolist()):
            have = [k for k, v in self.header.get("rules", {}).items()
                    if v is not None and None not in np.atleast_1d(v).tolist()]
            raise InputError(f"rule {name} was not computed when this fit was saved; choose one "
                             f"of {', '.join(have) or 'none'}, df=VALUE, fraction=VALUE or "
                             "lam=VALUE")
        return np.broadcast_to(np.asarray(lams, dtype=float), (t,)).copy()

    def design_matrix(self, X) -> np.ndarray:
        """The training design's columns for new rows.

        A table (DataFrame, mapping of columns) is matched by column name in any
        order, through the same data preparation as the training data (one-hot
        levels, missing values); an array must have the training columns in the
        training order.
        """
        if isinstance(X, np.ndarray) or not hasattr(X, "columns") and not isinstance(X, dict):
            X = as_design(X, "X")
            if X.shape[1] != self.n_features:
                raise InputError(
                    f"X has {X.shape[1]} columns but the fit has {self.n_features} "
                    f"features; pass them in the training order ({', '.join(self.feature_names[:5])}"
                    f"{' ...' if self.n_features > 5 else ''}) or a table with those names"
                )
            return X
        return self.prepare_rows(X).X

    def prepare_rows(self, frame, *, source: str = ""):
        """A :class:`~paths.io.Dataset` of the new rows (targets not needed)."""
        from paths.data.tables import Dataset, select_like

        prep = self.preparation
        like = Dataset(X=np.zeros((0, self.n_features)), y=np.zeros(0),
                       feature_names=self.feature_names, target_names=self.target_names,
                       source_columns=list(prep.get("source_columns") or self.feature_names),
                       encoding={k: list(v) for k, v in (prep.get("encoding") or {}).items()},
                       id_column=prep.get("id_column"), drop_missing=prep.get("drop_missing"))
        return select_like(frame, like, source=source, targets=False)

    def predict(self, X, lam=None) -> np.ndarray:
        """Predictions for new rows.

        Parameters
        ----------
        X : array_like, shape (n_new, p), or a table
            See :meth:`design_matrix`.
        lam : float, optional
            The penalty; default the reported one (each target at its own).

        Returns
        -------
        ndarray, shape (n_new,) [or (n_new, t) for several targets]
        """
        X = self.design_matrix(X)
        if lam is None:
            lams = self.reported_lambda
        else:
            lams = np.full(self.reported_lambda.size, float(as_lambdas(lam)[0]))
            if np.ndim(lam) != 0:
                raise InputError("lam must be one penalty (a number); predict one at a time")
        if np.all(lams == lams[0]):
            return self._at(X, float(lams[0]))
        pred = np.column_stack([self._at(X, float(v))[:, j] for j, v in enumerate(lams)])
        return pred

    def _at(self, X: np.ndarray, lam: float) -> np.ndarray:
        """Predictions at one penalty: the arithmetic of :meth:`RidgePath.predict` on the
        saved factors (the path itself, only where an unpenalized span needs it)."""
        if self.design.span is not None:
            return self.path.predict(X, lam)
        pred = predict_from_factors(self.design, self.singular_values, self.vt, self.uty, X,
                                    np.array([lam]))[:, 0]
        return pred if self.header["multi_target"] else pred[:, 0]


def load_fit(path) -> SavedFit:
    """Read a ``fit.npz`` written by ``paths explore`` (or :func:`save_fit`).

    Parameters
    ----------
    path : str or path-like

    Returns
    -------
    SavedFit
        With ``.predict(X, lam=None)``.

    Raises
    ------
    InputError
        The file is missing, not a saved paths fit, from an incompatible format
        version, or damaged (pickled objects, wrong shapes or dtypes, missing
        arrays, non-finite values, inconsistent dimensions).

    Examples
    --------
    >>> import io, numpy as np
    >>> from paths import fit_path
    >>> from paths.present.fitfile import fit_bytes
    >>> rng = np.random.default_rng(0)
    >>> X = rng.standard_normal((30, 5)); y = X @ np.ones(5) + rng.standard_normal(30)
    >>> fit = fit_path(X, y)
    >>> saved = load_fit(io.BytesIO(fit_bytes(fit, reported=1.0)))
    >>> bool(np.array_equal(saved.predict(X[:3], lam=2.0), fit.predict(X[:3], 2.0)))
    True
    """
    src = "<stream>" if hasattr(path, "read") else str(path)
    if not hasattr(path, "read"):
        p = Path(path)
        if not p.is_file():
            raise InputError(f"{p}: no such file; pass the fit.npz written by paths explore")
    try:
        zf = zipfile.ZipFile(path)
    except (zipfile.BadZipFile, zipfile.LargeZipFile, OSError, ValueError, EOFError,
            NotImplementedError, struct.error, UnicodeDecodeError):
        raise _refuse(src, "not a saved paths fit (not a NumPy .npz archive); pass the fit.npz "
                           "written by paths explore") from None
    with zf:
        try:
            header = _read_header(zf, src)
            _check_header(header, src)
            arrays = _read_arrays(zf, header, src)
        except InputError:
            raise
        except (zipfile.BadZipFile, zipfile.LargeZipFile, EOFError, OSError, KeyError,
                TypeError, ValueError, NotImplementedError, zlib.error, struct.error,
                UnicodeDecodeError) as exc:
            # damaged zip structure (CRC, sizes, compression method): never a traceback
            raise _refuse(src, f"the archive is damaged ({type(exc).__name__}); write the fit "
                               "again with paths explore") from None
    _check_values(arrays, header, src)
    try:
        with np.errstate(over="raise", invalid="raise", divide="raise"):
            return _rebuild(header, arrays, src)
    except (FloatingPointError, np.linalg.LinAlgError):
        raise _refuse(src, _OUT_OF_RANGE) from None


def _rebuild_span(h: dict, a: dict) -> dict:
    """The span-related :class:`Design` fields, or {} for a plain fit."""
    if h.get("span") is None:
        return {}
    from paths.core.design import FixedSpan

    sp = FixedSpan(reflectors=np.asfortranarray(a["span_reflectors"]), tau=a["span_tau"],
                   r=a["span_r"], q1=a["span_q1"], sqrt_w=a["span_sqrt_w"], qty=a["span_qty"],
                   qtx=a["span_qtx"], intercept=h["span"]["intercept"],
                   total_weight=float(h["span"]["total_weight"]))
    unp = a["design_unpenalized"]
    pf = a["design_penalty_factor"]
    w = a["design_sample_weight"]
    return {"span": sp, "unpenalized": unp,
            "penalty_factor": None if np.all(pf == 1.0) else pf,
            "sample_weight": None if h.get("weights") is None else w}


def _rebuild(h: dict, a: dict, src) -> SavedFit:
    t, r = h["n_targets"], h["rank"]
    zy = a["design_zy"] if "design_zy" in a else np.zeros((0, t))
    design = Design(zy=zy, x_mean=a["design_x_mean"], x_scale=a["design_x_scale"],
                    y_mean=a["design_y_mean"], active=a["design_active"],
                    n_samples=h["n_samples"], fit_intercept=h["fit_intercept"],
                    standardize=h["standardize"], **_rebuild_span(h, a))
    d = a["fac_d"]
    u = a["fac_u"] if "fac_u" in a else np.zeros((0, r))
    fac = Factorization(u=u, d=d, vt=a["fac_vt"], rank=int(d.size),
                        tol=float(h.get("rank_tol", 0.0)), d_max=float(h.get("d_max", d[0])),
                        d_min=float(h.get("d_min", d[-1])), solver=str(h.get("solver", "svd")),
                        reason=str(h.get("solver_reason", "saved fit")))
    full = h.get("kind", "full") == "full"
    # U^T y as path_from_factors forms it (the same call): predictions bit for bit the path's
    uty = algebra.factor_state(fac, design).uty if full else a["fac_uty"]
    multi = h["multi_target"]
    coef = a["coef"] if multi else a["coef"][:, 0]
    icpt = a["intercept"] if multi else float(a["intercept"][0])
    return SavedFit(header=h, reported_lambda=a["reported_lambda"], coef=coef,
                    intercept=icpt, source=src, preparation=dict(h.get("preparation") or {}),
                    design=design, singular_values=d, vt=a["fac_vt"], uty=uty,
                    factorization=fac if full else None, lambdas=a["lambdas"])
