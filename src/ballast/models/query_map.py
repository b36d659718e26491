"""A query-side (or both-sides) linear map saved with a model: its file, and the
sentence-transformers modules that apply it (a ``Router`` whose query route holds a Dense map)."""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np

ADAPTER_FILE = "adapter.safetensors"


def save_adapter(path: Path, w: np.ndarray, *, side: str, rank: int) -> None:
    """``adapter.safetensors``: the matrix ``weight`` (d x d) and what it applies to."""
    from safetensors.numpy import save

    from ballast.io.files import write_bytes_atomic

    data = save(
        {"weight": np.ascontiguousarray(w, dtype=np.float32)},
        metadata={"side": side, "rank": str(rank), "apply": "normalize(weight @ e)"},
    )
    write_bytes_atomic(path, data)


def read_adapter(model_dir: Path) -> tuple[np.ndarray, dict[str, str]] | None:
    """The matrix and metadata of ``model_dir/adapter.safetensors``, or None."""
    path = Path(model_dir) / ADAPTER_FILE
    if not path.is_file():
        return None
    from safetensors import safe_open

    with safe_open(str(path), framework="numpy") as fh:
        meta = dict(fh.metadata() or {})
        w = fh.get_tensor("weight")
    return np.asarray(w, dtype=np.float32), meta


def query_adapter(model_dir: Path) -> np.ndarray | None:
    """The matrix to apply to query embeddings, if the model is a query-side adapter (the
    model folder's plain ``encode`` is then the document encoder; ``encode_query`` applies the
    matrix itself)."""
    got = read_adapter(model_dir)
    if got is None or got[1].get("side") != "query":
        return None
    return got[0]


def query_route(model_dir: Path) -> Callable[[np.ndarray], np.ndarray]:
    """What a model folder does to a query's embedding after its document encoder: its
    query-side map (``normalize(W e)``, what the routed model's ``encode_query`` computes), or
    nothing. Evaluation, ``ballast embed --queries`` and the ONNX backends all use this one."""
    w = query_adapter(model_dir)
    if w is None:
        return lambda emb: emb
    from ballast.core.scoring import apply

    return lambda emb: apply(emb, w)


def adapter_facts(model_dir: Path) -> dict[str, Any] | None:
    """For the bundle manifest: where the matrix is, its hash, and how to apply it."""
    from ballast.io.files import sha256_file

    got = read_adapter(model_dir)
    if got is None:
        return None
    w, meta = got
    side = meta.get("side", "query")
    return {
        "file": ADAPTER_FILE,
        "sha256": sha256_file(Path(model_dir) / ADAPTER_FILE),
        "side": side,
        "rank": int(meta.get("rank", "0")),
        "dim": int(w.shape[0]),
        "apply": "query embedding q -> normalize(weight @ q)",
        "in_model": True,
        "note": (
            "queries only: documents are the base model's embeddings, so an existing index "
            "stays valid. The model is routed: SentenceTransformer(bundle).encode_query applies "
            "the matrix, encode_document and plain encode do not; whoever embeds queries another "
            "way (the ONNX graph, plain encode) applies the matrix to them"
            if side == "query"
            else "already inside the model (a Dense module, then Normalize); do not apply again"
        ),
    }


def _dense(w: np.ndarray) -> Any:
    """``Dense(W, no bias, identity activation)``: the map as a sentence-transformers module."""
    import torch
    from sentence_transformers.base.modules.dense import Dense

    dim = int(w.shape[0])
    return Dense(
        dim,
        dim,
        bias=False,
        activation_function=torch.nn.Identity(),
        init_weight=torch.from_numpy(np.ascontiguousarray(w, dtype=np.float32)),
    )


def route_queries(model: Any, w: np.ndarray) -> Any:
    """A model that maps queries only: a sentence-transformers ``Router`` whose ``query`` route
    is the base modules, then ``Dense(W)`` and ``Normalize``, and whose ``document`` route (the
    default, used by plain ``encode``) is the base modules alone. Both routes share the base
    modules, so the saved folder holds the encoder once."""
    from sentence_transformers import SentenceTransformer
    from sentence_transformers.base.modules.normalize import Normalize
    from sentence_transformers.base.modules.router import Router

    base = list(model.children())
    if base and type(base[-1]).__name__ == "Normalize":
        base = base[:-1]
    router = Router.for_query_document(
        query_modules=[*base, _dense(w), Normalize()],
        document_modules=[*base, Normalize()],
    )
    routed = SentenceTransformer(modules=[router], device="cpu")
    routed.max_seq_length = model.max_seq_length
    return routed


def append_dense(model: Any, w: np.ndarray) -> None:
    """Append ``Dense(W, no bias, identity activation)`` and ``Normalize`` to a loaded model,
    so that the folder it saves computes ``normalize(W e)`` for every text."""
    from sentence_transformers.base.modules.normalize import Normalize

    names = [n for n, _ in model.named_children()]
    model.add_module(str(len(names)), _dense(w))
    model.add_module(str(len(names) + 1), Normalize())
