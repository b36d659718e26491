"""Data-parallel training with torchrun (PyTorch DDP) on the CPU: two processes, gloo backend.

Both processes train, each on its share of every step's batches (PyTorch's own distributed
data parallelism, through the sentence-transformers trainer); only rank 0 writes the model and
the stage's files. Other stages refuse to run under torchrun. Common practice: a distributed
run must leave the same kind of run folder a single process leaves."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

from tests.slow.test_train_modes import project

pytestmark = pytest.mark.slow


def torchrun(cfg: Path, stage: str) -> subprocess.CompletedProcess:
    return subprocess.run(
        [sys.executable, "-m", "torch.distributed.run", "--nproc_per_node=2",
         "--master_addr=127.0.0.1", "--master_port=29517",
         "-m", "ballast", stage, str(cfg), "-q"],
        cwd=cfg.parent, capture_output=True, text=True, timeout=600,
        env={**__import__("os").environ, "OMP_NUM_THREADS": "1"},
    )  # fmt: skip


def test_two_process_training_writes_one_model(tmp_path: Path) -> None:
    from ballast.config import load_config
    from ballast.pipeline import run_all
    from ballast.stages import Run

    cfg = project(tmp_path, "epochs = 2\nwarmup_ratio = 0.0\nlearning_rate = 1e-4")
    run = Run(load_config(cfg))
    run_all(run, stop_before="train")
    proc = torchrun(cfg, "train")
    assert proc.returncode == 0, proc.stderr[-3000:]
    stats = json.loads((run.dir / "train.json").read_text("utf-8"))
    assert stats["processes"] == 2
    # Each step takes batch_size pairs in every process; the sharded sampler leaves out the
    # last partial step (measured: 250 pairs, batch 8, 2 processes -> 15 steps, 240 pairs).
    assert stats["steps"] == 2 * (stats["pairs"] // (2 * 8))
    done = json.loads((run.dir / "train.done.json").read_text("utf-8"))
    assert done["summary"]["processes"] == 2
    assert (run.dir / "model" / "model.safetensors").is_file()
    assert not list(run.dir.glob(".tmp*")) and not (run.dir / ".train-work").exists()
    # The trained model loads and differs from the base model.
    from ballast.models.encode import encode
    from ballast.models.loading import load_encoder

    texts = ["how is the press cleaned?"]
    tuned = encode(load_encoder(run.dir / "model"), texts)
    base = encode(load_encoder(run.base_path), texts)
    assert abs(tuned - base).max() > 1e-4


def test_other_stages_refuse_torchrun(tmp_path: Path) -> None:
    cfg = project(tmp_path, "")
    proc = torchrun(cfg, "ingest")
    assert proc.returncode != 0
    assert "only `ballast train` runs under torchrun" in proc.stderr
    assert not (cfg.parent / "run" / "passages.jsonl").exists()
