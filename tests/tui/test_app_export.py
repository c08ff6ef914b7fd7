"""Export of the selected node: one function (tui.exporting.export_node), atomic, never
overwriting without confirmation; and the dialog flow that uses it."""

from __future__ import annotations

import json
import math
from pathlib import Path

import pytest
from bendwise.engine import load_table, make_study
from bendwise.engine.handon.specfile import schema_path
from bendwise.engine.tree.tree import POST_SEARCH_CAUTION, RemedyTree
from bendwise.tui.app import make_app
from bendwise.tui.exporting import export_node

pytestmark = pytest.mark.slow  # app walks under Pilot: run 'python -m pytest tests/tui' when you touch the app

DATA = Path(__file__).resolve().parents[2] / "datasets" / "sensor_calibration.csv"
ARGS = dict(y="signal_mv", x="conc_mg_l", covariates=("run_day", "temp_c"))


@pytest.fixture(scope="module")
def tree() -> RemedyTree:
    study = make_study(load_table(DATA), y="signal_mv", x="conc_mg_l", covariates=["run_day", "temp_c"],
                       source=DATA.name)
    t = RemedyTree(study)
    t.grow(2)
    return t


def _same(a, b) -> bool:
    """JSON round trip: NaN/inf become null, tuples lists."""
    if isinstance(a, dict):
        return a.keys() == b.keys() and all(_same(a[k], b[k]) for k in a)
    if isinstance(a, (list, tuple)):
        return len(a) == len(b) and all(_same(x, y) for x, y in zip(a, b, strict=True))
    if isinstance(a, float) and not math.isfinite(a):
        return b is None
    return a == b


def _spec(folder: Path) -> dict:
    return json.loads((folder / "spec.json").read_text(encoding="utf-8"))


def test_export_writes_the_spec_folder(tree, tmp_path):
    import jsonschema

    out = export_node(tree, "n6", tmp_path / "n6", data_path=DATA)
    assert sorted(p.name for p in out.iterdir()) == ["report.md", "reproduce.py", "spec.json"]
    doc = _spec(out)
    schema = json.loads(schema_path().read_text())
    jsonschema.validate(doc, schema)  # reference: the project's own JSON Schema, checked by jsonschema
    text = json.dumps(doc)
    assert POST_SEARCH_CAUTION in text
    # the coefficients are the engine's numbers for that node
    est = {c.name: c.estimate for c in tree.nodes["n6"].score.fit.coefficients}
    assert "n6" in text and all(repr(v)[:8] in text for v in est.values())
    assert list(tmp_path.iterdir()) == [out]  # no temporary folder left behind


def test_export_never_overwrites_without_force(tree, tmp_path):
    target = tmp_path / "model"
    target.mkdir()
    (target / "keep.txt").write_text("keep me", encoding="utf-8")
    with pytest.raises(FileExistsError):
        export_node(tree, "n6", target, data_path=DATA)
    assert (target / "keep.txt").read_text(encoding="utf-8") == "keep me"
    # force replaces only an earlier export, never a folder with other files
    with pytest.raises((FileExistsError, ValueError)):
        export_node(tree, "n6", target, force=True, data_path=DATA)
    assert (target / "keep.txt").exists()
    first = export_node(tree, "root", tmp_path / "again", data_path=DATA)
    export_node(tree, "n6", first, force=True, data_path=DATA)
    assert "n6" in (first / "spec.json").read_text(encoding="utf-8")


def test_export_refuses_missing_folders_and_unknown_nodes(tree, tmp_path):
    with pytest.raises(FileNotFoundError):
        export_node(tree, "n6", tmp_path / "no" / "such", data_path=DATA)
    with pytest.raises(KeyError):
        export_node(tree, "n999", tmp_path / "x", data_path=DATA)


async def _ready(app, pilot):
    await app.workers.wait_for_complete()
    await pilot.pause()
    await pilot.pause()


