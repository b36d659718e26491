"""The run report: one self-contained HTML page (inline SVG, no scripts, no external assets);
its Markdown twin is markdown.py, what both say is content.py. Pure: everything comes in as
data and goes out as strings.

Every piece of text that comes from documents, queries or files is escaped with
``html.escape``; the page also carries a Content-Security-Policy that allows no script at all.
"""

from __future__ import annotations

import math
from typing import Any

from ballast import __version__
from ballast.core.records import metric_rows
from ballast.stages.report.charts import (
    BASE,
    COLOURS,
    TUNED,
    E,
    bars_svg,
    diffs_svg,
    forest_svg,
    lines_svg,
)
from ballast.stages.report.content import (
    REFERENCES,
    SHOWN,
    TOP_PASSAGES,
    Example,
    ReportInputs,
    _counts,
    _curves,
    _diffs,
    _examples,
    _gate_words,
    _num,
    _passage_text,
    _per_query_values,
    _primary,
    _split_names,
    encoding_note,
    mean_interval,
    preflight_lines,
    provenance_lines,
    reference_notes,
    split_line,
)

# ---------------------------------------------------------------------------------------
# The facts the report shows, computed once and rendered twice (HTML and Markdown).


# ---------------------------------------------------------------------------------------
# SVG charts. Coordinates are rounded so the output is stable byte for byte.


# ---------------------------------------------------------------------------------------
# HTML

CSS = """
body{font:15px/1.45 system-ui,-apple-system,"Segoe UI",Roboto,sans-serif;color:#1a202c;
margin:0;background:#f7fafc}
main{max-width:1080px;margin:0 auto;padding:24px 28px 60px;background:#fff}
h1{font-size:26px;margin:0 0 4px}h2{font-size:20px;margin:32px 0 8px;border-bottom:1px solid
#e2e8f0;padding-bottom:4px}h3{font-size:16px;margin:20px 0 6px}
table{border-collapse:collapse;margin:8px 0 12px;font-size:13.5px}
th,td{border:1px solid #e2e8f0;padding:4px 8px;text-align:right;vertical-align:top}
th{background:#edf2f7}td.l,th.l{text-align:left}
.verdict{padding:12px 16px;border-radius:6px;font-weight:600;font-size:17px}
.pass{background:#e6f4ea;border:1px solid #2f855a}.fail{background:#fdecea;border:1px solid
#c53030}.muted{color:#4a5568}.charts{display:flex;flex-wrap:wrap;gap:18px;align-items:flex-start}
figure{margin:0}figcaption{font-size:13px;color:#4a5568}
svg .tick{font-size:11px;fill:#4a5568}svg .lab{font-size:12px;fill:#1a202c}
.ex{border:1px solid #e2e8f0;border-radius:6px;padding:8px 12px;margin:10px 0}
.ex .q{font-weight:600}.cols{display:flex;gap:14px}.cols>div{flex:1;min-width:0}
ol.top{padding-left:22px;margin:4px 0}ol.top li{margin:4px 0;font-size:13.5px}
.rel{background:#e6f4ea}.pid{font-family:ui-monospace,monospace;font-size:12px;color:#4a5568}
"""

DASHED = ("base nDCG", "tuned nDCG")
CSP = "default-src 'none'; style-src 'unsafe-inline'; img-src data:"



def _code(text: str) -> str:
    """Escaped text with its `code spans` set as <code> (a command the reader may type)."""
    import re

    return re.sub(r"`([^`]+)`", r"<code>\1</code>", E(text))

def _metric_table(info: dict[str, Any], metrics: list[str], pct: str) -> str:
    rows = [
        "<table><tr><th class=l>metric</th><th>base</th><th>tuned</th><th>difference</th>"
        f"<th>{E(pct)} interval</th><th>p (randomization)</th><th>better / worse / tied</th></tr>"
    ]
    for r in metric_rows(info, metrics, model=TUNED, baseline=BASE):
        ci = f"[{_num(r.ci_low, '+.4f')}, {_num(r.ci_high, '+.4f')}]" if r.compared else "–"
        wlt = f"{r.wins} / {r.losses} / {r.ties}" if r.compared else "–"
        rows.append(
            f"<tr><td class=l>{E(r.metric)}</td><td>{_num(r.base)}</td><td>{_num(r.tuned)}</td>"
            f"<td>{_num(r.diff, '+.4f')}</td><td>{ci}</td>"
            f"<td>{_num(r.p_value)}</td><td>{wlt}</td></tr>"
        )
    rows.append("</table>")
    return "".join(rows)


