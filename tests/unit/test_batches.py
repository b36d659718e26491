"""Length-bucketed batches (stages/train/batches.py): every example once an epoch, no text twice
in a batch, seeded, and fewer pad tokens than random batches. The bucketing is the mega-batch
grouping of transformers' LengthGroupedSampler (common practice); the pad count is worked by
hand."""

from __future__ import annotations

import numpy as np
import pytest

from ballast.stages.train.batches import pad_share, plan


def test_pad_share_worked_by_hand() -> None:
    # one batch of two examples, two columns: padded to 5 and 10 tokens, 8 pad tokens of 30
    lengths = np.array([[3, 10], [5, 4]])
    assert pad_share([[0, 1]], lengths) == pytest.approx(8 / 30)
    assert pad_share([[0], [1]], lengths) == 0.0


def _corpus(n: int = 700, seed: int = 1) -> tuple[np.ndarray, list[set[str]]]:
    rng = np.random.default_rng(seed)
    cols = np.stack([rng.integers(5, 20, n), rng.integers(8, 129, n)], axis=1)
    # every fifth example shares its positive with the one before: duplicates to keep apart
    texts = [{f"q{i}", f"p{i - (i % 5 == 4)}"} for i in range(n)]
    return cols, texts


@pytest.mark.parametrize("buckets", [False, True])
def test_each_example_once_and_no_duplicate_text_in_a_batch(buckets: bool) -> None:
    cols, texts = _corpus()
    batches = plan(cols.sum(axis=1), texts, 32, np.random.default_rng(3), buckets=buckets)
    flat = sorted(i for b in batches for i in b)
    assert flat == list(range(len(cols)))
    assert all(len(b) <= 32 for b in batches)
    for b in batches:
        seen = [t for i in b for t in texts[i]]
        assert len(seen) == len(set(seen))


def test_buckets_are_seeded_and_pad_less_than_random_batches() -> None:
    cols, texts = _corpus()
    one = plan(cols.sum(axis=1), texts, 32, np.random.default_rng(3))
    assert one == plan(cols.sum(axis=1), texts, 32, np.random.default_rng(3))
    assert one != plan(cols.sum(axis=1), texts, 32, np.random.default_rng(4))
    rand = plan(cols.sum(axis=1), texts, 32, np.random.default_rng(3), buckets=False)
    assert pad_share(one, cols) < 0.5 * pad_share(rand, cols)


def test_the_sort_key_is_the_column_that_leaves_the_fewest_pad_tokens() -> None:
    from ballast.stages.train.batches import sort_key

    rng = np.random.default_rng(5)
    n = 640
    # two independent passage columns: sorting by their sum keeps neither tight
    cols = np.stack([rng.integers(5, 30, n), rng.integers(8, 129, n), rng.integers(60, 70, n)],
                    axis=1)  # fmt: skip
    texts = [{f"q{i}", f"p{i}", f"n{i}"} for i in range(n)]
    key = sort_key(cols, texts, 32, 0)
    assert key == 1  # the column with the widest spread of lengths
    shares = {c: pad_share(plan(cols[:, c], texts, 32, np.random.default_rng([0, 0])), cols)
              for c in range(3)}  # fmt: skip
    assert shares[key] == min(shares.values())
    by_sum = pad_share(plan(cols.sum(axis=1), texts, 32, np.random.default_rng([0, 0])), cols)
    assert shares[key] < by_sum
