"""Encoding texts, with a content-addressed cache keyed by model fingerprint and texts."""

from __future__ import annotations

import os
import tempfile
from pathlib import Path
from typing import Any

import numpy as np

from .files import sha256_bytes
from .progress import SILENT, Progress


def encode(
    model: Any,
    texts: list[str],
    *,
    batch_size: int = 64,
    label: str = "encoding",
    progress: Progress = SILENT,
) -> np.ndarray:
    """Unit-normalised float32 embeddings, one row per text, in order."""
    import torch

    out = []
    with torch.inference_mode():
        for start in range(0, len(texts), batch_size):
            batch = texts[start : start + batch_size]
            emb = model.encode(
                batch,
                batch_size=batch_size,
                convert_to_numpy=True,
                normalize_embeddings=True,
                show_progress_bar=False,
            )
            out.append(np.asarray(emb, dtype=np.float32))
            progress.step(label, min(start + batch_size, len(texts)), len(texts))
    if not out:
        dim = model.get_embedding_dimension()
        return np.zeros((0, dim), dtype=np.float32)
    return np.concatenate(out)


class EmbeddingCache:
    """Embeddings stored as ``<dir>/<model fp>/<hash of the texts>.npy``; writes are atomic."""

    def __init__(self, root: str | Path) -> None:
        self.root = Path(root)

    def _path(self, model_fp: str, texts: list[str], max_seq_length: int) -> Path:
        h = sha256_bytes("\0".join([str(max_seq_length), *texts]).encode("utf-8"))
        return self.root / model_fp[:24] / f"{h[:32]}.npy"

    def get(self, model_fp: str, texts: list[str], max_seq_length: int) -> np.ndarray | None:
        path = self._path(model_fp, texts, max_seq_length)
        if not path.is_file():
            return None
        try:
            arr = np.load(path, allow_pickle=False)
        except (ValueError, OSError):
            return None  # a damaged entry is recomputed
        return arr if arr.shape[0] == len(texts) else None

    def put(self, model_fp: str, texts: list[str], max_seq_length: int, emb: np.ndarray) -> None:
        path = self._path(model_fp, texts, max_seq_length)
        path.parent.mkdir(parents=True, exist_ok=True)
        fd, tmp = tempfile.mkstemp(dir=path.parent, suffix=".tmp")
        try:
            with os.fdopen(fd, "wb") as fh:
                np.save(fh, emb, allow_pickle=False)
            os.replace(tmp, path)
        except BaseException:
            Path(tmp).unlink(missing_ok=True)
            raise


def encode_cached(
    model: Any,
    model_fp: str,
    texts: list[str],
    cache: EmbeddingCache | None,
    *,
    batch_size: int = 64,
    label: str = "encoding",
    progress: Progress = SILENT,
) -> np.ndarray:
    msl = int(getattr(model, "max_seq_length", 0) or 0)
    if cache is not None:
        hit = cache.get(model_fp, texts, msl)
        if hit is not None:
            progress.info(f"{label}: {len(texts)} embeddings from cache")
            return hit
    emb = encode(model, texts, batch_size=batch_size, label=label, progress=progress)
    if cache is not None:
        cache.put(model_fp, texts, msl, emb)
    return emb
