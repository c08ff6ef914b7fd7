"""pyproject.toml installs every package folder of the source tree under ``bendwise.``."""

from __future__ import annotations

import tomllib
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]


def test_every_package_folder_is_installed_under_bendwise():
    conf = tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))["tool"]["setuptools"]
    listed = set(conf["packages"])
    folders = {"bendwise." + ".".join(p.parent.relative_to(ROOT).parts)
               for top in ("engine", "tui", "datasets") for p in (ROOT / top).rglob("__init__.py")}
    assert folders == listed, f"add to pyproject: {sorted(folders - listed)}; remove: {sorted(listed - folders)}"
    assert conf["package-dir"] == {"bendwise.engine": "engine", "bendwise.tui": "tui", "bendwise.datasets": "datasets"}


def test_package_data_exists_where_declared():
    conf = tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))["tool"]["setuptools"]
    for package, patterns in conf["package-data"].items():
        folder = ROOT.joinpath(*package.split(".")[1:])
        for pattern in patterns:
            assert list(folder.glob(pattern)), f"{package}: nothing matches {pattern} in {folder}"
