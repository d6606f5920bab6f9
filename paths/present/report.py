"""The analysis report: ``report.md`` and a self-contained ``report.html``.

Every number in the report is read from the run's ``summary.json`` record —
the data summary, the diagnosis, the rules table, the methods paragraph and the
reproducibility block — so the report can never disagree with the record.
Quantities the text needs that the path record does not hold directly (the
chosen rule, the grid range, the shrinkage fraction at the choice) are derived
once by :func:`report_numbers` and stored in the record under ``"report"``
before it is written.

The HTML file inlines the figures as SVG and carries its own CSS and, for an
explore run, a small inline script (:mod:`paths.present.interactive`) that lets
the reader move the penalty: no network access, one file to archive or e-mail.
"""
from __future__ import annotations

import html
import math
import re
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np

from paths.data.output import write_text
from paths.present.markup import md_escape, md_safe

__all__ = ["FigureRef", "report_numbers", "diagnosis", "methods_paragraph", "rules_table",
           "intervals_section",
           "cautions", "render_markdown", "render_html", "write_report", "fmt", "targets_section",
           "MAX_TARGET_SECTIONS", "MAX_TARGET_ROWS"]

RULE_NAMES = {
    "gcv": "minimum generalized cross-validation (GCV; Golub, Heath & Wahba 1979)",
    "loo": "minimum exact leave-one-out error (LOO; Allen 1974)",
    "cv": "minimum K-fold cross-validation error (Stone 1974)",
    "one_se": "the one-standard-error rule on K-fold cross-validation (Breiman et al. 1984)",
    "one-se": "the one-standard-error rule on K-fold cross-validation (Breiman et al. 1984)",
    "hkb": "the Hoerl–Kennard–Baldwin (1975) constant",
    "lw": "the Lawless–Wang (1976) constant",
    "isotropic": "the isotropic random-matrix plug-in (Dobriban & Wager 2018)",
    "df": "a target effective degrees of freedom",
    "fraction": "a target shrinkage fraction of the min-norm coefficient norm",
    "reml": "maximum restricted likelihood (REML; Patterson & Thompson 1971)",
    "test": "minimum test error (an oracle: it looks at the test rows)",
}
SHORT = {"gcv": "GCV", "loo": "LOO", "cv": "K-fold CV", "one_se": "one-SE", "one-se": "one-SE",
         "hkb": "HKB", "lw": "LW", "isotropic": "isotropic", "df": "target df",
         "fraction": "target fraction", "reml": "REML", "test": "test rows (oracle)"}
_PREFERENCE = ("cv", "one_se", "one-se", "loo", "gcv")

#: The works the report cites, by key (a References section lists those cited).
REFERENCES = {
    "gcv": "Golub, G. H., Heath, M. and Wahba, G. (1979). Generalized cross-validation as a "
           "method for choosing a good ridge parameter. Technometrics 21, 215–223.",
    "loo": "Allen, D. M. (1974). The relationship between variable selection and data "
           "augmentation and a method for prediction. Technometrics 16, 125–127.",
    "cv": "Stone, M. (1974). Cross-validatory choice and assessment of statistical predictions. "
          "J. R. Statist. Soc. B 36, 111–147.",
    "one_se": "Breiman, L., Friedman, J. H., Olshen, R. A. and Stone, C. J. (1984). "
              "Classification and Regression Trees. Wadsworth.",
    "hkb": "Hoerl, A. E., Kennard, R. W. and Baldwin, K. F. (1975). Ridge regression: some "
           "simulations. Communications in Statistics 4, 105–123.",
    "lw": "Lawless, J. F. and Wang, P. (1976). A simulation study of ridge and other regression "
          "estimators. Communications in Statistics A 5, 307–323.",
    "isotropic": "Dobriban, E. and Wager, S. (2018). High-dimensional asymptotics of prediction: "
                 "ridge regression and classification. Annals of Statistics 46, 247–279.",
    "reml": "Patterson, H. D. and Thompson, R. (1971). Recovery of inter-block information when "
            "block sizes are unequal. Biometrika 58, 545–554.",
    "reml_harville": "Harville, D. A. (1977). Maximum likelihood approaches to variance "
                     "component estimation and to related problems. J. Amer. Statist. Assoc. 72, "
                     "320–338.",
    "jackknife+": "Barber, R. F., Candès, E. J., Ramdas, A. and Tibshirani, R. J. (2021). "
                  "Predictive inference with the jackknife+. Annals of Statistics 49, 486–507.",
    "split": "Lei, J., G'Sell, M., Rinaldo, A., Tibshirani, R. J. and Wasserman, L. (2018). "
             "Distribution-free predictive inference for regression. J. Amer. Statist. Assoc. "
             "113, 1094–1111.",
    "min_norm": "Hastie, T., Montanari, A., Rosset, S. and Tibshirani, R. J. (2022). Surprises in "
                "high-dimensional ridgeless least squares interpolation. Annals of Statistics "
                "50, 949–986.",
    "ridge": "Hoerl, A. E. and Kennard, R. W. (1970). Ridge regression: biased estimation for "
             "nonorthogonal problems. Technometrics 12, 55–67.",
}
_REF_KEY = {"one-se": "one_se"}


def fmt(v, digits: int = 4) -> str:
    """The one number format of the report: ``digits`` significant digits (``n/a`` for None)."""
    if v is None:
        return "n/a"
    if isinstance(v, bool):
        return str(v)
    if isinstance(v, int):
        return str(v)
    v = float(v)
    if not math.isfinite(v):
        return "n/a"
    return f"{v:.{digits}g}"


def _first(v):
    """First target's value of a per-target list (or the value itself)."""
    while isinstance(v, (list, tuple)):
        if not v:
            return None
        v = v[0]
    return v


@dataclass(frozen=True)
class FigureRef:
    """A figure for the report: its name, caption, SVG text (inlined) and image file (markdown)."""

    name: str
    caption: str
    svg: str
    image: str
    target: str | None = None


# ------------------------------------------------------------------ numbers
def _chosen_rule(summary: dict) -> str:
    sel = {k: v for k, v in (summary.get("selected") or {}).items()
           if isinstance(v, dict) and v.get("lambda") is not None}
    rule = summary.get("reported") or summary.get("rule")
    if isinstance(rule, dict):
        rule = rule.get("name") or rule.get("rule")
    if isinstance(rule, str):
        key = rule.split("=")[0].replace("-", "_")
        for cand in (rule, key, key.replace("_", "-")):
            if cand in sel:
                return cand
    for rule in _PREFERENCE:
        if rule in sel:
            return rule
    real = [r for r in sel if r != "test"]
    if real:
        return real[0]
    raise ValueError("summary has no selected penalty")


