"""What every stage shares: the run folder it works in (inputs, the base model, seeded RNGs)
and the declaration each stage makes of what it reads and writes."""

from __future__ import annotations

import dataclasses
import json
from collections.abc import Callable
from dataclasses import dataclass, field
from functools import cached_property
from pathlib import Path
from typing import Any

import numpy as np

from ballast.config import Config
from ballast.config.record import ConfigView, unwrap
from ballast.core.errors import StageError
from ballast.core.progress import SILENT, Progress
from ballast.io.files import read_jsonl

# One salt a stage, so each stage draws from its own seeded generator.
SALT = {"synth": 1, "split": 2, "mine": 3, "train": 4, "evaluate": 5, "teach": 6}


@dataclass
class Run:
    cfg: Config
    progress: Progress = SILENT
    force_export: bool = False
    notes: list[str] = field(default_factory=list)
    # config.json records the settings later run-folder commands start from; a one-off
    # `--set` on a run folder does not change them (the done markers record what each stage
    # actually used)
    persist_config: bool = True

    @property
    def dir(self) -> Path:
        return unwrap(self.cfg).run_path

    def recording(self, reads: set[str]) -> Run:
        """This run with a config view that adds every key the stage reads to ``reads``."""
        return dataclasses.replace(self, cfg=ConfigView(unwrap(self.cfg), reads))

    def path(self, *parts: str) -> Path:
        return self.dir.joinpath(*parts)

    def rng(self, stage: str) -> np.random.Generator:
        return np.random.default_rng([self.cfg.seed, SALT[stage]])

    @cached_property
    def base_path(self) -> Path:
        from ballast.models.loading import resolve_model

        return resolve_model(unwrap(self.cfg).base_model)

    @cached_property
    def base_fp(self) -> str:
        from ballast.models.loading import model_fingerprint

        return model_fingerprint(self.base_path)

    def base_encoder(self) -> Any:
        """The base model as every stage encodes with it: at ``train.max_seq_length`` tokens,
        so synth's round trip, mine, the adapter and evaluate share one setting and one
        embedding cache entry per text list."""
        from ballast.models.loading import load_encoder

        return load_encoder(self.base_path, max_seq_length=self.cfg.train.max_seq_length)

    def search_encoder(self, path: Path | None = None, fp: str = "") -> Any:
        """A model (the base model unless ``path``; ``fp``, its fingerprint, is computed when
        not given) as the stages encode with it for search, at ``train.max_seq_length``
        tokens: PyTorch or its ONNX graph (``evaluate.backend``, exported once into the run's
        cache under the fingerprint). What trains, or must match training, uses
        ``base_encoder``."""
        from ballast.models.backend import load_search_encoder
        from ballast.models.loading import model_fingerprint

        if path is None:
            path, fp = self.base_path, self.base_fp
        return load_search_encoder(
            path, fp or model_fingerprint(path), self.cfg.evaluate.backend, self.path("cache"),
            self.cfg.train.max_seq_length, progress=self.progress,
        )  # fmt: skip

    @property
    def encode_bf16(self) -> bool:
        """``evaluate.bf16`` resolved: whether the stages encode under bfloat16 autocast."""
        from ballast.models.precision import use_bf16

        return use_bf16(self.cfg.evaluate.bf16)

    def encode(
        self, model: Any, model_fp: str, texts: list[str], label: str, pool: Any = None
    ) -> np.ndarray:
        """Embeddings as every stage makes them: ``evaluate.batch_size``, ``evaluate.bf16``
        (PyTorch models), through the run's embedding cache."""
        from ballast.models.encode import encode_cached

        return encode_cached(
            model, model_fp, texts, self.cache(), batch_size=self.cfg.evaluate.batch_size,
            label=label, progress=self.progress, pool=pool, bf16=self.encode_bf16,
        )  # fmt: skip

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
        from ballast.models.encode import EmbeddingCache

        return EmbeddingCache(self.path("cache"))


@dataclass(frozen=True)
class Stage:
    """One stage's declaration, kept beside its code: the pipeline derives the stage's
    fingerprint from it (no list elsewhere), and checks after each run that every config key
    the stage read is covered by ``keys``.

    ``keys``: config keys or whole sections read (``"train"``, ``"gate.primary_metric"``);
    ``inputs``/``outputs``: files or folders in the run folder; ``external``: fingerprints of
    what the stage reads from outside the run folder (documents, questions, guard files,
    prompts, models); ``base_model``: whether the base model's weights are an input."""

    name: str
    run: Callable[[Run], dict[str, Any]]
    keys: tuple[str, ...]
    inputs: tuple[str, ...] = ()
    outputs: tuple[str, ...] = ()
    external: Callable[[Run], dict[str, str]] | None = None
    base_model: bool = False


def file_fingerprint(path: str | Path | None) -> str:
    """A file's (or folder's) fingerprint for ``Stage.external``; "missing" when absent (the
    stage itself then says what is wrong)."""
    from ballast.io.files import fingerprint_tree

    if not path:
        return "unset"
    p = Path(path)
    return fingerprint_tree(p) if p.exists() else "missing"


def guard_files(run: Run) -> dict[str, str]:
    """Fingerprints of the guard split's files (queries, qrels, passages) when a guard is set:
    evaluate and report read them."""
    g = run.cfg.guard
    if not g.enabled:
        return {}
    return {f"guard.{k}": file_fingerprint(getattr(g, k)) for k in ("queries", "qrels", "passages")}


# Keys that hold a duration or a rate: they differ between two runs of the same inputs, so
# they live in the done markers (the stage summaries) and never in a stage's output files.
TIMING_KEYS = frozenset({"seconds", "pairs_per_second", "warmup_seconds_per_step",
                         "estimated_minutes", "load_seconds"})  # fmt: skip


def without_timings(obj: Any) -> Any:
    """``obj`` with every ``TIMING_KEYS`` entry removed, at any depth."""
    if isinstance(obj, dict):
        return {k: without_timings(v) for k, v in obj.items() if k not in TIMING_KEYS}
    if isinstance(obj, list):
        return [without_timings(v) for v in obj]
    return obj
