"""Exact top-k search by chunked matrix products; ties broken by (-score, id) everywhere.

Memory is bounded by the chunk sizes: the full query x passage score matrix is never held.
"""

from __future__ import annotations

import numpy as np


def id_ranks(ids: list[str]) -> np.ndarray:
    """Position of each id in sorted order: the tie-break key."""
    order = sorted(range(len(ids)), key=ids.__getitem__)
    ranks = np.empty(len(ids), dtype=np.int64)
    ranks[order] = np.arange(len(ids))
    return ranks


def top_k(
    queries: np.ndarray,
    corpus: np.ndarray,
    k: int,
    ids: list[str],
    *,
    query_chunk: int = 256,
    corpus_chunk: int = 65536,
) -> tuple[np.ndarray, np.ndarray]:
    """Indices and scores of the k best passages per query (dot product), best first.

    Every passage scoring at least the k-th best score in a chunk is kept before the final
    sort, so the result does not depend on the chunk sizes.
    """
    if k < 1:
        raise ValueError(f"k must be >= 1, got {k}")
    n = corpus.shape[0]
    k = min(k, n)
    tie = id_ranks(ids)
    nq = queries.shape[0]
    out_idx = np.empty((nq, k), dtype=np.int64)
    out_sc = np.empty((nq, k), dtype=np.float32)
    for qs in range(0, nq, query_chunk):
        q = queries[qs : qs + query_chunk]
        best_idx = [np.empty(0, dtype=np.int64) for _ in range(q.shape[0])]
        best_sc = [np.empty(0, dtype=np.float32) for _ in range(q.shape[0])]
        for cs in range(0, n, corpus_chunk):
            scores = q @ corpus[cs : cs + corpus_chunk].T
            kk = min(k, scores.shape[1])
            kth = np.partition(scores, scores.shape[1] - kk, axis=1)[:, scores.shape[1] - kk]
            for r in range(q.shape[0]):
                keep = np.flatnonzero(scores[r] >= kth[r])
                cand_idx = np.concatenate([best_idx[r], keep + cs])
                cand_sc = np.concatenate([best_sc[r], scores[r, keep]])
                order = np.lexsort((tie[cand_idx], -cand_sc))
                if len(order) > k:  # keep ties with the k-th score for the next chunk
                    cut = cand_sc[order[k - 1]]
                    order = order[cand_sc[order] >= cut]
                best_idx[r], best_sc[r] = cand_idx[order], cand_sc[order]
        for r in range(q.shape[0]):
            out_idx[qs + r] = best_idx[r][:k]
            out_sc[qs + r] = best_sc[r][:k]
    return out_idx, out_sc
