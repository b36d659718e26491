"""Second opinions on mined negatives: a model that rates (query, passage) pairs on 0..1.

- ``cross-encoder``: a sentence-transformers CrossEncoder folder with one output; the score is
  its relevance probability (sigmoid of the logit).
- ``query-likelihood``: a local causal language model; the score is the query's per-token
  probability given the passage, ``exp(mean log p(query token | passage, earlier tokens))``
  (unsupervised passage re-ranking by query likelihood, Sachan et al. 2022). It needs no
  relevance labels, so it works where no cross-encoder exists.

Both load from local files only, with no remote code; weights must be safetensors (or, for a
language model, one GGUF file, which holds tensors and no code, or ``packaged:gemma-3-270m``,
the Gemma-3-270M that synth.llm uses, under the Gemma Terms of Use).
"""

from __future__ import annotations

import time
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Protocol

import numpy as np

from ballast.core.errors import InputError
from ballast.core.progress import SILENT, Progress
from ballast.models.language import load_language_model

KINDS = ("cross-encoder", "query-likelihood")

# UPR (Sachan et al. 2022) scores the question after an instruction that follows the passage;
# a base model needs no chat template, so the instruction is one plain line.
QL_PREFIX = "Passage: "
QL_INSTRUCTION = "\nA question this passage answers:"


class Rescorer(Protocol):
    kind: str

    def score(
        self, pairs: Sequence[tuple[str, str]], progress: Progress = SILENT
    ) -> np.ndarray: ...


@dataclass
class Cost:
    """What a second opinion cost: model load time, pairs scored, time spent scoring."""

    kind: str
    load_seconds: float = 0.0
    pairs: int = 0
    seconds: float = 0.0
    calls: int = 0
    extra: dict[str, Any] = field(default_factory=dict)

    def to_dict(self) -> dict[str, Any]:
        rate = self.pairs / self.seconds if self.seconds > 0 else 0.0
        return {
            "kind": self.kind,
            "load_seconds": round(self.load_seconds, 3),
            "pairs_scored": self.pairs,
            "seconds": round(self.seconds, 3),
            "pairs_per_second": round(rate, 2),
        } | self.extra


class Timed:
    """A rescorer that adds each call's pairs and time to a ``Cost``."""

    def __init__(self, inner: Rescorer, cost: Cost) -> None:
        self.inner, self.cost = inner, cost
        self.kind = inner.kind

    def score(self, pairs: Sequence[tuple[str, str]], progress: Progress = SILENT) -> np.ndarray:
        t = time.perf_counter()
        out = self.inner.score(pairs, progress)
        self.cost.seconds += time.perf_counter() - t
        self.cost.pairs += len(pairs)
        self.cost.calls += 1
        return out


def _check_folder(path: Path, *, gguf_ok: bool) -> Path | None:
    """The GGUF file to load, or None for a safetensors folder (checked as models.py does)."""
    from ballast.models.loading import check_model_folder

    if not path.is_dir():
        raise InputError(
            "re-scorer model not found: expected a local folder (ballast never downloads models)",
            path=path,
        )
    ggufs = sorted(path.glob("*.gguf"))
    if gguf_ok and ggufs and not list(path.rglob("*.safetensors")):
        if len(ggufs) > 1:
            raise InputError(f"{len(ggufs)} .gguf files in the folder; keep exactly one", path=path)
        return ggufs[0]
    check_model_folder(path)
    return None


def locate_language_model(spec: str, progress: Progress = SILENT) -> tuple[Path, Path | None]:
    """(folder, GGUF file or None) for ``mine.rescorer_model`` with query likelihood: a
    folder, a ``.gguf`` file, or the packaged Gemma-3-270M (synth.llm's, same terms)."""
    from ballast.models.language import GEMMA_NOTICE, PACKAGED_LLM, packaged_gguf

    if spec == PACKAGED_LLM:
        progress.info(GEMMA_NOTICE)
        gguf = packaged_gguf()
        return gguf.parent, gguf
    path = Path(spec)
    if path.is_file() and path.suffix == ".gguf":
        return path.parent, path
    return path, _check_folder(path, gguf_ok=True)


