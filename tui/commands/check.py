"""``bendwise check``: is the straight line adequate for this replicated data?"""

from __future__ import annotations

import argparse

from ..output import collinear_words, emit_json, fmt_num, fmt_p
from .common import CAUTION, add_data_args, alpha_arg, load_study, table


def register(sub: argparse._SubParsersAction) -> None:
    """Add the ``check`` subcommand."""
    p = sub.add_parser(
        "check",
        help="test the straight line for lack of fit",
        description="Fit y = b0 + b1·x and test it against one mean per level (pure error).",
    )
    add_data_args(p)
    p.add_argument("--alpha", type=alpha_arg, default=0.05, help="level of the verdict (default 0.05)")
    p.add_argument("--json", action="store_true", help="print one JSON object instead of the text report")
    p.add_argument("--strict", action="store_true", help="exit 1 when lack of fit is found")
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    """Run the check and print it."""
    from bendwise.engine import check

    study = load_study(args)
    result = check(study, alpha=args.alpha)
    if args.json:
        emit_json(result.as_json())
    else:
        print("\n".join(render(result, study.describe_design())))
    return 1 if args.strict and result.lack_found else 0


def render(r, design: str) -> list[str]:
    """The text report (our own layout)."""
    out = [f"bendwise check · {r.source}"]
    out.append(f"  response {r.y_name}   predictor {r.x_name}   {'weights ' + r.weights if r.weights else 'unweighted'}")
    out.append(f"  {design}; {r.replicated_levels} level(s) replicated")
    if r.tolerance:
        out.append(f"  settings within {r.tolerance} grouped together"
                   + (" — the test is approximate" if r.grouped_approximately else " (no values merged)"))
    out.append(f"  rows dropped: {r.n_dropped}" + ("" if not r.cleaning else ""))
    for line in r.cleaning:
        out.append(f"    {line}")
    out += ["", "Verdict", f"  {r.verdict}", ""]
    fit = r.fit
    out.append(f"Straight line  {r.y_name} = b0 + b1·{r.x_name}")
    rows = [[c.name, fmt_num(c.estimate, 6), fmt_num(c.se, 4), fmt_num(c.t, 4), fmt_p(c.p),
             f"{fmt_num(c.low, 5)} … {fmt_num(c.high, 5)}"] for c in fit.coefficients]
    out += table(rows, ["term", "estimate", "std error", "t", "p", "95% interval"])
    out.append(f"  σ̂ {fmt_num(fit.sigma, 5)} on {fit.df_resid} df   R² {fit.r2:.6f}   adjusted R² {fit.r2_adj:.6f}")
    if fit.aliased:
        out.append(f"  {collinear_words(fit.aliased, bool(r.weights))}")
    out += ["", "Sum-of-squares split"]
    rows = []
    for a in r.anova:
        label = ("  " + a.source) if a.source in {"lack of fit", "pure error"} else a.source
        rows.append([label, str(a.df), fmt_num(a.ss, 6), fmt_num(a.ms, 5), fmt_num(a.f, 4), fmt_p(a.p)])
    out += table(rows, ["part", "df", "SS", "MS", "F", "p"])
    lof = r.lack_of_fit
    if not lof.testable:
        out.append(f"  lack of fit: not testable — {lof.reason}")
    elif lof.kind != "pure error":
        out.append(f"  lack of fit here is the {lof.kind} test")
    out += ["", "Levels"]
    rows = [[lv.level, str(lv.n), fmt_num(lv.mean, 6), fmt_num(lv.sd, 4), fmt_num(lv.fitted, 6), fmt_num(lv.residual, 4)]
            for lv in r.level_rows[:60]]
    out += table(rows, [r.x_name, "n", "mean", "SD", "line", "mean − line"])
    if len(r.level_rows) > 60:
        out.append(f"  … {len(r.level_rows) - 60} more levels (see --json)")
    out += ["", "Supporting checks"]
    for t in (r.mandel, r.spread, *r.replicate_free):
        if t.testable:
            df = f" on ({', '.join(fmt_num(d, 4) for d in t.df)})" if t.df else ""
            lvl = t.alpha if t.alpha is not None else r.alpha
            word = "flagged" if (t.p is not None and t.p < lvl) else "not flagged"
            approx = ", approximate" if t.approximate else ""
            out.append(f"  {t.name}: {fmt_num(t.statistic, 4)}{df}, p {fmt_p(t.p)} — {word} at {lvl:g}{approx}")
            if t.reason:  # a note on how to read it (e.g. the SQL engine's one-pass spread test)
                out.append(f"    ({t.reason})")
        else:
            out.append(f"  {t.name}: not run — {t.reason}")
    if r.replicate_free:
        out.append("  (no level is replicated, so these replicate-free checks stand in for the exact test)")
    c = r.criteria
    out += ["", f"Criteria  log-likelihood {fmt_num(c.loglik, 6)}   AIC {fmt_num(c.aic, 6)}   "
            f"AICc {fmt_num(c.aicc, 6)}   BIC {fmt_num(c.bic, 6)}   (k = {c.k})", "", CAUTION]
    return out
