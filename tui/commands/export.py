"""``bendwise export``: write spec.json, reproduce.py and report.md for one node of the tree."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from .common import CAUTION, add_data_args, alpha_arg, category_notice


def register(sub: argparse._SubParsersAction) -> None:
    """Add the ``export`` subcommand."""
    from bendwise.engine.tree.tree import RULES

    p = sub.add_parser(
        "export",
        help="hand a model on: spec, reproduction script and report",
        description="Grow the tree as bendwise grow does, then write DIR/spec.json (the model as data), "
        "DIR/reproduce.py (refits it with statsmodels) and DIR/report.md and/or DIR/report.html for one node.",
    )
    add_data_args(p, covariates=True)
    which = p.add_mutually_exclusive_group(required=True)
    which.add_argument("--node", metavar="ID", help="node id as listed by bendwise grow (e.g. root, n3)")
    which.add_argument("--suggested", action="store_true", help="the node the suggestion rule picks")
    p.add_argument("-o", "--out", required=True, metavar="DIR", help="folder to create")
    p.add_argument("--force", action="store_true", help="replace DIR when it holds an earlier export")
    p.add_argument("--depth", type=int, default=2, help="moves from the straight line (default 2)")
    p.add_argument("--rule", choices=RULES, default="aicc", help="suggestion rule (default aicc)")
    p.add_argument("--report", choices=("md", "html", "both"), default=None,
                   help="report.md, report.html (one self-contained page with figures; needs matplotlib) or "
                        "both (default: both when matplotlib is installed, else md)")
    p.add_argument("--alpha", type=alpha_arg, default=0.05, help="level for lack of fit (default 0.05)")
    from .grow import add_runs_arg, add_stability_args

    add_runs_arg(p)
    add_stability_args(p)
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    """Grow, pick the node, export."""
    from bendwise.engine.errors import UsageError
    from bendwise.engine.handon.export import export_node
    from bendwise.engine.read.files import describe_reading

    from .grow import build_tree, compute_stability

    report = args.report
    if report is None:
        from bendwise.engine.handon.html import html_available

        report = "both" if html_available() else "md"
        if report == "md":
            print("note: report.html not written (matplotlib missing: pip install 'bendwise[report]')")
    study, tree = build_tree(args)
    if args.suggested:
        sug = tree.suggest(args.rule)
        if sug.node is None:
            raise UsageError(f"nothing to export with --suggested: {sug.reason} (pick one with --node)")
        node_id = sug.node
    else:
        node_id = args.node
    data_path = None if args.data == "-" else Path(args.data)
    reading = describe_reading(data_path, delimiter=args.delimiter, decimal=args.decimal, sheet=args.sheet)
    stab = compute_stability(args, tree)
    written = export_node(tree, node_id, Path(args.out), data_path=data_path, reading=reading,
                          rule=args.rule, force=args.force, stability=stab, report=report)
    label = tree.nodes[node_id].spec.label(study.y_name, study.x_name)
    notice = category_notice(study, tree.nodes[node_id].spec)
    if notice:
        sys.stderr.write(f"bendwise: {notice}\n")
    print(f"bendwise export · node {node_id}: {label}")
    for path in written:
        print(f"  wrote {path}")
    print(f"  check it: python {written[1]}")
    print(f"  use it:   bendwise apply {written[0]} NEWDATA")
    if tree.runs is not None:
        print(f"  runs:     {tree.runs.name} as a random intercept; apply gives intervals for a new "
              f"{tree.runs.name} (or --run NAME for one of the calibration's)")
    print("")
    print(CAUTION)
    return 0
