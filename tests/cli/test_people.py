"""Writing real questions and judging results through the CLI, with scripted input: answers are
saved as they come, a killed session resumes without asking twice, worksheets round-trip, and
the judgements are TREC qrels that pytrec_eval reads and `ballast evaluate --qrels` scores
(TREC pooling: Voorhees & Harman 2005; Cohen's kappa: Cohen 1960, worked below by hand)."""

from __future__ import annotations

import csv
import io
import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest
from typer.testing import CliRunner

from ballast.cli import app
from ballast.io.trec import read_qrels
from ballast.people.judge import agreement, pool
from ballast.people.write import problem
from ballast.stages.synth.human import import_questions
from tests.conftest import make_demo_slice, write_config

runner = CliRunner()


@pytest.fixture
def project(tmp_path: Path) -> Path:
    docs, _ = make_demo_slice(tmp_path, n_docs=6)
    return write_config(tmp_path, docs, split="test_fraction = 0.34")


def answers(n: int, start: int = 0) -> str:
    return "".join(f"which rule number {i} applies to the cellar crew on night shifts\n"
                   for i in range(start, start + n))  # fmt: skip


def rows(path: Path) -> list[dict]:
    return [json.loads(x) for x in path.read_text("utf-8").splitlines() if x.strip()]


def test_a_question_that_cannot_be_kept_says_why() -> None:
    passage = "The press is rinsed with cold water after every batch and left to dry overnight."
    assert problem("", passage, {}) == "empty"
    assert "too short" in (problem("press rinse", passage, {}) or "")
    assert "a copy of the passage" in (problem("the press is rinsed with cold water after every "
                                               "batch", passage, {}) or "")  # fmt: skip
    others = {"how is the press cleaned?": "w-1"}
    assert "duplicate of question w-1" in (problem("How is the  press cleaned?", passage, others)
                                           or "")  # fmt: skip
    assert problem("how should the press be cleaned between batches?", passage, others) is None


def test_write_kill_after_six_then_resume_to_ten(project: Path, tmp_path: Path) -> None:
    out = tmp_path / "written.jsonl"
    cmd = [sys.executable, "-m", "ballast", "write", str(project), "--out", str(out), "--n",
           "10", "--author", "tester", "-q"]  # fmt: skip
    env = {**os.environ, "PYTHONUNBUFFERED": "1"}
    proc = subprocess.Popen(cmd, stdin=subprocess.PIPE, stdout=subprocess.DEVNULL,
                            stderr=subprocess.PIPE, env=env, text=True)  # fmt: skip
    assert proc.stdin is not None
    proc.stdin.write(answers(6))
    proc.stdin.flush()
    deadline = time.time() + 120
    while time.time() < deadline and not (out.is_file() and len(rows(out)) >= 6):
        time.sleep(0.2)
    proc.send_signal(signal.SIGKILL)
    proc.wait()
    assert len(rows(out)) == 6
    done = subprocess.run(cmd, input=answers(4, start=6), capture_output=True, text=True,
                          env=env, timeout=300)  # fmt: skip
    assert done.returncode == 0, done.stderr
    got = rows(out)
    assert len(got) == 10 and len({r["passage_id"] for r in got}) == 10
    assert all(r["author"] == "tester" and r["written_at"] for r in got)
    lines = (tmp_path / "run" / "passages.jsonl").read_text().splitlines()
    passages = [json.loads(x) for x in lines]
    assert len(import_questions(out, passages)) == 10  # the file the pipeline reads
    assert "0 passage(s) left" in done.stdout


def test_back_skip_and_invalid_answers(project: Path, tmp_path: Path) -> None:
    out = tmp_path / "q.jsonl"
    script = "x\n" + answers(1) + "b\n" + answers(1, start=1) + "\n" + "q\n"
    r = runner.invoke(app, ["write", str(project), "--out", str(out), "--n", "10", "-q"],
                      input=script, catch_exceptions=False)  # fmt: skip
    assert r.exit_code == 0, r.output
    assert "not kept: too short" in r.stdout
    got = rows(out)  # the first answer was taken back and replaced; the next passage skipped
    assert [x["text"] for x in got] == ["which rule number 1 applies to the cellar crew on night "
                                        "shifts"]  # fmt: skip
    progress = json.loads(out.with_name(out.name + ".progress.json").read_text())
    assert len(progress["skipped"]) == 1
    again = runner.invoke(app, ["write", str(project), "--out", str(out), "--n", "10", "-q"],
                          input="q\n", catch_exceptions=False)  # fmt: skip
    assert "[3/10]" in again.stdout  # resumes at the third passage: nothing asked twice


