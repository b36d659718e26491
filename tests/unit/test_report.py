"""The report: metric-vs-k curves from stored run files, escaping of document text, the stage
and its command, and its place in the pipeline (after the gate, before export, pass or fail)."""

from __future__ import annotations

import dataclasses
import json
import math
from pathlib import Path

import pytest
from typer.testing import CliRunner

from ballast import pipeline
from ballast.cli import app
from ballast.config import load_run_config
from ballast.stages import Run
from ballast.stages.report import gather
from ballast.stages.report.content import ReportInputs, k_curves, parse_run
from ballast.stages.report.markdown import render_markdown
from ballast.stages.report.page import render_html
from tests.runfolder import SCRIPT, make_run

runner = CliRunner()


def test_parse_run_orders_by_rank_not_by_line() -> None:
    text = "q1 Q0 d2 2 0.5 t\nq1 Q0 d1 1 0.9 t\nq2 Q0 d3 1 0.7 t\n"
    assert parse_run(text) == {"q1": [("d1", 0.9), ("d2", 0.5)], "q2": [("d3", 0.7)]}


def test_k_curves_by_hand() -> None:
    # trec_eval semantics (REFERENCES.md): recall = found / relevant; nDCG with linear gain
    # rel / log2(rank + 1). q1 finds its one relevant document at rank 2; q2 has two relevant,
    # at ranks 1 and 3.
    ranking = {"q1": [("a", 0.9), ("b", 0.8), ("c", 0.7)],
               "q2": [("x", 0.9), ("y", 0.8), ("z", 0.7)]}
    qrels = {"q1": {"b": 1}, "q2": {"x": 1, "z": 1}}
    c = k_curves(ranking, qrels, ["q1", "q2"], 3)
    assert c["recall"] == pytest.approx([(0 + 1 / 2) / 2, (1 + 1 / 2) / 2, (1 + 1) / 2])
    ideal2 = 1 + 1 / math.log2(3)
    assert c["ndcg"] == pytest.approx([
        (0 + 1) / 2,
        (1 / math.log2(3) + 1 / ideal2) / 2,
        (1 / math.log2(3) + (1 + 1 / math.log2(4)) / ideal2) / 2,
    ])


def _inputs(tmp_path: Path, **kw) -> ReportInputs:
    run = make_run(tmp_path, **kw)
    return gather(Run(load_run_config(run)))


def test_curves_at_the_cutoff_agree_with_the_evaluation(tmp_path: Path) -> None:
    # two paths to one number: nDCG@10 from the run file on disk, and from evaluate's summary
    inp = _inputs(tmp_path)
    for split in ("dev", "test"):
        for model in ("base", "tuned"):
            ranking = inp.runs[model][split]
            c = k_curves(ranking, inp.qrels[split], sorted(ranking), 10)
            want = inp.metrics["splits"][split]["models"][model]
            assert c["ndcg"][-1] == pytest.approx(want["ndcg@10"]["mean"], abs=1e-9)
            assert c["recall"][-1] == pytest.approx(want["recall@10"]["mean"], abs=1e-9)


def test_document_text_is_escaped(tmp_path: Path) -> None:
    inp = _inputs(tmp_path)
    html = render_html(inp)
    md = render_markdown(inp)
    assert SCRIPT not in html and SCRIPT not in md
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in html
    assert "\\<script\\>alert(1)\\</script\\>" in md  # CommonMark backslash escapes
    assert "&lt;" not in md and "&#x27;" not in md  # a Markdown viewer shows no entities
    assert "<script" not in html.lower()
    assert "Content-Security-Policy" in html and "default-src 'none'" in html


def test_report_shows_what_the_issue_asks_for(tmp_path: Path) -> None:
    inp = _inputs(tmp_path)
    html = render_html(inp)
    for part in ("Verdict", "Base and tuned, per split", "Metric against the cutoff k",
                 "worst regressions", "best wins", "synthesis, filtering and mining",
                 "Training loss", "95% interval", "too_short", "dropped_by_rule.positive"):
        assert part in html, part
    assert html.count("<svg") >= 2 + 2 + 2 + 1  # bars+forest, 2 curves, 2 diff strips, loss
    assert "passed on synthetic queries only" in html and "Evidence: synthetic" in html
    # the same inputs give the same bytes
    assert render_html(inp) == html and render_markdown(inp) == render_markdown(inp)


def test_the_encoding_precision_is_said_only_when_it_is_bfloat16(tmp_path: Path) -> None:
    inp = _inputs(tmp_path)
    for encoding, said in (("bfloat16", True), ("float32", False), (None, False)):
        metrics = {**inp.metrics, "encoding": encoding}
        shown = dataclasses.replace(inp, metrics=metrics)
        for page in (render_html(shown), render_markdown(shown)):
            assert ("computed in bfloat16" in page) is said, (encoding, page[:200])


def test_failed_gate_in_plain_words(tmp_path: Path) -> None:
    inp = _inputs(tmp_path, gate_passes=False)
    assert "did NOT pass the release gate" in render_html(inp)
    assert "the gain is less than the required +0.9000" in render_markdown(inp)


