"""The real console entry point in a pseudo-terminal at 80×24 (pexpect + pyte).

Each step polls the emulated screen until a condition holds or a deadline passes (no fixed
sleeps), and on failure prints the screen it saw.
"""

from __future__ import annotations

import json
import os
import re
import shlex
import shutil
import sys
import time
from pathlib import Path

import pytest

pytestmark = pytest.mark.slow  # the real entry point in a pseudo-terminal

pexpect = pytest.importorskip("pexpect")
pyte = pytest.importorskip("pyte")

DOWN = "\x1b[B"
ENTER = "\r"
CTRL_U = "\x15"


def _bendwise() -> str:
    exe = Path(sys.executable).parent / "bendwise"
    if exe.exists():
        return str(exe)
    found = shutil.which("bendwise")
    if found is None:
        pytest.skip("the bendwise console script is not installed (pip install -e .)")
    return found


class Terminal:
    """A child process on a pty, its output fed to a pyte screen."""

    def __init__(self, args: list[str], cwd: Path, env: dict[str, str], cols: int = 80, rows: int = 24) -> None:
        self.screen = pyte.Screen(cols, rows)
        self.stream = pyte.ByteStream(self.screen)
        self.child = pexpect.spawn(args[0], args[1:], cwd=str(cwd), env=env, dimensions=(rows, cols))
        self.child.delaybeforesend = None  # pexpect's default 50 ms pause before each send

    def pump(self) -> None:
        while True:
            try:
                data = self.child.read_nonblocking(65536, timeout=0.05)
            except (pexpect.TIMEOUT, pexpect.EOF):
                return
            self.stream.feed(data)

    @property
    def text(self) -> str:
        return "\n".join(self.screen.display)

    def wait_for(self, check, what: str, timeout: float = 15.0) -> str:
        deadline = time.monotonic() + timeout
        while time.monotonic() < deadline:
            self.pump()
            if check(self.text):
                return self.text
        raise AssertionError(f"timed out waiting for {what}; the screen was:\n{self.text}")

    def send(self, keys: str) -> None:
        self.child.send(keys)

    def close(self) -> None:
        if self.child.isalive():
            self.child.terminate(force=True)


def _env(**extra: str) -> dict[str, str]:
    env = {k: v for k, v in os.environ.items() if k not in {"NO_COLOR", "BENDWISE_PLAIN", "COLUMNS", "LINES"}}
    env["TERM"] = "xterm-256color"
    env.update(extra)
    return env


def _type_path(term: Terminal, target: Path) -> None:
    """Clear the path field, type the path, check it arrived, then Enter."""
    term.send(CTRL_U)
    term.wait_for(lambda t: "bendwise-n" not in t, "the cleared path field")
    term.send(str(target))
    term.wait_for(lambda t: target.name in t, "the typed path")
    term.send(ENTER)


def test_demo_walk_export_quit(tmp_path):
    started = time.monotonic()
    term = Terminal([_bendwise(), "demo"], tmp_path, _env())
    try:
        screen = term.wait_for(lambda t: "Suggested (aicc" in t and "root" in t, "the grown tree", timeout=20)
        assert "FAIL" in screen and "pass" in screen  # verdicts as words
        assert "p-values after a search are optimistic" in screen
        suggested = re.search(r"Suggested \(aicc, α 0\.05\): (n\d+)", screen).group(1)
        # move down: the detail follows the cursor
        term.send(DOWN)
        term.wait_for(lambda t: "n1 log signal_mv" in t, "the detail of n1")
        # jump to the suggestion and export it
        term.send("n")
        term.wait_for(lambda t: "SUGGESTED" in t, "the suggested node's detail")
        target = tmp_path / "chosen"
        term.send("e")
        term.wait_for(lambda t: f"Export {suggested}" in t, "the export dialog")
        _type_path(term, target)
        term.wait_for(lambda t: (target / "spec.json").exists() and "exported" in t, "the export notice")
        doc = json.loads((target / "spec.json").read_text(encoding="utf-8"))
        text = json.dumps(doc)
        assert f'"{suggested}"' in text and "optimistic" in text
        assert (target / "reproduce.py").exists() and (target / "report.md").exists()
        # the same path again is not overwritten without a yes
        term.send("e")
        term.wait_for(lambda t: f"Export {suggested}" in t, "the export dialog again")
        _type_path(term, target)
        term.wait_for(lambda t: "Replace it?" in t, "the overwrite question")
        term.send("n")
        term.wait_for(lambda t: "kept as it was" in t, "the refusal notice")
        term.send("q")
        term.child.expect(pexpect.EOF, timeout=10)
        term.child.close()
        assert term.child.exitstatus == 0
    finally:
        term.close()
    assert time.monotonic() - started < 30


