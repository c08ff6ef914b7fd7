"""``bendwise grow``: grow the remedy tree, score every node, suggest one with reasons."""

from __future__ import annotations

import argparse
import sys

from ..output import count, emit_json, fmt_num, fmt_p
from .common import CAUTION, add_data_args, alpha_arg, category_notice, load_study, table


def register(sub: argparse._SubParsersAction) -> None:
    """Add the ``grow`` subcommand."""
    from bendwise.engine.tree.tree import RULES

    p = sub.add_parser(
        "grow",
        help="grow and score candidate remedies; suggest one",
        description="Grow a tree of remedies from the straight line (transforms, powers, covariates, "
        "weights), score every node on one scale and suggest one.",
    )
    add_data_args(p, covariates=True)
    p.add_argument("--depth", type=int, default=2, help="moves from the straight line (default 2)")
    p.add_argument("--rule", choices=RULES, default="aicc", help="suggestion rule (default aicc)")
    p.add_argument("--alpha", type=alpha_arg, default=0.05, help="level for lack of fit (default 0.05)")
    p.add_argument("--allowable-deviation", type=float, metavar="D",
                   help="largest departure from the line that matters in practice (y units)")
    add_runs_arg(p)
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.add_argument("--quiet", action="store_true", help="no progress on stderr")
    add_stability_args(p)
    p.set_defaults(func=run)


def add_runs_arg(p: argparse.ArgumentParser) -> None:
    """``--runs COL`` (grow and export): runs as a random intercept in every node."""
    p.add_argument("--runs", metavar="COL",
                   help="column naming the run (day, batch, instrument): every node gets a random run intercept, "
                   "between-/within-run SDs and lack of fit within runs; criteria from ML fits")
    p.add_argument("--run-slopes", action="store_true",
                   help="with --runs: each run also gets its own slope (the straight line only; other nodes are "
                   "refused with a reason)")


def add_stability_args(p: argparse.ArgumentParser) -> None:
    """``--stability N`` and ``--seed S`` (grow and export)."""
    p.add_argument("--stability", type=_resamples, metavar="N",
                   help="also regrow the tree on N resamples of the replicates and report how often each node "
                   "wins the suggestion")
    p.add_argument("--seed", type=_seed, default=0, metavar="S", help="seed of the resampling (default 0)")


def compute_stability(args: argparse.Namespace, tree):
    """Selection stability when ``--stability N`` was given (progress on a terminal), else None."""
    if not args.stability:
        return None
    from bendwise.engine.tree.stability import selection_stability

    tick = None
    if not getattr(args, "quiet", False) and sys.stderr.isatty():
        def tick(done: int, total: int) -> None:
            sys.stderr.write(f"\r  resampling {done}/{total}")
            sys.stderr.flush()
    stab = selection_stability(tree, args.stability, depth=args.depth, seed=args.seed, rule=args.rule,
                               progress=tick)
    if tick is not None:
        sys.stderr.write("\r" + " " * 40 + "\r")
    return stab


def _resamples(text: str) -> int:
    try:
        val = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"resamples {text!r} is not a whole number; give e.g. 200") from None
    if not 1 <= val <= 100_000:
        raise argparse.ArgumentTypeError(f"resamples {text!r} must lie between 1 and 100000, e.g. 200")
    return val


def _seed(text: str) -> int:
    try:
        val = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"seed {text!r} is not a whole number") from None
    if val < 0:
        raise argparse.ArgumentTypeError(f"seed {text!r} must be ≥ 0")
    return val


def build_tree(args: argparse.Namespace, progress=None):
    """Load, grow and return (study, tree); shared with export."""
    from bendwise.engine.errors import UsageError
    from bendwise.engine.tree.tree import RemedyTree

    if args.depth < 0 or args.depth > 4:
        raise UsageError(f"depth {args.depth} is out of range; use 0 to 4")
    runs = getattr(args, "runs", None)
    if runs:
        from .check_runs import load_study_with_runs

        study = load_study_with_runs(args)
        runs = args.runs
        if getattr(args, "stability", None):
            raise UsageError("--stability resamples replicates without regard to runs; drop it or --runs")
    else:
        study = load_study(args)
    tree = RemedyTree(study, alpha=args.alpha, allowable_deviation=getattr(args, "allowable_deviation", None),
                      runs=runs or None, run_slopes=bool(getattr(args, "run_slopes", False)))
    tree.grow(args.depth, progress)
    return study, tree


def run(args: argparse.Namespace) -> int:
    """Grow and print."""
    from bendwise.engine.tree.tree import POST_SEARCH_CAUTION

    progress = None
    if not args.quiet and not args.json and sys.stderr.isatty():
        def progress(done: int, total: int, label: str) -> None:
            sys.stderr.write(f"\r  scoring {done}/{total}: {label[:50]:<50}")
            sys.stderr.flush()
    study, tree = build_tree(args, progress)
    if progress is not None:
        sys.stderr.write("\r" + " " * 72 + "\r")
    sug_id = tree.suggest(args.rule).node
    notice = None if sug_id is None else category_notice(study, tree.nodes[sug_id].spec)
    if notice:
        sys.stderr.write(f"bendwise: the suggested {sug_id}: {notice}\n")
    stab = compute_stability(args, tree)
    if args.json:
        body = tree.as_json(args.rule)
        if stab is not None:
            body["stability"] = stab.to_dict()
            for node in body["nodes"]:
                node["stability"] = stab.share(node["id"])
        emit_json(body)
        return 0
    lines = render(study, tree, args.rule)
    if stab is not None:
        lines[-2:-2] = render_stability(stab, tree)
    print("\n".join(lines))
    _ = POST_SEARCH_CAUTION
    return 0


