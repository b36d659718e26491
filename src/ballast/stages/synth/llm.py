"""Queries from a local language model on the CPU, through transformers.

``synth.llm_model`` is a local model folder (causal or sequence-to-sequence; safetensors, no
remote code), a ``.gguf`` file, or ``packaged:gemma-3-270m``: the Gemma-3-270M base model as a
Q4_K_M GGUF file, installed by the opt-in extra ``pip install 'ballast[llm]'``. Gemma is
provided under the Gemma Terms of Use (not an open-source licence); ballast shows that notice
whenever it loads the model.

Generation is batched. Sampling uses the Gumbel-max trick: each row adds Gumbel noise drawn
from its own seeded ``torch.Generator`` to the temperature-scaled logits and takes the arg-max,
which draws exactly from the softmax (Gumbel 1954; as used by e.g. Kool et al., ICML 2019), so
what a sample says depends on its own seed only, not on which other samples share its batch.
A temperature of 0 decodes greedily.
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path
from typing import Any

from ballast.config import SynthConfig
from ballast.core.errors import InputError
from ballast.core.progress import SILENT, Progress
from ballast.models.language import (
    GEMMA_NOTICE,
    PACKAGED_LLM,
    gemma_package,
    load_language_model,
    packaged_gguf,
)
from ballast.stages.synth.generate import Job, OnDone
from ballast.stages.synth.prompts import PromptTemplate

FIELD = "synth.llm_model"


class LocalModel:
    kind = "llm"

    def __init__(self, cfg: SynthConfig, progress: Progress = SILENT) -> None:
        self.cfg = cfg
        self.progress = progress
        self.spec = cfg.llm_model
        self._loaded: tuple[Any, Any, bool] | None = None

    # ------------------------------------------------------------------ identity

    def _locate(self) -> tuple[Path, str | None]:
        """(folder, gguf file name or None) of a checked local model."""
        from ballast.models.loading import check_model_folder

        if self.spec == PACKAGED_LLM:
            path = packaged_gguf()
            return path.parent, path.name
        if self.spec.startswith("packaged:"):
            raise InputError(
                f"unknown packaged model {self.spec!r}; known: {PACKAGED_LLM}", field=FIELD
            )
        path = Path(self.spec)
        if path.is_file() and path.suffix == ".gguf":
            return path.parent, path.name
        if path.is_dir():
            check_model_folder(path)
            return path, None
        raise InputError(
            "model not found: expected a local model folder or a .gguf file "
            "(ballast never downloads models)",
            path=path,
            field=FIELD,
        )

    def fingerprint(self) -> str:
        """What identifies the weights, without loading (or assembling) them."""
        from ballast.core.text import sha256_bytes

        if self.spec == PACKAGED_LLM:
            return gemma_package().EXPECTED_SHA256
        folder, gguf = self._locate()
        if gguf:
            from ballast.models.loading import _cached_sha

            st = (folder / gguf).stat()
            return _cached_sha(str(folder / gguf), st.st_mtime_ns, st.st_size)
        from ballast.models.loading import model_fingerprint

        return sha256_bytes(model_fingerprint(folder).encode())

    def settings(self) -> dict[str, Any]:
        c = self.cfg
        return {
            "kind": "llm",
            "model": self.fingerprint(),
            "max_new_tokens": c.llm_max_new_tokens,
            "temperature": c.llm_temperature,
            "sampler": "gumbel-max/1",
        }

    # ------------------------------------------------------------------ loading

    def load(self) -> tuple[Any, Any, bool]:
        if self._loaded is not None:
            return self._loaded
        folder, gguf = self._locate()
        if self.spec == PACKAGED_LLM:
            self.progress.info(GEMMA_NOTICE)
        self.progress.info(f"synth llm: loading {gguf or folder} (can take a minute)")
        tok, model, seq2seq = load_language_model(folder, gguf, field=FIELD)
        if tok.pad_token_id is None:
            tok.pad_token = tok.eos_token
        tok.padding_side = "left"
        self._loaded = (tok, model, seq2seq)
        return self._loaded

    # ------------------------------------------------------------------ generating

    def generate(
        self, jobs: Sequence[Job], templates: dict[str, PromptTemplate], on_done: OnDone
    ) -> None:
        tok, model, seq2seq = self.load()
        size = self.cfg.llm_batch_size
        for start in range(0, len(jobs), size):
            batch = jobs[start : start + size]
            prompts = [templates[j.style].completion(j.passage["text"]) for j in batch]
            texts = self._batch(tok, model, seq2seq, prompts, [j.seed for j in batch])
            for job, text in zip(batch, texts, strict=True):
                on_done(job, text)

    def _batch(
        self, tok: Any, model: Any, seq2seq: bool, prompts: list[str], seeds: list[int]
    ) -> list[str]:
        import torch
        from transformers import LogitsProcessorList, StoppingCriteriaList

        enc = tok(prompts, return_tensors="pt", padding=True)
        start = 1 if seq2seq else enc["input_ids"].shape[1]
        kwargs: dict[str, Any] = {
            "max_new_tokens": self.cfg.llm_max_new_tokens,
            "do_sample": False,
            "num_beams": 1,
            "pad_token_id": tok.pad_token_id,
            "stopping_criteria": StoppingCriteriaList([_stop_at_newline(tok, start)]),
        }
        if self.cfg.llm_temperature > 0:
            kwargs["logits_processor"] = LogitsProcessorList(
                [_gumbel_sampler(seeds, self.cfg.llm_temperature)]
            )
        with torch.inference_mode():
            out = model.generate(**enc, **kwargs)
        return tok.batch_decode(out[:, start:], skip_special_tokens=True)


def _stop_at_newline(tok: Any, start: int) -> Any:
    """Stop each row once its new text holds a line break after some words."""
    import torch
    from transformers import StoppingCriteria

    class StopAtNewline(StoppingCriteria):
        def __call__(self, input_ids: Any, scores: Any, **kwargs: Any) -> Any:
            texts = tok.batch_decode(input_ids[:, start:], skip_special_tokens=True)
            done = ["\n" in t.lstrip() for t in texts]
            return torch.tensor(done, dtype=torch.bool, device=input_ids.device)

    return StopAtNewline()


def _gumbel_sampler(seeds: list[int], temperature: float) -> Any:
    """Per-row seeded sampling at a temperature: logits/T + Gumbel noise, then arg-max."""
    import torch
    from transformers import LogitsProcessor

    gens = [torch.Generator().manual_seed(int(s)) for s in seeds]
    tiny = torch.finfo(torch.float32).tiny

    class GumbelSampler(LogitsProcessor):
        def __call__(self, input_ids: Any, scores: Any) -> Any:
            vocab = scores.shape[-1]
            u = torch.stack([torch.rand(vocab, generator=g) for g in gens])
            noise = -torch.log(-torch.log(u.clamp(tiny, 1.0 - 1e-7)))
            return scores.float() / temperature + noise.to(scores.device)

    return GumbelSampler()
