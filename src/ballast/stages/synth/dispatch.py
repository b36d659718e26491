"""Run the configured query generators in turn: the model-free ones (extractive.py) and the
model-written ones (a local model, llm.py; a chat endpoint, http.py) through generate.py."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np

from ballast.config import SynthConfig
from ballast.core.progress import SILENT, Progress
from ballast.stages.synth.extractive import GENERATORS


def synthesize(
    passages: list[dict],
    cfg: SynthConfig,
    rng: np.random.Generator,
    *,
    cache_dir: str | Path | None = None,
    progress: Progress = SILENT,
    examples: list[dict] | None = None,
) -> tuple[list[dict], dict[str, Any]]:
    """Run each configured generator in turn (the training's, then the judges'), with one
    seeded generator each. The model-written ones ("llm", "http") keep what they write in
    ``cache_dir``; ``examples`` (real questions with their passages, ``human.set_aside_examples``)
    replace the worked examples of their "question" prompt."""
    queries: list[dict] = []
    stats: dict[str, Any] = {}
    seeds = rng.integers(0, 2**63 - 1, size=len(cfg.generators))
    # the judges draw after the training generators, so adding one changes no training query
    seeds = [*seeds, *rng.integers(0, 2**63 - 1, size=len(cfg.judge_generators))]
    for name, seed in zip(cfg.all_generators, seeds, strict=True):
        sub = np.random.default_rng(int(seed))
        if name in MODEL_GENERATORS:
            if cache_dir is None:
                raise ValueError(f"the {name!r} generator needs a cache folder")
            from ballast.stages.synth.generate import model_queries

            backend = MODEL_GENERATORS[name](cfg, progress)
            made = model_queries(
                backend, passages, cfg, sub, cache_dir, progress, examples=examples
            )
        else:
            made = GENERATORS[name](passages, cfg, sub)
        stats[name] = len(made)
        queries.extend(made)
    return queries, stats


def _local_model(cfg: SynthConfig, progress: Progress) -> Any:
    from ballast.stages.synth.llm import LocalModel

    return LocalModel(cfg, progress)


def _chat_endpoint(cfg: SynthConfig, progress: Progress) -> Any:
    from ballast.stages.synth.http import ChatEndpoint

    return ChatEndpoint(cfg)


MODEL_GENERATORS = {"llm": _local_model, "http": _chat_endpoint}
