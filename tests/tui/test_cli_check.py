"""``bendwise check`` on the command line: report, JSON shape, exit codes, one-line errors.

Numbers in the JSON are compared with statsmodels to 1e-9 relative; everything else is about
what the user sees: the verdict, the reason a test cannot run, and a single error line.
"""

from __future__ import annotations

import json
import math
import warnings
import zipfile

import numpy as np
import pandas as pd
import pytest
import statsmodels.formula.api as smf
from bendwise.tui.cli import main
from statsmodels.stats import diagnostic as dg
from statsmodels.stats.anova import anova_lm

REL = 1e-9


def run(argv: list[str], capsys) -> tuple[object, str, str]:
    """Exit status, stdout, stderr of one command-line run (as the console script would end)."""
    try:
        code: object = main(argv)
    except SystemExit as exc:  # argparse ends a bad option this way; the process status is the same
        code = exc.code
    except Exception as exc:  # noqa: BLE001 - surfaced as a failed assertion, not an error
        code = f"uncaught {type(exc).__name__}: {exc}"
    out, err = capsys.readouterr()
    return code, out, err


def _write(path, frame: pd.DataFrame) -> str:
    frame.to_csv(path, index=False)
    return str(path)


def _bent(n_levels: int = 6, reps: int = 3, bend: float = 1.0, seed: int = 0) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    x = np.repeat(np.arange(n_levels, dtype=float), reps)
    y = 2 + 3 * x + bend * x**2 + 0.4 * rng.standard_normal(x.size)
    return pd.DataFrame({"conc": x, "signal": y})


@pytest.fixture
def curved(tmp_path):
    return _write(tmp_path / "curved.csv", _bent(bend=1.0))


@pytest.fixture
def straight(tmp_path):
    return _write(tmp_path / "straight.csv", _bent(bend=0.0, seed=4))


# ----------------------------------------------------------------------------- report and JSON


def test_text_report_carries_the_verdict(curved, straight, capsys):
    code, out, err = run(["check", curved, "-y", "signal", "-x", "conc"], capsys)
    assert code == 0 and err == ""
    code_j, out_j, _ = run(["check", curved, "-y", "signal", "-x", "conc", "--json"], capsys)
    verdict = json.loads(out_j)["verdict"]
    assert verdict in out
    assert "NOT A STRAIGHT LINE" in out
    assert "lack of fit" in out and "pure error" in out
    code, out, _ = run(["check", straight, "-y", "signal", "-x", "conc"], capsys)
    assert code == 0
    assert "LINE ADEQUATE" in out


def test_json_shape_and_values(curved, capsys):
    code, out, err = run(["check", curved, "-y", "signal", "-x", "conc", "--json"], capsys)
    assert code == 0 and err == ""
    data = json.loads(out)
    for key in ("n", "n_dropped", "levels", "coefficients", "sigma", "lack_of_fit", "criteria"):
        assert key in data, key
    assert (data["n"], data["n_dropped"], data["levels"]) == (18, 0, 6)
    assert set(data["coefficients"]) == {"intercept", "conc"}
    for entry in data["coefficients"].values():
        assert {"estimate", "se"} <= set(entry)
    lof = data["lack_of_fit"]
    assert {"testable", "ss_lack", "ss_pure", "df_lack", "df_pure", "f", "p"} <= set(lof)
    assert set(data["criteria"]) >= {"loglik", "aic", "aicc", "bic"}
    frame = pd.read_csv(curved)
    line = smf.ols("signal ~ conc", frame).fit()  # reference: statsmodels ols
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ref = anova_lm(line, smf.ols("signal ~ C(conc)", frame).fit()).iloc[1]  # reference: anova_lm
    assert math.isclose(data["coefficients"]["conc"]["estimate"], line.params["conc"], rel_tol=REL)
    assert math.isclose(data["coefficients"]["intercept"]["se"], line.bse["Intercept"], rel_tol=REL)
    assert math.isclose(data["sigma"], math.sqrt(line.scale), rel_tol=REL)
    assert (lof["df_lack"], lof["df_pure"]) == (4, 12)
    assert math.isclose(lof["f"], ref["F"], rel_tol=REL)
    assert math.isclose(lof["p"], ref["Pr(>F)"], rel_tol=REL, abs_tol=1e-300)
    assert math.isclose(data["criteria"]["loglik"], line.llf, rel_tol=REL)
    assert math.isclose(data["criteria"]["aic"], line.aic + 2, rel_tol=REL)  # k = p + 1 (σ)


