"""Fine-tuning with sentence-transformers on the CPU: every weight ("full") or LoRA ("lora").

MultipleNegativesRankingLoss (in-batch negatives plus the mined hard negatives), batches drawn
without duplicate texts, seeded data order and initialisation. ``train.loss = "cached_mnrl"``
computes the same loss in chunks of ``mini_batch_size`` (GradCache, Gao et al. 2021). LoRA
(Hu et al. 2021) wraps the inner transformer with peft and is merged before saving, so the
model folder is a plain sentence-transformers model. The frozen-encoder adapter is adapter.py.
"""

from __future__ import annotations

import time
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from ballast.config import TeachConfig, TrainConfig
from ballast.core.progress import SILENT, Progress
from ballast.models.loading import load_encoder
from ballast.models.precision import cpu_bf16_native, use_bf16
from ballast.stages.train.distill import distillation_loss


def process_rank() -> tuple[int, int]:
    """(rank, world size) of this process when torchrun started it (PyTorch DDP); else (0, 1)."""
    import os

    return int(os.environ.get("RANK", "0")), int(os.environ.get("WORLD_SIZE", "1"))


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


# Where transformers keeps the stack of layers and the embeddings, by architecture family:
# BERT, RoBERTa, XLM-R, MPNet, E5, BGE (encoder.layer); DistilBERT (transformer.layer);
# ModernBERT and decoder-style models (layers / embed_tokens).
_LAYER_STACKS = ("encoder.layer", "transformer.layer", "encoder.layers", "layers")
_EMBEDDINGS = ("embeddings", "embed_tokens")


def _attribute(obj: Any, dotted: str) -> Any:
    for part in dotted.split("."):
        obj = getattr(obj, part, None)
        if obj is None:
            return None
    return obj


def freeze_lower_layers(model: Any, n: int) -> int:
    """Keep the token embeddings and the lowest ``n`` transformer layers at their base weights
    (``requires_grad`` off), so the backward pass stops above them and the optimizer skips
    them; returns the number of weights that still train. The lower layers of a pretrained
    transformer carry the most general features and change least in fine-tuning (Lee et al.,
    "What would Elsa do? Freezing layers during transformer fine-tuning", 2019)."""
    from ballast.core.errors import StageError

    inner = getattr(model[0], "auto_model", None)
    layers = next((x for x in (_attribute(inner, d) for d in _LAYER_STACKS) if x is not None),
                  None)  # fmt: skip
    embeddings = next(
        (x for x in (_attribute(inner, d) for d in _EMBEDDINGS) if x is not None), None
    )
    if layers is None or embeddings is None:
        raise StageError(
            f"train.frozen_layers: no stack of transformer layers found in "
            f"{type(inner if inner is not None else model[0]).__name__}; set "
            "train.frozen_layers = 0 for this model"
        )
    if n >= len(layers):
        raise StageError(
            f"train.frozen_layers = {n}, but the model has {len(layers)} layers: nothing "
            f"would train; at most {len(layers) - 1}"
        )
    for module in [embeddings, *list(layers)[:n]]:
        for p in module.parameters():
            p.requires_grad_(False)
    return sum(p.numel() for p in model.parameters() if p.requires_grad)


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


@dataclass(frozen=True)
class DevSet:
    """Queries of the dev split and the corpus they search, for choosing the best checkpoint."""

    query_texts: list[str]
    qrels: list[dict[str, int]]
    passage_ids: list[str]
    passage_texts: list[str]
    metric: str  # e.g. "ndcg@10": the gate's primary metric
    batch_size: int = 64  # encoding batch (evaluate.batch_size)


def _dev_evaluator(dev: DevSet, history: list[dict]) -> Any:
    """An evaluator for the trainer: ranks the whole corpus for the dev queries with the model as
    it is now and scores ``dev.metric`` with ballast's own metrics (ties by passage id, as in
    ``ballast evaluate``)."""
    from sentence_transformers.base.evaluation import BaseEvaluator

    from ballast.core.scoring import mean_metric
    from ballast.models.encode import encode

    class DevEvaluator(BaseEvaluator):
        def __init__(self) -> None:
            super().__init__()
            self.primary_metric = f"dev_{dev.metric}"

        def __call__(self, model, output_path=None, epoch=-1, steps=-1):  # noqa: ANN001
            p_emb = encode(model, dev.passage_texts, batch_size=dev.batch_size)
            q_emb = encode(model, dev.query_texts, batch_size=dev.batch_size)
            value = mean_metric(q_emb, p_emb, dev.passage_ids, dev.qrels, dev.metric)
            history.append(
                {"step": int(steps), "epoch": round(float(epoch), 4), dev.metric: round(value, 6)}
            )
            return {self.primary_metric: value}

    return DevEvaluator()


