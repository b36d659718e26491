"""The run report: one self-contained HTML page (inline SVG, no scripts, no external assets)
and a Markdown twin. Pure: everything comes in as data and goes out as strings.

Every piece of text that comes from documents, queries or files is escaped with
``html.escape``; the page also carries a Content-Security-Policy that allows no script at all.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from ballast import __version__
from ballast.core.metrics import ndcg_at_k, recall_at_k
from ballast.core.stats import paired_bootstrap_ci
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

SHOWN = ("ndcg@10", "mrr@10", "recall@10")
EXAMPLES = 5  # worst regressions and best wins shown per split
TOP_PASSAGES = 3  # passages shown per model for each example
SNIPPET = 320  # characters of passage text shown

# A ranking: query id -> [(passage id, score), ...] best first.
Ranking = dict[str, list[tuple[str, float]]]


@dataclass(frozen=True)
class ReportInputs:
    """What the report reads from a run folder, already parsed."""

    name: str
    metrics: dict[str, Any]  # metrics.json
    gate: dict[str, Any] | None  # gate.json
    per_query: list[dict[str, Any]]  # per_query.csv rows; metric columns as floats
    runs: dict[str, dict[str, Ranking]]  # model -> split -> ranking (TREC run files)
    qrels: dict[str, dict[str, dict[str, int]]]  # split -> query id -> {passage id: grade}
    queries: dict[str, dict[str, Any]]  # query id -> {"text", "origin", ...}
    passages: dict[str, dict[str, Any]]  # passage id -> {"text", "doc_id", "title"?}
    stages: dict[str, dict[str, Any]] = field(default_factory=dict)  # stage -> done summary
    train: dict[str, Any] | None = None  # train.json
    notes: tuple[str, ...] = ()


def parse_run(text: str) -> Ranking:
    """A TREC run file (``qid Q0 docid rank score tag``) as rankings sorted by rank."""
    rows: dict[str, list[tuple[int, str, float]]] = {}
    for line in text.splitlines():
        parts = line.split()
        if len(parts) < 6:
            continue
        q, _, d, r, s = parts[:5]
        rows.setdefault(q, []).append((int(r), d, float(s)))
    return {q: [(d, s) for _, d, s in sorted(v)] for q, v in rows.items()}


def k_curves(
    ranking: Ranking, qrels: Mapping[str, Mapping[str, int]], qids: Sequence[str], max_k: int
) -> dict[str, list[float]]:
    """Mean recall@k and nDCG@k for k = 1..max_k, from a stored ranking (no re-encoding)."""
    ranked = [[d for d, _ in ranking.get(q, [])] for q in qids]
    rels = [qrels.get(q, {}) for q in qids]
    out: dict[str, list[float]] = {"recall": [], "ndcg": []}
    for k in range(1, max_k + 1):
        out["recall"].append(float(np.mean(recall_at_k(ranked, rels, k))) if qids else 0.0)
        out["ndcg"].append(float(np.mean(ndcg_at_k(ranked, rels, k))) if qids else 0.0)
    return out


def mean_interval(
    values: Sequence[float], *, seed: int, confidence: float, resamples: int = 2000
) -> tuple[float, float]:
    """Percentile bootstrap interval of one model's mean (queries resampled)."""
    arr = np.asarray(values, dtype=np.float64)
    if arr.size < 2:
        m = float(arr.mean()) if arr.size else 0.0
        return m, m
    return paired_bootstrap_ci(
        arr, rng=np.random.default_rng(seed), n_resamples=resamples, confidence=confidence
    )


# ---------------------------------------------------------------------------------------
# The facts the report shows, computed once and rendered twice (HTML and Markdown).


def _split_names(inp: ReportInputs) -> list[str]:
    return list(inp.metrics.get("splits", {}))


def _primary(inp: ReportInputs) -> str:
    if inp.gate and inp.gate.get("primary_metric"):
        return str(inp.gate["primary_metric"])
    ms = inp.metrics.get("metrics", [])
    return "ndcg@10" if "ndcg@10" in ms else (ms[0] if ms else "ndcg@10")


def _per_query_values(inp: ReportInputs, split: str, model: str, metric: str) -> dict[str, float]:
    return {
        r["query_id"]: float(r[metric])
        for r in inp.per_query
        if r["split"] == split and r["model"] == model and metric in r
    }


