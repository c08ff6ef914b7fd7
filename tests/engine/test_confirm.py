"""``bendwise confirm``: a frozen form and a fixed curve tested on an independent run.

References: statsmodels (the refit's lack of fit equals ``anova_lm`` of the same transformed
model against x as a factor on the new run); simulation (seeded) for the error rates of both
tests; the invented second run of the sensor scenario in datasets/ for the round trip.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import bendwise.engine as engine
import numpy as np
import pandas as pd
import pytest
from bendwise.engine.handon.confirm import confirm, model_spec_from_doc
from bendwise.engine.handon.export import build_spec
from bendwise.engine.handon.specfile import validate_spec
from bendwise.tui.cli import main

DATA = Path(__file__).resolve().parents[2] / "datasets"
LEVELS = np.repeat(np.linspace(1.0, 10.0, 6), 3)


def _truth(x: np.ndarray) -> np.ndarray:
    return 10 + 3 * x - 0.25 * x**2


def _run(rng, shift: float = 0.0, sigma: float = 0.6) -> pd.DataFrame:
    return pd.DataFrame({"x": LEVELS, "y": _truth(LEVELS) + shift + rng.normal(0, sigma, LEVELS.size)})


@pytest.fixture(scope="module")
def quadratic_spec():
    """The quadratic node exported from one run of the truth (run A)."""
    frame = _run(np.random.default_rng(20261205))
    tree = engine.RemedyTree(engine.make_study(frame, y="y", x="x"))
    tree.grow(1)
    nid = next(n.id for n in tree.nodes.values() if n.spec == engine.ModelSpec(degree=2))
    doc = json.loads(json.dumps(build_spec(tree, nid)))
    return doc, validate_spec(doc)


def test_the_frozen_form_is_the_exported_node(quadratic_spec):
    doc, model = quadratic_spec
    assert model_spec_from_doc(doc, model) == engine.ModelSpec(degree=2)


def test_refit_equals_statsmodels_on_the_new_run(quadratic_spec):
    import statsmodels.formula.api as smf
    from statsmodels.stats.anova import anova_lm

    doc, model = quadratic_spec
    new = _run(np.random.default_rng(7))
    got = confirm(doc, model, new)
    # reference: statsmodels, the same form against x as a factor on the new run
    ref = anova_lm(smf.ols("y ~ x + I(x**2)", new).fit(), smf.ols("y ~ C(x)", new).fit())
    assert math.isclose(got.form.f, float(ref["F"].iloc[1]), rel_tol=1e-9)
    assert math.isclose(got.form.p, float(ref["Pr(>F)"].iloc[1]), rel_tol=1e-9)
    assert (got.form.df_lack, got.form.df_pure) == (int(ref["df_diff"].iloc[1]), int(ref["df_resid"].iloc[1]))


def test_a_transformed_form_is_refitted_on_its_own_scale(tmp_path):
    import statsmodels.formula.api as smf
    from statsmodels.stats.anova import anova_lm

    rng = np.random.default_rng(3)
    x = LEVELS
    a = pd.DataFrame({"x": x, "y": np.exp(0.5 + 0.25 * x + rng.normal(0, 0.05, x.size))})
    tree = engine.RemedyTree(engine.make_study(a, y="y", x="x"))
    tree.grow(1)
    nid = next(n.id for n in tree.nodes.values() if n.spec == engine.ModelSpec(response=engine.Transform("log")))
    doc = json.loads(json.dumps(build_spec(tree, nid)))
    b = pd.DataFrame({"x": x, "y": np.exp(0.5 + 0.25 * x + rng.normal(0, 0.05, x.size))})
    got = confirm(doc, validate_spec(doc), b)
    ref = anova_lm(smf.ols("np.log(y) ~ x", b).fit(), smf.ols("np.log(y) ~ C(x)", b).fit())  # statsmodels
    assert math.isclose(got.form.f, float(ref["F"].iloc[1]), rel_tol=1e-9)


@pytest.mark.slow
def test_error_rates_by_simulation(quadratic_spec):
    """1,000 new runs from the same truth: the form is rejected at about α (it is the exact F test
    of a true model); the transfer test too (it carries the curve's own uncertainty). A curve
    shifted by 3σ is caught by transfer in at least 90 % of runs."""
    from scipy.stats import binomtest

    doc, model = quadratic_spec
    rng = np.random.default_rng(424242)
    runs = 1000
    form_rej = transfer_rej = 0
    for _ in range(runs):
        res = confirm(doc, model, _run(rng))
        form_rej += res.form.p < 0.05
        transfer_rej += res.transfer.p < 0.05
    # the exact test must hold its level: a two-sided binomial test at 1 % does not reject α = 0.05
    assert binomtest(form_rej, runs, 0.05).pvalue > 0.01, form_rej
    assert transfer_rej / runs <= 0.08, transfer_rej  # approximate (the curve's variance is estimated)
    caught = sum(confirm(doc, model, _run(rng, shift=3 * 0.6)).transfer.p < 0.05 for _ in range(200))
    assert caught / 200 >= 0.90, caught
    print(f"\nconfirm, same truth: form rejected {form_rej / runs:.3f}, transfer {transfer_rej / runs:.3f}; "
          f"3σ shift caught {caught / 200:.3f}")


def test_verdicts(quadratic_spec):
    doc, model = quadratic_spec
    rng = np.random.default_rng(11)
    assert confirm(doc, model, _run(rng)).verdict in ("confirmed", "form holds, curve moved")
    moved = confirm(doc, model, _run(rng, shift=5 * 0.6))
    assert moved.verdict == "form holds, curve moved" and "refit" in moved.reason
    bent = _run(rng)
    bent["y"] = bent["y"] + 0.4 * (bent["x"] - 5.5) ** 3 / 10  # a cubic bend the quadratic cannot follow
    assert confirm(doc, model, bent).verdict == "form rejected"
    single = _run(rng).drop_duplicates("x")
    out = confirm(doc, model, single)
    assert out.verdict == "untestable" and "more than once" in out.reason
    within = confirm(doc, model, _run(rng), allowable_deviation=100.0)
    assert within.transfer.within_allowable is True
    tight = confirm(doc, model, _run(rng), allowable_deviation=1e-6)
    assert tight.transfer.within_allowable is False and tight.verdict == "form holds, curve moved"


def test_round_trip_on_the_two_invented_runs(tmp_path, capsys):
    out = tmp_path / "exA"
    assert main(["export", str(DATA / "sensor_calibration.csv"), "-y", "signal_mv", "-x", "conc_mg_l",
                 "--covariates", "run_day,temp_c", "--suggested", "-o", str(out)]) == 0
    capsys.readouterr()
    assert main(["confirm", str(out), str(DATA / "sensor_calibration_run2.csv"), "--json"]) == 0
    got = json.loads(capsys.readouterr().out)
    assert set(got) >= {"n", "levels", "form", "transfer", "verdict"}
    assert set(got["form"]) >= {"testable", "f", "df_lack", "df_pure", "p", "reason"}
    assert set(got["transfer"]) >= {"f", "df1", "df2", "p", "max_deviation", "within_allowable"}
    assert got["n"] == 24 and got["levels"] == 8 and got["verdict"] == "confirmed"
    # --strict: exit 1 when not confirmed
    shifted = pd.read_csv(DATA / "sensor_calibration_run2.csv")
    shifted["signal_mv"] = shifted["signal_mv"] + 40.0
    path = tmp_path / "shifted.csv"
    shifted.to_csv(path, index=False)
    assert main(["confirm", str(out), str(path), "--strict"]) == 1
    text = capsys.readouterr().out
    assert "FORM HOLDS, CURVE MOVED" in text and "not optimistic" in text
    assert main(["confirm", str(out), str(path)]) == 0


def test_bad_input_is_one_line_and_exit_2(tmp_path, capsys, quadratic_spec):
    doc, _ = quadratic_spec
    spec = tmp_path / "spec.json"
    spec.write_text(json.dumps(doc))
    new = tmp_path / "new.csv"
    pd.DataFrame({"x": LEVELS, "other": LEVELS}).to_csv(new, index=False)
    assert main(["confirm", str(spec), str(new)]) == 2
    err = capsys.readouterr().err
    assert "'y'" in err and len(err.strip().splitlines()) == 1
    assert main(["confirm", str(spec), str(new), "--alpha", "2"]) == 2


def test_a_new_category_is_refused_with_the_reason(tmp_path):
    rng = np.random.default_rng(5)
    batch = np.tile(["a", "b"], LEVELS.size // 2)
    a = pd.DataFrame({"x": LEVELS, "y": _truth(LEVELS) + 2 * (batch == "b") + rng.normal(0, 0.5, LEVELS.size),
                      "batch": batch})
    tree = engine.RemedyTree(engine.make_study(a, y="y", x="x", covariates=["batch"]))
    tree.grow(1)
    nid = next(n.id for n in tree.nodes.values() if n.spec.covariates == ("batch",) and n.spec.degree == 1)
    doc = json.loads(json.dumps(build_spec(tree, nid)))
    b = a.assign(batch=np.tile(["a", "c"], LEVELS.size // 2))
    with pytest.raises(engine.BendwiseError, match="category 'c'"):
        confirm(doc, validate_spec(doc), b)