def report_numbers(summary: dict) -> dict:
    """The derived quantities the report states, computed from the summary record itself.

    Returns a JSON-serializable dict (stored as ``summary["report"]``): the
    chosen ``rule``, its ``lambda``, ``df``, ``index``, ``fraction`` (norm of
    the coefficients at the choice over the min-norm norm, standardized scale),
    ``min_norm_choice`` (the rule chose λ → 0, the minimum-norm fit),
    ``criterion`` and ``criterion_value``, ``est_mse``/``est_se`` (the rule's own
    estimate when the selection record has one, else the criterion value with no
    SE), ``test_mse`` at the chosen penalty itself (``test_at``: ``"choice"``, or
    ``"grid"`` for the nearest grid penalty when the record has no error at the
    choice), ``test_kind`` (``"held-out"``, ``"reused"`` or ``"overlapping"``:
    test rows that are training rows), the grid's size and range (``n_lambdas``,
    ``lambda_min``, ``lambda_max``, ``df_min``, ``df_max``), and ``cv`` (the
    K-fold scheme, when cross-validation ran).
    """
    rule = _chosen_rule(summary)
    sel = summary["selected"][rule]
    lams = summary["lambdas"]
    dfs = summary["df"]
    idx = sel.get("index")
    if idx is None:
        # nearest grid penalty on the log scale (lambda = 0, the min-norm limit: the smallest)
        tiny = min([v for v in lams if v > 0], default=1.0) * 1e-300
        idx = min(range(len(lams)), key=lambda i: abs(math.log(max(lams[i], tiny))
                                                      - math.log(max(sel["lambda"], tiny))))
    norms = summary.get("coef_norm") or []
    mn_norm = _first((summary.get("min_norm") or {}).get("coef_norm"))
    fraction = _first(sel.get("fraction"))
    if fraction is None and norms and mn_norm:
        fraction = _first(norms[idx]) / mn_norm
    crit_key = {"gcv": "gcv", "loo": "loo_mse", "test": "test_mse"}.get(rule)
    crit_value = _first(sel.get("value"))
    if crit_value is None and crit_key and summary.get(crit_key) is not None:
        crit_value = _first(summary[crit_key][idx])
    est_mse = _first(sel.get("est_mse"))
    est_se = _first(sel.get("est_se"))
    sources = {"cv": "K-fold cross-validation at the chosen penalty",
               "loo": "exact leave-one-out at the chosen penalty",
               "gcv": "generalized cross-validation at the chosen penalty"}
    est_from = sources.get(sel.get("est_source"), "the selection rule's estimate") \
        if est_mse is not None else None
    cv = summary.get("cv") if isinstance(summary.get("cv"), dict) else None
    if est_mse is None and crit_value is not None and rule in sources:
        est_mse, est_from = crit_value, sources[rule]
        if rule == "cv" and cv and cv.get("se") is not None:
            est_se = _first(cv["se"][idx])
    at = sel.get("at_choice") or {}
    if est_mse is None:
        if at.get("loo_mse") is not None:
            est_mse, est_from = at["loo_mse"], "exact leave-one-out at the chosen penalty"
        elif summary.get("loo_mse") is not None:
            est_mse, est_from = (_first(summary["loo_mse"][idx]),
                                 "leave-one-out at the grid penalty nearest the choice")
    test = summary.get("test_mse")
    if at.get("test_mse") is not None:
        test_mse, test_at = at["test_mse"], "choice"
    elif test is not None:
        test_mse, test_at = _first(test[idx]), "grid"
    else:
        test_mse, test_at = None, None
    return {
        "rule": rule, "lambda": float(sel["lambda"]), "df": float(_first(sel["df"])),
        "index": int(idx), "fraction": None if fraction is None else float(fraction),
        "min_norm_choice": float(sel["lambda"]) == 0.0,
        "criterion": crit_key, "criterion_value": crit_value,
        "est_mse": est_mse, "est_se": est_se, "est_from": est_from,
        "test_mse": test_mse, "test_at": test_at, "test_kind": _test_kind(summary),
        "n_lambdas": len(lams), "lambda_min": min(lams), "lambda_max": max(lams),
        "df_min": min(dfs), "df_max": max(dfs),
        "cv": None if cv is None else {k: cv.get(k) for k in
                                       ("n_folds", "repeats", "scheme", "seed", "scaling")
                                       if k in cv},
    }


def _numbers(summary: dict) -> dict:
    return summary.get("report") or report_numbers(summary)


def _test_kind(summary: dict):
    """``None`` without a test set; ``"reused"`` when every test row is a training row,
    ``"overlapping"`` when some are, else ``"held-out"``."""
    n_test = summary.get("n_test") or 0
    if not n_test:
        return None
    shared = summary.get("test_shared_rows") or 0
    if shared >= n_test:
        return "reused"
    return "overlapping" if shared else "held-out"


def _test_phrase(summary: dict) -> str:
    """How the report names the test rows: never "held out" unless they are."""
    kind = _test_kind(summary)
    n = fmt(summary.get("n_test"))
    if kind == "reused":
        return (f"the {n} rows of the test file, which are all training rows (the training file "
                "given again): these are training errors, NOT held-out errors")
    if kind == "overlapping":
        return (f"{n} test rows, of which {fmt(summary.get('test_shared_rows'))} are also "
                "training rows: not a held-out estimate")
    return f"{n} held-out test rows, not used for fitting or selection"


def _weights_sentences(summary: dict) -> list:
    """Methods sentences for row weights, unpenalized columns and relative penalties."""
    out = []
    unpen = summary.get("unpenalized") or []
    if unpen:
        out.append(f"The column(s) {', '.join(map(str, unpen[:10]))}"
                   f"{' …' if len(unpen) > 10 else ''} were left unpenalized, like the "
                   "intercept (projected out of the factored design; the effective degrees of "
                   "freedom count them).")
    rel = summary.get("relative_penalty") or {}
    if rel:
        out.append("Relative penalties multiplied λ for "
                   + ", ".join(f"{k} (× {fmt(v)})" for k, v in rel.items()) + ".")
    if summary.get("weighted"):
        out.append("Rows were weighted: the loss is Σ wᵢ(yᵢ − b₀ − xᵢβ)², centering and scaling "
                   "use weighted means and SDs, and every error (training, GCV, leave-one-out, "
                   "K-fold, test) is Σ wᵢeᵢ²/Σ wᵢ, leave-one-out and K-fold from the weighted "
                   "refits without the rows left out.")
    return out


# ------------------------------------------------------------------ formulas
def convention_formula(summary: dict, form: str = "latex") -> str:
    """The penalty convention as a formula: ``form`` "latex" (Markdown, ``$…$``),
    "html" (MathML, rendered by browsers without scripts or fonts) or "text"."""
    std = bool(summary.get("standardize", True))
    scale = ("X column-centered and scaled to unit population SD" if std
             else "X column-centered")
    if form == "latex":
        return (r"$\min_{b_0,\beta}\ \lVert y - b_0\mathbf{1} - X\beta\rVert_2^2 + "
                r"\lambda\lVert\beta\rVert_2^2$ (" + scale + "; intercept $b_0$ unpenalized; "
                r"$\lambda$ = scikit-learn's `Ridge(alpha)`)")
    if form == "html":
        mrow = ("<math display=\"inline\"><mrow><munder><mo>min</mo><mrow><msub><mi>b</mi><mn>0</mn>"
                "</msub><mo>,</mo><mi>&#946;</mi></mrow></munder><msubsup><mrow><mo>&#8214;</mo>"
                "<mi>y</mi><mo>&#8722;</mo><msub><mi>b</mi><mn>0</mn></msub><mo>&#8722;</mo>"
                "<mi>X</mi><mi>&#946;</mi><mo>&#8214;</mo></mrow><mn>2</mn><mn>2</mn></msubsup>"
                "<mo>+</mo><mi>&#955;</mi><msubsup><mrow><mo>&#8214;</mo><mi>&#946;</mi>"
                "<mo>&#8214;</mo></mrow><mn>2</mn><mn>2</mn></msubsup></mrow></math>")
        return (f"{mrow} ({html.escape(scale)}; intercept b<sub>0</sub> unpenalized; "
                "&#955; = scikit-learn's <code>Ridge(alpha)</code>)")
    return ("minimize ||y - b0 - X beta||^2 + lambda ||beta||^2 (" + scale
            + "; intercept b0 unpenalized; lambda = scikit-learn's Ridge(alpha))")