def _loss(model: Any, cfg: TrainConfig) -> Any:
    from sentence_transformers.sentence_transformer.losses import (
        CachedMultipleNegativesRankingLoss,
        MatryoshkaLoss,
        MultipleNegativesRankingLoss,
    )

    if cfg.loss == "cached_mnrl":
        loss = CachedMultipleNegativesRankingLoss(model, mini_batch_size=cfg.mini_batch_size)
    else:
        loss = MultipleNegativesRankingLoss(model)
    if cfg.matryoshka_dims:
        full = model.get_sentence_embedding_dimension()
        if max(cfg.matryoshka_dims) > full:
            from ballast.core.errors import InputError

            raise InputError(
                f"dimension {max(cfg.matryoshka_dims)} is larger than the model's {full}",
                field="train.matryoshka_dims",
            )
        loss = MatryoshkaLoss(model, loss, list(cfg.matryoshka_dims))
    return loss


def with_min_steps(cfg: TrainConfig, n: int) -> TrainConfig:
    """``cfg`` with its epochs raised so that ``n`` training examples (or ``train.max_pairs``
    of them, when that is fewer) make at least ``train.min_steps`` optimizer steps. A fixed
    number of steps whatever the collection's size is how domain adaptation is usually trained
    (GPL, Wang et al., NAACL 2022, trains every collection for the same number of steps); one
    epoch of a small collection's few pairs is a handful of steps (three on a 300-passage
    FAQ). ``train.minutes`` still caps the examples so that the raised epochs fit it. Off by
    default: on four small FAQs 32 steps (4 to 11 epochs) overfit their few pairs and lost on
    real dev questions (docs/training.md, "A floor of steps")."""
    import dataclasses

    from ballast.stages.train import budget

    if not cfg.min_steps:
        return cfg
    per_epoch = max(1, -(-budget.cap(n, cfg, None) // cfg.batch_size))
    epochs = max(cfg.epochs, -(-cfg.min_steps // per_epoch))
    if epochs == cfg.epochs:
        return cfg
    from ballast.config.record import unwrap

    return dataclasses.replace(unwrap(cfg), epochs=epochs)


ESTIMATE_ABOVE = 30  # steps: shorter trainings start at once, unless a budget is set


def _estimate(
    model: Any, loss: Any, columns: dict[str, list[Any]], cfg: TrainConfig, *, seed: int,
    bf16: bool, work_dir: Path, progress: Progress, net_texts: int = 0,
) -> tuple[dict[str, list[Any]], dict[str, Any] | None]:  # fmt: skip
    """Say how long training will take (a timed warm-up) and apply ``train.minutes`` and
    ``train.max_pairs``; with ``net_texts`` (the texts the safety net encodes for each weight
    it scores), how long the net will take too. The choice is kept in the work folder, so a
    resumed training trains on the same examples whatever the machine's speed is now."""
    import json

    from ballast.core.text import sha256_bytes
    from ballast.stages.train import budget

    n = len(columns["anchor"])
    steps = -(-n // cfg.batch_size) * cfg.epochs
    if not (cfg.minutes or cfg.max_pairs or steps > ESTIMATE_ABOVE):
        return columns, None
    saved = work_dir / "budget.json"
    key = [n, cfg.minutes, cfg.max_pairs, cfg.batch_size, cfg.epochs, seed,
           sha256_bytes("\0".join(columns["anchor"]).encode("utf-8"))]  # fmt: skip
    before = json.loads(saved.read_text("utf-8")) if saved.is_file() else {}
    if before.get("key") == key:
        kept, info = before["kept"], before["info"]
        progress.info(f"train: resuming on the {len(kept)} examples chosen before")
    elif cfg.minutes or steps > ESTIMATE_ABOVE:
        kept, info = budget.plan(model, loss, columns, cfg, seed=seed, bf16=bf16)
        step = info["warmup_seconds_per_step"]
        full = step * steps / 60
        said = f"train: {steps} steps of {cfg.batch_size} at about {step:.2f} s a step here: " \
               f"about {full:.1f} min"  # fmt: skip
        if cfg.eval_steps:
            said += f" (dev scoring every {cfg.eval_steps} steps not included)"
        mixes = sum(1 for w in cfg.mix_weights if w)
        if net_texts and mixes:
            texts_a_step = cfg.batch_size * sum(1 for k in columns if k != "label")
            info["net_minutes_per_weight"] = round(
                budget.encoding_seconds(step, texts_a_step, net_texts) / 60, 2
            )
            fewest = min(2, mixes) if cfg.mix_search == "descend" else mixes
            count = str(mixes) if fewest == mixes else f"{fewest} to {mixes}"
            said += (f"; then the safety net, about {info['net_minutes_per_weight']:.1f} min "
                     f"for each of the {count} weights it scores")  # fmt: skip
        progress.info(said)
    else:
        kept = budget.choose(n, budget.cap(n, cfg, None), seed)
        info = {"pairs_available": n, "pairs_kept": len(kept), "max_pairs": cfg.max_pairs}
    if len(kept) < n:
        why = f"train.minutes = {cfg.minutes:g}" if cfg.minutes else "train.max_pairs"
        progress.info(f"train: {why}: training on {len(kept)} of {n} examples (seeded choice)"
                      + (f", about {info['estimated_minutes']:.1f} min" if "estimated_minutes"
                         in info else ""))  # fmt: skip
    work_dir.mkdir(parents=True, exist_ok=True)
    saved.write_text(json.dumps({"key": key, "kept": kept, "info": info}), "utf-8")
    return {k: [v[i] for i in kept] for k, v in columns.items()}, info


def _batching(
    model: Any, columns: dict[str, list[str]], cfg: TrainConfig, *, seed: int, no_duplicates: bool
) -> tuple[dict[str, Any], Any]:
    """The share of pad tokens of one epoch batched at random and by length (the same seed;
    sorted by the column that leaves the fewest), and the batch sampler for ``train.batching
    = "length"`` (None: the trainer's own)."""
    import numpy as np

    from ballast.stages.train import batches

    lengths = batches.token_lengths(model.tokenizer, columns, cfg.max_seq_length)
    texts = [set(row) for row in zip(*columns.values(), strict=True)]
    key = batches.sort_key(lengths, texts, cfg.batch_size, seed, no_duplicates=no_duplicates)
    share: dict[str, Any] = {"sorted_by": list(columns)[key]}
    for name, by_length in (("random", False), ("length", True)):
        rng = np.random.default_rng([seed, 0])
        planned = batches.plan(lengths[:, key], texts, cfg.batch_size, rng,
                               no_duplicates=no_duplicates, buckets=by_length)  # fmt: skip
        share[name] = round(batches.pad_share(planned, lengths), 4)
    if cfg.batching != "length":
        return share, None
    return share, batches.sampler(lengths, texts, key, no_duplicates=no_duplicates)


def _logged_before(log: list[dict], later: list[dict], key: str, name: str) -> list[dict]:
    """Entries of the trainer's ``log_history`` (restored from a checkpoint) that came before
    the first entry logged in this process, in the form the callbacks record."""
    first = later[0]["step"] if later else float("inf")
    return [
        {"step": int(e["step"]), "epoch": round(float(e.get("epoch") or 0), 4),
         name: round(float(e[key]), 6)}  # fmt: skip
        for e in log
        if key in e and "step" in e and e["step"] < first
    ]


def _merge_lora(model: Any) -> None:
    inner = model[0]
    inner.model = inner.model.merge_and_unload()


def last_complete_checkpoint(work_dir: Path, progress: Progress = SILENT) -> Path | None:
    """The newest checkpoint that was saved whole, or None. The Trainer writes a checkpoint's
    files one by one and ``trainer_state.json`` among the last: a kill in between leaves a
    folder that cannot be resumed from. Such folders are removed (and said), so the resume
    takes the last complete one and later rotations are not confused by them."""
    import json
    import shutil

    def step(p: Path) -> int:
        tail = p.name.split("-", 1)[-1]
        return int(tail) if tail.isdigit() else -1

    complete = []
    for ckpt in sorted(work_dir.glob("checkpoint-*"), key=step):
        try:
            json.loads((ckpt / "trainer_state.json").read_text("utf-8"))
            ok = step(ckpt) >= 0 and any(ckpt.rglob("*.safetensors"))
        except (OSError, ValueError):
            ok = False
        if ok:
            complete.append(ckpt)
        else:
            progress.info(f"train: {ckpt.name} was not saved whole (killed while saving?); removed")
            shutil.rmtree(ckpt, ignore_errors=True)
    return complete[-1] if complete else None


def train_model(
    base: Path,
    examples: list[dict],
    cfg: TrainConfig,
    *,
    seed: int,
    out_dir: Path,
    work_dir: Path,
    dev: DevSet | None = None,
    progress: Progress = SILENT,
    teach: TeachConfig | None = None,
    net_texts: int = 0,
) -> dict[str, Any]:
    """Fine-tune ``base`` on (anchor, positive, negatives) examples; save to ``out_dir``.
    ``net_texts``: what the safety net will encode for each weight, for the estimate.
    With ``teach``, each example's ``candidates`` and ``labels`` (the teacher's standardised
    scores, positive first) train a distillation loss instead (stages/train/distill.py).

    With ``cfg.eval_steps`` and a ``dev`` set, the dev metric is scored every ``eval_steps``
    steps, the best-scoring checkpoint is the one saved, and with ``early_stopping_patience``
    training stops after that many scores without a gain."""
    import torch
    from datasets import Dataset
    from sentence_transformers import (
        SentenceTransformerTrainer,
        SentenceTransformerTrainingArguments,
    )

    if cfg.eval_steps and dev is None:
        raise ValueError("train.eval_steps needs a dev set")
    world = process_rank()[1]
    bf16 = use_bf16(cfg.bf16)
    if bf16 and not torch.cuda.is_available() and not cpu_bf16_native():
        progress.info(
            "train.bf16: this CPU has no bfloat16 instructions (avx512_bf16, amx_bf16); "
            "autocast is emulated and likely slower than float32"
        )
    if cfg.threads:
        torch.set_num_threads(cfg.threads)
    torch.manual_seed(seed)
    model = load_encoder(base, max_seq_length=cfg.max_seq_length)
    # A non-empty widget list stops the trainer drawing model-card examples, which would
    # use the global `random` state and draw a progress bar; ballast writes no model card.
    model.model_card_data.widget = [{"text": ""}]
    trainable = freeze_lower_layers(model, cfg.frozen_layers) if cfg.frozen_layers else None
    if cfg.mode == "lora":
        _add_lora(model, cfg)
    others = "candidates" if teach is not None else "negatives"
    n_neg = min((len(e[others]) for e in examples), default=0)
    columns: dict[str, list[Any]] = {
        "anchor": [e["anchor"] for e in examples],
        "positive": [e["positive"] for e in examples],
    }
    for j in range(n_neg):
        columns[f"negative_{j + 1}"] = [e[others][j] for e in examples]
    if teach is not None:  # the teacher's standardised scores of positive and candidates
        columns["label"] = [e["labels"] for e in examples]
    loss = _loss(model, cfg) if teach is None else distillation_loss(model, teach)
    raised = with_min_steps(cfg, len(columns["anchor"]))
    if raised.epochs != cfg.epochs:
        progress.info(f"train: train.min_steps = {cfg.min_steps}: {raised.epochs} epochs "
                      "over the training examples")  # fmt: skip
    cfg = raised
    columns, estimate = _estimate(model, loss, columns, cfg, seed=seed, bf16=bf16,
                                  work_dir=work_dir, progress=progress,
                                  net_texts=net_texts)  # fmt: skip
    n_examples = len(columns["anchor"])
    dataset = Dataset.from_dict(columns)
    texts = {k: v for k, v in columns.items() if k != "label"}
    no_dup = teach is None or teach.contrastive_weight > 0
    padding, sampler = _batching(model, texts, cfg, seed=seed, no_duplicates=no_dup)
    steps_per_epoch = -(-n_examples // cfg.batch_size)
    save_steps = cfg.checkpoint_steps or cfg.eval_steps
    dev_args: dict[str, Any] = {}
    if cfg.eval_steps:
        dev_args = {
            "eval_strategy": "steps",
            "eval_steps": cfg.eval_steps,
            "load_best_model_at_end": True,
            "metric_for_best_model": f"eval_dev_{dev.metric}",  # type: ignore[union-attr]
            "greater_is_better": True,
        }
    args = SentenceTransformerTrainingArguments(
        output_dir=str(work_dir),
        num_train_epochs=cfg.epochs,
        per_device_train_batch_size=cfg.batch_size,
        learning_rate=cfg.learning_rate,
        warmup_steps=cfg.warmup_ratio,
        seed=seed,
        data_seed=seed,
        # in-batch negatives must not be copies of a positive; a distillation loss without
        # the contrastive term compares each query only with its own candidates
        batch_sampler=sampler or ("no_duplicates" if no_dup else "batch_sampler"),
        save_strategy="steps" if save_steps else "no",
        save_steps=save_steps or 500,
        save_total_limit=2,
        logging_steps=max(1, steps_per_epoch // 10),
        report_to="none",
        disable_tqdm=True,
        use_cpu=not torch.cuda.is_available(),
        # torchrun on CPUs: gloo; on GPUs the trainer picks NCCL itself
        ddp_backend="gloo" if not torch.cuda.is_available() and world > 1 else None,
        dataloader_num_workers=0,
        bf16=bf16,
        **dev_args,
    )
    history: list[dict] = []
    dev_history: list[dict] = []
    callbacks = [_callback(progress, history)]
    if cfg.early_stopping_patience:
        from transformers import EarlyStoppingCallback

        callbacks.append(EarlyStoppingCallback(early_stopping_patience=cfg.early_stopping_patience))
    trainer = SentenceTransformerTrainer(
        model=model,
        args=args,
        train_dataset=dataset,
        loss=loss,
        evaluator=_dev_evaluator(dev, dev_history) if cfg.eval_steps and dev else None,
        callbacks=callbacks,
    )
    from transformers.trainer_callback import PrinterCallback

    trainer.remove_callback(PrinterCallback)  # ballast reports progress itself
    for cb in list(trainer.callback_handler.callbacks):
        if type(cb).__name__.endswith("ModelCardCallback"):
            trainer.remove_callback(cb)  # no model card: it would embed dates and examples
    started = time.perf_counter()
    resume = None
    if save_steps:
        last = last_complete_checkpoint(work_dir, progress)
        resume = str(last) if last else None
    result = trainer.train(resume_from_checkpoint=resume)
    seconds = time.perf_counter() - started
    if resume:  # the curve before the checkpoint comes back from the trainer's saved state
        history[:0] = _logged_before(trainer.state.log_history, history, "loss", "loss")
        if dev is not None:
            dev_history[:0] = _logged_before(trainer.state.log_history, dev_history,
                                             f"eval_dev_{dev.metric}", dev.metric)  # fmt: skip
    if cfg.mode == "lora":
        _merge_lora(model)
    if trainer.is_world_process_zero():
        model.save(str(out_dir), create_model_card=False, safe_serialization=True)
    state = trainer.state
    dev_info: dict[str, Any] = {}
    if cfg.eval_steps:
        best = state.best_model_checkpoint
        dev_info = {
            "dev_metric": dev.metric,  # type: ignore[union-attr]
            "dev_history": dev_history,
            "best_step": int(best.rsplit("-", 1)[1]) if best else None,
            "best_dev": round(float(state.best_metric), 6)
            if state.best_metric is not None
            else None,
            "stopped_early": int(result.global_step) < int(state.max_steps),
        }
    return {
        "pairs": n_examples,
        # only where train.min_steps is set, so earlier runs' records stay as they were
        **({"min_steps": cfg.min_steps, "epochs": cfg.epochs} if cfg.min_steps else {}),
        "estimate": estimate,
        "hard_negatives_per_pair": n_neg,
        "steps": int(result.global_step),
        "seconds": round(seconds, 2),
        "pairs_per_second": round(n_examples * cfg.epochs / max(seconds, 1e-9), 3),
        "batch_size_per_process": cfg.batch_size,
        # the mean over all steps (the trainer's training_loss), and the last logged step's
        "mean_loss": round(float(result.training_loss), 6),
        "final_loss": history[-1]["loss"] if history else round(float(result.training_loss), 6),
        "loss_history": history,
        "resumed_from": Path(resume).name if resume else None,
        "matryoshka_dims": list(cfg.matryoshka_dims),
        "bf16": bf16,
        "bf16_setting": cfg.bf16,
        "bf16_native": cpu_bf16_native() if bf16 else None,
        "batching": cfg.batching,
        "pad_share": padding,
        **({"frozen_layers": cfg.frozen_layers, "trained_weights": trainable}
           if cfg.frozen_layers else {}),  # fmt: skip
    } | dev_info
