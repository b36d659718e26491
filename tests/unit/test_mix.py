"""The safety net (WiSE-FT, Wortsman et al., CVPR 2022): interpolated weights are exact
arithmetic of the two models', and the weight kept is the one the dev queries score best,
the base model (weight 0) included, so a tuned model worse than the base on dev never ships.
The models are planted: their embeddings are a known function of one weight."""

from __future__ import annotations

import numpy as np
import pytest
import torch

from ballast.stages.train.full import DevSet
from ballast.stages.train.mix import choose_weight, interpolate

N, DIM = 60, 16
rng = np.random.default_rng(7)
GOOD = rng.normal(size=(N, DIM))  # passage vectors; the query of passage i is near GOOD[i]
NOISE = rng.normal(size=(N, DIM))
TEXTS = [f"p{i}" for i in range(N)]
QUERIES = [f"q{i}" for i in range(N)]


class Planted:
    """A model whose single parameter ``w`` moves its queries from noise (w = 0) to their
    passages (w = 1): retrieval quality grows with w."""

    def __init__(self, w: float) -> None:
        self.params = {"w": torch.tensor(float(w)), "step": torch.tensor(3)}

    def state_dict(self) -> dict:
        return dict(self.params)

    def load_state_dict(self, sd: dict) -> None:
        self.params = dict(sd)

    def get_embedding_dimension(self) -> int:
        return DIM

    def encode(self, texts: list[str], **_: object) -> np.ndarray:
        w = float(self.params["w"])
        rows = []
        for t in texts:
            i = int(t[1:])
            v = GOOD[i] if t[0] == "p" else w * GOOD[i] + (1 - w) * 3 * NOISE[i]
            rows.append(v / np.linalg.norm(v))
        return np.asarray(rows, dtype=np.float32)


def dev() -> DevSet:
    return DevSet(QUERIES, [{f"p{i}": 1} for i in range(N)], TEXTS, TEXTS, "ndcg@10", 16)


def test_interpolation_is_exact_and_leaves_integer_buffers_alone() -> None:
    base = {"a": torch.tensor([0.0, 2.0]), "ids": torch.tensor([1, 2])}
    tuned = {"a": torch.tensor([4.0, 6.0]), "ids": torch.tensor([1, 2])}
    mixed = interpolate(base, tuned, 0.25)
    assert torch.equal(mixed["a"], torch.tensor([1.0, 3.0]))  # 0.75 * base + 0.25 * tuned
    assert torch.equal(mixed["ids"], tuned["ids"])


@pytest.mark.parametrize(("tuned_w", "expected"), [(1.0, 1.0), (0.0, 0.0)])
def test_the_best_dev_weight_is_kept(tuned_w: float, expected: float) -> None:
    base, tuned = Planted(0.3), Planted(tuned_w)
    base_passages = base.encode(TEXTS)
    best, scores, candidates = choose_weight(
        base, tuned, dev(), (0.0, 0.5, 1.0), base_passages=base_passages
    )
    assert best == expected and candidates == N
    assert float(tuned.params["w"]) == pytest.approx(0.3 * (1 - best) + tuned_w * best)
    if expected == 0.0:  # a tuned model worse than the base: the base ships
        assert scores["0"] > scores["1"]
    else:
        assert scores["1"] > scores["0.5"] > scores["0"]


def test_ties_go_to_the_smaller_weight() -> None:
    base, tuned = Planted(1.0), Planted(1.0)
    best, scores, _ = choose_weight(base, tuned, dev(), (0.0, 0.5, 1.0),
                                    base_passages=base.encode(TEXTS))  # fmt: skip
    assert len(set(scores.values())) == 1 and best == 0.0