def _diffs(inp: ReportInputs, split: str, metric: str) -> list[tuple[str, float]]:
    base = _per_query_values(inp, split, BASE, metric)
    tuned = _per_query_values(inp, split, TUNED, metric)
    return sorted(((q, tuned[q] - base[q]) for q in base if q in tuned), key=lambda x: (x[1], x[0]))


def _gate_words(gate: dict[str, Any] | None) -> list[str]:
    """The verdict as sentences a person reads."""
    if gate is None:
        return ["The gate has not run yet, so nothing has been decided."]
    m = gate.get("primary_metric", "the primary metric")
    lines = [
        (
            "The tuned model passed the release gate: it may be exported and indexed."
            if gate["passed"]
            else "The tuned model did NOT pass the release gate: it is not released "
            "(`ballast export --force` overrides this, and the manifest records it)."
        ),
        f"Rule: on every gated split the tuned model must gain on {m} by at least "
        f"{gate.get('min_gain', 0):+.4f}, with the whole interval of the gain above zero "
        f"and the randomization test significant after Holm correction.",
    ]
    for s in gate.get("splits", []):
        verdict = "passed" if s.get("passed") else "failed"
        lines.append(f"Split {s['split']} {verdict}: {s.get('reason', '')}")
    return lines


def _flatten(prefix: str, obj: Any) -> list[tuple[str, str]]:
    """Nested summary dicts as ("a.b", "value") rows, keys sorted."""
    if isinstance(obj, dict):
        rows = []
        for k in sorted(obj):
            sub = f"{prefix}{k}." if isinstance(obj[k], dict) else f"{prefix}{k}"
            rows += _flatten(sub, obj[k])
        return rows
    if isinstance(obj, list):
        return [(prefix, ", ".join(str(x) for x in obj) or "none")]
    return [(prefix, "none" if obj is None else str(obj))]


def _counts(inp: ReportInputs) -> list[tuple[str, list[tuple[str, str]]]]:
    """Synthesis, filtering and mining counts, flattened from the stages' summaries."""
    out = []
    for stage in ("ingest", "synth", "split", "mine", "train"):
        summary = inp.stages.get(stage)
        if summary:
            rows = _flatten("", {k: v for k, v in summary.items() if k != "loss_history"})
            out.append((stage, rows))
    return out


@dataclass(frozen=True)
class Example:
    query_id: str
    text: str
    origin: str
    diff: float
    base_value: float
    tuned_value: float
    relevant: list[str]
    top: dict[str, list[tuple[int, str, float, bool]]]  # model -> (rank, pid, score, relevant)


def _examples(inp: ReportInputs, split: str, metric: str) -> tuple[list[Example], list[Example]]:
    diffs = _diffs(inp, split, metric)
    base = _per_query_values(inp, split, BASE, metric)
    tuned = _per_query_values(inp, split, TUNED, metric)
    rels = inp.qrels.get(split, {})

    def make(q: str, d: float) -> Example:
        qrow = inp.queries.get(q, {})
        relevant = sorted(p for p, g in rels.get(q, {}).items() if g > 0)
        top = {}
        for model in (BASE, TUNED):
            ranking = inp.runs.get(model, {}).get(split, {}).get(q, [])
            top[model] = [
                (i + 1, pid, s, pid in relevant)
                for i, (pid, s) in enumerate(ranking[:TOP_PASSAGES])
            ]
        return Example(
            q,
            str(qrow.get("text", "(query text not found)")),
            str(qrow.get("origin", "")),
            d,
            base.get(q, 0.0),
            tuned.get(q, 0.0),
            relevant,
            top,
        )

    losses = [make(q, d) for q, d in diffs if d < 0][:EXAMPLES]
    wins = [make(q, d) for q, d in reversed(diffs) if d > 0][:EXAMPLES]
    return losses, wins


def _passage_text(inp: ReportInputs, pid: str) -> str:
    p = inp.passages.get(pid)
    if p is None:
        return "(passage text not found)"
    text = " ".join(str(p.get("text", "")).split())
    return text if len(text) <= SNIPPET else text[: SNIPPET - 1].rstrip() + "…"


def _max_k(inp: ReportInputs) -> int:
    ks = [len(r) for m in inp.runs.values() for s in m.values() for r in s.values()]
    return max(ks) if ks else 0


def _curves(inp: ReportInputs, split: str) -> dict[str, dict[str, list[float]]] | None:
    qrels = inp.qrels.get(split)
    max_k = _max_k(inp)
    if not qrels or max_k == 0:
        return None
    out = {}
    for model in (BASE, TUNED):
        ranking = inp.runs.get(model, {}).get(split)
        if ranking is None:
            return None
        qids = sorted(q for q in ranking if q in qrels)
        out[model] = k_curves(ranking, qrels, qids, max_k)
    return out


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


