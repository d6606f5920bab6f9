"""The interactive part of ``report.html``: move the penalty, see the model change.

One self-contained section (HTML + inline script + the numbers as inline JSON;
no network, no library): a slider over log10 λ, a button per rule and one for
λ → 0, and read-outs that update together — λ, the effective degrees of freedom,
training MSE and GCV (exact at any λ), leave-one-out / K-fold CV / test MSE (at
the grid penalty nearest λ, or a rule's own numbers when its button is used),
the coefficient-norm ratio, the coefficients of the largest features (original
scale, exact at any λ) and the shrinkage factor of each principal component.
A run with several targets gets a target selector: each target has its own
``c = Uᵀy``, rules, reported choice and largest coefficients; the factors are
shared (one design).

The exact read-outs are closed forms on the path's factors ``Z = U D Vᵀ`` with
``c = Uᵀy`` (Hastie, Tibshirani & Friedman 2009, eqs. 3.47 and 3.50):

- df(λ) = 1 + Σ d²/(d² + λ) (intercept included);
- RSS(λ) = RSS₀ + Σ (λ/(d² + λ))² c², training MSE = RSS/n;
- GCV(λ) = n RSS(λ) / (n − df(λ))² (Golub, Heath & Wahba 1979);
- β(λ) = V diag(d/(d² + λ)) c, divided by the column scale for the original scale.

A URL fragment selects the state on load: ``#lambda=3.2``, ``#lambda=0`` (the
min-norm fit) or ``#rule=cv``; with several targets ``#target=NAME`` picks the
target (``#target=NAME&lambda=3.2``, ``#target=NAME&rule=cv``; NAME URL-encoded),
the first target by default.  Each read-out element carries its full-precision
value in ``data-value`` so that a test (or a reader's script) can read it back.

The page stays bounded: the numbers per target are O(r · n_coef) (r the rank),
and targets past :data:`EXPLORER_BYTES` of data are left out of the explorer
(the page says which; every target keeps its section, tables and figures).
"""
from __future__ import annotations

import html
import json

import numpy as np

from paths.core import algebra

__all__ = ["explorer_data", "explorer_targets", "explorer_section", "EXPLORER_BYTES"]

#: the most bytes of explorer data (inline JSON) one report carries
EXPLORER_BYTES = 2_000_000
#: keys of :func:`explorer_data` shared by every target (one design, one factorization)
_SHARED = ("n", "m", "intercept", "d", "lambdas")

