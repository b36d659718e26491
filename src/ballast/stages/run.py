"""The run folder a stage works in, and what stages share: inputs, models, seeded RNGs."""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from functools import cached_property
from pathlib import Path
from typing import Any

import numpy as np

from ..config import Config
from ..errors import StageError
from ..files import read_jsonl
from ..progress import SILENT, Progress

# One salt a stage, so each stage draws from its own seeded generator.
SALT = {"synth": 1, "split": 2, "mine": 3, "train": 4, "evaluate": 5}


@dataclass
class Run:
    cfg: Config
    progress: Progress = SILENT
    force_export: bool = False
    notes: list[str] = field(default_factory=list)

    @property
    def dir(self) -> Path:
        return self.cfg.run_path

    def path(self, *parts: str) -> Path:
        return self.dir.joinpath(*parts)

    def rng(self, stage: str) -> np.random.Generator:
        return np.random.default_rng([self.cfg.seed, SALT[stage]])

    @cached_property
    def base_path(self) -> Path:
        from ..models import resolve_model

        return resolve_model(self.cfg.base_model)

    @cached_property
    def base_fp(self) -> str:
        from ..models import model_fingerprint

        return model_fingerprint(self.base_path)

    def need(self, name: str, made_by: str) -> Path:
        p = self.path(name)
        if not p.exists():
            raise StageError(f"{p} is missing; run `ballast {made_by}` first (or `ballast run`)")
        return p

    def passages(self) -> list[dict]:
        return [row for _, row in read_jsonl(self.need("passages.jsonl", "ingest"))]

    def queries(self) -> list[dict]:
        return [row for _, row in read_jsonl(self.need("queries.jsonl", "synth"))]

    def splits(self) -> dict[str, Any]:
        return json.loads(self.need("splits.json", "split").read_text("utf-8"))

    def cache(self) -> Any:
        from ..encode import EmbeddingCache

        return EmbeddingCache(self.path("cache"))
