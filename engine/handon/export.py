"""Hand a model on: a versioned JSON spec, a reproduction script and a Markdown and/or HTML report.

``export_node`` is the one entry point (the command line and the app both call it). It writes
``spec.json``, ``reproduce.py`` and ``report.md`` (and/or ``report.html``) into a temporary folder
next to the target and renames it into place, so a reader never sees half an export; an existing folder is replaced
only with ``force`` and only when it holds nothing but an earlier export's files (a folder
or a link in place of one of them is refused). Temporary folders are removed on every way out,
an interrupt included.
"""

from __future__ import annotations

import contextlib
import csv
import io
import math
import os
import shutil
import tempfile
import uuid
from collections.abc import Iterator
from datetime import UTC, datetime
from pathlib import Path
from typing import TYPE_CHECKING, Any, TextIO

import numpy as np

from ..cautions import CAUTION, POST_SEARCH_CAUTION
from ..errors import DataError, UsageError
from ..read.files import data_files, describe_reading, file_digest
from ..stats.rows import Rows
from ..tree.tree import RemedyTree
from .specfile import SCHEMA_VERSION, validate_spec

if TYPE_CHECKING:
    from ..stats.study import Study
    from ..tree.model_spec import ModelSpec
    from ..tree.stability import Stability

__all__ = [
    "EXPORT_FILES",
    "ExportExists",
    "MAX_RESIDUALS",
    "REPORT_CHOICES",
    "build_spec",
    "export_node",
    "write_rows_csv",
    "write_text_atomic",
]

EXPORT_FILES = ("spec.json", "reproduce.py", "report.md", "report.html")
"""Every file an export may write (``--force`` replaces a folder holding nothing else)."""

REPORT_CHOICES = ("md", "html", "both")
"""Which reports an export writes: Markdown, the self-contained HTML page (needs matplotlib), or both."""


class ExportExists(UsageError):
    """The target exists and ``force`` was not given (the app asks, then retries with force)."""


MAX_RESIDUALS = 100_000
"""Largest smearing sample stored in a spec (evenly spaced rows beyond that)."""


# ----- provenance -----------------------------------------------------------------------


