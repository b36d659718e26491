"""ONNX export: the transformer with pooling and L2 normalisation inside one graph, so the
graph's output is the final embedding; checked against PyTorch, optionally quantised to int8.

Inputs are the tokenizer's ``input_ids``, ``attention_mask`` (and ``token_type_ids`` where the
model uses them), int64, shape [batch, sequence]; the output ``sentence_embedding`` is float32
[batch, dimension]. Tokenise with the bundle's tokenizer, truncating at the manifest's
``model.max_seq_length``.
"""

from __future__ import annotations

import contextlib
import logging
import warnings
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import numpy as np

from ballast.core.errors import StageError
from ballast.core.progress import SILENT, Progress

ONNX_FILE = "model.onnx"
INT8_FILE = "model_int8.onnx"
OUTPUT = "sentence_embedding"
OPSET = 18
TOLERANCE = 1e-5  # max |onnx - pytorch| over the check texts
POOLINGS = ("mean", "cls", "max")
# Texts the export is checked on: short, long (past the length limit), and odd characters.
CHECK_TEXTS = (
    "how do I reset the press?",
    "Sample valves and fermentation locks are the usual sources of contamination.",
    "a",
    "Ünïcode, emoji 🍎 and punctuation: (a) [b] {c} — \"quoted\" 'text'; 42 % 3.14.",
    " ".join(["a long passage that goes past the model's length limit"] * 60),
)


def require_onnx() -> None:
    """Fail early, with the fix, when the optional ONNX libraries are missing."""
    missing = []
    for name in ("onnx", "onnxruntime", "onnxscript"):
        try:
            __import__(name)
        except ImportError:
            missing.append(name)
    if missing:
        raise StageError(
            f"ONNX export needs {', '.join(missing)}: install the extra with "
            "`pip install 'ballast[onnx]'` (or `make install`)"
        )


@contextlib.contextmanager
def _quiet_libraries() -> Iterator[None]:
    """Keep the exporter's and quantiser's own log lines and warnings off the user's screen,
    for the duration of one call only."""
    names = ("torch.onnx", "torch.export", "torch._dynamo", "onnxscript", "")
    saved = {n: logging.getLogger(n or None).level for n in names}
    try:
        for n in names:
            logging.getLogger(n or None).setLevel(logging.ERROR)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            yield
    finally:
        for n, level in saved.items():
            logging.getLogger(n or None).setLevel(level)


def _pooling_of(modules: list[Any]) -> str:
    for module in modules:
        mode = getattr(module, "pooling_mode", None)
        if mode is not None:
            mode = str(mode)
            if mode not in POOLINGS:
                raise StageError(
                    f"ONNX export supports {', '.join(POOLINGS)} pooling, not {mode!r}"
                )
            return mode
    raise StageError("the model has no Pooling module; ONNX export needs one")


def _dense_of(modules: list[Any]) -> np.ndarray | None:
    """The product of the model's Dense modules after pooling (a both-sides adapter writes one),
    or None. Only linear ones (no bias, identity activation) fit the graph: a normalisation
    between them and the final one does not change the direction of ``W x``."""
    import torch

    w = None
    for module in modules:
        if type(module).__name__ != "Dense":
            continue
        linear = module.linear
        if linear.bias is not None or not isinstance(module.activation_function, torch.nn.Identity):
            raise StageError("ONNX export supports Dense modules without bias or activation only")
        m = linear.weight.detach().cpu().numpy().astype(np.float32)
        w = m if w is None else m @ w
    return w


def _wrapper(transformer: Any, pooling: str, dense: np.ndarray | None = None) -> Any:
    import torch

    class Embedder(torch.nn.Module):
        """transformer -> pooling over the attention mask -> (a linear map) -> L2 normalise."""

        def __init__(self) -> None:
            super().__init__()
            self.transformer = transformer
            if dense is None:
                self.dense = None
            else:
                self.register_buffer("dense", torch.from_numpy(np.ascontiguousarray(dense)))

        def forward(self, input_ids, attention_mask, token_type_ids=None):  # type: ignore[no-untyped-def]
            kwargs = {"input_ids": input_ids, "attention_mask": attention_mask}
            if token_type_ids is not None:
                kwargs["token_type_ids"] = token_type_ids
            hidden = self.transformer(**kwargs).last_hidden_state
            mask = attention_mask.unsqueeze(-1).to(hidden.dtype)
            if pooling == "mean":
                pooled = (hidden * mask).sum(dim=1) / mask.sum(dim=1).clamp(min=1e-9)
            elif pooling == "cls":
                pooled = hidden[:, 0]
            else:
                pooled = hidden.masked_fill(mask == 0, -1e9).max(dim=1).values
            if self.dense is not None:
                pooled = pooled @ self.dense.T
            return torch.nn.functional.normalize(pooled, p=2.0, dim=1)

    return Embedder().eval()


