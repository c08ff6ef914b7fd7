"""The reproduction script of an export: standalone Python (pandas, numpy, statsmodels only).

The script is bendwise's own output, so it may carry a formula for statsmodels; the formula is
generated here from the node's structured fields, together with the statsmodels name of every
coefficient in the spec's order, so the script can compare them one by one.

Nothing taken from the data is spliced into the script's code: column names, category labels,
the node's label and the data path enter only as ``repr`` literals, and the formula names the
columns by aliases of our own (``COLUMNS`` maps each column to its alias), so no column name —
quotes, newlines, keywords or not — ever reaches Python or the formula parser as code.
"""

from __future__ import annotations

import dataclasses
from typing import Any

from ..tree.model_spec import ModelSpec, quote_name
from ..tree.scoring import Term
from ..tree.tree import RemedyTree

__all__ = ["script_text", "statsmodels_names", "column_aliases"]


def column_aliases(y: str, x: str, covariates: list[str]) -> dict[str, str]:
    """Plain identifiers the reproduction script uses for the columns in its formula."""
    out = {y: "resp", x: "pred"}
    for i, c in enumerate(covariates, start=1):
        out[c] = f"cov{i}"
    return out


def statsmodels_names(spec: ModelSpec, terms: tuple[Term, ...], x: str, kinds: dict[str, str],
                      alias: dict[str, str] | None = None) -> list[str]:
    """Names statsmodels gives the coefficients of ``spec.formula`` (in the order of ``terms``);
    with ``alias``, of the formula written on the aliased columns."""
    name = (lambda c: alias[c]) if alias is not None else quote_name
    tx = spec.predictor.formula(name(x))
    base = tx if spec.predictor.is_identity else f"({tx[2:-1] if tx.startswith('I(') else tx})"

    def cov(c: str) -> str:
        q = name(c)
        return f"C({q})" if kinds.get(c) == "categorical" else q

    out = []
    for t in terms:
        if t.kind == "const":
            out.append("Intercept")
        elif t.kind == "tpow":
            out.append(tx if t.power == 1 else f"I({base} ** {t.power})")
        elif t.kind == "cat":
            out.append(f"{cov(t.covariate)}[T.{t.level}]")  # type: ignore[arg-type]
        elif t.kind == "num":
            out.append(cov(t.covariate))  # type: ignore[arg-type]
        elif t.kind == "tcat":
            out.append(f"{tx}:{cov(t.covariate)}[T.{t.level}]")  # type: ignore[arg-type]
        elif t.kind == "tnum":
            out.append(f"{tx}:{cov(t.covariate)}")  # type: ignore[arg-type]
        else:
            raise ValueError(t.kind)
    return out


