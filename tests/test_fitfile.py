"""The saved fit (``fit.npz``): round trip, prediction, and refusal of hostile files.

References: scikit-learn ``Ridge(alpha=lambda)`` on population-SD-scaled features
(the same objective, the README's penalty convention) for the predictions;
numpy's own ``np.save``/``np.load`` for the archive; the round trip is checked
bit for bit against the path the file was written from (the contract of issue 15:
a saved fit reproduces the run exactly).
"""
from __future__ import annotations

import io
import json
import zipfile

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose
from sklearn.linear_model import Ridge

import paths
from error_bounds import U, gamma, ridge_bounds
from paths import InputError, fit_path
from paths.present.fitfile import FORMAT_VERSION, fit_bytes, load_fit

EPS = np.finfo(float).eps


def _problem(n, p, seed=0, t=None):
    rng = np.random.default_rng(seed)
    X = rng.standard_normal((n, p)) * np.geomspace(0.5, 4.0, p) + rng.standard_normal(p)
    beta = rng.standard_normal((p,) if t is None else (p, t))
    y = X @ beta + 0.5 * rng.standard_normal((n,) if t is None else (n, t))
    return X, y


CASES = [  # (n, p, solver, standardize, constant column, t)
    (40, 60, "svd", True, False, None),
    (40, 60, "gram", False, True, None),
    (60, 25, "auto", True, True, None),
    (30, 29, "svd", True, False, 2),
    (50, 12, "auto", False, False, 3),
]


@pytest.mark.parametrize("n,p,solver,std,const,t", CASES)
def test_round_trip_is_bit_identical(n, p, solver, std, const, t):
    """Every array of the rebuilt path equals the original's bit for bit (issue 15 contract).

    The file stores the factors themselves (np.save writes float64 exactly, in
    their memory order), and the rebuild runs the same code on them.
    """
    X, y = _problem(n, p, seed=n + p, t=t)
    if const:
        X[:, 2] = 3.0
    path = fit_path(X, y, solver=solver, standardize=std)
    saved = load_fit(io.BytesIO(fit_bytes(path, reported=path.lambdas[10])))
    Xn = _problem(7, p, seed=99)[0]
    for lam in (0.0, 0.37, float(path.lambdas[10]), 1e4):
        assert np.array_equal(saved.predict(Xn, lam), path.predict(Xn, lam))
    assert np.array_equal(saved.predict(Xn), path.predict(Xn, float(path.lambdas[10])))
    assert np.array_equal(saved.coef, path.coef_at(float(path.lambdas[10])))
    # predictions come from the factors: the path (every criterion, O(n r k)) is not rebuilt
    assert "path" not in vars(saved)
    for key in ("lambdas", "coef", "intercept", "df", "train_mse", "gcv", "loo_mse"):
        assert np.array_equal(getattr(saved.path, key), getattr(path, key)), key
    assert np.array_equal(saved.path.min_norm.coef, path.min_norm.coef)
    assert np.array_equal(saved.path.min_norm.loo_mse, path.min_norm.loo_mse)


def test_rank_deficient_design_round_trip():
    """Duplicated columns (rank < min(m, q)): the truncated factors still round-trip exactly."""
    X, y = _problem(30, 10, seed=3)
    X = np.hstack([X, X[:, :4]])
    path = fit_path(X, y, solver="svd")
    assert path.rank == 10
    saved = load_fit(io.BytesIO(fit_bytes(path, reported=1.0)))
    assert np.array_equal(saved.path.coef, path.coef)
    assert np.array_equal(saved.path.loo_mse, path.loo_mse)