_SCRIPT = r"""
(function () {
  var ALL = JSON.parse(document.getElementById('paths-explorer-data').textContent);
  var D = null, d2 = null, current = -1;
  function fmt(v) {
    if (v === null || v === undefined || !isFinite(v)) return 'n/a';
    var a = Math.abs(v);
    if (a !== 0 && (a < 1e-4 || a >= 1e6)) return v.toExponential(3);
    return String(Number(v.toPrecision(4)));
  }
  function put(id, v, note) {
    var el = document.getElementById(id);
    if (!el) return;
    el.setAttribute('data-value', v === null || v === undefined ? '' : String(v));
    el.textContent = fmt(v) + (note ? ' ' + note : '');
  }
  function clear(el) { while (el.firstChild) el.removeChild(el.firstChild); }
  function nearest(lam) {
    if (lam <= 0) return -1;
    var best = 0, err = Infinity;
    for (var i = 0; i < D.lambdas.length; i++) {
      var e = Math.abs(Math.log(D.lambdas[i]) - Math.log(lam));
      if (e < err) { err = e; best = i; }
    }
    return best;
  }
  function addButton(box, rule, label) {
    var b = document.createElement('button');
    b.type = 'button';
    b.setAttribute('data-rule', rule);
    b.textContent = label;
    b.addEventListener('click', function () {
      if (rule === 'min_norm') show(0, null); else show(D.rules[rule].lambda, rule);
    });
    box.appendChild(b);
  }
  function useTarget(k) {
    if (k === current) return;
    current = k;
    D = {};
    var key;
    for (key in ALL.shared) D[key] = ALL.shared[key];
    for (key in ALL.targets[k]) D[key] = ALL.targets[k][key];
    d2 = D.d.map(function (v) { return v * v; });
    var pick = document.getElementById('ix-target');
    if (pick) pick.value = String(k);
    var box = document.getElementById('ix-rules');
    clear(box);
    Object.keys(D.rules).forEach(function (r) { addButton(box, r, D.rules[r].label); });
    addButton(box, 'min_norm', 'λ → 0 (min-norm)');
    var body = document.querySelector('#ix-coef tbody');
    clear(body);
    D.features.forEach(function (name) {
      var tr = document.createElement('tr'), a = document.createElement('td'),
          b = document.createElement('td');
      a.textContent = name;
      b.className = 'num';
      tr.appendChild(a);
      tr.appendChild(b);
      body.appendChild(tr);
    });
    document.body.setAttribute('data-explorer-target', D.name === null ? '' : D.name);
  }
  function show(lam, rule) {
    var r = D.d.length, f = 0, s = 0, rss = D.rss0, b2 = 0;
    var shrink = [];
    for (var j = 0; j < r; j++) {
      var fj = d2[j] / (d2[j] + lam), sj = lam / (d2[j] + lam);
      f += fj; s += sj; rss += sj * sj * D.c[j] * D.c[j];
      var g = D.d[j] / (d2[j] + lam) * D.c[j];
      b2 += g * g;
      shrink.push(fj);
    }
    var df = D.intercept + f, resid = D.m - r + s;
    put('ix-lambda', lam, lam === 0 ? '(λ → 0: the minimum-norm fit)' : '');
    put('ix-df', df);
    put('ix-train', rss / D.n);
    put('ix-gcv', lam === 0 && resid === 0 ? D.gcv0 : D.n * rss / (resid * resid));
    put('ix-fraction', Math.sqrt(b2) / D.norm0);
    var i = nearest(lam), sel = rule ? D.rules[rule] : null, grid = '';
    if (sel && sel.at) {
      put('ix-loo', sel.at.loo_mse, '(at the rule\'s own λ)');
      put('ix-test', sel.at.test_mse, sel.at.test_mse == null ? '' : '(at the rule\'s own λ)');
    } else if (i < 0) {
      put('ix-loo', D.min_norm.loo_mse, '(λ → 0 limit)');
      put('ix-test', D.min_norm.test_mse, '(λ → 0 limit)');
    } else {
      grid = '(at grid λ = ' + fmt(D.lambdas[i]) + ')';
      put('ix-loo', D.loo ? D.loo[i] : null, grid);
      put('ix-test', D.test ? D.test[i] : null, D.test ? grid : '');
    }
    put('ix-cv', (i >= 0 && D.cv) ? D.cv[i] : null, (i >= 0 && D.cv) ? '(at grid λ = ' + fmt(D.lambdas[i]) + ')' : '');
    var rows = document.querySelectorAll('#ix-coef tbody tr');
    for (var k = 0; k < D.features.length; k++) {
      var v = 0;
      for (var j2 = 0; j2 < r; j2++) v += D.d[j2] / (d2[j2] + lam) * D.c[j2] * D.v[k][j2];
      v /= D.scale[k];
      var cell = rows[k].querySelector('td.num');
      cell.setAttribute('data-value', String(v));
      cell.textContent = fmt(v);
    }
    var bars = document.querySelectorAll('#ix-shrink rect');
    for (var b = 0; b < bars.length; b++) {
      var h = 60 * shrink[b];
      bars[b].setAttribute('y', String(62 - h));
      bars[b].setAttribute('height', String(h));
      bars[b].setAttribute('data-value', String(shrink[b]));
    }
    var slider = document.getElementById('ix-slider');
    if (lam > 0) slider.value = String(Math.log10(lam));
    var who = rule ? (D.rules[rule].label + ' choice') : (lam === 0 ? 'λ → 0' : 'slider');
    document.getElementById('ix-who').textContent =
      (ALL.targets.length > 1 ? 'target ' + D.name + ', ' : '') + who;
    document.body.setAttribute('data-explorer', 'ready');
  }
  document.getElementById('ix-slider').addEventListener('input', function (e) {
    show(Math.pow(10, parseFloat(e.target.value)), null);
  });
  var pick = document.getElementById('ix-target');
  if (pick) pick.addEventListener('change', function () {
    useTarget(parseInt(pick.value, 10));
    show(D.reported_lambda, D.reported);
  });
  function fromHash() {
    var q = {};
    window.location.hash.replace(/^#/, '').split('&').forEach(function (part) {
      var at = part.indexOf('=');
      if (at > 0) q[decodeURIComponent(part.slice(0, at))] = decodeURIComponent(part.slice(at + 1));
    });
    var k = 0;
    for (var t = 0; t < ALL.targets.length; t++) if (ALL.targets[t].name === q.target) k = t;
    useTarget(k);
    var lam = parseFloat(q.lambda);
    if (q.lambda !== undefined && /^[0-9.eE+-]+$/.test(q.lambda) && isFinite(lam) && lam >= 0) show(lam, null);
    else if (q.rule !== undefined && Object.prototype.hasOwnProperty.call(D.rules, q.rule)) show(D.rules[q.rule].lambda, q.rule);
    else show(D.reported_lambda, D.reported);
  }
  window.addEventListener('hashchange', fromHash);
  fromHash();
})();
"""


