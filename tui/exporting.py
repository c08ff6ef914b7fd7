"""Export the selected node from the app: the same spec folder ``bendwise export`` writes.

One function, :func:`export_node`, wraps :func:`engine.export.export_node` (spec.json,
reproduce.py, report.md and/or report.html, written atomically into a new folder) and turns its refusals into the
exceptions the app's dialogs understand. No Textual imports: tests call it directly.
"""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from bendwise.engine.tree.tree import RemedyTree

__all__ = ["export_node", "default_export_name"]


def default_export_name(node_id: str) -> str:
    """Folder name offered in the export dialog."""
    return f"bendwise-{node_id}"


def export_node(tree: RemedyTree, node_id: str, path: str | Path, force: bool = False, *,
                data_path: str | Path | None = None, reading: dict[str, Any] | None = None,
                report: str = "md", rule: str = "aicc", stability: Any = None) -> Path:
    """Write the node's spec folder at ``path`` and return it (resolved).

    Raises ``FileExistsError`` when ``path`` exists and ``force`` is false (the app then asks for
    confirmation; with ``force`` only an earlier export folder is replaced), ``FileNotFoundError``
    when the parent folder does not exist, ``KeyError`` for an unknown node and ``ValueError``
    when the engine refuses the node (e.g. collinear terms), with its one-line reason.
    ``report`` is 'md', 'html' or 'both' (which report files the folder gets); ``rule`` is the
    suggestion rule on screen and ``stability`` a selection-stability result of this very tree.
    """
    from bendwise.engine.errors import BendwiseError
    from bendwise.engine.handon.export import ExportExists
    from bendwise.engine.handon.export import export_node as write_export
    from bendwise.engine.read.files import describe_reading

    if node_id not in tree.nodes:
        raise KeyError(node_id)
    target = Path(path).expanduser()
    if not target.parent.is_dir():
        raise FileNotFoundError(f"folder {target.parent} does not exist; create it first or choose another path")
    if target.exists() and not force:
        raise FileExistsError(f"{target} exists; confirm to replace it")
    if data_path is not None and str(data_path) != "-" and reading is None:
        reading = describe_reading(data_path)
    try:
        write_export(tree, node_id, target, data_path=None if str(data_path) == "-" else data_path,
                     reading=reading, force=force, report=report, rule=rule, stability=stability)
    except ExportExists as exc:
        raise FileExistsError(str(exc)) from None
    except BendwiseError as exc:
        raise ValueError(str(exc)) from None
    return target.resolve()
