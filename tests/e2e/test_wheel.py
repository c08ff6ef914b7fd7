"""The built wheel, installed in a clean virtual environment, opens the demo at 80×24.

`.ci/run` builds the wheel (`pip wheel --no-deps .`), installs it into a fresh venv and points
``BENDWISE_WHEEL_BIN`` at that venv's `bendwise`; this test then starts it in a pseudo-terminal
from an empty folder (so nothing from the source tree can be found) and waits for the grown tree.
Outside CI, without the variable, it is skipped; in CI (``CI`` set) a missing variable fails.
"""

from __future__ import annotations

import os
import subprocess
from pathlib import Path

import pytest
from test_pty import Terminal, _env, pexpect  # the same pty helpers (tests/e2e on sys.path)

WHEEL_BIN = os.environ.get("BENDWISE_WHEEL_BIN")


def _bin() -> str:
    if not WHEEL_BIN:
        if os.environ.get("CI"):
            pytest.fail("CI must set BENDWISE_WHEEL_BIN to the wheel-installed bendwise (see .ci/run)")
        pytest.skip("BENDWISE_WHEEL_BIN is not set (.ci/run sets it after installing the wheel)")
    return WHEEL_BIN


def test_the_installed_wheel_opens_the_demo(tmp_path):
    term = Terminal([_bin(), "demo"], tmp_path, _env())
    try:
        screen = term.wait_for(lambda t: "Suggested (aicc" in t and "root" in t, "the grown tree", timeout=30)
        assert "FAIL" in screen and "pass" in screen
        term.send("q")
        term.child.expect(pexpect.EOF, timeout=10)
    finally:
        term.close()


def test_the_installed_wheel_has_its_package_data(tmp_path):
    python = Path(_bin()).parent / "python"
    code = ("from importlib.resources import files; import bendwise.engine, bendwise.tui; "
            "d = files('bendwise.datasets'); print(sorted(p.name for p in d.iterdir() if p.name.endswith('.csv'))); "
            "print(files('bendwise.engine.handon').joinpath('schema/spec-v1.json').is_file()); "
            "print(any(p.name.endswith('.tcss') for p in files('bendwise.tui').joinpath('styles').iterdir()))")
    out = subprocess.run([str(python), "-c", code], capture_output=True, text=True, cwd=tmp_path, timeout=60)
    assert out.returncode == 0, out.stderr
    lines = out.stdout.splitlines()
    assert "sensor_calibration.csv" in lines[0] and lines[1:] == ["True", "True"]
    # nothing installed under the generic top-level names
    clash = subprocess.run([str(python), "-c", "import " + "engine"], capture_output=True, text=True, cwd=tmp_path)
    assert clash.returncode != 0
