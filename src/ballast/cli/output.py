"""Everything ballast shows a person: progress on stderr, results on stdout."""

from __future__ import annotations

import json
import sys
import time
from typing import Any

from ballast.core.records import metric_rows


class StderrProgress:
    """Progress lines on stderr; redraws in place on a terminal, throttled lines otherwise."""

    def __init__(self, quiet: bool = False) -> None:
        self.quiet = quiet
        self.tty = sys.stderr.isatty()
        self._last: dict[str, float] = {}
        self._start: dict[str, float] = {}

    def step(self, label: str, done: int, total: int) -> None:
        if self.quiet:
            return
        now = time.monotonic()
        self._start.setdefault(label, now)
        final = done >= total
        if not final and now - self._last.get(label, 0.0) < (0.2 if self.tty else 5.0):
            return
        self._last[label] = now
        elapsed = now - self._start[label]
        rate = done / elapsed if elapsed > 0 else 0.0
        eta = f", ~{(total - done) / rate:.0f}s left" if rate > 0 and not final else ""
        msg = f"  {label}: {done}/{total} ({elapsed:.0f}s{eta})"
        if self.tty:
            sys.stderr.write("\r\x1b[2K" + msg + ("\n" if final else ""))
        else:
            sys.stderr.write(msg + "\n")
        sys.stderr.flush()

    def info(self, message: str) -> None:
        if not self.quiet:
            sys.stderr.write(message + "\n")
            sys.stderr.flush()


def emit_json(obj: Any) -> None:
    sys.stdout.write(json.dumps(obj, indent=2, sort_keys=True, ensure_ascii=False) + "\n")


def _fmt_summary(summary: Any, depth: int = 0) -> str:
    """A stage summary on one line: ``key value``, a nested table in parentheses, long lists
    counted rather than listed."""
    if isinstance(summary, dict):
        parts = []
        for k, v in summary.items():
            if isinstance(v, list) and len(v) >= 8:
                v = f"{len(v)} items"
            text = _fmt_summary(v, depth + 1)
            parts.append(f"{k} ({text})" if isinstance(v, dict) else f"{k} {text}")
        return ", ".join(parts) or "-"
    if isinstance(summary, list):
        return "[" + ", ".join(_fmt_summary(v, depth + 1) for v in summary) + "]"
    return str(summary)


def stage_line(result: dict[str, Any]) -> str:
    if result.get("skipped"):
        refused = "refused" in result["summary"]
        state = "not run (gate failed)" if refused else "skipped (unchanged)"
        if refused:
            return f"{result['stage']:<9} {state}"
    else:
        state = f"done in {result['seconds']:.1f}s"
    return f"{result['stage']:<9} {state}: {_fmt_summary(result['summary'])}"


def _is_reference(model: str) -> bool:
    return model == "bm25" or model.endswith("+bm25")


def metrics_table(
    metrics: dict[str, Any], shown: list[str], gate: dict[str, Any] | None = None
) -> str:
    """Per split: what it holds and whether it is gated; each model's mean, and each model's
    difference from the baseline with its interval and randomization p-value; the lexical
    reference rows (BM25, hybrids) in one line of the primary metric."""
    from ballast.core.gate import split_explained

    lines = []
    base = metrics.get("baseline", "base")
    pct = f"{100 * metrics['confidence']:g}%"
    rules = {s["split"]: s.get("rule") for s in (gate or {}).get("splits", [])}
    for split, info in metrics["splits"].items():
        names = [n for n in info["models"] if not _is_reference(n)]
        refs = [n for n in info["models"] if _is_reference(n)]
        lines.append(f"split {split} ({info['n_queries']} queries)")
        lines.append(f"  {split_explained(split, rules.get(split))}")
        head = "".join(f" {n[:10]:>10}" for n in names)
        lines.append(f"  {'metric':<12}{head}   diff vs {base}, {pct} interval, p")
        for m in shown:
            if m not in info["models"][base]:
                continue
            means = "".join(f" {info['models'][n][m]['mean']:10.4f}" for n in names)
            tails = []
            for n in names:
                (r,) = metric_rows(info, [m], model=n, baseline=base)
                if r.compared:
                    label = f"{n}: " if len(names) > 2 else ""
                    tails.append(
                        f"{label}{r.diff:+.4f} [{r.ci_low:+.4f}, {r.ci_high:+.4f}] "
                        f"p={r.p_value:.4f}"
                    )
            lines.append(f"  {m:<12}{means}   {'; '.join(tails)}")
        if refs and shown and shown[0] in info["models"][refs[0]]:
            m = shown[0]
            vals = ", ".join(f"{n} {info['models'][n][m]['mean']:.4f}" for n in refs)
            lines.append(f"  reference, not gated ({m}): {vals}")
    return "\n".join(lines)


def gate_text(verdict: dict[str, Any]) -> str:
    lines = [f"gate: {verdict['summary']}"]
    evidence = verdict.get("evidence", "synthetic")
    lines.append(
        "  evidence: real questions"
        if evidence == "real"
        else "  evidence: synthetic queries only (from the training's own generators)"
    )
    for s in verdict["splits"]:
        rule = s.get("rule", "superiority")
        lines.append(
            f"  {'pass' if s['passed'] else 'FAIL'}  {s['split']} "
            f"({'must gain' if rule == 'superiority' else 'must not lose'}): {s['reason']}"
        )
    return "\n".join(lines)
