"""IR metrics at a cutoff k, computed per query (trec_eval semantics)."""

from __future__ import annotations

import math
import re
from collections.abc import Callable, Hashable, Mapping, Sequence
from dataclasses import dataclass

import numpy as np

METRICS = ("recall", "precision", "mrr", "ndcg", "map", "hit_rate")

Ranked = Sequence[Sequence[Hashable]]
Qrels = Sequence[Mapping[Hashable, int]]

_PATTERN = re.compile(r"([a-z_]+)@([0-9]+)")


def _check_k(k: object) -> int:
    if isinstance(k, bool) or not isinstance(k, (int, np.integer)) or k < 1:
        raise ValueError(f"k must be an integer >= 1, got {k!r}")
    return int(k)


@dataclass(frozen=True)
class MetricSpec:
    """A metric name from METRICS and a cutoff k >= 1."""

    name: str
    k: int

    def __post_init__(self) -> None:
        if self.name not in METRICS:
            raise ValueError(
                f"unknown metric name {self.name!r}; expected one of {', '.join(METRICS)}"
            )
        _check_k(self.k)

    def __str__(self) -> str:
        return f"{self.name}@{self.k}"


def parse_metric(text: str) -> MetricSpec:
    """Parse "<name>@<k>" (case-insensitive, surrounding whitespace ignored), e.g. "nDCG@10"."""
    m = _PATTERN.fullmatch(text.strip().lower()) if isinstance(text, str) else None
    if m is None or m.group(1) not in METRICS or int(m.group(2)) < 1:
        raise ValueError(
            f"cannot parse metric {text!r}: expected the form name@k with name one of "
            f"{', '.join(METRICS)} and k a positive integer, e.g. 'ndcg@10'"
        )
    return MetricSpec(m.group(1), int(m.group(2)))


def _top(ids: Sequence[Hashable], k: int, i: int) -> list[Hashable]:
    if isinstance(ids, (str, bytes)) or not isinstance(ids, (Sequence, np.ndarray)):
        raise ValueError(
            f"ranked[{i}] must be a sequence of document ids, got {type(ids).__name__}"
        )
    top = list(ids[:k])
    if len(set(top)) != len(top):
        raise ValueError(
            f"ranked[{i}] contains duplicate document ids; expected a deduplicated ranking"
        )
    return top


def _per_query(
    ranked: Ranked,
    qrels: Qrels,
    k: int,
    fn: Callable[[list[Hashable], Mapping[Hashable, int], int], float],
) -> np.ndarray:
    k = _check_k(k)
    if len(ranked) != len(qrels):
        raise ValueError(
            f"ranked has {len(ranked)} queries but qrels has {len(qrels)}; expected equal lengths"
        )
    out = np.empty(len(ranked), dtype=np.float64)
    for i, (ids, rels) in enumerate(zip(ranked, qrels, strict=True)):
        if not isinstance(rels, Mapping):
            raise ValueError(
                f"qrels[{i}] must be a mapping doc_id -> grade, got {type(rels).__name__}"
            )
        out[i] = fn(_top(ids, k, i), rels, k)
    return out


def _hits(top: list[Hashable], rels: Mapping[Hashable, int]) -> list[bool]:
    return [rels.get(d, 0) > 0 for d in top]


def _n_rel(rels: Mapping[Hashable, int]) -> int:
    return sum(1 for g in rels.values() if g > 0)


def _recall(top: list[Hashable], rels: Mapping[Hashable, int], k: int) -> float:
    n = _n_rel(rels)
    return sum(_hits(top, rels)) / n if n else 0.0


def recall_at_k(ranked: Ranked, qrels: Qrels, k: int) -> np.ndarray:
    """|relevant in top k| / |relevant|; 0.0 for a query with no relevant documents."""
    return _per_query(ranked, qrels, k, _recall)


def precision_at_k(ranked: Ranked, qrels: Qrels, k: int) -> np.ndarray:
    """|relevant in top k| / k, even when fewer than k are ranked (trec_eval P_k)."""
    return _per_query(ranked, qrels, k, lambda t, r, k: sum(_hits(t, r)) / k)


def _rr(top: list[Hashable], rels: Mapping[Hashable, int], k: int) -> float:
    return next((1.0 / (i + 1) for i, h in enumerate(_hits(top, rels)) if h), 0.0)


def mrr_at_k(ranked: Ranked, qrels: Qrels, k: int) -> np.ndarray:
    """1 / rank of the first relevant document within the top k, else 0.0."""
    return _per_query(ranked, qrels, k, _rr)


def _dcg(gains: Sequence[float]) -> float:
    return sum(g / math.log2(i + 2) for i, g in enumerate(gains))


def _ndcg(top: list[Hashable], rels: Mapping[Hashable, int], k: int) -> float:
    ideal = _dcg(sorted((g for g in rels.values() if g > 0), reverse=True)[:k])
    return _dcg([max(rels.get(d, 0), 0) for d in top]) / ideal if ideal > 0 else 0.0


def ndcg_at_k(ranked: Ranked, qrels: Qrels, k: int) -> np.ndarray:
    """Linear-gain nDCG, sum rel_i / log2(i + 1) (trec_eval ndcg_cut).

    The ideal ranking uses all judged relevant grades; 0.0 for a query with none.
    """
    return _per_query(ranked, qrels, k, _ndcg)


def _ap(top: list[Hashable], rels: Mapping[Hashable, int], k: int) -> float:
    n, found, total = _n_rel(rels), 0, 0.0
    for i, h in enumerate(_hits(top, rels)):
        if h:
            found += 1
            total += found / (i + 1)
    return total / n if n else 0.0


def map_at_k(ranked: Ranked, qrels: Qrels, k: int) -> np.ndarray:
    """AP truncated at k, divided by ALL relevant documents (trec_eval map_cut); 0.0 if none."""
    return _per_query(ranked, qrels, k, _ap)


def hit_rate_at_k(ranked: Ranked, qrels: Qrels, k: int) -> np.ndarray:
    """1.0 if any relevant document is in the top k, else 0.0."""
    return _per_query(ranked, qrels, k, lambda t, r, k: float(any(_hits(t, r))))


_FUNCS: dict[str, Callable[[Ranked, Qrels, int], np.ndarray]] = {
    "recall": recall_at_k,
    "precision": precision_at_k,
    "mrr": mrr_at_k,
    "ndcg": ndcg_at_k,
    "map": map_at_k,
    "hit_rate": hit_rate_at_k,
}


def compute(
    specs: Sequence[MetricSpec | str], ranked: Ranked, qrels: Qrels
) -> dict[str, np.ndarray]:
    """Per-query values for each spec, keyed by str(spec) (e.g. "ndcg@10")."""
    parsed = [s if isinstance(s, MetricSpec) else parse_metric(s) for s in specs]
    return {str(s): _FUNCS[s.name](ranked, qrels, s.k) for s in parsed}
