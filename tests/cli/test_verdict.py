"""What a verdict rests on, through the CLI: exit 0 only for a pass on real questions, 3 for a
pass on synthetic queries only, 1 for a failure; and a project too small to decide stops
before any training (exit 2) with what to add (common practice: fail fast and say why)."""

from __future__ import annotations

import json
from pathlib import Path

from typer.testing import CliRunner

from ballast.cli import app
from tests.conftest import make_demo_slice, write_config
from tests.runfolder import make_run

runner = CliRunner()


def test_a_synthetic_pass_exits_3_and_says_so(tmp_path: Path) -> None:
    run = make_run(tmp_path, gate_passes=True)  # gated on the synthetic test split only
    r = runner.invoke(app, ["gate", str(run)], catch_exceptions=False)
    assert r.exit_code == 3
    assert "PASS ON SYNTHETIC QUERIES ONLY" in r.stdout
    assert "evidence: synthetic queries only" in r.stdout
    verdict = json.loads((run / "gate.json").read_text("utf-8"))
    assert verdict["passed"] is True and verdict["evidence"] == "synthetic"


def test_a_failed_gate_exits_1(tmp_path: Path) -> None:
    run = make_run(tmp_path, gate_passes=False)
    r = runner.invoke(app, ["gate", str(run)], catch_exceptions=False)
    assert r.exit_code == 1 and "FAIL" in r.stdout


def test_a_five_document_project_stops_before_training(tmp_path: Path) -> None:
    docs, questions = make_demo_slice(tmp_path, n_docs=5)
    cfg = write_config(tmp_path, docs, questions)
    for line in ("[evaluate]", "[gate]"):  # let the defaults choose the splits
        text = cfg.read_text("utf-8")
        start = text.index(line)
        end = text.index("\n[", start + 1) if "\n[" in text[start + 1 :] else len(text)
        cfg.write_text(text[:start] + text[end:].lstrip("\n"), "utf-8")
    r = runner.invoke(app, ["run", str(cfg)], catch_exceptions=False)
    assert r.exit_code == 2, r.output
    assert "pre-flight" in r.stderr and "gate.min_queries" in r.stderr
    assert "split human_heldout has" in r.stderr or "split human has" in r.stderr
    assert "more real questions" in r.stderr
    # each stage that runs is announced, numbered, with what it does
    assert "── ingest (1/11): the documents folder -> passages.jsonl" in r.stderr
    assert "── check (4/11)" in r.stderr and "── mine" not in r.stderr
    run = tmp_path / "run"
    assert (run / "check.json").is_file() and not (run / "model").exists()
    assert not (run / "negatives.jsonl").exists()  # stopped before mining too
    check = json.loads((run / "check.json").read_text("utf-8"))
    assert check["problems"] and check["min_queries"] == 30


def test_the_run_ends_with_the_next_step_for_its_verdict() -> None:
    from ballast.cli.app import next_step

    assert "ballast verify B" in next_step({"passed": True, "evidence": "real"}, "B")
    assert "ballast write" in next_step({"passed": True, "evidence": "synthetic"}, "B")
    assert "report.html" in next_step({"passed": False, "evidence": "real"}, None)
