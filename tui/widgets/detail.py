"""The selected node in words and numbers: verdict, sum-of-squares split, coefficients,
criteria, the path of moves with each nested test, warnings and pruned moves."""

from __future__ import annotations

import math
from typing import TYPE_CHECKING, Any, ClassVar

from rich.text import Text
from textual.binding import Binding, BindingType
from textual.geometry import Size
from textual.scroll_view import ScrollView
from textual.strip import Strip

from ..messages import TreeSummary
from ..output import collinear_words, count, fmt_p, p_clause
from .formatting import glyph, num, stability_words, verdict_sentence, verdict_style, verdict_word

if TYPE_CHECKING:
    from bendwise.engine.tree.results import MoveDetail

__all__ = ["NodeDetail", "render_node"]


class _Grid:
    """A small aligned table rendered straight to Text (rich Tables cost ~1 ms each to lay out,
    which a cursor move would pay several times over)."""

    def __init__(self, *headers: str, right_from: int = 1) -> None:
        self.headers = headers
        self.right_from = right_from
        self.rows: list[tuple[str, ...]] = []

    def add(self, *cells: str) -> None:
        self.rows.append(tuple(str(c) for c in cells))

    def text(self) -> Text:
        widths = [max(len(r[i]) for r in (self.headers, *self.rows)) for i in range(len(self.headers))]

        def line(cells: tuple[str, ...]) -> str:
            out = [c.rjust(w) if i >= self.right_from else c.ljust(w) for i, (c, w) in enumerate(zip(cells, widths, strict=True))]
            return " ".join(out).rstrip()

        t = Text(line(self.headers), style="bold", no_wrap=True, overflow="ellipsis")
        for r in self.rows:
            t.append("\n")
            t.append(line(r), style="")
        return t


def _table(*headers: str, right_from: int = 1) -> _Grid:
    return _Grid(*headers, right_from=right_from)


def _row(t: _Grid, *cells: str | Text) -> None:
    """Add a row of plain text (never markup: labels like run_day[day2] stay as written)."""
    t.add(*(c.plain if isinstance(c, Text) else c for c in cells))


def _heading(text: str) -> Text:
    return Text(f"\n{text}", style="bold underline")


WIDE_PANE = 60
"""Columns of detail pane from which the tables get their interval and mean-square columns."""


def render_node(board: TreeSummary, nid: str, width: int = 100) -> Text:
    """Everything the detail pane shows for one node (formatting of engine values only), after
    the reason its growth stopped, if it did.

    Below 60 columns the tables drop their least important columns (MS, intervals) instead of
    cutting numbers short.
    """
    body = _render_node(board, nid, width)
    if nid in board.errors:
        return Text.assemble((f"Growing {nid} stopped: {board.errors[nid]}\n", "bold"), body)
    return body


def _render_node(board: TreeSummary, nid: str, width: int) -> Text:
    """The detail of one node: its heading, then sums of squares, coefficients, criteria and notes."""
    node = board.nodes[nid]
    j = board.json[nid]
    parts = _head_section(board, nid)
    s = node.score
    if s is None:
        parts.append(_heading("Not scored"))
        parts.append(Text(str(node.error)))
        parts += _path_section(board, nid)
        parts += _pruned_section(node, j)
        return Text("\n").join(parts)
    narrow = width < WIDE_PANE
    parts += _squares_section(board, nid, narrow)
    parts += _coefficients_section(board, nid, narrow, width)
    parts += _criteria_section(board, nid, narrow)
    parts += _runs_section(j)
    if nid == "root" and board.check is not None:
        parts += _check_section(board.check)
    parts += _move_detail(node.detail)
    parts += _path_section(board, nid)
    if s.warnings:
        parts.append(_heading("Warnings"))
        parts += [Text(f"! {w}") for w in s.warnings]
    parts += _pruned_section(node, j)
    return Text("\n").join(parts)


def _head_section(board: TreeSummary, nid: str) -> list[Text]:
    """Node id and label, the move that made it, its formula, the verdict and the suggestion mark."""
    node = board.nodes[nid]
    j = board.json[nid]
    st = board.tree.study
    y, x = st.y_name, st.x_name
    parts: list[Text] = []
    head = Text.assemble((f"{nid}", "bold reverse"), " ", (node.spec.label(y, x), "bold"))
    parts.append(head)
    if node.parent is not None:
        parts.append(Text(f"move from {node.parent}: {node.move}", style="dim"))
    parts.append(Text(f"formula: {j['formula']}", style="dim"))
    parts.append(verdict_sentence(j, board.alpha))
    sug = board.suggestion
    if sug is not None and sug.node == nid:
        parts.append(Text.assemble(("SUGGESTED", "bold"), f" (rule {sug.rule}): {sug.reason}"))
    if not board.complete:
        parts.append(Text("growth not finished: ΔAICc and the suggestion refer to the nodes scored so far",
                          style="italic"))
    words = stability_words(board, nid)
    if words is not None:
        stab = board.stability
        parts.append(Text.assemble(("Stability", "bold"), f": {words}"))
        parts.append(Text(f"{stab.reading()}; the same as grow --stability {board.stability_asked} --seed "
                          f"{stab.seed} (t measures again)", style="dim"))
    return parts


