"""Hand-computed cases for ballast.core.metrics (common practice: definitions applied by hand)."""

from __future__ import annotations

from math import log2

import numpy as np
import pytest
from pytest import approx

from ballast.core.metrics import (
    METRICS,
    MetricSpec,
    compute,
    hit_rate_at_k,
    map_at_k,
    mrr_at_k,
    ndcg_at_k,
    parse_metric,
    precision_at_k,
    recall_at_k,
)

# Two queries. q0: relevant a (grade 2), c (grade 1), z (grade 1, never retrieved);
# b is judged non-relevant.
RANKED = [["a", "b", "c", "d"], ["x", "y"]]
QRELS = [{"a": 2, "b": 0, "c": 1, "z": 1}, {"y": 1}]


def test_recall() -> None:
    # common practice: |relevant in top k| / |relevant|
    assert recall_at_k(RANKED, QRELS, 1).tolist() == approx([1 / 3, 0.0])
    assert recall_at_k(RANKED, QRELS, 3).tolist() == approx([2 / 3, 1.0])


def test_precision_divides_by_k() -> None:
    # common practice (trec_eval P_k): divide by k even when fewer than k documents are ranked
    assert precision_at_k(RANKED, QRELS, 2).tolist() == approx([1 / 2, 1 / 2])
    assert precision_at_k(RANKED, QRELS, 4).tolist() == approx([2 / 4, 1 / 4])


def test_mrr() -> None:
    # common practice: 1 / rank of the first relevant document within the top k
    assert mrr_at_k(RANKED, QRELS, 10).tolist() == approx([1.0, 1 / 2])
    assert mrr_at_k(RANKED, QRELS, 1).tolist() == approx([1.0, 0.0])


def test_ndcg_linear_gain_ideal_from_all_judged() -> None:
    # common practice: DCG = sum rel_i / log2(i + 1); ideal ranking of all judged grades is 2, 1, 1
    dcg = 2 + 0 + 1 / log2(4)
    idcg = 2 + 1 / log2(3) + 1 / log2(4)
    assert ndcg_at_k(RANKED, QRELS, 3)[0] == approx(dcg / idcg)
    assert ndcg_at_k(RANKED, QRELS, 2)[0] == approx(2 / (2 + 1 / log2(3)))
    assert ndcg_at_k(RANKED, QRELS, 2)[1] == approx((1 / log2(3)) / 1)


def test_ndcg_binary() -> None:
    # common practice: binary relevance at ranks 1 and 3, two relevant in total
    assert ndcg_at_k([["a", "b", "c"]], [{"a": 1, "c": 1}], 3)[0] == approx(
        (1 + 1 / log2(4)) / (1 + 1 / log2(3))
    )


def test_map_divides_by_all_relevant() -> None:
    # common practice (trec_eval map_cut): precision at relevant ranks 1 and 3 / all 3 relevant
    assert map_at_k(RANKED, QRELS, 4)[0] == approx((1 / 1 + 2 / 3) / 3)
    assert map_at_k(RANKED, QRELS, 2)[0] == approx((1 / 1) / 3)
    assert map_at_k(RANKED, QRELS, 2)[1] == approx((1 / 2) / 1)


def test_hit_rate() -> None:
    # common practice: 1 if any relevant document is in the top k
    assert hit_rate_at_k(RANKED, QRELS, 1).tolist() == [1.0, 0.0]
    assert hit_rate_at_k(RANKED, QRELS, 2).tolist() == [1.0, 1.0]


def test_no_relevant_and_negative_grades_are_zero() -> None:
    ranked, qrels = [["a", "b"]], [{"a": 0, "b": -1}]
    for name in METRICS:
        assert compute([f"{name}@2"], ranked, qrels)[f"{name}@2"].tolist() == [0.0]


def test_empty_ranking_and_empty_queries() -> None:
    assert recall_at_k([[]], [{"a": 1}], 5).tolist() == [0.0]
    out = ndcg_at_k([], [], 5)
    assert out.dtype == np.float64 and out.shape == (0,)


def test_returns_float64_arrays() -> None:
    out = compute(["ndcg@3", MetricSpec("recall", 2)], RANKED, QRELS)
    assert list(out) == ["ndcg@3", "recall@2"]
    assert all(v.dtype == np.float64 and v.shape == (2,) for v in out.values())
    assert out["recall@2"].tolist() == approx(recall_at_k(RANKED, QRELS, 2).tolist())


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ("nDCG@10", MetricSpec("ndcg", 10)),
        (" recall@100 ", MetricSpec("recall", 100)),
        ("HIT_RATE@5", MetricSpec("hit_rate", 5)),
    ],
)
def test_parse_metric(text: str, expected: MetricSpec) -> None:
    assert parse_metric(text) == expected


def test_str_round_trips() -> None:
    for name in METRICS:
        assert str(parse_metric(f"{name}@7")) == f"{name}@7"
        assert parse_metric(str(MetricSpec(name, 3))) == MetricSpec(name, 3)


@pytest.mark.parametrize(
    "text",
    [
        "ndcg",
        "ndcg@0",
        "ndcg@-1",
        "ndcg@1.5",
        "bleu@10",
        "@10",
        "ndcg@",
        "ndcg @10",
        "ndcg@10x",
        "",
    ],
)
def test_parse_metric_rejects(text: str) -> None:
    with pytest.raises(ValueError, match=r"name@k.*positive integer") as info:
        parse_metric(text)
    assert all(name in str(info.value) for name in METRICS)


def test_parse_metric_rejects_non_string() -> None:
    with pytest.raises(ValueError, match="name@k"):
        parse_metric(10)  # type: ignore[arg-type]


@pytest.mark.parametrize(
    ("name", "k"), [("bleu", 10), ("ndcg", 0), ("ndcg", -3), ("ndcg", 2.0), ("ndcg", True)]
)
def test_metric_spec_rejects(name: str, k: object) -> None:
    with pytest.raises(ValueError):
        MetricSpec(name, k)  # type: ignore[arg-type]


@pytest.mark.parametrize("k", [0, -1, 1.0, None])
def test_bad_k(k: object) -> None:
    with pytest.raises(ValueError, match="k must be an integer >= 1"):
        ndcg_at_k(RANKED, QRELS, k)  # type: ignore[arg-type]


def test_mismatched_lengths() -> None:
    with pytest.raises(ValueError, match="ranked has 2 queries but qrels has 1"):
        recall_at_k(RANKED, QRELS[:1], 5)
    with pytest.raises(ValueError, match="expected equal lengths"):
        compute(["mrr@5"], RANKED[:1], QRELS)


def test_bad_query_entries() -> None:
    with pytest.raises(ValueError, match="duplicate"):
        mrr_at_k([["a", "a"]], [{"a": 1}], 5)
    with pytest.raises(ValueError, match=r"ranked\[0\] must be a sequence"):
        mrr_at_k(["abc"], [{"a": 1}], 5)
    with pytest.raises(ValueError, match=r"qrels\[0\] must be a mapping"):
        mrr_at_k([["a"]], [["a"]], 5)  # type: ignore[list-item]


def test_only_top_k_checked_for_duplicates() -> None:
    # ids past the cutoff do not count at all
    assert hit_rate_at_k([["b", "a", "a"]], [{"a": 1}], 1).tolist() == [0.0]


def test_accepts_numpy_id_arrays() -> None:
    # common practice: a numpy array of ids ranks the same as the list
    ranked = [np.array(ids) for ids in RANKED]
    assert ndcg_at_k(ranked, QRELS, 3).tolist() == ndcg_at_k(RANKED, QRELS, 3).tolist()
