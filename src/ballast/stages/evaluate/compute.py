"""Evaluation: rank a whole corpus for each query, score per query, compare models pairwise.

Works on any set: ballast's own splits, a general-domain guard set, or TREC-style files a user
brings. Each model is loaded once and each corpus encoded once per model (through the cache).
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from ballast.core.metrics import compute
from ballast.core.progress import SILENT, Progress
from ballast.core.scoring import depth, rank, truncate
from ballast.core.stats import compare
from ballast.io.trec import format_run


@dataclass(frozen=True)
class Corpus:
    ids: list[str]
    texts: list[str]


@dataclass(frozen=True)
class EvalSet:
    """One evaluation split: queries with their judgements, searched against one corpus."""

    name: str
    corpus: str
    qids: list[str]
    texts: list[str]
    origins: list[str]
    qrels: list[dict[str, int]]


def run_models(
    models: dict[str, tuple[Path, str]],
    corpora: dict[str, Corpus],
    sets: list[EvalSet],
    metrics: list[str],
    *,
    cache: Any,
    batch_size: int,
    max_seq_length: int | None,
    dims: tuple[int, ...] = (),
    devices: tuple[str, ...] = (),
    progress: Progress = SILENT,
) -> tuple[dict[str, dict[str, dict[str, np.ndarray]]], dict[str, str]]:
    """Per-query metric values ``[set][model][metric]`` and TREC run files ``model/set.run``.

    Each of ``dims`` smaller than a model's embedding size adds a model ``NAME@DIM``: the same
    embeddings truncated to their first DIM dimensions (no second encoding). With two or more
    ``devices``, corpora are encoded by one process per device."""
    from ballast.models.encode import device_pool, encode_cached
    from ballast.models.loading import load_encoder
    from ballast.models.query_map import query_route

    k = depth(metrics)
    per_query: dict[str, dict[str, dict[str, np.ndarray]]] = {s.name: {} for s in sets}
    run_files: dict[str, str] = {}
    for name, (path, fp) in models.items():
        model = load_encoder(path, max_seq_length=max_seq_length)
        to_query = query_route(path)  # a query-side adapter maps queries only
        with device_pool(model, devices) as pool:
            p_emb = {
                c: encode_cached(
                    model,
                    fp,
                    corpora[c].texts,
                    cache,
                    batch_size=batch_size,
                    label=f"encoding {c} passages ({name})",
                    progress=progress,
                    pool=pool,
                )
                for c in sorted({s.corpus for s in sets})
            }
        for s in sets:
            q_emb = to_query(
                encode_cached(
                    model,
                    fp,
                    s.texts,
                    cache,
                    batch_size=batch_size,
                    label=f"encoding {s.name} queries ({name})",
                    progress=progress,
                )
            )
            full = q_emb.shape[1]
            for d in [full, *(d for d in dims if d < full)]:
                label = name if d == full else f"{name}@{d}"
                ranked, scores = rank(
                    truncate(q_emb, d) if d < full else q_emb,
                    truncate(p_emb[s.corpus], d) if d < full else p_emb[s.corpus],
                    corpora[s.corpus].ids,
                    k,
                )
                per_query[s.name][label] = compute(metrics, ranked, s.qrels)
                run_files[f"{label}/{s.name}.run"] = format_run(
                    s.qids, ranked, scores, f"ballast-{label}"
                )
        del model
    return per_query, run_files


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
    """Means per model (also per query origin), and paired comparisons of every other model
    against ``baseline``: bootstrap interval, randomization p-value, effect size."""
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
    if len(origins) < 2:
        return out
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


def summarise(
    per_query: dict[str, dict[str, dict[str, np.ndarray]]],
    sets: list[EvalSet],
    metrics: list[str],
    models: dict[str, tuple[Path, str]],
    *,
    baseline: str,
    seed: int,
    resamples: int,
    confidence: float,
) -> dict[str, Any]:
    summary: dict[str, Any] = {
        "metrics": metrics,
        "confidence": confidence,
        "bootstrap_resamples": resamples,
        "seed": seed,
        "baseline": baseline,
        "models": {n: {"fingerprint": fp} for n, (_, fp) in models.items()},
        "splits": {},
    }
    for j, s in enumerate(sets):
        summary["splits"][s.name] = summarise_split(
            per_query[s.name],
            s.origins,
            metrics,
            baseline=baseline,
            seed=seed * 1000 + j,
            resamples=resamples,
            confidence=confidence,
        )
    return summary


def per_query_rows(
    per_query: dict[str, dict[str, dict[str, np.ndarray]]], sets: list[EvalSet], metrics: list[str]
) -> list[list[str]]:
    """Rows of per_query.csv: split, query_id, origin, model, one column a metric."""
    rows = []
    for s in sets:
        for model, values in per_query[s.name].items():
            for i, q in enumerate(s.qids):
                rows.append(
                    [s.name, q, s.origins[i], model]
                    + [repr(round(float(values[m][i]), 10)) for m in metrics]
                )
    return rows
