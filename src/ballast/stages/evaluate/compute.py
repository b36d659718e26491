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
    references: tuple[str, ...] = (),
    bf16: bool = False,
    backend: str = "pytorch",
    progress: Progress = SILENT,
) -> tuple[dict[str, dict[str, dict[str, np.ndarray]]], dict[str, str]]:
    """Per-query metric values ``[set][model][metric]`` and TREC run files ``model/set.run``.

    Each of ``dims`` smaller than a model's embedding size adds a model ``NAME@DIM``: the same
    embeddings truncated to their first DIM dimensions (no second encoding). With two or more
    ``devices``, corpora are encoded by one process per device. ``references``: "bm25" adds
    BM25 over the same corpus as model ``bm25``; "hybrid" adds, for each model, the reciprocal
    rank fusion of its ranking with BM25's, as ``NAME+bm25`` (core/lexical.py). ``bf16``: every
    model encoded under bfloat16 autocast (all alike, so the comparison stays paired);
    ``backend`` "onnx" or "onnx-int8": every model encoded through its ONNX graph, exported
    once into ``cache``'s folder (``evaluate.backend``)."""
    from ballast.models.backend import load_search_encoder
    from ballast.models.encode import device_pool, encode_cached
    from ballast.models.query_map import query_route

    k = depth(metrics)
    fuse_depth = max(k, FUSE_DEPTH) if "hybrid" in references else k
    per_query: dict[str, dict[str, dict[str, np.ndarray]]] = {s.name: {} for s in sets}
    run_files: dict[str, str] = {}
    deep: dict[tuple[str, str], list[list[str]]] = {}  # (set, model) -> ranking to fuse
    for name, (path, fp) in models.items():
        model = load_search_encoder(path, fp, backend, cache.root, max_seq_length,
                                    progress=progress)  # fmt: skip
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
                    bf16=bf16,
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
                    bf16=bf16,
                )
            )
            full = q_emb.shape[1]
            for d in [full, *(d for d in dims if d < full)]:
                label = name if d == full else f"{name}@{d}"
                ranked, scores = rank(
                    truncate(q_emb, d) if d < full else q_emb,
                    truncate(p_emb[s.corpus], d) if d < full else p_emb[s.corpus],
                    corpora[s.corpus].ids,
                    fuse_depth if d == full else k,
                )
                if d == full:
                    deep[(s.name, name)] = ranked
                    ranked, scores = [r[:k] for r in ranked], scores[:, :k]
                _record(per_query, run_files, s, label, metrics, ranked, scores)
        del model
    if references:
        _references(per_query, run_files, deep, corpora, sets, list(models), metrics, k,
                    references, progress)  # fmt: skip
    return per_query, run_files


FUSE_DEPTH = 100  # each system's top 100 are fused (a common depth for rank fusion)


def _record(
    per_query: dict, run_files: dict, s: EvalSet, label: str, metrics: list[str],
    ranked: list[list[str]], scores: Any,
) -> None:  # fmt: skip
    per_query[s.name][label] = compute(metrics, ranked, s.qrels)
    run_files[f"{label}/{s.name}.run"] = format_run(s.qids, ranked, scores, f"ballast-{label}")


def _references(
    per_query: dict, run_files: dict, deep: dict, corpora: dict[str, Corpus],
    sets: list[EvalSet], models: list[str], metrics: list[str], k: int,
    references: tuple[str, ...], progress: Progress,
) -> None:  # fmt: skip
    """BM25 and the hybrids, on the same sets and corpora as the embedders."""
    from ballast.core.lexical import BM25, bm25_rank, rrf

    indexes: dict[str, BM25] = {}
    for s in sets:
        if s.corpus not in indexes:
            progress.info(f"evaluate: indexing the {s.corpus} passages for BM25")
            indexes[s.corpus] = BM25(corpora[s.corpus].texts)
        ranked, scores = bm25_rank(
            indexes[s.corpus], s.texts, corpora[s.corpus].ids, max(k, FUSE_DEPTH)
        )
        if "bm25" in references:
            _record(per_query, run_files, s, "bm25", metrics, [r[:k] for r in ranked],
                    [x[:k] for x in scores])  # fmt: skip
        if "hybrid" in references:
            for name in models:
                fused, fscores = rrf([deep[(s.name, name)], ranked], k)
                _record(per_query, run_files, s, f"{name}+bm25", metrics, fused, fscores)


def summarise_split(
    per_query: dict[str, dict[str, np.ndarray]],
    origins: list[str],
    metrics: list[str],
    *,
    baseline: str,
    seed: int,
    resamples: int,
    confidence: float,
    pairs: tuple[tuple[str, str], ...] = (),
) -> dict[str, Any]:
    """Means per model (also per query origin), and paired comparisons of every other model
    against ``baseline``, and of each ``(model, other)`` of ``pairs``: bootstrap interval,
    randomization p-value, effect size."""
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
    wanted = [(m, baseline) for m in per_query if m != baseline]
    wanted += [(a, b) for a, b in pairs if a in per_query and b in per_query]
    for model, against in wanted:
        comp = {}
        for j, m in enumerate(metrics):
            rng = np.random.default_rng([seed, j])
            c = compare(
                per_query[against][m],
                per_query[model][m],
                rng=rng,
                n_resamples=resamples,
                confidence=confidence,
            )
            comp[m] = c.to_dict()
        out["comparisons"][f"{model}_vs_{against}"] = comp
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
    pairs: tuple[tuple[str, str], ...] = (),
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
            pairs=pairs,
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