# ------------------------------------------------------------------ text
def data_summary(summary: dict) -> list:
    """(label, value) rows of the data summary."""
    rows = [("samples n (training)", fmt(summary["n_samples"])),
            ("features p", fmt(summary["n_features"])),
            ("p/n", fmt(summary["p_over_n"])),
            ("numerical rank", f"{fmt(summary['rank'])} (tolerance {fmt(summary.get('rank_tol'))})"),
            ("condition number", fmt(summary["condition_number"]))]
    kind = _test_kind(summary)
    if kind == "held-out":
        rows.append(("held-out test rows", fmt(summary["n_test"])))
    elif kind is not None:
        rows.append(("test rows (NOT held out)",
                     f"{fmt(summary['n_test'])}, of which {fmt(summary.get('test_shared_rows'))} "
                     "are training rows"))
    const = summary.get("constant_features") or []
    rows.append(("constant columns (left out)", ", ".join(map(_md, const[:10]))
                 + (" …" if len(const) > 10 else "") if const else "none"))
    notes = summary.get("data_notes") or []
    rows.append(("data notes (missing, dropped, encoded columns; engine)",
                 "; ".join(map(str, notes)) if notes else "none reported"))
    rows.append(("scaling", "centered and standardized (population SD)" if summary.get("standardize")
                 else "centered only"))
    unpen = summary.get("unpenalized") or []
    if unpen:
        rows.append(("unpenalized columns (fitted like the intercept, counted in df)",
                     ", ".join(map(_md, unpen[:20])) + (" …" if len(unpen) > 20 else "")))
    rel = summary.get("relative_penalty") or {}
    if rel:
        rows.append(("relative penalties (W x lambda)",
                     ", ".join(f"{_md(k)}: {fmt(v)}" for k, v in rel.items())))
    if summary.get("weighted"):
        rows.append(("row weights", "yes: centering, scaling and every error are weighted "
                     "(sum of w e^2 / sum of w)"))
    rows.append(("solver", f"{summary.get('solver')} ({summary.get('solver_reason')})"))
    if summary.get("source"):
        rows.append(("source", str(summary["source"])))
    if summary.get("targets"):
        rows.append(("targets", ", ".join(map(str, summary["targets"]))
                     + " (each has its own section, rules table and figure below)"))
    elif summary.get("target"):
        rows.append(("target", str(summary["target"])))
    return rows


def _where(g: float) -> str:
    if g < 0.5:
        return (f"well below the interpolation threshold (p/n = {fmt(g)}): least squares is "
                "determined, and shrinkage mainly trades a little bias for less variance")
    if g < 0.9:
        return (f"approaching the interpolation threshold (p/n = {fmt(g)}): the smallest "
                "singular values are shrinking and the least-squares variance is growing")
    if g <= 1.1:
        return (f"at the interpolation threshold (p/n = {fmt(g)}): the smallest singular values "
                "are near zero, so the unpenalized fit's error is at its most unstable")
    if g < 3:
        return (f"past the interpolation threshold (p/n = {fmt(g)}): there are more features "
                "than samples, least squares is not unique, and the min-norm fit interpolates")
    return (f"far past the interpolation threshold (p/n = {fmt(g)}): many more features than "
            "samples; the least-squares problem has infinitely many exact fits")


def diagnosis(summary: dict) -> list:
    """Plain-words statements, each generated from the numbers it quotes."""
    n, g = summary["n_samples"], summary["p_over_n"]
    rank, cond = summary["rank"], summary["condition_number"]
    out = [f"The data sit {_where(g)}."]
    c = ("well conditioned" if cond < 1e2 else "moderately ill-conditioned" if cond < 1e6
         else "ill-conditioned" if cond < 1e10 else "severely ill-conditioned")
    out.append(f"The centered design is {c}: condition number {fmt(cond)} over its {fmt(rank)} "
               "non-zero singular values (the spectrum figure shows how they spread).")
    mn = summary.get("min_norm") or {}
    tr0, te0, loo0 = (_first(mn.get(k)) for k in ("train_mse", "test_mse", "loo_mse"))
    m = n - int(summary.get("n_unpenalized", 1 if summary.get("fit_intercept", True) else 0))
    if rank >= m:
        what = (f"interpolates the training data (training MSE {fmt(tr0)}, zero up to rounding), "
                "so its training error says nothing about its accuracy")
    else:
        what = (f"is the least-squares fit on the {fmt(rank)}-dimensional column span "
                f"(training MSE {fmt(tr0)})")
    out.append(f"The minimum-norm fit (λ → 0) {what}.")
    r = _numbers(summary)
    if r.get("min_norm_choice"):
        out.append("The reported rule chose λ → 0 itself: the reported model IS the "
                   "minimum-norm fit, with no shrinkage.")
    elif r.get("est_mse") is not None and loo0 is not None:
        better = r["est_mse"] < loo0
        out.append(f"Shrinkage {'lowers' if better else 'does not lower'} the estimated error: "
                   f"{fmt(r['est_mse'])} at the chosen penalty ({r['est_from']}) against a "
                   f"leave-one-out MSE of {fmt(loo0)} for the minimum-norm fit.")
    if te0 is not None and r.get("test_mse") is not None:
        kind = r.get("test_kind")
        label = "test MSE" if kind == "held-out" else "error on the reused training rows"
        better = r["test_mse"] < te0
        out.append(f"On the test rows the chosen penalty is {'better' if better else 'not better'}"
                   f" than the minimum-norm fit: {label} {fmt(r['test_mse'])} against {fmt(te0)}"
                   + ("" if kind == "held-out" else " (the test rows are training rows: not a "
                      "held-out comparison)") + ".")
    return out


def rules_table(summary: dict):
    """``(header, groups)``: every rule in the record, grouped by family.

    ``groups`` is a list of ``(family heading, rows)`` in the order of
    :data:`paths.present.plot.RULE_FAMILIES`, then the λ → 0 limit; each row
    holds formatted strings.  The test column is the error at the rule's own
    penalty, labelled as training rows when the test rows are not held out.
    """
    from paths.present.plot import RULE_FAMILIES

    kind = _test_kind(summary)
    test_col = {"held-out": "test MSE at λ", "reused": "MSE on the reused training rows at λ",
                "overlapping": "MSE on the (partly training) test rows at λ"}.get(kind,
                                                                                  "test MSE at λ")
    header = ["rule", "λ", "df", "‖β_λ‖ / ‖β_0‖", "its error estimate", "± SE", test_col]
    chosen = _numbers(summary)["rule"]
    by_family = {}
    for rule, sel in (summary.get("selected") or {}).items():
        if not isinstance(sel, dict):
            continue
        name = SHORT.get(rule, rule) + (" (reported)" if rule == chosen else "")
        if sel.get("lambda") is None:
            row = [name, "not run", "", "", "", "", ""]
        else:
            at = sel.get("at_choice") or {}
            est = _first(sel.get("est_mse"))
            if est is None:
                est = _first(sel.get("value"))
            lam = "0 (min-norm)" if sel["lambda"] == 0 else fmt(sel.get("lambda"))
            row = [name, lam, fmt(_first(sel.get("df"))), fmt(_first(sel.get("fraction"))),
                   fmt(est), fmt(_first(sel.get("est_se"))), fmt(at.get("test_mse"))]
        by_family.setdefault(_family_of(rule), []).append(row)
    order = [f for f, _ in RULE_FAMILIES] + ["other"]
    groups = [(f, by_family[f]) for f in order if f in by_family]
    mn = summary.get("min_norm") or {}
    groups.append(("limit λ → 0", [["minimum-norm fit", "0", fmt(mn.get("df")), "1",
                                    fmt(_first(mn.get("loo_mse"))) + " (LOO)", "",
                                    fmt(_first(mn.get("test_mse")))]]))
    return header, groups