async def test_export_dialog_writes_then_asks_before_replacing(tree, tmp_path):
    from bendwise.tui.dialogs import ConfirmDialog, ExportDialog
    from bendwise.tui.widgets.remedy_tree import RemedyTreeView

    app = make_app(DATA, **ARGS, export_dir=tmp_path)
    target = tmp_path / "chosen"
    async with app.run_test(size=(80, 24)) as pilot:
        await _ready(app, pilot)
        view = app.screen.query_one(RemedyTreeView)
        assert view.select_id("n6")
        await pilot.pause()
        await pilot.press("e")
        await pilot.pause()
        assert isinstance(app.screen, ExportDialog)
        assert app.screen.query_one("#export-path").value == str(tmp_path / "bendwise-n6")
        await pilot.press("ctrl+u", *str(target), "enter")
        await pilot.pause()
        assert '"n6"' in (target / "spec.json").read_text(encoding="utf-8")
        # the same path again, from another node: a question first; "n" keeps the file
        view = app.screen.query_one(RemedyTreeView)
        assert view.select_id("root")
        await pilot.pause()
        await pilot.press("e")
        await pilot.pause()
        await pilot.press("ctrl+u", *str(target), "enter")
        await pilot.pause()
        assert isinstance(app.screen, ConfirmDialog)
        await pilot.press("n")
        await pilot.pause()
        assert '"n6"' in (target / "spec.json").read_text(encoding="utf-8")
        # and "y" replaces it
        await pilot.press("e")
        await pilot.pause()
        await pilot.press("ctrl+u", *str(target), "enter")
        await pilot.pause()
        assert isinstance(app.screen, ConfirmDialog)
        await pilot.press("y")
        await pilot.pause()
        assert '"root"' in (target / "spec.json").read_text(encoding="utf-8")
        assert sorted(p.name for p in tmp_path.iterdir()) == ["chosen"]


async def test_export_dialog_escape_writes_nothing(tmp_path):
    from bendwise.tui.dialogs import ExportDialog

    app = make_app(DATA, **ARGS, export_dir=tmp_path)
    async with app.run_test(size=(80, 24)) as pilot:
        await _ready(app, pilot)
        await pilot.press("e")
        await pilot.pause()
        assert isinstance(app.screen, ExportDialog)
        await pilot.press("escape")
        await pilot.pause()
        assert not isinstance(app.screen, ExportDialog)
    assert list(tmp_path.iterdir()) == []


async def test_export_dialog_offers_md_html_or_both(tree, tmp_path):
    """The dialog starts at both (matplotlib is in the test extra); ctrl+t switches to html, then md."""
    pytest.importorskip("matplotlib")
    from bendwise.tui.dialogs import ExportDialog
    from bendwise.tui.widgets.remedy_tree import RemedyTreeView

    app = make_app(DATA, **ARGS, export_dir=tmp_path)
    async with app.run_test(size=(100, 24)) as pilot:
        await _ready(app, pilot)
        for target, presses, expected in (
            (tmp_path / "both", 0, {"spec.json", "reproduce.py", "report.md", "report.html"}),
            (tmp_path / "html", 1, {"spec.json", "reproduce.py", "report.html"}),
            (tmp_path / "md", 2, {"spec.json", "reproduce.py", "report.md"}),
        ):
            assert app.screen.query_one(RemedyTreeView).select_id("n6")
            await pilot.pause()
            await pilot.press("e")
            await pilot.pause()
            assert isinstance(app.screen, ExportDialog)
            for _ in range(presses):
                await pilot.press("ctrl+t")
            await pilot.pause()
            shown = str(app.screen.query_one("#export-report").render())
            assert ("report.html" in shown) == (expected >= {"report.html"})
            await pilot.press("ctrl+u", *str(target), "enter")
            await pilot.pause()
            assert {p.name for p in target.iterdir()} == expected
