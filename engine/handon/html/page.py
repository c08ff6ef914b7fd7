"""Build ``report.html``: the answer first, then the figures, then the search in one table.

Every text that comes from the data (column names, categories, file names, reasons quoting them)
goes through :func:`html.escape`; numbers are taken from the spec document the export writes, so
the page and ``spec.json`` always agree. Key numbers also carry their exact value in a
``data-value`` attribute for checking. No script, no external stylesheet, font or image.
"""

from __future__ import annotations

import math
from html import escape
from typing import Any

from ...numfmt import fmt_p
from ...tree.tree import RemedyTree

__all__ = ["html_available", "report_html"]

CSS = """
@page { margin: 16mm 14mm; }  /* the paper the printer has: A4 or Letter */
body { font-family: sans-serif; font-size: 10.5pt; line-height: 1.4; color: #000; max-width: 180mm; margin: 0 auto; }
h1 { font-size: 16pt; margin: 0 0 4pt 0; } h2 { font-size: 12.5pt; border-bottom: 1px solid #000; margin-top: 14pt; }
table { border-collapse: collapse; margin: 4pt 0; font-size: 9pt; } th, td { border: 1px solid #777; padding: 2pt 5pt; text-align: left; }
td.n { text-align: right; font-variant-numeric: tabular-nums; }
.verdict { border: 2px solid #000; padding: 6pt; font-weight: bold; }
.caution { border-left: 4px solid #000; padding-left: 6pt; }
figure { margin: 8pt 0; break-inside: avoid; page-break-inside: avoid; } figure svg { max-width: 100%; height: auto; }
figcaption { font-size: 9pt; }
.page { break-before: page; page-break-before: always; }
code { font-family: monospace; white-space: pre-wrap; }
"""

def html_available() -> bool:
    """True when matplotlib (the ``report`` extra) can be imported."""
    import importlib.util

    return importlib.util.find_spec("matplotlib") is not None

def _n(v: Any, digits: int = 6) -> str:
    if v is None or (isinstance(v, float) and not math.isfinite(v)):
        return "—"
    if isinstance(v, int):
        return f"{v:,}"
    return f"{v:.{digits}g}"

def _num(v: Any, key: str, digits: int = 6) -> str:
    """A number shown rounded, its exact value in ``data-value`` (checked against spec.json)."""
    exact = "" if v is None else repr(v)
    return f'<span class="num" data-key="{escape(key)}" data-value="{escape(exact)}">{escape(_n(v, digits))}</span>'

def _html_p(p: float | None) -> str:
    """A p-value for the page (``engine.numfmt.fmt_p``, escaped)."""
    return escape(fmt_p(p))


def _c(text: Any) -> str:
    """Data-derived text as escaped code."""
    return f"<code>{escape(str(text))}</code>"

def _table(header: list[str], rows: list[list[str]], numeric: frozenset[int] | set[int] = frozenset()) -> str:
    """An HTML table; cells are already escaped HTML."""
    head = "".join(f"<th>{h}</th>" for h in header)
    body = "".join("<tr>" + "".join(f'<td class="n">{c}</td>' if i in numeric else f"<td>{c}</td>"
                                    for i, c in enumerate(r)) + "</tr>" for r in rows)
    return f"<table><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>"

def _test(t: dict[str, Any]) -> str:
    if not t or not t.get("testable"):
        return escape(str((t or {}).get("reason", "not testable")))
    p = _html_p(t["p"])
    return f"F = {escape(_n(t['f'], 4))} on {t['df_lack']} and {t['df_pure']} df, p {'' if p.startswith('&lt;') else '= '}{p}"

