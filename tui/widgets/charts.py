"""The three charts: residuals by level, fitted curve over the data, Box–Cox profile.

Each returns a plotext figure function and a legend. Series differ by marker AND label, so
they read without colour (NO_COLOR) and with a plain font (TERM=linux: no braille or
quadrant glyphs).
"""

from __future__ import annotations

import os
from typing import Any

from rich.text import Text

from .formatting import num
from .plot import Figure

__all__ = ["residual_figure", "curve_figure", "boxcox_figure", "Markers"]


class Markers:
    """Marker set for the terminal: plain single characters, or finer line glyphs."""

    def __init__(self, plain: bool) -> None:
        self.plain = plain
        self.rows = "dot"  # • — in CP437, so also on the Linux console
        self.mean = "O"
        self.spread = "-"
        self.line = "*" if plain else "hd"  # hd: quadrant blocks, finer lines
        self.rows_sym = "•"
        self.line_sym = "*" if plain else "▗▄"
        self.colour = not os.environ.get("NO_COLOR")

    def c(self, colour: str) -> str | None:
        """A series colour, or None (terminal default) without colour."""
        return colour if self.colour else None


def _lists(a: Any) -> list[float]:
    return [float(v) for v in a]


def residual_figure(chart: Any, x_name: str, m: Markers) -> tuple[Figure, Text]:
    """Rows' residuals, level mean residual and ± replicate SD, around zero."""

    def draw(plt: Any) -> None:
        plt.title(f"Residuals by level ({chart.scale})")
        plt.xlabel(x_name)
        plt.horizontal_line(0.0, color=m.c("gray"))
        plt.scatter(_lists(chart.level_x), _lists(chart.level_low), marker=m.spread, color=m.c("orange"))
        plt.scatter(_lists(chart.level_x), _lists(chart.level_high), marker=m.spread, color=m.c("orange"))
        plt.scatter(_lists(chart.x), _lists(chart.residual), marker=m.rows, color=m.c("blue"))
        plt.scatter(_lists(chart.level_x), _lists(chart.level_mean), marker=m.mean, color=m.c("red"))

    shown = "" if chart.x.size == chart.rows_total else f" ({chart.x.size:,} of {chart.rows_total:,} rows drawn)"
    legend = Text.assemble(
        (m.rows_sym, "blue"), " row  ", ("O", "bold red"), " level mean  ", ("-", "bold"),
        " mean ± replicate SD (pure error)  ", ("─", "dim"), " zero", shown,
    )
    return draw, legend


def curve_figure(chart: Any, x_name: str, y_name: str, m: Markers) -> tuple[Figure, Text]:
    """The data and the node's fitted curve per level, both on the original y scale."""
    import math

    pts = [(float(a), float(b)) for a, b in zip(chart.level_x, chart.level_fitted, strict=True) if math.isfinite(float(b))]

    def draw(plt: Any) -> None:
        plt.title(f"Fitted curve on the {y_name} scale")
        plt.xlabel(x_name)
        if pts:
            plt.plot([p[0] for p in pts], [p[1] for p in pts], marker=m.line, color=m.c("red"))
        plt.scatter(_lists(chart.x), _lists(chart.y), marker=m.rows, color=m.c("blue"))

    shown = "" if chart.x.size == chart.rows_total else f" ({chart.x.size:,} of {chart.rows_total:,} rows drawn)"
    note = f"; {chart.note}" if chart.note else ""
    missing = "" if len(pts) == len(chart.level_x) else f"; curve undefined at {len(chart.level_x) - len(pts)} level(s)"
    legend = Text.assemble((m.rows_sym, "blue"), " data  ", (m.line_sym, "bold red"), " fitted curve", shown, note, missing)
    return draw, legend


def boxcox_figure(profile: Any, m: Markers) -> tuple[Figure, Text]:
    """Profile log-likelihood of λ with the 95% interval (Box & Cox 1964)."""
    lam = [g[0] for g in profile.grid]
    ll = [g[1] for g in profile.grid]

    def draw(plt: Any) -> None:
        plt.title("Box–Cox profile log-likelihood of λ")
        plt.xlabel("λ")
        plt.plot(lam, ll, marker=m.line, color=m.c("blue"))
        for end in (profile.low, profile.high):
            if end is not None:
                plt.vertical_line(end, color=m.c("orange"))
        plt.vertical_line(profile.chosen, color=m.c("red"))

    iv = f"({num(profile.low, 3) if profile.low is not None else '−∞'}, {num(profile.high, 3) if profile.high is not None else '∞'})"
    legend = Text.assemble(
        (m.line_sym, "bold blue"), " profile  ", ("│", "bold"),
        f" λ used = {num(profile.chosen, 3)}{' (estimated)' if profile.estimated else ''} and 95% interval {iv};"
        f" λ̂ = {num(profile.lam_hat, 4)}",
    )
    return draw, legend