_BODY = r'''

def fail(message, status):
    print(f"reproduce: {message}", file=sys.stderr)
    sys.exit(status)


def one_line(text):
    """Text for one line of output: characters that are not printable (newlines, NUL) escaped."""
    return "".join(c if c.isprintable() else repr(c)[1:-1] for c in str(text))


def spec_fields(spec, spec_path):
    """The numbers this script compares, checked: a spec that lacks them is unreadable (exit 2)."""
    def number(value, where, positive=False):
        if isinstance(value, bool) or not isinstance(value, (int, float)) or value != value \
                or value in (float("inf"), float("-inf")) or (positive and value <= 0):
            fail(f"spec {spec_path.name}: {where} must be a finite{' positive' if positive else ''} number; "
                 "export the model again", 2)
        return float(value)

    def field(*keys):
        value = spec
        for depth, key in enumerate(keys):
            if not isinstance(value, dict) or key not in value:
                fail(f"spec {spec_path.name}: field {'.'.join(keys[:depth + 1])} is missing; export the model "
                     "again", 2)
            value = value[key]
        return value

    n_used = field("provenance", "rows", "used")
    if isinstance(n_used, bool) or not isinstance(n_used, int) or n_used < 0:
        fail(f"spec {spec_path.name}: provenance.rows.used must be a whole number; export the model again", 2)
    coefs = field("fit", "coefficients")
    if not isinstance(coefs, list) or not coefs:
        fail(f"spec {spec_path.name}: fit.coefficients must be a non-empty list; export the model again", 2)
    checked = []
    for i, entry in enumerate(coefs):
        if not isinstance(entry, dict):
            fail(f"spec {spec_path.name}: fit.coefficients[{i}] must be an object; export the model again", 2)
        se = entry.get("se")
        checked.append({"estimate": number(entry.get("estimate"), f"fit.coefficients[{i}].estimate"),
                        "se": 0.0 if se is None else abs(number(se, f"fit.coefficients[{i}].se"))})
    sigma = number(field("fit", "sigma"), "fit.sigma", positive=True)
    return n_used, checked, sigma


def data_files(path):
    """The file itself, a folder's Parquet files (else its CSV files, searched below it) or a
    glob's matches, sorted: the files the table was read from."""
    import glob

    text = str(path)
    if path.is_dir():
        found = sorted(glob.glob(str(path / "**" / "*.parquet"), recursive=True))
        found = found or sorted(glob.glob(str(path / "**" / "*.csv"), recursive=True))
    elif any(ch in text for ch in "*?[") and not path.exists():
        found = sorted(glob.glob(text, recursive=True))
    elif path.is_file():
        return [path]
    else:
        found = []
    return [Path(f) for f in found]


def file_sha256(path):
    digest = hashlib.sha256()
    with open(path, "rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            digest.update(chunk)
    return digest.hexdigest()


def data_sha256(path, files):
    """As bendwise export computes it: one file's SHA-256, or for a folder or glob the SHA-256
    of each file's relative name and SHA-256 in turn."""
    if len(files) == 1 and not path.is_dir():
        return file_sha256(files[0])
    import os

    root = path if path.is_dir() else Path(os.path.commonpath([str(f.parent) for f in files]))
    outer = hashlib.sha256()
    for f in files:
        outer.update(f"{f.relative_to(root).as_posix()}\0{file_sha256(f)}\0".encode())
    return outer.hexdigest()


def read_table(files):
    if len(files) > 1:
        return pd.concat([read_table([f]) for f in files], ignore_index=True)
    path = files[0]
    fmt = READING["format"]
    if fmt == "parquet":
        frame = pd.read_parquet(path)
    elif fmt == "excel":
        frame = pd.read_excel(path, sheet_name=READING["sheet"] if READING["sheet"] is not None else 0)
    elif fmt == "jsonl":
        frame = pd.read_json(path, lines=True)
    elif fmt == "json":  # one JSON array of objects
        frame = pd.read_json(path, orient="records")
    else:
        options = dict(sep=READING["delimiter"] or ",", decimal=READING["decimal"], skipinitialspace=True)
        try:
            frame = pd.read_csv(path, encoding="utf-8-sig", **options)
        except UnicodeDecodeError:
            frame = pd.read_csv(path, encoding="latin-1", **options)
    frame.columns = [str(c).strip() for c in frame.columns]
    return frame


def as_number(series):
    """Float values; NaN where a cell is empty or not a number (those rows are not used)."""
    if pd.api.types.is_bool_dtype(series.dtype):
        series = series.astype(float)
    if pd.api.types.is_numeric_dtype(series.dtype):
        return series.to_numpy(dtype=float, na_value=np.nan)
    text = series.astype("string").str.strip()
    return pd.to_numeric(text.where(text != ""), errors="coerce").to_numpy(dtype=float, na_value=np.nan)


def as_label(series):
    text = series.astype("string").str.strip()
    return text, (text.isna() | (text == "")).to_numpy(dtype=bool)


def forward(kind, param, v):
    if kind == "identity":
        return v
    if kind == "log":
        return np.log(v)
    if kind == "sqrt":
        return np.sqrt(v)
    if kind == "reciprocal":
        return 1.0 / v
    if kind == "boxcox":
        return np.log(v) if param == 0 else np.expm1(param * np.log(v)) / param
    raise ValueError(kind)


def level_codes(x):
    """Replicate levels of x: exact values, or runs closer than TOLERANCE grouped together."""
    codes, uniques = pd.factorize(x, sort=True)
    uniques = np.asarray(uniques, dtype=float)
    if TOLERANCE is None or TOLERANCE <= 0 or uniques.size < 2:
        return codes
    cluster = np.zeros(uniques.size, dtype=np.intp)
    start, k = uniques[0], 0
    for i in range(1, uniques.size):
        if uniques[i] - start > TOLERANCE:
            k += 1
            start = uniques[i]
        cluster[i] = k
    return cluster[codes]


def main():
    parser = argparse.ArgumentParser(description="Refit the exported model and compare it with spec.json.")
    parser.add_argument("data", nargs="?", help="data file (default: where it was at export time)")
    parser.add_argument("--spec", default=str(HERE / "spec.json"), help="spec file (default: next to this script)")
    args = parser.parse_args()

    spec_path = Path(args.spec)
    try:
        spec = json.loads(spec_path.read_text(encoding="utf-8"))
    except (OSError, ValueError, RecursionError) as exc:
        fail(f"cannot read the spec {spec_path}: {exc}", 2)
    n_spec, coefs, spec_sigma = spec_fields(spec, spec_path)
    if args.data:
        data_path = Path(args.data)
    elif DATA_FILE is not None:
        data_path = (HERE / DATA_FILE).resolve()
    else:
        fail("the data came from standard input at export time; give the data file as an argument", 2)
    files = data_files(data_path)
    if not files:
        fail(f"data file not found: {data_path}; give its path as an argument", 2)

    found_sha = data_sha256(data_path, files)
    if DATA_SHA256 is not None and found_sha != DATA_SHA256:
        print(f"reproduce: WARNING: {data_path.name} is not the file that was exported "
              f"(SHA-256 {found_sha[:12]}… expected {DATA_SHA256[:12]}…); comparing anyway",
              file=sys.stderr)

    global np, pd, smf
    import numpy as np
    import pandas as pd
    import statsmodels.formula.api as smf

    frame = read_table(files)
    needed = [RESPONSE, PREDICTOR, *ADMITTED_COVARIATES]
    if USER_WEIGHTS is not None:
        needed.append(USER_WEIGHTS)
    missing = [c for c in needed if c not in frame.columns]
    if missing:
        fail(f"column(s) {', '.join(map(repr, missing))} not in {data_path.name}", 1)

    # rows are used as bendwise used them: every admitted column must hold a usable value
    keep = np.ones(len(frame), dtype=bool)
    data = {}
    for col in [RESPONSE, PREDICTOR, *[c for c, k in ADMITTED_COVARIATES.items() if k == "numeric"]]:
        data[col] = as_number(frame[col])
        keep &= np.isfinite(data[col])
    for col in [c for c, k in ADMITTED_COVARIATES.items() if k == "categorical"]:
        data[col], empty = as_label(frame[col])
        keep &= ~empty
    used = pd.DataFrame({col: (v[keep] if isinstance(v, np.ndarray) else v[keep].to_numpy(dtype=object))
                         for col, v in data.items()})
    for col, levels in CATEGORICAL_COVARIATES.items():
        values = used[col].astype(str)
        unknown = sorted(set(values) - set(levels))
        if unknown:
            fail(f"MISMATCH: column {col!r} has categories {unknown} that the spec does not list", 1)
        used[col] = pd.Categorical(values, categories=levels)
    if len(used) != n_spec:
        fail(f"MISMATCH: {len(used)} usable rows here, {n_spec} in the spec", 1)

    weights = None
    if USER_WEIGHTS is not None:
        weights = as_number(frame[USER_WEIGHTS])[keep]
    if WEIGHT_THETA is not None:
        z = forward(RESPONSE_TRANSFORM[0], RESPONSE_TRANSFORM[1], used[RESPONSE].to_numpy(dtype=float))
        codes = level_codes(used[PREDICTOR].to_numpy(dtype=float))
        counts = np.bincount(codes)
        level_mean = np.abs(np.bincount(codes, weights=z) / counts)
        w_level = level_mean ** (-2.0 * WEIGHT_THETA)
        w_level = w_level / np.exp(np.mean(np.log(w_level)))  # geometric mean 1: the scale changes nothing
        w = w_level[codes]
        weights = w if weights is None else w * weights

    # the formula names the columns by aliases (COLUMNS): no column name is ever parsed as code
    used = used.rename(columns=COLUMNS)
    if weights is None:
        result = smf.ols(FORMULA, data=used).fit()
    else:
        result = smf.wls(FORMULA, data=used, weights=weights).fit()
    print(f"reproduce: refitted {one_line(FORMULA_TEXT)} on {len(used)} rows"
          + ("" if weights is None else " (weighted)"))

    if len(coefs) != len(PARAMETERS):
        fail(f"MISMATCH: the spec lists {len(coefs)} coefficients, this script expects {len(PARAMETERS)}", 1)
    bad = []
    shown = [one_line(label) for label in PARAMETER_LABELS]
    width = max(len(p) for p in shown)
    print(f"  {'coefficient'.ljust(width)}  {'spec':>22}  {'refit':>22}  ok")
    for name, label, entry in zip(PARAMETERS, shown, coefs, strict=True):
        if name not in result.params.index:
            fail(f"MISMATCH: statsmodels has no coefficient {label!r} (it has {list(result.params.index)})", 1)
        ours, theirs = entry["estimate"], float(result.params[name])
        tol = max(REL_TOL * abs(ours), SE_FLOOR * entry["se"])
        ok = abs(ours - theirs) <= tol
        print(f"  {label.ljust(width)}  {ours:>22.15g}  {theirs:>22.15g}  {'yes' if ok else 'NO'}")
        if not ok:
            bad.append(f"{label}: spec {ours!r}, refit {theirs!r} (difference {abs(ours - theirs):.3g} > {tol:.3g})")
    sigma = float(np.sqrt(result.scale))
    if abs(sigma - spec_sigma) > REL_TOL * spec_sigma:
        bad.append(f"sigma: spec {spec_sigma!r}, refit {sigma!r}")
    if bad:
        fail("MISMATCH: " + "; ".join(bad), 1)
    print(f"reproduce: OK: all {len(coefs)} coefficients and sigma agree with {spec_path.name}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
'''


