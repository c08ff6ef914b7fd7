"""mypy finds no error in engine/ or tui/ (the configuration is pyproject.toml's [tool.mypy])."""

from __future__ import annotations

from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]


@pytest.mark.slow
def test_mypy_is_clean_on_engine_and_tui(tmp_path):
    api = pytest.importorskip("mypy.api", reason="mypy is in the test extra: pip install -e '.[test]'")
    out, err, status = api.run(["--cache-dir", str(tmp_path / "cache"), "--no-error-summary",
                                "--config-file", str(ROOT / "pyproject.toml"), str(ROOT / "engine"), str(ROOT / "tui")])
    assert status == 0, out + err
