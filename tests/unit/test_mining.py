"""ballast.mining.mine_one: positive-aware hard-negative mining (Moreira et al. 2024, "NV-Retriever:
Improving text embedding models with effective hard-negative mining": drop candidates scoring
above a fraction of the positive's score), inside a rank window of the base ranking."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from ballast.config import MineConfig
from ballast.mining import mine_one


def oracle(ranked, scores, positive, positive_score, doc_of, text_key, cfg) -> list[dict]:
    """The eligible candidates, in rank order, straight from MineConfig's documentation."""
    out = []
    for rank, (i, s) in enumerate(zip(ranked, scores, strict=True)):
        if not cfg.window_start <= rank < cfg.window_end:
            continue
        if i == positive or text_key[i] == text_key[positive]:
            continue
        if cfg.exclude_same_doc and doc_of[i] == doc_of[positive]:
            continue
        if s > cfg.max_relative * positive_score:
            continue
        out.append({"index": i, "score": s, "rank": rank})
    return out


@st.composite
def cases(draw):
    n = draw(st.integers(1, 30))
    raw = draw(st.lists(st.integers(0, 20), min_size=n, max_size=n))
    scores_by_index = np.array(raw, dtype=np.float64) / 20  # round numbers: ties and equalities
    ranked = np.array(sorted(range(n), key=lambda i: (-scores_by_index[i], i)), dtype=np.int64)
    positive = draw(st.integers(0, n - 1))
    doc_of = [f"d{draw(st.integers(0, 3))}" for _ in range(n)]
    text_key = [f"t{draw(st.integers(0, n))}" for _ in range(n)]
    start = draw(st.integers(0, 10))
    cfg = MineConfig(
        negatives=draw(st.integers(0, 8)),
        window_start=start,
        window_end=draw(st.integers(start + 1, 35)),
        max_relative=draw(st.sampled_from([0.5, 0.9, 0.95, 1.0])),
        sample=draw(st.sampled_from(["random", "top"])),
        exclude_same_doc=draw(st.booleans()),
    )
    return (
        ranked,
        scores_by_index[ranked],
        positive,
        float(scores_by_index[positive]),
        doc_of,
        text_key,
        cfg,
    )


def run(case, seed: int = 0):
    ranked, scores, positive, pos_score, doc_of, text_key, cfg = case
    return mine_one(
        ranked,
        scores,
        positive,
        pos_score,
        doc_of=doc_of,
        text_key=text_key,
        cfg=cfg,
        rng=np.random.default_rng(seed),
    )


@given(cases(), st.integers(0, 2**32 - 1))
@settings(max_examples=300, deadline=None)
def test_negatives_obey_every_rule(case, seed: int) -> None:
    ranked, scores, positive, pos_score, doc_of, text_key, cfg = case
    chosen, dropped = run(case, seed)
    eligible = oracle(ranked.tolist(), scores.tolist(), positive, pos_score, doc_of, text_key, cfg)
    assert len(chosen) == min(cfg.negatives, len(eligible))
    assert all(c in eligible for c in chosen)
    assert [c["rank"] for c in chosen] == sorted({c["rank"] for c in chosen})  # rank order, once
    for c in chosen:
        assert c["index"] != positive
        assert text_key[c["index"]] != text_key[positive]
        assert c["score"] <= cfg.max_relative * pos_score
        assert cfg.window_start <= c["rank"] < cfg.window_end
        if cfg.exclude_same_doc:
            assert doc_of[c["index"]] != doc_of[positive]
    if cfg.sample == "top":
        assert chosen == eligible[: cfg.negatives]
    # every dropped candidate is inside the window's end and carries the first rule it broke
    for d in dropped:
        assert d["rank"] < cfg.window_end
        i = d["index"]
        want = (
            "positive"
            if i == positive
            else "same_text"
            if text_key[i] == text_key[positive]
            else "same_document"
            if cfg.exclude_same_doc and doc_of[i] == doc_of[positive]
            else "above_relative_ceiling"
        )
        assert d["rule"] == want
        assert want != "above_relative_ceiling" or d["score"] > cfg.max_relative * pos_score


@given(cases(), st.integers(0, 2**32 - 1))
@settings(max_examples=100, deadline=None)
def test_same_seed_same_negatives(case, seed: int) -> None:
    assert run(case, seed) == run(case, seed)


def _fixed(cfg: MineConfig):
    # ten candidates, scores 0.9, 0.8, ... 0.0; the positive is index 0 with score 1.0
    ranked = np.arange(1, 11)
    scores = np.array([0.9 - 0.1 * r for r in range(10)])
    doc_of = ["a"] + ["a", "b"] * 5
    text_key = [f"t{i}" for i in range(11)]
    return ranked, scores, 0, 1.0, doc_of, text_key, cfg


def test_top_takes_the_best_eligible() -> None:
    cfg = MineConfig(negatives=3, window_start=1, window_end=30, max_relative=0.85, sample="top")
    chosen, dropped = run(_fixed(cfg))
    # rank 0 (score 0.9 > 0.85) is dropped; rank 1 and up are in the window
    assert [c["index"] for c in chosen] == [2, 3, 4]
    assert [(d["index"], d["rule"]) for d in dropped] == [(1, "above_relative_ceiling")]


def test_random_samples_within_the_window() -> None:
    cfg = MineConfig(negatives=2, window_start=2, window_end=6, max_relative=1.0, sample="random")
    seen = set()
    for seed in range(60):
        chosen, _ = run(_fixed(cfg), seed)
        ranks = [c["rank"] for c in chosen]
        assert len(ranks) == 2 and all(2 <= r < 6 for r in ranks) and ranks == sorted(ranks)
        seen.update(ranks)
    assert seen == {2, 3, 4, 5}  # not just the top of the window
    one = run(_fixed(cfg), 1)[0]
    assert any(run(_fixed(cfg), s)[0] != one for s in range(2, 10))


def test_window_end_stops_the_scan() -> None:
    cfg = MineConfig(negatives=10, window_start=0, window_end=3, max_relative=1.0, sample="top")
    chosen, dropped = run(_fixed(cfg))
    assert [c["rank"] for c in chosen] == [0, 1, 2] and dropped == []


def test_positive_and_same_text_are_dropped() -> None:
    ranked, scores, _, _, doc_of, text_key, _ = _fixed(MineConfig())
    text_key = list(text_key)
    text_key[3] = text_key[1]  # index 3 copies the positive's (index 1's) text
    cfg = MineConfig(negatives=2, max_relative=1.0, sample="top")
    chosen, dropped = mine_one(
        ranked, scores, 1, 0.9, doc_of=doc_of, text_key=text_key, cfg=cfg,
        rng=np.random.default_rng(0),
    )  # fmt: skip
    assert [(d["index"], d["rule"]) for d in dropped] == [(1, "positive"), (3, "same_text")]
    assert [c["index"] for c in chosen] == [2, 4]


@pytest.mark.parametrize("exclude", [False, True])
def test_exclude_same_doc(exclude: bool) -> None:
    cfg = MineConfig(negatives=3, max_relative=1.0, sample="top", exclude_same_doc=exclude)
    chosen, dropped = run(_fixed(cfg))
    # the positive (index 0) is in document 'a', as are odd indices 1, 3, 5, ...
    if exclude:
        assert [c["index"] for c in chosen] == [2, 4, 6]
        assert {d["rule"] for d in dropped} == {"same_document"}
    else:
        assert [c["index"] for c in chosen] == [1, 2, 3]
        assert dropped == []


def test_zero_negatives() -> None:
    chosen, _ = run(_fixed(MineConfig(negatives=0)))
    assert chosen == []
