"""Stage teach: a teacher's scores of the training candidates -> labels.jsonl, teacher.json.

With ``teach.teacher = "none"`` (the default) both files say so and training keeps its
contrastive loss. Otherwise the teacher check comes first: on the dev queries (the real ones
when people wrote questions about dev documents, else the synthetic ones), the base model's top
``teach.check_depth`` over the whole corpus is reranked by the teacher and scored by the gate's
primary metric beside the base model's own order. A teacher that does not score higher is
refused: teacher.json says why, labels.jsonl stays empty and training keeps its contrastive
loss. Then each training query's candidates (its positive and the base model's best other
passages of the training documents) are scored by the teacher.
"""

from __future__ import annotations

import time
from typing import Any

import numpy as np

from ballast.core.errors import StageError
from ballast.core.splits import training_query_ids
from ballast.io.files import write_json, write_jsonl
from ballast.stages.base import Run, Stage, file_fingerprint


def _teacher(run: Run, texts: list[str], p_emb: np.ndarray, encode_queries: Any) -> Any:
    from ballast.stages.teach.teachers import BiEncoderTeacher, HybridTeacher, PairTeacher

    cfg = run.cfg.teach
    if cfg.teacher == "hybrid":
        return HybridTeacher(texts, p_emb, encode_queries)
    if cfg.teacher == "bi-encoder":
        from pathlib import Path

        from ballast.models.loading import check_model_folder

        check_model_folder(Path(cfg.model))
        return BiEncoderTeacher(Path(cfg.model), texts, run.cfg.evaluate.batch_size, run.cache())
    spec_fp = cfg.model if cfg.model.startswith("packaged:") else file_fingerprint(cfg.model)
    from ballast.core.text import sha256_bytes

    tag = sha256_bytes(f"{cfg.teacher}\0{spec_fp}".encode())[:16]
    return PairTeacher(cfg.teacher, cfg.model, texts, run.path("cache", f"teacher-{tag}.jsonl"),
                       run.progress)  # fmt: skip


def _dev_queries(splits: dict, by_qid: dict[str, dict]) -> tuple[str, list[dict]]:
    """The queries the teacher is checked on: real questions about dev documents when there are
    any, else the synthetic dev queries."""
    for name in ("human_dev", "dev"):
        qs = [by_qid[q] for q in splits["queries"].get(name, [])]
        if qs:
            return name, qs
    return "", []


def check_teacher(
    run: Run, teacher: Any, qs: list[dict], q_emb: np.ndarray, p_emb: np.ndarray, ids: list[str]
) -> dict[str, Any]:
    """The base model's top ``check_depth`` reranked by the teacher, against the base order,
    both scored by the gate's primary metric on the same queries (a paired comparison)."""
    from ballast.core.metrics import compute
    from ballast.core.records import qrels_for
    from ballast.core.scoring import rank
    from ballast.core.stats import compare
    from ballast.core.teaching import rerank

    metric = run.cfg.gate.primary_metric
    ranked, _ = rank(q_emb, p_emb, ids, run.cfg.teach.check_depth)
    at = {pid: i for i, pid in enumerate(ids)}
    scores = teacher.score([q["text"] for q in qs], [[at[p] for p in r] for r in ranked],
                           run.progress)  # fmt: skip
    reranked = [rerank(r, s.tolist()) for r, s in zip(ranked, scores, strict=True)]
    qrels = qrels_for(qs)
    judged = [qrels[q["id"]] for q in qs]
    base = compute([metric], ranked, judged)[metric]
    taught = compute([metric], reranked, judged)[metric]
    c = compare(base, taught, rng=run.rng("teach"), n_resamples=2000)
    return {
        "metric": metric,
        "queries": len(qs),
        "depth": run.cfg.teach.check_depth,
        "base": round(c.mean_a, 6),
        "teacher": round(c.mean_b, 6),
        "difference": round(c.mean_diff, 6),
        "ci": [round(c.ci_low, 6), round(c.ci_high, 6)],
        "p_value": round(c.p_value, 6),
    }


