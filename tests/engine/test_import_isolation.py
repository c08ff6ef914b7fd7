"""The engine stays headless and cheap to import (checked in fresh interpreters)."""

from __future__ import annotations

import json
import subprocess
import sys
import textwrap
from pathlib import Path

REPO = Path(__file__).resolve().parents[2]

UI_MODULES = ("textual", "rich", "plotext", "tui")
HEAVY_MODULES = ("pandas", "scipy", "statsmodels")


def _loaded_after(code: str, watch: tuple[str, ...]) -> list[str]:
    """Run ``code`` in a fresh interpreter; return which watched top-level modules got imported."""
    probe = textwrap.dedent(code) + textwrap.dedent(
        f"""
        import json, sys
        watch = {watch!r}
        print(json.dumps(sorted({{m.split(".")[0] for m in sys.modules}} & set(watch))))
        """
    )
    done = subprocess.run(
        [sys.executable, "-c", probe], cwd=REPO, capture_output=True, text=True, timeout=120
    )
    assert done.returncode == 0, done.stderr
    return json.loads(done.stdout.strip().splitlines()[-1])


def test_check_runs_without_any_ui_module():
    loaded = _loaded_after(
        """
        import pandas as pd
        import bendwise.engine as engine
        frame = pd.DataFrame({"x": [1, 1, 2, 2, 3, 3, 4, 4], "y": [1.0, 1.2, 2.1, 1.9, 3.2, 2.8, 4.5, 4.1]})
        result = engine.check(engine.make_study(frame, y="y", x="x"))
        assert result.lack_of_fit.testable
        frame = pd.DataFrame({"x": [1, 2, 3, 4, 5, 6, 7], "y": [1.0, 2.2, 2.9, 4.3, 4.8, 6.4, 6.9]})
        assert engine.check(engine.make_study(frame, y="y", x="x")).replicate_free
        """,
        UI_MODULES + HEAVY_MODULES,
    )
    assert "pandas" in loaded and "statsmodels" in loaded  # the probe does see imports
    assert not set(loaded) & set(UI_MODULES), loaded


def test_importing_the_engine_is_light():
    loaded = _loaded_after("import bendwise.engine\n", UI_MODULES + HEAVY_MODULES)
    assert loaded == [], f"import bendwise.engine pulled in {loaded}"
