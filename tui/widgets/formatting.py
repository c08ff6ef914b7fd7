"""Words and numbers for the screens: engine results in, rich Text out (no arithmetic).

Meaning never rides on colour alone: every verdict has a word, every mark a letter or
symbol that also reads in monochrome.
"""

from __future__ import annotations

import os
import re
from typing import Any

from rich.text import Text

from ..output import fmt_num, fmt_p, p_clause

__all__ = [
    "fmt_num",
    "fmt_p",
    "plain_glyphs",
    "glyph",
    "verdict_word",
    "verdict_sentence",
    "tree_label",
    "share_text",
    "stability_words",
    "test_words",
    "VERDICT_STYLE",
    "verdict_style",
    "short_move",
    "monochrome",
]

VERDICT_STYLE = {"pass": "bold green", "FAIL": "bold red", "untestable": "bold yellow", "error": "bold magenta"}
MONO_VERDICT_STYLE = {"pass": "bold", "FAIL": "bold reverse", "untestable": "italic", "error": "bold reverse"}
"""Without colour (NO_COLOR, or the Linux console) FAIL and error stand out by reverse video."""


def monochrome() -> bool:
    """True when colour cannot carry anything: NO_COLOR is set, or the Linux console."""
    return "NO_COLOR" in os.environ or plain_glyphs()


def verdict_style(word: str) -> str:
    """Style of a verdict word: coloured, or (see ``monochrome``) reverse/bold/italic only."""
    return (MONO_VERDICT_STYLE if monochrome() else VERDICT_STYLE)[word]


def plain_glyphs() -> bool:
    """True on terminals whose fonts lack block/braille glyphs (the Linux console)."""
    return os.environ.get("TERM", "") == "linux" or bool(os.environ.get("BENDWISE_PLAIN"))


def glyph(fancy: str, plain: str) -> str:
    """``fancy`` normally, ``plain`` on the Linux console."""
    return plain if plain_glyphs() else fancy


def verdict_word(json: dict, alpha: float) -> str:
    """'pass', 'FAIL', 'untestable' or 'error' for a node's lack of fit at α."""
    if json.get("k") is None:
        return "error"
    lof = json["lack_of_fit"]
    if not lof.get("testable") or lof.get("p") is None:
        return "untestable"
    return "pass" if lof["p"] >= alpha else "FAIL"


def test_words(t: dict | None) -> str:
    """A test from its JSON: 'F = 0.37 on 5 and 16 df, p = 0.866' or the reason it is missing."""
    if t is None:
        return "—"
    if not t.get("testable", "f" in t):
        return f"not testable: {t.get('reason') or 'no reason given'}"
    df1 = t.get("df_lack", t.get("df_num"))
    df2 = t.get("df_pure", t.get("df_den"))
    approx = ", approximate" if t.get("approximate") else ""
    return f"F = {fmt_num(t.get('f'), 4)} on {df1} and {df2} df, {p_clause(t.get('p'))}{approx}"


def verdict_sentence(json: dict, alpha: float) -> Text:
    """One line in words: PASS/FAIL/UNTESTABLE with the test behind it."""
    word = verdict_word(json, alpha)
    style = verdict_style(word)
    if word == "error":
        return Text.assemble(("ERROR", style), f" — this model could not be scored: {json.get('error')}")
    lof = json["lack_of_fit"]
    kind = lof.get("kind", "lack of fit")
    if word == "untestable":
        return Text.assemble(("UNTESTABLE", style), f" — lack of fit ({kind}) cannot be tested: {lof.get('reason')}")
    if word == "pass":
        return Text.assemble(("PASS", style), f" — no evidence of lack of fit at α = {alpha:g} ({kind}: {test_words(lof)})")
    return Text.assemble(("FAIL", style), f" — lack of fit at α = {alpha:g}: the curve misses the level means "
                         f"by more than the replicates scatter ({kind}: {test_words(lof)})")


_THETA = re.compile(r"θ = ([^ ,;()]+)")
_LAMBDA = re.compile(r"λ = ([^ ,;()]+)")
_HALVES = {"0.5": "½", "1.5": "1½", "2.5": "2½"}


def short_move(node: Any) -> str:
    """What sets a node apart from its parent, in a few characters: '+ run_day', 'log y', 'w θ=½',
    'bc λ=1.31' (Box–Cox y).

    The root (no parent) shows its model. The full model and the move's reasons are in the
    detail pane.
    """
    move = str(getattr(node, "move", "") or "")
    if node.parent is None or not move:
        return node.spec.label("y", "x")
    if move.startswith("weights"):
        m = _THETA.search(move)
        theta = m.group(1) if m else "?"
        return f"w θ={_HALVES.get(theta, theta) if not plain_glyphs() else theta}"
    if move.startswith("Box–Cox"):
        m = _LAMBDA.search(move)
        return f"bc λ={m.group(1)}" if m else "bc y"
    return move.split(" (")[0].split(";")[0]


def tree_label(node: Any, json: dict, alpha: float, *, suggested: bool, marked: bool,
               share: float | None = None) -> Text:
    """'*n6   pass + x²' — mark (* suggested, = marked), id, verdict word, the move from the parent;
    after a stability run the node's share of resamples follows the verdict ('pass  83% + x²')."""
    word = verdict_word(json, alpha)
    lead = "*" if suggested else ("=" if marked else " ")
    text = Text.assemble(
        (lead, "bold"),
        (f"{node.id:<4} ", "bold" if suggested else ""),
        (word, verdict_style(word)),
        " " * (5 - len(word)) if len(word) < 5 else " ",
    )
    if share is not None:  # a node never suggested gets a dot: the lines stay readable
        text.append(f"{share_text(share) if share > 0 else '·':>4} ", "bold" if share >= 0.5 else "dim")
    text.append(short_move(node))
    if suggested and marked:
        text.append(" (marked)", "bold")
    return text


def share_text(share: float) -> str:
    """A share of resamples as a whole percentage ('83%'; '<1%' when won rarely but not never)."""
    pct = 100 * share
    return "<1%" if 0 < pct < 0.5 else f"{pct:.0f}%"


def stability_words(board: Any, nid: str) -> str | None:
    """'wins 83 % of 200 resamples (seed 0, rule aicc)' for a node after a stability run, else None."""
    stab = board.stability
    if stab is None:
        return None
    text = f"wins {share_text(stab.share(nid))} of {stab.resamples} resamples (seed {stab.seed}, rule {stab.rule})"
    if stab.resamples < board.stability_asked:
        text += f"; partial: stopped after {stab.resamples} of {board.stability_asked}"
    return text


def num(v: float | None, digits: int = 4) -> str:
    """A number for a table cell ('—' when missing or not finite): ``engine.numfmt.fmt_num``."""
    return fmt_num(v, digits)