def _squares_section(board: TreeSummary, nid: str, narrow: bool) -> list[Text]:
    """The split of the sum of squares and which lack-of-fit test it is."""
    from bendwise.engine.handon.chart_data import node_anova

    node = board.nodes[nid]
    s = node.score
    assert s is not None
    st = board.tree.study
    y, x = st.y_name, st.x_name
    parts: list[Text] = []
    scale = node.spec.response.short(y)
    if node.spec.weights is not None or st.weights is not None:
        scale += ", weighted"
    parts.append(_heading(f"Sum of squares (scale: {scale})"))
    rows = board.check.anova if (nid == "root" and board.check is not None) else node_anova(s)
    t = _table("part", "df", "SS", "F", "p") if narrow else _table("part", "df", "SS", "MS", "F", "p")
    for r in rows:
        indent = " " if r.source not in {"model", "residual", "total"} else ""
        name = indent + (r.source if not narrow else r.source.replace("x-as-factor residual", "x-factor resid."))
        cells = [name, str(r.df), num(r.ss, 5 if narrow else 6)]
        if not narrow:
            cells.append(num(r.ms, 5))
        cells += [num(r.f, 4) if r.f is not None else "", fmt_p(r.p) if r.p is not None else ""]
        _row(t, *cells)
    parts.append(t.text())
    lof = s.lack_of_fit
    if not lof.testable:
        parts.append(Text(f"lack of fit ({lof.kind}): not testable — {lof.reason}"))
    else:
        parts.append(Text(f"lack of fit here is the {lof.kind} test", style="dim"))
    if node.spec.covariates:
        parts.append(Text(f"classical pure-error test (grouping by {', '.join((x, *node.spec.covariates))}): "
                          f"{s.lack_of_fit_pure.summary()}"))
    return parts


def _coefficients_section(board: TreeSummary, nid: str, narrow: bool, width: int) -> list[Text]:
    """Coefficients on the raw basis (with 95 % intervals when the pane is wide), σ̂ and R²."""
    node = board.nodes[nid]
    s = node.score
    assert s is not None
    st = board.tree.study
    parts: list[Text] = []
    parts.append(_heading("Coefficients (raw basis)"))
    t = _table("term", "estimate", "std err", "p") if narrow else _table("term", "estimate", "std err", "p",
                                                                          "95% interval")
    for c in s.fit.coefficients:
        cells = [c.name, num(c.estimate, 5 if narrow else 6), num(c.se, 3 if narrow else 4), fmt_p(c.p)]
        if not narrow:
            cells.append(f"{num(c.low, 4)} … {num(c.high, 4)}")
        _row(t, *cells)
    parts.append(t.text())
    if narrow:
        parts.append(Text(f"95% intervals need a detail pane of {WIDE_PANE} columns; this one has {width} "
                          "(widen the terminal)", style="dim"))
    parts.append(Text(f"σ̂ {num(s.fit.sigma, 5)} on {s.fit.df_resid} df · R² {num(s.fit.r2, 6)} · "
                      f"adjusted R² {num(s.fit.r2_adj, 6)}"))
    if s.fit.aliased:
        weighted = node.spec.weights is not None or st.weights is not None
        parts.append(Text(collinear_words(s.fit.aliased, weighted)))
    return parts


