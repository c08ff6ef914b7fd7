"""Writing an export folder loses nothing: --force replaces only an export's own three files, and
no temporary folder or old copy is left behind, however the write ends (an interrupt included)."""

from __future__ import annotations

import os
from pathlib import Path

import bendwise.engine as engine
import bendwise.engine.handon.export as export_mod
import pytest
from bendwise.engine.errors import UsageError
from bendwise.engine.handon.export import EXPORT_FILES, export_node

LINE = Path(__file__).resolve().parents[2] / "datasets" / "straight_line.csv"


@pytest.fixture(scope="module")
def tree():
    study = engine.make_study(engine.load_table(LINE), y="response_au", x="dose_ug", source=LINE.name)
    return engine.grow(study, depth=0)


def _leftovers(folder: Path) -> list[str]:
    """Hidden temporary or replaced folders/links beside the exports."""
    return sorted(p.name for p in folder.iterdir() if p.name.startswith("."))


def test_force_refuses_a_folder_named_like_an_export_file(tree, tmp_path):
    out = tmp_path / "exp"
    export_node(tree, "root", out)
    (out / "report.md").unlink()
    (out / "report.md").mkdir()
    (out / "report.md" / "notes.txt").write_text("keep me", encoding="utf-8")
    with pytest.raises(UsageError, match=r"report\.md is a folder, not a file bendwise wrote"):
        export_node(tree, "root", out, force=True)
    assert (out / "report.md" / "notes.txt").read_text(encoding="utf-8") == "keep me"
    assert _leftovers(tmp_path) == []


def test_force_refuses_a_link_in_place_of_an_export_file(tree, tmp_path):
    out = tmp_path / "exp"
    export_node(tree, "root", out)
    precious = tmp_path / "precious.md"
    precious.write_text("mine", encoding="utf-8")
    (out / "report.md").unlink()
    (out / "report.md").symlink_to(precious)
    with pytest.raises(UsageError, match=r"report\.md is a link to .*precious\.md"):
        export_node(tree, "root", out, force=True)
    assert precious.read_text(encoding="utf-8") == "mine" and (out / "report.md").is_symlink()


def test_force_through_a_linked_folder_writes_there_and_leaves_no_old_link(tree, tmp_path):
    real = tmp_path / "real"
    export_node(tree, "root", real)
    link = tmp_path / "link"
    link.symlink_to(real, target_is_directory=True)
    before = (real / "spec.json").stat().st_mtime_ns
    export_node(tree, "root", link, force=True)
    assert link.is_symlink() and os.readlink(link) == str(real)
    assert sorted(p.name for p in real.iterdir()) == sorted(set(EXPORT_FILES) - {"report.html"})  # a Markdown-only export
    assert (real / "spec.json").stat().st_mtime_ns >= before
    assert _leftovers(tmp_path) == []


@pytest.mark.parametrize("where", ["write", "chmod", "swap"])
@pytest.mark.parametrize("replacing", [False, True], ids=["new", "force"])
def test_an_interrupt_leaves_no_temporary_folder_and_keeps_the_earlier_export(tree, tmp_path, monkeypatch,
                                                                                where, replacing):
    out = tmp_path / "exp"
    if replacing:
        export_node(tree, "root", out)
        earlier = (out / "spec.json").read_bytes()
    real_rename, real_chmod, real_open = os.rename, Path.chmod, open

    def interrupt(*a, **k):
        raise KeyboardInterrupt

    if where == "write":
        def fake_open(file, *a, **k):
            if str(file).endswith("report.md") and ".tmp" in str(file):
                raise KeyboardInterrupt
            return real_open(file, *a, **k)
        monkeypatch.setattr("builtins.open", fake_open)
    elif where == "chmod":
        monkeypatch.setattr(Path, "chmod", interrupt)
    else:  # between moving the earlier export aside and moving the new one in (or at the move)
        calls = []

        def fake_rename(src, dst):
            calls.append((src, dst))
            if len(calls) == (2 if replacing else 1):
                raise KeyboardInterrupt
            return real_rename(src, dst)
        monkeypatch.setattr(export_mod.os, "rename", fake_rename)
    with pytest.raises(KeyboardInterrupt):
        export_node(tree, "root", out, force=replacing)
    monkeypatch.setattr(export_mod.os, "rename", real_rename)
    monkeypatch.setattr(Path, "chmod", real_chmod)
    assert _leftovers(tmp_path) == []
    if replacing:
        assert (out / "spec.json").read_bytes() == earlier
    else:
        assert not out.exists()


def test_write_text_atomic_leaves_no_temporary_file_on_an_interrupt(tmp_path, monkeypatch):
    def interrupt(*a, **k):
        raise KeyboardInterrupt

    monkeypatch.setattr(export_mod.os, "replace", interrupt)
    with pytest.raises(KeyboardInterrupt):
        export_mod.write_text_atomic(tmp_path / "rows.csv", "a,b\n")
    assert list(tmp_path.iterdir()) == []
