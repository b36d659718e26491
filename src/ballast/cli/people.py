"""`ballast write`, `ballast judge`, `ballast agreement`: the hour a person spends writing real
questions and judging results. The state lives in ballast.people (saved after every answer);
this module only asks and shows."""

from __future__ import annotations

import textwrap
from pathlib import Path
from typing import Annotated, Any

import typer

from ballast.cli.app import Json, Quiet, Sets, Target, _fail, _load, app
from ballast.cli.output import StderrProgress, emit_json
from ballast.core.errors import BallastError

Author = Annotated[
    str, typer.Option("--author", help="Your name or label, recorded with each answer.")
]
Worksheet = Annotated[
    Path | None,
    typer.Option("--worksheet", help="Write a CSV worksheet to fill in instead of asking here."),
]
Import = Annotated[
    Path | None, typer.Option("--import", help="Read back a filled CSV worksheet.")
]
HUMAN_SPLIT = {"train": "human", "test": "human_heldout", "dev": "human_dev"}


def _prepared_run(target: Path, sets: list[str] | None, quiet: bool) -> Any:
    """The run with passages and document splits, made now if missing (ingest, synth and split,
    without the questions file, which does not move any document between splits)."""
    from ballast.pipeline import run_all
    from ballast.stages import Run

    cfg = _load(target, [*(sets or []), 'synth.questions=""', "evaluate.splits=[]",
                         "gate.splits=[]"])  # fmt: skip
    run = Run(cfg, StderrProgress(quiet))
    if not run.path("splits.json").is_file():
        run_all(run, stop_before="check")
    return run


def _wrap(text: str) -> str:
    return "\n".join(textwrap.wrap(text, 96, initial_indent="  ", subsequent_indent="  "))


@app.command("write")
def write_command(
    target: Target,
    out: Annotated[Path, typer.Option("--out", help="The questions file (JSONL) to write.")],
    n: Annotated[int, typer.Option("--n", min=1, max=5000, help="Passages to draw.")] = 60,
    author: Author = "",
    worksheet: Worksheet = None,
    import_: Import = None,
    set_: Sets = None,
    quiet: Quiet = False,
) -> None:
    """Write real questions: for each drawn passage (spread over training, held-out and dev
    documents as the gate needs), the question you would ask whose answer is in it. Saved after
    every answer; run it again to resume. Then set synth.questions to the file."""
    from ballast.people.write import QuestionBook, read_worksheet, sample, worksheet_csv

    try:
        run = _prepared_run(target, set_, quiet)
        splits = run.splits()
        doc_split = {d: s for s, ds in splits["documents"].items() for d in ds}
        passages = run.passages()
        drafts = sample(passages, doc_split, n, run.cfg.seed)
        book = QuestionBook(out, drafts, author)
        if import_ is not None:
            rows, empty = read_worksheet(import_, {p["id"]: p for p in passages}, author)
            added = book.add(rows)
            typer.echo(f"imported {added} question(s) ({empty} row(s) left empty) into {out}")
            return
        if worksheet is not None:
            from ballast.io.files import write_text_atomic

            write_text_atomic(worksheet, worksheet_csv(book.pending()))
            typer.echo(f"wrote {worksheet}: fill the question column (leave it empty to skip), "
                       f"then `ballast write {target} --out {out} --import {worksheet}`")
            return
    except BallastError as exc:
        _fail(exc)
    typer.echo("Write the question a person would ask whose answer is in the passage.")
    typer.echo("Enter alone skips it; 'b' goes back one; 'q' stops (run again to resume).")
    total = len(drafts)
    while pending := book.pending():
        d = pending[0]
        typer.echo(f"\n[{total - len(pending) + 1}/{total}] {d.doc_id}, passage {d.position} of "
                   f"{d.of} (its question goes to {HUMAN_SPLIT.get(d.split, d.split)})")
        typer.echo(_wrap(d.text))
        answer = typer.prompt("question", default="", show_default=False).strip()
        if answer.lower() == "q":
            break
        if answer.lower() == "b":
            if book.back() is None:
                typer.echo("(nothing to go back to)")
            continue
        if not answer:
            book.skip(d)
            continue
        why = book.answer(d, answer)
        if why is not None:
            typer.echo(f"not kept: {why}")
    counts: dict[str, int] = {}
    split_of = {d.passage_id: d.split for d in drafts}
    for r in book.rows:
        s = HUMAN_SPLIT.get(split_of.get(r["passage_id"], ""), "other")
        counts[s] = counts.get(s, 0) + 1
    shown = ", ".join(f"{k} {v}" for k, v in sorted(counts.items())) or "none yet"
    typer.echo(f"\n{len(book.rows)} question(s) in {out} ({shown}); {len(book.pending())} "
               f"passage(s) left. Set synth.questions = \"{out}\" and run `ballast run`.")