def test_predict_matches_sklearn_and_file_on_disk(tmp_path):
    """Predictions from a file on disk against scikit-learn Ridge on scaled features.

    Tolerance: sklearn solves the normal equations (Cholesky), whose relative
    error is bounded by about kappa(X^T X + lam I) * eps (Higham 2002, ch. 10);
    ours is backward stable.  10 n kappa eps relative to the largest prediction.
    """
    X, y = _problem(50, 20, seed=5)
    path = fit_path(X, y)
    lam = 3.5
    dest = paths.present.fitfile.save_fit(tmp_path / "fit.npz", path, reported=lam)
    saved = paths.load_fit(dest)
    mu, sd = X.mean(0), X.std(0)
    Xn = _problem(9, 20, seed=6)[0]
    ref = Ridge(alpha=lam).fit((X - mu) / sd, y).predict((Xn - mu) / sd)
    # bound: ours (Gram bound: "auto") + Ridge's Cholesky (Gram bound), predictions
    b = ridge_bounds(X, y, lam, gram=True)
    assert_allclose(saved.predict(Xn), ref, rtol=0, atol=b.predict_atol(Xn))


def test_predict_table_matched_by_name():
    """A DataFrame with the columns shuffled and an extra column gives the same predictions."""
    X, y = _problem(40, 8, seed=2)
    names = [f"g{j}" for j in range(8)]
    path = fit_path(pd.DataFrame(X, columns=names), y)
    saved = load_fit(io.BytesIO(fit_bytes(path, reported=2.0)))
    frame = pd.DataFrame(X[:5], columns=names)[names[::-1]].assign(other=1.0)
    assert np.array_equal(saved.predict(frame), path.predict(X[:5], 2.0))
    with pytest.raises(InputError, match="lack 1 training column.*'g3'"):
        saved.predict(frame.drop(columns="g3"))
    with pytest.raises(InputError, match="columns but the fit has 8"):
        saved.predict(X[:5, :7])


def test_rules_and_df_rule():
    """df=VALUE solved on the saved factors gives tr H = VALUE (ESL eq. 3.50, plus the intercept)."""
    X, y = _problem(40, 15, seed=4)
    path = fit_path(X, y)
    saved = load_fit(io.BytesIO(fit_bytes(path, reported=1.0, rules={"gcv": [2.5]})))
    assert saved.lambda_for("gcv").tolist() == [2.5]
    lam = saved.lambda_for("df=6")[0]
    d2 = np.square(path.singular_values)
    # spec + bound: brentq on log lambda (xtol 1e-12, rtol 4 eps; twice) times the slope of
    # df in log lambda, plus df's rounding on both sides (the same saved singular values)
    slope = np.sum(d2 * lam / (d2 + lam) ** 2)
    tol = slope * 2 * (1e-12 + 8 * U * abs(np.log(lam))) + 2 * gamma(d2.size + 2) * 6.0
    assert_allclose(1 + np.sum(d2 / (d2 + lam)), 6.0, rtol=0, atol=tol)
    with pytest.raises(InputError, match="rule cv was not computed"):
        saved.lambda_for("cv")


# ------------------------------------------------------------------ hostile files
def _good_bytes():
    X, y = _problem(20, 6, seed=1)
    return fit_bytes(fit_path(X, y), reported=1.0)


def _rewrite(data: bytes, change) -> io.BytesIO:
    """A copy of the archive with ``change(dict of arrays, header)`` applied."""
    with np.load(io.BytesIO(data), allow_pickle=False) as z:
        arrays = {k: z[k] for k in z.files}
    header = json.loads(arrays.pop("header").tobytes())
    change(arrays, header)
    buf = io.BytesIO()
    blob = np.frombuffer(json.dumps(header).encode(), dtype=np.uint8)
    np.savez(buf, header=blob, **arrays)
    buf.seek(0)
    return buf


def _object_array(arrays, header):
    arrays["fac_d"] = np.array([{"payload": 1}], dtype=object)


