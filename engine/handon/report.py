"""The Markdown report of an export: what validation guidance asks to see, in plain text.

It lists slope, intercept, r², the residual sum of squares, the residuals by level, the
lack-of-fit tests, the path of remedies with reasons, DL = 3.3σ/S and QL = 10σ/S for a
straight line (ICH Q2(R2)), two plain ASCII charts and the cautions.

Names and texts that come from the data (columns, categories, the file name, reasons that quote
them) never become Markdown: names are code spans fenced longer than any backtick run inside
them, with control characters escaped, and a text with a character Markdown or HTML would act on
is shown as a code span too.
"""

from __future__ import annotations

import math
import re
from collections.abc import Sequence
from typing import Any

import numpy as np

from ..numfmt import fmt_num, fmt_p, p_clause
from ..stats.rows import NoRows, Rows
from ..stats.study import Study
from ..tree.model_spec import ModelSpec
from ..tree.tree import RemedyTree

__all__ = ["report_markdown", "text_chart"]

CHART_ROWS = 2000
"""Most data points drawn in a chart (evenly spaced beyond that)."""


def text_chart(series: Sequence[tuple[np.ndarray, np.ndarray, str]], *, width: int = 64, height: int = 16,
               zero_line: bool = False) -> list[str]:
    """A plain ASCII scatter/line chart; later series draw over earlier ones.

    Each series is (x, y, mark). Axis ends are printed as numbers; ``zero_line`` draws y = 0.
    """
    xs = np.concatenate([np.asarray(s[0], dtype=float) for s in series])
    ys = np.concatenate([np.asarray(s[1], dtype=float) for s in series])
    ok = np.isfinite(xs) & np.isfinite(ys)
    if not ok.any():
        return ["(nothing to draw)"]
    x0, x1 = float(xs[ok].min()), float(xs[ok].max())
    y0, y1 = float(ys[ok].min()), float(ys[ok].max())
    if zero_line:
        y0, y1 = min(y0, 0.0), max(y1, 0.0)
    if x1 == x0:
        x0, x1 = x0 - 1, x1 + 1
    if y1 == y0:
        y0, y1 = y0 - 1, y1 + 1
    grid = [[" "] * width for _ in range(height)]

    def col(v: float) -> int:
        return min(width - 1, max(0, int(round((v - x0) / (x1 - x0) * (width - 1)))))

    def row(v: float) -> int:
        return min(height - 1, max(0, int(round((y1 - v) / (y1 - y0) * (height - 1)))))

    if zero_line:
        r0 = row(0.0)
        grid[r0] = ["-"] * width
    for x, y, mark in series:
        x = np.asarray(x, dtype=float)
        y = np.asarray(y, dtype=float)
        for a, b in zip(x, y, strict=True):
            if math.isfinite(a) and math.isfinite(b):
                grid[row(b)][col(a)] = mark
    top, bottom = _n(y1), _n(y0)
    pad = max(len(top), len(bottom))
    lines = []
    for i, cells in enumerate(grid):
        label = top if i == 0 else bottom if i == height - 1 else ""
        lines.append(f"{label.rjust(pad)} |{''.join(cells)}")
    lines.append(" " * pad + " +" + "-" * width)
    left, right = _n(x0), _n(x1)
    lines.append(" " * (pad + 2) + left + right.rjust(width - len(left)))
    return lines


def _n(v: float | None, digits: int = 5) -> str:
    """A quantity in the report: five significant digits unless told (``engine.numfmt``)."""
    return fmt_num(v, digits)


def _test_line(t: dict[str, Any], alpha: float | None = None) -> str:
    if not t.get("testable"):
        return f"not testable — {_free(str(t.get('reason')))}"
    if "f" in t:
        out = f"F = {_n(t['f'])} on {t['df_lack']} and {t['df_pure']} df, {p_clause(t['p'])}"
        if alpha is not None:
            out += f" — {'passes' if t['p'] >= alpha else 'fails'} at α = {alpha:g}"
        if t.get("approximate"):
            out += " (approximate)"
        return out
    df = f" on ({', '.join(_n(d, 4) for d in t.get('df', []))})" if t.get("df") else ""
    return f"statistic {_n(t['statistic'])}{df}, {p_clause(t['p'])}" + (f"; {_free(t['note'])}" if t.get("note") else "")


def _visible(text: str) -> str:
    """One line: characters that are not printable (newline, NUL, line separators) escaped."""
    return "".join(c if c.isprintable() else repr(c)[1:-1] for c in str(text))


