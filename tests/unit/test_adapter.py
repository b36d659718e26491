"""ballast.stages.train.adapter: the residual linear map on frozen embeddings (common practice:
identity
initialisation of a residual map, MultipleNegativesRankingLoss's in-batch softmax; the planted
distortion is a synthetic check that the map can undo a linear change of the query space)."""

from __future__ import annotations

import numpy as np
import pytest

from ballast.core.scoring import apply, transform
from ballast.models.query_map import (
    ADAPTER_FILE,
    adapter_facts,
    query_adapter,
    save_adapter,
)
from ballast.stages.train.adapter import init_params, matrix, train_adapter


def _unit(x: np.ndarray) -> np.ndarray:
    return (x / np.linalg.norm(x, axis=1, keepdims=True)).astype(np.float32)


def _planted(n: int, dim: int, seed: int, rank: int = 0) -> tuple[np.ndarray, np.ndarray]:
    """Passages, and queries that are noisy copies of them seen through a fixed distortion
    (a dense one, or identity plus a rank-``rank`` term)."""
    rng = np.random.default_rng(seed)
    p = _unit(rng.standard_normal((n, dim)))
    fixed = np.random.default_rng(99)
    if rank:
        a, b = fixed.standard_normal((dim, rank)), fixed.standard_normal((dim, rank))
        mix = np.eye(dim) + a @ b.T / np.sqrt(rank)
    else:
        mix = fixed.standard_normal((dim, dim)) * 0.9 + np.eye(dim) * 0.3
    q_true = _unit(p + 0.35 * rng.standard_normal((n, dim)))
    return _unit(q_true @ mix.T), p


def _accuracy(q: np.ndarray, p: np.ndarray) -> float:
    return float(np.mean(np.argmax(q @ p.T, axis=1) == np.arange(len(q))))


@pytest.mark.parametrize("rank", [0, 4])
def test_identity_init_gives_base_embeddings_exactly(rank: int) -> None:
    import torch

    w = matrix(init_params(16, rank, torch.Generator().manual_seed(0))).detach().numpy()
    assert np.array_equal(w, np.eye(16, dtype=np.float32))
    e = _unit(np.random.default_rng(0).standard_normal((5, 16)))
    assert np.array_equal(transform(e, w), e)
    assert np.allclose(apply(e, w), e, atol=1e-7)  # normalising a unit vector again


def _fit(q, p, side: str, rank: int = 0, epochs: int = 40, seed: int = 0):
    n = len(q)
    return train_adapter(
        q,
        p,
        np.zeros((n, 0, q.shape[1]), np.float32),
        np.arange(n),
        np.zeros((n, 0), np.int64),
        side=side,
        rank=rank,
        epochs=epochs,
        batch_size=32,
        learning_rate=1e-2,
        seed=seed,
    )


def test_training_recovers_a_planted_distortion() -> None:
    q_train, p_train = _planted(600, 24, seed=1)
    q_test, p_test = _planted(300, 24, seed=2)
    base = _accuracy(q_test, p_test)
    w, stats = _fit(q_train, p_train, "query")
    tuned = _accuracy(apply(q_test, w), p_test)
    assert tuned > base + 0.2, (base, tuned)
    assert stats["loss_history"][-1]["loss"] < stats["loss_history"][0]["loss"]


def test_low_rank_adapter_also_learns() -> None:
    q_train, p_train = _planted(600, 24, seed=1, rank=4)
    q_test, p_test = _planted(300, 24, seed=2, rank=4)
    w, _ = _fit(q_train, p_train, "query", rank=8)
    assert np.linalg.matrix_rank(w - np.eye(24), tol=1e-5) <= 8
    assert _accuracy(apply(q_test, w), p_test) > _accuracy(q_test, p_test) + 0.1


def test_same_seed_same_matrix() -> None:
    q, p = _planted(200, 16, seed=3)
    a, _ = _fit(q, p, "query", rank=4, epochs=3, seed=5)
    b, _ = _fit(q, p, "query", rank=4, epochs=3, seed=5)
    assert np.array_equal(a, b)


def test_query_side_keeps_passage_embeddings(tmp_path) -> None:
    q, p = _planted(200, 16, seed=4)
    w, _ = _fit(q, p, "query", epochs=3)
    save_adapter(tmp_path / ADAPTER_FILE, w, side="query", rank=0)
    got = query_adapter(tmp_path)
    assert got is not None and np.array_equal(got, w)
    facts = adapter_facts(tmp_path)
    # in the model's query route (a Router the train stage writes); the note says who applies it
    assert facts["side"] == "query" and facts["dim"] == 16 and facts["in_model"]
    assert "encode_query" in facts["note"]
    assert len(facts["sha256"]) == 64
    # only queries are mapped: mapped queries ranked against the base passages (the index as it
    # stands) find their planted partners better than the unmapped queries do
    assert _accuracy(apply(q, w), p) > _accuracy(q, p)


