"""Figures of the HTML report, drawn with matplotlib's SVG backend and returned as SVG text.

Every number comes from the engine (the tree's scores, the handed-on model); this module only
draws. Output is deterministic: a fixed ``svg.hashsalt``, no date in the metadata, text kept as
text (``svg.fonttype = 'none'``). Marker shapes and line styles carry the meaning, so a page
printed without colour still reads.
"""

from __future__ import annotations

import io
import re
from typing import Any

import numpy as np

__all__ = ["svg_of", "fit_figure", "residual_figure", "line_vs_model_figure", "boxcox_figure",
           "inverse_figure"]

_RC: Any = {"svg.fonttype": "none", "svg.hashsalt": "bendwise-report", "font.size": 9.0,
       "axes.grid": True, "grid.linestyle": ":", "grid.color": "#bbbbbb", "font.family": "sans-serif"}


def _figure(width: float = 6.4, height: float = 3.6, ncols: int = 1):
    """A new figure (Agg-free: the SVG canvas is attached when saved)."""
    from matplotlib.figure import Figure

    fig = Figure(figsize=(width, height), layout="constrained")
    axes = fig.subplots(1, ncols, squeeze=False)[0]
    return fig, list(axes)


def svg_of(fig) -> str:
    """The figure as an inline ``<svg>`` element (no XML prolog, no doctype, no date)."""
    import matplotlib

    buf = io.StringIO()
    with matplotlib.rc_context(_RC):
        fig.savefig(buf, format="svg", metadata={"Date": None, "Creator": None}, bbox_inches="tight")
    text = buf.getvalue()
    text = text[text.index("<svg"):]
    # inline SVG in HTML needs no namespace declarations or RDF metadata: drop every URL with them
    text = re.sub(r"\s*<metadata>.*?</metadata>", "", text, flags=re.S)
    return re.sub(r'\s+xmlns(:\w+)?="[^"]*"', "", text)


def fit_figure(x: np.ndarray, y: np.ndarray, grid_x: np.ndarray, pred, x_name: str, y_name: str,
               note: str | None):
    """Data, fitted curve, confidence band (dashed) and prediction band (dotted), original scale."""
    import matplotlib

    with matplotlib.rc_context(_RC):
        fig, (ax,) = _figure()
        ax.plot(x, y, linestyle="none", marker="o", mfc="none", mec="black", ms=4, label="data")
        ax.plot(grid_x, pred.median, color="black", linestyle="-", lw=1.4, label="fitted curve")
        for lo, hi, style, name in ((pred.ci_low, pred.ci_high, "--", "95% confidence band"),
                                    (pred.pi_low, pred.pi_high, ":", "95% prediction band")):
            lo = np.where(np.isfinite(lo), lo, np.nan)
            hi = np.where(np.isfinite(hi), hi, np.nan)
            ax.plot(grid_x, lo, color="#1f4e9a", linestyle=style, lw=1.0, label=name)
            ax.plot(grid_x, hi, color="#1f4e9a", linestyle=style, lw=1.0)
        ax.set_xlabel(x_name)
        ax.set_ylabel(y_name)
        ax.set_title("Data and fitted curve" + (f" ({note})" if note else ""))
        ax.legend(loc="best", fontsize=8)
    return fig


def _residual_axes(ax, r, x_name: str, scale: str, title: str) -> None:
    ax.axhline(0.0, color="black", lw=0.8)
    ax.plot(r.x, r.residual, linestyle="none", marker="o", mfc="none", mec="black", ms=3.5, label="residual")
    ax.errorbar(r.level_x, r.level_mean, yerr=[r.level_mean - r.level_low, r.level_high - r.level_mean],
                fmt="s", color="#a02020", ms=5, capsize=3, lw=1.0, label="level mean ± replicate SD")
    ax.set_xlabel(x_name)
    ax.set_ylabel(f"residual ({scale})")
    ax.set_title(title)


def residual_figure(r, x_name: str):
    """Residuals of the chosen model by level: rows (circles), level means (squares) ± replicate SD."""
    import matplotlib

    with matplotlib.rc_context(_RC):
        fig, (ax,) = _figure()
        _residual_axes(ax, r, x_name, r.scale, "Residuals by level, chosen model")
        ax.legend(loc="best", fontsize=8)
    return fig


def line_vs_model_figure(line_r, model_r, x_name: str):
    """The straight line's residuals beside the chosen model's (same layout, side by side)."""
    import matplotlib

    with matplotlib.rc_context(_RC):
        fig, axes = _figure(7.2, 3.2, ncols=2)
        _residual_axes(axes[0], line_r, x_name, line_r.scale, "Straight line")
        _residual_axes(axes[1], model_r, x_name, model_r.scale, "Chosen model")
        axes[1].legend(loc="best", fontsize=7)
    return fig


def boxcox_figure(profile: dict[str, Any]):
    """Profile log-likelihood of λ with λ̂ (solid) and the 95% interval ends (dashed)."""
    import matplotlib

    with matplotlib.rc_context(_RC):
        fig, (ax,) = _figure(6.4, 3.2)
        lam = np.array([g[0] for g in profile["grid"]], dtype=float)
        ll = np.array([g[1] for g in profile["grid"]], dtype=float)
        ax.plot(lam, ll, color="black", lw=1.2, marker=".", ms=3, label="profile log-likelihood")
        ax.axvline(profile["lambda_hat"], color="black", linestyle="-", lw=0.8, label="λ̂")
        for end in (profile["low"], profile["high"]):
            if end is not None:
                ax.axvline(end, color="#1f4e9a", linestyle="--", lw=1.0)
        ax.axvline(profile["chosen"], color="#a02020", linestyle="-.", lw=1.0, label="λ used")
        ax.set_xlabel("λ (Box–Cox power)")
        ax.set_ylabel("profile log-likelihood")
        ax.set_title("Box–Cox profile with its 95% interval (dashed)")
        ax.legend(loc="best", fontsize=8)
    return fig


def inverse_figure(grid_x: np.ndarray, pred, readings: list, x_name: str, y_name: str):
    """Reading → x̂: the curve, each reading as a horizontal line and its x interval as a bar."""
    import matplotlib

    with matplotlib.rc_context(_RC):
        fig, (ax,) = _figure()
        ax.plot(grid_x, pred.median, color="black", lw=1.4, label="fitted curve")
        ax.plot(grid_x, np.where(np.isfinite(pred.pi_low), pred.pi_low, np.nan), color="#1f4e9a",
                linestyle=":", lw=1.0, label="95% prediction band")
        ax.plot(grid_x, np.where(np.isfinite(pred.pi_high), pred.pi_high, np.nan), color="#1f4e9a",
                linestyle=":", lw=1.0)
        markers = ("^", "D", "v")
        for i, res in enumerate(readings):
            ax.axhline(res.y, color="gray", linestyle="--", lw=0.8)
            if res.x is not None:
                ax.plot([res.x], [res.y], marker=markers[i % 3], color="#a02020", ms=6, linestyle="none",
                        label=f"reading {i + 1} → x̂")
            if res.interval == "finite" and res.low is not None and res.high is not None:
                ax.plot([res.low, res.high], [res.y, res.y], color="#a02020", lw=3, solid_capstyle="butt")
        ax.set_xlabel(x_name)
        ax.set_ylabel(y_name)
        ax.set_title("Inverse prediction: reading to x̂ with its 95% interval (thick bar)")
        ax.legend(loc="best", fontsize=8)
    return fig
