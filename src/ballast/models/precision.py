"""bfloat16 or float32: whether this machine computes bfloat16 natively, and the ``"auto"``
setting of ``train.bf16`` and ``evaluate.bf16`` resolved against it."""

from __future__ import annotations

from pathlib import Path


def cpu_bf16_native() -> bool:
    """Whether this CPU has bfloat16 instructions (AVX-512 BF16 or AMX BF16, Linux flags);
    without them bf16 autocast on the CPU is emulated and usually slower than float32."""
    try:
        flags = Path("/proc/cpuinfo").read_text("utf-8", errors="replace")
    except OSError:
        return False
    return "avx512_bf16" in flags or "amx_bf16" in flags


def use_bf16(setting: bool | str) -> bool:
    """A bf16 setting resolved: true or false as set; "auto" is on where bfloat16 arithmetic
    is native (a CUDA GPU that supports it, or a CPU with AVX-512 BF16 or AMX) and off
    elsewhere, where emulated autocast is much slower (docs/training.md)."""
    if setting != "auto":
        return bool(setting)
    import torch

    if torch.cuda.is_available():
        return bool(torch.cuda.is_bf16_supported())
    return cpu_bf16_native()
