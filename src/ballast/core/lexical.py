"""The lexical reference: BM25 over the same passages, and reciprocal rank fusion of BM25 with
an embedder's ranking (a hybrid).

BM25 as in Robertson & Zaragoza (2009, "The Probabilistic Relevance Framework: BM25 and
Beyond"), in Lucene's form: a term's weight is ``idf * tf / (tf + k1 * (1 - b + b * dl /
avgdl))`` with ``idf = ln(1 + (N - n + 0.5) / (n + 0.5))`` (never negative), computed with the
``bm25s`` library. Text is lowercased and cut into word characters (``\\w+``), so part codes and
acronyms stay whole tokens; no stop words, no stemming (a specialised collection's words are
not those of a general stop list). Reciprocal rank fusion (Cormack, Clarke & Büttcher, SIGIR
2009): ``score(d) = sum over rankings of 1 / (60 + rank(d))``, ranks from 1.

Ties are broken by passage id, as everywhere in ballast, so rankings are deterministic.
"""

from __future__ import annotations

import re
from collections.abc import Sequence

import numpy as np

K1 = 1.2  # Robertson & Zaragoza's usual range is 1.2-2.0; Lucene's default 1.2
B = 0.75
RRF_K = 60  # Cormack et al. 2009
_WORD = re.compile(r"\w+", re.UNICODE)


def tokens(text: str) -> list[str]:
    return _WORD.findall(text.lower())


class BM25:
    """A BM25 index of ``texts``; ``method`` is bm25s's ("lucene" by default; "robertson" is
    the original idf, which can be negative, as rank-bm25's Okapi variant uses)."""

    def __init__(
        self, texts: Sequence[str], *, k1: float = K1, b: float = B, method: str = "lucene"
    ) -> None:
        import bm25s

        self._index = bm25s.BM25(k1=k1, b=b, method=method, dtype="float64")
        self._index.index([tokens(t) for t in texts], show_progress=False)
        self.size = len(texts)

    def scores(self, query: str) -> np.ndarray:
        """The BM25 score of every passage for ``query`` (zeros when no word of it is known)."""
        words = tokens(query)
        if not words:
            return np.zeros(self.size)
        return np.asarray(self._index.get_scores(words), dtype=np.float64)


def _top(scores: np.ndarray, id_order: np.ndarray, k: int) -> np.ndarray:
    """Indices of the ``k`` best scores, ties by passage id (``id_order``: each index's rank
    among the ids sorted ascending)."""
    k = min(k, len(scores))
    if k < len(scores):  # keep every candidate tied with the k-th score, then sort exactly
        cut = np.partition(-scores, k - 1)[k - 1]
        cand = np.flatnonzero(-scores <= cut)
    else:
        cand = np.arange(len(scores))
    order = np.lexsort((id_order[cand], -scores[cand]))
    return cand[order][:k]


def bm25_rank(
    index: BM25, queries: Sequence[str], ids: Sequence[str], k: int
) -> tuple[list[list[str]], list[np.ndarray]]:
    """(the top ``k`` passage ids of each query, their scores). BM25 retrieves only passages
    that share a word with the query, so a ranking can be shorter than ``k`` (empty when no
    word is known): no passage is ranked on a score of zero."""
    id_order = np.argsort(np.argsort(np.asarray(ids, dtype=object)))
    ranked, scores = [], []
    for q in queries:
        s = index.scores(q)
        top = [j for j in _top(s, id_order, k) if s[j] > 0]
        ranked.append([ids[j] for j in top])
        scores.append(s[top])
    return ranked, scores


def rrf(
    rankings: Sequence[Sequence[Sequence[str]]], k: int
) -> tuple[list[list[str]], list[np.ndarray]]:
    """Reciprocal rank fusion of several systems' rankings (``rankings[system][query]``): the
    top ``k`` of each query by the fused score, ties by passage id."""
    out, scores = [], []
    for per_query in zip(*rankings, strict=True):
        fused: dict[str, float] = {}
        for ranked in per_query:
            for r, pid in enumerate(ranked, start=1):
                fused[pid] = fused.get(pid, 0.0) + 1.0 / (RRF_K + r)
        best = sorted(fused.items(), key=lambda x: (-x[1], x[0]))[:k]
        out.append([pid for pid, _ in best])
        scores.append(np.array([s for _, s in best], dtype=np.float64))
    return out, scores
