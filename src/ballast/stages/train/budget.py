"""How long training will take on this machine, and a cap that makes it fit.

Before training, a warm-up times a few real steps (forward and backward of the training loss on
one batch of the training examples, no weight update): the seconds a step times the steps
planned is the estimate said before training starts. With ``train.minutes``, the number of
training examples is capped so the estimate fits, and with ``train.max_pairs`` capped at that
number; either way the examples kept are a seeded choice. A budget depends on this machine's
speed, so train.json records the examples kept: set ``train.max_pairs`` to that number to
repeat the run exactly on another machine.
"""

from __future__ import annotations

import time
from typing import Any

import numpy as np

from ballast.config import TrainConfig

WARMUP_STEPS = 2  # timed, after one untimed step


def seconds_per_step(
    model: Any, loss: Any, columns: dict[str, list[Any]], batch_size: int, *, bf16: bool
) -> float:
    """Seconds of one training step (forward and backward of ``loss`` on ``batch_size``
    examples), the fastest of ``WARMUP_STEPS`` after one untimed step: steps keep getting
    faster for several steps (measured on one batch of 32, bfloat16: 10.4, 9.5, 7.5, 6.5,
    5.9 s, on a run whose training steps had averaged 3.9 s; docs/scale.md), so even the
    fastest reads high. Gradients are dropped and no weight changes."""
    import torch

    n = len(next(iter(columns.values())))
    rows = list(range(min(batch_size, n)))
    texts = [k for k in columns if k != "label"]
    labels = torch.tensor([columns["label"][i] for i in rows]) if "label" in columns else None
    model.train()
    times = []
    for _ in range(WARMUP_STEPS + 1):
        started = time.perf_counter()
        features = [model.preprocess([columns[k][i] for i in rows]) for k in texts]
        with torch.autocast("cpu", dtype=torch.bfloat16, enabled=bf16):
            out = loss(features, labels)
        total = sum(out.values()) if isinstance(out, dict) else out
        total.backward()
        model.zero_grad(set_to_none=True)
        times.append(time.perf_counter() - started)
    return float(min(times[1:]))


def encoding_seconds(step_seconds: float, texts_a_step: int, texts: int) -> float:
    """Seconds to encode ``texts`` with the model a training step of ``texts_a_step`` texts
    took ``step_seconds`` for: a forward pass is about a third of a training step's work
    (2N of the 6N FLOPs a token, Kaplan et al. 2020)."""
    return texts * step_seconds / (3 * texts_a_step)


def cap(n: int, cfg: TrainConfig, step_seconds: float | None) -> int:
    """How many of ``n`` examples to train on: all, or fewer to fit ``train.minutes`` (at
    ``step_seconds`` a step) and ``train.max_pairs``; at least two batches' worth."""
    keep = n
    if cfg.max_pairs:
        keep = min(keep, cfg.max_pairs)
    if cfg.minutes and step_seconds:
        steps = int(cfg.minutes * 60 / step_seconds)
        keep = min(keep, max(2 * cfg.batch_size, steps * cfg.batch_size // cfg.epochs))
    return min(n, keep)


def choose(n: int, keep: int, seed: int) -> list[int]:
    """A seeded choice of ``keep`` of ``n`` examples, in their order."""
    if keep >= n:
        return list(range(n))
    rng = np.random.default_rng([seed, 17])
    return sorted(rng.choice(n, size=keep, replace=False).tolist())


def plan(
    model: Any, loss: Any, columns: dict[str, list[Any]], cfg: TrainConfig, *, seed: int,
    bf16: bool,
) -> tuple[list[int], dict[str, Any]]:  # fmt: skip
    """(the examples to train on, what train.json records of the estimate and the cap)."""
    n = len(next(iter(columns.values())))
    step = seconds_per_step(model, loss, columns, cfg.batch_size, bf16=bf16)
    keep = cap(n, cfg, step)
    steps = -(-keep // cfg.batch_size) * cfg.epochs
    info = {
        "warmup_seconds_per_step": round(step, 3),
        "estimated_minutes": round(step * steps / 60, 2),
        "pairs_available": n,
        "pairs_kept": keep,
        "minutes_budget": cfg.minutes or None,
        "max_pairs": cfg.max_pairs or None,
    }
    return choose(n, keep, seed), info
