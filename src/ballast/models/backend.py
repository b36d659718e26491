"""What the stages encode with for search (``evaluate.backend``): the PyTorch model, the
reference, or its ONNX graph run by onnxruntime, in float32 or with int8 weights."""

from __future__ import annotations

from pathlib import Path
from typing import Any

from ballast.core.progress import SILENT, Progress


def load_search_encoder(
    path: Path,
    fp: str,
    backend: str,
    cache_root: Path,
    max_seq_length: int | None,
    *,
    progress: Progress = SILENT,
) -> Any:
    """The model at ``path`` as the stages encode with it for search (``evaluate.backend``):
    "pytorch", a SentenceTransformer; "onnx" or "onnx-int8", its ONNX graph exported once per
    fingerprint ``fp`` under ``cache_root`` (``models.onnx.search_encoder``). Both answer
    ``models.encode.encode``; ``max_seq_length`` None keeps the model's own limit."""
    from ballast.models.loading import load_encoder

    if backend == "pytorch":
        return load_encoder(path, max_seq_length=max_seq_length)
    from ballast.models.onnx import search_encoder

    if max_seq_length is None:
        max_seq_length = int(load_encoder(path).max_seq_length)
    return search_encoder(path, fp, backend, cache_root, max_seq_length,
                          progress=progress)  # fmt: skip