def _example_html(inp: ReportInputs, ex: Example, metric: str) -> str:
    parts = [
        f'<div class="ex"><div class="q">{E(ex.text)}</div>'
        f'<div class="muted">query <span class="pid">{E(ex.query_id)}</span>'
        f"{' (' + E(ex.origin) + ')' if ex.origin else ''}: {E(metric)} base "
        f"{ex.base_value:.4f} → tuned {ex.tuned_value:.4f} ({ex.diff:+.4f})</div>"
    ]
    if ex.relevant:
        rel = ex.relevant[0]
        parts.append(
            f'<div class="muted">relevant passage <span class="pid">{E(rel)}</span>'
            f"{' and ' + str(len(ex.relevant) - 1) + ' more' if len(ex.relevant) > 1 else ''}"
            f": {E(_passage_text(inp, rel))}</div>"
        )
    parts.append('<div class="cols">')
    for model in (BASE, TUNED):
        parts.append(f"<div><b>{E(model)}</b> top {TOP_PASSAGES}<ol class=top>")
        for rank, pid, score, relevant in ex.top.get(model, []):
            cls = ' class="rel"' if relevant else ""
            mark = " ✓ relevant" if relevant else ""
            parts.append(
                f'<li{cls} value="{rank}"><span class="pid">{E(pid)} · {score:.3f}{mark}</span>'
                f"<br>{E(_passage_text(inp, pid))}</li>"
            )
        parts.append("</ol></div>")
    parts.append("</div></div>")
    return "".join(parts)


