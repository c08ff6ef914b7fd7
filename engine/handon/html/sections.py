"""The figures of the HTML report: engine results in, ``<figure>`` elements with inline SVG out."""

from __future__ import annotations

from html import escape
from typing import Any

import numpy as np

from ...tree.tree import RemedyTree

__all__ = ["figures_section", "reference_covariates"]


def reference_covariates(doc: dict[str, Any], size: int) -> dict[str, np.ndarray]:
    """Covariates held at the reference category or the mean, as the report's curve uses them."""
    out: dict[str, np.ndarray] = {}
    for c in doc["model"]["covariates"]:
        out[c["name"]] = (np.full(size, c["reference"], dtype=object) if c["kind"] == "categorical"
                          else np.full(size, c["mean"], dtype=float))
    return out


def _figure(svg: str, caption: str, name: str) -> str:
    return f'<figure id="fig-{name}" data-figure="{name}">{svg}<figcaption>{caption}</figcaption></figure>'


def _boxcox_profile(tree: RemedyTree, node_id: str) -> dict[str, Any] | None:
    """The Box–Cox profile of a move on the path to the node, if there is one."""
    for node in tree.path(node_id):
        prof = node.detail.boxcox
        if prof is not None:
            return {**prof.as_json(), "grid": [tuple(g) for g in prof.grid]}
    return None


def _readings(model, doc: dict[str, Any]) -> tuple[np.ndarray, list]:
    """Three readings (the fitted response at a quarter, half and three quarters of the range) and x̂ of each."""
    from ..inverse import inverse_predict
    from ..predict import predict_forward

    cal = doc["calibration"]
    xs = cal["x_min"] + (cal["x_max"] - cal["x_min"]) * np.array([0.25, 0.5, 0.75])
    ys = predict_forward(model, xs).median
    ys = ys[np.isfinite(ys)]
    return ys, inverse_predict(model, ys) if ys.size else []


def figures_section(tree: RemedyTree, node_id: str, doc: dict[str, Any]) -> list[str]:
    """Data and curve with bands; residuals by level; line beside model; Box–Cox; inverse prediction."""
    from ..chart_data import curve_chart, residual_chart
    from ..predict import predict_forward
    from ..specfile import model_from_spec
    from . import figures as F

    study = tree.study
    score = tree.nodes[node_id].score
    root = tree.nodes["root"].score
    assert score is not None and root is not None  # export_node refuses unscored nodes; the root is always scored
    y, x = study.y_name, study.x_name
    model = model_from_spec(doc)
    curve = curve_chart(study, score)
    grid_x = np.linspace(doc["calibration"]["x_min"], doc["calibration"]["x_max"], 200)
    with np.errstate(all="ignore"):
        pred = predict_forward(model, grid_x, reference_covariates(doc, grid_x.size))
    out = [_figure(F.svg_of(F.fit_figure(curve.x, curve.y, grid_x, pred, x, y, curve.note)),
                   f"Figure 1. Data (open circles), fitted curve (solid), 95% confidence band for the "
                   f"{escape(pred.ci_of)} (dashed) and 95% prediction band for one new reading (dotted), on the "
                   "original scale.", "fit")]
    model_r = residual_chart(study, score)
    out.append(_figure(F.svg_of(F.residual_figure(model_r, x)),
                       "Figure 2. Residuals of the chosen model by level: rows (open circles), level mean "
                       "(squares) with ± the replicate SD (bars).", "residuals"))
    line_r = residual_chart(study, root)
    out.append(_figure(F.svg_of(F.line_vs_model_figure(line_r, model_r, x)),
                       "Figure 3. The straight line's residuals (left) beside the chosen model's (right); level "
                       "means that stray from zero are the lack of fit.", "line-vs-model"))
    prof = _boxcox_profile(tree, node_id)
    if prof is not None:
        out.append(_figure(F.svg_of(F.boxcox_figure(prof)),
                           "Figure 4. Box–Cox profile log-likelihood of λ, λ̂ (solid), the 95% interval ends "
                           "(dashed) and the λ used (dash-dot).", "boxcox"))
    if doc["model"]["covariates"]:
        out.append("<p>The inverse-prediction picture is left out: with covariates a reading maps to x only "
                   "once the covariates are given (bendwise apply).</p>")
        return out
    with np.errstate(all="ignore"):
        ys, readings = _readings(model, doc)
    if len(readings):
        rows = "".join(f"<tr><td class=\"n\">{escape(f'{r.y:.6g}')}</td><td class=\"n\">"
                       f"{escape('—' if r.x is None else f'{r.x:.6g}')}</td><td>{escape(_interval(r))}</td></tr>"
                       for r in readings)
        out.append(_figure(F.svg_of(F.inverse_figure(grid_x, pred, readings, x, y)),
                           "Figure 5. Inverse prediction: a reading (dashed horizontal line) gives x̂ (marker) and "
                           "its 95% interval (thick bar).", "inverse")
                   + f"<table><thead><tr><th>reading {escape(y)}</th><th>x̂</th><th>95% interval</th></tr></thead>"
                     f"<tbody>{rows}</tbody></table>")
    return out


def _interval(r) -> str:
    if r.interval == "finite":
        return f"{r.low:.6g} to {r.high:.6g}"
    return r.interval + (f": {r.note}" if r.note else "")
