"""Stage mine: hard negatives for the training pairs -> negatives.jsonl, negatives_sample.md.

negatives.jsonl keeps, per training query, the chosen negatives and every dropped candidate
with the rule that dropped it; negatives_sample.md shows a seeded sample of queries with the
texts of their kept and dropped candidates, for a person to read.
"""

from __future__ import annotations

import time
from typing import Any

import numpy as np

from ballast.core.errors import StageError
from ballast.core.records import relevant_ids, training_positive
from ballast.core.splits import training_query_ids
from ballast.io.files import write_jsonl, write_text_atomic
from ballast.stages.base import Run, Stage, file_fingerprint

AUDIT_QUERIES = 20
AUDIT_CHARS = 300
AUDIT_SHOWN = 8  # dropped candidates shown per query, best ranked first


def _base_corpus_embeddings(run: Run, model: Any, passages: list[dict]) -> np.ndarray:
    from ballast.models.encode import device_pool

    with device_pool(model, run.cfg.evaluate.encode_devices) as pool:
        texts = [p["text"] for p in passages]
        return run.encode(model, run.base_fp, texts, "encoding passages (base)", pool=pool)


def _rec(tp: list[dict], c: dict) -> dict:
    out = {"id": tp[c["index"]]["id"], "score": round(c["score"], 6), "rank": c["rank"]}
    for k in ("rule", "jaccard", "rescore"):
        if k in c:
            out[k] = c[k]
    return out


def mine(run: Run) -> dict[str, Any]:
    from ballast.core.mining import RULES, LazyShingles, screen_queries, take
    from ballast.core.search import search
    from ballast.core.text import collapse
    from ballast.models.encode import encode

    passages, queries, splits = run.passages(), run.queries(), run.splits()
    train_docs = set(splits["documents"]["train"])
    train_q = set(training_query_ids(splits))
    by_pid = {p["id"]: p for p in passages}
    qs = [q for q in queries if q["id"] in train_q]
    cfg = run.cfg.mine
    model = run.search_encoder()
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
        bf16=run.encode_bf16,
    )
    # The positive's score the ceilings compare with: by default the positive passage as it
    # stands in the corpus, scored like every candidate; or the text the pair trains on (for a
    # masked inverse-cloze query, the passage without the query sentence: a lower score).
    if cfg.ceiling_reference == "training":
        pos_texts = [training_positive(q, by_pid[q["passage_id"]]) for q in qs]
        pos_emb = encode(
            model,
            pos_texts,
            batch_size=run.cfg.evaluate.batch_size,
            label="encoding training positives",
            progress=run.progress,
            bf16=run.encode_bf16,
        )
    else:
        pos_texts = [by_pid[q["passage_id"]]["text"] for q in qs]
        pos_emb = t_emb[[pos_of[q["passage_id"]] for q in qs]].reshape(len(qs), t_emb.shape[1])
    pos_scores = np.einsum("ij,ij->i", q_emb, pos_emb)
    rng = run.rng("mine")
    audit_rng = rng.spawn(1)[0]  # its own stream: the sample never changes the negatives
    chosen: list[list[dict]] = [[] for _ in qs]
    dropped: list[list[dict]] = [[] for _ in qs]
    summary: dict[str, Any] = {}
    if cfg.negatives and qs and tp:
        started = time.perf_counter()
        try:
            idx, sc, engine = search(
                q_emb,
                t_emb,
                cfg.window_end,
                [p["id"] for p in tp],
                method=cfg.search,
                faiss_above=cfg.faiss_above,
            )
        except ImportError as exc:
            raise StageError(f"mine.search = {cfg.search!r}: {exc}") from None
        summary["search"] = {
            "engine": engine,
            "passages": len(tp),
            "seconds": round(time.perf_counter() - started, 3),
        }
        orders, dropped = screen_queries(
            idx,
            sc,
            [pos_of[q["passage_id"]] for q in qs],
            pos_scores,
            [frozenset(pos_of[r] for r in relevant_ids(q) if r in pos_of) for q in qs],
            doc_of=[p["doc_id"] for p in tp],
            text_key=[collapse(p["text"]).lower() for p in tp],
            cfg=cfg,
            rng=rng,
            shingles_of=LazyShingles([p["text"] for p in tp]),
        )
        if cfg.rescorer:
            chosen, extra, summary["rescorer"] = _second_opinion(run, qs, pos_texts, tp, orders)
            for qi, more in enumerate(extra):
                dropped[qi] = sorted(dropped[qi] + more, key=lambda c: c["rank"])
        else:
            chosen = [take(o, cfg.negatives) for o in orders]
    counts = {r: 0 for r in RULES if r != "rescorer" or cfg.rescorer}
    for ds in dropped:
        for d in ds:
            counts[d["rule"]] += 1
    rows = [
        {
            "query_id": q["id"],
            "positive_id": q["passage_id"],
            "positive_score": round(float(pos_scores[qi]), 6),
            "negatives": [_rec(tp, c) for c in chosen[qi]],
            "dropped": [_rec(tp, d) for d in dropped[qi]],
        }
        for qi, q in enumerate(qs)
    ]
    write_jsonl(run.path("negatives.jsonl"), rows)
    write_text_atomic(
        run.path("negatives_sample.md"),
        audit_markdown(rows, qs, pos_texts, {p["id"]: p for p in tp}, counts, audit_rng),
    )
    kept = sum(len(r["negatives"]) for r in rows)
    run.progress.info(
        f"mine: {kept} negatives kept; dropped " + ", ".join(f"{k} {v}" for k, v in counts.items())
    )
    return {
        "queries": len(rows),
        "negatives": kept,
        "dropped_by_rule": counts,
        "queries_short_of_negatives": sum(1 for r in rows if len(r["negatives"]) < cfg.negatives),
        "ceiling_reference": cfg.ceiling_reference,
    } | summary