def test_both_sides_adapter_is_not_applied_again_to_queries(tmp_path) -> None:
    w = np.eye(8, dtype=np.float32) * 2
    save_adapter(tmp_path / ADAPTER_FILE, w, side="both", rank=0)
    assert query_adapter(tmp_path) is None  # it lives inside the model as a Dense module
    assert adapter_facts(tmp_path)["in_model"]


def test_no_adapter_file() -> None:
    from pathlib import Path

    assert query_adapter(Path("/nonexistent")) is None
    assert adapter_facts(Path("/nonexistent")) is None


def test_hard_negative_that_is_another_rows_positive_is_masked() -> None:
    # two rows share one positive text (id 0): neither may count the other's copy as a negative,
    # so the loss at the identity is log(number of other distinct docs + 1), not more
    import torch

    from ballast.stages.train.adapter import _batch_loss

    q = torch.eye(3)[:2]
    docs = torch.eye(3)[[0, 0]]
    ids = torch.tensor([0, 0])
    mask = ids[None, :] == ids[:, None]
    mask[torch.arange(2), torch.arange(2)] = False
    loss = _batch_loss(torch.eye(3), q, docs, mask, both=False)
    # row 0 sees only its own positive: loss 0; row 1 (query e1) scores 0 against its positive
    # e0 and the masked copy is gone: loss 0 as well (a single candidate)
    assert float(loss) == pytest.approx(0.0, abs=1e-6)


def _fit_scored(q, p, score, epochs: int = 8, patience: int = 0):
    n = len(q)
    return train_adapter(
        q,
        p,
        np.zeros((n, 0, q.shape[1]), np.float32),
        np.arange(n),
        np.zeros((n, 0), np.int64),
        side="query",
        rank=0,
        epochs=epochs,
        batch_size=32,
        learning_rate=1e-2,
        seed=0,
        score=score,
        patience=patience,
    )


def test_a_map_that_loses_on_dev_is_never_kept() -> None:
    # the score prefers the identity (any change costs): the identity is what comes back
    q, p = _planted(200, 16, seed=6)
    w, stats = _fit_scored(q, p, lambda w: -float(np.abs(w - np.eye(len(w))).sum()))
    assert np.array_equal(w, np.eye(16, dtype=np.float32))
    assert stats["best_epoch"] == 0 and stats["epochs_run"] == 8 and not stats["stopped_early"]
    assert [h["epoch"] for h in stats["dev_history"]] == list(range(9))


def test_the_best_dev_epoch_is_kept_and_patience_stops() -> None:
    q_train, p_train = _planted(600, 24, seed=1)
    q_dev, p_dev = _planted(300, 24, seed=2)
    seen: list[np.ndarray] = []

    def dev_accuracy(w: np.ndarray) -> float:
        seen.append(w.copy())
        return _accuracy(apply(q_dev, w), p_dev)

    w, stats = _fit_scored(q_train, p_train, dev_accuracy, epochs=40)
    scores = [h["score"] for h in stats["dev_history"]]
    assert stats["best_epoch"] == int(np.argmax(scores)) > 0
    assert np.array_equal(w, seen[stats["best_epoch"]])
    assert stats["dev_score"] > stats["dev_identity"] + 0.2
    # a score that only falls: stop after `patience` epochs without a gain
    _, stats = _fit_scored(q_train, p_train, lambda w: -float(np.abs(w).sum()), patience=3)
    assert stats["best_epoch"] == 0 and stats["epochs_run"] == 3 and stats["stopped_early"]


def test_dev_scorer_ranks_like_evaluate() -> None:
    # two queries, three passages: the identity ranks each query's passage first (nDCG@10 = 1);
    # a map swapping the first two axes sends query 0 to passage 1 (its passage then at rank
    # 2: nDCG = 1/log2(3), the textbook discount of Jarvelin & Kekalainen 2002)
    from ballast.stages.train.adapter import dev_scorer

    p = np.eye(3, dtype=np.float32)
    q = _unit(np.array([[1.0, 0.5, 0], [0, 0, 1.0]], np.float32))
    score = dev_scorer(q, p, ["a", "b", "c"], [{"a": 1}, {"c": 1}], "ndcg@10", "query")
    assert score(np.eye(3, dtype=np.float32)) == pytest.approx(1.0)
    swap = np.eye(3, dtype=np.float32)[[1, 0, 2]]
    assert score(swap) == pytest.approx((1 / np.log2(3) + 1) / 2)
    both = dev_scorer(q, p, ["a", "b", "c"], [{"a": 1}, {"c": 1}], "ndcg@10", "both")
    assert both(swap) == pytest.approx(1.0)  # mapping the passages too undoes the swap
