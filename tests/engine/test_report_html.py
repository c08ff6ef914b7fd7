"""report.html: one self-contained page, well formed, figures as inline SVG, numbers from spec.json,
data-derived text escaped, covered by the export's --force rules; rendered by a real browser."""

from __future__ import annotations

import json
import os
import re
import shutil
import subprocess
import sys
from datetime import UTC, datetime
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

pytestmark = pytest.mark.slow  # a real browser renders the page

pytest.importorskip("matplotlib")

from bendwise.engine import load_table, make_study  # noqa: E402
from bendwise.engine.errors import UsageError  # noqa: E402
from bendwise.engine.handon.export import ExportExists, export_node  # noqa: E402
from bendwise.engine.tree.tree import RemedyTree  # noqa: E402

DATA = Path(__file__).resolve().parents[2] / "datasets" / "sensor_calibration.csv"
NOW = datetime(2026, 1, 2, 3, 4, 5, tzinfo=UTC)
PNG_DIR = Path("/work/briefs/report_png")
VOID = {"area", "base", "br", "col", "embed", "hr", "img", "input", "link", "meta", "source", "track", "wbr"}


class _Checker(HTMLParser):
    """Every opened element is closed, in order; collects data-value spans, figures and SVG text."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.stack: list[str] = []
        self.errors: list[str] = []
        self.values: dict[str, list[str]] = {}
        self.figures: list[str] = []
        self.svg_text: dict[str, list[str]] = {}
        self.text: list[str] = []
        self._figure: str | None = None

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if "data-key" in a:
            self.values.setdefault(a["data-key"], []).append(a["data-value"])
        if tag == "figure":
            self._figure = a.get("data-figure")
            self.figures.append(self._figure)
        if tag not in VOID:
            self.stack.append(tag)

    def handle_startendtag(self, tag, attrs):
        pass

    def handle_endtag(self, tag):
        if tag in VOID:
            return
        if not self.stack or self.stack[-1] != tag:
            self.errors.append(f"</{tag}> closes {self.stack[-1:] or 'nothing'}")
            return
        self.stack.pop()
        if tag == "figure":
            self._figure = None

    def handle_data(self, data):
        self.text.append(data)
        if self._figure is not None and "text" in self.stack:
            self.svg_text.setdefault(self._figure, []).append(data)


def _parse(html: str) -> _Checker:
    c = _Checker()
    c.feed(html)
    c.close()
    assert not c.errors, c.errors[:5]
    assert c.stack == [], f"unclosed: {c.stack}"
    return c


@pytest.fixture(scope="module")
def tree() -> RemedyTree:
    t = RemedyTree(make_study(load_table(DATA), y="signal_mv", x="conc_mg_l", source=DATA.name))
    t.grow(2)
    return t


def _boxcox_node(tree: RemedyTree) -> str:
    return next(n.id for n in tree.nodes.values() if n.detail.boxcox is not None and n.score is not None)


@pytest.fixture(scope="module")
def exported(tree, tmp_path_factory) -> Path:
    out = tmp_path_factory.mktemp("html") / "boxcox"
    export_node(tree, _boxcox_node(tree), out, data_path=DATA, report="both", now=NOW)
    return out


def test_page_is_well_formed_self_contained_with_every_figure(exported):
    html = (exported / "report.html").read_text(encoding="utf-8")
    c = _parse(html)
    assert "http" not in html and "src=" not in html and "<script" not in html and "<link" not in html
    assert re.findall(r"url\(([^)]*)\)", html) and all(u.startswith("#") for u in re.findall(r"url\(([^)]*)\)", html))
    assert c.figures == ["fit", "residuals", "line-vs-model", "boxcox", "inverse"]
    assert html.count("<svg") == 5
    labels = {k: " ".join(v) for k, v in c.svg_text.items()}
    for fig in ("fit", "inverse"):
        assert "conc_mg_l" in labels[fig] and "signal_mv" in labels[fig]
    assert "residual (" in labels["residuals"] and "conc_mg_l" in labels["residuals"]
    assert "Straight line" in labels["line-vs-model"] and "Chosen model" in labels["line-vs-model"]
    assert "λ (Box–Cox power)" in labels["boxcox"] and "profile log-likelihood" in labels["boxcox"]
    assert "@page" in html and "break-before: page" in html


def test_numbers_on_the_page_are_the_specs(exported):
    spec = json.loads((exported / "spec.json").read_text(encoding="utf-8"))
    c = _parse((exported / "report.html").read_text(encoding="utf-8"))
    where = {"fit.sigma": spec["fit"]["sigma"], "fit.df_resid": spec["fit"]["df_resid"], "fit.n": spec["fit"]["n"],
             "fit.r2": spec["fit"]["r2"], "calibration.x_min": spec["calibration"]["x_min"],
             "calibration.x_max": spec["calibration"]["x_max"], "criteria.aicc": spec["criteria"]["aicc"],
             "criteria.k": spec["criteria"]["k"], "rows.used": spec["provenance"]["rows"]["used"],
             "rows.dropped": spec["provenance"]["rows"]["dropped"]}
    for key, value in where.items():
        assert c.values[key] == [repr(value)], key
    text = " ".join(c.text)
    assert spec["provenance"]["data"]["sha256"] in text
    assert spec["tests"]["straight_line"]["verdict"] in text
    assert spec["cautions"]["use"] in text and spec["cautions"]["post_search"] in text
    assert spec["model"]["formula_text"] in text
    lam = spec["model"]["response"]["transform"]["param"]
    words = " ".join(text.split())
    assert f"signal_mv , Box–Cox transformed with λ = {lam:.4g}" in words or \
        f"signal_mv, Box–Cox transformed with λ = {lam:.4g}" in words, words[:600]
    assert "follows a straight line in conc_mg_l , as measured" in words or \
        "follows a straight line in conc_mg_l, as measured" in words


def test_answer_quotes_the_published_rates_and_the_search(exported, tree):
    from bendwise.engine.tree.suggestion import published_rates

    text = " ".join(_parse((exported / "report.html").read_text(encoding="utf-8")).text)
    false = [c for c in published_rates()["cells"] if c["measure"] == "remedy suggested"]
    for cell in false:
        assert f"{cell['rate']:.3g}" in text
    node = _boxcox_node(tree)
    assert f"chosen {node}" in " ".join(text.split())
    assert "parent chain root" in " ".join(text.split())
    assert text.count("alternative") >= 5


def test_same_input_same_page(tree, tmp_path):
    node = _boxcox_node(tree)
    export_node(tree, node, tmp_path / "a", data_path=DATA, report="html", now=NOW)
    export_node(tree, node, tmp_path / "b", data_path=DATA, report="html", now=NOW)
    assert (tmp_path / "a" / "report.html").read_bytes() == (tmp_path / "b" / "report.html").read_bytes()
    assert not (tmp_path / "a" / "report.md").exists()


def test_hostile_column_name_is_text(tmp_path):
    rng = np.random.default_rng(3)
    x = np.repeat([1.0, 2.0, 3.0, 4.0, 5.0], 3)
    bad = "<script>alert(1)</script>"
    frame = pd.DataFrame({"dose": x, bad: 2.0 + 0.5 * x + 0.1 * x**2 + rng.normal(0, 0.05, x.size)})
    t = RemedyTree(make_study(frame, y=bad, x="dose", source="odd.csv"))
    t.grow(1)
    export_node(t, "root", tmp_path / "e", report="html", now=NOW)
    html = (tmp_path / "e" / "report.html").read_text(encoding="utf-8")
    assert "<script" not in html
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in html
    c = _parse(html)
    assert bad in " ".join(c.svg_text["fit"])  # the axis label reads as the name, not as markup


def test_force_rules_cover_report_html(tree, tmp_path):
    out = tmp_path / "e"
    export_node(tree, "root", out, data_path=DATA, report="both", now=NOW)
    with pytest.raises(ExportExists):
        export_node(tree, "root", out, data_path=DATA, report="html", now=NOW)
    export_node(tree, "n1", out, data_path=DATA, report="html", force=True, now=NOW)  # html-only replaces both
    assert sorted(p.name for p in out.iterdir()) == ["report.html", "reproduce.py", "spec.json"]
    assert sorted(p.name for p in tmp_path.iterdir()) == ["e"]  # no temporary or old folder left
    (out / "report.html").unlink()
    (out / "report.html").mkdir()
    with pytest.raises(UsageError, match="report.html is a folder"):
        export_node(tree, "root", out, data_path=DATA, report="both", force=True, now=NOW)
    (out / "report.html").rmdir()
    (out / "notes.txt").write_text("mine", encoding="utf-8")
    with pytest.raises(UsageError, match="did not write"):
        export_node(tree, "root", out, data_path=DATA, report="both", force=True, now=NOW)
    with pytest.raises(UsageError, match="report"):
        export_node(tree, "root", tmp_path / "f", data_path=DATA, report="pdf", now=NOW)


# ----- a real browser -------------------------------------------------------------------

def _browser() -> str | None:
    for name in ("chromium-headless-shell", "chromium", "chromium-browser"):
        path = shutil.which(name)
        if path:
            return path
    return None


def _grey(path: Path) -> np.ndarray:
    from PIL import Image  # matplotlib's own dependency

    with Image.open(path) as im:
        return np.asarray(im.convert("L"), dtype=float)


def _run_browser(browser: str, *args: str) -> None:
    done = subprocess.run([browser, "--headless", "--no-sandbox", "--disable-gpu", "--hide-scrollbars",
                           "--no-first-run", *args], capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr[-2000:]


def test_a_real_browser_draws_every_figure_and_prints_a_few_pages(exported, tmp_path):
    """Chromium (Debian's chromium-headless-shell, installed by .ci/run) renders the page to PNG and PDF."""
    browser = _browser()
    if browser is None:
        if os.environ.get("CI"):
            pytest.fail("no headless Chromium in CI: .ci/run installs chromium-headless-shell")
        pytest.skip("no headless Chromium here (CI installs chromium-headless-shell)")
    html = (exported / "report.html").read_text(encoding="utf-8")
    head = html[:html.index("<body>") + len("<body>")]
    for name, figure in re.findall(r'(<figure id="fig-([\w-]+)".*?</figure>)', html, flags=re.S):
        page = tmp_path / f"{figure}.html"
        page.write_text(head + name + "</body></html>", encoding="utf-8")
        shot = tmp_path / f"{figure}.png"
        _run_browser(browser, f"--screenshot={shot}", "--window-size=900,700", page.as_uri())
        grey = _grey(shot)
        assert grey.var() > 200, f"figure {figure} looks blank (variance {grey.var():.1f})"
        assert (grey < 128).mean() > 0.005, f"figure {figure} has almost no ink"
    first = tmp_path / "first.png"
    _run_browser(browser, f"--screenshot={first}", "--window-size=900,1270", (exported / "report.html").as_uri())
    assert _grey(first).var() > 200
    pdf = tmp_path / "report.pdf"
    _run_browser(browser, f"--print-to-pdf={pdf}", "--no-pdf-header-footer", (exported / "report.html").as_uri())
    pages = len(re.findall(rb"/Type\s*/Page(?![a-zA-Z])", pdf.read_bytes()))
    assert 3 <= pages <= 10, pages
    if PNG_DIR.parent.is_dir():  # keep pictures of the first page and one figure for the record
        PNG_DIR.mkdir(exist_ok=True)
        shutil.copyfile(first, PNG_DIR / "first_page.png")
        shutil.copyfile(tmp_path / "fit.png", PNG_DIR / "figure_fit.png")


# ----- the command line -----------------------------------------------------------------

def _cli(argv: list[str], capsys) -> tuple[int, str, str]:
    from bendwise.tui.cli import main

    code = main(argv)
    out, err = capsys.readouterr()
    return code, out, err


def test_cli_writes_both_by_default_and_md_without_matplotlib(tmp_path, capsys, monkeypatch):
    base = [str(DATA), "-y", "signal_mv", "-x", "conc_mg_l", "--node", "root", "--depth", "1"]
    code, out, _ = _cli(["export", *base, "-o", str(tmp_path / "a")], capsys)
    assert code == 0 and "report.html" in out
    assert {p.name for p in (tmp_path / "a").iterdir()} == {"spec.json", "reproduce.py", "report.md", "report.html"}
    code, out, _ = _cli(["export", *base, "--report", "md", "-o", str(tmp_path / "b")], capsys)
    assert code == 0 and not (tmp_path / "b" / "report.html").exists() and (tmp_path / "b" / "report.md").exists()
    import bendwise.engine.handon.html as html_pkg
    monkeypatch.setattr(html_pkg, "html_available", lambda: False)
    monkeypatch.setattr("bendwise.engine.handon.html.page.html_available", lambda: False)
    code, out, _ = _cli(["export", *base, "-o", str(tmp_path / "c")], capsys)
    assert code == 0 and "note: report.html not written" in out
    assert {p.name for p in (tmp_path / "c").iterdir()} == {"spec.json", "reproduce.py", "report.md"}
    code, out, err = _cli(["export", *base, "--report", "html", "-o", str(tmp_path / "d")], capsys)
    assert code != 0 and "needs matplotlib" in err and len(err.strip().splitlines()) == 1
    assert not (tmp_path / "d").exists()


def test_engine_and_markdown_export_never_load_matplotlib(tmp_path):
    """Drawing stays out of the engine's computation: only building report.html imports matplotlib."""
    code = f"""
import sys
from bendwise.engine import load_table, make_study
from bendwise.engine.tree.tree import RemedyTree
from bendwise.engine.handon.export import export_node
t = RemedyTree(make_study(load_table({str(DATA)!r}), y="signal_mv", x="conc_mg_l"))
t.grow(1)
export_node(t, "root", {str(tmp_path / "md")!r}, report="md")
assert "matplotlib" not in sys.modules, "md export loaded matplotlib"
export_node(t, "root", {str(tmp_path / "html")!r}, report="html")
assert "matplotlib" in sys.modules
print("ok")
"""
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120,
                          cwd=Path(__file__).resolve().parents[2])
    assert done.returncode == 0 and done.stdout.strip() == "ok", done.stderr[-2000:]
