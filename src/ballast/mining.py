"""Hard-negative mining: a pure function over the base model's ranking.

Positive-aware mining (Moreira et al. 2024): candidates scoring above ``max_relative`` times
the positive's score are likely unlabelled positives and are dropped, as are the positive
itself and copies of its text. Every dropped candidate is kept with the rule that dropped it.
"""

from __future__ import annotations

import numpy as np

from .config import MineConfig


def mine_one(
    ranked: np.ndarray,
    scores: np.ndarray,
    positive: int,
    positive_score: float,
    *,
    doc_of: list[str],
    text_key: list[str],
    cfg: MineConfig,
    rng: np.random.Generator,
    also_relevant: frozenset[int] = frozenset(),
) -> tuple[list[dict], list[dict]]:
    """Negatives and dropped candidates for one query, as (index, score, rank) records."""
    ceiling = cfg.max_relative * positive_score
    kept, dropped = [], []
    for rank, (i, s) in enumerate(zip(ranked.tolist(), scores.tolist(), strict=True)):
        if rank >= cfg.window_end:
            break
        rule = None
        if i == positive or i in also_relevant:
            rule = "positive"
        elif text_key[i] == text_key[positive]:
            rule = "same_text"
        elif cfg.exclude_same_doc and doc_of[i] == doc_of[positive]:
            rule = "same_document"
        elif s > ceiling:
            rule = "above_relative_ceiling"
        if rule is not None:
            dropped.append({"index": i, "score": s, "rank": rank, "rule": rule})
        elif rank >= cfg.window_start:
            kept.append({"index": i, "score": s, "rank": rank})
    if cfg.sample == "top" or len(kept) <= cfg.negatives:
        chosen = kept[: cfg.negatives]
    else:
        pick = np.sort(rng.choice(len(kept), size=cfg.negatives, replace=False))
        chosen = [kept[j] for j in pick]
    return chosen, dropped
