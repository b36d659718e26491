"""Each stage as file-in, file-out glue around the pure core modules.

A stage reads what earlier stages wrote into the run folder, calls the core, and writes its
outputs atomically. ``pipeline.py`` decides whether a stage needs to run.
"""

from __future__ import annotations

import csv
import io
import time
from dataclasses import dataclass, field
from functools import cached_property
from pathlib import Path
from typing import Any

import numpy as np

from . import __version__
from .config import Config
from .errors import GateFailed, StageError
from .evaluate import Corpus, EvalSet
from .files import (
    atomic_dir,
    read_jsonl,
    sha256_file,
    write_json,
    write_jsonl,
    write_text_atomic,
)
from .progress import SILENT, Progress

# One salt a stage, so each stage draws from its own seeded generator.
SALT = {"synth": 1, "split": 2, "mine": 3, "train": 4, "evaluate": 5}


@dataclass
class Run:
    cfg: Config
    progress: Progress = SILENT
    force_export: bool = False
    notes: list[str] = field(default_factory=list)

    @property
    def dir(self) -> Path:
        return self.cfg.run_path

    def path(self, *parts: str) -> Path:
        return self.dir.joinpath(*parts)

    def rng(self, stage: str) -> np.random.Generator:
        return np.random.default_rng([self.cfg.seed, SALT[stage]])

    @cached_property
    def base_path(self) -> Path:
        from .models import resolve_model

        return resolve_model(self.cfg.base_model)

    @cached_property
    def base_fp(self) -> str:
        from .models import model_fingerprint

        return model_fingerprint(self.base_path)

    def need(self, name: str, made_by: str) -> Path:
        p = self.path(name)
        if not p.exists():
            raise StageError(f"{p} is missing; run `ballast {made_by}` first (or `ballast run`)")
        return p

    def passages(self) -> list[dict]:
        return [row for _, row in read_jsonl(self.need("passages.jsonl", "ingest"))]

    def queries(self) -> list[dict]:
        return [row for _, row in read_jsonl(self.need("queries.jsonl", "synth"))]

    def splits(self) -> dict[str, Any]:
        import json

        return json.loads(self.need("splits.json", "split").read_text("utf-8"))

    def cache(self) -> Any:
        from .encode import EmbeddingCache

        return EmbeddingCache(self.path("cache"))


# ---------------------------------------------------------------- ingest


def ingest(run: Run) -> dict[str, Any]:
    from .corpus import ingest as do_ingest
    from .corpus import token_counter
    from .models import load_tokenizer

    run.progress.info("ingest: reading documents")
    count = token_counter(load_tokenizer(run.base_path))
    result = do_ingest(Path(run.cfg.ingest.docs), run.cfg.ingest, count)
    write_jsonl(run.path("passages.jsonl"), result.passages)
    return result.stats


# ---------------------------------------------------------------- synth


def synth(run: Run) -> dict[str, Any]:
    from .synth import import_questions, synthesize

    passages = run.passages()
    queries, stats = synthesize(passages, run.cfg.synth, run.rng("synth"))
    if run.cfg.synth.questions:
        human = import_questions(run.cfg.synth.questions, passages)
        stats["human"] = len(human)
        queries.extend(human)
    write_jsonl(run.path("queries.jsonl"), queries)
    stats["total"] = len(queries)
    return stats


# ---------------------------------------------------------------- split


def split(run: Run) -> dict[str, Any]:
    import json

    from .splits import assign_documents, assign_queries, leakage_audit, qrels_for
    from .trec import format_qrels

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


# ---------------------------------------------------------------- mine


def training_positive(query: dict, passage: dict) -> str:
    """The positive text a pair trains on: for a masked inverse-cloze query, the passage
    without the query sentence."""
    text = passage["text"]
    if query.get("meta", {}).get("masked"):
        text = " ".join(text.replace(query["text"], " ", 1).split())
    return text


def _base_corpus_embeddings(run: Run, model: Any, passages: list[dict]) -> np.ndarray:
    from .encode import encode_cached

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
    from .corpus import collapse
    from .encode import encode
    from .mining import mine_one
    from .models import load_encoder
    from .search import top_k

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


# ---------------------------------------------------------------- train


def train(run: Run) -> dict[str, Any]:
    from .train import train_model

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


# ---------------------------------------------------------------- evaluate


def write_evaluation(
    out: Path, summary: dict[str, Any], rows: list[list[str]], run_files: dict[str, str]
) -> None:
    """metrics.json, per_query.csv and runs/<model>/<split>.run, each written atomically."""
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(["split", "query_id", "origin", "model", *summary["metrics"]])
    w.writerows(rows)
    with atomic_dir(out / "runs") as tmp:
        for rel, text in run_files.items():
            (tmp / rel).parent.mkdir(parents=True, exist_ok=True)
            write_text_atomic(tmp / rel, text)
    write_text_atomic(out / "per_query.csv", buf.getvalue())
    write_json(out / "metrics.json", summary)


