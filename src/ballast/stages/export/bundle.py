"""The bundle the index builder loads: the tuned model folder plus ``manifest.json``."""

from __future__ import annotations

import shutil
from pathlib import Path
from typing import Any


def model_facts(model_dir: Path) -> dict[str, Any]:
    """Dimension, similarity, pooling, normalisation and length, as the loaded model says (for a
    routed model, its document route: ``routes`` then names the routes)."""
    from ballast.models.loading import document_route, load_encoder

    model = load_encoder(model_dir)
    modules = document_route(model)
    pooling = next(
        (str(m.pooling_mode) for m in modules if getattr(m, "pooling_mode", None) is not None),
        None,
    )
    routes = getattr(model[0], "sub_modules", None)
    return {
        "dimension": int(model.get_embedding_dimension()),
        "pooling": pooling,
        "normalized": type(modules[-1]).__name__ == "Normalize",
        "similarity": str(model.similarity_fn_name or "cosine"),
        "max_seq_length": int(model.max_seq_length),
        "routes": sorted(routes) if routes is not None else None,
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


def restore_length(bundle: Path, base_dir: Path, wanted: int = 0) -> dict[str, int] | None:
    """Give the bundle ``wanted`` tokens (``export.max_seq_length``), or else the base model's
    ``max_seq_length`` (training may have used a shorter one, ``train.max_seq_length``: an index
    builder with longer chunks would otherwise be cut short without a word). Returns
    {"bundle": …, "trained": …} when it changed anything."""
    import json

    def length(folder: Path) -> int | None:
        f = folder / "sentence_bert_config.json"
        try:
            return int(json.loads(f.read_text("utf-8"))["max_seq_length"])
        except (OSError, ValueError, KeyError, TypeError):
            return None

    target = wanted or length(base_dir)
    if target is None:
        return None
    changed = None
    for f in sorted(bundle.rglob("sentence_bert_config.json")):
        cfg = json.loads(f.read_text("utf-8"))
        trained = cfg.get("max_seq_length")
        if isinstance(trained, int) and trained != target:
            cfg["max_seq_length"] = target
            f.write_text(json.dumps(cfg, indent=2) + "\n", "utf-8")
            changed = {"bundle": target, "trained": trained}
    return changed
