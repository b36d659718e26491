"""Top-k search by inner product; ties broken by (-score, id) everywhere.

Two engines give the same ranking: exact chunked matrix products (``top_k``), and FAISS's
exact brute-force kernel (``top_k_faiss``, the one behind ``IndexFlatIP``), faster on large
corpora. Memory is bounded by the chunk sizes: the full query x passage score matrix is never
held, and FAISS searches the caller's array in place (no index copy).
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


def top_k_faiss(
    queries: np.ndarray,
    corpus: np.ndarray,
    k: int,
    ids: list[str],
    *,
    query_chunk: int = 4096,
) -> tuple[np.ndarray, np.ndarray]:
    """The same as ``top_k``, computed by FAISS's exact inner-product search.

    FAISS orders tied scores its own way, so a few more than k are fetched and re-sorted by
    (-score, id); a query whose tie at the k-th score may reach past what was fetched is
    searched again with ``top_k``. On scores FAISS and numpy compute alike (exact small
    integers, say) the result equals ``top_k``'s.
    """
    import faiss

    if k < 1:
        raise ValueError(f"k must be >= 1, got {k}")
    n = corpus.shape[0]
    k = min(k, n)
    fetch = min(n, k + max(8, k // 2))
    tie = id_ranks(ids)
    corpus = np.ascontiguousarray(corpus, dtype=np.float32)
    nq = queries.shape[0]
    out_idx = np.empty((nq, k), dtype=np.int64)
    out_sc = np.empty((nq, k), dtype=np.float32)
    for qs in range(0, nq, query_chunk):
        q = np.ascontiguousarray(queries[qs : qs + query_chunk], dtype=np.float32)
        sc, idx = faiss.knn(q, corpus, fetch, metric=faiss.METRIC_INNER_PRODUCT)
        for r in range(q.shape[0]):
            if fetch < n and sc[r, fetch - 1] >= sc[r, k - 1]:
                # the tie group at the k-th score may go on past the fetched candidates
                ri, rs = top_k(q[r : r + 1], corpus, k, ids)
                out_idx[qs + r], out_sc[qs + r] = ri[0], rs[0]
                continue
            order = np.lexsort((tie[idx[r]], -sc[r]))[:k]
            out_idx[qs + r], out_sc[qs + r] = idx[r, order], sc[r, order]
    return out_idx, out_sc


def faiss_available() -> bool:
    try:
        import faiss  # noqa: F401
    except ImportError:
        return False
    return True


def choose_engine(n_corpus: int, method: str = "auto", faiss_above: int = 200_000) -> str:
    """``"exact"`` or ``"faiss"``: ``auto`` takes FAISS from ``faiss_above`` passages on."""
    if method not in ("auto", "exact", "faiss"):
        raise ValueError(f"unknown search method {method!r}; expected auto, exact or faiss")
    if method == "auto":
        return "faiss" if n_corpus >= faiss_above and faiss_available() else "exact"
    if method == "faiss" and not faiss_available():
        raise ImportError("search 'faiss' needs the package faiss-cpu (`make install`)")
    return method


def search(
    queries: np.ndarray,
    corpus: np.ndarray,
    k: int,
    ids: list[str],
    *,
    method: str = "auto",
    faiss_above: int = 200_000,
) -> tuple[np.ndarray, np.ndarray, str]:
    """Top-k with the engine ``choose_engine`` picks; returns (indices, scores, engine)."""
    engine = choose_engine(corpus.shape[0], method, faiss_above)
    fn = top_k_faiss if engine == "faiss" else top_k
    idx, sc = fn(queries, corpus, k, ids)
    return idx, sc, engine