def methods_paragraph(summary: dict, form: str = "text") -> str:
    """A ready methods paragraph, every number from the summary record.

    ``form``: ``"latex"`` (Markdown, the penalty as a LaTeX formula), ``"html"``
    (escaped HTML with the formula in MathML) or ``"text"``.
    """
    if form == "html":
        token = "\x00FORMULA\x00"
        text = _methods_text(summary, token)
        return html.escape(text).replace(html.escape(token), convention_formula(summary, "html"))
    return _methods_text(summary, convention_formula(summary, form))


def _methods_text(summary: dict, formula: str) -> str:
    r = _numbers(summary)
    rule = r["rule"]
    std = ("centered and scaled to unit population standard deviation"
           if summary.get("standardize") else "centered")
    parts = [
        f"We fitted ridge regression (Hoerl & Kennard 1970) to n = {fmt(summary['n_samples'])} "
        f"samples and p = {fmt(summary['n_features'])} features (p/n = "
        f"{fmt(summary['p_over_n'])}), with the features {std} and an unpenalized intercept: "
        f"{formula}.",
        f"The whole path was computed from one singular value decomposition of the centered "
        f"design (numerical rank {fmt(summary['rank'])}, condition number "
        f"{fmt(summary['condition_number'])}) over a grid of {fmt(r['n_lambdas'])} penalties, "
        f"log-spaced from λ = {fmt(r['lambda_min'])} to {fmt(r['lambda_max'])} "
        f"(effective degrees of freedom {fmt(r['df_min'])} to {fmt(r['df_max'])}, intercept "
        "included), with the λ → 0 limit (the minimum-norm least-squares fit; Hastie et al. "
        "2022) computed exactly from the same factors.",
    ]
    parts += _weights_sentences(summary)
    cv = r.get("cv")
    scheme = f", with {_cv_sentence(cv)}" if cv and rule in ("cv", "one_se", "one-se") else ""
    parts.append(f"The penalty was chosen by {RULE_NAMES.get(rule, rule)}{scheme}.")
    if r.get("min_norm_choice"):
        parts.append("The rule chose λ → 0: the reported model is the minimum-norm least-squares "
                     f"fit ({fmt(r['df'])} effective degrees of freedom), not a shrunken ridge fit.")
    else:
        parts.append(f"It chose λ = {fmt(r['lambda'])}, with {fmt(r['df'])} effective degrees of "
                     "freedom" + (f" and a coefficient norm {fmt(r['fraction'])} times that of the "
                                  "minimum-norm fit (standardized scale)"
                                  if r.get("fraction") is not None else "") + ".")
    if r.get("est_mse") is not None:
        se = (f" (standard error {fmt(r['est_se'])})" if r.get("est_se") is not None
              else " (no standard error is available for this estimate)")
        parts.append(f"The estimated prediction error at this penalty is {fmt(r['est_mse'])}"
                     f"{se}, from {r['est_from']}; it is optimistic, because the penalty was "
                     "chosen on the same data.")
    if r.get("test_mse") is not None and summary.get("n_test"):
        where = ("at the chosen penalty itself" if r.get("test_at") == "choice"
                 else "at the grid penalty nearest the choice")
        parts.append(f"On {_test_phrase(summary)}, the mean squared error {where} was "
                     f"{fmt(r['test_mse'])}.")
    vers = summary.get("versions") or {}
    if vers.get("paths"):
        parts.append(f"Computations used paths {vers['paths']} with numpy {vers.get('numpy')} and "
                     f"scipy {vers.get('scipy')}.")
    return " ".join(parts)


def intervals_section(summary: dict) -> list:
    """Sentences on the prediction intervals of the run (empty without ``--intervals``):
    the method, its guarantee with its assumption, and what the test rows showed."""
    rec = summary.get("intervals")
    if not rec:
        return []
    names = {"jackknife+": "jackknife+ (Barber, Candès, Ramdas & Tibshirani 2021)",
             "cv+": f"CV+ with {rec.get('n_folds')} folds (Barber et al. 2021)",
             "split": f"split conformal with {rec.get('n_calibration')} calibration rows "
                      "(Lei et al. 2018)"}
    cov, wid, lam = rec["coverage"], rec["mean_width"], rec["lambda"]
    many = isinstance(cov, list)
    show = (lambda v: ", ".join(fmt(x) for x in v)) if many else fmt  # noqa: E731
    return [
        f"Prediction intervals at level {fmt(rec['level'])} by "
        f"{names.get(rec['method'], rec['method'])}, at the reported penalty lambda = "
        f"{show(lam)}, from the one factorization (no refits).",
        f"Guarantee: {rec['guarantee']}; exchangeable means the new rows come from the same "
        "population as the training rows, drawn the same way. It does not hold for rows from "
        "another site, time or instrument.",
        f"On the {fmt(rec['n_test'])} test rows, {show(cov)} of the responses fell inside their "
        f"interval (mean width {show(wid)}); intervals.csv lists every row.",
    ]


def cautions(summary: dict) -> list:
    out = [
        "A penalty chosen on the data makes the chosen model's in-sample criteria (GCV, "
        "leave-one-out, K-fold CV at the minimum) optimistic; the minimum of a noisy curve is "
        "biased low.",
        "An honest error estimate needs a held-out test set that played no part in fitting or "
        "selection, or nested cross-validation.",
        "Results that feed decisions about people — clinical, credit, safety — need review by "
        "domain experts, checks for bias across groups, and validation on data from the setting "
        "where they will be used.",
    ]
    kind = _test_kind(summary)
    if kind in ("reused", "overlapping"):
        out.insert(0, f"WARNING: the test rows are not held out — {_test_phrase(summary)}. "
                      "Every 'test' error in this report measures fit to training rows.")
    if not summary.get("n_test"):
        out.insert(2, "This run had no test set: every error in this report is estimated from the "
                   "training rows.")
    if summary.get("synthetic"):
        out.append("The data in this run are synthetic (generated by seeded code in paths).")
    return out


def reproducibility(summary: dict) -> list:
    """(label, value) rows: command line, versions, input hashes, seeds."""
    rows = [("command line", str(summary.get("command_line", "n/a")))]
    for k, v in (summary.get("versions") or {}).items():
        rows.append((f"version: {k}", str(v)))
    sha = summary.get("input_sha256") or {}
    if sha:
        for k, v in sha.items():
            rows.append((f"SHA-256 of {k}", str(v)))
    else:
        rows.append(("input", "generated in memory (no input file)"))
    seeds = []
    split = summary.get("split") or {}
    if isinstance(split, dict) and split.get("seed") is not None:
        seeds.append(f"holdout split: {split['seed']}")
    cv = summary.get("cv") if isinstance(summary.get("cv"), dict) else {}
    if cv.get("seed") is not None:
        seeds.append(f"cross-validation folds: {cv['seed']}")
    if "peak" in summary and summary.get("seed") is not None:
        seeds.append(f"sweep orders / draws: {summary['seed']}")
    gen = summary.get("generator") or {}
    if isinstance(gen, dict) and gen.get("seed") is not None:
        seeds.append(f"data generator: {gen['seed']}")
    rows.append(("seeds", "; ".join(seeds) if seeds else "none used"))
    return rows


# ------------------------------------------------------------------ rendering
def _title(summary) -> str:
    return summary.get("title") or f"Ridge path report: {summary.get('source') or 'data'}"


