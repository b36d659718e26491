"""Encoding texts, with a content-addressed cache keyed by model fingerprint and texts."""

from __future__ import annotations

import contextlib
from collections.abc import Iterator, Sequence
from pathlib import Path
from typing import Any

import numpy as np

from ballast.core.progress import SILENT, Progress
from ballast.core.text import sha256_bytes
from ballast.io.files import atomic_file


@contextlib.contextmanager
def device_pool(model: Any, devices: Sequence[str]) -> Iterator[Any]:
    """sentence-transformers' own multi-process encoding: one process per entry of
    ``devices`` (e.g. ``["cuda:0", "cuda:1"]``, or ``["cpu", "cpu"]``), each with a copy of the
    model; ``None`` (encode in this process) for fewer than two devices. The processes are
    stopped on leaving, also on error."""
    if len(devices) < 2:
        yield None
        return
    pool = model.start_multi_process_pool(list(devices))
    try:
        yield pool
    finally:
        model.stop_multi_process_pool(pool)


def encode(
    model: Any,
    texts: list[str],
    *,
    batch_size: int = 64,
    label: str = "encoding",
    progress: Progress = SILENT,
    pool: Any = None,
    bf16: bool = False,
) -> np.ndarray:
    """Unit-normalised float32 embeddings, one row per text, in order; with a ``pool`` from
    ``device_pool``, each batch is shared out over its processes; with ``bf16``, computed
    under bfloat16 autocast on the CPU (fast only where the CPU has it natively).

    The batches keep the order given: encoding longest first (each batch padded to about its
    own length) measured 0.90-0.97x the speed of this on two real collections
    (bench/encode_speed.py, docs/scale.md)."""
    import torch

    out = []
    # With a pool, a step hands each process one batch (sentence-transformers' chunk_size).
    spread = {"pool": pool, "chunk_size": batch_size} if pool is not None else {}
    step = batch_size * (len(pool["processes"]) if pool is not None else 1)
    half = torch.autocast("cpu", dtype=torch.bfloat16, enabled=bf16)
    with torch.inference_mode(), half:
        for start in range(0, len(texts), step):
            batch = texts[start : start + step]
            emb = model.encode(
                batch,
                batch_size=batch_size,
                convert_to_numpy=True,
                normalize_embeddings=True,
                show_progress_bar=False,
                **spread,
            )
            out.append(np.asarray(emb, dtype=np.float32))
            progress.step(label, min(start + step, len(texts)), len(texts))
    if not out:
        dim = model.get_embedding_dimension()
        return np.zeros((0, dim), dtype=np.float32)
    return np.concatenate(out)


class EmbeddingCache:
    """Embeddings stored as ``<dir>/<model fp>/<hash of the texts>.npy``; writes are atomic.
    The hash covers the token limit and, for any precision but PyTorch float32 ("bfloat16",
    "onnx-float32", "onnx-int8"), the precision (float32 entries keep the key they had before
    the others existed)."""

    def __init__(self, root: str | Path) -> None:
        self.root = Path(root)

    def _path(self, model_fp: str, texts: list[str], max_seq_length: int, precision: str) -> Path:
        head = [str(max_seq_length)] + ([] if precision == "float32" else [precision])
        h = sha256_bytes("\0".join([*head, *texts]).encode("utf-8"))
        return self.root / model_fp[:24] / f"{h[:32]}.npy"

    def get(
        self, model_fp: str, texts: list[str], max_seq_length: int, precision: str = "float32"
    ) -> np.ndarray | None:
        path = self._path(model_fp, texts, max_seq_length, precision)
        if not path.is_file():
            return None
        try:
            arr = np.load(path, allow_pickle=False)
        except (ValueError, OSError):
            return None  # a damaged entry is recomputed
        return arr if arr.shape[0] == len(texts) else None

    def put(
        self, model_fp: str, texts: list[str], max_seq_length: int, emb: np.ndarray,
        precision: str = "float32",
    ) -> None:  # fmt: skip
        with atomic_file(self._path(model_fp, texts, max_seq_length, precision)) as fh:
            np.save(fh, emb, allow_pickle=False)


def encoding_name(backend: str, bf16: bool) -> str:
    """What ``evaluate.backend`` and the resolved ``evaluate.bf16`` encode in, as metrics.json's
    ``"encoding"`` and the cache say it: "float32", "bfloat16", "onnx-float32", "onnx-int8"."""
    if backend == "pytorch":
        return "bfloat16" if bf16 else "float32"
    return "onnx-int8" if backend == "onnx-int8" else "onnx-float32"


# Said by the gate and the report where a verdict rests on int8 encodings (docs/scale.md).
INT8_CAUTION = (
    "the figures were computed with int8 weights (evaluate.backend = onnx-int8), which moved a "
    "gain by 0.022 nDCG@10 on 366 real questions against float32 (docs/scale.md): use it to "
    "explore, and decide the verdict with evaluate.backend = pytorch"
)


def precision_of(model: Any, bf16: bool) -> str:
    """What an encoding with ``model`` is cached and reported as: an ONNX search encoder says
    its own ("onnx-float32", "onnx-int8"; bfloat16 autocast does not touch it), a PyTorch model
    "bfloat16" under ``bf16`` autocast, else "float32"."""
    return str(getattr(model, "search_precision", None) or ("bfloat16" if bf16 else "float32"))


def encode_cached(
    model: Any,
    model_fp: str,
    texts: list[str],
    cache: EmbeddingCache | None,
    *,
    batch_size: int = 64,
    label: str = "encoding",
    progress: Progress = SILENT,
    pool: Any = None,
    bf16: bool = False,
) -> np.ndarray:
    """``encode`` through ``cache`` (none: encode every time); each precision
    (``precision_of``) is cached apart."""
    msl = int(getattr(model, "max_seq_length", 0) or 0)
    precision = precision_of(model, bf16)
    if cache is not None:
        hit = cache.get(model_fp, texts, msl, precision)
        if hit is not None:
            progress.info(f"{label}: {len(texts)} embeddings from cache")
            return hit
    emb = encode(
        model, texts, batch_size=batch_size, label=label, progress=progress, pool=pool, bf16=bf16
    )
    if cache is not None:
        cache.put(model_fp, texts, msl, emb, precision)
    return emb