HOSTILE = {
    "pickled object": (_object_array, "Python objects"),
    "wrong shape": (lambda a, h: a.update(fac_vt=a["fac_vt"][:, :-1]), "fac_vt has"),
    "missing key": (lambda a, h: a.pop("fac_u"), "missing array.*fac_u"),
    "extra key": (lambda a, h: a.update(evil=np.zeros(2)), "unexpected array"),
    "wrong dtype": (lambda a, h: a.update(coef=a["coef"].astype(np.float32)), "coef has float32"),
    "non-finite": (lambda a, h: a["lambdas"].__setitem__(0, np.nan) if a.update(
        lambdas=a["lambdas"].copy()) is None else None, "non-finite"),
    "future version": (lambda a, h: h.update(format_version=FORMAT_VERSION + 1),
                       "format version 2"),
    "other format": (lambda a, h: h.update(format="something"), "not a saved paths fit"),
    "bad counts": (lambda a, h: h.update(rank=-1), "'rank'"),
    "inconsistent dims": (lambda a, h: h.update(m=h["m"] + 1), "inconsistent dimensions|fac_u"),
    "names length": (lambda a, h: h["feature_names"].pop(), "feature_names"),
    "unsorted spectrum": (lambda a, h: a.update(fac_d=a["fac_d"][::-1].copy()), "descending"),
    "huge declared": (lambda a, h: a.update(design_zy=np.zeros((4000, 1))), "larger than"),
}


@pytest.mark.parametrize("case", sorted(HOSTILE))
def test_hostile_files_refused_in_one_line(case):
    """Damaged or crafted archives raise one-line InputErrors and never unpickle (issue 15)."""
    change, pattern = HOSTILE[case]
    buf = _rewrite(_good_bytes(), change)
    with pytest.raises(InputError, match=pattern) as info:
        load_fit(buf)
    assert "\n" not in str(info.value)


@pytest.mark.parametrize("blob", [b"", b"not a zip at all", b"PK\x03\x04garbage"])
def test_not_an_archive(blob):
    with pytest.raises(InputError, match="not a saved paths fit|damaged"):
        load_fit(io.BytesIO(blob))


def test_header_not_json_and_npz_without_header():
    buf = io.BytesIO()
    np.savez(buf, x=np.zeros(3))
    buf.seek(0)
    with pytest.raises(InputError, match="no header"):
        load_fit(buf)
    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w") as zf:
        inner = io.BytesIO()
        np.save(inner, np.frombuffer(b"{not json", dtype=np.uint8))
        zf.writestr("header.npy", inner.getvalue())
    buf.seek(0)
    with pytest.raises(InputError, match="not valid JSON"):
        load_fit(buf)


def test_missing_file(tmp_path):
    with pytest.raises(InputError, match="no such file"):
        load_fit(tmp_path / "nope.npz")


def test_round_trip_weights_and_unpenalized():
    """Row weights, unpenalized columns and relative penalties survive the file bit for bit."""
    X, y = _problem(30, 40, seed=21)
    w = np.random.default_rng(1).uniform(0.5, 2.0, 30)
    path = fit_path(X, y, sample_weight=w, unpenalized=[0, 1], relative_penalty={"x5": 3.0})
    saved = load_fit(io.BytesIO(fit_bytes(path, reported=path.lambdas[20])))
    for key in ("coef", "intercept", "df", "train_mse", "gcv", "loo_mse"):
        assert np.array_equal(getattr(saved.path, key), getattr(path, key)), key
    assert saved.path.unpenalized == ["x0", "x1"] and saved.path.weighted
    Xn = _problem(5, 40, seed=22)[0]
    assert np.array_equal(saved.predict(Xn, 0.5), path.predict(Xn, 0.5))
    bad = _rewrite(fit_bytes(path, reported=1.0),
                   lambda a, h: a.update(span_sqrt_w=-a["span_sqrt_w"]))
    with pytest.raises(InputError, match="not positive"):
        load_fit(bad)


def test_crafted_npy_header_asking_for_a_huge_array():
    """An array member whose own .npy header declares a huge shape is refused from the
    header alone (nothing allocated), like one declaring an object dtype."""
    good = _good_bytes()
    with zipfile.ZipFile(io.BytesIO(good)) as zf:
        members = {n: zf.read(n) for n in zf.namelist()}
    inner = io.BytesIO()
    np.lib.format.write_array_header_1_0(inner, {"descr": "<f8", "fortran_order": False,
                                                 "shape": (10 ** 12,)})
    for name, pattern in [("fac_d.npy", "shape"), ("lambdas.npy", "shape")]:
        crafted = dict(members)
        crafted[name] = inner.getvalue()
        buf = io.BytesIO()
        with zipfile.ZipFile(buf, "w") as zf:
            for n, data in crafted.items():
                zf.writestr(n, data)
        buf.seek(0)
        with pytest.raises(InputError, match=pattern):
            load_fit(buf)


