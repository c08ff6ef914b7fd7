"""bench/speed.py, the one command for every speed figure: it refuses an unknown part and an
existing report file in one line, and a quick run of one part copies that script's table."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]
SPEED = ROOT / "bench" / "speed.py"


def _run(*args: str) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, str(SPEED), *args], capture_output=True, text=True, check=False,
                          cwd=ROOT, timeout=600)


def test_unknown_part_and_existing_report_are_refused(tmp_path):
    bad = _run("--only", "nope")
    assert bad.returncode == 2 and "unknown part 'nope'" in bad.stderr
    existing = tmp_path / "r.md"
    existing.write_text("keep me")
    again = _run("--only", "check", "--out", str(existing))
    assert again.returncode == 2 and "exists" in again.stderr
    assert existing.read_text() == "keep me"


@pytest.mark.slow
def test_quick_check_part_writes_its_table(tmp_path):
    out = tmp_path / "speed.md"
    done = _run("--quick", "--only", "check", "--out", str(out))
    assert done.returncode == 0, done.stdout[-2000:] + done.stderr[-2000:]
    text = out.read_text()
    assert text.startswith("# bendwise speed report (quick)")
    assert "## check" in text and "| rows |" in text and "groupby" in text


def test_grow_before_after_refuses_a_folder_that_is_not_a_checkout(tmp_path):
    done = subprocess.run([sys.executable, str(ROOT / "bench" / "bench_grow.py"), "--before", str(tmp_path)],
                          capture_output=True, text=True, check=False, cwd=ROOT, timeout=300)
    assert done.returncode == 2 and "is not a bendwise checkout" in done.stderr


@pytest.mark.slow
def test_grow_before_after_times_both_checkouts(tmp_path):
    """--before with this checkout as the older one: both rows of the table, ratios to both floors."""
    md = tmp_path / "ba.md"
    done = subprocess.run([sys.executable, str(ROOT / "bench" / "bench_grow.py"), "--before", str(ROOT),
                           "--rows", "3000", "--md", str(md)], capture_output=True, text=True, check=False, cwd=ROOT,
                          timeout=600)
    assert done.returncode == 0, done.stderr[-2000:]
    text = md.read_text()
    assert "| before (" in text and "| after (" in text and "÷ same-columns floor" in text