def _code(text: str, *, table: bool = False) -> str:
    """``text`` as an inline code span that nothing inside it can end (for names from the data)."""
    s = _visible(text)
    fence = "`" * (max((len(m) for m in re.findall(r"`+", s)), default=0) + 1)
    pad = " " if s.startswith("`") or s.endswith("`") or (s.startswith(" ") and s.endswith(" ")) or not s else ""
    if table:
        s = s.replace("|", "\\|")  # GitHub tables split cells at | even inside code spans
    return f"{fence}{pad}{s}{pad}{fence}"


_ACTIVE = re.compile(r"[\\`*_\[\]<|~&$]")


def _free(text: str, *, table: bool = False) -> str:
    """Engine text that may quote names: as it is when Markdown would not act on any of it,
    else as a code span."""
    s = str(text)
    if _ACTIVE.search(s) or any(not c.isprintable() for c in s):
        return _code(s, table=table)
    return s


def _md_table(header: list[str], rows: list[list[str]]) -> list[str]:
    out = ["| " + " | ".join(header) + " |", "|" + "|".join("---" for _ in header) + "|"]
    out += ["| " + " | ".join(r) + " |" for r in rows]
    return out


def _stability_section(tree: RemedyTree, node_id: str, stab: dict[str, Any] | None) -> list[str]:
    """How often the suggestion rule picks each node when the data are resampled (only when the
    export was asked for it: ``export --stability N``)."""
    if not stab:
        return []
    y, x = tree.study.y_name, tree.study.x_name
    rows = []
    for nid, share in list(stab["shares"].items())[:5]:
        node = tree.nodes.get(nid)
        label = node.spec.label(y, x) if node is not None else (
            "not in this tree" if nid != "none" else "no node qualified")
        mark = " (this export)" if nid == node_id else ""
        rows.append([_code(nid, table=True) + mark, _code(label, table=True), f"{100 * share:.1f} %"])
    out = ["## How often this choice recurs", "",
           f"The tree was grown again on {stab['resamples']} resamples of the data (seed {stab['seed']}; "
           f"{_free(stab['scheme'])}) and the rule {_code(stab['rule'])} applied to each. This export's node "
           f"was picked in {100 * stab['exported_node_share']:.1f} % of them.", ""]
    out += _md_table(["node", "model", "share of resamples"], rows)
    if stab.get("sample_note"):
        out += ["", _free(stab["sample_note"])]
    return out + [""]


def _runs_section(runs: dict[str, Any] | None) -> list[str]:
    """Between- and within-run SDs, the within-run test and what apply does with them (``--runs`` only)."""
    if not runs:
        return []
    iv = runs["between_sd_interval"]
    shown = "no interval with random slopes"
    if iv["low"] is not None:
        shown = "95 % profile-likelihood interval " + _n(iv["low"], 4) + " … " + (
            _n(iv["high"], 4) if iv["high"] is not None else "unbounded")
    out = ["## Runs", "",
           f"{_code(runs['column'])}: {runs['count']} runs, each with its own random offset (intercept) on the "
           "model's scale; the mean curve is the node's.", "",
           f"- Between-run SD {_n(runs['between_sd'], 5)} ({shown})",
           f"- Within-run SD {_n(runs['within_sd'], 5)}",
           *([f"- Random slopes: slope SD {_n(runs['slopes']['slope_sd'], 5)}; between-run SD above is the "
              "intercepts' SD at x = 0"] if runs.get("slopes") else []),
           f"- Method: {_free(runs['method'])}",
           f"- Lack of fit within runs: {_test_line(runs['lack_of_fit_within_runs'])}",
           "- Criteria in this report come from the ML log-likelihood of the run model (original y scale, "
           "Jacobian added), so nodes compare like with like.", ""]
    rows = [[_code(label, table=True), _n(u, 5)] for label, u in zip(runs["labels"], runs["blups"], strict=True)]
    out += _md_table(["run", "offset (BLUP)"], rows)
    out += ["", "`bendwise apply` with this spec gives intervals for a reading from a new run (between-run SD "
            "included; " + _free(runs["df_method"]) + "), or with `--run NAME` for a run above.", ""]
    return out