def test_strict_exit_codes(curved, straight, capsys):
    assert run(["check", curved, "-y", "signal", "-x", "conc"], capsys)[0] == 0
    assert run(["check", curved, "-y", "signal", "-x", "conc", "--strict"], capsys)[0] == 1
    assert run(["check", curved, "-y", "signal", "-x", "conc", "--strict", "--json"], capsys)[0] == 1
    assert run(["check", straight, "-y", "signal", "-x", "conc", "--strict"], capsys)[0] == 0
    # the verdict follows --alpha: at α = 0.999 the straight data "fail" too
    assert run(["check", straight, "-y", "signal", "-x", "conc", "--strict", "--alpha", "0.999"],
               capsys)[0] == 1


def test_cleaning_is_reported(tmp_path, capsys):
    frame = _bent().astype(object)
    frame.loc[[2, 7], "signal"] = ""
    frame.loc[5, "conc"] = "n/a"
    path = _write(tmp_path / "gaps.csv", frame)
    code, out, _ = run(["check", path, "-y", "signal", "-x", "conc", "--json"], capsys)
    assert code == 0
    data = json.loads(out)
    assert (data["n"], data["n_dropped"]) == (15, 3)
    code, out, _ = run(["check", path, "-y", "signal", "-x", "conc"], capsys)
    assert "rows dropped: 3" in out
    assert "rows 3, 8" in out and "rows 6" in out


# ----------------------------------------------------------------------------- bad input


def _bad_inputs(tmp: object) -> dict[str, tuple[list[str], str]]:
    """name → (argv, a fragment the one-line message must contain)."""
    from pathlib import Path

    tmp = Path(str(tmp))
    good = _write(tmp / "good.csv", _bent().assign(w=1.0, label="a"))
    (tmp / "binary.csv").write_bytes(bytes(range(256)) * 8)
    (tmp / "corrupt.parquet").write_bytes(b"PAR1" + b"\x13\x37" * 50)
    (tmp / "corrupt.xlsx").write_bytes(b"PK\x03\x04" + b"\x00" * 120)
    with zipfile.ZipFile(tmp / "not_a_workbook.xlsx", "w") as archive:
        archive.writestr("readme.txt", "hello")
    text_y = _write(tmp / "text_y.csv", pd.DataFrame({"conc": [1, 2, 3, 4], "signal": list("abcd")}))
    empty_y = _write(tmp / "empty_y.csv", pd.DataFrame({"conc": [1, 2, 3], "signal": [None] * 3}))
    two_rows = _write(tmp / "two.csv", pd.DataFrame({"conc": [1, 2, None], "signal": [1.0, 2, 3]}))
    one_x = _write(tmp / "one_x.csv", pd.DataFrame({"conc": [5.0] * 4, "signal": [1.0, 2, 3, 4]}))
    flat_y = _write(tmp / "flat_y.csv", pd.DataFrame({"conc": [1.0, 2, 3, 4], "signal": [7.0] * 4}))
    w_zero = _write(tmp / "w_zero.csv", _bent().assign(w=[1.0] * 17 + [0.0]))
    w_neg = _write(tmp / "w_neg.csv", _bent().assign(w=[1.0] * 16 + [-2.0, 1.0]))
    w_gap = _write(tmp / "w_gap.csv", _bent().assign(w=[1.0, None] + [1.0] * 16))
    xy = ["-y", "signal", "-x", "conc"]
    return {
        "missing file": (["check", str(tmp / "absent.csv"), *xy], "not found"),
        "binary file": (["check", str(tmp / "binary.csv"), *xy], "binary"),
        "corrupt parquet": (["check", str(tmp / "corrupt.parquet"), *xy], "corrupt.parquet"),
        "corrupt xlsx": (["check", str(tmp / "corrupt.xlsx"), *xy], "corrupt.xlsx"),
        "zip that is no workbook": (["check", str(tmp / "not_a_workbook.xlsx"), *xy], "not_a_workbook.xlsx"),
        "missing column": (["check", good, "-y", "signl", "-x", "conc"], "did you mean 'signal'"),
        "non-numeric column": (["check", text_y, *xy], "not numeric"),
        "all values missing": (["check", empty_y, *xy], "no usable values"),
        "fewer than 3 rows": (["check", two_rows, *xy], "at least 3"),
        "one distinct x": (["check", one_x, *xy], "one distinct value"),
        "constant y": (["check", flat_y, *xy], "constant"),
        "zero weight": (["check", w_zero, *xy, "--weights", "w"], "> 0"),
        "negative weight": (["check", w_neg, *xy, "--weights", "w"], "> 0"),
        "missing weight": (["check", w_gap, *xy, "--weights", "w"], "missing"),
        "weights column absent": (["check", good, *xy, "--weights", "wt"], "weights column 'wt'"),
        "negative tolerance": (["check", good, *xy, "--tolerance", "-1"], "tolerance"),
        "tolerance not a number": (["check", good, *xy, "--tolerance", "near"], "tolerance"),
        "alpha above 1": (["check", good, *xy, "--alpha", "1.5"], "alpha"),
        "alpha zero": (["check", good, *xy, "--alpha", "0"], "alpha"),
        "alpha not a number": (["check", good, *xy, "--alpha", "five"], "alpha"),
    }


