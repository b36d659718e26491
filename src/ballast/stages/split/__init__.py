"""Stage split: document-level splits.json, TREC qrels, leakage audit."""

from __future__ import annotations

from collections.abc import Iterator, Mapping
from typing import Any

from ballast.core.errors import StageError
from ballast.io.files import atomic_dir, read_jsonl, sha256_file, write_json, write_text_atomic
from ballast.stages.base import Run, Stage


class _DocOf(Mapping[str, dict]):
    """passage id -> ``{"doc_id": ...}``, the view ``assign_queries`` reads, over a plain
    passage id -> doc id dict (a million passages need not be held as dicts)."""

    def __init__(self, doc_of: dict[str, str]) -> None:
        self._doc_of = doc_of

    def __getitem__(self, pid: str) -> dict:
        return {"doc_id": self._doc_of[pid]}

    def __iter__(self) -> Iterator[str]:
        return iter(self._doc_of)

    def __len__(self) -> int:
        return len(self._doc_of)


def split(run: Run) -> dict[str, Any]:
    import json

    from ballast.core.records import qrels_for
    from ballast.core.splits import (
        assign_documents,
        assign_queries,
        human_training_share,
        leakage_audit,
    )
    from ballast.io.trec import format_qrels

    # passages.jsonl is streamed twice (doc ids now, texts for the audit), never held whole
    passages_path = run.need("passages.jsonl", "ingest")
    doc_of: dict[str, str] = {}
    doc_names: dict[str, str] = {}  # one string object per document id
    for _, p in read_jsonl(passages_path):
        doc_of[p["id"]] = doc_names.setdefault(p["doc_id"], p["doc_id"])
    queries = [  # the texts are not needed here
        {k: v for k, v in q.items() if k != "text"}
        for _, q in read_jsonl(run.need("queries.jsonl", "synth"))
    ]
    doc_ids = sorted(doc_names)
    del doc_names
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
    del doc_ids, previous
    for q in queries:
        if q["passage_id"] not in doc_of:
            raise StageError(
                f"query {q['id']} names passage {q['passage_id']} that is not in "
                "passages.jsonl; run `ballast synth` again"
            )
    by_pid = _DocOf(doc_of)
    q_split = assign_queries(queries, by_pid, doc_split, set(run.cfg.synth.judge_generators))
    q_split = human_training_share(
        q_split, queries, by_pid, doc_split,
        fraction=run.cfg.split.human_train_fraction, keep=run.cfg.gate.min_queries,
        seed=run.cfg.seed,
    )  # fmt: skip
    del by_pid, doc_of
    audit = leakage_audit(
        (p for _, p in read_jsonl(passages_path)), doc_split, run.cfg.split.leakage_threshold
    )
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


STAGE = Stage(
    "split",
    split,
    keys=("split", "seed", "synth.judge_generators", "gate.min_queries"),
    inputs=("passages.jsonl", "queries.jsonl"),
    outputs=("splits.json", "qrels"),
)