def _tokenize(tokenizer: Any, texts: list[str], max_len: int, names: list[str]) -> dict:
    enc = tokenizer(texts, padding=True, truncation=True, max_length=max_len, return_tensors="np")
    return {n: np.asarray(enc[n], dtype=np.int64) for n in names}


def export_onnx(
    model_dir: Path, out: Path, *, progress: Progress = SILENT, tolerance: float = TOLERANCE
) -> dict[str, Any]:
    """Write ``out`` (an ONNX graph of the whole embedder) and check it against PyTorch."""
    require_onnx()
    import torch

    from ballast.models.encode import encode
    from ballast.models.loading import document_route, load_encoder, tokenizer_dir

    model = load_encoder(model_dir)
    modules = document_route(model)  # a routed model (query-side adapter): the document route
    pooling = _pooling_of(modules)
    transformer = modules[0].auto_model
    tokenizer = model.tokenizer
    max_len = int(model.max_seq_length)
    accepted = set(tokenizer.model_input_names)
    names = ["input_ids", "attention_mask"] + (
        ["token_type_ids"] if "token_type_ids" in accepted else []
    )
    wrapper = _wrapper(transformer, pooling, _dense_of(modules))
    sample = _tokenize(tokenizer, list(CHECK_TEXTS[:2]), max_len, names)
    args = tuple(torch.from_numpy(sample[n]) for n in names)
    progress.info(f"export: tracing the model into ONNX (opset {OPSET}, {pooling} pooling)")
    from torch.export import Dim

    batch, seq = Dim("batch"), Dim("sequence")
    shapes = {n: {0: batch, 1: seq} for n in names}
    out.parent.mkdir(parents=True, exist_ok=True)
    with _quiet_libraries(), torch.no_grad():
        torch.onnx.export(
            wrapper,
            args,
            str(out),
            input_names=names,
            output_names=[OUTPUT],
            dynamic_shapes=shapes,
            opset_version=OPSET,
            dynamo=True,
            external_data=False,
            verbose=False,
        )
    progress.info("export: checking the ONNX graph against PyTorch")
    texts = list(CHECK_TEXTS)
    reference = encode(model, texts, batch_size=len(texts))
    got = OnnxEncoder(out, tokenizer, max_len).encode(texts, batch_size=len(texts))
    diff = float(np.max(np.abs(got - reference)))
    if not diff <= tolerance:
        out.unlink(missing_ok=True)
        raise StageError(
            f"{out}: the ONNX graph differs from the PyTorch model by {diff:.2e} "
            f"(allowed {tolerance:.0e}); not exported"
        )
    tokenizer_file = (tokenizer_dir(model_dir) / "tokenizer.json").relative_to(model_dir)
    return {
        "path": out.name,
        "opset": OPSET,
        "inputs": names,
        "tokenizer": tokenizer_file.as_posix(),
        "output": OUTPUT,
        "pooling": pooling,
        "normalized": True,
        "max_seq_length": max_len,
        "dimension": int(got.shape[1]),
        "check": {
            "texts": len(texts),
            "max_abs_diff_vs_pytorch": diff,
            "tolerance": tolerance,
        },
    }


def quantize_int8(src: Path, out: Path) -> dict[str, Any]:
    """Dynamic int8 quantisation of the weights (per channel), activations left in float."""
    require_onnx()
    from onnxruntime.quantization import QuantType, quantize_dynamic

    with _quiet_libraries():
        quantize_dynamic(str(src), str(out), weight_type=QuantType.QInt8, per_channel=True)
    return {
        "path": out.name,
        "method": "onnxruntime dynamic quantisation: int8 weights per channel, "
        "activations quantised at run time",
    }