def _answer(doc: dict[str, Any]) -> list[str]:
    """First page: verdict, model, range, σ̂, caveats, provenance."""
    from ...tree.suggestion import published_rates

    tests, fit, m, cal = doc["tests"], doc["fit"], doc["model"], doc["calibration"]
    y, x = m["response"]["column"], m["predictor"]["column"]
    out = [f"<h1>Model hand-off: {_c(doc['node']['label'])}</h1>",
           f"<p>Node {_c(doc['node']['id'])} · written {escape(doc['created_utc'])} by bendwise "
           f"{escape(doc['tool']['version'])} · spec schema {escape(doc['schema_version'])}</p>",
           "<h2>The answer</h2>",
           f'<p class="verdict">Straight line {_c(f"{y} ~ {x}")}: {escape(tests["straight_line"]["verdict"])}</p>',
           f"<p>Model handed on ({_c(doc['node']['label'])}), in words: {_words(doc)} In symbols: "
           f"{_c(m['formula_text'])}"
           f" <small>({escape(m['formula_note'])})</small></p>",
           "<ul>",
           f"<li>Calibrated range of {_c(x)}: {_num(cal['x_min'], 'calibration.x_min')} to "
           f"{_num(cal['x_max'], 'calibration.x_max')}; predictions outside it are extrapolations.</li>",
           f"<li>Residual SD σ̂ = {_num(fit['sigma'], 'fit.sigma')} on {_num(fit['df_resid'], 'fit.df_resid')} df "
           f"({escape(fit['scale'])} scale); n = {_num(fit['n'], 'fit.n')}; r² = {_num(fit['r2'], 'fit.r2')}</li>",
           f"<li>This model's lack of fit: {_test(tests['lack_of_fit'])}</li>",
           f"<li>AICc = {_num(doc['criteria']['aicc'], 'criteria.aicc')} with k = {_num(doc['criteria']['k'], 'criteria.k')}</li>",
           "</ul>"]
    sug = doc["suggestion"]
    out.append(f"<p>Suggestion rule {_c(sug['rule'])} at α = {escape(_n(sug['alpha']))}: "
               + (f"node {_c(sug['node'])} — " if sug["node"] else "no node — ") + escape(sug["reason"])
               + (" This export is the suggested node." if sug["exported_is_suggested"]
                  else " This export is NOT the suggested node: it was chosen by hand.") + "</p>")
    rates = published_rates()
    out += ["<h2>Honest caveats</h2>", f'<p class="caution">{escape(doc["cautions"]["post_search"])}</p>',
            _rates(rates),
            _stability(doc), f'<p class="caution">{escape(doc["cautions"]["use"])}</p>']
    out += _provenance(doc)
    return out

def _rates(rates: dict[str, Any]) -> str:
    """The suggestion rule's measured rates: false remedies on true lines, and the range of power."""
    false = [c for c in rates["cells"] if c["measure"] == "remedy suggested"]
    found = [c for c in rates["cells"] if c["measure"] != "remedy suggested"]
    rows = [[escape(c["design"]), escape(c["truth"]), escape(_n(c["rate"], 3)),
             escape(f"{_n(c['low'], 3)} – {_n(c['high'], 3)}")] for c in false]
    text = (f"<p>How often the suggestion rule errs, measured on simulated data ({escape(_n(rates['sets']))} sets "
            f"per cell, depth {escape(str(rates['depth']))}, α = {escape(_n(rates['alpha']))}, by "
            f"{_c(rates['script'])}). When the truth is a straight line it suggests a remedy anyway in:</p>"
            + _table(["design", "truth", "rate", "95% interval"], rows, {2, 3}))
    if found:
        lo, hi = min(c["rate"] for c in found), max(c["rate"] for c in found)
        text += (f"<p>When the truth bends, it finds a remedy in {escape(_n(lo, 3))} to {escape(_n(hi, 3))} of sets "
                 f"({len(found)} design and shape cells; the README lists each).</p>")
    return text


_TRANSFORM_WORDS = {"identity": "as measured", "log": "on the log scale", "sqrt": "as its square root",
                    "reciprocal": "as its reciprocal", "boxcox": "Box–Cox transformed with λ = {p}",
                    "power": "raised to the power {p}"}

_DEGREE_WORDS = {1: "a straight line", 2: "a quadratic", 3: "a cubic"}


def _words(doc: dict[str, Any]) -> str:
    """The model in plain words (escaped HTML)."""
    m = doc["model"]

    def how(block: dict[str, Any]) -> str:
        tr = block["transform"]
        text = _TRANSFORM_WORDS.get(tr["kind"], tr["kind"])
        return text.format(p=_n(tr.get("param"), 4)) + (" (power estimated from the data)" if block["estimated"] else "")

    degree = _DEGREE_WORDS.get(m["degree"], f"a polynomial of degree {m['degree']}")
    text = (f"{_c(m['response']['column'])}, {escape(how(m['response']))}, follows {escape(degree)} in "
            f"{_c(m['predictor']['column'])}, {escape(how(m['predictor']))}")
    if m["covariates"]:
        text += ", shifted by " + ", ".join(_c(c["name"]) for c in m["covariates"])
    if m["interactions"]:
        text += ", with slopes that differ by " + ", ".join(_c(i) for i in m["interactions"])
    w = m["weights"]
    if w["rule"] != "none":
        text += f"; rows weighted by the level mean to the power −2θ, θ = {escape(_n(w['theta'], 4))}"
    if w["user_column"]:
        text += f"; rows weighted by the column {_c(w['user_column'])}"
    return text + "."


