"""The gate on planted answers: rankings made from embeddings whose quality is known by
construction (query = relevant passage + noise; less noise is a truly better model).

Real search, real metrics and real statistics run end to end on these; only the models are
planted. Common practice for testing a decision rule: it must say no to no change and to a
worse model, yes to a better one, and no when one split gets worse.
"""

from __future__ import annotations

import numpy as np

from ballast.config import GateConfig
from ballast.core.gate import decide
from ballast.core.metrics import compute
from ballast.core.scoring import rank
from ballast.stages.evaluate.compute import summarise_split

N_PASSAGES, DIM, N_QUERIES = 300, 24, 120
METRICS = ["ndcg@10", "mrr@10"]
rng = np.random.default_rng(2024)
P = rng.normal(size=(N_PASSAGES, DIM))
P /= np.linalg.norm(P, axis=1, keepdims=True)
IDS = [f"p{i:04d}" for i in range(N_PASSAGES)]


def queries(split_seed: int, noise: float) -> tuple[np.ndarray, list[dict[str, int]]]:
    g = np.random.default_rng(split_seed)
    rel = g.integers(N_PASSAGES, size=N_QUERIES)
    direction = g.normal(size=(N_QUERIES, DIM))  # the same noise direction for every model
    q = P[rel] + noise * direction / np.sqrt(DIM)
    q /= np.linalg.norm(q, axis=1, keepdims=True)
    return q, [{IDS[r]: 1} for r in rel]


def per_query(split_seed: int, noise: float) -> dict[str, np.ndarray]:
    q, qrels = queries(split_seed, noise)
    ranked, _ = rank(q.astype(np.float32), P.astype(np.float32), IDS, 10)
    return compute(METRICS, ranked, qrels)


def summary(noise_by_split: dict[str, tuple[float, float]]) -> dict:
    splits = {}
    for j, (split, (base, tuned)) in enumerate(noise_by_split.items()):
        seed = 100 + j
        splits[split] = summarise_split(
            {"base": per_query(seed, base), "tuned": per_query(seed, tuned)},
            ["synthetic"] * N_QUERIES, METRICS, baseline="base", seed=j, resamples=2000,
            confidence=0.95)
    return {"splits": splits}


CFG = GateConfig(splits=("test", "human"), primary_metric="ndcg@10", min_gain=0.0)
BASE, BETTER, WORSE = 3.0, 1.8, 4.5


def test_base_against_itself_fails() -> None:
    out = decide(summary({"test": (BASE, BASE), "human": (BASE, BASE)}), CFG)
    assert out["passed"] is False
    for s in out["splits"]:
        assert s["gain"] == 0.0 and s["ci_low"] == 0.0 and s["p_value"] == 1.0
        assert "does not lie above zero" in s["reason"]


def test_degraded_model_fails() -> None:
    out = decide(summary({"test": (BASE, WORSE), "human": (BASE, WORSE)}), CFG)
    assert out["passed"] is False
    assert all(s["gain"] < 0 and s["ci_high"] < 0 for s in out["splits"])


def test_truly_better_model_passes() -> None:
    out = decide(summary({"test": (BASE, BETTER), "human": (BASE, BETTER)}), CFG)
    assert out["passed"] is True, out["summary"]
    assert all(s["ci_low"] > 0 and s["p_holm"] <= 0.05 for s in out["splits"])


def test_better_on_test_worse_on_human_fails_and_says_so() -> None:
    out = decide(summary({"test": (BASE, BETTER), "human": (BASE, WORSE)}), CFG)
    assert out["passed"] is False
    test, human = out["splits"]
    assert test["passed"] is True and human["passed"] is False
    assert "human" in out["summary"] and "test" not in out["summary"].split("split(s)")[1]
    assert "fell by" in human["reason"]


REAL = GateConfig(splits=("human", "human_heldout"), primary_metric="ndcg@10", min_gain=0.0)


def test_heldout_real_questions_that_get_worse_fail_the_gate() -> None:
    """A model that gains on questions about its training documents but loses on questions
    about documents it never saw must not ship (non-inferiority on human_heldout)."""
    out = decide(summary({"human": (BASE, BETTER), "human_heldout": (BASE, WORSE)}), REAL)
    assert out["passed"] is False and out["evidence"] == "real"
    human, heldout = out["splits"]
    assert human["passed"] and human["rule"] == "superiority"
    assert not heldout["passed"] and heldout["rule"] == "non-inferiority"
    assert heldout["ci_low"] < -REAL.heldout_tolerance and "reaches below" in heldout["reason"]
    assert "human_heldout" in out["summary"]


def test_heldout_that_holds_passes_on_real_evidence() -> None:
    out = decide(summary({"human": (BASE, BETTER), "human_heldout": (BASE, BASE)}), REAL)
    assert out["passed"] is True and out["evidence"] == "real"
    assert out["summary"].startswith("PASS on real questions")
    assert "does not lose on human_heldout" in out["summary"]
    heldout = out["splits"][1]
    assert heldout["p_holm"] is None  # no Holm correction for a non-inferiority split


def test_a_synthetic_pass_is_never_a_plain_pass() -> None:
    cfg = GateConfig(splits=("test",), primary_metric="ndcg@10", min_gain=0.0)
    out = decide(summary({"test": (BASE, BETTER)}), cfg)
    assert out["passed"] is True and out["evidence"] == "synthetic"
    assert out["summary"].startswith("PASS ON SYNTHETIC QUERIES ONLY")
    assert "no real question checked it" in out["summary"]