class CrossEncoderRescorer:
    kind = "cross-encoder"

    def __init__(self, path: Path, *, max_length: int = 256, batch_size: int = 16) -> None:
        from ballast.models.loading import _offline

        _check_folder(path, gguf_ok=False)
        _offline()
        from sentence_transformers import CrossEncoder

        self.model = CrossEncoder(
            str(path),
            device="cpu",
            local_files_only=True,
            trust_remote_code=False,
            max_length=max_length,
            model_kwargs={"use_safetensors": True},
        )
        labels = getattr(self.model, "num_labels", 1)
        if labels != 1:
            raise InputError(
                f"the cross-encoder has {labels} outputs; a relevance re-scorer needs one",
                path=path,
            )
        self.batch_size = batch_size

    def score(self, pairs: Sequence[tuple[str, str]], progress: Progress = SILENT) -> np.ndarray:
        import torch

        out = []
        sig = torch.nn.Sigmoid()
        for s in range(0, len(pairs), self.batch_size):
            batch = [list(p) for p in pairs[s : s + self.batch_size]]
            got = self.model.predict(
                batch,
                batch_size=self.batch_size,
                activation_fn=sig,
                show_progress_bar=False,
                convert_to_numpy=True,
            )
            out.append(np.asarray(got, dtype=np.float64).reshape(-1))
            progress.step("re-scoring (cross-encoder)", min(s + self.batch_size, len(pairs)),
                          len(pairs))  # fmt: skip
        return np.concatenate(out) if out else np.zeros(0)


class QueryLikelihoodRescorer:
    kind = "query-likelihood"

    def __init__(
        self,
        spec: str | Path,
        *,
        max_passage_tokens: int = 256,
        max_query_tokens: int = 64,
        logits_budget: int = 64 * 2**20,
        progress: Progress = SILENT,
    ) -> None:
        import torch

        path, gguf = locate_language_model(str(spec), progress)
        self.tok, self.model, _ = load_language_model(
            path, gguf.name if gguf else None, field="mine.rescorer_model", dtype=torch.float32
        )
        self.max_passage_tokens = max_passage_tokens
        self.max_query_tokens = max_query_tokens
        self.logits_budget = logits_budget  # floats of logits held at once
        vocab = self.model.get_output_embeddings().weight.shape[0]
        self.vocab = int(vocab)
        pad = self.tok.pad_token_id
        if pad is None:
            pad = self.tok.eos_token_id if self.tok.eos_token_id is not None else 0
        self.pad = int(pad)

    def _ids(self, text: str) -> list[int]:
        return list(self.tok(text, add_special_tokens=False)["input_ids"])

    def _pair(self, query: str, passage: str) -> tuple[list[int], list[int]]:
        head = [] if self.tok.bos_token_id is None else [int(self.tok.bos_token_id)]
        prefix = (
            head
            + self._ids(QL_PREFIX)
            + self._ids(passage)[: self.max_passage_tokens]
            + self._ids(QL_INSTRUCTION)
        )
        q = self._ids(" " + query)[: self.max_query_tokens] or [self.pad]
        return prefix, q

    def score(self, pairs: Sequence[tuple[str, str]], progress: Progress = SILENT) -> np.ndarray:
        import torch

        encoded = [self._pair(q, p) for q, p in pairs]
        out = np.zeros(len(encoded))
        # longest first, so each batch pads little; the order does not change a score
        order = sorted(range(len(encoded)), key=lambda i: -sum(map(len, encoded[i])))
        done = 0
        with torch.inference_mode():
            while done < len(order):
                ahead = order[done : done + 64]
                keep = max(len(encoded[i][1]) for i in ahead) + 1
                bs = max(1, min(64, self.logits_budget // (keep * self.vocab)))
                rows = order[done : done + bs]
                keep = max(len(encoded[i][1]) for i in rows) + 1
                seqs = [encoded[i][0] + encoded[i][1] for i in rows]
                width = max(map(len, seqs))
                ids = torch.full((len(rows), width), self.pad, dtype=torch.long)
                mask = torch.zeros((len(rows), width), dtype=torch.long)
                for r, s in enumerate(seqs):  # left padding: every query ends at the last token
                    ids[r, width - len(s) :] = torch.tensor(s)
                    mask[r, width - len(s) :] = 1
                pos = (mask.cumsum(-1) - 1).clamp(min=0)
                logits = self.model(
                    input_ids=ids, attention_mask=mask, position_ids=pos, logits_to_keep=keep
                ).logits.float()  # positions width-keep .. width-1
                logp = torch.log_softmax(logits[:, :-1], dim=-1)  # predicts the last keep-1
                for r, i in enumerate(rows):
                    q = encoded[i][1]
                    tgt = torch.tensor(q)
                    lp = logp[r, logp.shape[1] - len(q) :].gather(1, tgt[:, None])
                    out[i] = float(torch.exp(lp.mean()))
                done += len(rows)
                progress.step("re-scoring (query likelihood)", done, len(order))
        return out


def load_rescorer(kind: str, spec: str | Path, progress: Progress = SILENT) -> Rescorer:
    """A re-scorer from ``mine.rescorer`` and ``mine.rescorer_model``."""
    if kind == "cross-encoder":
        return CrossEncoderRescorer(Path(spec))
    if kind == "query-likelihood":
        return QueryLikelihoodRescorer(spec, progress=progress)
    raise ValueError(f"unknown re-scorer {kind!r}; expected one of {', '.join(KINDS)}")
