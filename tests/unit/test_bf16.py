"""train.bf16 resolved: "auto" follows the hardware (common practice: bfloat16 autocast pays
only where the arithmetic is native; the CPU flag names are those Linux prints in
/proc/cpuinfo, avx512_bf16 and amx_bf16)."""

from __future__ import annotations

import pytest

import ballast.models.precision as train
from ballast.config import TrainConfig


@pytest.mark.parametrize("native", [True, False])
def test_auto_follows_the_cpu(monkeypatch: pytest.MonkeyPatch, native: bool) -> None:
    import torch

    monkeypatch.setattr(torch.cuda, "is_available", lambda: False)
    monkeypatch.setattr(train, "cpu_bf16_native", lambda: native)
    assert train.use_bf16("auto") is native
    assert train.use_bf16(True) is True and train.use_bf16(False) is False


def test_cpu_flags_are_read_from_cpuinfo(monkeypatch: pytest.MonkeyPatch, tmp_path) -> None:
    from pathlib import Path

    info = tmp_path / "cpuinfo"
    real_read = Path.read_text

    def fake(self: Path, *a, **kw):  # noqa: ANN002, ANN003, ANN202
        return (
            real_read(info, *a, **kw) if str(self) == "/proc/cpuinfo" else real_read(self, *a, **kw)
        )

    monkeypatch.setattr(Path, "read_text", fake)
    info.write_text("flags\t\t: fpu sse2 avx2 avx512f amx_bf16 amx_tile\n")
    assert train.cpu_bf16_native()
    info.write_text("flags\t\t: fpu sse2 avx2 fma\n")
    assert not train.cpu_bf16_native()


def test_auto_is_the_default() -> None:
    assert TrainConfig().bf16 == "auto"