def render_markdown(summary: dict, figures=()) -> str:
    """The report as Markdown (figures linked as image files next to it; formulas in LaTeX).

    Every string of ``summary`` (names from the data) is escaped first
    (:func:`paths.present.markup.md_safe`): no raw HTML, links or code spans.
    """
    summary = md_safe(summary)
    L = [f"# {_md(_title(summary))}", ""]
    if summary.get("description"):
        L += [str(summary["description"]), ""]
    L += ["## Data", "", "| quantity | value |", "|---|---|"]
    L += [f"| {a} | {_md(b)} |" for a, b in data_summary(summary)]
    said, head, rows = targets_section(summary)
    if said:
        L += ["", "## All targets", ""] + [f"- {s}" for s in said]
        L += ["", "| " + " | ".join(head) + " |", "|" + "---|" * len(head)]
        L += ["| " + " | ".join(map(_md, r)) + " |" for r in rows]
    multi = len(summary.get("targets") or []) > 1
    for name, view in _blocks(summary):
        h2 = "###" if multi else "##"
        if multi:
            L += ["", f"## Target: {_md(name)}"]
        L += ["", f"{h2} Diagnosis", ""] + [f"- {s}" for s in diagnosis(view)]
        L += ["", f"{h2} Selection rules", ""] + _md_rules(view)
        own = [f for f in figures if getattr(f, "target", None) == name and multi]
        if own:
            L += ["", f"{h2} Figures", ""] + _md_figures(own)
        L += ["", f"{h2} Methods paragraph", "", methods_paragraph(view, "latex")]
    if summary.get("intervals"):
        L += ["", "## Prediction intervals", ""] + [f"- {s}" for s in intervals_section(summary)]
    shared = [f for f in figures if not multi or getattr(f, "target", None) is None]
    if shared:
        L += ["", "## Figures", ""] + _md_figures(shared)
    L += ["", "## Cautions", ""] + [f"- {c}" for c in cautions(summary)]
    L += ["", "## References", ""] + [f"- {ref}" for ref in references(summary)]
    L += ["", "## Reproducibility", "", "| item | value |", "|---|---|"]
    L += [f"| {a} | `{_md(b)}` |" for a, b in reproducibility(summary)]
    return "\n".join(L) + "\n"


def _md(s) -> str:
    """A table cell: pipes escaped once (strings of the summary are already escaped)."""
    return re.sub(r"(?<!\\)\|", r"\\|", str(s)).replace("\n", " ")


_CSS = """
body{font-family:system-ui,-apple-system,'Segoe UI',Roboto,'DejaVu Sans',sans-serif;max-width:60rem;
margin:2rem auto;padding:0 1rem;color:#111;line-height:1.45;background:#fff}
h1{font-size:1.6rem}h2{font-size:1.2rem;border-bottom:1px solid #ddd;padding-bottom:.2rem;margin-top:2rem}
table{border-collapse:collapse;margin:.5rem 0;font-size:.9rem}
td,th{border:1px solid #ccc;padding:.25rem .5rem;text-align:left;vertical-align:top}
th{background:#f3f3f3}td.num{text-align:right;font-variant-numeric:tabular-nums}
figure{margin:1.5rem 0;padding:0}figure svg{width:100%;max-width:40rem;height:auto;display:block}
figcaption{font-size:.9rem;color:#333;margin-top:.3rem}
.methods{background:#f7f7f2;border-left:4px solid #0072B2;padding:.6rem 1rem}
.caution{border-left:4px solid #D55E00;padding-left:1rem}
.explorer{border:1px solid #ccc;padding:.5rem 1rem;background:#fbfbfb}
.explorer button{margin:0 .3rem .3rem 0;font:inherit;padding:.1rem .5rem}
.explorer output{font-variant-numeric:tabular-nums}
tr.family th{background:#fff;border:none;border-bottom:1px solid #999;font-style:italic;
padding-top:.6rem}h2.target{border-bottom:3px solid #0072B2}math{font-size:1.05em}
code{font-size:.85rem;word-break:break-all}
"""


def _figures_html(figures, e, heading: str = "<h2>Figures</h2>") -> list:
    """The report's "Figures" section: each SVG inlined with its caption (empty without figures)."""
    if not figures:
        return []
    return [heading] + [
        f'<figure id="fig-{e(f.name)}">{_svg_inline(f.svg, f.name)}'
        f"<figcaption><b>{e(f.name)}.</b> {e(f.caption)}</figcaption></figure>"
        for f in figures]


def _svg_inline(svg: str, name: str) -> str:
    svg = re.sub(r"<\?xml[^>]*\?>", "", svg)
    svg = re.sub(r"<!DOCTYPE[^>]*>", "", svg, flags=re.S)
    svg = re.sub(r"<!--.*?-->", "", svg, count=1, flags=re.S)
    return svg.replace("<svg ", f'<svg data-figure="{html.escape(name)}" role="img" '
                       f'aria-label="{html.escape(name)}" ', 1).strip()


def render_html(summary: dict, figures=(), *, interactive: str = "") -> str:
    """The report as one self-contained HTML page (inline SVG figures, inline CSS, MathML
    formulas; ``interactive``: an optional self-contained explorer section)."""
    e = html.escape

    def table(rows, header=None, cls=""):
        out = ['<table%s>' % (f' class="{cls}"' if cls else "")]
        if header:
            out.append("<tr>" + "".join(f"<th>{e(h)}</th>" for h in header) + "</tr>")
        for r in rows:
            out.append("<tr>" + "".join(f"<td>{e(str(c))}</td>" for c in r) + "</tr>")
        out.append("</table>")
        return "\n".join(out)

    B = ["<!DOCTYPE html>", '<html lang="en"><head><meta charset="utf-8">',
         '<meta name="viewport" content="width=device-width, initial-scale=1">',
         f"<title>{e(_title(summary))}</title>", f"<style>{_CSS}</style></head><body>",
         f"<h1>{e(_title(summary))}</h1>"]
    if summary.get("description"):
        B.append(f"<p>{e(str(summary['description']))}</p>")
    B += ["<h2>Data</h2>", table(data_summary(summary), ["quantity", "value"])]
    said, head, rows = targets_section(summary)
    if said:
        B += ['<h2 id="all-targets">All targets</h2>', "<ul>"]
        B += [f"<li>{e(s)}</li>" for s in said] + ["</ul>", table(rows, head)]
    multi = len(summary.get("targets") or []) > 1
    for name, view in _blocks(summary):
        h = "h3" if multi else "h2"
        if multi:
            B.append(f'<h2 class="target">Target: {e(str(name))}</h2>')
        B += [f"<{h}>Diagnosis</{h}>", "<ul>"] + [f"<li>{e(s)}</li>" for s in diagnosis(view)]
        B += ["</ul>", f"<{h}>Selection rules</{h}>", _html_rules(view, e)]
        own = [f for f in figures if getattr(f, "target", None) == name and multi]
        if own:
            B += _figures_html(own, e, heading=f"<{h}>Figures</{h}>")
        B += [f"<{h}>Methods paragraph</{h}>",
              f'<p class="methods">{methods_paragraph(view, "html")}</p>']
    if summary.get("intervals"):
        B += ["<h2>Prediction intervals</h2>", "<ul>"] + [
            f"<li>{e(s)}</li>" for s in intervals_section(summary)] + ["</ul>"]
    if interactive:
        B.append(interactive)
    B += _figures_html([f for f in figures if not multi or getattr(f, "target", None) is None], e)
    B += ["<h2>Cautions</h2>", '<ul class="caution">']
    B += [f"<li>{e(c)}</li>" for c in cautions(summary)] + ["</ul>"]
    B += ["<h2>References</h2>", '<ol class="refs">']
    B += [f"<li>{e(r)}</li>" for r in references(summary)] + ["</ol>"]
    B += ["<h2>Reproducibility</h2>",
          table([(a, b) for a, b in reproducibility(summary)], ["item", "value"])]
    B.append("</body></html>")
    return "\n".join(B) + "\n"


