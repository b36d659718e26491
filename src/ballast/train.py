"""Fine-tuning with sentence-transformers on the CPU: every weight ("full") or LoRA ("lora").

MultipleNegativesRankingLoss (in-batch negatives plus the mined hard negatives), batches drawn
without duplicate texts, seeded data order and initialisation. ``train.loss = "cached_mnrl"``
computes the same loss in chunks of ``mini_batch_size`` (GradCache, Gao et al. 2021). LoRA
(Hu et al. 2021) wraps the inner transformer with peft and is merged before saving, so the
model folder is a plain sentence-transformers model. The frozen-encoder adapter is adapter.py.
"""

from __future__ import annotations

import time
from pathlib import Path
from typing import Any

from .config import TrainConfig
from .models import load_encoder
from .progress import SILENT, Progress


def _callback(progress: Progress, history: list[dict]) -> Any:
    from transformers import TrainerCallback

    class Report(TrainerCallback):
        def on_log(self, args, state, control, logs=None, **kw):  # noqa: ANN001
            if logs and "loss" in logs:
                history.append(
                    {
                        "step": state.global_step,
                        "epoch": round(state.epoch or 0, 4),
                        "loss": round(float(logs["loss"]), 6),
                    }
                )

        def on_step_end(self, args, state, control, **kw):  # noqa: ANN001
            progress.step("training", state.global_step, state.max_steps)

    return Report()


LORA_TARGETS = ["query", "value"]  # BERT's attention projections, as in Hu et al. 2021


def _add_lora(model: Any, cfg: TrainConfig) -> None:
    """Wrap the inner transformer with LoRA; only the low-rank matrices are trained."""
    from peft import LoraConfig, get_peft_model

    inner = model[0]
    inner.model = get_peft_model(
        inner.model,
        LoraConfig(
            r=cfg.lora_rank,
            lora_alpha=cfg.lora_alpha,
            lora_dropout=0.0,
            target_modules=LORA_TARGETS,
            bias="none",
        ),
    )


def _merge_lora(model: Any) -> None:
    inner = model[0]
    inner.model = inner.model.merge_and_unload()


def train_model(
    base: Path,
    examples: list[dict],
    cfg: TrainConfig,
    *,
    seed: int,
    out_dir: Path,
    work_dir: Path,
    progress: Progress = SILENT,
) -> dict[str, Any]:
    """Fine-tune ``base`` on (anchor, positive, negatives) examples; save to ``out_dir``."""
    import torch
    from datasets import Dataset
    from sentence_transformers import (
        SentenceTransformerTrainer,
        SentenceTransformerTrainingArguments,
    )
    from sentence_transformers.sentence_transformer.losses import (
        CachedMultipleNegativesRankingLoss,
        MultipleNegativesRankingLoss,
    )

    if cfg.threads:
        torch.set_num_threads(cfg.threads)
    torch.manual_seed(seed)
    model = load_encoder(base, max_seq_length=cfg.max_seq_length)
    # A non-empty widget list stops the trainer drawing model-card examples, which would
    # use the global `random` state and draw a progress bar; ballast writes no model card.
    model.model_card_data.widget = [{"text": ""}]
    if cfg.mode == "lora":
        _add_lora(model, cfg)
    n_neg = min((len(e["negatives"]) for e in examples), default=0)
    columns: dict[str, list[str]] = {
        "anchor": [e["anchor"] for e in examples],
        "positive": [e["positive"] for e in examples],
    }
    for j in range(n_neg):
        columns[f"negative_{j + 1}"] = [e["negatives"][j] for e in examples]
    dataset = Dataset.from_dict(columns)
    steps_per_epoch = -(-len(examples) // cfg.batch_size)
    args = SentenceTransformerTrainingArguments(
        output_dir=str(work_dir),
        num_train_epochs=cfg.epochs,
        per_device_train_batch_size=cfg.batch_size,
        learning_rate=cfg.learning_rate,
        warmup_steps=cfg.warmup_ratio,
        seed=seed,
        data_seed=seed,
        batch_sampler="no_duplicates",
        save_strategy="steps" if cfg.checkpoint_steps else "no",
        save_steps=cfg.checkpoint_steps or 500,
        save_total_limit=2,
        logging_steps=max(1, steps_per_epoch // 10),
        report_to="none",
        disable_tqdm=True,
        use_cpu=True,
        dataloader_num_workers=0,
    )
    history: list[dict] = []
    if cfg.loss == "cached_mnrl":
        loss = CachedMultipleNegativesRankingLoss(model, mini_batch_size=cfg.mini_batch_size)
    else:
        loss = MultipleNegativesRankingLoss(model)
    trainer = SentenceTransformerTrainer(
        model=model,
        args=args,
        train_dataset=dataset,
        loss=loss,
        callbacks=[_callback(progress, history)],
    )
    from transformers.trainer_callback import PrinterCallback

    trainer.remove_callback(PrinterCallback)  # ballast reports progress itself
    for cb in list(trainer.callback_handler.callbacks):
        if type(cb).__name__.endswith("ModelCardCallback"):
            trainer.remove_callback(cb)  # no model card: it would embed dates and examples
    started = time.perf_counter()
    resume = None
    if cfg.checkpoint_steps:
        ckpts = sorted(work_dir.glob("checkpoint-*"), key=lambda p: int(p.name.split("-")[1]))
        resume = str(ckpts[-1]) if ckpts else None
    result = trainer.train(resume_from_checkpoint=resume)
    seconds = time.perf_counter() - started
    if cfg.mode == "lora":
        _merge_lora(model)
    model.save(str(out_dir), create_model_card=False, safe_serialization=True)
    return {
        "pairs": len(examples),
        "hard_negatives_per_pair": n_neg,
        "steps": int(result.global_step),
        "seconds": round(seconds, 2),
        "pairs_per_second": round(len(examples) * cfg.epochs / max(seconds, 1e-9), 3),
        "final_loss": round(float(result.training_loss), 6),
        "loss_history": history,
        "resumed_from": Path(resume).name if resume else None,
    }