def _criteria_section(board: TreeSummary, nid: str, narrow: bool) -> list[Text]:
    """k, log-likelihood, AIC, AICc, ΔAICc and BIC, the choices counted in k, PRESS and side tests."""
    node = board.nodes[nid]
    s = node.score
    assert s is not None
    j = board.json[nid]
    st = board.tree.study
    y, x = st.y_name, st.x_name
    parts: list[Text] = []
    crit = s.criteria
    delta = j["criteria"]["delta_aicc"]  # distance to the tree's best when the picture was taken
    parts.append(_heading(f"Criteria (original {y} scale)"))
    loglik = crit.loglik if math.isfinite(crit.loglik) else None
    if narrow:
        parts.append(Text(f"k {crit.k} · AICc {num(crit.aicc, 6)} · ΔAICc {num(delta, 3)}"))
        parts.append(Text(f"BIC {num(crit.bic, 6)} · AIC {num(crit.aic, 6)} · log-lik {num(loglik, 6)}"))
    else:
        t = _table("k", "log-lik", "AIC", "AICc", "ΔAICc", "BIC", right_from=0)
        _row(t, str(crit.k), num(loglik, 6), num(crit.aic, 6), num(crit.aicc, 6), num(delta, 3), num(crit.bic, 6))
        parts.append(t.text())
    parts.append(Text("ΔAICc is the distance to the lowest AICc in the tree", style="dim"))
    chosen = node.spec.data_choices(y, x)
    if chosen:
        parts.append(Text(f"k counts {count(len(chosen), 'choice')} made from the data as parameters: "
                          + "; ".join(chosen), style="dim"))
    lines = [f"PRESS {num(s.press, 5)}" + (f" ({s.press_note})" if s.press_note else ""),
             f"largest |studentized residual| {num(s.max_studentized, 3)}"]
    if s.spread.testable:
        lines.append(f"equal spread across levels ({s.spread.method or 'test'}): {p_clause(s.spread.p)}")
    else:
        lines.append(f"equal spread: not testable — {s.spread.reason}")
    lines.append(f"largest departure from the straight line: {num(s.max_deviation, 4)} {y}"
                 if s.max_deviation is not None
                 else f"departure from the straight line: {s.deviation_note or '—'}")
    parts += [Text(ln) for ln in lines]
    return parts


def _runs_section(j: dict) -> list[Text]:
    """With a runs column: between- and within-run SDs, the within-run test and the ML criteria."""
    if "runs" not in j:
        return []
    runs = j["runs"]
    if runs is None:
        return [_heading("Runs"), Text(f"no run model: {j.get('runs_error') or 'not fitted'}")]
    iv = runs.get("between_sd_interval") or {}
    band = (f" (95% {num(iv.get('low'), 4)} … {num(iv.get('high'), 4) if iv.get('high') is not None else 'open'})"
            if iv.get("low") is not None else "")
    lof = runs["lack_of_fit_within_runs"]
    test = (f"F = {num(lof['f'], 4)} on {lof['df_lack']} and {lof['df_pure']} df, {p_clause(lof['p'])}"
            if lof.get("testable") else f"not testable — {lof.get('reason')}")
    crit = runs.get("criteria") or {}
    out = [_heading(f"Runs ({runs['column']}: {runs['count']} runs, random offset)"),
           Text(f"between-run SD {num(runs['between_sd'], 5)}{band} · within-run SD {num(runs['within_sd'], 5)}"),
           Text(f"lack of fit within runs: {test}"),
           Text(f"ML criteria: AICc {num(crit.get('aicc'), 6)} · BIC {num(crit.get('bic'), 6)} (k {crit.get('k')})"),
           Text(runs["method"], style="dim")]
    return out


def _check_section(chk: Any) -> list[Text]:
    out: list[Text] = [_heading("Straight-line check (bendwise check)"), Text(chk.verdict)]
    for t in (chk.mandel, chk.spread):
        if t.testable:
            lvl = t.alpha if t.alpha is not None else chk.alpha
            word = "flagged" if (t.p is not None and t.p < lvl) else "not flagged"
            out.append(Text(f"{t.name}: {num(t.statistic, 4)}, {p_clause(t.p)} — {word} at {lvl:g}"))
        else:
            out.append(Text(f"{t.name}: not run — {t.reason}"))
    return out


def _move_detail(detail: MoveDetail) -> list[Text]:
    out: list[Text] = []
    bc = detail.boxcox
    if bc is not None:
        out.append(_heading("Box–Cox λ"))
        out.append(Text(f"λ̂ = {num(bc.lam_hat, 4)}, 95% interval ({num(bc.low, 3)}, {num(bc.high, 3)}); "
                        f"λ used = {num(bc.chosen, 3)}{' (estimated: counts as a parameter)' if bc.estimated else ''}"
                        " — profile in the Box–Cox view (key 4)"))
    bt = detail.box_tidwell
    if bt is not None:
        out.append(_heading("Box–Tidwell power of x"))
        out.append(Text(f"α̂ = {num(bt.alpha_hat, 4)}, 95% interval ({num(bt.low, 3)}, {num(bt.high, 3)}); "
                        f"α used = {num(bt.chosen, 3)}; test of α = 1: {p_clause(bt.p_alpha1)}"))
    return out