def write_report(out_dir, summary: dict, figures=(), *, interactive: str = "") -> list:
    """Write ``report.md`` and ``report.html`` into ``out_dir`` (atomically); returns the paths.

    ``interactive``: the explorer section for the HTML page
    (:func:`paths.present.interactive.explorer_section`)."""
    out = Path(out_dir)
    return [write_text(out / "report.md", render_markdown(summary, figures)),
            write_text(out / "report.html", render_html(summary, figures,
                                                        interactive=interactive))]


# ------------------------------------------------------------------ threshold sweeps
def _minmax(v):
    vals = [x for x in (v or []) if x is not None]
    return (min(vals), max(vals)) if vals else (None, None)


def threshold_data_summary(summary: dict) -> list:
    """(label, value) rows for a sweep's ``threshold.json`` record."""
    lo, hi = _minmax(summary.get("ratio"))
    plo, phi = _minmax(summary.get("n_features"))
    rows = [("sweep over", str(summary.get("over"))), ("nesting order", str(summary.get("order"))),
            ("training rows n", fmt(summary.get("n_train"))), ("test rows", fmt(summary.get("n_test"))),
            ("features available", fmt(summary.get("n_features_total"))),
            ("points x repeats", f"{fmt(summary.get('points'))} x {fmt(summary.get('repeats'))}"),
            ("features in the model p'", f"{fmt(plo)} to {fmt(phi)}"),
            ("ratio p'/n", f"{fmt(lo)} to {fmt(hi)}"),
            ("noise variance", f"{fmt(summary.get('noise_variance'))} "
                               f"({summary.get('noise_variance_estimator')})"),
            ("signal variance", f"{fmt(summary.get('signal_variance'))} "
                                f"({summary.get('signal_variance_estimator')})")]
    if summary.get("source"):
        rows.append(("source", str(summary["source"])))
    return rows


def threshold_diagnosis(summary: dict) -> list:
    peak = summary.get("peak") or {}
    best = summary.get("best_ridge") or {}
    out = [f"The min-norm (least-squares) test error peaks at p'/n = {fmt(peak.get('ratio'))} "
           f"({fmt(peak.get('n_features'))} features, {fmt(peak.get('n_train'))} training rows) "
           f"with mean test MSE {fmt(peak.get('test_mse'))}: the interpolation threshold, where "
           "the smallest singular value of the design collapses toward zero."]
    if best:
        label = {"ridge_gcv": "ridge at the GCV penalty",
                 "ridge_fixed": "ridge at the fixed penalty"}.get(best.get("method"),
                                                                  best.get("method"))
        out.append(f"The best usable ridge curve ({label}) reaches a mean test MSE of "
                   f"{fmt(summary.get('best_ridge_test_mse'))} (at p'/n = {fmt(best.get('ratio'))}).")
        spike = _spike_sentence(summary)
        if spike:
            out.append(spike)
    th = summary.get("theory") or {}
    if th:
        out.append(("The isotropic theory curves (Hastie et al. 2022; Dobriban & Wager 2018) use "
                    f"sigma^2 and r^2 from {th.get('source')}" + (f"; {th.get('note')}"
                                                                  if th.get("note") else "")
                    + "." + ("" if th.get("applies", True) else
                             " They are not expected to describe this sweep.")))
    if summary.get("best_oracle_ridge_test_mse") is not None:
        out.append(f"The oracle ridge (penalty chosen on the test rows, not a usable rule) "
                   f"bounds what tuning can achieve: {fmt(summary['best_oracle_ridge_test_mse'])}.")
    return out


