"""The safety net (WiSE-FT, Wortsman et al., CVPR 2022): interpolated weights are exact
arithmetic of the two models', and the weight kept is the one the dev queries score best,
the base model (weight 0) included, so a tuned model worse than the base on dev never ships.
The models are planted: their embeddings are a known function of one weight."""

from __future__ import annotations

import numpy as np
import pytest
import torch

from ballast.stages.train.full import DevSet
from ballast.stages.train.mix import choose_weight, interpolate, keep_best, search

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
    net = choose_weight(base, tuned, dev(), (0.0, 0.5, 1.0), base_passages=base_passages)
    best, scores = net["weight"], net["dev_scores"]
    assert best == expected and net["candidates"] == N
    assert float(tuned.params["w"]) == pytest.approx(0.3 * (1 - best) + tuned_w * best)
    if expected == 0.0:  # a tuned model worse than the base: the base ships
        assert scores["0"] > scores["1"]
    else:
        assert scores["1"] > scores["0.5"] > scores["0"]


def test_ties_go_to_the_smaller_weight() -> None:
    base, tuned = Planted(1.0), Planted(1.0)
    net = choose_weight(base, tuned, dev(), (0.0, 0.5, 1.0), base_passages=base.encode(TEXTS),
                        descend=True)  # fmt: skip
    scores = net["dev_scores"]
    assert len(scores) == 3 and len(set(scores.values())) == 1 and net["weight"] == 0.0


WEIGHTS = (0.0, 0.25, 0.5, 0.75, 1.0)


@pytest.mark.parametrize(
    ("curve", "scored_all", "scored_descending"),
    [
        # one peak at 0.5: descending stops at 0.25, the first weight past the peak
        ({0: 0.70, 0.25: 0.74, 0.5: 0.76, 0.75: 0.75, 1: 0.72}, 5, 5),
        # rising to 1, the usual curve with enough pairs (docs/scale.md): two weights scored
        ({0: 0.66, 0.25: 0.72, 0.5: 0.76, 0.75: 0.79, 1: 0.81}, 5, 3),
        # flat: ties go on down (a tie is not a fall)
        ({0: 0.8, 0.25: 0.8, 0.5: 0.8, 0.75: 0.8, 1: 0.8}, 5, 5),
    ],
)
def test_descending_search_keeps_the_peak_of_a_single_peaked_curve(
    curve: dict, scored_all: int, scored_descending: int
) -> None:
    every = search(WEIGHTS, curve.__getitem__, descend=False)
    fewer = search(WEIGHTS, curve.__getitem__, descend=True)
    assert (len(every), len(fewer)) == (scored_all, scored_descending)
    assert max(every, key=lambda w: (every[w], -w)) == max(fewer, key=lambda w: (fewer[w], -w))
    assert 0.0 in fewer  # the base is always scored: a tuned model worse on dev never ships


def test_descending_search_misses_a_second_peak_which_all_finds() -> None:
    # a curve with two peaks, as a small dev set gave (tests' 20-query runs): descending stops
    # at 0.5 and keeps the base, which still beats every weight it scored; "all" finds 0.25
    curve = {0: 0.871, 0.25: 0.886, 0.5: 0.852, 0.75: 0.866, 1: 0.839}
    fewer = search(WEIGHTS, curve.__getitem__, descend=True)
    assert sorted(fewer) == [0.0, 0.5, 0.75, 1.0]
    assert max(fewer, key=fewer.__getitem__) == 0.0
    every = search(WEIGHTS, curve.__getitem__, descend=False)
    assert max(every, key=every.__getitem__) == 0.25


class RosyUnderBf16(Planted):
    """Under bfloat16 autocast its queries land on their passages (a flattering rounding);
    in float32 it is the planted model of weight ``w``."""

    def encode(self, texts: list[str], **kw: object) -> np.ndarray:
        if torch.is_autocast_enabled("cpu"):
            return Planted(1.0).encode(texts)
        return super().encode(texts, **kw)


@pytest.mark.parametrize("base_bf16", [False, True])
@pytest.mark.parametrize(("tuned_w", "kept"), [(0.1, 0.0), (1.0, 1.0)])
def test_a_close_bf16_win_is_checked_in_float32(
    monkeypatch: pytest.MonkeyPatch, tuned_w: float, kept: float, base_bf16: bool
) -> None:
    import ballast.stages.train.mix as mix

    monkeypatch.setattr(mix, "CLOSE", 2.0)  # every win counts as close
    base = Planted(0.5)
    net = choose_weight(base, RosyUnderBf16(tuned_w), dev(), (0.0, 1.0),
                        base_passages=base.encode(TEXTS), base_bf16=base_bf16,
                        bf16=True)  # fmt: skip
    assert net["precision"] == "bfloat16" and net["dev_scores"]["1"] == 1.0  # flattered
    check = net["float32_check"]
    # a base given in bfloat16 is scored again in float32 for the check (here the same)
    assert list(check) == (["0", "1"] if base_bf16 else ["1"]) and net["weight"] == kept
    assert check.get("0", net["dev_scores"]["0"]) == net["dev_scores"]["0"]
    assert (check["1"] > net["dev_scores"]["0"]) == (kept == 1.0)


def test_a_close_win_refuted_in_float32_falls_to_the_next_best_not_the_base() -> None:
    # a 27-query dev curve in bfloat16 (the two-process training test): 0.25 wins by 0.0032,
    # float32 has it below the base; 0.5 wins by 0.0021 and holds in float32
    scores = {0.0: 0.880149, 0.25: 0.883375, 0.5: 0.88224, 0.75: 0.840385, 1.0: 0.821204}
    exact = {0.25: 0.878525, 0.5: 0.88224}
    best, checked = keep_best(scores, exact.__getitem__, close=0.005)
    assert best == 0.5 and checked == exact
    assert keep_best(scores, lambda w: 0.0, close=0.005) == (0.0, {0.25: 0.0, 0.5: 0.0})
    assert keep_best(scores, exact.__getitem__, close=0) == (0.25, {})  # float32: no check


def test_a_float32_check_scores_a_bfloat16_base_in_float32_too() -> None:
    # the base scored in bfloat16 (evaluate.bf16) is not what a float32 check compares with:
    # 0.25 beats the base's bfloat16 score in float32 (0.801 > 0.800) but not its float32 one
    scores = {0.0: 0.800, 0.25: 0.803, 1.0: 0.790}
    exact = {0.0: 0.802, 0.25: 0.801}
    assert keep_best(scores, exact.__getitem__, close=0.005) == (0.25, {0.25: 0.801})
    assert keep_best(scores, exact.__getitem__, close=0.005, base_exact=False) == (
        0.0, {0.0: 0.802, 0.25: 0.801})  # fmt: skip
    # no close call, no float32 base
    assert keep_best({0.0: 0.8, 1.0: 0.9}, exact.__getitem__, close=0.005, base_exact=False) == (
        1.0, {})  # fmt: skip