class OnnxEncoder:
    """Embeddings from an exported graph with onnxruntime on the CPU (its default thread pool:
    one thread per physical core). ``encode`` also takes sentence-transformers' keyword
    arguments, so ``models.encode`` can drive it like a PyTorch model; ``search_precision``
    names the backend for the embedding cache and the records ("onnx-float32", "onnx-int8")."""

    def __init__(
        self, path: Path, tokenizer: Any, max_seq_length: int, precision: str = "onnx-float32"
    ) -> None:
        require_onnx()
        import onnxruntime as ort

        opts = ort.SessionOptions()
        opts.log_severity_level = 3
        try:
            self.session = ort.InferenceSession(
                str(path), sess_options=opts, providers=["CPUExecutionProvider"]
            )
        except Exception as exc:  # onnxruntime raises its own types for a damaged graph
            from ballast.core.errors import InputError

            raise InputError(
                f"cannot load the ONNX graph: {str(exc).splitlines()[0][:200]}", path=path
            ) from None
        self.names = [i.name for i in self.session.get_inputs()]
        self.tokenizer = tokenizer
        self.max_seq_length = int(max_seq_length)
        self.dimension = int(self.session.get_outputs()[0].shape[-1])
        self.search_precision = precision

    def get_embedding_dimension(self) -> int:
        return self.dimension

    def encode(
        self,
        texts: list[str],
        *,
        batch_size: int = 64,
        label: str = "encoding (onnx)",
        progress: Progress = SILENT,
        normalize_embeddings: bool = True,
        **_sentence_transformers_options: Any,
    ) -> np.ndarray:
        if not normalize_embeddings:
            raise ValueError("the ONNX graph normalises its embeddings; it cannot leave them raw")
        out = []
        for start in range(0, len(texts), batch_size):
            feed = _tokenize(
                self.tokenizer, texts[start : start + batch_size], self.max_seq_length, self.names
            )
            out.append(np.asarray(self.session.run([OUTPUT], feed)[0], dtype=np.float32))
            progress.step(label, min(start + batch_size, len(texts)), len(texts))
        if not out:
            return np.zeros((0, self.dimension), dtype=np.float32)
        return np.concatenate(out)


def open_onnx(bundle: Path, file: str, max_seq_length: int) -> OnnxEncoder:
    """An encoder for a graph in a bundle, with the bundle's own tokenizer."""
    from ballast.models.loading import load_tokenizer

    return OnnxEncoder(bundle / file, load_tokenizer(bundle), max_seq_length)



def search_encoder(
    model_dir: Path,
    model_fp: str,
    backend: str,
    cache_root: Path,
    max_seq_length: int,
    *,
    progress: Progress = SILENT,
) -> OnnxEncoder:
    """``model_dir`` as an ONNX graph for the stages' own encodings (``evaluate.backend``):
    exported, checked against PyTorch (``export_onnx``) and, for "onnx-int8", quantised, once
    per model fingerprint, under ``cache_root/onnx/<fingerprint>/``; later runs and stages
    reuse the files. Each file is written under a temporary name and renamed when complete, so
    an interrupted export leaves nothing that looks finished."""
    import os

    from ballast.models.loading import load_tokenizer

    if backend not in ("onnx", "onnx-int8"):
        raise ValueError(f"not an ONNX backend: {backend!r}")
    folder = cache_root / "onnx" / model_fp[:24]
    graph = folder / ONNX_FILE
    if not graph.is_file():
        progress.info(f"{backend}: exporting {model_dir.name} to ONNX (once per model)")
        part = folder / f".{ONNX_FILE}.part"
        export_onnx(model_dir, part, progress=progress)
        os.replace(part, graph)
    if backend == "onnx-int8":
        quantised = folder / INT8_FILE
        if not quantised.is_file():
            part = folder / f".{INT8_FILE}.part"
            quantize_int8(graph, part)
            os.replace(part, quantised)
        graph = quantised
    precision = "onnx-int8" if backend == "onnx-int8" else "onnx-float32"
    tokenizer = load_tokenizer(model_dir)
    return OnnxEncoder(graph, tokenizer, max_seq_length, precision)