def _stability(doc: dict[str, Any]) -> str:
    st, conf = doc.get("stability"), doc.get("confirmation")
    parts = []
    st = st if isinstance(st, dict) else {}
    share = st.get("exported_node_share")
    if share is not None:
        parts.append(f"Selection stability: the suggestion rule picked this node in {100 * float(share):.1f} % of "
                     f"{escape(str(st['resamples']))} resamples of the data (seed {escape(str(st['seed']))}).")
    else:
        parts.append("Selection stability: not computed for this export.")
    if isinstance(conf, dict) and conf.get("status"):
        parts.append(f"Confirmation on an independent run: {escape(str(conf['status']))}.")
    else:
        parts.append("Confirmation on an independent run: not yet done (bendwise confirm).")
    return "<p>" + " ".join(parts) + "</p>"

def _provenance(doc: dict[str, Any]) -> list[str]:
    prov = doc["provenance"]
    d, rows = prov["data"], prov["rows"]
    digest = (f"SHA-256 {_c(d['sha256'])}, {escape(_n(d['size_bytes']))} bytes" if d["sha256"]
              else "read from standard input: no checksum")
    out = ["<h2>Data provenance</h2><ul>", f"<li>File {_c(d['file'])} ({digest})</li>",
           f"<li>Rows read {_num(rows['read'], 'rows.read')}, used {_num(rows['used'], 'rows.used')}, "
           f"dropped {_num(rows['dropped'], 'rows.dropped')}</li>"]
    for drop in rows["drops"]:
        out.append(f"<li>{escape(_n(drop['count']))} row(s) dropped: {escape(str(drop['reason']))} "
                   f"{_c(drop['column'])}" + (f" (rows {escape(', '.join(str(r) for r in drop['rows']))})"
                                               if drop["rows"] else "") + "</li>")
    g = prov["grouping"]
    out.append(f"<li>Levels: {escape(_n(g['levels']))} ({escape(g['rule'])} grouping)</li></ul>")
    return out

def _search_rows(tree: RemedyTree, node_id: str, doc: dict[str, Any]) -> list[list[str]]:
    """Chosen node, its parent chain, then the best five other nodes by AICc."""
    def aicc(n) -> float:  # an undefined AICc (too few rows for k) sorts last
        v = n.score.criteria.aicc
        return math.inf if v is None or not math.isfinite(v) else float(v)

    scored = [n for n in tree.nodes.values() if n.score is not None]
    best = min(aicc(n) for n in scored)
    path = [n.id for n in tree.path(node_id)]
    others = sorted((n for n in scored if n.id not in path), key=aicc)[:5]
    y, x = tree.study.y_name, tree.study.x_name
    shares = (doc.get("stability") or {}).get("shares") or {}
    rows = []
    for role, node in [("chosen", tree.nodes[node_id])] + [("parent chain", tree.nodes[i]) for i in reversed(path[:-1])] \
            + [("alternative", n) for n in others]:
        s = node.score
        if s is None:
            continue
        nested = node.nested.to_dict() if node.nested is not None else None
        share = shares.get(node.id)
        rows.append([escape(role), _c(node.id), _c(node.spec.label(y, x)), escape(str(s.criteria.k)),
                     _html_p(s.lack_of_fit.p if s.lack_of_fit.testable else None),
                     escape(_n(aicc(node) - best, 4) if math.isfinite(aicc(node) - best) else "—"),
                     _test(nested) if nested else "—", escape(_n(share, 3)) if share is not None else "not computed"])
    return rows

def report_html(tree: RemedyTree, node_id: str, doc: dict[str, Any]) -> str:
    """The self-contained HTML report of one exported node (``doc`` is its spec document)."""
    from .sections import figures_section

    body = _answer(doc)
    body += ['<h2 class="page">Figures</h2>'] + figures_section(tree, node_id, doc)
    body += ['<h2 class="page">The search in one table</h2>',
             "<p>ΔAICc is against the lowest AICc in the tree; the nested test compares a node with its parent.</p>",
             _table(["role", "node", "model", "k", "lack-of-fit p", "ΔAICc", "nested test", "stability share"],
                    _search_rows(tree, node_id, doc), {3, 4, 5})]
    body += ['<h2>Cautions</h2><ul>', f"<li>{escape(doc['cautions']['post_search'])}</li>",
             f"<li>{escape(doc['cautions']['use'])}</li></ul>"]
    title = escape(f"bendwise report: {doc['node']['label']}")
    return ("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
            f"<title>{title}</title><style>{CSS}</style></head><body>\n" + "\n".join(body) + "\n</body></html>\n")