def test_linux_console_and_no_color(tmp_path):
    """TERM=linux and NO_COLOR=1: words for verdicts, plain chart markers, no block glyphs."""
    term = Terminal([_bendwise(), "demo"], tmp_path, _env(TERM="linux", NO_COLOR="1"))
    try:
        term.wait_for(lambda t: "Suggested (aicc" in t, "the grown tree", timeout=20)
        term.send("3")  # the fitted-curve chart
        screen = term.wait_for(lambda t: "fitted curve" in t and "*" in t, "the curve chart")
        chart = screen[screen.index("Fitted curve"):]
        assert not [ch for ch in chart if 0x2800 <= ord(ch) <= 0x28FF or 0x2596 <= ord(ch) <= 0x259F], chart
        assert "•" in chart and "* fitted curve" in chart
        assert "FAIL" in screen and "pass" in screen
        term.send("q")
        term.child.expect(pexpect.EOF, timeout=10)
    finally:
        term.close()


def test_table_piped_in_then_keys_from_the_terminal(tmp_path):
    """`cat t.csv | bendwise open - …`: the table comes from the pipe, the keys from /dev/tty."""
    repo = Path(__file__).resolve().parents[2]
    data = repo / "datasets" / "sensor_calibration.csv"
    cmd = (f"cat {shlex.quote(str(data))} | exec {shlex.quote(sys.executable)} -m bendwise.tui.cli open - "
           "-y signal_mv -x conc_mg_l --depth 1")
    term = Terminal(["/bin/sh", "-c", cmd], repo, _env())
    try:
        term.wait_for(lambda t: "Suggested (aicc" in t and "root" in t, "the grown tree", timeout=30)
        term.send(DOWN)
        term.wait_for(lambda t: "n1 log signal_mv" in t, "the detail of n1 (a key from the terminal)")
        term.send("q")
        term.child.expect(pexpect.EOF, timeout=10)
        term.child.close()
        assert term.child.exitstatus == 0
    finally:
        term.close()


def _reversed_words(term: Terminal, row: int) -> str:
    """The characters of one screen row drawn in reverse video."""
    line = term.screen.buffer[row]
    return "".join(line[x].data if line[x].reverse else " " for x in range(term.screen.columns))


@pytest.mark.parametrize("extra", [{"NO_COLOR": "1"}, {"TERM": "linux"}], ids=["no-color", "linux"])
def test_without_colour_the_cursor_and_fail_are_reverse_video(tmp_path, extra):
    """The real terminal at 80×24 without colour: the cursor row and every FAIL are in reverse
    video, tree lines end with the move, and no message box covers the detail."""
    term = Terminal([_bendwise(), "demo"], tmp_path, _env(**extra))
    try:
        def painted(t: str) -> bool:  # the tree and its cursor row drawn (not a frame caught mid-paint)
            rows = t.splitlines()
            if "Suggested (aicc" not in t or not any(" n1 " in r and "FAIL log y" in r for r in rows):
                return False
            root = next((i for i, r in enumerate(rows) if " root " in r), None)
            return root is not None and "root FAIL y ~ x" in _reversed_words(term, root)

        screen = term.wait_for(painted, "the grown tree with its cursor row", timeout=20)
        rows = screen.splitlines()
        root = next(i for i, r in enumerate(rows) if " root " in r)
        assert "root FAIL y ~ x" in _reversed_words(term, root)  # the cursor row
        n1 = next(i for i, r in enumerate(rows) if " n1 " in r)
        assert "FAIL" in _reversed_words(term, n1) and "log y" not in _reversed_words(term, n1)
        assert rows[n1].split("│")[1].rstrip().endswith("FAIL log y")
        term.send("s")
        screen = term.wait_for(lambda t: "siblings ordered by aicc" in t, "the message line")
        message = next(r for r in screen.splitlines() if "siblings ordered" in r)
        assert "│" not in message  # a line of its own, under the panes, not over the detail
        term.send("q")
        term.child.expect(pexpect.EOF, timeout=10)
    finally:
        term.close()