def test_corrupted_bytes_never_escape_as_other_errors():
    """Every single-byte corruption of a valid file loads or is refused with InputError
    (fuzzing by exhaustion over a stride of positions; common practice, no source)."""
    good = bytearray(_good_bytes())
    for pos in range(0, len(good), max(1, len(good) // 400)):
        bad = bytearray(good)
        bad[pos] ^= 0xFF
        try:
            load_fit(io.BytesIO(bytes(bad)))
        except InputError:
            pass


@pytest.mark.parametrize("field,value", [("reported", "gcv"), ("rules", {"gcv": "x"}),
                                         ("preparation", {"encoding": {"a": 3}}),
                                         ("rank_tol", "big"), ("solver", 3)])
def test_malformed_header_records(field, value):
    buf = _rewrite(_good_bytes(), lambda a, h: h.update({field: value}))
    with pytest.raises(InputError, match="malformed"):
        load_fit(buf)


def test_values_out_of_range_refused():
    """Finite but absurd singular values (squares overflow) are refused, not a traceback."""
    buf = _rewrite(_good_bytes(), lambda a, h: a.update(fac_d=a["fac_d"] * 1e300))
    with pytest.raises(InputError, match="float64 range"):
        load_fit(buf)


def test_predict_only_fit_from_the_streaming_engine(tmp_path):
    """A streamed path (no left factors) saves a predict-only fit: its predictions equal the
    streamed path's own bit for bit, and the in-memory path's to the Gram route's accuracy
    (kappa^2 eps relative, Higham 2002 section 20.4: ridge_bounds with the Gram term)."""
    from paths import stream_path

    X, y = _problem(300, 10, seed=31)
    sp = stream_path(X, y=y, chunk_rows=64)
    saved = load_fit(io.BytesIO(fit_bytes(sp, reported=2.0)))
    assert saved.header["kind"] == "predict-only" and saved.path is None
    Xn = _problem(6, 10, seed=32)[0]
    for lam in (0.0, 2.0, 50.0):
        assert np.array_equal(saved.predict(Xn, lam), sp.predict(Xn, lam))
    ref = fit_path(X, y).predict(Xn, 2.0)
    # bound: the streamed Gram route and the in-memory route ("auto": Gram bound covers it)
    assert_allclose(saved.predict(Xn), ref, rtol=0,
                    atol=ridge_bounds(X, y, 2.0, gram=True).predict_atol(Xn))
    with pytest.raises(InputError, match="needs the full fit"):
        saved.lambda_for("fraction=0.5")


def test_streamed_archive_equals_numpy_savez():
    """fit.npz is written without copying each array: its members equal those of
    ``numpy.savez`` byte for byte (numpy reference) for C- and Fortran-ordered, strided,
    empty, 0-d, boolean, integer and byte arrays."""
    from paths.present.fitfile import savez_streamed

    base = np.arange(12.0).reshape(3, 4)
    arrays = {"c": base, "f": np.asfortranarray(base), "s": np.arange(20.0)[::3],
              "e": np.zeros((0, 3)), "z": np.float64(2.5), "b": np.array([True, False]),
              "i": np.arange(5), "u": np.frombuffer(b"json", dtype=np.uint8)}
    ours, ref = io.BytesIO(), io.BytesIO()
    savez_streamed(ours, arrays)
    np.savez(ref, **arrays)
    with zipfile.ZipFile(ours) as a, zipfile.ZipFile(ref) as b:
        assert a.namelist() == b.namelist()
        for name in b.namelist():
            assert a.read(name) == b.read(name), name
