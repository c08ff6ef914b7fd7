"""The app under fast keys and without a terminal: it never crashes and never hangs."""

from __future__ import annotations

import random
import subprocess
import sys
import time
from pathlib import Path

import pytest
from bendwise.tui.app import make_app

pytestmark = pytest.mark.slow  # app walks under Pilot: run 'python -m pytest tests/tui' when you touch the app

REPO = Path(__file__).resolve().parents[2]
DATA = REPO / "datasets" / "sensor_calibration.csv"
ARGS = dict(y="signal_mv", x="conc_mg_l", covariates=("run_day", "temp_c"))
STORM_KEYS = ["enter", "escape", "e", "a", "y", "n", "down", "enter", "escape", "e", "e", "n", "y", "escape"]


@pytest.mark.parametrize("seed", [1, 2, 3])
async def test_a_storm_of_dialog_keys_never_dismisses_a_screen_twice(tmp_path, seed):
    from bendwise.tui.screens.main import MainScreen

    rng = random.Random(seed)
    keys = [rng.choice(STORM_KEYS) for _ in range(200)]
    app = make_app(DATA, **ARGS, export_dir=tmp_path, depth=1)
    async with app.run_test(size=(80, 24)) as pilot:
        await app.workers.wait_for_complete()
        await pilot.pause()
        for i in range(0, len(keys), 8):  # bursts: the keys of a burst arrive before any repaint
            for key in keys[i:i + 8]:
                app.post_message(_key(key))
            await pilot.pause()
            await app.workers.wait_for_complete()
        await pilot.pause()
        for _ in range(6):  # close whatever dialog the storm left open
            if isinstance(app.screen, MainScreen):
                break
            await pilot.press("escape")
            await pilot.pause()
        assert isinstance(app.screen, MainScreen)
    assert app.return_code in (None, 0)
    assert app._exception is None


def _key(name: str):
    from textual import events

    char = {"enter": "\r", "escape": "\x1b", "down": None}.get(name, name)
    return events.Key(name, char)


# ----------------------------------------------------------------------------- no terminal


def _cli(args: list[str], stdin, timeout: float = 60.0) -> tuple[subprocess.CompletedProcess, float]:
    start = time.monotonic()
    done = subprocess.run([sys.executable, "-m", "bendwise.tui.cli", *args], stdin=stdin, capture_output=True, text=True,
                          timeout=timeout, cwd=REPO)
    return done, time.monotonic() - start


@pytest.mark.parametrize("args", [["demo"], ["open", str(DATA), "-y", "signal_mv", "-x", "conc_mg_l"],
                                  [str(DATA)]], ids=["demo", "open", "bare"])
def test_the_app_refuses_at_once_without_a_terminal(args):
    done, took = _cli(args, subprocess.DEVNULL)
    assert done.returncode == 2
    assert done.stderr.count("\n") == 1 and "needs a terminal" in done.stderr
    assert "bendwise check" in done.stderr and "grow" in done.stderr
    assert done.stdout == ""
    assert took < 30  # it refuses; it does not sit in a loop waiting for keys


def test_the_app_refuses_a_piped_table_when_no_terminal_can_be_opened():
    """Output on a terminal but no controlling terminal (a new session): after reading the table
    from the pipe there is no /dev/tty for the keys, and the app says so instead of hanging."""
    import os
    import pty

    master, slave = pty.openpty()
    proc = None
    try:
        start = time.monotonic()
        proc = subprocess.Popen([sys.executable, "-m", "bendwise.tui.cli", "open", "-", "-y", "signal_mv", "-x", "conc_mg_l"],
                                stdin=subprocess.PIPE, stdout=slave, stderr=slave, cwd=REPO, start_new_session=True)
        os.close(slave)
        slave = -1
        assert proc.stdin is not None
        proc.stdin.write(DATA.read_bytes())
        proc.stdin.close()
        code = proc.wait(timeout=60)
        took = time.monotonic() - start
        chunks = []
        while True:
            try:
                chunk = os.read(master, 65536)
            except OSError:
                break
            if not chunk:
                break
            chunks.append(chunk)
    finally:
        if proc is not None and proc.poll() is None:  # never leave a child waiting for keys
            proc.kill()
            proc.wait(timeout=10)
        os.close(master)
        if slave >= 0:
            os.close(slave)
    out = b"".join(chunks).decode(errors="replace").replace("\r", "")
    assert code == 2, out
    lines = [ln for ln in out.splitlines() if ln.strip()]
    assert len(lines) == 1 and "no terminal can be opened for the keys" in lines[0], out
    assert "bendwise check" in lines[0]
    assert took < 30