def teach(run: Run) -> dict[str, Any]:
    from ballast.core.search import top_k
    from ballast.core.teaching import candidate_lists

    cfg = run.cfg.teach
    info: dict[str, Any] = {"teacher": cfg.teacher, "model": cfg.model or None}
    if cfg.teacher == "none":
        write_jsonl(run.path("labels.jsonl"), [])
        write_json(run.path("teacher.json"), info | {"labelled": 0})
        return {"teacher": "none"}
    started = time.perf_counter()
    passages, queries, splits = run.passages(), run.queries(), run.splits()
    by_qid = {q["id"]: q for q in queries}
    texts, ids = [p["text"] for p in passages], [p["id"] for p in passages]
    model = run.search_encoder()

    def enc(items: list[str], label: str) -> np.ndarray:
        return run.encode(model, run.base_fp, items, label)

    p_emb = enc(texts, "encoding passages (base)")
    teacher = _teacher(run, texts, p_emb, lambda t: enc(t, "encoding queries (base)"))
    refusal = ""
    if cfg.check:
        split, dev = _dev_queries(splits, by_qid)
        if not dev:
            refusal = ("no dev queries to check the teacher on (set split.dev_fraction above 0, "
                       "or teach.check = false to distil unchecked)")  # fmt: skip
        else:
            run.progress.info(f"teach: checking the {cfg.teacher} teacher on {len(dev)} "
                              f"{split} queries")  # fmt: skip
            q_emb = enc([q["text"] for q in dev], "encoding dev queries (base)")
            check = check_teacher(run, teacher, dev, q_emb, p_emb, ids) | {"split": split}
            info["check"] = check
            line = (f"teacher {check['teacher']:.4f} vs base {check['base']:.4f} "
                    f"({check['metric']}, {check['difference']:+.4f} "
                    f"[{check['ci'][0]:+.4f}, {check['ci'][1]:+.4f}], {split})")  # fmt: skip
            if split == "dev":
                line += (
                    "; synthetic dev queries are made from passages' own words and flatter a "
                    "lexical teacher: real questions judge a teacher better"
                )
            run.progress.info(f"teach: {line}")
            if check["difference"] <= 0:
                refusal = (f"the {cfg.teacher} teacher does not beat the base model on the "
                           f"{split} queries: {line}")  # fmt: skip
    if refusal:
        run.progress.info(f"teach: refused, training keeps the contrastive loss: {refusal}")
        write_jsonl(run.path("labels.jsonl"), [])
        info |= {"refused": refusal, "labelled": 0}
        write_json(run.path("teacher.json"), info)
        return {"teacher": cfg.teacher, "refused": True} | _short_check(info)
    train_docs = set(splits["documents"]["train"])
    tidx = [i for i, p in enumerate(passages) if p["doc_id"] in train_docs]
    local = {ids[i]: j for j, i in enumerate(tidx)}
    qs = [by_qid[q] for q in training_query_ids(splits) if by_qid[q]["passage_id"] in local]
    if not qs:
        raise StageError("teach: no training queries to label")
    q_emb = enc([q["text"] for q in qs], "encoding training queries (base)")
    top, _ = top_k(q_emb, p_emb[tidx], cfg.candidates, [ids[i] for i in tidx])
    lists = candidate_lists(top, [local[q["passage_id"]] for q in qs], cfg.candidates)
    lists = [[tidx[j] for j in c] for c in lists]  # back to corpus indices
    run.progress.info(f"teach: scoring {sum(map(len, lists))} candidates of {len(qs)} training "
                      f"queries with the {cfg.teacher} teacher")  # fmt: skip
    scores = teacher.score([q["text"] for q in qs], lists, run.progress)
    rows = [
        {
            "query_id": q["id"],
            "candidates": [{"id": ids[i], "score": round(float(s), 8)}
                           for i, s in zip(c, sc, strict=True)],  # fmt: skip
        }
        for q, c, sc in zip(qs, lists, scores, strict=True)
    ]
    write_jsonl(run.path("labels.jsonl"), rows)
    info |= {"labelled": len(rows), "candidates": cfg.candidates}
    write_json(run.path("teacher.json"), info)
    seconds = round(time.perf_counter() - started, 2)  # a timing: the done marker only
    return {"teacher": cfg.teacher, "labelled": len(rows), "seconds": seconds} | _short_check(info)


def _short_check(info: dict[str, Any]) -> dict[str, Any]:
    c = info.get("check")
    return {"check": f"{c['teacher']:.4f} vs {c['base']:.4f} ({c['split']})"} if c else {}


def _teacher_model(run: Run) -> dict[str, str]:
    spec = run.cfg.teach.model
    if not spec:
        return {}
    return {"teach.model": spec if spec.startswith("packaged:") else file_fingerprint(spec)}


STAGE = Stage(
    "teach",
    teach,
    keys=(
        "teach",
        "seed",
        "gate.primary_metric",  # the teacher check's metric
        "train.max_seq_length",  # the base model's encoding length
        "evaluate.batch_size",
        "evaluate.bf16",
        "evaluate.backend",
    ),
    inputs=("passages.jsonl", "queries.jsonl", "splits.json"),
    outputs=("labels.jsonl", "teacher.json"),
    external=_teacher_model,
    base_model=True,
)