def report_markdown(tree: RemedyTree, node_id: str, doc: dict[str, Any]) -> str:
    """The report of one exported node (``doc`` is its spec document), section by section."""
    from ..tree.residuals import residuals_by_level

    study = tree.study
    node = tree.nodes[node_id]
    score = node.score
    assert score is not None
    spec = node.spec
    lr = residuals_by_level(study, score)
    out: list[str] = [f"# bendwise model hand-off: {_code(doc['node']['label'])}", ""]
    out += [f"> {doc['cautions']['use']}", ">", f"> {doc['cautions']['post_search']}", ""]
    out += [f"Node {_code(node_id)} · written {doc['created_utc']} by bendwise {doc['tool']['version']} · "
            f"spec schema {doc['schema_version']}", ""]
    out += _data_section(study, doc)
    out += _model_section(study, spec, doc)
    out += _lack_of_fit_section(study, doc)
    out += _residuals_section(study, score, spec, doc, lr)
    out += _path_section(study, doc)
    out += _stability_section(tree, node_id, doc.get("stability"))
    out += _runs_section(doc.get("runs"))
    out += _limits_section(study, spec, doc)
    out += _charts_section(study, score, spec, doc, lr)
    out += ["## Cautions", "", f"- {doc['cautions']['post_search']}", f"- {doc['cautions']['use']}"]
    if not spec.response.is_identity:
        out.append("- Predictions back-transformed from the fitted scale: the naive back-transform is a median; "
                   "bendwise apply also gives the smearing mean (Duan 1983).")
    out.append("")
    return "\n".join(out)


def _is_line(spec: ModelSpec) -> bool:
    """True for the straight line in the original units (no transform, degree 1, no covariates)."""
    return (spec.response.is_identity and spec.predictor.is_identity and spec.degree == 1
            and not spec.covariates)


def _data_section(study: Study, doc: dict[str, Any]) -> list[str]:
    """The file (with its checksum), the columns, the rows dropped and why, the levels and the range."""
    y, x = study.y_name, study.x_name
    prov = doc["provenance"]
    out: list[str] = []
    d = prov["data"]
    rows = prov["rows"]
    out += ["## Data", ""]
    out.append(f"- File: {_code(d['file'])}" + (f" (SHA-256 `{d['sha256']}`, {d['size_bytes']:,} bytes)" if d["sha256"] else
                                            " (read from standard input: no checksum)"))
    out.append(f"- Response {_code(y)}, predictor {_code(x)}"
               + (f", covariates admitted: {', '.join(_code(c) for c in prov['columns']['covariates'])}"
                  if prov["columns"]["covariates"] else "")
               + (f", weights column {_code(prov['columns']['weights'])}" if prov["columns"]["weights"] else ""))
    out.append(f"- Rows read {rows['read']}, used {rows['used']}, dropped {rows['dropped']}")
    for drop in rows["drops"]:
        shown = ", ".join(str(r) for r in drop["rows"]) + (", …" if drop["count"] > len(drop["rows"]) else "")
        out.append(f"  - {drop['count']} row(s) with {_free(drop['reason'])} {_code(drop['column'])}"
                   + (f" (rows {shown})" if drop["rows"] else ""))
    g = prov["grouping"]
    out.append(f"- Levels of {_code(x)}: {g['levels']}" + (
        f"; settings within {_code(g['tolerance_text'])} grouped together"
        + (" — tests are approximate" if g["merged"] else " (no values merged)") if g["rule"] == "tolerance" else
        " (exact values)"))
    cal = doc["calibration"]
    out.append(f"- Calibrated range of {_code(x)}: {_n(cal['x_min'])} to {_n(cal['x_max'])}")
    out.append("")
    return out


def _model_section(study: Study, spec: ModelSpec, doc: dict[str, Any]) -> list[str]:
    """The model's label and formula, weights, the coefficient table and the fit's summary numbers."""
    y = study.y_name
    fit = doc["fit"]
    out: list[str] = []
    m = doc["model"]
    out += ["## Model", "", f"- {_code(doc['node']['label'])}", f"- Formula (for reading): {_code(m['formula_text'])}"]
    w = m["weights"]
    if w["rule"] != "none":
        out.append(f"- Weights: {spec.weights.describe() if spec.weights else w['rule']}")
    out.append("")
    coef_rows = [[_code(c["name"], table=True), _n(c["estimate"], 8), _n(c["se"], 4), fmt_p(c["p"])] for c in fit["coefficients"]]
    out += _md_table(["term", "estimate", "standard error", "p"], coef_rows)
    scale = "" if spec.response.is_identity else f" (on the scale of {_code(spec.response.short(y))})"
    out += ["", f"- Residual SD σ̂ = {_n(fit['sigma'], 6)} on {fit['df_resid']} df{scale}; n = {fit['n']}",
            f"- r² = {fit['r2']:.6f}; adjusted r² = {fit['r2_adj']:.6f}",
            f"- Residual sum of squares = {_n(fit['sse'], 8)}{' (weighted)' if w['rule'] != 'none' or w['user_column'] else ''}"]
    if _is_line(spec):
        b0 = next(c for c in fit["coefficients"] if c["name"] == "intercept")["estimate"]
        b1 = fit["coefficients"][1]["estimate"]
        out.append(f"- Straight line: intercept {_n(b0, 8)}, slope {_n(b1, 8)}")
    else:
        out.append("- The model is not a straight line in the original units: the coefficients above replace a "
                   "single slope and intercept")
    out.append("")
    return out


