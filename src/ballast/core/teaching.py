"""Teacher labels, the pure part: candidate lists, the hybrid teacher's fused score, and the
targets a student is trained to match.

A training query's candidates are its positive and the base model's best other passages (of the
training documents); a teacher scores each (query, candidate) pair; the student learns the
teacher's preferences among them (listwise distillation, Tamber et al. 2025; margin
distillation, MarginMSE, Hofstätter et al. 2020). The base model's near misses are kept as
candidates even when they are in fact relevant: the teacher's score says how relevant, so no
false negative is forced apart from its query (the point of teacher labels; GPL, Wang et al.,
NAACL 2022).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from ballast.core.lexical import RRF_K


def candidate_lists(top: np.ndarray, positives: Sequence[int], n: int) -> list[list[int]]:
    """Each query's ``n`` candidates: its positive first, then the best-ranked others of ``top``
    (passage indices, best first), fewer when ``top`` runs out."""
    out = []
    for row, pos in zip(np.asarray(top).tolist(), positives, strict=True):
        others = [int(i) for i in row if i != pos and i >= 0][: n - 1]
        out.append([int(pos), *others])
    return out


def corpus_ranks(scores: np.ndarray, idx: Sequence[int]) -> np.ndarray:
    """The rank (from 1) of each of the passages ``idx`` in a ranking of the whole corpus by
    ``scores``: one more than the number of passages scoring strictly higher (tied passages
    share a rank, so the order of ids never changes a teacher's score)."""
    s = np.asarray(scores, dtype=np.float64)
    ordered = np.sort(s)
    at = s[np.asarray(idx, dtype=np.int64)]
    return 1 + len(s) - np.searchsorted(ordered, at, side="right")


def fused_scores(dense: np.ndarray, lexical: np.ndarray, idx: Sequence[int]) -> np.ndarray:
    """The hybrid teacher's score of the passages ``idx`` for one query: reciprocal rank fusion
    (Cormack, Clarke & Büttcher, SIGIR 2009) of their ranks over the whole corpus by the
    embedder's scores ``dense`` and by BM25's scores ``lexical``, ``sum 1 / (60 + rank)``.
    BM25 ranks only passages sharing a word with the query (score > 0), as
    ``core.lexical.bm25_rank`` does; a passage it does not rank adds nothing."""
    idx = np.asarray(idx, dtype=np.int64)
    out = 1.0 / (RRF_K + corpus_ranks(dense, idx))
    lex = np.asarray(lexical, dtype=np.float64)
    ranked = lex[idx] > 0
    if ranked.any():
        out[ranked] += 1.0 / (RRF_K + corpus_ranks(np.where(lex > 0, lex, -np.inf), idx[ranked]))
    return out


def standardise(scores: Sequence[float]) -> np.ndarray:
    """One query's teacher scores as z-scores (mean 0, standard deviation 1), so teachers of any
    scale (fused ranks near 0.03, cross-encoder logits near 10, log-likelihoods near -3) give
    targets of one scale; a list with no spread gives zeros (the teacher prefers nothing)."""
    s = np.asarray(scores, dtype=np.float64)
    sd = s.std()
    return np.zeros_like(s) if sd < 1e-12 else (s - s.mean()) / sd


def rerank(base_ids: Sequence[str], teacher: Sequence[float]) -> list[str]:
    """The base model's list reordered by the teacher's scores, ties by passage id (as every
    ranking in ballast)."""
    pairs = sorted(zip(teacher, base_ids, strict=True), key=lambda x: (-x[0], x[1]))
    return [pid for _, pid in pairs]