def test_report_command(tmp_path: Path) -> None:
    run = make_run(tmp_path)
    r = runner.invoke(app, ["report", str(run), "--json"], catch_exceptions=False)
    assert r.exit_code == 0, r.output
    doc = json.loads(r.stdout)
    assert doc["stage"] == "report" and doc["summary"]["gate_passed"] is True
    assert Path(doc["summary"]["html"]).is_file() and (run / "report.md").is_file()
    assert (run / "report.done.json").is_file()
    assert not [p for p in run.iterdir() if p.name.endswith(".tmp")]
    loud = runner.invoke(app, ["report", str(run)], catch_exceptions=False)
    assert "report: reading" in loud.stderr and "report.html" in loud.stdout
    quiet = runner.invoke(app, ["report", str(run), "-q"], catch_exceptions=False)
    assert quiet.exit_code == 0 and quiet.stderr == ""


def test_report_runs_between_gate_and_export() -> None:
    order = pipeline.ORDER
    assert order.index("gate") < order.index("report") < order.index("export")


def test_run_writes_the_report_and_still_refuses_export(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    run = make_run(tmp_path, gate_passes=False)
    cfg = tmp_path / "ballast.toml"
    cfg.write_text(
        f'name = "synthetic"\nseed = 3\nrun_dir = "{run}"\n[evaluate]\nsplits = ["dev", "test"]\n'
        '[gate]\nsplits = ["test"]\nmin_queries = 5\nmin_gain = 0.9\n',
        "utf-8",
    )
    # the earlier stages' files are already in the folder: stand-ins that leave them as they are
    for stage in ("ingest", "synth", "split", "mine", "train", "evaluate", "gate"):
        stand_in = dataclasses.replace(pipeline.STAGES[stage], run=lambda run: {"stand_in": True})
        monkeypatch.setitem(pipeline.STAGES, stage, stand_in)
    r = runner.invoke(app, ["run", str(cfg), "--json"], catch_exceptions=False)
    assert r.exit_code == 1  # the gate failed: exit 1, as before the report stage existed
    doc = json.loads(r.stdout)
    stages = {s["stage"]: s for s in doc["stages"]}
    assert stages["report"]["skipped"] is False
    assert stages["export"]["skipped"] is True and "refused" in stages["export"]["summary"]
    assert doc["bundle"] is None and not (run / "bundle").exists()
    assert "did NOT pass" in (run / "report.html").read_text("utf-8")


def test_axes_have_round_ticks_and_the_page_reads_in_order(tmp_path: Path) -> None:
    from ballast.stages.report.charts import nice_ticks

    # common charting practice: ticks at 1, 2, 2.5 or 5 times a power of ten
    assert nice_ticks(0.5, 1.0) == [0.5, 0.6, 0.7, 0.8, 0.9, 1.0]
    assert nice_ticks(0.9, 1.0) == [0.9, 0.92, 0.94, 0.96, 0.98, 1.0]
    assert nice_ticks(0.0, 1.0) == [0.0, 0.2, 0.4, 0.6, 0.8, 1.0]
    html = render_html(_inputs(tmp_path))
    html = html[html.index("</nav>"):]  # the page below its navigation links
    assert ">0.62<" not in html and ">0.88<" not in html
    # the glossary of splits comes with the verdict; the data before the example cards
    assert html.index("The splits") < html.index("Base and tuned, per split")
    assert html.index("Data: synthesis") < html.index("Per query: wins and losses")
    assert "gated: must gain" in html


def test_the_page_has_navigation_and_collapsed_examples(tmp_path: Path) -> None:
    html = render_html(_inputs(tmp_path))
    assert '<nav class="muted"><a href="#s1">Verdict</a>' in html and '<h2 id="s1">' in html
    assert html.count("<details>") == html.count("</details>") > 0


def test_a_stage_summary_reads_as_words() -> None:
    from ballast.cli.output import stage_line

    summary = {"documents": {"train": 11, "dev": 2}, "queries": 5}
    line = stage_line({"stage": "split", "seconds": 1.25, "summary": summary})
    assert line == "split     done in 1.2s: documents (train 11, dev 2), queries 5"


def test_a_difference_is_coloured_only_where_interval_and_test_agree() -> None:
    from ballast.stages.report.charts import COLOURS, forest_svg

    # an interval above zero beside p = 0.052 is not shown as a gain (it was drawn green)
    unsure = forest_svg([("dev ndcg@10", 0.02, 0.001, 0.04, 0.052)], "t", alpha=0.05)
    sure = forest_svg([("test ndcg@10", 0.02, 0.001, 0.04, 0.01)], "t", alpha=0.05)
    assert COLOURS["win"] not in unsure and COLOURS["win"] in sure


def test_code_spans_in_the_verdict_are_code_not_backticks() -> None:
    from ballast.stages.report.page import _code

    assert _code("use `ballast export --force` <now>") == (
        "use <code>ballast export --force</code> &lt;now&gt;"
    )


@pytest.mark.parametrize(
    ("encoding", "said"),
    [
        ("float32", ""),
        (None, ""),
        ("bfloat16", "bfloat16 (evaluate.bf16)"),
        ("onnx-float32", "evaluate.backend = onnx)"),
        ("onnx-int8", "Caution: the figures were computed with int8 weights"),
    ],
)
def test_the_report_says_what_the_embeddings_were_computed_in(encoding, said) -> None:  # noqa: ANN001
    from ballast.stages.report.content import encoding_note

    note = encoding_note({"encoding": encoding} if encoding else {})
    assert (said in note) if said else note == ""
