"""Rank a corpus for queries and score the ranking: the one "rank the corpus, mean metric" that
evaluation, the trainer's dev check, the adapter's dev check and the int8 measurement share,
and the query-side map (``normalize(W e)``) applied to embeddings."""

from __future__ import annotations

import numpy as np

from ballast.core.metrics import compute, parse_metric
from ballast.core.search import top_k


def depth(metrics: list[str]) -> int:
    return max(parse_metric(m).k for m in metrics)


def rank(
    q_emb: np.ndarray, p_emb: np.ndarray, pids: list[str], k: int
) -> tuple[list[list[str]], np.ndarray]:
    idx, scores = top_k(q_emb, p_emb, k, pids)
    return [[pids[i] for i in row] for row in idx.tolist()], scores


def metric_values(
    q_emb: np.ndarray,
    p_emb: np.ndarray,
    pids: list[str],
    qrels: list[dict[str, int]],
    metric: str,
) -> np.ndarray:
    """``metric`` of each query ranked over the whole corpus, as ``ballast evaluate`` ranks
    them (ties by passage id); ``qrels`` in the queries' order."""
    ranked, _ = rank(q_emb, p_emb, pids, parse_metric(metric).k)
    return compute([metric], ranked, qrels)[metric]


def mean_metric(
    q_emb: np.ndarray,
    p_emb: np.ndarray,
    pids: list[str],
    qrels: list[dict[str, int]],
    metric: str,
) -> float:
    """The mean of ``metric_values``."""
    return float(metric_values(q_emb, p_emb, pids, qrels, metric).mean())


def truncate(emb: np.ndarray, dim: int) -> np.ndarray:
    """The first ``dim`` dimensions of each embedding, unit-normalised again (how a
    Matryoshka-trained embedding is used at a smaller size; Kusupati et al. 2022)."""
    cut = np.ascontiguousarray(emb[:, :dim], dtype=np.float32)
    norm = np.linalg.norm(cut, axis=1, keepdims=True)
    return cut / np.where(norm > 0, norm, 1.0)


def transform(emb: np.ndarray, w: np.ndarray) -> np.ndarray:
    """``W e`` for each row (no normalising): the identity returns ``emb`` unchanged."""
    return np.asarray(emb, dtype=np.float32) @ np.asarray(w, dtype=np.float32).T


def apply(emb: np.ndarray, w: np.ndarray) -> np.ndarray:
    """``normalize(W e)`` for each row, as float32."""
    out = transform(emb, w)
    norm = np.linalg.norm(out, axis=1, keepdims=True)
    return (out / np.maximum(norm, 1e-12)).astype(np.float32)
