"""Hard-negative mining: pure functions over the base model's ranking.

For each training query the candidates in the rank window are screened by rules, in order; the
first rule a candidate breaks drops it and is recorded with it (docs/mining.md):

- ``positive``: the positive itself, or a passage judged relevant to the query;
- ``same_text``: the positive's text again (whitespace and case aside);
- ``near_duplicate``: word 3-gram Jaccard with the positive at least ``near_duplicate``;
- ``same_document``: from the positive's document, when ``exclude_same_doc``;
- ``above_max_score``: cosine above ``max_score``;
- ``above_relative_ceiling``: above ``max_relative`` x the positive's score (positive-aware
  mining, Moreira et al. 2024: 39-47% of naive top-k "negatives" were in fact relevant);
- ``above_margin_ceiling``: above the positive's score minus ``max_margin`` (the same paper's
  margin variant);
- ``rescorer``: a second model rates it at least ``rescorer_threshold`` x the positive (a
  cross-encoder, or query likelihood under a language model, Sachan et al. 2022).

The survivors are taken best first (``sample = "top"``) or in a seeded random order; the
re-scorer, when there is one, is asked only about as many as are needed.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from typing import TYPE_CHECKING

import numpy as np

from ballast.core.text import shingles

if TYPE_CHECKING:  # the section's type only: core imports nothing above it
    from ballast.config import MineConfig

RULES = (
    "positive",
    "same_text",
    "near_duplicate",
    "same_document",
    "above_max_score",
    "above_relative_ceiling",
    "above_margin_ceiling",
    "rescorer",
)



def jaccard(a: frozenset[str], b: frozenset[str]) -> float:
    if not a and not b:
        return 1.0
    inter = len(a & b)
    return inter / (len(a) + len(b) - inter)


class LazyShingles:
    """``shingles(texts[i])``, computed on first use: only candidates in a window need them."""

    def __init__(self, texts: Sequence[str]) -> None:
        self.texts = texts
        self._cache: dict[int, frozenset[str]] = {}

    def __getitem__(self, i: int) -> frozenset[str]:
        got = self._cache.get(i)
        if got is None:
            got = self._cache[i] = shingles(self.texts[i])
        return got


def screen(
    ranked: np.ndarray,
    scores: np.ndarray,
    positive: int,
    positive_score: float,
    *,
    doc_of: Sequence[str],
    text_key: Sequence[str],
    cfg: MineConfig,
    shingles_of: Sequence[frozenset[str]] | LazyShingles | None = None,
    also_relevant: frozenset[int] = frozenset(),
) -> tuple[list[dict], list[dict]]:
    """(eligible, dropped) candidates of one query, as ``{"index", "score", "rank"}`` records in
    rank order; each dropped one carries the first rule it broke (and ``jaccard`` for
    near-duplicates). Candidates ranked before ``window_start`` are screened but never eligible.
    """
    if cfg.near_duplicate > 0 and shingles_of is None:
        raise ValueError("the near_duplicate rule needs shingles_of")
    relative = cfg.max_relative * positive_score if cfg.max_relative > 0 else None
    margin = positive_score - cfg.max_margin if cfg.max_margin > 0 else None
    absolute = cfg.max_score if cfg.max_score < 1.0 else None
    pos_sh = shingles_of[positive] if cfg.near_duplicate > 0 and shingles_of is not None else None
    # the settings the loop reads, once (a query screens up to window_end candidates)
    end, start, near = cfg.window_end, cfg.window_start, cfg.near_duplicate
    same_doc = cfg.exclude_same_doc
    eligible, dropped = [], []
    for rank, (i, s) in enumerate(zip(ranked.tolist(), scores.tolist(), strict=True)):
        if rank >= end:
            break
        rule, extra = None, {}
        if i == positive or i in also_relevant:
            rule = "positive"
        elif text_key[i] == text_key[positive]:
            rule = "same_text"
        elif (
            pos_sh is not None
            and shingles_of is not None
            and ((jac := jaccard(shingles_of[i], pos_sh)) >= near)
        ):
            rule, extra = "near_duplicate", {"jaccard": round(jac, 4)}
        elif same_doc and doc_of[i] == doc_of[positive]:
            rule = "same_document"
        elif absolute is not None and s > absolute:
            rule = "above_max_score"
        elif relative is not None and s > relative:
            rule = "above_relative_ceiling"
        elif margin is not None and s > margin:
            rule = "above_margin_ceiling"
        if rule is not None:
            dropped.append({"index": i, "score": s, "rank": rank, "rule": rule} | extra)
        elif rank >= start:
            eligible.append({"index": i, "score": s, "rank": rank})
    return eligible, dropped


def sampling_order(
    eligible: list[dict], negatives: int, sample: str, rng: np.random.Generator
) -> list[dict]:
    """The order candidates are taken in: rank order for ``top`` (or when all are needed),
    else a uniformly random permutation drawn from ``rng``."""
    if sample == "top" or len(eligible) <= negatives:
        return list(eligible)
    return [eligible[j] for j in rng.permutation(len(eligible))]


def take(order: list[dict], negatives: int) -> list[dict]:
    """The first ``negatives`` of a sampling order, back in rank order."""
    return sorted(order[:negatives], key=lambda c: c["rank"])


def screen_queries(
    ranked: np.ndarray,
    scores: np.ndarray,
    positives: Sequence[int],
    positive_scores: Sequence[float],
    relevant: Sequence[frozenset[int]],
    *,
    doc_of: Sequence[str],
    text_key: Sequence[str],
    cfg: MineConfig,
    rng: np.random.Generator,
    shingles_of: Sequence[frozenset[str]] | LazyShingles | None = None,
) -> tuple[list[list[dict]], list[list[dict]]]:
    """The mine stage's loop over its queries: for query ``i`` (row ``i`` of ``ranked`` and
    ``scores``, its positive's index and score, the indices of every passage judged relevant to
    it), screen the candidates and draw its sampling order from ``rng``, query by query.
    Returns (sampling orders, dropped candidates), one list a query."""
    orders, dropped = [], []
    for qi in range(len(positives)):
        eligible, gone = screen(
            ranked[qi],
            scores[qi],
            positives[qi],
            float(positive_scores[qi]),
            doc_of=doc_of,
            text_key=text_key,
            cfg=cfg,
            shingles_of=shingles_of,
            also_relevant=relevant[qi],
        )
        orders.append(sampling_order(eligible, cfg.negatives, cfg.sample, rng))
        dropped.append(gone)
    return orders, dropped


def mine_one(
    ranked: np.ndarray,
    scores: np.ndarray,
    positive: int,
    positive_score: float,
    *,
    doc_of: Sequence[str],
    text_key: Sequence[str],
    cfg: MineConfig,
    rng: np.random.Generator,
    shingles_of: Sequence[frozenset[str]] | LazyShingles | None = None,
    also_relevant: frozenset[int] = frozenset(),
) -> tuple[list[dict], list[dict]]:
    """Negatives and dropped candidates for one query, without a re-scorer: the stage's loop
    (``screen_queries``) for a single query."""
    orders, dropped = screen_queries(
        np.asarray(ranked)[None],
        np.asarray(scores)[None],
        [positive],
        [positive_score],
        [also_relevant],
        doc_of=doc_of,
        text_key=text_key,
        cfg=cfg,
        rng=rng,
        shingles_of=shingles_of,
    )
    return take(orders[0], cfg.negatives), dropped[0]


Rescore = Callable[[list[tuple[int, int]]], np.ndarray]


def second_opinion(
    orders: list[list[dict]],
    negatives: int,
    rescore: Rescore,
    positive_rescores: Sequence[float],
    threshold: float,
) -> tuple[list[list[dict]], list[list[dict]], int]:
    """Ask the re-scorer about candidates in sampling order until each query has
    ``negatives`` it does not rate at least ``threshold`` x its positive, or none are left.

    ``rescore`` takes ``(query index, candidate index)`` pairs and returns one score each on a
    0..1 scale, higher meaning more relevant. All queries' pairs of a round go in one call.
    Returns (chosen per query in rank order, dropped per query with rule ``rescorer``, pairs
    scored); every rescored record gains ``rescore``.
    """
    nq = len(orders)
    chosen: list[list[dict]] = [[] for _ in range(nq)]
    dropped: list[list[dict]] = [[] for _ in range(nq)]
    cursor = [0] * nq
    scored = 0
    while True:
        batch: list[tuple[int, dict]] = []
        for qi in range(nq):
            need = negatives - len(chosen[qi])
            if need <= 0:
                continue
            nxt = orders[qi][cursor[qi] : cursor[qi] + need]
            cursor[qi] += len(nxt)
            batch.extend((qi, c) for c in nxt)
        if not batch:
            break
        values = np.asarray(rescore([(qi, c["index"]) for qi, c in batch]), dtype=np.float64)
        scored += len(batch)
        for (qi, c), v in zip(batch, values.tolist(), strict=True):
            rec = c | {"rescore": round(v, 6)}
            if v >= threshold * positive_rescores[qi]:
                dropped[qi].append(rec | {"rule": "rescorer"})
            else:
                chosen[qi].append(rec)
    for qi in range(nq):
        chosen[qi].sort(key=lambda c: c["rank"])
        dropped[qi].sort(key=lambda c: c["rank"])
    return chosen, dropped, scored
