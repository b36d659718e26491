"""Stage train: fine-tune the base model -> model/ and train.json."""

from __future__ import annotations

import functools
from pathlib import Path
from typing import Any

from ballast import __version__
from ballast.config.record import section_dict
from ballast.core.errors import StageError
from ballast.core.records import training_positive
from ballast.core.splits import dev_query_ids, training_query_ids
from ballast.io.files import atomic_dir, read_jsonl, write_json
from ballast.stages.base import Run, Stage, without_timings


def dev_set(
    run: Run, passages: list[dict], queries: list[dict], splits: dict, which: str = "all"
) -> Any:
    """The dev queries (``which``: a key of core.splits.DEV_SPLITS) against the whole corpus,
    scored by the gate's primary metric, for ``train.eval_steps`` and the safety net; an error
    when there are none."""
    from ballast.core.records import qrels_for
    from ballast.stages.train.full import DevSet

    qids = dev_query_ids(splits, which)
    if not qids:
        raise StageError(
            "train.eval_steps scores the dev split, which has no queries: set "
            "split.dev_fraction above 0 (or train.eval_steps = 0)"
        )
    by_qid = {q["id"]: q for q in queries}
    qrels = qrels_for(queries)
    return DevSet(
        [by_qid[q]["text"] for q in qids],
        [qrels[q] for q in qids],
        [p["id"] for p in passages],
        [p["text"] for p in passages],
        run.cfg.gate.primary_metric,
        run.cfg.evaluate.batch_size,
    )


def _preflight(run: Run, splits: dict) -> None:
    """Training is the expensive part: refuse it when a gated split is too small to decide
    (`ballast train` run alone gets the check stage's count check too)."""
    from ballast.core.gate import preflight_problems

    problems = preflight_problems(splits, run.cfg)
    if problems:
        raise StageError("pre-flight: " + "; ".join(problems))


def train(run: Run) -> dict[str, Any]:
    from ballast.stages.train.full import train_model

    passages, queries, splits = run.passages(), run.queries(), run.splits()
    _preflight(run, splits)
    by_pid = {p["id"]: p for p in passages}
    by_qid = {q["id"]: q for q in queries}
    negs = {
        r["query_id"]: r
        for _, r in read_jsonl(run.need("negatives.jsonl", "mine"), allow_empty=True)
    }
    train_pool = [p for p in passages if p["doc_id"] in set(splits["documents"]["train"])]
    rng = run.rng("train")
    want = run.cfg.mine.negatives
    examples, indexed, padded = [], [], 0
    trained = training_query_ids(splits)
    for qid in trained:
        q = by_qid[qid]
        pos = by_pid[q["passage_id"]]
        neg = [by_pid[n["id"]]["text"] for n in negs.get(qid, {}).get("negatives", [])]
        while len(neg) < want:  # too few mined: a random passage of another document
            cand = train_pool[int(rng.integers(len(train_pool)))]
            if cand["doc_id"] != pos["doc_id"] and cand["text"] not in neg:
                neg.append(cand["text"])
                padded += 1
        examples.append(
            {"anchor": q["text"], "positive": training_positive(q, pos), "negatives": neg}
        )
        indexed.append(pos["text"])
    taught = _teacher_labels(run, examples, trained, by_pid)
    if len(examples) < 2:
        raise StageError(
            f"{len(examples)} training pair(s); need at least 2 — add documents "
            "or lower split.test_fraction"
        )
    if taught:
        run.progress.info(
            f"train: {len(examples)} queries, each with {taught} candidates scored by the "
            f"{run.cfg.teach.teacher} teacher ({run.cfg.teach.loss}), "
            f"{run.cfg.train.epochs} epoch(s)"
        )
    else:
        run.progress.info(
            f"train: {len(examples)} pairs, {want} hard negative(s) each, "
            f"{run.cfg.train.epochs} epoch(s)"
        )
    work = run.path(".train-work")
    from ballast.stages.train.full import process_rank

    adapter = run.cfg.train.mode == "adapter"
    dev = (
        dev_set(run, passages, queries, splits)
        if run.cfg.train.eval_steps or (adapter and splits["queries"].get("dev"))
        else None
    )
    fit = functools.partial(
        train_model, run.base_path, examples, run.cfg.train, seed=run.cfg.seed,
        work_dir=work, dev=dev, progress=run.progress,
        teach=run.cfg.teach if taught else None,
        net_texts=0 if adapter else _net_texts(run, len(passages), splits),
    )  # fmt: skip
    rank, world = process_rank()
    if rank != 0:  # torchrun: a helper process trains its share and writes nothing
        import tempfile

        with tempfile.TemporaryDirectory() as scratch:
            return fit(out_dir=Path(scratch))
    with atomic_dir(run.path("model")) as tmp:
        if adapter:
            stats = train_frozen_adapter(run, examples, indexed, passages, dev, tmp)
        else:
            stats = fit(out_dir=tmp)
            stats["mix"] = _safety_net(run, tmp, dev, passages, queries, splits)
        write_json(
            tmp / "ballast_train.json",
            {
                "train": section_dict(run.cfg.train),
                "seed": run.cfg.seed,
                "base_model": run.cfg.base_model,
                "base_fingerprint": run.base_fp,
                "ballast": __version__,
            },
        )
    import shutil

    shutil.rmtree(work, ignore_errors=True)
    stats["padded_negatives"] = padded
    stats["teacher"] = _teacher_summary(run, taught)
    stats["processes"] = world
    write_json(run.path("train.json"), without_timings(stats))  # timings: train.done.json
    return {k: v for k, v in stats.items() if k != "loss_history"}


