"""Queries written by a language model: the work list, the cache, and cleaning the answers.

The two model-backed generators (``llm``, a local model; ``http``, a chat-completions endpoint)
share everything but the call to the model. Each passage gets ``llm_per_passage`` samples;
each sample's prompt style and sampling seed are derived from the stage's seeded generator,
the passage text and the sample index, never from the order of work, so a resumed run asks the
model exactly what an uninterrupted one would have. Every finished generation goes to the
cache before it is counted, so an interrupted run loses at most the generations in flight.
"""

from __future__ import annotations

import re
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Protocol

import numpy as np

from ballast.config import SynthConfig
from ballast.core.progress import SILENT, Progress
from ballast.core.text import sha256_bytes
from ballast.stages.synth.cache import GenerationCache, entry_key, generator_identity
from ballast.stages.synth.filters import words
from ballast.stages.synth.prompts import PromptTemplate, load_templates


@dataclass(frozen=True)
class Job:
    """One generation to make: a passage, which of its samples, in which style, with which seed."""

    passage: dict
    sample: int
    style: str
    seed: int
    key: str


OnDone = Callable[[Job, str], None]


class Backend(Protocol):
    """A model that writes text: a local model or a chat-completions endpoint."""

    kind: str

    def settings(self) -> dict[str, Any]:
        """Everything that decides what the model writes (its identity); no secrets."""
        ...

    def generate(
        self, jobs: Sequence[Job], templates: dict[str, PromptTemplate], on_done: OnDone
    ) -> None:
        """Write one raw answer per job, calling ``on_done`` (in the caller's thread) for each
        as soon as it is finished."""
        ...


def item_seed(base_seed: int, passage_text: str, sample: int) -> int:
    """A 63-bit seed for one sample, derived from the stage's seed (never the global RNG)."""
    h = sha256_bytes(f"{base_seed}\0{sample}\0{passage_text}".encode())
    return int(h[:15], 16)


def plan(
    passages: list[dict],
    cfg: SynthConfig,
    templates: dict[str, PromptTemplate],
    identity: str,
    base_seed: int,
) -> list[Job]:
    jobs = []
    for p in passages:
        for sample in range(cfg.llm_per_passage):
            seed = item_seed(base_seed, p["text"], sample)
            style = cfg.styles[int(np.random.default_rng(seed).integers(len(cfg.styles)))]
            key = entry_key(identity, templates[style].hash, p["text"], sample)
            jobs.append(Job(p, sample, style, seed, key))
    return jobs


_LEAD = re.compile(r"^\s*(?:[-*•]\s+|\d+[.)]\s+|#+\s*)")
_QUOTES = "\"'`“”‘’«»"


def clean_query(raw: str, template: PromptTemplate) -> str:
    """The query in a model's answer: its first non-empty line, without a repeated label,
    list marker or surrounding quotes."""
    line = next((ln for ln in raw.splitlines() if ln.strip()), "")
    labels = {template.query_label, "query", "question", "search", "request", "problem"}
    pattern = "|".join(re.escape(x) for x in sorted(labels, key=len, reverse=True))
    line = re.sub(rf"^\s*(?:\*\*)?(?:{pattern})(?:\*\*)?\s*:\s*", "", line, flags=re.I)
    line = _LEAD.sub("", line).strip()
    if len(line) >= 2 and line[0] in _QUOTES and line[-1] in _QUOTES:
        line = line[1:-1]
    line = line.strip().strip("*").strip()
    return " ".join(line.split())


def model_queries(
    backend: Backend,
    passages: list[dict],
    cfg: SynthConfig,
    rng: np.random.Generator,
    cache_dir: str | Path,
    progress: Progress = SILENT,
    examples: list[dict] | None = None,
) -> list[dict]:
    """Queries from ``backend`` for every passage; cached generations are reused. ``examples``
    (``{"text", "passage"}``) replace the worked examples of the "question" style's prompt (its
    hash, and so the cache key of what it writes, changes with them)."""
    import dataclasses

    from ballast.stages.synth.extractive import query_id
    from ballast.stages.synth.prompts import Example

    if cfg.llm_per_passage == 0 or not passages:
        return []
    templates = load_templates(cfg.prompts, cfg.styles)
    if examples and "question" in templates:
        shown = tuple(Example(e["passage"], e["text"]) for e in examples)
        templates["question"] = dataclasses.replace(templates["question"], examples=shown)
    base_seed = int(rng.integers(0, 2**63 - 1))
    settings = {**backend.settings(), "seed": base_seed}
    identity = generator_identity(settings)
    cache = GenerationCache(cache_dir, backend.kind, identity)
    jobs = plan(passages, cfg, templates, identity, base_seed)
    pending = [j for j in jobs if j.key not in cache]
    label = f"synth {backend.kind}"
    done = len(jobs) - len(pending)
    if done:
        progress.info(f"{label}: {done} of {len(jobs)} generations from the cache")
    progress.step(label, done, len(jobs))

    def on_done(job: Job, raw: str) -> None:
        nonlocal done
        cache.put(job.key, {"raw": raw, "style": job.style, "sample": job.sample})
        done += 1
        progress.step(label, done, len(jobs))

    if pending:
        backend.generate(pending, templates, on_done)
    examples = {
        style: {" ".join(words(e.query)) for e in t.examples} for style, t in templates.items()
    }
    out = []
    for job in jobs:
        entry = cache.get(job.key)
        if entry is None:  # pragma: no cover - a backend that skipped work without failing
            raise RuntimeError(f"{backend.kind}: no generation for {job.key}")
        text = clean_query(str(entry.get("raw", "")), templates[job.style])
        meta: dict[str, Any] = {"style": job.style}
        if " ".join(words(text)) in examples[job.style]:
            meta["example"] = True  # the model repeated a worked example of its prompt
        out.append(
            {
                "id": query_id(backend.kind, job.passage["id"], job.sample),
                "text": text,
                "passage_id": job.passage["id"],
                "origin": backend.kind,
                "meta": meta,
            }
        )
    return out