def render_html(inp: ReportInputs) -> str:
    metrics = inp.metrics
    names = [m for m in metrics.get("metrics", []) if isinstance(m, str)]
    shown = [m for m in SHOWN if m in names] or names[:3]
    primary = _primary(inp)
    conf = float(metrics.get("confidence", 0.95))
    pct = f"{100 * conf:g}%"
    seed = int(metrics.get("seed", 0))
    gate = inp.gate
    passed = bool(gate and gate.get("passed"))
    out = [
        "<!DOCTYPE html><html lang=en><head><meta charset=utf-8>",
        f'<meta http-equiv="Content-Security-Policy" content="{CSP}">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>ballast report: {E(inp.name)}</title><style>{CSS}</style></head><body><main>",
        f"<h1>ballast report: {E(inp.name)}</h1>",
        f'<p class="muted">Base model against the tuned model on every evaluation split. '
        f"Intervals are {E(pct)} paired bootstrap intervals; p-values are paired randomization "
        f"tests.{E(encoding_note(metrics))} Made by ballast {E(__version__)}.</p>",
        "<h2>Verdict</h2>",
    ]
    words = _gate_words(gate)
    out.append(f'<div class="verdict {"pass" if passed else "fail"}">{_code(words[0])}</div>')
    out.append("<ul>" + "".join(f"<li>{_code(w)}</li>" for w in words[1:]) + "</ul>")
    for note in inp.notes:
        out.append(f'<p class="muted">{E(note)}</p>')
    backing = provenance_lines(inp)
    if backing:
        out.append("<h3>The real questions behind the verdict</h3>")
        out.append("<ul>" + "".join(f"<li>{E(b)}</li>" for b in backing) + "</ul>")
    checks = preflight_lines(inp.check)
    if checks:
        out.append("<h3>Could the gate see a gain? (pre-flight)</h3>")
        out.append("<ul>" + "".join(f"<li>{E(c)}</li>" for c in checks) + "</ul>")
    lexical = reference_notes(metrics, primary)
    if lexical:
        out.append("<h3>The lexical reference</h3>")
        out.append(
            "<ul>" + "".join(f"<li>{E(n)}</li>" for n in lexical) + "</ul>"
            '<p class="muted">BM25 and the hybrids (each model fused with BM25 by reciprocal rank '
            "fusion) are reference rows, never gated. Where they win on real questions, "
            "consider a hybrid index; where they win only on synthetic queries, those queries "
            "copy the documents' words (inverse-cloze and keyword queries do).</p>"
        )

    splits = _split_names(inp)
    out.append("<h3>The splits</h3><table><tr><th class=l>split</th><th>queries</th>"
               "<th class=l>what it holds, and how the gate used it</th></tr>")  # fmt: skip
    for s in splits:
        n = metrics["splits"][s].get("n_queries", 0)
        out.append(f"<tr><td class=l>{E(s)}</td><td>{n}</td>"
                   f"<td class=l>{E(split_line(s, gate))}</td></tr>")  # fmt: skip
    out.append("</table>")
    out.append("<h2>Base and tuned, per split</h2>")
    groups, forest = [], []
    for s in splits:
        info = metrics["splits"][s]
        items = []
        for model in (BASE, TUNED):
            vals = list(_per_query_values(inp, s, model, primary).values())
            mean = info["models"].get(model, {}).get(primary, {}).get("mean", 0.0)
            lo, hi = mean_interval(vals, seed=seed, confidence=conf)
            items.append((model, float(mean), lo, hi))
        groups.append((f"{s}\n{info.get('n_queries', 0)} queries", items))
        c = info.get("comparisons", {}).get(f"{TUNED}_vs_{BASE}", {})
        for m in shown:
            if m in c:
                forest.append((f"{s} {m}", c[m]["mean_diff"], c[m]["ci_low"], c[m]["ci_high"],
                               c[m].get("p_value", 1.0)))  # fmt: skip
    out.append('<div class="charts">')
    out.append(
        f"<figure>{bars_svg(groups, f'{primary} per split')}<figcaption>{E(primary)} per split: "
        f"each model's mean with its {E(pct)} bootstrap interval"
        "</figcaption></figure>"
    )
    alpha = float((inp.gate or {}).get("alpha", 0.05))
    if forest:
        out.append(
            f"<figure>{forest_svg(forest, 'tuned minus base', alpha)}<figcaption>tuned minus "
            f"base, with the {E(pct)} paired interval; green (red): the interval lies above "
            f"(below) zero and the randomization test agrees, p &le; {alpha:g}; grey: no "
            "difference shown</figcaption>"
            "</figure>"
        )
    out.append("</div>")
    for s in splits:
        info = metrics["splits"][s]
        origins = ", ".join(f"{E(o)} {n}" for o, n in sorted(info.get("origins", {}).items()))
        out.append(f"<h3>Split {E(s)}: {info.get('n_queries', 0)} queries ({origins})</h3>")
        out.append(f'<p class="muted">{E(split_line(s, gate))}</p>')
        out.append(_metric_table(info, names, pct))
        refs = [r for r in REFERENCES if r in info.get("models", {})]
        if refs:
            cells = "".join(
                f"<td>{_num(info['models'][r].get(primary, {}).get('mean'))}</td>" for r in refs
            )
            out.append(
                "<table><tr><th class=l>reference (not gated)</th>"
                + "".join(f"<th>{E(r)}</th>" for r in refs)
                + f"</tr><tr><td class=l>{E(primary)}</td>{cells}</tr></table>"
            )

    out.append("<h2>Metric against the cutoff k</h2>")
    out.append(
        '<p class="muted">Recomputed from the stored TREC run files and qrels (no re-encoding): '
        "recall@k and nDCG@k for k = 1 to the depth of the run.</p><div class=charts>"
    )
    curves = {s: cv for s in splits if (cv := _curves(inp, s)) is not None}
    any_curve = bool(curves)
    # one y range for every panel, so panels compare at a glance
    low = min((v for cv in curves.values() for m in (BASE, TUNED) for key in ("recall", "ndcg")
               for v in cv[m][key]), default=0.0)  # fmt: skip
    y_range = (max(0.0, math.floor(low * 10) / 10), 1.0)
    for s, cv in curves.items():
        ks = [float(k) for k in range(1, len(cv[BASE]["recall"]) + 1)]
        title = f"{s}: recall and nDCG against k"
        series = [
            ("base recall", COLOURS[BASE], ks, cv[BASE]["recall"]),
            ("tuned recall", COLOURS[TUNED], ks, cv[TUNED]["recall"]),
            ("base nDCG", COLOURS[BASE], ks, cv[BASE]["ndcg"]),
            ("tuned nDCG", COLOURS[TUNED], ks, cv[TUNED]["ndcg"]),
        ]
        out.append(
            f"<figure>{lines_svg(series, title, 'k', y_range=y_range, dashed=DASHED)}"
            f"<figcaption>split {E(s)}: recall@k (solid), nDCG@k (dashed)</figcaption></figure>"
        )
    if not any_curve:
        out.append('<p class="muted">No run files or qrels found for any split.</p>')
    out.append("</div>")

    out.append("<h2>Data: synthesis, filtering and mining</h2>")
    counts = _counts(inp)
    if not counts:
        out.append('<p class="muted">No stage summaries found.</p>')
    out.append("<div class=charts>")
    for stage, rows in counts:
        out.append(f"<div><h3>{E(stage)}</h3><table>")
        out.extend(f"<tr><td class=l>{E(k)}</td><td>{E(v)}</td></tr>" for k, v in rows)
        out.append("</table></div>")
    out.append("</div>")

    out.append(f"<h2>Per query: wins and losses on {E(primary)}</h2><div class=charts>")
    for s in splits:
        d = [x for _, x in _diffs(inp, s, primary)]
        if d:
            out.append(
                f"<figure>{diffs_svg(d, f'{s}: per-query difference')}<figcaption>split {E(s)}: "
                "each query's tuned minus base, sorted</figcaption></figure>"
            )
    out.append("</div>")
    for s in splits:  # collapsed: the page stays short, a click opens a split's examples
        losses, wins = _examples(inp, s, primary)
        out.append(f"<details><summary>Split {E(s)}: {len(losses)} worst regressions, "
                   f"{len(wins)} best wins</summary>")  # fmt: skip
        out.append(f"<h3>Split {E(s)}: worst regressions</h3>")
        out.append(
            "".join(_example_html(inp, e, primary) for e in losses)
            or '<p class="muted">No query got worse.</p>'
        )
        out.append(f"<h3>Split {E(s)}: best wins</h3>")
        out.append(
            "".join(_example_html(inp, e, primary) for e in wins)
            or '<p class="muted">No query got better.</p>'
        )
        out.append("</details>")

    out.append("<h2>Training loss</h2>")
    hist = (inp.train or {}).get("loss_history") or []
    pts = [(float(h["step"]), float(h["loss"])) for h in hist if "step" in h and "loss" in h]
    if pts:
        out.append(
            "<figure>"
            + lines_svg(
                [("loss", COLOURS[TUNED], [x for x, _ in pts], [y for _, y in pts])],
                "training loss",
                "step",
            )
            + f"<figcaption>training loss per logged step ({len(pts)} points)</figcaption>"
            "</figure>"
        )
    else:
        out.append('<p class="muted">No loss history (train.json) found.</p>')
    out.append("</main></body></html>\n")
    return _with_navigation(out)


def _with_navigation(out: list[str]) -> str:
    """Each section heading gets an id, and a line of links to them goes under the title."""
    import re

    links, n = [], 0
    for i, part in enumerate(out):
        m = re.fullmatch(r"<h2>(.*?)</h2>(.*)", part, re.S)
        if m:
            n += 1
            out[i] = f'<h2 id="s{n}">{m.group(1)}</h2>{m.group(2)}'
            links.append(f'<a href="#s{n}">{m.group(1)}</a>')
    nav = '<nav class="muted">' + " · ".join(links) + "</nav>"
    first = next(i for i, part in enumerate(out) if part.startswith("<h1>"))
    out.insert(first + 1, nav)
    return "\n".join(out)


# ---------------------------------------------------------------------------------------
# Markdown