def guard_set(run: Run) -> tuple[Corpus, EvalSet]:
    """The general-domain guard split from the user's TREC-style files."""
    from .trec import read_qrels, read_texts

    g = run.cfg.guard
    passages = read_texts(g.passages, "passage")
    queries = read_texts(g.queries, "query")
    qrels = read_qrels(g.qrels)
    known = {pid for pid, _ in passages}
    judged = [(q, t) for q, t in queries if any(r > 0 for r in qrels.get(q, {}).values())]
    for q, _ in judged:
        missing = [d for d in qrels[q] if d not in known]
        if missing:
            raise StageError(
                f"{g.qrels}: query {q!r} judges document {missing[0]!r}, which is "
                f"not in {g.passages}"
            )
    corpus = Corpus([p for p, _ in passages], [t for _, t in passages])
    return corpus, EvalSet(
        "guard",
        "guard",
        [q for q, _ in judged],
        [t for _, t in judged],
        ["guard"] * len(judged),
        [qrels[q] for q, _ in judged],
    )


def evaluate(run: Run) -> dict[str, Any]:
    from .evaluate import per_query_rows, run_models, summarise
    from .models import model_fingerprint
    from .splits import qrels_for

    cfg = run.cfg.evaluate
    passages, queries, splits = run.passages(), run.queries(), run.splits()
    by_qid = {q["id"]: q for q in queries}
    tuned_path = run.need("model", "train")
    models = {
        "base": (run.base_path, run.base_fp),
        "tuned": (tuned_path, model_fingerprint(tuned_path)),
    }
    metrics = list(cfg.metrics)
    qrels_all = qrels_for(queries)
    corpora = {"main": Corpus([p["id"] for p in passages], [p["text"] for p in passages])}
    sets = []
    for s in cfg.splits:
        if s == "guard":
            corpora["guard"], guard = guard_set(run)
            sets.append(guard)
            continue
        qids = splits["queries"].get(s, [])
        if qids:
            sets.append(
                EvalSet(
                    s,
                    "main",
                    qids,
                    [by_qid[q]["text"] for q in qids],
                    [by_qid[q]["origin"] for q in qids],
                    [qrels_all[q] for q in qids],
                )
            )
    skipped = [s for s in cfg.splits if s not in {x.name for x in sets}]
    per_query, run_files = run_models(
        models,
        corpora,
        sets,
        metrics,
        cache=run.cache(),
        batch_size=cfg.batch_size,
        max_seq_length=run.cfg.train.max_seq_length,
        progress=run.progress,
    )
    summary = summarise(
        per_query,
        sets,
        metrics,
        models,
        baseline="base",
        seed=run.cfg.seed,
        resamples=cfg.bootstrap_resamples,
        confidence=cfg.confidence,
    )
    summary["skipped_splits"] = skipped
    write_evaluation(run.dir, summary, per_query_rows(per_query, sets, metrics), run_files)
    return {"splits": {s.name: len(s.qids) for s in sets}, "skipped_splits": skipped}


def evaluate_files(
    models: list[str],
    queries: Path,
    qrels: Path,
    passages: Path,
    out: Path,
    cfg: Config,
    progress: Progress = SILENT,
) -> dict[str, Any]:
    """Compare any models on any TREC-style set; the first model is the baseline."""
    from .encode import EmbeddingCache
    from .errors import InputError
    from .evaluate import per_query_rows, run_models, summarise
    from .models import model_fingerprint, resolve_model
    from .trec import read_qrels, read_texts

    named: dict[str, tuple[Path, str]] = {}
    for item in models:
        name, _, spec = item.rpartition("=") if "=" in item else ("", "", item)
        name = name or Path(spec).name or spec
        if not name.replace("-", "").replace("_", "").replace(".", "").isalnum():
            raise InputError(
                f"model name {name!r}: use letters, digits, '-', '_' or '.'", field="--model"
            )
        if name in named:
            raise InputError(
                f"model name {name!r} given twice; name them NAME=PATH", field="--model"
            )
        path = resolve_model(spec)
        named[name] = (path, model_fingerprint(path))
    plist = read_texts(passages, "passage")
    qlist = read_texts(queries, "query")
    judged = read_qrels(qrels)
    known = {p for p, _ in plist}
    kept = [(q, t) for q, t in qlist if any(r > 0 for r in judged.get(q, {}).values())]
    if not kept:
        raise InputError("no query has a relevant judgement in the qrels", path=qrels)
    for q, _ in kept:
        missing = [d for d in judged[q] if d not in known]
        if missing:
            raise InputError(
                f"query {q!r} judges document {missing[0]!r}, which is not among the passages",
                path=qrels,
            )
    corpora = {"set": Corpus([p for p, _ in plist], [t for _, t in plist])}
    sets = [
        EvalSet(
            "set",
            "set",
            [q for q, _ in kept],
            [t for _, t in kept],
            ["file"] * len(kept),
            [judged[q] for q, _ in kept],
        )
    ]
    ev = cfg.evaluate
    metrics = list(ev.metrics)
    per_query, run_files = run_models(
        named,
        corpora,
        sets,
        metrics,
        cache=EmbeddingCache(out / "cache"),
        batch_size=ev.batch_size,
        max_seq_length=None,
        progress=progress,
    )
    baseline = next(iter(named))
    summary = summarise(
        per_query,
        sets,
        metrics,
        named,
        baseline=baseline,
        seed=cfg.seed,
        resamples=ev.bootstrap_resamples,
        confidence=ev.confidence,
    )
    summary["queries_without_judgements"] = len(qlist) - len(kept)
    write_evaluation(out, summary, per_query_rows(per_query, sets, metrics), run_files)
    return summary


