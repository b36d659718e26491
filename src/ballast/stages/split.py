"""Stage split: document-level splits.json, TREC qrels, leakage audit."""

from __future__ import annotations

from typing import Any

from ..errors import StageError
from ..files import (
    atomic_dir,
    sha256_file,
    write_json,
    write_text_atomic,
)
from .run import Run


def split(run: Run) -> dict[str, Any]:
    import json

    from ..splits import assign_documents, assign_queries, leakage_audit, qrels_for
    from ..trec import format_qrels

    passages = run.passages()
    queries = run.queries()
    doc_ids = sorted({p["doc_id"] for p in passages})
    previous = None
    old = run.path("splits.json")
    if old.is_file():
        try:
            prior = json.loads(old.read_text("utf-8"))
            if prior.get("seed") == run.cfg.seed:
                previous = {d: s for s, ds in prior["documents"].items() for d in ds}
        except (ValueError, KeyError, AttributeError):
            previous = None
    doc_split = assign_documents(doc_ids, run.cfg.split, run.cfg.seed, previous)
    by_pid = {p["id"]: p for p in passages}
    for q in queries:
        if q["passage_id"] not in by_pid:
            raise StageError(
                f"query {q['id']} names passage {q['passage_id']} that is not in "
                "passages.jsonl; run `ballast synth` again"
            )
    q_split = assign_queries(queries, by_pid, doc_split)
    audit = leakage_audit(passages, doc_split, run.cfg.split.leakage_threshold)
    docs = {s: sorted(d for d, x in doc_split.items() if x == s) for s in ("train", "dev", "test")}
    qrels = qrels_for(queries)
    with atomic_dir(run.path("qrels")) as tmp:
        for s, ids in q_split.items():
            if ids:
                write_text_atomic(tmp / f"{s}.tsv", format_qrels({q: qrels[q] for q in ids}))
    write_json(
        run.path("splits.json"),
        {
            "seed": run.cfg.seed,
            "documents": docs,
            "queries": q_split,
            "leakage": audit,
            "inputs_sha256": {
                n: sha256_file(run.path(n)) for n in ("passages.jsonl", "queries.jsonl")
            },
        },
    )
    return {
        "documents": {s: len(v) for s, v in docs.items()},
        "queries": {s: len(v) for s, v in q_split.items()},
        "leakage_pairs": audit["pairs_found"],
    }
