"""`ballast evaluate` on any TREC-style set, outside a run folder: two models compared, files
written, and bad files refused with exit 2 (TREC qrels/run formats are the trade's open
standard; the rest is common practice)."""

from __future__ import annotations

import json
from pathlib import Path

from typer.testing import CliRunner

from ballast.cli import app

runner = CliRunner()
PASSAGES = {
    "d1": "The press cloth must be replaced when it tears.",
    "d2": "Fermentation tanks are cooled to twelve degrees.",
    "d3": "Bottles are rinsed before they reach the filler.",
    "d4": "Forklifts give way to people on foot in the yard.",
}
QUERIES = {"q1": "torn press cloth", "q2": "tank temperature during fermentation",
           "q3": "who has right of way in the yard", "q4": "an unjudged query"}
QRELS = "q1 0 d1 1\nq2 0 d2 1\nq3 0 d4 1\nq3 0 d3 0\n"


def files(tmp_path: Path, qrels: str = QRELS) -> list[str]:
    (tmp_path / "p.jsonl").write_text(
        "".join(json.dumps({"id": k, "text": v}) + "\n" for k, v in PASSAGES.items()), "utf-8")
    (tmp_path / "q.tsv").write_text("".join(f"{k}\t{v}\n" for k, v in QUERIES.items()), "utf-8")
    (tmp_path / "qrels.txt").write_text(qrels, "utf-8")
    return ["--queries", str(tmp_path / "q.tsv"), "--qrels", str(tmp_path / "qrels.txt"),
            "--passages", str(tmp_path / "p.jsonl"), "--out", str(tmp_path / "out")]


def test_two_models_on_a_trec_set(tmp_path: Path) -> None:
    model = "packaged:all-MiniLM-L6-v2"
    r = runner.invoke(app, ["evaluate", "--model", f"a={model}", "--model", f"b={model}",
                            *files(tmp_path), "--json", "--set", "evaluate.metrics=['ndcg@3']"])
    assert r.exit_code == 0, r.output
    doc = json.loads(r.stdout)
    split = doc["splits"]["set"]
    assert split["n_queries"] == 3 and doc["queries_without_judgements"] == 1
    # the same model twice: no difference, and a clean lexical set is solved by MiniLM
    c = split["comparisons"]["b_vs_a"]["ndcg@3"]
    assert c["mean_diff"] == 0.0 and c["p_value"] == 1.0
    assert split["models"]["a"]["ndcg@3"]["mean"] > 0.9
    run = (tmp_path / "out" / "runs" / "a" / "set.run").read_text("utf-8").splitlines()
    assert run[0].split()[:4] == ["q1", "Q0", "d1", "1"]
    assert (tmp_path / "out" / "per_query.csv").read_text("utf-8").startswith("split,query_id")


def test_bad_qrels_line_is_named(tmp_path: Path) -> None:
    r = runner.invoke(app, ["evaluate", "--model", "packaged:all-MiniLM-L6-v2",
                            *files(tmp_path, "q1 0 d1\n")])
    assert r.exit_code == 2 and "qrels.txt:1" in r.stderr and "4 fields" in r.stderr


def test_judged_document_missing_from_passages(tmp_path: Path) -> None:
    r = runner.invoke(app, ["evaluate", "--model", "packaged:all-MiniLM-L6-v2",
                            *files(tmp_path, "q1 0 nope 1\n")])
    assert r.exit_code == 2 and "'nope'" in r.stderr


def test_needs_all_files(tmp_path: Path) -> None:
    r = runner.invoke(app, ["evaluate", "--qrels", str(tmp_path / "x")])
    assert r.exit_code == 2 and "--queries" in r.stderr
