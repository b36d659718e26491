"""evaluate.backend: the stages search through the model's ONNX graph, run by onnxruntime (a
general-purpose library, checked here against sentence-transformers' PyTorch encoding of the
same model): exported once into the run's cache and reused, recorded in metrics.json, within
the stated tolerance of PyTorch float32.

The tolerance: onnxruntime float32 matches PyTorch within 1e-5 per embedding (the export's own
check, tests/slow/test_onnx_export.py), so every ranking is the same but for exact ties; int8
weights move embeddings by up to ~4e-2 and moved a model's mean nDCG@10 by up to 0.0128 on 366
real questions, 4.7/n (measured, docs/scale.md), so 5/n is allowed here: loose on a set this
small, yet broken int8 encodings (ranking at random) fail it by far."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
from typer.testing import CliRunner

from ballast.cli import app
from tests.runfolder import base_model_dir, make_run

pytestmark = pytest.mark.slow
pytest.importorskip("onnxruntime")
pytest.importorskip("onnxscript")
runner = CliRunner()


def evaluate(run: Path, *sets: str) -> dict:
    args = ["evaluate", str(run), "-q", "--set", "evaluate.bf16=false"]
    for s in sets:
        args += ["--set", s]
    r = runner.invoke(app, args, catch_exceptions=False)
    assert r.exit_code == 0, r.output
    return json.loads((run / "metrics.json").read_text("utf-8"))


def means(metrics: dict) -> dict[tuple[str, str], tuple[float, int]]:
    return {
        (split, model): (info["models"][model]["ndcg@10"]["mean"], info["n_queries"])
        for split, info in metrics["splits"].items()
        for model in ("base", "tuned")
    }


def passage_texts(run: Path) -> list[str]:
    lines = (run / "passages.jsonl").read_text("utf-8").splitlines()
    return [json.loads(line)["text"] for line in lines]


@pytest.fixture(scope="module")
def run(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return make_run(tmp_path_factory.mktemp("onnx_search"), with_model=True)


def test_int8_search_is_within_tolerance_exported_once_and_recorded(run: Path) -> None:
    reference = evaluate(run)
    assert reference["encoding"] == "float32"
    int8 = evaluate(run, "evaluate.backend=onnx-int8")
    assert int8["encoding"] == "onnx-int8"
    r = runner.invoke(app, ["gate", str(run), "-q"], catch_exceptions=False)
    assert "int8" in json.loads((run / "gate.json").read_text("utf-8"))["caution"], r.output
    graphs = sorted((run / "cache" / "onnx").rglob("*.onnx"))
    # base and tuned are the same weights here, so one fingerprint: one graph and its int8 copy
    assert [g.name for g in graphs] == ["model.onnx", "model_int8.onnx"]
    assert not list((run / "cache" / "onnx").rglob("*.part"))  # nothing half-written left
    got, want = means(int8), means(reference)
    for key, (value, n) in want.items():
        assert abs(got[key][0] - value) <= 5 / n, (key, got[key][0], value)
    stamps = [g.stat().st_mtime_ns for g in graphs]
    again = evaluate(run, "evaluate.backend=onnx-int8")  # graphs and embeddings from the cache
    assert [g.stat().st_mtime_ns for g in graphs] == stamps
    assert means(again) == got


def test_onnx_float32_search_matches_pytorch_embeddings(run: Path) -> None:
    from ballast.models.backend import load_search_encoder
    from ballast.models.encode import encode
    from ballast.models.loading import model_fingerprint

    model = base_model_dir()
    fp = model_fingerprint(model)
    texts = passage_texts(run)[:40]
    torch_model = load_search_encoder(model, fp, "pytorch", run / "cache", 128)
    graph = load_search_encoder(model, fp, "onnx", run / "cache", 128)
    assert graph.search_precision == "onnx-float32"
    a, b = encode(torch_model, texts, batch_size=16), encode(graph, texts, batch_size=16)
    assert a.shape == b.shape
    assert np.abs(a - b).max() < 1e-5
    # The limit given is the one used: a text past 128 tokens is cut as PyTorch cuts it.
    long = [" ".join(["the relief valve opens at a set pressure"] * 60)]
    np.testing.assert_allclose(encode(graph, long), encode(torch_model, long), atol=1e-5)


def test_the_stages_search_with_the_chosen_backend(run: Path) -> None:
    # synth's round trip, check, mine, teach and judge take the base model from
    # Run.search_encoder and encode it through Run.encode, into the run's cache
    from ballast.config import build_config
    from ballast.models.encode import EmbeddingCache
    from ballast.stages.base import Run

    cfg = build_config({"run_dir": str(run), "evaluate": {"backend": "onnx-int8"}})
    stages = Run(cfg)
    model = stages.search_encoder()
    assert model.search_precision == "onnx-int8" and model.max_seq_length == 128
    texts = passage_texts(run)
    emb = stages.encode(model, stages.base_fp, texts, "encoding passages (base)")
    np.testing.assert_array_equal(
        EmbeddingCache(run / "cache").get(stages.base_fp, texts, 128, "onnx-int8"), emb
    )
    plain = Run(build_config({"run_dir": str(run)})).search_encoder()
    assert type(plain).__name__ == "SentenceTransformer"
