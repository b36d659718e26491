"""The bundle the index builder loads: the tuned model folder plus ``manifest.json``."""

from __future__ import annotations

import json
import platform
import shutil
from importlib import metadata
from pathlib import Path
from typing import Any

from .errors import InputError

SCHEMA_VERSION = 1
LIBRARIES = (
    "ballast",
    "torch",
    "sentence-transformers",
    "transformers",
    "numpy",
    "scipy",
    "scikit-learn",
    "datasets",
    "accelerate",
)


def library_versions() -> dict[str, str]:
    out = {"python": platform.python_version()}
    for name in LIBRARIES:
        try:
            out[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            out[name] = "not installed"
    return out


def safe_name(name: str) -> str:
    """A bundle folder name that cannot climb out of the export folder."""
    if not name or name in (".", "..") or "/" in name or "\\" in name or "\0" in name:
        raise InputError(
            f"bad bundle name {name!r}: expected a plain folder name", field="export.version"
        )
    return name


def model_facts(model_dir: Path) -> dict[str, Any]:
    """Dimension, similarity, pooling, normalisation and length, as the loaded model says."""
    from .models import load_encoder

    model = load_encoder(model_dir)
    modules = json.loads((model_dir / "modules.json").read_text("utf-8"))
    pooling = None
    for m in modules:
        if m.get("type", "").endswith("Pooling"):
            cfg = json.loads((model_dir / m["path"] / "config.json").read_text("utf-8"))
            pooling = cfg.get("pooling_mode") or next(
                (
                    k.removeprefix("pooling_mode_").removesuffix("_tokens")
                    for k, v in cfg.items()
                    if k.startswith("pooling_mode_") and v
                ),
                None,
            )
    return {
        "dimension": int(model.get_embedding_dimension()),
        "pooling": pooling,
        "normalized": any(m.get("type", "").endswith("Normalize") for m in modules),
        "similarity": str(model.similarity_fn_name or "cosine"),
        "max_seq_length": int(model.max_seq_length),
    }


def copy_model(src: Path, dst: Path) -> None:
    """Copy a model folder without checkpoints or hidden files."""
    for f in sorted(src.rglob("*")):
        rel = f.relative_to(src)
        if any(part.startswith(".") or part.startswith("checkpoint") for part in rel.parts):
            continue
        target = dst / rel
        if f.is_dir():
            target.mkdir(parents=True, exist_ok=True)
        else:
            target.parent.mkdir(parents=True, exist_ok=True)
            shutil.copyfile(f, target)