def script_text(tree: RemedyTree, node_id: str, doc: dict[str, Any], data_rel: str | None) -> str:
    """Text of ``reproduce.py`` for one exported node (its spec document is ``doc``).

    Long because most of it is the literal head of the generated script, kept in one piece so it
    reads as the file it writes."""
    study = tree.study
    node = tree.nodes[node_id]
    spec = node.spec
    score = node.score
    assert score is not None
    kinds = {c.name: c.kind for c in study.covariates}
    used = {c.name: study.covariate(c.name) for c in study.covariates if c.name in spec.covariates}
    admitted = {c.name: c.kind for c in study.covariates}
    cats = {n: list(c.levels) for n, c in used.items() if c.kind == "categorical"}
    alias = column_aliases(study.y_name, study.x_name, list(admitted))
    aliased = dataclasses.replace(spec, covariates=tuple(alias[c] for c in spec.covariates),
                                  interactions=tuple(alias[c] for c in spec.interactions))
    alias_kinds = {alias[c]: k for c, k in kinds.items()}
    formula = aliased.formula(alias[study.y_name], alias[study.x_name], alias_kinds)
    params = statsmodels_names(spec, score.terms, study.x_name, kinds, alias)
    labels = statsmodels_names(spec, score.terms, study.x_name, kinds)
    version = doc["tool"]["version"]
    theta = None if spec.weights is None else spec.weights.theta
    head = f'''#!/usr/bin/env python3
"""Refit the model in spec.json from its data file and compare every coefficient.

Written by bendwise for one node of its remedy tree (NODE and NODE_LABEL below say which).
Needs only pandas, numpy and statsmodels:

    python reproduce.py                  # the data file where it was at export time
    python reproduce.py path/to/data     # or another copy of it
    python reproduce.py --spec path/to/spec.json

Exit status 0: every coefficient and sigma agree with the spec (relative 1e-8; for coefficients
near zero, within 1e-6 of their standard error); 1: a mismatch, with a message; 2: a file is
missing or unreadable. A data file whose SHA-256 differs from the exported one gets a warning.
"""

import argparse
import hashlib
import json
import sys
from pathlib import Path

np = pd = smf = None  # numpy, pandas and statsmodels: imported once the files are found

HERE = Path(__file__).resolve().parent
WRITTEN_BY = {"bendwise " + str(version)!r}
WRITTEN_AT = {str(doc["created_utc"])!r}
NODE = {str(node_id)!r}
NODE_LABEL = {str(doc["node"]["label"])!r}
DATA_FILE = {data_rel!r}  # relative to this script (None: read from standard input)
DATA_SHA256 = {doc["provenance"]["data"]["sha256"]!r}
READING = {doc["provenance"]["data"]["reading"]!r}
RESPONSE = {study.y_name!r}
PREDICTOR = {study.x_name!r}
ADMITTED_COVARIATES = {admitted!r}  # every column the analysis admitted (they decide the rows used)
CATEGORICAL_COVARIATES = {cats!r}  # categories in order; the first is the reference
USER_WEIGHTS = {study.weights_name!r}
RESPONSE_TRANSFORM = {(spec.response.kind, spec.response.param)!r}
WEIGHT_THETA = {theta!r}  # w = |level mean of the transformed response|^(-2 theta); None: no such weights
TOLERANCE = {study.tolerance!r}  # settings closer than this form one level (None: exact values)
COLUMNS = {alias!r}  # column → the alias the formula uses
FORMULA = {formula!r}  # on the aliases
FORMULA_TEXT = {spec.formula(study.y_name, study.x_name, kinds)!r}  # the same on the column names, for reading
PARAMETERS = {params!r}  # statsmodels names (on the aliases), in the order of the spec's coefficients
PARAMETER_LABELS = {labels!r}  # the same on the column names, for reading
REL_TOL = 1e-8
SE_FLOOR = 1e-6
'''
    return head + _BODY