def render_stability(stab, tree) -> list[str]:
    """The stability table: the five most frequent winners and a one-line reading."""
    from bendwise.engine.tree.stability import shares_table

    out = ["", f"Selection stability · {stab.resamples} resamples, seed {stab.seed}, rule {stab.rule}",
           f"  {stab.scheme}"]
    if stab.sample_note:
        out.append(f"  {stab.sample_note}")
    rows = [[nid, label[:48], f"{100 * share:.1f} %"] for nid, label, share in shares_table(stab, tree)]
    out += ["  " + line for line in table(rows, ["node", "model", "wins"], right={2})]
    out.append(f"  {stab.reading()}")
    return out


def verdict_word(tree, node) -> str:
    """'pass', 'FAIL', 'untestable' or 'error' (words, not colours)."""
    s = node.score
    if s is None:
        return "error"
    v = s.lack_of_fit.passes(tree.alpha)
    return "untestable" if v is None else ("pass" if v else "FAIL")


def render(study, tree, rule: str) -> list[str]:
    """Text report: suggestion, ranked table, tree with pruned moves."""
    from bendwise.engine.tree.tree import POST_SEARCH_CAUTION

    sug = tree.suggest(rule)
    y, x = study.y_name, study.x_name
    out = [f"bendwise grow · {study.source} · {study.describe_design()}"]
    if study.report.n_dropped:
        out.append(f"  rows dropped: {study.report.n_dropped} ({'; '.join(study.report.lines())})")
    out.append(f"  {count(len(tree.nodes), 'model')} scored; rule {rule}; lack of fit at α = {tree.alpha:g}")
    out += ["", "Suggestion"]
    out += ["  " + line for line in sug.summary().splitlines()]
    if sug.node is not None:
        out.append(f"  {tree.node_summary(tree.nodes[sug.node]).summary()}")
    out += ["", f"Candidates, best first by {rule}"]
    best = tree.best_aicc()
    rows = []
    for n in sorted(tree.nodes.values(), key=tree.sort_key(rule)):
        s = n.score
        mark = "→" if n.id == sug.node else " "
        if s is None:
            rows.append([mark + n.id, n.spec.label(y, x)[:44], "—", "—", "—", "—", "—", "error"])
            continue
        nested = fmt_p(n.nested.p) if n.nested is not None and n.nested.testable else "—"
        d = s.criteria.aicc - best if (s.criteria.aicc is not None and best is not None) else None
        rows.append([mark + n.id, n.spec.label("y", "x")[:44], str(s.k), fmt_p(s.lack_of_fit.p), nested,
                     fmt_num(d, 3) if d is not None else "—", fmt_num(s.criteria.bic, 5), verdict_word(tree, n)])
    out += table(rows, ["node", "model", "k", "lack-of-fit p", "nested p", "ΔAICc", "BIC", "verdict"],
                 right={2, 3, 4, 5, 6})
    if tree.runs is not None:
        out += render_runs(tree, rule)
    out += ["", "Tree (move → model)"]

    def walk(nid: str, indent: str) -> None:
        n = tree.nodes[nid]
        label = n.spec.label("y", "x")
        via = list(dict.fromkeys(i for i, _ in n.also_from))
        extra = f"  (also via {', '.join(via)})" if via else ""
        head = "" if n.parent is None else f"{n.move} → "
        out.append(f"{indent}{n.id} [{verdict_word(tree, n)}] {head}{label}{extra}")
        for cid in n.children:
            walk(cid, indent + "  ")
        for move, reason in n.pruned:
            out.append(f"{indent}  ✗ {move}: {reason}")

    walk("root", "  ")
    out += ["", POST_SEARCH_CAUTION, CAUTION]
    return out


def render_runs(tree, rule: str) -> list[str]:
    """The runs table: between- and within-run SD per node, and what the tests and criteria mean."""
    r = tree.runs
    kind = "a random intercept and slope (straight line only)" if tree.run_slopes else "a random intercept in every node"
    out = ["", f"Runs · {r.name}: {r.count} runs as {kind}"]
    rows = []
    for n in sorted(tree.nodes.values(), key=tree.sort_key(rule)):
        if n.runs is None:
            rows.append([n.id, "—", "—", "—", (n.runs_error or n.error or "")[:60]])
            continue
        iv, note = "—", ""
        if n.runs.between_sd_interval is not None:
            lo, hi = n.runs.between_sd_interval
            iv = f"{fmt_num(lo, 3)} … {fmt_num(hi, 3) if hi is not None else 'unbounded'}"
        if n.runs.slopes is not None:
            c = n.runs.slopes.correlation
            note = (f"intercept SD at x = 0; slope SD {fmt_num(n.runs.slopes.slope_sd, 4)}, correlation "
                    f"{fmt_num(c, 3) if c is not None else '—'}")
        rows.append([n.id, fmt_num(n.runs.between_sd, 4), iv, fmt_num(n.runs.within_sd, 4), note])
    out += ["  " + line for line in table(rows, ["node", "between-run SD", "95% interval", "within-run SD", "note"],
                                          right={1, 3})]
    out.append("  SDs: REML on each node's scale (response transform applied), from per-run sums of its design;")
    out.append("  interval: profile REML likelihood (χ²₁ cut-off). Lack of fit above: within runs (runs as blocks")
    out.append("  in the node and in the run + level means; pure error within run × level cells).")
    out.append("  ΔAICc and BIC above: ML log-likelihoods of the run models (original y scale, Jacobian added),")
    out.append("  so nodes compare like with like; the run column is not offered as a fixed covariate.")
    return out