BAD_NAMES = [
    "missing file", "binary file", "corrupt parquet", "corrupt xlsx", "zip that is no workbook",
    "missing column", "non-numeric column", "all values missing", "fewer than 3 rows",
    "one distinct x", "constant y", "zero weight", "negative weight", "missing weight",
    "weights column absent", "negative tolerance", "tolerance not a number", "alpha above 1",
    "alpha zero", "alpha not a number",
]


@pytest.mark.parametrize("name", BAD_NAMES)
def test_bad_input_is_one_line_and_exit_2(name, tmp_path, capsys):
    argv, fragment = _bad_inputs(tmp_path)[name]
    code, out, err = run(argv, capsys)
    assert code == 2, f"{name}: exit {code!r}"
    assert err.count("\n") == 1, err
    assert err.startswith("bendwise: error:")
    assert "Traceback" not in err
    assert fragment in err, err
    assert out == ""


def test_bad_input_cases_are_all_listed(tmp_path):
    assert sorted(_bad_inputs(tmp_path)) == sorted(BAD_NAMES)


# ----------------------------------------------------------------------------- untestable


@pytest.fixture
def no_replicates(tmp_path):
    rng = np.random.default_rng(5)
    x = rng.permutation(np.linspace(0.5, 12.0, 14))  # every setting once, rows not in x order
    y = 1 + 0.8 * x + 0.06 * x**2 + 0.3 * rng.standard_normal(x.size)
    frame = pd.DataFrame({"conc": x, "signal": y})
    return frame, _write(tmp_path / "single.csv", frame)


def test_no_replicates_is_untestable_with_replicate_free_checks(no_replicates, capsys):
    frame, path = no_replicates
    code, out, err = run(["check", path, "-y", "signal", "-x", "conc", "--json", "--strict"], capsys)
    assert code == 0 and err == ""
    data = json.loads(out)
    lof = data["lack_of_fit"]
    assert lof["testable"] is False
    assert "more than once" in lof["reason"]
    assert data["lack_found"] is None
    checks = {t["name"].split(" ")[0]: t for t in data["replicate_free"]}
    assert set(checks) == {"RESET", "rainbow", "Harvey–Collier"}
    assert all(t["testable"] and t["approximate"] for t in checks.values())
    # references: statsmodels on the rows sorted by x
    ordered = frame.sort_values("conc").reset_index(drop=True)
    res = smf.ols("signal ~ conc", ordered).fit()
    reset = dg.linear_reset(res, power=3, test_type="fitted", use_f=True)  # reference: statsmodels
    rainbow = dg.linear_rainbow(res)  # reference: statsmodels (middle half, data in x order)
    hc = dg.linear_harvey_collier(res)  # reference: statsmodels (recursive residuals, x order)
    assert math.isclose(checks["RESET"]["statistic"], float(reset.fvalue), rel_tol=REL)
    assert math.isclose(checks["RESET"]["p"], float(reset.pvalue), rel_tol=REL)
    assert math.isclose(checks["rainbow"]["statistic"], float(rainbow[0]), rel_tol=REL)
    assert math.isclose(checks["rainbow"]["p"], float(rainbow[1]), rel_tol=REL)
    assert math.isclose(checks["Harvey–Collier"]["statistic"], float(hc.statistic), rel_tol=REL)
    assert math.isclose(checks["Harvey–Collier"]["p"], float(hc.pvalue), rel_tol=REL)
    # the row order matters to rainbow: the unsorted rows would give another answer
    unsorted = dg.linear_rainbow(smf.ols("signal ~ conc", frame).fit())
    assert not math.isclose(float(unsorted[0]), float(rainbow[0]), rel_tol=1e-3)

    code, text, _ = run(["check", path, "-y", "signal", "-x", "conc"], capsys)
    assert code == 0
    assert lof["reason"] in text
    for name in ("RESET", "rainbow", "Harvey–Collier"):
        (line,) = [ln for ln in text.splitlines() if ln.strip().startswith(name)]
        assert "approximate" in line