def _teacher_labels(run: Run, examples: list[dict], qids: list[str], by_pid: dict) -> int:
    """With labels from the teach stage, give each example its candidates (the training
    positive first, then the other passages the teacher scored) and the teacher's standardised
    scores; returns the candidates per example (0: no labels, the contrastive loss stays).
    Every example gets the same number (the fewest any query has), as the loss needs."""
    import json

    if run.cfg.teach.teacher == "none":
        return 0
    info = json.loads(run.need("teacher.json", "teach").read_text("utf-8"))
    if info.get("refused") or info.get("teacher") != run.cfg.teach.teacher:
        return 0
    from ballast.core.teaching import standardise

    labels = {
        r["query_id"]: r["candidates"]
        for _, r in read_jsonl(run.need("labels.jsonl", "teach"), allow_empty=True)
    }
    missing = [q for q in qids if q not in labels]
    if missing:
        raise StageError(
            f"labels.jsonl has no teacher scores for {len(missing)} training queries "
            f"(e.g. {missing[0]}); run `ballast teach` again"
        )
    n = min(len(labels[q]) for q in qids)
    for e, q in zip(examples, qids, strict=True):
        cands = labels[q][:n]
        e["candidates"] = [by_pid[c["id"]]["text"] for c in cands[1:]]
        e["labels"] = standardise([c["score"] for c in cands]).round(6).tolist()
    return n


def _teacher_summary(run: Run, taught: int) -> dict[str, Any] | None:
    t = run.cfg.teach
    if t.teacher == "none":
        return None
    if not taught:
        return {"teacher": t.teacher, "used": False,
                "why": "refused by the teacher check (teacher.json)"}  # fmt: skip
    return {"teacher": t.teacher, "used": True, "candidates": taught, "loss": t.loss,
            "temperature": t.temperature, "contrastive_weight": t.contrastive_weight}  # fmt: skip


def _net_texts(run: Run, passages: int, splits: dict) -> int:
    """At most how many texts the safety net encodes for each weight it scores: the dev
    queries and their candidates (stages/train/mix.py); 0 when there is no net to run."""
    from ballast.stages.train.mix import CANDIDATES

    n_dev = len(dev_query_ids(splits, run.cfg.train.mix_queries))
    if not (run.cfg.train.mix_weights and n_dev):
        return 0
    return n_dev + min(passages, n_dev * (CANDIDATES + 1))


def _safety_net(
    run: Run, model_dir: Path, dev: Any, passages: list[dict], queries: list[dict], splits: dict
) -> dict[str, Any] | None:
    """train.mix_weights: keep the interpolation of base and tuned weights that scores best on
    the dev queries of train.mix_queries (weight 0 is the base model; stages/train/mix.py).
    ``dev``: train.eval_steps' dev set (every dev query), reused where the net scores all."""
    weights = tuple(run.cfg.train.mix_weights)
    if not weights:
        return None
    which = run.cfg.train.mix_queries
    if not dev_query_ids(splits, which):
        run.progress.info("train: no dev queries, so the base/tuned mix is not chosen; tuned kept")
        return None
    from ballast.models.loading import load_encoder
    from ballast.models.precision import use_bf16
    from ballast.stages.train.mix import choose_weight

    if dev is None or which != "all":
        dev = dev_set(run, passages, queries, splits, which)
    base = run.base_encoder()
    base_passages = run.encode(base, run.base_fp, dev.passage_texts, "encoding passages (base)")
    base_queries = run.encode(base, run.base_fp, dev.query_texts, "encoding dev queries (base)")
    tuned = load_encoder(model_dir, max_seq_length=run.cfg.train.max_seq_length)
    descend = run.cfg.train.mix_search == "descend"
    run.progress.info(f"train: scoring base/tuned mixes {', '.join(f'{w:g}' for w in weights)}"
                      f"{' (largest first, until the score falls)' if descend else ''} "
                      f"on {len(dev.query_texts)} {'real ' if which == 'real' else ''}"
                      "dev queries")  # fmt: skip
    net = choose_weight(
        base, tuned, dev, weights, base_passages=base_passages, base_queries=base_queries,
        base_bf16=run.encode_bf16, descend=descend,
        bf16=use_bf16(run.cfg.train.bf16), progress=run.progress,
    )  # fmt: skip
    if net["weight"] != 1.0:
        tuned.save(str(model_dir), create_model_card=False, safe_serialization=True)
    run.progress.info(f"train: kept weight {net['weight']:g} of the tuned model (dev {dev.metric}"
                      f", {net['precision']}: " + ", ".join(
                          f"{w} {v:.4f}" for w, v in net["dev_scores"].items()) + ")")  # fmt: skip
    return {**net, "dev_queries": len(dev.query_texts), "queries": which, "metric": dev.metric}