def _clean(obj: Any) -> Any:
    """JSON-safe values: numpy scalars to Python, non-finite floats to None."""
    if isinstance(obj, dict):
        return {str(k): _clean(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_clean(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return [_clean(v) for v in obj.tolist()]
    if isinstance(obj, np.generic):
        obj = obj.item()
    if isinstance(obj, float) and not math.isfinite(obj):
        return None
    return obj


def _level_table(study, z: np.ndarray) -> list[dict[str, Any]]:
    codes, c = study.x_codes, study.c
    cnt = np.bincount(codes, minlength=c).astype(float)
    my = np.bincount(codes, weights=study.y, minlength=c) / cnt
    mz = np.bincount(codes, weights=z, minlength=c) / cnt
    dev = study.y - my[codes]
    with np.errstate(invalid="ignore", divide="ignore"):
        sd = np.sqrt(np.bincount(codes, weights=dev * dev, minlength=c) / (cnt - 1))
    return [
        {"x": float(study.x_level_values[g]), "label": study.x_level_labels[g], "n": int(cnt[g]),
         "mean_y": float(my[g]), "sd_y": float(sd[g]) if cnt[g] > 1 else None, "mean_z": float(mz[g])}
        for g in range(c)
    ]


def _group_level_table(study, spec) -> list[dict[str, Any]]:
    """The level table from level totals (a study without rows)."""
    from ..stats.transforms import IDENTITY

    ys = study.group_stats(None, ("z", IDENTITY.key()))
    zs = study.group_stats(None, ("z", spec.response.key()))
    cnt = np.asarray(ys.count, dtype=float)
    with np.errstate(invalid="ignore", divide="ignore"):
        sd = np.sqrt(np.asarray(ys.ss, dtype=float) / (cnt - 1))
    return [
        {"x": float(study.x_level_values[g]), "label": study.x_level_labels[g], "n": int(cnt[g]),
         "mean_y": float(ys.mean[g]), "sd_y": float(sd[g]) if cnt[g] > 1 else None, "mean_z": float(zs.mean[g])}
        for g in range(study.c)
    ]


def _weights_block(study, spec) -> dict[str, Any]:
    rule = spec.weights
    out: dict[str, Any] = {"rule": "none", "theta": None, "normaliser": None,
                           "user_column": study.weights_name, "approximate": False}
    if rule is None:
        return out
    if isinstance(study.rows(), Rows):
        z = np.asarray(spec.response.forward(study.y), dtype=float)
        cnt = np.bincount(study.x_codes, minlength=study.c).astype(float)
        m = np.abs(np.bincount(study.x_codes, weights=z, minlength=study.c) / cnt)
    else:
        m = np.abs(np.asarray(study.group_stats(None, ("z", spec.response.key())).mean, dtype=float))
    g = float(np.exp(-2.0 * rule.theta * np.mean(np.log(m))))  # in log space: no power overflows
    out.update(rule=rule.kind, theta=rule.theta, normaliser=g, approximate=True,
               description="w = |level mean of the transformed response|^(−2θ) / normaliser; "
                           "at a new point the fitted value stands in for the level mean")
    return out


def _covariates_block(study, spec) -> list[dict[str, Any]]:
    out = []
    for name in spec.covariates:
        cov = study.covariate(name)
        if cov.kind == "categorical":
            out.append({"name": name, "kind": "categorical", "coding": "treatment", "levels": list(cov.levels),
                        "reference": cov.levels[0], "mean": None})
        else:
            out.append({"name": name, "kind": "numeric", "coding": "value", "levels": [], "reference": None,
                        "mean": study.covariate_mean(name)})
    return out


def build_spec(tree: RemedyTree, node_id: str, *, data_path: str | Path | None = None,
               reading: dict[str, Any] | None = None, rule: str = "aicc",
               max_residuals: int = MAX_RESIDUALS, now: datetime | None = None) -> dict[str, Any]:
    """The spec document of one scored node (plain JSON values, schema version 1.x)."""
    from ..checks.straight_line import check
    from ..version import __version__

    study = tree.study
    node = _node(tree, node_id)
    score = node.score
    assert score is not None
    spec = node.spec
    y, x = study.y_name, study.x_name
    if max_residuals < 2:
        raise UsageError(f"max_residuals {max_residuals} must be at least 2")
    training, levels, y_range = _training_block(study, score, spec, max_residuals)
    line = check(study, alpha=tree.alpha)
    sug = tree.suggest(rule)
    doc: dict[str, Any] = {
        "schema_version": SCHEMA_VERSION,
        "document": "bendwise model spec",
        "tool": {"name": "bendwise", "version": __version__},
        "created_utc": (now or datetime.now(UTC)).astimezone(UTC).strftime("%Y-%m-%dT%H:%M:%SZ"),
        "provenance": _provenance_block(study, data_path, reading),
        "node": {"id": node.id, "label": spec.label(y, x), "move": node.move, "depth": node.depth,
                 "path": [n.id for n in tree.path(node.id)]},
        "model": _model_block(study, spec, score),
        "fit": _fit_block(spec, score.fit),
        "calibration": {
            "x_min": float(study.x_min), "x_max": float(study.x_max),
            "y_min": y_range[0], "y_max": y_range[1],
            "levels": levels,
        },
        "training": training,
        "tests": _tests_block(tree, node, line),
        "criteria": {**score.criteria.as_json(), "press": score.press, "press_note": score.press_note,
                     "max_studentized_residual": score.max_studentized},
        "suggestion": {"rule": sug.rule, "alpha": tree.alpha, "node": sug.node, "reason": sug.reason,
                       "exported_is_suggested": sug.node == node.id},
        "cautions": {"use": CAUTION, "post_search": POST_SEARCH_CAUTION},
    }
    return _clean(doc)


def _training_block(study: Study, score: Any, spec: ModelSpec,
                    max_residuals: int) -> tuple[dict[str, Any], list[dict[str, Any]], tuple[float, float]]:
    """The smearing residuals (all rows, or evenly spaced / a seeded sample of a large table), the
    level table and the range of y."""
    from ..tree.residuals import residuals_by_level

    lr_residual = residuals_by_level(study, score, max_rows=max_residuals).residual
    sampled = study.n > max_residuals
    if isinstance(study.rows(), Rows):
        sample_note = (f"the table has {study.n:,} rows; {lr_residual.shape[0]:,} evenly spaced residuals are kept"
                       if sampled else None)
        z = np.asarray(spec.response.forward(study.y), dtype=float)
        levels = _level_table(study, z)
        y_range = (float(study.y.min()), float(study.y.max()))
    else:  # rows read through the SQL engine: level totals, and a seeded sample for the residuals
        sample_note = (f"the table has {study.n:,} rows; residuals of a seeded random sample of "
                       f"{lr_residual.shape[0]:,} rows (DuckDB reservoir sample) are kept" if sampled else None)
        levels = _group_level_table(study, spec)
        y_range = study.y_range()
    training = {
        "residuals": lr_residual,
        "kind": "√w·(z − ẑ) per row on the fitted scale (the smearing sample)",
        "count": int(lr_residual.shape[0]),
        "rows": study.n,
        "sampled": sampled,
        "note": sample_note,
    }
    return training, levels, y_range


def _provenance_block(study: Study, data_path: str | Path | None, reading: dict[str, Any] | None) -> dict[str, Any]:
    """Where the data came from (name, checksum, how it was read), the columns, the rows and the grouping."""
    y, x = study.y_name, study.x_name
    sha = size = None
    if data_path is not None:
        sha, size = file_digest(data_path)
    return {
        "data": {
            "file": study.source if data_path is None else Path(data_path).name,
            "sha256": sha,
            "size_bytes": size,
            "reading": reading or describe_reading(data_path),
        },
        "columns": {"response": y, "predictor": x, "covariates": [c.name for c in study.covariates],
                    "weights": study.weights_name},
        "rows": {"read": study.report.n_read, "used": study.report.n_used, "dropped": study.report.n_dropped,
                 "drops": study.report.as_json()["drops"]},
        "grouping": {
            "rule": "exact" if study.tolerance is None else "tolerance",
            "tolerance_text": study.tolerance_text,
            "tolerance": study.tolerance,
            "merged": study.approximate_groups,
            "levels": study.c,
        },
    }


def _model_block(study: Study, spec: ModelSpec, score: Any) -> dict[str, Any]:
    """The model as data: transforms, degree, covariates, interactions, terms, weights, a formula to read."""
    y, x = study.y_name, study.x_name
    kinds = {c.name: c.kind for c in study.covariates}
    return {
        "response": {"column": y, "transform": spec.response.as_json(), "estimated": spec.response_estimated},
        "predictor": {"column": x, "transform": spec.predictor.as_json(), "estimated": spec.predictor_estimated,
                      "working_centre": score.centre, "working_scale": score.scale},
        "degree": spec.degree,
        "covariates": _covariates_block(study, spec),
        "interactions": list(spec.interactions),
        "terms": [t.as_json() for t in score.terms],
        "weights": _weights_block(study, spec),
        "formula_text": spec.formula(y, x, kinds),
        "formula_note": "for reading only: bendwise rebuilds the model from the terms and never evaluates this text",
    }


def _fit_block(spec: ModelSpec, fit: Any) -> dict[str, Any]:
    """Coefficients with their covariance, σ̂, degrees of freedom and r²."""
    return {
        "scale": "fitted" if not spec.response.is_identity else "original",
        "coefficients": [{"name": c.name, "estimate": c.estimate, "se": c.se, "t": c.t, "p": c.p}
                         for c in fit.coefficients],
        "covariance": [list(r) for r in fit.cov],
        "sigma": fit.sigma,
        "df_resid": fit.df_resid,
        "n": fit.n,
        "rank": fit.rank,
        "sse": fit.sse,
        "r2": fit.r2,
        "r2_adj": fit.r2_adj,
    }


def _tests_block(tree: RemedyTree, node: Any, line: Any) -> dict[str, Any]:
    """This node's tests, the straight line's, each step's nested test on the path, and warnings."""
    study, score = tree.study, node.score
    y, x = study.y_name, study.x_name
    return {
        "alpha": tree.alpha,
        "lack_of_fit": score.lack_of_fit.as_json(),
        "lack_of_fit_pure": score.lack_of_fit_pure.as_json(),
        "node_spread": score.spread.as_json(),
        "straight_line": {"lack_of_fit": line.lack_of_fit.as_json(), "mandel": line.mandel.as_json(),
                          "spread": line.spread.as_json(), "verdict": line.verdict},
        "path": [
            {"node": n.id, "move": n.move, "label": n.spec.label(y, x),
             "nested": n.nested.to_spec_dict() if n.nested is not None else None}
            for n in tree.path(node.id)[1:]
        ],
        "warnings": list(score.warnings),
    }


def _node(tree: RemedyTree, node_id: str):
    node = tree.nodes.get(node_id)
    if node is None:
        ids = ", ".join(list(tree.nodes)[:15]) + (", …" if len(tree.nodes) > 15 else "")
        raise UsageError(f"node {node_id!r} is not in the tree (nodes: {ids}); list them with bendwise grow")
    if node.score is None:
        raise UsageError(f"node {node_id!r} could not be scored ({node.error}); choose another node")
    fit = node.score.fit
    if fit.aliased:
        if node.spec.weights is not None or tree.study.weights_name is not None:
            raise UsageError(f"node {node_id!r}: with these weights {', '.join(fit.aliased)} is collinear with the "
                             "other terms (the weights leave it no spread of its own), so it cannot be handed on; "
                             "check the weights or choose another node")
        raise UsageError(f"node {node_id!r} has collinear terms ({', '.join(fit.aliased)}) and cannot be handed on; "
                         "choose another node")
    if fit.df_resid < 1 or not math.isfinite(fit.sigma) or fit.sigma <= 0:
        raise UsageError(f"node {node_id!r} leaves no residual variation (σ̂ undefined); it cannot give intervals — "
                         "choose a smaller model")
    return node


# ----- writing --------------------------------------------------------------------------

def _refuse_existing(path: Path, force: bool, what: str) -> None:
    if path.exists() and not force:
        raise ExportExists(f"{path} already exists; choose another {what} or add --force to replace it")


def write_text_atomic(path: str | Path, text: str, *, force: bool = False) -> Path:
    """Write ``text`` to ``path`` through a temporary file in the same folder and ``os.replace``."""
    with atomic_text_file(path, force=force) as fh:
        fh.write(text)
    return Path(path)


@contextlib.contextmanager
def atomic_text_file(path: str | Path, *, force: bool = False) -> Iterator[TextIO]:
    """A text file to write in pieces: a temporary file in the same folder that replaces ``path``
    when the block ends without an error (and is removed otherwise). An existing ``path`` is
    refused without ``force``; the check comes before anything is written."""
    p = Path(path)
    _refuse_existing(p, force, "file name")
    if p.exists() and p.is_dir():
        raise UsageError(f"{p} is a folder; give a file name")
    if not p.parent.is_dir():
        raise DataError(f"folder {p.parent} does not exist; create it first")
    tmp: str | None = None
    try:
        fd, tmp = tempfile.mkstemp(prefix=f".{p.name}.", suffix=".tmp", dir=p.parent)
        with os.fdopen(fd, "w", encoding="utf-8", newline="") as fh:
            yield fh
        os.replace(tmp, p)
        tmp = None
    except OSError as exc:
        raise DataError(f"cannot write {p}: {exc.strerror or exc}; check the folder's permissions") from None
    finally:  # also on an interrupt or a failed batch: no temporary file is left behind
        if tmp is not None:
            Path(tmp).unlink(missing_ok=True)


def write_rows_csv(rows: list[dict[str, Any]], path: str | Path, *, force: bool = False) -> Path:
    """Rows (dicts with the same keys) as CSV, written atomically; None becomes an empty cell."""
    buf = io.StringIO()
    keys: list[str] = []
    for r in rows:
        keys += [k for k in r if k not in keys]
    writer = csv.DictWriter(buf, fieldnames=keys, lineterminator="\n")
    writer.writeheader()
    for r in rows:
        writer.writerow({k: ("" if r.get(k) is None else _cell(r.get(k))) for k in keys})
    return write_text_atomic(path, buf.getvalue(), force=force)


class RowsCsv:
    """The CSV of :func:`write_rows_csv` written batch by batch into an open file: the header from
    the first row's keys (every row of one ``apply`` has the same keys), then each row."""

    def __init__(self, fh: TextIO) -> None:
        self.fh = fh
        self.writer: csv.DictWriter | None = None
        self.keys: list[str] = []
        self.count = 0

    def write(self, rows: list[dict[str, Any]]) -> None:
        """Append ``rows``."""
        for r in rows:
            if self.writer is None:
                self.keys = list(r)
                self.writer = csv.DictWriter(self.fh, fieldnames=self.keys, lineterminator="\n")
                self.writer.writeheader()
            self.writer.writerow({k: ("" if r.get(k) is None else _cell(r.get(k))) for k in self.keys})
            self.count += 1


def _cell(v: Any) -> Any:
    if isinstance(v, float):
        return repr(v)
    if isinstance(v, (list, tuple)):
        return " ".join("open" if a is None else repr(a) for a in _flatten(v))
    return v


def _flatten(v) -> list:
    out: list = []
    for a in v:
        out += _flatten(a) if isinstance(a, (list, tuple)) else [a]
    return out


def _check_replaceable(out_dir: Path) -> Path:
    """The folder ``--force`` may write into (a link to a folder is followed), after checking it
    holds nothing but an earlier export: its files, each a plain file."""
    if not out_dir.exists():  # a link to nothing
        raise UsageError(f"{out_dir} is a link to {os.readlink(out_dir)}, which does not exist; choose another folder")
    if not out_dir.is_dir():
        raise UsageError(f"{out_dir} exists and is not a folder; choose a folder name")
    target = out_dir.resolve() if out_dir.is_symlink() else out_dir
    extra = sorted(p.name for p in target.iterdir() if p.name not in EXPORT_FILES)
    if extra:
        raise UsageError(f"{out_dir} holds files bendwise did not write ({', '.join(extra[:3])}); --force only "
                         "replaces an earlier export: choose another folder")
    for name in EXPORT_FILES:
        f = target / name
        if f.is_symlink():
            raise UsageError(f"{out_dir / name} is a link to {os.readlink(f)}, not a file bendwise wrote; --force "
                             "replaces only an export's own files: remove the link or choose another folder")
        if f.exists() and not f.is_file():
            raise UsageError(f"{out_dir / name} is a folder, not a file bendwise wrote; --force replaces only an "
                             "export's own files: choose another folder")
    return target


def _write_folder(out_dir: Path, files: dict[str, str], force: bool) -> list[Path]:
    target = out_dir
    replacing = out_dir.exists() or out_dir.is_symlink()
    if replacing:
        if not force:
            raise ExportExists(f"{out_dir} already exists; choose another folder or add --force to replace it")
        target = _check_replaceable(out_dir)
    parent = target.parent
    tmp: Path | None = None
    old: Path | None = None
    try:
        try:
            parent.mkdir(parents=True, exist_ok=True)
            tmp = Path(tempfile.mkdtemp(prefix=f".{target.name}.", suffix=".tmp", dir=parent))
        except OSError as exc:
            raise DataError(f"cannot create a folder in {parent}: {exc.strerror or exc}; check the path") from None
        for name, text in files.items():
            with open(tmp / name, "w", encoding="utf-8", newline="\n") as fh:
                fh.write(text)
        (tmp / "reproduce.py").chmod(0o755)
        if replacing:
            old = parent / f".{target.name}.old-{uuid.uuid4().hex[:8]}"
            os.rename(target, old)
        os.rename(tmp, target)
    except OSError as exc:
        raise DataError(f"cannot write the export to {out_dir}: {exc.strerror or exc}; check the folder") from None
    finally:  # every way out, an interrupt included: the earlier export back or gone, no temporary folder left
        if old is not None and old.is_dir():
            if not target.exists():
                os.rename(old, target)
            else:
                _remove_earlier_export(old)
        if tmp is not None and tmp.is_dir():
            shutil.rmtree(tmp, ignore_errors=True)
    return [out_dir / name for name in files]


def _remove_earlier_export(folder: Path) -> None:
    """Delete a replaced export: its own files only, then the folder if that leaves it empty."""
    for name in EXPORT_FILES:
        try:
            (folder / name).unlink(missing_ok=True)
        except OSError:
            pass
    try:
        folder.rmdir()
    except OSError:
        pass  # something else appeared in it: never deleted


def export_node(tree: RemedyTree, node_id: str, out_dir: str | Path, *, data_path: str | Path | None = None,
                reading: dict[str, Any] | None = None, rule: str = "aicc", force: bool = False,
                max_residuals: int = MAX_RESIDUALS, now: datetime | None = None,
                stability: Stability | None = None, report: str = "md") -> list[Path]:
    """Write ``spec.json``, ``reproduce.py`` and the report(s) for one node into ``out_dir``.

    ``report`` is 'md' (report.md), 'html' (report.html: one self-contained page with figures,
    needs matplotlib) or 'both'.

    ``stability`` (from ``selection_stability`` on the same tree) adds the selection shares to the
    spec (key ``stability``) and a table to the report.

    ``data_path`` is the table the tree was grown from (its SHA-256 goes into the spec and the
    script finds it relative to the export); None when it came from standard input.
    ``reading`` is the ``describe_reading`` of that table (detected when None). Returns the
    written paths. Refuses an existing ``out_dir`` unless ``force``.
    """
    import json

    from .report import report_markdown
    from .reproduce import script_text

    if report not in REPORT_CHOICES:
        raise UsageError(f"report {report!r} must be one of {', '.join(REPORT_CHOICES)}")
    if report != "md":
        from .html import html_available

        if not html_available():
            raise UsageError("the HTML report needs matplotlib: pip install 'bendwise[report]', or use --report md")
    out = Path(out_dir)
    if data_path is not None:
        data_files(data_path)  # the file, or a folder's or glob's files, must be there (one-line error)
    doc = build_spec(tree, node_id, data_path=data_path, reading=reading, rule=rule,
                     max_residuals=max_residuals, now=now)
    if stability is not None:
        doc["stability"] = {**stability.to_dict(), "exported_node_share": stability.share(node_id)}
    if getattr(tree, "runs", None) is not None:
        from .runs_spec import read_runs, runs_block

        doc["runs"] = _clean(runs_block(tree, tree.nodes[node_id]))
        read_runs(doc, validate_spec(doc))
    validate_spec(doc)  # what we write must read back
    rel = None
    if data_path is not None:
        try:
            rel = os.path.relpath(Path(data_path).absolute(), out.resolve())  # absolute: keeps a glob's pattern
        except ValueError:  # another drive: keep the absolute path
            rel = str(Path(data_path).resolve())
    files = {
        "spec.json": json.dumps(doc, indent=2, ensure_ascii=False, allow_nan=False) + "\n",
        "reproduce.py": script_text(tree, node_id, doc, rel),
    }
    if report in ("md", "both"):
        files["report.md"] = report_markdown(tree, node_id, doc)
    if report in ("html", "both"):
        from .html import report_html

        files["report.html"] = report_html(tree, node_id, doc)
    return _write_folder(out, files, force)
