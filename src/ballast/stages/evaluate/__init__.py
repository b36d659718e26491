"""Stage evaluate: base vs tuned on every split -> metrics.json, per_query.csv, runs/."""

from __future__ import annotations

import csv
import io
from pathlib import Path
from typing import Any

from ballast.config import Config
from ballast.core.progress import SILENT, Progress
from ballast.io.files import atomic_dir, read_jsonl, write_json, write_text_atomic
from ballast.models.encode import encoding_name
from ballast.stages.base import Run, Stage, guard_files
from ballast.stages.evaluate.compute import Corpus, EvalSet


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


def file_set(
    name: str, queries: str | Path, qrels: str | Path, passages: str | Path
) -> tuple[Corpus, EvalSet, int, int]:
    """An evaluation set from TREC-style files: the corpus, the judged queries, how many
    queries had no relevant judgement (left out), and how many judged query ids are not in
    the queries file (their judgements cannot be used: said, never silently dropped)."""
    from ballast.core.errors import InputError
    from ballast.io.trec import read_qrels, read_texts

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
                f"query {q!r} judges document {missing[0]!r}, which is not in {passages}",
                path=qrels,
            )
    corpus = Corpus([p for p, _ in plist], [t for _, t in plist])
    evalset = EvalSet(
        name,
        name,
        [q for q, _ in kept],
        [t for _, t in kept],
        [name] * len(kept),
        [judged[q] for q, _ in kept],
    )
    asked = {q for q, _ in qlist}
    unknown = sum(1 for q in judged if q not in asked)
    return corpus, evalset, len(qlist) - len(kept), unknown


def guard_set(run: Run) -> tuple[Corpus, EvalSet, dict[str, int]]:
    """The general-domain guard split from the user's TREC-style files, and what of them could
    not be used (queries without a relevant judgement, judged ids not among the queries)."""
    g = run.cfg.guard
    corpus, evalset, unjudged, unknown = file_set("guard", g.queries, g.qrels, g.passages)
    left_out = {"queries_without_judgements": unjudged, "qrels_for_unknown_queries": unknown}
    if unjudged or unknown:
        run.progress.info(
            f"evaluate: guard: {unjudged} query(ies) without a relevant judgement and "
            f"{unknown} judged query id(s) not in {g.queries} are left out"
        )
    return corpus, evalset, left_out


def evaluate(run: Run) -> dict[str, Any]:
    from ballast.core.records import qrels_for
    from ballast.models.loading import model_fingerprint
    from ballast.stages.evaluate.compute import per_query_rows, run_models, summarise

    cfg = run.cfg.evaluate
    queries, splits = run.queries(), run.splits()
    by_qid = {q["id"]: q for q in queries}
    tuned_path = run.need("model", "train")
    models = {
        "base": (run.base_path, run.base_fp),
        "tuned": (tuned_path, model_fingerprint(tuned_path)),
    }
    metrics = list(cfg.metrics)
    qrels_all = qrels_for(queries)
    pids: list[str] = []
    texts: list[str] = []
    for _, p in read_jsonl(run.need("passages.jsonl", "ingest")):  # streamed: ids and texts only
        pids.append(p["id"])
        texts.append(p["text"])
    corpora = {"main": Corpus(pids, texts)}
    sets = []
    for s in cfg.splits:
        if s == "guard":
            corpora["guard"], guard, guard_left_out = guard_set(run)
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
        dims=run.cfg.train.matryoshka_dims,
        devices=cfg.encode_devices,
        references=cfg.references,
        bf16=run.encode_bf16,
        backend=cfg.backend,
        progress=run.progress,
    )
    truncated = {  # Matryoshka: the same models at smaller sizes, named NAME@DIM
        m: models[m.split("@")[0]] for m in next(iter(per_query.values()), {}) if "@" in m
    }
    summary = summarise(
        per_query,
        sets,
        metrics,
        models | truncated,
        baseline="base",
        seed=run.cfg.seed,
        resamples=cfg.bootstrap_resamples,
        confidence=cfg.confidence,
        pairs=(("tuned", "bm25"),),
    )
    summary["skipped_splits"] = skipped
    summary["encoding"] = encoding_name(cfg.backend, run.encode_bf16)
    if "guard" in corpora:
        summary["guard_left_out"] = guard_left_out
    write_evaluation(run.dir, summary, per_query_rows(per_query, sets, metrics), run_files)
    out = {"splits": {s.name: len(s.qids) for s in sets}, "skipped_splits": skipped}
    if "guard" in corpora:
        out["guard_left_out"] = guard_left_out
    return out


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
    from ballast.core.errors import InputError
    from ballast.models.encode import EmbeddingCache
    from ballast.models.loading import model_fingerprint, resolve_model
    from ballast.models.precision import use_bf16
    from ballast.stages.evaluate.compute import per_query_rows, run_models, summarise

    named: dict[str, tuple[Path, str]] = {}
    for item in models:
        name, _, spec = item.rpartition("=") if "=" in item else ("", "", item)
        name = name or Path(spec.removeprefix("packaged:")).name or spec
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
    corpus, evalset, unjudged, unknown = file_set("set", queries, qrels, passages)
    corpora, sets = {"set": corpus}, [evalset]
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
        references=ev.references,
        bf16=use_bf16(ev.bf16),
        backend=ev.backend,
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
    summary["encoding"] = encoding_name(ev.backend, use_bf16(ev.bf16))
    summary["queries_without_judgements"] = unjudged
    summary["qrels_for_unknown_queries"] = unknown
    if unknown:
        progress.info(f"evaluate: {unknown} judged query id(s) in {qrels} are not in {queries}")
    write_evaluation(out, summary, per_query_rows(per_query, sets, metrics), run_files)
    return summary


STAGE = Stage(
    "evaluate",
    evaluate,
    keys=("evaluate", "seed", "guard", "train.max_seq_length", "train.matryoshka_dims"),
    inputs=("passages.jsonl", "queries.jsonl", "splits.json", "model"),
    outputs=("metrics.json", "per_query.csv", "runs"),
    external=lambda run: guard_files(run) if "guard" in run.cfg.evaluate.splits else {},
    base_model=True,
)