def _pick(v, j):
    """Target ``j`` of a per-target list, or the value itself (None stays None)."""
    return v[j] if isinstance(v, list) else v


def _column(a, j):
    if a is None:
        return None
    a = np.asarray(a, dtype=float)
    return (a if a.ndim == 1 else a[:, j]).tolist()


def explorer_data(result, summary: dict, *, target: int = 0, n_coef: int = 12) -> dict | None:
    """The numbers the explorer needs for one target (JSON-ready), or None without factors.

    Holds the singular values ``d``, ``c = Uᵀy`` (target ``target``), RSS₀, the
    rows of V (and column scales) of the ``n_coef`` features largest at the
    reported penalty, the grid's LOO / test / CV arrays, and every rule's choice
    with its own errors (``at_choice``).  ``summary`` is the record as seen for
    that target (:func:`paths.present.report.target_view` for several targets):
    its ``selected``, ``min_norm`` and ``report`` are the target's own.
    """
    fac, design, uty = (getattr(result, k, None) for k in ("factorization", "design", "uty"))
    if fac is None or design is None or uty is None:
        return None
    rep = summary.get("report") or {}
    c = np.asarray(uty, dtype=float)[:, target]
    d = np.asarray(fac.d, dtype=float)
    act = np.flatnonzero(design.active)
    lam = float(rep.get("lambda", 1.0))
    beta = (algebra.gains(d, lam)[:, 0] * c) @ fac.vt  # standardized scale, active columns
    top = np.argsort(-np.abs(beta))[:n_coef]
    n = int(result.n_samples)
    mn = summary.get("min_norm") or {}
    cv = summary.get("cv") if isinstance(summary.get("cv"), dict) else {}
    rules = {}
    from paths.present.plot import RULE_LABELS

    for rule, sel in (summary.get("selected") or {}).items():
        if isinstance(sel, dict) and sel.get("lambda") is not None:
            rules[rule] = {"lambda": float(sel["lambda"]), "label": RULE_LABELS.get(rule, rule),
                           "at": sel.get("at_choice")}
    names = list(result.feature_names)
    norm0 = float(np.sqrt(np.sum((c / d) ** 2)))
    return {
        "n": n, "m": int(fac.u.shape[0]), "intercept": int(bool(result.fit_intercept)),
        "d": d.tolist(), "c": c.tolist(), "name": summary.get("target"),
        "rss0": float(_pick(mn.get("train_mse"), target)) * n,
        "gcv0": _pick(mn.get("gcv"), target), "norm0": norm0,
        "features": [str(names[act[k]]) for k in top],
        "v": fac.vt[:, top].T.tolist(), "scale": design.x_scale[act[top]].tolist(),
        "lambdas": np.asarray(result.lambdas, dtype=float).tolist(),
        "loo": _column(result.loo_mse, target), "test": _column(result.test_mse, target),
        "cv": _column(cv.get("mse"), target) if cv.get("mse") is not None else None,
        "min_norm": {"loo_mse": _pick(mn.get("loo_mse"), target),
                     "test_mse": _pick(mn.get("test_mse"), target)},
        "rules": rules, "reported": rep.get("rule"), "reported_lambda": lam,
    }


def explorer_targets(result, summary: dict, *, n_coef: int = 12,
                     max_bytes: int = EXPLORER_BYTES) -> dict | None:
    """The explorer's data for every target: ``{"shared": {...}, "targets": [...],
    "left_out": [names]}`` (None without factors).

    ``shared`` holds what one design gives every target (n, the factor rows m,
    the intercept, ``d`` and the grid); each entry of ``targets`` the rest of
    :func:`explorer_data` for that target, in target order, while the JSON stays
    under ``max_bytes`` (the first target always).
    """
    names = summary.get("targets") or [None]
    if summary.get("targets"):
        from paths.present.report import target_view
    shared, targets, left_out, size = None, [], [], 0
    for j, name in enumerate(names):
        view = summary if name is None else target_view(summary, j)
        data = explorer_data(result, view, target=j, n_coef=n_coef)
        if data is None:
            return None
        own = {k: v for k, v in data.items() if k not in _SHARED}
        cost = len(json.dumps(own, allow_nan=False))
        if targets and size + cost > max_bytes:
            left_out.append(name)
            continue
        shared = shared or {k: data[k] for k in _SHARED}
        targets.append(own)
        size += cost
    return {"shared": shared, "targets": targets, "left_out": left_out}