def test_two_levels_only(tmp_path, capsys):
    frame = pd.DataFrame({"conc": [1.0] * 4 + [2.0] * 4, "signal": [1, 1.2, 0.9, 1.1, 2, 2.2, 1.8, 2.1]})
    path = _write(tmp_path / "two_levels.csv", frame)
    code, out, err = run(["check", path, "-y", "signal", "-x", "conc", "--json", "--strict"], capsys)
    assert code == 0 and err == ""
    lof = json.loads(out)["lack_of_fit"]
    assert lof["testable"] is False
    assert "c = 2, p = 2" in lof["reason"]
    assert set(lof) >= {"testable", "reason"}
    assert "f" not in lof and "p" not in lof
    code, text, _ = run(["check", path, "-y", "signal", "-x", "conc"], capsys)
    assert code == 0
    assert lof["reason"] in text


def test_zero_pure_error(tmp_path, capsys):
    frame = pd.DataFrame({"conc": [1.0, 1, 2, 2, 3, 3, 4, 4], "signal": [1.0, 1, 2.5, 2.5, 2.9, 2.9, 4.4, 4.4]})
    path = _write(tmp_path / "exact.csv", frame)
    code, out, err = run(["check", path, "-y", "signal", "-x", "conc", "--json", "--strict"], capsys)
    assert code == 0 and err == ""
    data = json.loads(out)
    lof = data["lack_of_fit"]
    assert lof["testable"] is False
    assert "pure error is 0" in lof["reason"]
    assert "NaN" not in out and "Infinity" not in out
    code, text, _ = run(["check", path, "-y", "signal", "-x", "conc"], capsys)
    assert code == 0
    assert lof["reason"] in text
    assert not {"nan", "inf", "-inf"} & set(text.lower().split())


def test_standard_input(monkeypatch, capsys):
    import io

    text = _bent().to_csv(index=False)
    monkeypatch.setattr("sys.stdin", io.StringIO(text))
    code, out, err = run(["check", "-", "-y", "signal", "-x", "conc", "--json"], capsys)
    assert code == 0 and err == ""
    data = json.loads(out)
    assert data["source"] == "<stdin>"
    assert (data["n"], data["levels"]) == (18, 6)


def test_tolerance_over_exact_replicates_does_not_claim_none_exist(tmp_path, capsys):
    """Exact repeats at 1, 2, 3, 4 plus near values: merging them is approximate, but the report
    must not say that no level is replicated (it is false here)."""
    x = [1, 1, 1.01, 2, 2, 2.02, 3, 3, 3.01, 4, 4, 4.03]
    y = [1.0, 1.1, 1.05, 2.9, 2.7, 2.85, 5.1, 5.3, 5.2, 8.1, 7.9, 8.0]
    path = _write(tmp_path / "mixed.csv", pd.DataFrame({"conc": x, "signal": y}))
    code, out, _ = run(["check", path, "-y", "signal", "-x", "conc", "--tolerance", "0.05"], capsys)
    assert code == 0
    assert "approximate" in out
    assert "no level is replicated" not in out