def _num(x: Any, fmt: str = ".4f") -> str:
    if x is None or (isinstance(x, float) and not math.isfinite(x)):
        return "–"
    return format(x, fmt)


def _metric_table(info: dict[str, Any], metrics: list[str], pct: str) -> str:
    comp = info.get("comparisons", {}).get(f"{TUNED}_vs_{BASE}", {})
    rows = [
        "<table><tr><th class=l>metric</th><th>base</th><th>tuned</th><th>difference</th>"
        f"<th>{E(pct)} interval</th><th>p (randomization)</th><th>better / worse / tied</th></tr>"
    ]
    for m in metrics:
        b = info["models"].get(BASE, {}).get(m, {}).get("mean")
        t = info["models"].get(TUNED, {}).get(m, {}).get("mean")
        c = comp.get(m, {})
        ci = f"[{_num(c.get('ci_low'), '+.4f')}, {_num(c.get('ci_high'), '+.4f')}]" if c else "–"
        wlt = f"{c['wins']} / {c['losses']} / {c['ties']}" if c else "–"
        rows.append(
            f"<tr><td class=l>{E(m)}</td><td>{_num(b)}</td><td>{_num(t)}</td>"
            f"<td>{_num(c.get('mean_diff'), '+.4f')}</td><td>{ci}</td>"
            f"<td>{_num(c.get('p_value'))}</td><td>{wlt}</td></tr>"
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
        f"tests. Made by ballast {E(__version__)}.</p>",
        "<h2>Verdict</h2>",
    ]
    words = _gate_words(gate)
    out.append(f'<div class="verdict {"pass" if passed else "fail"}">{E(words[0])}</div>')
    out.append("<ul>" + "".join(f"<li>{E(w)}</li>" for w in words[1:]) + "</ul>")
    for note in inp.notes:
        out.append(f'<p class="muted">{E(note)}</p>')

    splits = _split_names(inp)
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
                forest.append((f"{s} {m}", c[m]["mean_diff"], c[m]["ci_low"], c[m]["ci_high"]))
    out.append('<div class="charts">')
    out.append(
        f"<figure>{bars_svg(groups, f'{primary} per split')}<figcaption>{E(primary)} per split: "
        f"each model's mean with its {E(pct)} bootstrap interval"
        "</figcaption></figure>"
    )
    if forest:
        out.append(
            f"<figure>{forest_svg(forest, 'tuned minus base')}<figcaption>tuned minus base, with "
            f"the {E(pct)} paired interval; green: the interval lies above zero</figcaption>"
            "</figure>"
        )
    out.append("</div>")
    for s in splits:
        info = metrics["splits"][s]
        origins = ", ".join(f"{E(o)} {n}" for o, n in sorted(info.get("origins", {}).items()))
        out.append(f"<h3>Split {E(s)}: {info.get('n_queries', 0)} queries ({origins})</h3>")
        out.append(_metric_table(info, names, pct))

    out.append("<h2>Metric against the cutoff k</h2>")
    out.append(
        '<p class="muted">Recomputed from the stored TREC run files and qrels (no re-encoding): '
        "recall@k and nDCG@k for k = 1 to the depth of the run.</p><div class=charts>"
    )
    any_curve = False
    for s in splits:
        cv = _curves(inp, s)
        if cv is None:
            continue
        any_curve = True
        ks = [float(k) for k in range(1, len(cv[BASE]["recall"]) + 1)]
        low = min(v for m in (BASE, TUNED) for key in ("recall", "ndcg") for v in cv[m][key])
        y_range = (max(0.0, math.floor(low * 10) / 10), 1.0)
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

    out.append(f"<h2>Per query: wins and losses on {E(primary)}</h2><div class=charts>")
    for s in splits:
        d = [x for _, x in _diffs(inp, s, primary)]
        if d:
            out.append(
                f"<figure>{diffs_svg(d, f'{s}: per-query difference')}<figcaption>split {E(s)}: "
                "each query's tuned minus base, sorted</figcaption></figure>"
            )
    out.append("</div>")
    for s in splits:
        losses, wins = _examples(inp, s, primary)
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
    return "\n".join(out)


# ---------------------------------------------------------------------------------------
# Markdown