def _spike_sentence(summary: dict) -> str:
    """What the tuned (GCV) ridge curve does at the min-norm peak, from the curves' numbers.

    "removes": at the peak ratio its mean test MSE is within 1.5 times its own median over the
    sweep; "reduces": below half the min-norm peak but above that; otherwise "does not remove".
    """
    peak = summary.get("peak") or {}
    ratios = summary.get("ratio") or []
    curve = (((summary.get("curves") or {}).get("ridge_gcv") or {}).get("test_mse") or {})
    mean = curve.get("mean") or []
    if peak.get("ratio") is None or not mean or peak["ratio"] not in ratios:
        return ""
    at = mean[ratios.index(peak["ratio"])]
    vals = sorted(v for v in mean if v is not None)
    if at is None or not vals:
        return ""
    med = vals[len(vals) // 2]
    where = f"at the min-norm peak (p'/n = {fmt(peak['ratio'])})"
    if at <= 1.5 * med:
        verdict = "removes the spike"
    elif at < 0.5 * peak["test_mse"]:
        verdict = "reduces the spike but does not remove it"
    else:
        verdict = "does not remove the spike"
    return (f"Ridge at the GCV penalty {verdict}: {where} its mean test MSE is {fmt(at)}, "
            f"against {fmt(peak['test_mse'])} for the min-norm fit and a median of {fmt(med)} "
            "over the sweep.")


def threshold_methods(summary: dict) -> str:
    plo, phi = _minmax(summary.get("n_features"))
    lo, hi = _minmax(summary.get("ratio"))
    over = summary.get("over")
    grow = (f"the number of features p' from {fmt(plo)} to {fmt(phi)}" if over == "features"
            else f"the number of training rows from {fmt(min(summary.get('n_train_points') or [0]))} "
                 f"to {fmt(max(summary.get('n_train_points') or [0]))}")
    parts = [
        f"We swept {grow} (ratio p'/n from {fmt(lo)} to {fmt(hi)}, {fmt(summary.get('points'))} "
        f"points, {summary.get('order')} order, {_repeats(summary.get('repeats'))}, seed "
        f"{fmt(summary.get('seed'))}) with {fmt(summary.get('n_train'))} training and "
        f"{fmt(summary.get('n_test'))} test rows.",
        "At every point we fitted the minimum-norm least-squares solution, ridge at a fixed "
        f"penalty ({summary.get('ridge_fixed_rule')}), ridge at the penalty minimizing GCV "
        f"({summary.get('ridge_gcv_grid')}) and, as an oracle bound, ridge at the penalty best on "
        "the test rows, each from one factorization of that point's design. Penalty convention: "
        "minimize ||y - b0 - X beta||^2 + lambda ||beta||^2 on the centered"
        + (", standardized" if summary.get("standardize", True) else "")
        + " design, intercept unpenalized.",
        f"Bands are the {summary.get('band')}.",
    ]
    th = summary.get("theory")
    if th:
        parts.append(f"Theory curves use noise variance {fmt(summary.get('noise_variance'))} and "
                     f"signal variance {fmt(summary.get('signal_variance'))} "
                     f"({summary.get('noise_variance_estimator')}).")
    return " ".join(parts)


def render_threshold_html(summary: dict, figures=()) -> str:
    """Self-contained HTML report of a threshold sweep (every number from ``threshold.json``)."""
    e = html.escape

    def table(rows, header):
        return "\n".join(["<table>", "<tr>" + "".join(f"<th>{e(h)}</th>" for h in header) + "</tr>"]
                         + ["<tr>" + "".join(f"<td>{e(str(c))}</td>" for c in r) + "</tr>"
                            for r in rows] + ["</table>"])

    title = summary.get("title") or "Interpolation threshold report"
    B = ["<!DOCTYPE html>", '<html lang="en"><head><meta charset="utf-8">',
         '<meta name="viewport" content="width=device-width, initial-scale=1">',
         f"<title>{e(title)}</title>", f"<style>{_CSS}</style></head><body>", f"<h1>{e(title)}</h1>"]
    if summary.get("description"):
        B.append(f"<p>{e(str(summary['description']))}</p>")
    B += ["<h2>Sweep</h2>", table(threshold_data_summary(summary), ["quantity", "value"]),
          "<h2>Diagnosis</h2>", "<ul>"] + [f"<li>{e(s)}</li>" for s in threshold_diagnosis(summary)]
    B.append("</ul>")
    B += _figures_html(figures, e)
    B += ["<h2>Methods paragraph</h2>", f'<p class="methods">{e(threshold_methods(summary))}</p>',
          "<h2>Cautions</h2>", '<ul class="caution">']
    B += [f"<li>{e(c)}</li>" for c in cautions({"n_test": summary.get("n_test"),
                                                 "synthetic": summary.get("synthetic")})]
    B += ["</ul>", "<h2>Reproducibility</h2>",
          table(reproducibility(summary), ["item", "value"]), "</body></html>"]
    return "\n".join(B) + "\n"


def render_threshold_markdown(summary: dict, figures=()) -> str:
    summary = md_safe(summary)  # names from the data are text, never markup
    title = summary.get("title") or "Interpolation threshold report"
    L = [f"# {title}", ""]
    if summary.get("description"):
        L += [str(summary["description"]), ""]
    L += ["## Sweep", "", "| quantity | value |", "|---|---|"]
    L += [f"| {a} | {_md(b)} |" for a, b in threshold_data_summary(summary)]
    L += ["", "## Diagnosis", ""] + [f"- {s}" for s in threshold_diagnosis(summary)]
    if figures:
        L += ["", "## Figures", ""]
        for f in figures:
            L += [f"![{f.name}]({f.image})", "", f"*{md_escape(f.caption)}*", ""]
    L += ["", "## Methods paragraph", "", threshold_methods(summary), "", "## Cautions", ""]
    L += [f"- {c}" for c in cautions({"n_test": summary.get("n_test"),
                                      "synthetic": summary.get("synthetic")})]
    L += ["", "## Reproducibility", "", "| item | value |", "|---|---|"]
    L += [f"| {a} | `{_md(b)}` |" for a, b in reproducibility(summary)]
    return "\n".join(L) + "\n"


def figure_refs(panels_files, targets=None) -> list:
    """``[(Panel, files), ...]`` from :func:`paths.figures.save_figure` -> FigureRefs (SVG read
    back); ``targets`` names the target each panel belongs to (None: shared)."""
    refs = []
    for k, (panel, files) in enumerate(panels_files):
        svg = next((f for f in files if f.suffix == ".svg"), None)
        img = next((f for f in files if f.suffix in (".png", ".svg")), None)
        text = svg.read_text(encoding="utf-8") if svg is not None else _svg_of(panel)
        refs.append(FigureRef(name=panel.name, caption=panel.caption, svg=text,
                              image=img.name if img is not None else "",
                              target=None if targets is None else targets[k]))
    return refs


def _svg_of(panel) -> str:
    import io as _io

    import matplotlib as mpl

    buf = _io.StringIO()
    with mpl.rc_context(panel.rc):
        panel.figure.savefig(buf, format="svg", metadata={"Date": None})
    return buf.getvalue()


def _report_progress(progress, done: int) -> None:
    if progress is not None:
        progress("report", done, 1)


def write_threshold_outputs(result, summary: dict, out_dir, *, formats=("svg",),
                            width: str = "single", report: bool = True, progress=None) -> list:
    """The threshold figure (+ CSV) and, with ``report``, ``report.md``/``report.html``.

    ``progress(stage, done, total)`` hears stages "figures" (per figure) and "report".
    """
    from paths.present.figures import save_figure, threshold_figure

    out = Path(out_dir)
    if progress is not None:
        progress("figures", 0, 1)
    panel = threshold_figure(result, width=width)
    files = save_figure(panel, out, formats=formats) if formats else []  # --format none
    if progress is not None:
        progress("figures", 1, 1)
    written = list(files)
    if report:
        _report_progress(progress, 0)
        refs = figure_refs([(panel, files)])
        written += [write_text(out / "report.md", render_threshold_markdown(summary, refs)),
                    write_text(out / "report.html", render_threshold_html(summary, refs))]
        _report_progress(progress, 1)
    panel.figure.clear()
    return written


def write_explore_outputs(result, summary: dict, out_dir, *, cv=None, formats=("svg",),
                          width: str = "single", x: str = "df",
                          report: bool = True, progress=None) -> list:
    """The path figure of each target and the spectrum figure (+ their CSVs) and, with
    ``report``, the report files.

    ``summary`` must already hold ``summary["report"]`` (:func:`report_numbers`),
    as written to ``summary.json``; the figures mark every rule of
    ``summary["selected"]`` (of ``summary["by_target"]`` per target) and draw
    K-fold CV (``cv``, a :class:`paths.cv.CVResult`) when given.  With several
    targets the path figures are ``fig-path-1``, ``fig-path-2``, … in target order.
    ``progress(stage, done, total)`` hears stages "figures" (per figure) and "report".
    """
    from paths.present.figures import (path_figure, reml_figure, save_figure, spectrum_figure,
                                       targets_figure)
    from paths.present.summary import target_choices

    out = Path(out_dir)
    nums = summary.get("report") or report_numbers(summary)
    names = summary.get("targets") or [None]
    reml = nums["rule"] == "reml" and result.factorization.u.shape[0] > 0
    if progress is not None:
        progress("figures", 0, min(len(names), MAX_TARGET_SECTIONS) + int(len(names) > 1)
                 + 1 + int(reml))
    panels, owners = [], []
    if len(names) > 1:  # every target at once, in a figure of fixed size
        panels.append(targets_figure(target_choices(summary), reported=nums["rule"],
                                     standardize=summary.get("standardize", True), width=width))
        owners.append(None)
    for j, name in enumerate(names[:MAX_TARGET_SECTIONS]):
        view = summary if name is None else target_view(summary, j)
        selected = {k: v for k, v in (view.get("selected") or {}).items()
                    if isinstance(v, dict) and v.get("lambda") is not None}
        panel = path_figure(result, selected=selected, cv=cv, x=x, width=width,
                            reported=nums["rule"], target=j,
                            name="fig-path" if name is None else f"fig-path-{j + 1}")
        if name is not None:
            panel = replace(panel, caption=f"Target {name}. " + panel.caption)
            panel.artists["a"].ax.set_title(f"target: {name}", loc="right", fontsize=7)
        panels.append(panel)
        owners.append(name)
    chosen = {nums["rule"]: summary["selected"][nums["rule"]]}
    panels.append(spectrum_figure(result, selected=chosen, width=width))
    owners.append(None)
    if reml:
        panels.append(reml_figure(result, width=width))  # the profile behind the choice
        owners.append(None)
    written, pairs = [], []
    for k, panel in enumerate(panels):
        files = save_figure(panel, out, formats=formats) if formats else []  # --format none
        written += files
        pairs.append((panel, files))
        if progress is not None:
            progress("figures", k + 1, len(panels))
    if report:
        from paths.present.interactive import explorer_section

        _report_progress(progress, 0)
        refs = figure_refs(pairs, owners)
        written += write_report(out, summary, refs,
                                interactive=explorer_section(result, summary))
        _report_progress(progress, 1)
    for panel in panels:
        panel.figure.clear()
    return written


def target_view(summary: dict, j: int) -> dict:
    """The record as seen for target ``j`` of a multi-target run: per-penalty arrays cut to
    that target's column, its own selections and min-norm errors, its own ``report``."""
    names = summary.get("targets") or []
    if not names:
        return summary
    name = names[j]
    view = {k: v for k, v in summary.items() if k not in ("targets", "by_target", "report")}
    for key in ("train_mse", "gcv", "loo_mse", "test_mse", "coef_norm"):
        v = summary.get(key)
        if isinstance(v, list) and v and isinstance(v[0], list):
            view[key] = [row[j] for row in v]
    own = (summary.get("by_target") or {}).get(name) or {}
    view["selected"] = own.get("selected") or summary.get("selected")
    view["min_norm"] = own.get("min_norm") or summary.get("min_norm")
    view["target"] = name
    view["report"] = report_numbers(view)
    return view


def _family_of(rule: str) -> str:
    from paths.present.plot import rule_family

    return rule_family(rule)


def _repeats(k) -> str:
    return "one repeat" if k in (None, 1) else f"{fmt(k)} repeats"


def _repetitions(k) -> str:
    return "one repetition" if k in (None, 1) else f"{fmt(k)} repetitions"


def _cv_sentence(cv: dict) -> str:
    bits = []
    if cv.get("n_folds") is not None:
        bits.append(f"{fmt(cv['n_folds'])}-fold cross-validation")
    scheme = cv.get("scheme")
    if scheme:
        bits.append({"shuffled": "folds drawn at random", "blocked": "contiguous blocks of rows",
                     "grouped": "folds by group"}.get(scheme, f"{scheme} folds"))
    bits.append(_repetitions(cv.get("repeats")))
    if cv.get("seed") is not None:
        bits.append(f"seed {fmt(cv['seed'])}")
    scaling = cv.get("scaling")
    if scaling == "per-fold":
        bits.append("each training fold centered and standardized on its own rows")
    elif scaling:
        bits.append("features centered and standardized once on all training rows before the "
                    "split, so each held-out fold's scale enters the scaling")
    return ", ".join(bits)


def _cited(summary: dict) -> list:
    """Reference keys the report cites: the ridge convention, the rules present, the limit."""
    keys = ["ridge"]
    for rule, sel in (summary.get("selected") or {}).items():
        k = _REF_KEY.get(rule, rule)
        if isinstance(sel, dict) and sel.get("lambda") is not None and k in REFERENCES:
            keys.append(k)
    if "reml" in keys:
        keys.append("reml_harville")
    if summary.get("cv"):
        keys.append("cv")
    method = (summary.get("intervals") or {}).get("method")
    if method:
        keys.append("split" if method == "split" else "jackknife+")
    keys.append("min_norm")
    return list(dict.fromkeys(keys))


def references(summary: dict) -> list:
    """The full references the report cites (see :data:`REFERENCES`)."""
    return [REFERENCES[k] for k in _cited(summary)]


#: targets given their own section (and path figure) in the report; every target is in
#: the "All targets" table's file targets.csv and in the distribution figure
MAX_TARGET_SECTIONS = 10
#: rows of the "All targets" table in the report (quantiles of the choice beyond that)
MAX_TARGET_ROWS = 20


def _blocks(summary: dict) -> list:
    """``[(target name or None, view)]``: one per target (one, unnamed, for a single target),
    the first :data:`MAX_TARGET_SECTIONS` targets only."""
    names = summary.get("targets") or []
    if not names:
        return [(None, summary)]
    return [(name, target_view(summary, j))
            for j, name in enumerate(names[:MAX_TARGET_SECTIONS])]


def targets_section(summary: dict):
    """``(sentences, header, rows)`` of the report's "All targets" section, bounded in size.

    Up to :data:`MAX_TARGET_ROWS` targets every row of :func:`paths.present.summary.targets_table`;
    beyond, the targets at the minimum, the 10/25/50/75/90 % quantiles and the maximum of
    the reported penalty (labelled), the whole table being in ``targets.csv``.
    """
    from paths.present.summary import targets_table

    names = summary.get("targets") or []
    if len(names) < 2:
        return [], [], []
    header, rows = targets_table(summary)
    rule = rows[0][1]
    lam = np.array([r[2] for r in rows], dtype=float)
    ok = np.isfinite(lam)
    out = [f"{len(names)} targets share one factorization; each has its own penalty "
           f"(rule {SHORT.get(rule, rule)} reported). Every target's row is in targets.csv; "
           f"figure fig-targets shows how each rule's penalty spreads across the targets."]
    if ok.any():
        q = np.quantile(lam[ok], [0.1, 0.5, 0.9])
        out.append(f"Reported penalty: median {fmt(q[1])}, 10–90 % range {fmt(q[0])} to "
                   f"{fmt(q[2])}" + ("" if ok.all() else f"; {int((~ok).sum())} target(s) "
                                     "without one") + ".")
    if len(names) > MAX_TARGET_SECTIONS:
        out.append(f"The sections below cover the first {MAX_TARGET_SECTIONS} targets.")
    shown = list(range(len(rows)))
    label = [""] * len(rows)
    if len(rows) > MAX_TARGET_ROWS and ok.any():
        idx = np.flatnonzero(ok)
        srt = idx[np.argsort(lam[idx], kind="stable")]
        shown, label = [], []
        for name, qq in (("minimum", 0.0), ("10 %", 0.1), ("25 %", 0.25), ("median", 0.5),
                         ("75 %", 0.75), ("90 %", 0.9), ("maximum", 1.0)):
            shown.append(int(srt[int(round(qq * (srt.size - 1)))]))
            label.append(name)
        out.append("The table lists the targets at the quantiles of the reported penalty.")
    others = [h[len("lambda_"):].replace("_", "-") for h in header[7:]]
    head = (["quantile"] if any(label) else []) + [
        "target", "λ", "df", "error estimate", "± SE", *[f"λ {SHORT.get(r, r)}" for r in others]]
    table = []
    for lab, i in zip(label, shown):
        r = rows[i]
        cells = [str(r[0]), fmt(r[2]), fmt(r[3]), fmt(r[4]) + (f" ({r[6]})" if r[6] else ""),
                 fmt(r[5]), *[fmt(v) for v in r[7:]]]
        table.append(([lab] if any(label) else []) + cells)
    return out, head, table


def _md_rules(summary: dict) -> list:
    h, groups = rules_table(summary)
    L = ["| " + " | ".join(h) + " |", "|" + "---|" * len(h)]
    for family, rows in groups:
        L.append(f"| ***{_md(family)}*** |" + " |" * (len(h) - 1))
        L += ["| " + " | ".join(map(_md, r)) + " |" for r in rows]
    return L


def _md_figures(figures) -> list:
    L = []
    for f in figures:
        img = (f"![{_md(f.name)}]({f.image})" if f.image else
               f"**{_md(f.name)}** (no figure file written: see report.html)")
        L += [img, "", f"*{_md(md_escape(f.caption))}*", ""]
    return L


def _html_rules(summary: dict, e) -> str:
    h, groups = rules_table(summary)
    out = ['<table class="rules">', "<tr>" + "".join(f"<th>{e(c)}</th>" for c in h) + "</tr>"]
    for family, rows in groups:
        out.append(f'<tr class="family"><th colspan="{len(h)}">{e(family)}</th></tr>')
        for r in rows:
            out.append("<tr>" + "".join(f'<td{" class=num" if i else ""}>{e(str(c))}</td>'
                                        for i, c in enumerate(r)) + "</tr>")
    out.append("</table>")
    return "\n".join(out)