def test_worksheet_round_trip_and_a_bad_row(project: Path, tmp_path: Path) -> None:
    out, sheet = tmp_path / "q.jsonl", tmp_path / "sheet.csv"
    base = ["write", str(project), "--out", str(out), "--n", "8", "-q"]
    r = runner.invoke(app, [*base, "--worksheet", str(sheet)], catch_exceptions=False)
    assert r.exit_code == 0 and sheet.is_file()
    table = list(csv.DictReader(io.StringIO(sheet.read_text("utf-8"))))
    assert len(table) == 8 and all(row["question"] == "" for row in table)
    for i, row in enumerate(table[:5]):
        row["question"] = f"what must the crew check before task {i} starts in the morning"
    buf = io.StringIO()
    w = csv.DictWriter(buf, fieldnames=list(table[0]), lineterminator="\n")
    w.writeheader()
    w.writerows(table)
    sheet.write_text(buf.getvalue(), "utf-8")
    r = runner.invoke(app, [*base, "--import", str(sheet)], catch_exceptions=False)
    assert r.exit_code == 0 and "imported 5 question(s) (3 row(s) left empty)" in r.stdout
    assert len(rows(out)) == 5
    table[6]["question"] = table[6]["passage"]  # a copy of the passage, on line 8 of the file
    buf = io.StringIO()
    w = csv.DictWriter(buf, fieldnames=list(table[0]), lineterminator="\n")
    w.writeheader()
    w.writerows(table)
    sheet.write_text(buf.getvalue(), "utf-8")
    before = out.read_bytes()
    r = runner.invoke(app, [*base, "--import", str(sheet)], catch_exceptions=False)
    assert r.exit_code == 2
    bad_line = next(n for n, line in enumerate(sheet.read_text("utf-8").splitlines(), start=1)
                    if line.startswith(table[6]["passage_id"]))  # fmt: skip
    assert f"{sheet}:{bad_line}, field 'question'" in r.stderr
    assert "a copy of the passage" in r.stderr and out.read_bytes() == before


def test_pooled_judging_writes_qrels_that_trec_tools_score(project: Path, tmp_path: Path) -> None:
    pytrec_eval = pytest.importorskip("pytrec_eval")
    queries = tmp_path / "log.tsv"
    queries.write_text("s1\thow often are the presses cleaned\ns2\twho signs the cellar log\n")
    out = tmp_path / "judged.qrels"
    base = ["judge", str(project), "--queries", str(queries), "--out", str(out), "--k", "3",
            "-q"]  # fmt: skip
    first = runner.invoke(app, base, input="2\n1\nq\n", catch_exceptions=False)
    assert first.exit_code == 0, first.output
    assert sum(len(v) for v in read_qrels(out).values()) == 2
    pooled = json.loads(out.with_name(out.name + ".pool.json").read_text())
    total = sum(len(v) for v in pooled.values())
    assert all(len(set(v)) == len(v) <= 6 for v in pooled.values())  # base and BM25 top 3, once
    rest = "".join("0\n" if i % 2 else "1\n" for i in range(total - 2))
    second = runner.invoke(app, base, input=rest, catch_exceptions=False)
    assert second.exit_code == 0 and f"{total} of {total}" in second.stdout
    qrels = read_qrels(out)
    assert sum(len(v) for v in qrels.values()) == total
    assert qrels["s1"][pooled["s1"][0]] == 2  # the first grade, kept across the resume
    evaluator = pytrec_eval.RelevanceEvaluator(qrels, {"ndcg_cut"})
    assert set(evaluator.evaluate({"s1": {pooled["s1"][0]: 1.0}})) == {"s1"}
    scored = runner.invoke(app, ["evaluate", "--model", "packaged:all-MiniLM-L6-v2", "--queries",
                                 str(queries), "--qrels", str(out), "--passages",
                                 str(tmp_path / "run" / "passages.jsonl"), "--out",
                                 str(tmp_path / "eval"), "--json", "-q"],
                           catch_exceptions=False)  # fmt: skip
    assert scored.exit_code == 0, scored.output
    assert json.loads(scored.stdout)["splits"]["set"]["n_queries"] >= 1


def test_pool_is_the_union_once_in_a_seeded_order() -> None:
    got = pool({"a": [["p1", "p2", "p3"]], "b": [["p3", "p4", "p9"]]}, ["q"], 2, seed=5)
    assert sorted(got["q"]) == ["p1", "p2", "p3", "p4"]
    assert got == pool({"b": [["p3", "p4"]], "a": [["p1", "p2"]]}, ["q"], 2, seed=5)


def test_kappa_by_hand_and_the_disagreements() -> None:
    a = {"q1": {"d1": 2, "d2": 1, "d3": 0}, "q2": {"d1": 0, "d2": 1, "d4": 2}}
    b = {"q1": {"d1": 2, "d2": 0, "d3": 0}, "q2": {"d1": 0, "d2": 1, "d4": 1}, "q3": {"x": 1}}
    out = agreement(a, b)
    # six shared pairs, four agree: p_o = 4/6; marginals a (0,1,2) = (2,2,2)/6,
    # b = (3,2,1)/6: p_e = (2*3 + 2*2 + 2*1)/36 = 12/36; kappa = (p_o - p_e) / (1 - p_e)
    p_o, p_e = 4 / 6, 12 / 36
    assert out["pairs"] == 6 and out["kappa"] == pytest.approx((p_o - p_e) / (1 - p_e))
    assert [(d["query_id"], d["passage_id"]) for d in out["disagreements"]] == [
        ("q1", "d2"), ("q2", "d4")
    ]
    r = runner.invoke(app, ["agreement", "/nonexistent/a", "/nonexistent/b"])
    assert r.exit_code == 2
