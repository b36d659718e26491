"""What the report says, as data: its inputs, the examples of queries that gained and lost, the
metric-vs-k curves recomputed from the run files, the verdict in words, the data counts. Pure;
page.py renders it as HTML and markdown.py as Markdown."""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from ballast.core.metrics import ndcg_at_k, recall_at_k
from ballast.core.stats import paired_bootstrap_ci
from ballast.stages.base import without_timings
from ballast.stages.report.charts import BASE, TUNED

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
    check: dict[str, Any] | None = None  # check.json (the pre-flight)
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
    real = gate.get("evidence") == "real"
    if not gate["passed"]:
        head = (
            "The tuned model did NOT pass the release gate: it is not released "
            "(`ballast export --force` overrides this, and the manifest records it)."
        )
    elif real:
        head = "The tuned model passed the release gate on real questions: it may be exported."
    else:
        head = (
            "The tuned model passed on synthetic queries only: no real question checked it. "
            "These queries come from the generators the training used, so they are no "
            "independent judge; add real questions (synth.questions) before trusting it."
        )
    lines = [
        head,
        "Evidence: "
        + (
            "real questions (written by people, never trained on)."
            if real
            else "synthetic queries only."
        ),
        f"Rules: on a 'must gain' split the tuned model must gain on {m} by at least "
        f"{gate.get('min_gain', 0):+.4f}, with the whole interval of the gain above zero and the "
        "randomization test significant after Holm correction; on a 'must not lose' split the "
        "interval's lower end must stay above the allowed loss.",
    ]
    for s in gate.get("splits", []):
        verdict = "passed" if s.get("passed") else "failed"
        lines.append(f"Split {s['split']} {verdict}: {s.get('reason', '')}")
    return lines


def split_line(split: str, gate: dict[str, Any] | None) -> str:
    """One line: what a split holds and whether (and how) it is gated."""
    from ballast.core.gate import split_explained

    rules = {s["split"]: s.get("rule") for s in (gate or {}).get("splits", [])}
    return split_explained(split, rules.get(split)) + "."


REFERENCES = ("bm25", "base+bm25", "tuned+bm25")


def encoding_note(metrics: dict[str, Any]) -> str:
    """A sentence on the precision the embeddings were computed in (metrics.json "encoding");
    empty for float32 or when not recorded."""
    encoding = metrics.get("encoding")
    if encoding == "onnx-float32":
        return (" Embeddings computed with the models' ONNX graphs (evaluate.backend = onnx),"
                " within 1e-5 of PyTorch.")  # fmt: skip
    if encoding == "onnx-int8":
        from ballast.models.encode import INT8_CAUTION

        return f" Caution: {INT8_CAUTION}."
    if encoding != "bfloat16":
        return ""
    return (" Embeddings computed in bfloat16 (evaluate.bf16), base and tuned alike: on splits"
            " of 300 queries or more, means within 0.003 and gains within 0.0015 of float32;"
            " small splits move more, about 1/n (docs/scale.md).")  # fmt: skip


def reference_notes(metrics: dict[str, Any], primary: str) -> list[str]:
    """Where the lexical reference beats the tuned model, said plainly (for jargon and codes a
    retrieval engineer needs to know; never gated)."""
    out = []
    for split, info in metrics.get("splits", {}).items():
        models = info.get("models", {})
        tuned = models.get(TUNED, {}).get(primary, {}).get("mean")
        if tuned is None:
            continue
        for ref in REFERENCES:
            mean = models.get(ref, {}).get(primary, {}).get("mean")
            if mean is None or mean <= tuned:
                continue
            c = info.get("comparisons", {}).get(f"{TUNED}_vs_bm25", {}).get(primary)
            ci = (
                f" (tuned minus BM25 {c['mean_diff']:+.4f} [{c['ci_low']:+.4f}, "
                f"{c['ci_high']:+.4f}])"
                if ref == "bm25" and c
                else ""
            )
            out.append(
                f"On split {split}, {ref} scores {primary} {mean:.4f}, above the tuned model's "
                f"{tuned:.4f}{ci}."
            )
    return out


def provenance_lines(inp: ReportInputs) -> list[str]:
    """Per split of real questions: how many back it, who wrote them (the label they gave to
    `ballast write`) and when."""
    out = []
    for split in _split_names(inp):
        qids = list(inp.qrels.get(split, {}))
        real = [inp.queries[q] for q in qids if inp.queries.get(q, {}).get("origin") == "human"]
        if not real:
            continue
        authors: dict[str, int] = {}
        dates = []
        for q in real:
            meta = q.get("meta") or {}
            who = meta.get("author") or "not recorded"
            authors[who] = authors.get(who, 0) + 1
            if meta.get("written_at"):
                dates.append(str(meta["written_at"])[:10])
        who = ", ".join(f"{a} ({n})" for a, n in sorted(authors.items()))
        when = f"; written {min(dates)} to {max(dates)}" if dates else ""
        out.append(f"{split}: {len(real)} real questions; authors: {who}{when}.")
    return out


def preflight_lines(check: dict[str, Any] | None) -> list[str]:
    """The pre-flight's figures: per gated split, the smallest gain it could detect."""
    if not check:
        return []
    out = []
    for split, info in check.get("splits", {}).items():
        if "min_detectable_gain" in info:
            out.append(
                f"{split}: {info['queries']} queries, base {check.get('metric')} "
                f"{info['base_mean']:.4f} (sd {info['base_sd']:.4f}); the smallest gain the "
                f"gate could detect at alpha {check.get('alpha')} with "
                f"{100 * check.get('power', 0.8):g}% power is about "
                f"{info['min_detectable_gain']:+.4f} (a cautious estimate: it takes the spread "
                "of the base scores for that of the per-query gains, which is usually smaller "
                "because most queries tie)."
            )
    return out


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
    for stage in ("ingest", "synth", "split", "mine", "teach", "train"):
        summary = inp.stages.get(stage)
        if summary:
            # no timings: the report of a rerun is byte-identical (they are in the done markers)
            rows = _flatten("", without_timings({k: v for k, v in summary.items()
                                                 if k != "loss_history"}))  # fmt: skip
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


def _num(x: Any, fmt: str = ".4f") -> str:
    if x is None or (isinstance(x, float) and not math.isfinite(x)):
        return "–"
    return format(x, fmt)


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
