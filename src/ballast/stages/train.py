"""Stage train: fine-tune the base model -> model/ and train.json."""

from __future__ import annotations

from typing import Any

from .. import __version__
from ..errors import StageError
from ..files import (
    atomic_dir,
    read_jsonl,
    write_json,
)
from ..synth.extractive import training_positive
from .run import Run


def train(run: Run) -> dict[str, Any]:
    from ..train import train_model

    passages, queries, splits = run.passages(), run.queries(), run.splits()
    by_pid = {p["id"]: p for p in passages}
    by_qid = {q["id"]: q for q in queries}
    negs = {
        r["query_id"]: r
        for _, r in read_jsonl(run.need("negatives.jsonl", "mine"), allow_empty=True)
    }
    train_pool = [p for p in passages if p["doc_id"] in set(splits["documents"]["train"])]
    rng = run.rng("train")
    want = run.cfg.mine.negatives
    examples, padded = [], 0
    for qid in splits["queries"]["train"]:
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
    if len(examples) < 2:
        raise StageError(
            f"{len(examples)} training pair(s); need at least 2 — add documents "
            "or lower split.test_fraction"
        )
    run.progress.info(
        f"train: {len(examples)} pairs, {want} hard negative(s) each, "
        f"{run.cfg.train.epochs} epoch(s)"
    )
    work = run.path(".train-work")
    with atomic_dir(run.path("model")) as tmp:
        stats = train_model(
            run.base_path,
            examples,
            run.cfg.train,
            seed=run.cfg.seed,
            out_dir=tmp,
            work_dir=work,
            progress=run.progress,
        )
        write_json(
            tmp / "ballast_train.json",
            {
                "train": run.cfg.to_dict()["train"],
                "seed": run.cfg.seed,
                "base_model": run.cfg.base_model,
                "base_fingerprint": run.base_fp,
                "ballast": __version__,
            },
        )
    import shutil

    shutil.rmtree(work, ignore_errors=True)
    stats["padded_negatives"] = padded
    write_json(run.path("train.json"), stats)
    return {k: v for k, v in stats.items() if k != "loss_history"}
