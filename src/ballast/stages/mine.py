"""Stage mine: hard negatives for the training pairs -> negatives.jsonl."""

from __future__ import annotations

from typing import Any

import numpy as np

from ..files import (
    write_jsonl,
)
from ..synth.extractive import training_positive
from .run import Run


def _base_corpus_embeddings(run: Run, model: Any, passages: list[dict]) -> np.ndarray:
    from ..encode import encode_cached

    return encode_cached(
        model,
        run.base_fp,
        [p["text"] for p in passages],
        run.cache(),
        batch_size=run.cfg.evaluate.batch_size,
        label="encoding passages (base)",
        progress=run.progress,
    )


def mine(run: Run) -> dict[str, Any]:
    from ..corpus import collapse
    from ..encode import encode
    from ..mining import mine_one
    from ..models import load_encoder
    from ..search import top_k

    passages, queries, splits = run.passages(), run.queries(), run.splits()
    train_docs = set(splits["documents"]["train"])
    train_q = set(splits["queries"]["train"])
    by_pid = {p["id"]: p for p in passages}
    qs = [q for q in queries if q["id"] in train_q]
    cfg = run.cfg.mine
    model = load_encoder(run.base_path, max_seq_length=run.cfg.train.max_seq_length)
    all_emb = _base_corpus_embeddings(run, model, passages)
    tidx = [i for i, p in enumerate(passages) if p["doc_id"] in train_docs]
    tp = [passages[i] for i in tidx]
    t_emb = all_emb[tidx]
    pos_of = {p["id"]: j for j, p in enumerate(tp)}
    q_emb = encode(
        model,
        [q["text"] for q in qs],
        batch_size=run.cfg.evaluate.batch_size,
        label="encoding training queries",
        progress=run.progress,
    )
    pos_texts = [training_positive(q, by_pid[q["passage_id"]]) for q in qs]
    pos_emb = encode(
        model,
        pos_texts,
        batch_size=run.cfg.evaluate.batch_size,
        label="encoding training positives",
        progress=run.progress,
    )
    pos_scores = np.einsum("ij,ij->i", q_emb, pos_emb)
    rows, counts = [], {"kept": 0}
    rng = run.rng("mine")
    if cfg.negatives and qs:
        idx, sc = top_k(q_emb, t_emb, cfg.window_end, [p["id"] for p in tp])
        doc_of = [p["doc_id"] for p in tp]
        text_key = [collapse(p["text"]).lower() for p in tp]
        for qi, q in enumerate(qs):
            judged = frozenset(
                pos_of[r] for r in q.get("meta", {}).get("relevant", ()) if r in pos_of
            )
            chosen, dropped = mine_one(
                idx[qi],
                sc[qi],
                pos_of[q["passage_id"]],
                float(pos_scores[qi]),
                doc_of=doc_of,
                text_key=text_key,
                cfg=cfg,
                rng=rng,
                also_relevant=judged,
            )
            counts["kept"] += len(chosen)
            for d in dropped:
                counts[d["rule"]] = counts.get(d["rule"], 0) + 1

            def rec(c):
                return {
                    "id": tp[c["index"]]["id"],
                    "score": round(c["score"], 6),  # noqa: E731
                    "rank": c["rank"],
                }

            rows.append(
                {
                    "query_id": q["id"],
                    "positive_id": q["passage_id"],
                    "positive_score": round(float(pos_scores[qi]), 6),
                    "negatives": [rec(c) for c in chosen],
                    "dropped": [rec(d) | {"rule": d["rule"]} for d in dropped],
                }
            )
    else:
        rows = [
            {
                "query_id": q["id"],
                "positive_id": q["passage_id"],
                "positive_score": round(float(pos_scores[i]), 6),
                "negatives": [],
                "dropped": [],
            }
            for i, q in enumerate(qs)
        ]
    write_jsonl(run.path("negatives.jsonl"), rows)
    short = sum(1 for r in rows if len(r["negatives"]) < cfg.negatives)
    return {
        "queries": len(rows),
        "negatives": counts.pop("kept"),
        "dropped_by_rule": counts,
        "queries_short_of_negatives": short,
    }