def _path_section(board: TreeSummary, nid: str) -> list[Text]:
    tree = board.tree
    out: list[Text] = [_heading("Path from the straight line")]
    for i, n in enumerate(tree.path(nid)):
        j = board.json.get(n.id)
        word = verdict_word(j, board.alpha) if j is not None else "?"
        line = Text("  " * i)
        if n.parent is not None:
            line.append(f"{glyph('→', '->')} {n.move}  ")
        line.append(f"{n.id} ")
        line.append(word, verdict_style(word) if word in ("pass", "FAIL", "untestable", "error") else "")
        line.append(f"  {n.spec.label('y', 'x')}")
        out.append(line)
        if n.nested is not None:
            out.append(Text("  " * i + f"  nested test against {n.parent}: {n.nested.summary()}", style="dim"))
    return out


def _pruned_section(node: Any, j: dict) -> list[Text]:
    out: list[Text] = []
    if j.get("also_reached_from"):
        out.append(_heading("Also reached from"))
        out += [Text(f"{a['node']} by {a['move']}") for a in j["also_reached_from"]]
    if not node.expanded:
        out.append(_heading("Moves from here"))
        out.append(Text("not grown yet: press g (or → / Enter) to grow this node (best-first)"))
    elif j.get("pruned"):
        out.append(_heading("Moves that cannot apply here"))
        out += [Text(f"{glyph('✗', 'x')} {p['move']}: {p['reason']}") for p in j["pruned"]]
    return out


_HEIGHT_BLOCK = 40


class NodeDetail(ScrollView, can_focus=True):
    """Scrollable detail of the highlighted node (focusable: arrows and PgUp/PgDn scroll it).

    A ScrollView of pre-wrapped lines: showing another node changes only this widget's virtual
    size, so a cursor move repaints two panes instead of laying out the whole screen.
    """

    BINDINGS: ClassVar[list[BindingType]] = [
        Binding("up", "scroll_up", "Scroll up", show=False),
        Binding("down", "scroll_down", "Scroll down", show=False),
        Binding("pageup", "page_up", "Page up", show=False),
        Binding("pagedown", "page_down", "Page down", show=False),
        Binding("home", "scroll_home", "Top", show=False),
        Binding("end", "scroll_end", "Bottom", show=False),
    ]
    DEFAULT_CSS = """
    NodeDetail { overflow-x: hidden; overflow-y: auto; }
    """

    def __init__(self, *, id: str | None = None) -> None:
        super().__init__(id=id)
        self._content: Text = Text("growing the tree…")
        self._shown: tuple[TreeSummary | None, str | None] = (None, None)
        self._lines: list[Strip] = []
        self._laid_width = -1

    # ---- content ------------------------------------------------------------------
    def show_node(self, board: TreeSummary | None, nid: str | None) -> None:
        """Show a node (or a placeholder while nothing is selected)."""
        self._shown = (board, nid)
        if board is None or nid is None or nid not in board.json:
            self._set(Text("growing the tree…"))
            return
        self._set(render_node(board, nid, self._width()))
        self.scroll_to(y=0, animate=False)

    def show_message(self, text: str | Text) -> None:
        """A message instead of a node (errors while loading)."""
        self._shown = (None, None)
        self._set(text if isinstance(text, Text) else Text(text))

    @property
    def content(self) -> Text:
        """What is shown, as styled text."""
        return self._content

    @property
    def text(self) -> str:
        """Plain text of what is shown (for tests and screen readers)."""
        return self._content.plain

    # ---- layout -------------------------------------------------------------------
    def _width(self) -> int:
        return max((self.size.width or 100) - 1, 20)  # one column for the scrollbar

    def _set(self, text: Text) -> None:
        self._content = text
        self._laid_width = -1
        self._layout_lines()
        self.refresh()

    def _layout_lines(self) -> None:
        width = self._width()
        if width == self._laid_width:
            return
        console = self.app.console
        wrapped = self._content.wrap(console, width, overflow="fold")
        self._lines = [Strip(line.render(console), line.cell_len) for line in wrapped]
        self._laid_width = width
        # A new virtual size costs a layout of the whole screen; round the height up to a block
        # of lines so that most cursor moves keep the size (the rest is blank).
        height = -(-len(self._lines) // _HEIGHT_BLOCK) * _HEIGHT_BLOCK
        if self.virtual_size != Size(width, height):
            self.virtual_size = Size(width, height)

    def on_resize(self, event) -> None:
        board, nid = self._shown
        if board is not None and nid is not None and nid in board.json:
            self._content = render_node(board, nid, self._width())
            self._laid_width = -1
        self._layout_lines()

    def render_line(self, y: int) -> Strip:
        scroll_x, scroll_y = self.scroll_offset
        index = scroll_y + y
        width = self.scrollable_content_region.width
        style = self.rich_style
        if index >= len(self._lines):
            return Strip.blank(width, style)
        return self._lines[index].crop_extend(scroll_x, scroll_x + width, style).apply_style(style)
