"""Evaluation: rank the whole corpus for each query, score per query, compare models pairwise."""

from __future__ import annotations

from typing import Any

import numpy as np

from .metrics import compute, parse_metric
from .search import top_k
from .stats import compare


def rank(
    q_emb: np.ndarray, p_emb: np.ndarray, pids: list[str], k: int
) -> tuple[list[list[str]], np.ndarray]:
    idx, scores = top_k(q_emb, p_emb, k, pids)
    return [[pids[i] for i in row] for row in idx.tolist()], scores


def format_run(qids: list[str], ranked: list[list[str]], scores: np.ndarray, tag: str) -> str:
    """TREC run format: ``qid Q0 docid rank score tag``, ranks from 1."""
    lines = []
    for q, docs, sc in zip(qids, ranked, scores, strict=True):
        for r, (d, s) in enumerate(zip(docs, sc.tolist(), strict=True), start=1):
            lines.append(f"{q} Q0 {d} {r} {s:.6f} {tag}\n")
    return "".join(lines)


def depth(metrics: list[str]) -> int:
    return max(parse_metric(m).k for m in metrics)


def summarise_split(
    per_query: dict[str, dict[str, np.ndarray]],
    origins: list[str],
    metrics: list[str],
    *,
    baseline: str,
    seed: int,
    resamples: int,
    confidence: float,
) -> dict[str, Any]:
    """Means per model, paired comparisons of every other model against ``baseline``."""
    out: dict[str, Any] = {
        "n_queries": len(origins),
        "origins": {o: origins.count(o) for o in sorted(set(origins))},
        "models": {},
        "comparisons": {},
        "by_origin": {},
    }
    for model, values in per_query.items():
        out["models"][model] = {m: {"mean": float(np.mean(values[m]))} for m in metrics}
    origin_arr = np.array(origins)
    for o in sorted(set(origins)):
        mask = origin_arr == o
        out["by_origin"][o] = {
            model: {m: float(np.mean(v[m][mask])) for m in metrics}
            for model, v in per_query.items()
        }
    for model, values in per_query.items():
        if model == baseline:
            continue
        comp = {}
        for j, m in enumerate(metrics):
            rng = np.random.default_rng([seed, j])
            c = compare(
                per_query[baseline][m],
                values[m],
                rng=rng,
                n_resamples=resamples,
                confidence=confidence,
            )
            comp[m] = c.to_dict()
        out["comparisons"][f"{model}_vs_{baseline}"] = comp
    return out


def score(
    ranked: list[list[str]], qrels: list[dict[str, int]], metrics: list[str]
) -> dict[str, np.ndarray]:
    return compute(metrics, ranked, qrels)