def _lack_of_fit_section(study: Study, doc: dict[str, Any]) -> list[str]:
    """This model's lack-of-fit tests and spread, then the straight line's tests, then warnings."""
    y, x = study.y_name, study.x_name
    tests = doc["tests"]
    alpha = tests["alpha"]
    out: list[str] = []
    out += ["## Lack of fit", ""]
    out.append(f"- This model, {_free(tests['lack_of_fit'].get('kind', 'lack of fit'))}: "
               f"{_test_line(tests['lack_of_fit'], alpha)}")
    if tests["lack_of_fit_pure"].get("testable") and tests["lack_of_fit_pure"] != tests["lack_of_fit"]:
        out.append(f"- This model, classical pure error: {_test_line(tests['lack_of_fit_pure'], alpha)}")
    out.append(f"- Equal spread of this model's residuals across levels: {_test_line(tests['node_spread'])}")
    sl = tests["straight_line"]
    out.append(f"- Straight line {_code(f'{y} ~ {x}')}: {_test_line(sl['lack_of_fit'], alpha)}")
    out.append(f"- Straight line, curvature (Mandel): {_test_line(sl['mandel'])}")
    out.append(f"- Straight line, equal spread of {_code(y)} across levels: {_test_line(sl['spread'])}")
    for wtext in tests["warnings"]:
        out.append(f"- Note: {_free(wtext)}")
    out.append("")
    return out


def _residuals_section(study: Study, score: Any, spec: ModelSpec, doc: dict[str, Any], lr: Any) -> list[str]:
    """One row per level: mean y, fitted value, mean residual and residual SD (first 60 levels)."""
    y, x = study.y_name, study.x_name
    w = doc["model"]["weights"]
    cal = doc["calibration"]
    out: list[str] = []
    fitted_lv = np.asarray(score.level_fitted_y)
    out += ["## Residuals by level", ""]
    if isinstance(study.rows(), NoRows) and study.n > lr.residual.size:
        out += [f"Residual means and SDs from a seeded random sample of {lr.residual.size:,} of the "
                f"{study.n:,} rows (the table was read through the SQL engine).", ""]
    if spec.covariates:
        out += ["Fitted values at the reference category and the mean of numeric covariates; residuals are the "
                "model's own (fitted scale), each row's own categories and covariates included — so mean y − "
                "fitted differs from the mean residual by the covariates' effect at that level.", ""]
    elif not spec.response.is_identity or w["rule"] != "none":
        out += [f"Residuals on the fitted scale{' times √w' if w['rule'] != 'none' else ''}; fitted values are "
                "back-transformed medians.", ""]
    if not spec.response.is_identity:  # past the pole of 1/y (or outside g's range): no fitted y
        from .predict import in_image

        with np.errstate(all="ignore"):
            zf = np.asarray(spec.response.forward(fitted_lv), dtype=float)
        fitted_lv = np.where(in_image(spec.response, zf, -1 if cal["y_max"] < 0 else 1), fitted_lv, np.nan)
    lv_rows = []
    for i, lv in enumerate(cal["levels"][:60]):
        lv_rows.append([_n(lv["x"], 6), str(lv["n"]), _n(lv["mean_y"], 6), _n(float(fitted_lv[i]), 6),
                        _n(float(lr.level_mean[i]), 4), _n(float(lr.level_sd[i]), 4)])
    out += _md_table([_code(x, table=True), "n", "mean y", "fitted", "mean residual", "residual SD"], lv_rows)
    if len(cal["levels"]) > 60:
        out.append(f"\n… {len(cal['levels']) - 60} more levels (see spec.json)")
    if not np.isfinite(fitted_lv).all():
        out.append(f"\nA fitted value shown as — lies outside the values {_code(spec.response.short(y))} can take "
                   "(for 1/y: past its pole): the model gives no value there.")
    out.append("")
    return out