def _second_opinion(
    run: Run, qs: list[dict], pos_texts: list[str], tp: list[dict], orders: list[list[dict]]
) -> tuple[list[list[dict]], list[list[dict]], dict[str, Any]]:
    from ballast.core.mining import second_opinion
    from ballast.models.rescore import Cost, Timed, load_rescorer

    cfg = run.cfg.mine
    started = time.perf_counter()
    cost = Cost(cfg.rescorer)
    rescorer = Timed(load_rescorer(cfg.rescorer, cfg.rescorer_model, run.progress), cost)
    cost.load_seconds = time.perf_counter() - started
    asked = [qi for qi, o in enumerate(orders) if o]
    pos_rescore = np.zeros(len(qs))
    if asked:
        got = rescorer.score([(qs[qi]["text"], pos_texts[qi]) for qi in asked], run.progress)
        pos_rescore[asked] = got

    def rescore(pairs: list[tuple[int, int]]) -> np.ndarray:
        return rescorer.score([(qs[qi]["text"], tp[pi]["text"]) for qi, pi in pairs], run.progress)

    chosen, dropped, _ = second_opinion(
        orders, cfg.negatives, rescore, pos_rescore.tolist(), cfg.rescorer_threshold
    )
    cost.extra = {"positives_scored": len(asked), "threshold": cfg.rescorer_threshold}
    return chosen, dropped, cost.to_dict()


def _short(text: str, limit: int = AUDIT_CHARS) -> str:
    flat = " ".join(text.split())
    return flat if len(flat) <= limit else flat[: limit - 1].rstrip() + "…"


def audit_markdown(
    rows: list[dict],
    queries: list[dict],
    pos_texts: list[str],
    passages: dict[str, dict],
    counts: dict[str, int],
    rng: np.random.Generator,
    n: int = AUDIT_QUERIES,
) -> str:
    """A seeded sample of queries with their kept and dropped candidates, texts shortened.

    Queries with a drop beyond the positive itself come first: they show what the rules did.
    """
    telling = [i for i, r in enumerate(rows) if any(d["rule"] != "positive" for d in r["dropped"])]
    seen = set(telling)
    rest = [i for i in range(len(rows)) if i not in seen]
    pick = list(rng.permutation(telling)[:n]) if telling else []
    if len(pick) < n and rest:
        pick += list(rng.permutation(rest)[: n - len(pick)])
    lines = [
        "# Mined negatives: a sample to read",
        "",
        "Each query shows its positive, the negatives kept for training, and the candidates",
        "dropped with the rule that dropped them (docs/mining.md explains the rules). Read the",
        "dropped ones: are they really relevant? Read the kept ones: are they really not?",
        "",
        f"{len(rows)} training queries; {sum(len(r['negatives']) for r in rows)} negatives kept.",
        "",
        "| rule | dropped |",
        "|---|---|",
        *(f"| {k} | {v} |" for k, v in counts.items()),
        "",
    ]

    def cand(c: dict) -> str:
        extra = "".join(f", {k} {c[k]}" for k in ("jaccard", "rescore") if k in c)
        text = _short(passages[c["id"]]["text"])
        return f"- rank {c['rank']}, score {c['score']:.4f}{extra} `{c['id']}`: {text}"

    for k, i in enumerate(sorted(int(x) for x in pick), start=1):
        r, q = rows[i], queries[i]
        lines += [
            f"## {k}. query `{q['id']}` ({q.get('origin', '?')})",
            "",
            f"> {_short(q['text'])}",
            "",
            f"**positive** `{r['positive_id']}` (score {r['positive_score']:.4f}): "
            f"{_short(pos_texts[i])}",
            "",
            f"**kept** ({len(r['negatives'])})",
            "",
            *([cand(c) for c in r["negatives"]] or ["- none"]),
            "",
            f"**dropped** ({len(r['dropped'])})",
            "",
            *([cand(d) + f" — **{d['rule']}**" for d in r["dropped"][:AUDIT_SHOWN]] or ["- none"]),
            *(
                [f"- … {len(r['dropped']) - AUDIT_SHOWN} more in negatives.jsonl"]
                if len(r["dropped"]) > AUDIT_SHOWN
                else []
            ),
            "",
        ]
    return "\n".join(lines)


def _rescorer_model(run: Run) -> dict[str, str]:
    spec = run.cfg.mine.rescorer_model
    if not run.cfg.mine.rescorer or not spec:
        return {}
    return {"rescorer_model": spec if spec.startswith("packaged:") else file_fingerprint(spec)}


STAGE = Stage(
    "mine",
    mine,
    keys=("mine", "seed", "train.max_seq_length", "evaluate.batch_size", "evaluate.encode_devices",
          "evaluate.bf16", "evaluate.backend"),
    inputs=("passages.jsonl", "queries.jsonl", "splits.json"),
    outputs=("negatives.jsonl", "negatives_sample.md"),
    external=_rescorer_model,
    base_model=True,
)
