"""The report's Markdown twin of report.html (tables and words, no charts)."""

from __future__ import annotations

from ballast.core.records import metric_rows
from ballast.stages.report.charts import BASE, TUNED
from ballast.stages.report.content import (
    ReportInputs,
    _counts,
    _curves,
    _examples,
    _gate_words,
    _num,
    _passage_text,
    _primary,
    encoding_note,
    preflight_lines,
    provenance_lines,
    reference_notes,
    split_line,
)

_MD_ESCAPES = str.maketrans({c: "\\" + c for c in "\\<>&|`"})


def _md(text: str) -> str:
    """Text safe inside a Markdown table cell or paragraph: the characters that would start
    raw HTML, an entity, a cell or a code span are backslash-escaped (CommonMark: any ASCII
    punctuation may be), so a viewer shows them as written ("<=", "don't") and runs no HTML."""
    return " ".join(str(text).split()).translate(_MD_ESCAPES)


def render_markdown(inp: ReportInputs) -> str:
    metrics = inp.metrics
    names = [m for m in metrics.get("metrics", []) if isinstance(m, str)]
    primary = _primary(inp)
    pct = f"{100 * float(metrics.get('confidence', 0.95)):g}%"
    words = _gate_words(inp.gate)
    out = [f"# ballast report: {_md(inp.name)}", "", f"**{_md(words[0])}**", ""]
    out += [f"- {_md(w)}" for w in words[1:]]
    out += [""] + [f"_{_md(n)}_" for n in inp.notes]
    backing = provenance_lines(inp)
    if backing:
        out += ["", "## The real questions behind the verdict", ""]
        out += [f"- {_md(b)}" for b in backing]
    checks = preflight_lines(inp.check)
    if checks:
        out += ["", "## Could the gate see a gain? (pre-flight)", ""]
        out += [f"- {_md(c)}" for c in checks]
    lexical = reference_notes(metrics, primary)
    if lexical:
        out += ["", "## The lexical reference (never gated)", ""]
        out += [f"- {_md(n)}" for n in lexical]
    out += ["", f"Charts are in report.html beside this file.{_md(encoding_note(metrics))}", "",
            "## Base and tuned, per split"]  # fmt: skip
    for s, info in metrics.get("splits", {}).items():
        out += [
            "",
            f"### Split {_md(s)} ({info.get('n_queries', 0)} queries)",
            "",
            f"_{_md(split_line(s, inp.gate))}_",
            "",
            f"| metric | base | tuned | difference | {pct} interval | p | better/worse/tied |",
            "|---|---:|---:|---:|---:|---:|---:|",
        ]
        for r in metric_rows(info, names, model=TUNED, baseline=BASE):
            ci = f"[{_num(r.ci_low, '+.4f')}, {_num(r.ci_high, '+.4f')}]"
            wlt = f"{r.wins}/{r.losses}/{r.ties}" if r.compared else "–"
            out.append(
                f"| {_md(r.metric)} | {_num(r.base)} | {_num(r.tuned)} | {_num(r.diff, '+.4f')} | "
                f"{ci if r.compared else '–'} | {_num(r.p_value)} | {wlt} |"
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
