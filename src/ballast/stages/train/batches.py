"""Batches of similar length (``train.batching = "length"``): fewer pad tokens computed.

A batch is padded, column by column, to its longest text; passages run from a few tokens to
``max_seq_length``, so a batch drawn at random computes many pad tokens. Here the seeded
shuffled order is cut into mega-batches of ``MEGA`` batches, each mega-batch sorted by length
and cut into batches, and the batches' order shuffled again (the grouping of transformers'
``LengthGroupedSampler``, common practice); with ``no_duplicates``, a text already in a batch
keeps its example for a later batch, as sentence-transformers' ``NoDuplicatesBatchSampler``
does, so no in-batch negative is a copy of a positive. Every example is used once an epoch.
"""

from __future__ import annotations

from collections.abc import Iterator, Sequence
from typing import Any

import numpy as np

MEGA = 50  # batches per mega-batch: long enough to sort, short enough to stay random


def plan(
    lengths: np.ndarray,
    texts: Sequence[Sequence[str]],
    batch_size: int,
    rng: np.random.Generator,
    *,
    no_duplicates: bool = True,
    buckets: bool = True,
) -> list[list[int]]:
    """One epoch's batches (example indices). ``lengths``: tokens per example (for sorting);
    ``texts``: each example's texts (for the duplicate check). ``buckets=False`` keeps the
    shuffled order (the random batching, for comparison)."""
    order = rng.permutation(len(lengths))
    batches: list[list[int]] = []
    pending: list[int] = []  # examples a duplicate kept out of a batch, tried first next time
    step = batch_size * (MEGA if buckets else 1)
    for start in range(0, len(order), step):
        chunk = order[start : start + step]
        if buckets:  # longest first; a stable sort keeps the shuffled order among equals
            chunk = chunk[np.argsort(-lengths[chunk], kind="stable")]
        queue = pending + chunk.tolist()
        pending = []
        batch: list[int] = []
        seen: set[str] = set()
        for i in queue:
            if no_duplicates and not seen.isdisjoint(texts[i]):
                pending.append(i)
                continue
            batch.append(i)
            seen.update(texts[i])
            if len(batch) == batch_size:
                batches.append(batch)
                batch, seen = [], set()
        pending = batch + pending  # a part-filled batch waits for the next chunk
    while pending:  # the rest, in batches without duplicates
        batch, seen, rest = [], set(), []
        for i in pending:
            if len(batch) < batch_size and (not no_duplicates or seen.isdisjoint(texts[i])):
                batch.append(i)
                seen.update(texts[i])
            else:
                rest.append(i)
        batches.append(batch)
        pending = rest
    if buckets:
        batches = [batches[i] for i in rng.permutation(len(batches))]
    return batches


def pad_share(batches: Sequence[Sequence[int]], column_lengths: np.ndarray) -> float:
    """The share of the tokens computed that are padding: each column of a batch is padded to
    its longest text (``column_lengths``: examples x columns)."""
    pad = total = 0
    for b in batches:
        cols = column_lengths[list(b)]
        full = cols.max(axis=0) * len(b)
        pad += int((full - cols.sum(axis=0)).sum())
        total += int(full.sum())
    return pad / total if total else 0.0


def token_lengths(tokenizer: Any, columns: dict[str, list[str]], max_length: int) -> np.ndarray:
    """Tokens of each text (special tokens included, cut at ``max_length``): examples x
    columns."""
    out = []
    for texts in columns.values():
        ids = tokenizer(list(texts), truncation=True, max_length=max_length)["input_ids"]
        out.append([len(x) for x in ids])
    return np.array(out, dtype=np.int64).T


def sort_key(
    column_lengths: np.ndarray, texts: Sequence[Sequence[str]], batch_size: int, seed: int,
    *, no_duplicates: bool = True,
) -> int:  # fmt: skip
    """The column whose lengths, as the sort key, leave the fewest pad tokens in one planned
    epoch. Each column is padded on its own, so sorting by the sum of the lengths keeps no
    column tight; sorting by one column makes that column tight, and the best one to choose
    depends on the data (measured: the positive passages for inverse-cloze pairs)."""
    best, best_share = 0, float("inf")
    for c in range(column_lengths.shape[1]):
        rng = np.random.default_rng([seed, 0])
        planned = plan(column_lengths[:, c], texts, batch_size, rng, no_duplicates=no_duplicates)
        share = pad_share(planned, column_lengths)
        if share < best_share - 1e-12:
            best, best_share = c, share
    return best


def sampler(
    column_lengths: np.ndarray, texts: Sequence[Sequence[str]], key: int, *, no_duplicates: bool
) -> Any:
    """A batch sampler factory for sentence-transformers' trainer (``batch_sampler=``), sorting
    by column ``key``'s lengths."""
    from sentence_transformers.base.sampler import DefaultBatchSampler

    lengths = column_lengths[:, key]

    class LengthBuckets(DefaultBatchSampler):
        def _plan(self) -> list[list[int]]:
            rng = np.random.default_rng([int(self.seed), int(self.epoch)])
            return plan(lengths, texts, self.batch_size, rng, no_duplicates=no_duplicates)

        def __iter__(self) -> Iterator[list[int]]:
            yield from self._plan()

        def __len__(self) -> int:
            return len(self._plan())

    def make(dataset: Any, batch_size: int, drop_last: bool, valid_label_columns: Any = None,
             generator: Any = None, seed: int = 0) -> Any:  # fmt: skip
        return LengthBuckets(dataset, batch_size, drop_last, valid_label_columns, generator, seed)

    return make