@app.command("judge")
def judge_command(
    target: Target,
    queries: Annotated[Path, typer.Option("--queries", help="Queries to judge: JSONL "
                                          "{\"id\",\"text\"} or TSV id<TAB>text.")],
    out: Annotated[Path, typer.Option("--out", help="The TREC qrels file to write.")],
    k: Annotated[int, typer.Option("--k", min=1, max=100, help="Each system's top k.")] = 10,
    worksheet: Worksheet = None,
    import_: Import = None,
    set_: Sets = None,
    quiet: Quiet = False,
) -> None:
    """Judge search results: the pooled top k of the base model, the tuned model (when
    trained) and BM25, each passage once in a shuffled order; grade 2 (highly relevant),
    1 (relevant) or 0. Saved as TREC qrels after every grade; run again to resume."""
    from ballast.io.trec import read_texts
    from ballast.people.judge import (
        GRADES,
        JudgementBook,
        pool,
        read_worksheet,
        system_rankings,
        worksheet_csv,
    )

    try:
        run = _prepared_run(target, set_, quiet)
        qlist = read_texts(queries, "query")
        texts = dict(qlist)
        pool_path = out.with_name(out.name + ".pool.json")
        if pool_path.is_file():
            book = JudgementBook(out)
        else:
            ranked = system_rankings(run, [t for _, t in qlist], k)
            book = JudgementBook(out, pool(ranked, [q for q, _ in qlist], k, run.cfg.seed))
        passages = {p["id"]: p["text"] for p in run.passages()}
        if import_ is not None:
            book.replace(read_worksheet(import_, book.pooled))
            typer.echo(f"imported {sum(len(v) for v in book.qrels.values())} grade(s) into {out}")
            return
        if worksheet is not None:
            from ballast.io.files import write_text_atomic

            write_text_atomic(worksheet, worksheet_csv(book.pooled, texts, passages))
            typer.echo(f"wrote {worksheet}: grade each row 2, 1 or 0, then `ballast judge "
                       f"{target} --queries {queries} --out {out} --import {worksheet}`")
            return
    except BallastError as exc:
        _fail(exc)
    typer.echo("Grade each passage for its query: 2 highly relevant, 1 relevant, 0 not relevant.")
    typer.echo("'b' goes back one; 'q' stops (run again to resume).")
    history: list[tuple[str, str]] = []
    total = sum(len(v) for v in book.pooled.values())
    while pending := book.pending():
        q, p = pending[0]
        typer.echo(f"\n[{total - len(pending) + 1}/{total}] query {q}: {texts.get(q, '?')}")
        typer.echo(_wrap(passages.get(p, "(passage not in the run)")))
        answer = typer.prompt("grade (2/1/0)", default="", show_default=False).strip().lower()
        if answer == "q":
            break
        if answer == "b":
            if history:
                book.unmark(*history.pop())
            continue
        if answer not in ("0", "1", "2"):
            typer.echo("type 2, 1 or 0 (" + ", ".join(f"{g} {w}" for g, w in GRADES.items()) + ")")
            continue
        book.mark(q, p, int(answer))
        history.append((q, p))
    done = sum(len(v) for v in book.qrels.values())
    typer.echo(f"\n{done} of {total} pooled passage(s) graded in {out}. Score models on them: "
               f"`ballast evaluate --model ... --queries {queries} --qrels {out} --passages "
               f"{run.path('passages.jsonl')}`")


@app.command("agreement")
def agreement_command(
    first: Annotated[Path, typer.Argument(help="One person's TREC qrels.")],
    second: Annotated[Path, typer.Argument(help="Another person's qrels of the same pool.")],
    as_json: Json = False,
) -> None:
    """How far two people's judgements agree: Cohen's kappa over the pairs both graded, and
    the pairs they disagree on (for a third look)."""
    from ballast.io.trec import read_qrels
    from ballast.people.judge import agreement

    try:
        result = agreement(read_qrels(first), read_qrels(second))
    except BallastError as exc:
        _fail(exc, as_json)
    if as_json:
        emit_json(result)
        return
    typer.echo(f"{result['pairs']} pair(s) judged by both; same grade on "
               f"{result['agreement']:.1%}; Cohen's kappa {result['kappa']:.3f} (linearly "
               f"weighted {result['kappa_linear']:.3f})")
    for d in result["disagreements"]:
        typer.echo(f"  {d['query_id']}  {d['passage_id']}  {d['a']} vs {d['b']}")


__all__ = ["agreement_command", "judge_command", "write_command"]