def train_frozen_adapter(
    run: Run,
    examples: list[dict],
    indexed: list[str],
    passages: list[dict],
    dev: Any,
    out_dir: Path,
) -> dict[str, Any]:
    """train.mode = "adapter": a linear map on the base model's cached embeddings.

    Each query is pulled towards its passage as the index holds it (``indexed``: the whole
    passage, not a masked inverse-cloze positive, whose embedding no index contains; measured
    better on dev, docs/training.md). The passages' embeddings come from the cache the mine
    stage filled; the queries are encoded once (and cached). With ``dev`` (the dev split has
    queries) every epoch is scored there and the best map kept, the identity included. The
    folder saved is the base model plus a Dense and a Normalize module: on the query route of a
    sentence-transformers ``Router`` (query side; plain ``encode`` is the base model, the
    document encoder) or for every text (both sides); ``adapter.safetensors`` holds the matrix
    either way."""
    import numpy as np

    from ballast.models.query_map import (
        ADAPTER_FILE,
        append_dense,
        route_queries,
        save_adapter,
    )
    from ballast.stages.train.adapter import dev_scorer, train_adapter

    cfg = run.cfg.train
    if cfg.threads:
        import torch

        torch.set_num_threads(cfg.threads)
    model = run.base_encoder()

    def enc(texts: list[str], label: str) -> np.ndarray:
        return run.encode(model, run.base_fp, texts, label)

    texts = [p["text"] for p in passages]
    emb = enc(texts, "encoding passages (base)")
    index = {t: i for i, t in enumerate(texts)}
    n_neg = min((len(e["negatives"]) for e in examples), default=0)
    pos_ids = np.array([index[t] for t in indexed], dtype=np.int64)
    neg_ids = np.array(
        [[index[t] for t in e["negatives"][:n_neg]] for e in examples], dtype=np.int64
    ).reshape(len(examples), n_neg)
    q_emb = enc([e["anchor"] for e in examples], "encoding training queries (base)")
    score = None
    if dev is not None:
        score = dev_scorer(
            enc(dev.query_texts, "encoding dev queries (base)"),
            emb,
            dev.passage_ids,
            dev.qrels,
            dev.metric,
            cfg.adapter_side,
        )
    else:
        run.progress.info(
            "train: the dev split has no queries, so the adapter's epochs are not checked; "
            "the last one is kept"
        )
    w, stats = train_adapter(
        q_emb,
        emb[pos_ids],
        emb[neg_ids],
        pos_ids,
        neg_ids,
        side=cfg.adapter_side,
        rank=cfg.adapter_rank,
        epochs=cfg.adapter_epochs,
        batch_size=cfg.batch_size,
        learning_rate=cfg.adapter_learning_rate,
        seed=run.cfg.seed,
        threads=cfg.threads or 1,
        score=score,
        patience=cfg.early_stopping_patience,
        progress=run.progress,
    )
    if stats.get("best_epoch") == 0:
        run.progress.info(
            f"train: no adapter epoch beat the base model on dev ({dev.metric} "
            f"{stats['dev_identity']:.4f}); the map saved is the identity"
        )
    if cfg.adapter_side == "both":
        append_dense(model, w)
    else:
        model = route_queries(model, w)
    model.save(str(out_dir), create_model_card=False, safe_serialization=True)
    save_adapter(out_dir / ADAPTER_FILE, w, side=cfg.adapter_side, rank=cfg.adapter_rank)
    return {
        "mode": "adapter",
        "adapter_side": cfg.adapter_side,
        "pairs": len(examples),
        "hard_negatives_per_pair": n_neg,
        "pairs_per_second": round(
            len(examples) * stats["epochs_run"] / max(stats["seconds"], 1e-9), 3
        ),
        **stats,
        "resumed_from": None,
    }


STAGE = Stage(
    "train",
    train,
    keys=(
        "train",
        "seed",
        "mine.negatives",
        "evaluate.batch_size",
        "evaluate.bf16",  # the base model's encodings (the adapter, the safety net)
        "gate.primary_metric",  # the metric that picks the best dev checkpoint
        "gate.splits",  # the pre-flight count check
        "gate.min_queries",
        "teach",  # the distillation loss and its settings
    ),
    inputs=(
        "passages.jsonl", "queries.jsonl", "splits.json", "negatives.jsonl",
        "labels.jsonl", "teacher.json",
    ),  # fmt: skip
    outputs=("model", "train.json"),
    base_model=True,
)