def _path_section(study: Study, doc: dict[str, Any]) -> list[str]:
    """The moves from the straight line to this node, each with its nested test, and the suggestion."""
    y, x = study.y_name, study.x_name
    tests = doc["tests"]
    out: list[str] = []
    out += ["## How this model was reached", ""]
    out.append(f"1. `root` — straight line {_code(f'{y} ~ {x}')}")
    for i, step in enumerate(tests["path"], start=2):
        nested = step["nested"]
        ntext = _test_line(nested) if nested and nested.get("testable") else (
            _free(nested.get("reason")) if nested else "—")
        out.append(f"{i}. {_code(step['node'])} — {_code(step['move'])} → {_code(step['label'])} "
                   f"(against its parent: {ntext})")
    sug = doc["suggestion"]
    out += ["", f"Suggestion rule {_code(sug['rule'])} at α = {sug['alpha']:g}: "
            + (f"node {_code(sug['node'])} — {_free(sug['reason'])}" if sug["node"] else f"no node — {_free(sug['reason'])}"),
            "", ("This export is the suggested node." if sug["exported_is_suggested"]
                 else "This export is NOT the suggested node: it was chosen by hand."), ""]
    return out


def _limits_section(study: Study, spec: ModelSpec, doc: dict[str, Any]) -> list[str]:
    """DL = 3.3σ/S and QL = 10σ/S for an unweighted straight line; otherwise why they are not given."""
    x = study.x_name
    fit = doc["fit"]
    w = doc["model"]["weights"]
    out: list[str] = []
    out += ["## Detection and quantitation limits", ""]
    if _is_line(spec) and w["rule"] == "none" and not w["user_column"]:
        s, b1 = fit["sigma"], fit["coefficients"][1]["estimate"]
        out += [f"With σ = the residual SD ({_n(s, 5)}) and S = the slope ({_n(b1, 5)}):", "",
                f"- DL = 3.3σ/S = {_n(3.3 * s / abs(b1), 5)} (units of {_code(x)})",
                f"- QL = 10σ/S = {_n(10 * s / abs(b1), 5)} (units of {_code(x)})", "",
                "σ may instead be the SD of blanks or of intercepts; the laboratory's procedure decides which."]
    else:
        out.append("Not given: DL = 3.3σ/S and QL = 10σ/S assume a straight line in the original units with a "
                   "constant residual SD; this model is not one.")
    out.append("")
    return out


def _charts_section(study: Study, score: Any, spec: ModelSpec, doc: dict[str, Any], lr: Any) -> list[str]:
    """Text charts: the data with the fitted curve, and the residuals with their level means."""
    from ..tree.scoring import predict_terms

    y, x = study.y_name, study.x_name
    fit = doc["fit"]
    m = doc["model"]
    every = study.rows()
    if isinstance(every, Rows):
        xs, ys = every.x, every.y
        idx = np.arange(study.n)
        if study.n > CHART_ROWS:
            idx = np.linspace(0, study.n - 1, CHART_ROWS).astype(np.intp)
    else:  # read through the SQL engine: the seeded sample of rows the residuals come from
        sample = study.row_sample(CHART_ROWS)
        xs, ys = sample.x, sample.y
        idx = np.arange(xs.size)
    grid_x = np.linspace(float(study.x_min), float(study.x_max), 200)
    covs_ref: dict[str, np.ndarray] = {}
    for c in m["covariates"]:
        covs_ref[c["name"]] = (np.full(grid_x.size, c["reference"], dtype=object) if c["kind"] == "categorical"
                               else np.full(grid_x.size, c["mean"]))
    beta = np.array([c["estimate"] for c in fit["coefficients"]])
    with np.errstate(all="ignore"):
        zc = predict_terms(score.terms, beta, np.asarray(spec.predictor.forward(grid_x), dtype=float), covs_ref)
        yc = np.asarray(spec.response.inverse(zc), dtype=float)
    out = ["## Charts", "", f"Data (o) and fitted curve (*) on the original scale, {_code(y)} against {_code(x)}"
            + (" (curve at the reference category / mean covariate)" if covs_ref else "")
            + "; a point drawn where the curve passes hides the curve, never the reverse:", "", "```"]
    out += text_chart([(grid_x, yc, "*"), (xs[idx], ys[idx], "o")])
    out += ["```", "", "Residuals (o) and their level means (#) against " + _code(x) + ", fitted scale:", "", "```"]
    out += text_chart([(lr.x, lr.residual, "o"), (lr.level_x, lr.level_mean, "#")], zero_line=True)
    out += ["```", ""]
    return out


