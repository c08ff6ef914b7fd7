"""The remedy tree as a Textual Tree: one line per engine node, payload = node id.

The widget owns what it shows: the board (a TreeSummary), the sibling order, the filter and the
marked node are reactives; changing any of them redraws the lines.
"""

from __future__ import annotations

import time
from collections.abc import Callable
from typing import TYPE_CHECKING, ClassVar

from textual.binding import Binding, BindingType
from textual.reactive import reactive
from textual.widgets import Tree
from textual.widgets.tree import TreeNode

from ..messages import TreeSummary
from .formatting import plain_glyphs, tree_label, verdict_word

if TYPE_CHECKING:
    from bendwise.engine.tree.tree import Node
    from textual.timer import Timer

__all__ = ["RemedyTreeView", "SORTS"]

SORTS = ("moves", "aicc", "bic", "simplest", "press")
"""Sibling orders: the order the moves were generated, then the engine's rules."""


class RemedyTreeView(Tree[str]):
    """Keyboard tree of candidate models; every line says its verdict in a word."""

    BINDINGS: ClassVar[list[BindingType]] = [
        Binding("up", "cursor_up", "Up", show=False, id="tree.up.arrow", tooltip="Move to the line above"),
        Binding("down", "cursor_down", "Down", show=False, id="tree.down.arrow", tooltip="Move to the line below"),
        Binding("pageup", "page_up", "Page up", show=False, id="tree.page.up", tooltip="Move up a screenful"),
        Binding("pagedown", "page_down", "Page down", show=False, id="tree.page.down",
                tooltip="Move down a screenful"),
        Binding("enter", "toggle_node", "Open / close", show=False, id="tree.toggle",
                tooltip="Show or hide the children of the highlighted node (a node not grown yet grows)"),
        Binding("right", "expand_or_child", "Open / to first child", show=False, id="tree.open",
                tooltip="Show the children of the highlighted node, or move to its first child"),
        Binding("left", "collapse_or_parent", "Close / to parent", show=False, id="tree.close",
                tooltip="Hide the children of the highlighted node, or move to its parent"),
        Binding("j", "cursor_down", "Down", show=False, id="tree.down", tooltip="Move down (as ↓)"),
        Binding("k", "cursor_up", "Up", show=False, id="tree.up", tooltip="Move up (as ↑)"),
        Binding("home", "cursor_root", "To the root", show=False, id="tree.root", tooltip="Move to the root"),
    ]

    board: reactive[TreeSummary | None] = reactive(None, always_update=True, init=False)
    """What the lines show (None until the root is scored)."""
    sort: reactive[str] = reactive("moves", init=False)
    """Sibling order: one of SORTS."""
    only_passing: reactive[bool] = reactive(False, init=False)
    """Show only nodes that pass lack of fit (and the nodes leading to them)."""
    marked: reactive[str | None] = reactive(None, init=False)
    """The node marked for comparison."""

    def __init__(self, *, id: str | None = None) -> None:
        super().__init__("remedies", id=id)
        self.show_root = True
        self.guide_depth = 2
        self.ICON_NODE, self.ICON_NODE_EXPANDED = self.icons()
        self._lines: dict[str, TreeNode[str]] = {}
        self._collapsed: set[str] = set()
        self._queued: list[str] = []
        """Nodes scored during the first growth and not drawn yet (lines are added in batches)."""
        self._queued_since = 0.0
        self._queue_timer: Timer | None = None
        self._last_move = 0.0
        self.on_cursor: Callable[[str], None] | None = None
        """Called at once when the cursor lands on a node, so the detail is drawn in the same
        frame as the cursor (the NodeHighlighted message arrives a frame later)."""

    @classmethod
    def icons(cls) -> tuple[str, str]:
        """(closed, open) marks in front of a line that has (or can grow) children."""
        if plain_glyphs():
            return "+ ", "- "
        return Tree.ICON_NODE, Tree.ICON_NODE_EXPANDED

    def watch_cursor_line(self, previous_line: int, line: int) -> None:
        super().watch_cursor_line(previous_line, line)
        self._last_move = time.monotonic()
        node = self.cursor_node
        callback = getattr(self, "on_cursor", None)  # the watcher also runs inside __init__
        if callback is not None and node is not None and node.data is not None:
            callback(node.data)

    # ---- building -----------------------------------------------------------------
    def watch_board(self) -> None:
        self._drop_queued()
        self.redraw()

    def watch_sort(self) -> None:
        self.redraw()

    def watch_only_passing(self) -> None:
        self.redraw()

    def watch_marked(self) -> None:
        self.redraw()

    def redraw(self) -> None:
        """Redraw every line from the board, keeping the cursor on the same node."""
        if self.board is not None:
            self._rebuild(self.board, sort=self.sort, only_passing=self.only_passing, marked=self.marked)

    def _rebuild(self, board: TreeSummary, *, sort: str, only_passing: bool, marked: str | None) -> None:
        keep = self.highlighted_id
        self._remember_collapsed()
        self.clear()
        self._lines = {}
        visible = self._visible(board, only_passing)
        key = None if sort == "moves" else board.tree.sort_key(sort)
        suggested = board.suggestion.node if board.suggestion is not None else None

        stab = board.stability

        def label(nid: str):
            return tree_label(board.nodes[nid], board.json[nid], board.alpha, suggested=nid == suggested,
                              marked=nid == marked, share=None if stab is None else stab.share(nid))

        self.root.set_label(label("root"))
        self.root.data = "root"
        self._lines["root"] = self.root

        def add(parent_line: TreeNode[str], nid: str) -> None:
            kids = [c for c in board.children.get(nid, ()) if c in visible]
            if key is not None:
                kids.sort(key=lambda c: key(board.nodes[c]))
            for cid in kids:
                has_kids = any(g in visible for g in board.children.get(cid, ()))
                growable = self.growable(board, cid)
                # a node not grown yet shows an expand mark; opening it asks the screen to grow it
                line = parent_line.add(label(cid), data=cid, expand=has_kids and cid not in self._collapsed,
                                       allow_expand=has_kids or growable)
                self._lines[cid] = line
                add(line, cid)

        add(self.root, "root")
        root_kids = any(c in visible for c in board.children.get("root", ()))
        self.root.allow_expand = root_kids or self.growable(board, "root")
        if root_kids and "root" not in self._collapsed:
            self.root.expand()
        self._settle()
        self.select_id(keep if keep in self._lines else "root")

    def add_scored(self, node: Node, json: dict) -> None:
        """A node scored during the first growth: into the board now, onto the screen in a batch.

        Adding a line re-lays out the screen; batching keeps keys quick while hundreds of nodes
        arrive, and the lines stay still while the cursor moves.
        """
        board = self.board
        if board is None or board.complete:
            return
        board.nodes[node.id] = node
        board.json[node.id] = json
        board.children[node.id] = ()
        if node.parent is not None:
            board.children[node.parent] = (*board.children.get(node.parent, ()), node.id)
        if self.only_passing:
            return
        if not self._queued:
            self._queued_since = time.monotonic()
        self._queued.append(node.id)
        if self._queue_timer is None:
            self._queue_timer = self.set_timer(0.25, self._draw_queued)

    def _draw_queued(self) -> None:
        self._queue_timer = None
        now = time.monotonic()
        if now - self._last_move < 0.4 and now - self._queued_since < 2.0:
            # the user is moving through the tree: keep the lines still and the keys quick
            self._queue_timer = self.set_timer(0.25, self._draw_queued)
            return
        board, ids = self.board, self._queued
        self._queued = []
        if board is not None and not board.complete:
            self.add_scored_many(board, ids)

    def _drop_queued(self) -> None:
        if self._queue_timer is not None:
            self._queue_timer.stop()
            self._queue_timer = None
        self._queued = []

    def add_scored_many(self, board: TreeSummary, ids: list[str]) -> None:
        """Append freshly scored nodes under their parents (during growth), in one go."""
        for nid in ids:
            node = board.nodes[nid]
            parent = self._lines.get(node.parent or "")
            if parent is None or nid in self._lines:
                continue
            line = parent.add(tree_label(node, board.json[nid], board.alpha, suggested=False, marked=False),
                              data=nid, expand=False, allow_expand=False)
            parent.allow_expand = True
            self._lines[nid] = line
            if not parent.is_expanded and node.parent not in self._collapsed:
                parent.expand()
        self._settle()

    def _settle(self) -> None:
        """Rebuild Textual's line cache now. Left stale, a key pressed before the next idle
        moves the cursor and the rebuild inside that move puts it back (Textual 8.2)."""
        getattr(self, "_tree_lines", None)

    def start(self, board: TreeSummary) -> None:
        """Show the root alone (growth has just begun); the board fills as nodes are scored."""
        self.set_reactive(RemedyTreeView.board, board)
        self._drop_queued()
        self.clear()
        self._lines = {"root": self.root}
        self.root.data = "root"
        self.root.set_label(tree_label(board.nodes["root"], board.json["root"], board.alpha, suggested=False,
                                       marked=False))
        self.root.expand()
        self._settle()
        self.move_cursor(self.root)

    @staticmethod
    def growable(board: TreeSummary, nid: str) -> bool:
        """True for a scored node whose moves were not generated yet."""
        node = board.nodes[nid]
        return node.score is not None and not node.expanded

    @staticmethod
    def _visible(board: TreeSummary, only_passing: bool) -> set[str]:
        if not only_passing:
            return set(board.nodes)
        keep: set[str] = {"root"}

        def walk(nid: str) -> bool:
            shown = verdict_word(board.json[nid], board.alpha) == "pass"
            for cid in board.children.get(nid, ()):
                shown = walk(cid) or shown
            if shown:
                keep.add(nid)
            return shown

        walk("root")
        return keep

    def _remember_collapsed(self) -> None:
        for nid, line in self._lines.items():
            if line.allow_expand and not line.is_expanded:
                self._collapsed.add(nid)
            else:
                self._collapsed.discard(nid)

    # ---- cursor -------------------------------------------------------------------
    @property
    def highlighted_id(self) -> str | None:
        """Engine id of the node under the cursor."""
        line = self.cursor_node
        return None if line is None else line.data

    @property
    def shown_ids(self) -> list[str]:
        """Ids currently in the tree (any expansion state), in display order."""
        return list(self._lines)

    def select_id(self, nid: str) -> bool:
        """Move the cursor to a node, opening its ancestors; False when it is not shown."""
        line = self._lines.get(nid)
        if line is None:
            return False
        up = line.parent
        while up is not None:
            if not up.is_expanded:
                up.expand()
            up = up.parent
        self._settle()
        self.move_cursor(line)
        self.call_after_refresh(self._scroll_to_cursor)
        return True

    def _scroll_to_cursor(self) -> None:
        if self.cursor_node is not None:
            self.scroll_to_node(self.cursor_node, animate=False)

    def action_cursor_root(self) -> None:
        self.move_cursor(self.root)
        self.call_after_refresh(self._scroll_to_cursor)

    def action_expand_or_child(self) -> None:
        line = self.cursor_node
        if line is None:
            return
        if line.allow_expand and not line.is_expanded:
            line.expand()
        elif line.children:
            self.move_cursor(line.children[0])

    def action_collapse_or_parent(self) -> None:
        line = self.cursor_node
        if line is None:
            return
        if line.allow_expand and line.is_expanded and line.children:
            line.collapse()
        elif line.parent is not None:
            self.move_cursor(line.parent)
