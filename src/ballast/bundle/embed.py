"""Embedding a passages file with a bundle, in batches: ``<out>.npy`` + ``<out>.ids.txt``, or
one ``<out>.parquet`` with columns ``id`` and ``embedding``. Files are written atomically.

The vectors are unit-normalised, as in ballast's evaluation, so the gated metrics hold for them.
With ``queries=True`` the texts are queries: a query-side adapter's matrix is applied to them
(with any backend), as ballast's evaluation applied it.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np

from ballast.config.sections import BACKENDS
from ballast.core.errors import InputError
from ballast.core.progress import SILENT, Progress
from ballast.io.files import atomic_path, write_bytes_atomic, write_text_atomic

FORMATS = ("npy", "parquet")


def _encoder(bundle: Path, manifest: dict[str, Any], backend: str) -> tuple[Any, int]:
    """(an object with .encode(texts, batch_size=, label=, progress=), dimension)."""
    if backend == "pytorch":
        from ballast.models.encode import encode
        from ballast.models.loading import load_encoder

        model = load_encoder(bundle)

        class Torch:
            def encode(self, texts: list[str], **kw: Any) -> np.ndarray:
                return encode(model, texts, **kw)

        return Torch(), int(model.get_embedding_dimension())
    onnx = manifest.get("onnx")
    key = "int8" if backend == "onnx-int8" else None
    entry = (onnx or {}).get(key) if key else onnx
    if not isinstance(entry, dict):
        flag = "--quantize-int8" if key else "--onnx"
        raise InputError(
            f"the bundle has no {backend} model; export it with `ballast export {flag}`",
            path=bundle / "manifest.json",
            field="onnx" + (".int8" if key else ""),
        )
    from ballast.io.manifest import hashed_file
    from ballast.models.onnx import open_onnx

    hashed_file(bundle, manifest, entry.get("path"), "onnx" + (".int8" if key else "") + ".path")
    msl = int((onnx or {}).get("max_seq_length") or manifest["model"]["max_seq_length"])
    enc = open_onnx(bundle, str(entry["path"]), msl)
    return enc, enc.dimension


class _QueryEncoder:
    """Embeds queries: the bundle's encoder, then a query-side adapter's matrix if it has one
    (what the routed model's ``encode_query`` computes; the ONNX graph is the document route)."""

    def __init__(self, encoder: Any, bundle: Path) -> None:
        from ballast.models.query_map import query_route

        self.encoder, self.to_query = encoder, query_route(bundle)

    def encode(self, texts: list[str], **kw: Any) -> np.ndarray:
        return self.to_query(self.encoder.encode(texts, **kw))


def embed_file(
    bundle: Path,
    passages: Path,
    out: Path,
    *,
    fmt: str = "npy",
    backend: str = "pytorch",
    batch_size: int = 64,
    queries: bool = False,
    progress: Progress = SILENT,
) -> dict[str, Any]:
    """Encode every text of ``passages`` (JSONL id/text or TSV id<TAB>text) into ``out``: as
    passages, or as queries (``queries=True``)."""
    from ballast.io.manifest import read_manifest
    from ballast.io.trec import read_texts

    if fmt not in FORMATS:
        raise InputError(
            f"unknown format {fmt!r}; expected one of {', '.join(FORMATS)}", field="--format"
        )
    if backend not in BACKENDS:
        raise InputError(
            f"unknown backend {backend!r}; expected one of {', '.join(BACKENDS)}", field="--backend"
        )
    if batch_size < 1:
        raise InputError(
            f"got {batch_size}; expected a batch size of at least 1", field="--batch-size"
        )
    manifest = read_manifest(bundle)
    rows = read_texts(passages, "passage")
    ids = [i for i, _ in rows]
    if fmt == "npy":
        bad = next((i for i in ids if "\n" in i or "\r" in i), None)
        if bad is not None:
            raise InputError(
                f"passage id {bad!r} holds a line break; use --format parquet",
                path=passages,
                field="id",
            )
    gate = manifest.get("gate", {})
    if gate.get("forced") or gate.get("passed") is False:
        progress.info("warning: this bundle did not pass its release gate (exported with --force)")
    encoder, dim = _encoder(bundle, manifest, backend)
    what = "queries" if queries else "passages"
    if queries:
        encoder = _QueryEncoder(encoder, bundle)
    texts = [t for _, t in rows]
    name = out.name.removesuffix(".npy").removesuffix(".parquet")
    written: list[Path] = []
    if fmt == "npy":
        target = out.with_name(name + ".npy")
        ids_path = out.with_name(name + ".ids.txt")
        with atomic_path(target) as tmp:
            arr = np.lib.format.open_memmap(
                tmp, mode="w+", dtype=np.float32, shape=(len(texts), dim)
            )
            for start in range(0, len(texts), batch_size):
                chunk = texts[start : start + batch_size]
                arr[start : start + len(chunk)] = encoder.encode(chunk, batch_size=batch_size)
                progress.step(f"embedding {what}", start + len(chunk), len(texts))
            arr.flush()
            del arr
        write_text_atomic(ids_path, "".join(i + "\n" for i in ids))
        written = [target, ids_path]
    else:
        import io

        import pyarrow as pa
        import pyarrow.parquet as pq

        parts = []
        for start in range(0, len(texts), batch_size):
            chunk = texts[start : start + batch_size]
            parts.append(np.asarray(encoder.encode(chunk, batch_size=batch_size), np.float32))
            progress.step(f"embedding {what}", start + len(chunk), len(texts))
        emb = np.concatenate(parts) if parts else np.zeros((0, dim), np.float32)
        values = pa.array(emb.reshape(-1), type=pa.float32())
        table = pa.table(
            {
                "id": pa.array(ids, pa.string()),
                "embedding": pa.FixedSizeListArray.from_arrays(values, dim),
            }
        ).replace_schema_metadata(
            {
                "ballast.bundle": f"{manifest.get('name')}-{manifest.get('version')}",
                "ballast.backend": backend,
                "ballast.normalized": "true",
                "ballast.texts": what,
            }
        )
        buf = io.BytesIO()
        pq.write_table(table, buf)
        target = out.with_name(name + ".parquet")
        write_bytes_atomic(target, buf.getvalue())
        written = [target]
    return {
        "bundle": str(bundle),
        "passages": len(ids),
        "texts": what,
        "dimension": dim,
        "backend": backend,
        "format": fmt,
        "files": [str(p) for p in written],
    }