def _target_picker(data: dict, max_bytes: int) -> str:
    """The target selector (several targets), with a note on targets left out."""
    e = html.escape
    if len(data["targets"]) < 2 and not data["left_out"]:
        return ""
    opts = "".join(f'<option value="{k}">{e(str(t["name"]))}</option>'
                   for k, t in enumerate(data["targets"]))
    note = ""
    if data["left_out"]:
        shown, total = len(data["targets"]), len(data["targets"]) + len(data["left_out"])
        note = (f" The explorer covers the first {shown} of the {total} targets (the page is kept "
                f"under {max_bytes / 1e6:g} MB of explorer data); left out: "
                f"{e(', '.join(str(n) for n in data['left_out']))}.")
    return (f'<p><label for="ix-target">target</label> <select id="ix-target">{opts}</select>'
            f"{note}</p>")


def explorer_section(result, summary: dict, *, n_coef: int = 12,
                     max_bytes: int = EXPLORER_BYTES) -> str:
    """The explorer as one HTML section, every target of the run (``""`` without factors);
    ``max_bytes`` as in :func:`explorer_targets`."""
    data = explorer_targets(result, summary, n_coef=n_coef, max_bytes=max_bytes)
    if data is None:
        return ""
    e = html.escape
    first = {**data["shared"], **data["targets"][0]}
    lo, hi = np.log10(min(first["lambdas"])), np.log10(max(first["lambdas"]))
    buttons = "".join(f'<button type="button" data-rule="{e(r)}">{e(v["label"])}</button>'
                      for r, v in first["rules"].items())
    buttons += '<button type="button" data-rule="min_norm">λ → 0 (min-norm)</button>'
    rows = "".join(f"<tr><td>{e(f)}</td><td class=\"num\"></td></tr>" for f in first["features"])
    r = len(first["d"])
    width = max(2.0, min(8.0, 480.0 / max(r, 1)))
    bars = "".join(f'<rect x="{k * width:.2f}" y="62" width="{width * 0.85:.2f}" height="0"/>'
                   for k in range(r))
    readouts = "".join(
        f"<tr><th>{e(label)}</th><td><output id=\"{key}\"></output></td></tr>"
        for key, label in (("ix-lambda", "penalty λ"), ("ix-df", "effective df (incl. intercept)"),
                           ("ix-train", "training MSE"), ("ix-gcv", "GCV"),
                           ("ix-loo", "leave-one-out MSE"), ("ix-cv", "K-fold CV MSE"),
                           ("ix-test", "test MSE"),
                           ("ix-fraction", "‖β_λ‖ / ‖β_0‖ (standardized scale)")))
    several = len(data["targets"]) > 1
    links = ("<code>#target=NAME&amp;lambda=VALUE</code> or <code>#target=NAME&amp;rule=RULE"
             "</code> (without <code>target=</code>: the first target)" if several else
             "<code>#lambda=VALUE</code> or <code>#rule=NAME</code>")
    blob = json.dumps(data, allow_nan=False).replace("</", "<\\/")
    start = np.log10(first["reported_lambda"]) if first["reported_lambda"] > 0 else lo
    return f"""<h2 id="explorer">Explore the penalty</h2>
<p>Move the penalty or pick a rule{" (and a target)" if several else ""}: every number below is
recomputed in this page from the path's factors (no network). Showing: <b id="ix-who"></b>.
A link ending in {links} opens the page at that penalty.</p>
<div class="explorer">
{_target_picker(data, max_bytes)}
<p><label for="ix-slider">log<sub>10</sub> λ</label>
<input id="ix-slider" type="range" min="{lo:.4f}" max="{hi:.4f}" step="0.01"
value="{start:.4f}" style="width:60%"></p>
<p class="rules" id="ix-rules">{buttons}</p>
<table class="readouts">{readouts}</table>
<table id="ix-coef"><thead><tr><th>feature (largest at the reported λ)</th>
<th>coefficient, original scale</th></tr></thead><tbody>{rows}</tbody></table>
<p>Shrinkage d<sub>j</sub>²/(d<sub>j</sub>² + λ) of each principal component (bar height 1 = no
shrinkage):</p>
<svg id="ix-shrink" width="{r * width:.0f}" height="64" role="img"
aria-label="shrinkage per component" style="background:#f6f6f6">
<g fill="#0072B2">{bars}</g></svg>
</div>
<script type="application/json" id="paths-explorer-data">{blob}</script>
<script>{_SCRIPT}</script>"""
