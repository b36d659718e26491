"""Stage report: the run's files -> report.html and report.md.

It runs whether the gate passed or failed; it reads only files earlier stages wrote and never
re-encodes anything."""

from __future__ import annotations

import csv
import io
import json
from pathlib import Path
from typing import Any

from ballast.io.files import read_jsonl, read_text, write_text_atomic
from ballast.stages.base import Run, Stage, guard_files

SUMMARY_STAGES = ("ingest", "synth", "split", "mine", "teach", "train")


def _json(path: Path) -> Any:
    if not path.is_file():
        return None
    try:
        return json.loads(read_text(path))
    except ValueError:
        return None


def _per_query(path: Path, metrics: list[str]) -> list[dict[str, Any]]:
    if not path.is_file():
        return []
    rows = []
    for row in csv.DictReader(io.StringIO(read_text(path))):
        for m in metrics:
            if m in row:
                row[m] = float(row[m])
        rows.append(row)
    return rows


def _guard_texts(run: Run) -> tuple[dict[str, dict], dict[str, dict], dict[str, dict[str, int]]]:
    from ballast.io.trec import read_qrels, read_texts

    g = run.cfg.guard
    if not g.enabled or not all(Path(p).is_file() for p in (g.queries, g.qrels, g.passages)):
        return {}, {}, {}
    queries = {i: {"text": t, "origin": "guard"} for i, t in read_texts(g.queries, "query")}
    passages = {i: {"text": t} for i, t in read_texts(g.passages, "passage")}
    return queries, passages, read_qrels(g.qrels)


def gather(run: Run) -> Any:
    """Everything the report shows, read from the run folder."""
    from ballast.io.trec import read_qrels
    from ballast.stages.report.content import ReportInputs, parse_run

    metrics = json.loads(run.need("metrics.json", "evaluate").read_text("utf-8"))
    names = list(metrics.get("splits", {}))
    runs: dict[str, dict[str, Any]] = {}
    runs_dir = run.path("runs")
    if runs_dir.is_dir():
        for f in sorted(runs_dir.glob("*/*.run")):
            runs.setdefault(f.parent.name, {})[f.stem] = parse_run(read_text(f))
    qrels = {}
    for s in names:
        p = run.path("qrels", f"{s}.tsv")
        if p.is_file():
            qrels[s] = read_qrels(p)
    queries = {r["id"]: r for _, r in read_jsonl(run.need("queries.jsonl", "synth"))}
    passages = {r["id"]: r for _, r in read_jsonl(run.need("passages.jsonl", "ingest"))}
    notes = []
    if "guard" in names:
        gq, gp, gr = _guard_texts(run)
        if gr:
            queries |= gq
            passages |= gp
            qrels["guard"] = gr
        else:
            notes.append("The guard set's files are not readable now; its examples are left out.")
    stages = {}
    for s in SUMMARY_STAGES:
        done = _json(run.path(f"{s}.done.json"))
        if isinstance(done, dict) and isinstance(done.get("summary"), dict):
            stages[s] = done["summary"]
    return ReportInputs(
        name=run.cfg.name,
        metrics=metrics,
        gate=_json(run.path("gate.json")),
        per_query=_per_query(run.path("per_query.csv"), list(metrics.get("metrics", []))),
        runs=runs,
        qrels=qrels,
        queries=queries,
        passages=passages,
        stages=stages,
        train=_json(run.path("train.json")),
        check=_json(run.path("check.json")),
        notes=tuple(notes),
    )


def report(run: Run) -> dict[str, Any]:
    from ballast.stages.report.content import summary_facts
    from ballast.stages.report.markdown import render_markdown
    from ballast.stages.report.page import render_html

    run.progress.info("report: reading the run folder")
    inp = gather(run)
    html_path, md_path = run.path("report.html"), run.path("report.md")
    write_text_atomic(html_path, render_html(inp))
    write_text_atomic(md_path, render_markdown(inp))
    return {"html": str(html_path), "markdown": str(md_path), **summary_facts(inp)}


STAGE = Stage(
    "report",
    report,
    keys=("name", "guard"),
    inputs=(
        "metrics.json",
        "per_query.csv",
        "runs",
        "qrels",
        "gate.json",
        "train.json",
        "queries.jsonl",
        "passages.jsonl",
        "check.json",
        *(f"{s}.done.json" for s in SUMMARY_STAGES),
    ),
    outputs=("report.html", "report.md"),
    external=guard_files,
)
