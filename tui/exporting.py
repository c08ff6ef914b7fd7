"""Export the selected node. For now: the node's JSON (``RemedyTree.node_json``).

The export issue will swap in a spec writer; the app calls only :func:`export_node`, so the
replacement happens here and nowhere else. No Textual imports: tests call it directly.
"""

from __future__ import annotations

import json
import os
import tempfile
from pathlib import Path
from typing import TYPE_CHECKING

from .output import _clean

if TYPE_CHECKING:
    from engine.remedies import RemedyTree

__all__ = ["export_node", "default_export_name"]


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


def default_export_name(node_id: str) -> str:
    """File name offered in the export dialog."""
    return f"bendwise-{node_id}.json"


def export_node(tree: RemedyTree, node_id: str, path: str | Path, force: bool = False) -> Path:
    """Write the node's JSON to ``path`` atomically and return the resolved path.

    Raises ``FileExistsError`` when the file exists and ``force`` is false (the app then asks
    for confirmation), ``IsADirectoryError`` for a folder, ``FileNotFoundError`` when the
    folder does not exist, ``KeyError`` for an unknown node. The file is written to a
    temporary name in the same folder and moved into place, so a reader never sees half a
    file; without ``force`` the move refuses to replace a file that appeared meanwhile.
    """
    from engine.remedies import POST_SEARCH_CAUTION

    target = Path(path).expanduser()
    if target.is_dir():
        raise IsADirectoryError(f"{target} is a folder; give a file name, e.g. {target / default_export_name(node_id)}")
    if not target.parent.is_dir():
        raise FileNotFoundError(f"folder {target.parent} does not exist; create it first or choose another path")
    if target.exists() and not force:
        raise FileExistsError(f"{target} exists; confirm to replace it")
    node = tree.nodes[node_id]
    doc = dict(tree.node_json(node))
    doc["alpha"] = tree.alpha
    doc["source"] = tree.study.source
    doc["response"] = tree.study.y_name
    doc["predictor"] = tree.study.x_name
    doc["caution"] = POST_SEARCH_CAUTION
    text = json.dumps(_clean(doc), indent=2, allow_nan=False, ensure_ascii=False) + "\n"
    fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".tmp", dir=target.parent)
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as fh:
            fh.write(text)
            fh.flush()
            os.fsync(fh.fileno())
        os.chmod(tmp, 0o666 & ~_umask())  # mkstemp makes 0600; give the file the usual mode
        if force:
            os.replace(tmp, target)
        else:
            try:
                os.link(tmp, target)  # fails if the name exists: never clobbers
            except FileExistsError:
                raise FileExistsError(f"{target} exists; confirm to replace it") from None
            except OSError:
                if target.exists():
                    raise FileExistsError(f"{target} exists; confirm to replace it") from None
                os.replace(tmp, target)  # file systems without hard links
            else:
                os.unlink(tmp)
    finally:
        if os.path.exists(tmp):
            os.unlink(tmp)
    return target.resolve()