# ---------------------------------------------------------------- gate


def gate(run: Run) -> dict[str, Any]:
    import json

    from .gate import decide

    metrics = json.loads(run.need("metrics.json", "evaluate").read_text("utf-8"))
    verdict = decide(metrics, run.cfg.gate)
    write_json(run.path("gate.json"), verdict)
    return {"passed": verdict["passed"], "summary": verdict["summary"]}


# ---------------------------------------------------------------- export


def export(run: Run) -> dict[str, Any]:
    import json

    from .export import SCHEMA_VERSION, copy_model, library_versions, model_facts, safe_name
    from .models import weights_hash

    model_dir = run.need("model", "train")
    verdict = json.loads(run.need("gate.json", "gate").read_text("utf-8"))
    metrics = json.loads(run.need("metrics.json", "evaluate").read_text("utf-8"))
    if not verdict["passed"] and not run.force_export:
        raise GateFailed(
            f"export refused: {verdict['summary']}. Use --force to export anyway "
            "(the manifest will say so)"
        )
    tuned_hash = weights_hash(model_dir)
    version = run.cfg.export.version or "v-" + next(iter(tuned_hash.values()))[:12]
    name = safe_name(f"{run.cfg.name}-{version}")
    root = Path(run.cfg.export.dir) if run.cfg.export.dir else run.path("bundle")
    target = root / name
    if target.resolve().parent != root.resolve():
        raise StageError(f"bundle path {target} would leave the export folder {root}")
    gated = {}
    for s, info in metrics["splits"].items():
        comp = info["comparisons"].get("tuned_vs_base", {})
        gated[s] = {
            m: {
                "base": info["models"]["base"][m]["mean"],
                "tuned": info["models"]["tuned"][m]["mean"],
                "diff": comp.get(m, {}).get("mean_diff"),
                "ci": [comp.get(m, {}).get("ci_low"), comp.get(m, {}).get("ci_high")],
                "p_value": comp.get(m, {}).get("p_value"),
            }
            for m in metrics["metrics"]
        } | {"n_queries": info["n_queries"]}
    train_stats = (
        json.loads(run.path("train.json").read_text("utf-8"))
        if run.path("train.json").is_file()
        else {}
    )
    data = {
        n: sha256_file(run.path(n))
        for n in ("passages.jsonl", "queries.jsonl", "splits.json", "negatives.jsonl")
    }
    cfg = run.cfg.to_dict()
    manifest = {
        "schema_version": SCHEMA_VERSION,
        "name": run.cfg.name,
        "version": version,
        "model": {
            "path": ".",
            "format": "sentence-transformers",
            **model_facts(model_dir),
            "weights_sha256": tuned_hash,
        },
        "base_model": {
            "id": run.cfg.base_model,
            "fingerprint": run.base_fp,
            "weights_sha256": weights_hash(run.base_path),
        },
        "training": {
            "config": cfg["train"],
            "mining": cfg["mine"],
            "synthesis": cfg["synth"],
            "seed": run.cfg.seed,
            **{
                k: train_stats.get(k)
                for k in ("pairs", "steps", "seconds", "hard_negatives_per_pair")
            },
        },
        "data_sha256": data,
        "metrics": gated,
        "gate": {
            "passed": verdict["passed"],
            "summary": verdict["summary"],
            "primary_metric": verdict["primary_metric"],
            "min_gain": verdict["min_gain"],
            "splits": [
                {k: s.get(k) for k in ("split", "passed", "gain", "ci_low", "ci_high", "reason")}
                for s in verdict["splits"]
            ],
            "forced": bool(run.force_export and not verdict["passed"]),
        },
        "libraries": library_versions(),
    }
    with atomic_dir(target) as tmp:
        copy_model(model_dir, tmp)
        write_json(tmp / "manifest.json", manifest)
    return {"bundle": str(target), "version": version, "forced": manifest["gate"]["forced"]}


STAGE_FUNCS = {
    "ingest": ingest,
    "synth": synth,
    "split": split,
    "mine": mine,
    "train": train,
    "evaluate": evaluate,
    "gate": gate,
    "export": export,
}


def timed(fn, run: Run) -> tuple[dict[str, Any], float]:  # noqa: ANN001
    t = time.perf_counter()
    out = fn(run)
    return out, time.perf_counter() - t