def _md(text: str) -> str:
    """Text safe inside a Markdown table cell or paragraph: HTML escaped, pipes escaped."""
    return E(" ".join(str(text).split())).replace("|", "\\|")


def render_markdown(inp: ReportInputs) -> str:
    metrics = inp.metrics
    names = [m for m in metrics.get("metrics", []) if isinstance(m, str)]
    primary = _primary(inp)
    pct = f"{100 * float(metrics.get('confidence', 0.95)):g}%"
    words = _gate_words(inp.gate)
    out = [f"# ballast report: {_md(inp.name)}", "", f"**{_md(words[0])}**", ""]
    out += [f"- {_md(w)}" for w in words[1:]]
    out += [""] + [f"_{_md(n)}_" for n in inp.notes]
    out += ["", "Charts are in report.html beside this file.", "", "## Base and tuned, per split"]
    for s, info in metrics.get("splits", {}).items():
        comp = info.get("comparisons", {}).get(f"{TUNED}_vs_{BASE}", {})
        out += [
            "",
            f"### Split {_md(s)} ({info.get('n_queries', 0)} queries)",
            "",
            f"| metric | base | tuned | difference | {pct} interval | p | better/worse/tied |",
            "|---|---:|---:|---:|---:|---:|---:|",
        ]
        for m in names:
            b = info["models"].get(BASE, {}).get(m, {}).get("mean")
            t = info["models"].get(TUNED, {}).get(m, {}).get("mean")
            c = comp.get(m, {})
            ci = f"[{_num(c.get('ci_low'), '+.4f')}, {_num(c.get('ci_high'), '+.4f')}]"
            wlt = f"{c['wins']}/{c['losses']}/{c['ties']}" if c else "–"
            out.append(
                f"| {_md(m)} | {_num(b)} | {_num(t)} | {_num(c.get('mean_diff'), '+.4f')} | "
                f"{ci if c else '–'} | {_num(c.get('p_value'))} | {wlt} |"
            )
        cv = _curves(inp, s)
        if cv is not None:
            ks = range(1, len(cv[BASE]["recall"]) + 1)
            out += ["", "| k | " + " | ".join(str(k) for k in ks) + " |"]
            out.append("|---|" + "---:|" * len(ks))
            for model in (BASE, TUNED):
                for key in ("recall", "ndcg"):
                    vals = " | ".join(f"{v:.3f}" for v in cv[model][key])
                    out.append(f"| {model} {key}@k | {vals} |")
        losses, wins = _examples(inp, s, primary)
        for title, exs in (("Worst regressions", losses), ("Best wins", wins)):
            out += ["", f"#### {title} ({_md(primary)})", ""]
            if not exs:
                out.append("None.")
            for e in exs:
                out.append(
                    f"- **{_md(e.text)}** (`{_md(e.query_id)}`): {e.base_value:.4f} → "
                    f"{e.tuned_value:.4f} ({e.diff:+.4f})"
                )
                for model in (BASE, TUNED):
                    for rank, pid, _, relevant in e.top.get(model, []):
                        mark = " ✓" if relevant else ""
                        out.append(
                            f"  - {model} #{rank}{mark} `{_md(pid)}`: "
                            f"{_md(_passage_text(inp, pid))}"
                        )
    out += ["", "## Data: synthesis, filtering and mining"]
    for stage, rows in _counts(inp):
        out += ["", f"### {_md(stage)}", "", "| count | value |", "|---|---:|"]
        out += [f"| {_md(k)} | {_md(v)} |" for k, v in rows]
    hist = (inp.train or {}).get("loss_history") or []
    if hist:
        first, last = hist[0], hist[-1]
        out += [
            "",
            "## Training loss",
            "",
            f"{len(hist)} logged steps; loss {float(first['loss']):.4f} at step {first['step']}, "
            f"{float(last['loss']):.4f} at step {last['step']}.",
        ]
    return "\n".join(out) + "\n"


def summary_facts(inp: ReportInputs) -> dict[str, Any]:
    """A few numbers for the stage summary (what `ballast report --json` prints)."""
    primary = _primary(inp)
    out: dict[str, Any] = {"primary_metric": primary, "better_worse_tied": {}}
    for s in _split_names(inp):
        d = [x for _, x in _diffs(inp, s, primary)]
        out["better_worse_tied"][s] = (
            f"{sum(x > 0 for x in d)}/{sum(x < 0 for x in d)}/{sum(x == 0 for x in d)}"
        )
    out["gate_passed"] = None if inp.gate is None else bool(inp.gate.get("passed"))
    return out
