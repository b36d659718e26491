"""train.mode = "adapter" (query side, both sides) and "lora" on a tiny corpus, end to end
through the CLI: the model folder loads as one sentence-transformers model, evaluation applies a
query-side adapter to queries only, and the bundle's manifest carries the matrix (common
practice: a frozen-encoder adapter must leave document embeddings as the base model's)."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from tests.conftest import DEMO, make_demo_slice, write_config

pytestmark = pytest.mark.slow

TINY = {
    "evaluate": "bootstrap_resamples = 500",
    "gate": "min_queries = 2",
    "ingest": "max_tokens = 64\noverlap_tokens = 8",
}


def project(root: Path, train: str, **extra: str) -> Path:
    docs = root / "docs"
    docs.mkdir(parents=True)
    for name in sorted(p.name for p in (DEMO / "docs").glob("*.md"))[:3]:
        text = (DEMO / "docs" / name).read_text("utf-8")
        (docs / name).write_text(text[:3500], "utf-8")
    return write_config(
        root, docs, **TINY, **extra, train="batch_size = 8\nmax_seq_length = 64\n" + train
    )


def ballast_run(cfg: Path) -> subprocess.CompletedProcess:
    return subprocess.run(
        [sys.executable, "-m", "ballast", "run", str(cfg), "-q", "--force"],
        cwd=cfg.parent,
        capture_output=True,
        text=True,
        timeout=300,
    )


def _encode(model_dir: Path, texts: list[str]) -> np.ndarray:
    from ballast.models.encode import encode
    from ballast.models.loading import load_encoder

    return encode(load_encoder(model_dir, max_seq_length=64), texts)


def _bundle(run: Path) -> Path:
    return next(p for p in (run / "bundle").iterdir() if p.is_dir())


def test_query_side_adapter(tmp_path: Path) -> None:
    from ballast.core.scoring import apply
    from ballast.models.loading import load_encoder, resolve_model
    from ballast.models.onnx import export_onnx, open_onnx
    from ballast.models.query_map import ADAPTER_FILE, query_adapter

    # no dev split: nothing to choose an epoch on, so the last map is kept (and the run says so)
    cfg = project(tmp_path, 'mode = "adapter"\nadapter_side = "query"', split="dev_fraction = 0")
    proc = ballast_run(cfg)
    assert proc.returncode in (0, 1), proc.stderr
    run = cfg.parent / "run"
    stats = json.loads((run / "train.json").read_text("utf-8"))
    assert stats["mode"] == "adapter" and stats["steps"] > 0
    assert "best_epoch" not in stats and stats["epochs_run"] == 30
    model = run / "model"
    w = query_adapter(model)
    assert w is not None and not np.allclose(w, np.eye(len(w)))  # it trained
    # the document encoder is the base model: passages embed exactly as before
    texts = [json.loads(x)["text"] for x in (run / "passages.jsonl").read_text().splitlines()][:4]
    base = resolve_model("packaged:all-MiniLM-L6-v2")
    assert np.array_equal(_encode(model, texts), _encode(base, texts))
    # ... and the folder is one sentence-transformers model with a query route that applies the
    # map itself (a Router sharing the encoder: its weights are stored once)
    loaded = load_encoder(model, max_seq_length=64)
    q_texts = ["how do I file an expense claim?", "who signs off a travel request?"]
    mapped = loaded.encode_query(q_texts, normalize_embeddings=True)
    assert np.allclose(mapped, apply(_encode(base, q_texts), w), atol=1e-5)
    assert np.allclose(loaded.encode_document(texts), _encode(base, texts), atol=1e-6)
    assert len([p for p in model.rglob("model.safetensors") if p.stat().st_size > 10**7]) == 1
    # evaluation ranked with mapped queries: the tuned run differs from the base run
    metrics = json.loads((run / "metrics.json").read_text("utf-8"))
    assert "tuned" in metrics["splits"]["test"]["models"]
    assert (run / "runs/tuned/test.run").read_text() != (run / "runs/base/test.run").read_text()
    q = _encode(base, ["how do I file an expense claim?"])
    assert apply(q, w).shape == q.shape
    manifest = json.loads((_bundle(run) / "manifest.json").read_text("utf-8"))
    facts = manifest["model"]["adapter"]
    assert facts["side"] == "query" and facts["file"] == ADAPTER_FILE and facts["in_model"]
    assert manifest["model"]["routes"] == ["document", "query"]
    assert manifest["model"]["pooling"] == "mean" and manifest["model"]["normalized"]
    assert (_bundle(run) / ADAPTER_FILE).is_file()
    # `ballast embed --queries` maps queries as encode_query does; passages stay the base model's
    from ballast.bundle.embed import embed_file

    rows = tmp_path / "texts.jsonl"
    rows.write_text(
        "".join(json.dumps({"id": str(i), "text": t}) + "\n" for i, t in enumerate(q_texts))
    )
    embed_file(_bundle(run), rows, tmp_path / "q", queries=True)
    embed_file(_bundle(run), rows, tmp_path / "p")
    assert np.allclose(np.load(tmp_path / "q.npy"), mapped, atol=1e-5)
    assert np.allclose(np.load(tmp_path / "p.npy"), _encode(base, q_texts), atol=1e-5)
    # the ONNX graph of a routed model is its document route (export checks it within 1e-5)
    info = export_onnx(model, model / "model.onnx")
    assert info["dimension"] == len(w)
    assert info["tokenizer"] != "tokenizer.json" and (model / info["tokenizer"]).is_file()
    graph = open_onnx(model, "model.onnx", int(info["max_seq_length"]))
    assert np.allclose(graph.encode(texts), _encode(base, texts), atol=1e-5)


def test_both_sides_adapter_is_one_model(tmp_path: Path) -> None:
    from ballast.models.loading import resolve_model
    from ballast.models.query_map import query_adapter, read_adapter

    cfg = project(tmp_path, 'mode = "adapter"\nadapter_side = "both"\nadapter_rank = 16')
    proc = ballast_run(cfg)
    assert proc.returncode in (0, 1), proc.stderr
    model = cfg.parent / "run" / "model"
    modules = json.loads((model / "modules.json").read_text("utf-8"))
    assert [m["type"].rsplit(".", 1)[-1] for m in modules][-2:] == ["Dense", "Normalize"]
    assert query_adapter(model) is None  # inside the model, never applied twice
    w, meta = read_adapter(model)
    assert meta["side"] == "both"
    # the dev split scored every epoch, the identity (epoch 0) first; the best one was kept
    stats = json.loads((cfg.parent / "run" / "train.json").read_text("utf-8"))
    scores = [h["score"] for h in stats["dev_history"]]
    assert [h["epoch"] for h in stats["dev_history"]] == list(range(len(scores)))
    assert stats["best_epoch"] == int(np.argmax(scores))
    assert np.array_equal(w, np.eye(len(w))) == (stats["best_epoch"] == 0)
    texts = ["the travel policy", "submitting receipts"]
    base = _encode(resolve_model("packaged:all-MiniLM-L6-v2"), texts)
    got = _encode(model, texts)
    want = base @ w.T
    want /= np.linalg.norm(want, axis=1, keepdims=True)
    assert np.allclose(got, want, atol=1e-5)
    # the ONNX graph holds the map too (export checks it against PyTorch within 1e-5)
    from ballast.models.onnx import export_onnx

    assert export_onnx(model, cfg.parent / "model.onnx")["dimension"] == len(w)


def test_lora_merges_into_a_plain_model(tmp_path: Path) -> None:
    cfg = project(tmp_path, 'mode = "lora"\nlora_rank = 4\nlearning_rate = 1e-4')
    proc = ballast_run(cfg)
    assert proc.returncode in (0, 1), proc.stderr
    model = cfg.parent / "run" / "model"
    assert not (model / "adapter_config.json").exists()
    from safetensors import safe_open

    with safe_open(str(model / "model.safetensors"), framework="numpy") as fh:
        keys = list(fh.keys())
    assert keys and not any("lora" in k for k in keys)
    assert not any(k.startswith("base_model.") for k in keys)
    stats = json.loads((cfg.parent / "run" / "train.json").read_text("utf-8"))
    assert stats["steps"] > 0


def test_matryoshka_and_best_dev_checkpoint(tmp_path: Path) -> None:
    """Matryoshka loss (Kusupati et al. 2022) with dev scoring every 2 steps: the saved model is
    the best-scoring checkpoint, and evaluation reports the truncated sizes as models NAME@DIM."""
    cfg = project(
        tmp_path,
        "matryoshka_dims = [384, 128, 64]\neval_steps = 2\nearly_stopping_patience = 2\n"
        "epochs = 3\nlearning_rate = 1e-4",
    )
    with cfg.open("a") as fh:
        fh.write("[split]\ntest_fraction = 0.34\ndev_fraction = 0.33\n")
    proc = ballast_run(cfg)
    assert proc.returncode in (0, 1), proc.stderr
    run = cfg.parent / "run"
    stats = json.loads((run / "train.json").read_text("utf-8"))
    assert stats["matryoshka_dims"] == [384, 128, 64]
    hist = stats["dev_history"]
    assert hist and [h["step"] for h in hist] == list(range(2, 2 * len(hist) + 1, 2))
    values = [h["ndcg@10"] for h in hist]
    best = max(values)
    assert stats["best_dev"] == pytest.approx(best, abs=1e-6)
    assert stats["best_step"] == hist[values.index(best)]["step"]  # the first best one
    if stats["stopped_early"]:  # patience 2: the last two scores did not beat the best
        assert len(hist) >= 3 and max(values[-2:]) <= best and values.index(best) == len(hist) - 3
    metrics = json.loads((run / "metrics.json").read_text("utf-8"))
    dev = metrics["splits"]["dev"]
    # The saved model is the best checkpoint: the evaluate stage's dev score equals it.
    assert dev["models"]["tuned"]["ndcg@10"]["mean"] == pytest.approx(best, abs=1e-3)
    for name in ("base@128", "base@64", "tuned@128", "tuned@64"):
        assert name in dev["models"] and (run / "runs" / name / "dev.run").is_file()
    assert "tuned@64_vs_base" in dev["comparisons"]


def test_multi_process_encoding_matches_one_process() -> None:
    """evaluate.encode_devices: sentence-transformers' own multi-process encoding, here two CPU
    processes, gives the embeddings one process gives, in the same order."""
    from ballast.models.encode import device_pool, encode
    from ballast.models.loading import load_encoder, resolve_model

    model = load_encoder(resolve_model("packaged:all-MiniLM-L6-v2"), max_seq_length=64)
    texts = [f"passage {i}: the press is rinsed after batch {i}" for i in range(37)]
    one = encode(model, texts, batch_size=8)
    with device_pool(model, ["cpu", "cpu"]) as pool:
        assert pool is not None
        two = encode(model, texts, batch_size=8, pool=pool)
    assert two.shape == one.shape
    np.testing.assert_allclose(two, one, atol=1e-5)
    with device_pool(model, ["cpu"]) as pool:
        assert pool is None  # one device: this process


def test_frozen_layers_keep_the_base_weights(tmp_path: Path) -> None:
    """train.frozen_layers = 2: the embeddings and layers 0-1 of the saved model are the base
    model's, bit for bit; the layers above them trained (partial fine-tuning as in Lee et al.
    2019, "What would Elsa do? Freezing layers during transformer fine-tuning")."""
    from safetensors.numpy import load_file

    from tests.runfolder import base_model_dir

    cfg = project(tmp_path, "frozen_layers = 2\nmix_weights = []\nlearning_rate = 1e-4")
    proc = ballast_run(cfg)
    assert proc.returncode in (0, 1), proc.stderr
    run = cfg.parent / "run"
    stats = json.loads((run / "train.json").read_text("utf-8"))
    assert stats["frozen_layers"] == 2 and stats["steps"] > 0
    base = load_file(str(base_model_dir() / "model.safetensors"))
    tuned = load_file(str(run / "model" / "model.safetensors"))
    assert set(tuned) <= set(base)  # the base file also holds a pooler the encoder never uses
    frozen = [k for k in tuned if k.startswith(("embeddings.", "encoder.layer.0.",
                                                 "encoder.layer.1."))]  # fmt: skip
    above = [k for k in tuned if k.startswith("encoder.layer.") and k not in frozen]
    assert frozen and above
    assert all(np.array_equal(base[k], tuned[k]) for k in frozen)
    assert stats["trained_weights"] == sum(tuned[k].size for k in tuned if k not in frozen)
    changed = [k for k in above if not np.array_equal(base[k], tuned[k])]
    assert len(changed) > len(above) // 2


def test_frozen_layers_refusals() -> None:
    from ballast.config import build_config
    from ballast.core.errors import ConfigError, StageError
    from ballast.models.loading import load_encoder
    from ballast.stages.train.full import freeze_lower_layers
    from tests.runfolder import base_model_dir

    model = load_encoder(base_model_dir(), max_seq_length=64)
    with pytest.raises(StageError, match="at most 5"):
        freeze_lower_layers(model, 6)
    with pytest.raises(ConfigError) as info:
        build_config({"train": {"frozen_layers": 2, "mode": "lora"}})
    assert info.value.key == "train.frozen_layers"


def test_min_steps_raises_the_epochs(tmp_path: Path) -> None:
    """train.min_steps = 12 on a corpus whose pairs make fewer steps an epoch: the trainer
    (transformers' Trainer, the reference for what a step is) runs whole epochs until at least
    12 optimizer steps are done, and train.json says how many epochs that took."""
    cfg = project(tmp_path, "min_steps = 12\nmix_weights = []")
    proc = ballast_run(cfg)
    assert proc.returncode in (0, 1), proc.stderr
    stats = json.loads((cfg.parent / "run" / "train.json").read_text("utf-8"))
    per_epoch = -(-stats["pairs"] // 8)
    assert per_epoch < 12  # the floor is what raises the epochs here
    assert stats["min_steps"] == 12 and stats["epochs"] == -(-12 // per_epoch)
    assert stats["steps"] == stats["epochs"] * per_epoch >= 12


def test_the_net_on_real_dev_questions_alone(tmp_path: Path) -> None:
    """train.mix_queries = "real": the safety net scores the real questions about dev documents
    (human_dev) alone: at weight 0 (the base model) and at the weight it keeps (the model that
    ships) it scores them as evaluate scores the two models on human_dev over the whole corpus
    (the net re-ranks the base model's top 100 plus the judged passages, which hold every
    passage of a corpus this small)."""
    docs, questions = make_demo_slice(tmp_path, n_docs=4)
    cfg = write_config(
        tmp_path, docs, questions, **TINY, split="dev_fraction = 0.25",
        train="batch_size = 8\nmax_seq_length = 64\nmix_queries = \"real\"\nmix_search = \"all\""
              "\nbf16 = false",
    )  # fmt: skip
    # float32 throughout, so the net's scores and evaluate's are the same computation on any CPU
    text = cfg.read_text("utf-8").replace(
        'splits = ["dev", "test", "human"]',
        'splits = ["dev", "test", "human", "human_dev"]\nbf16 = false',
        1,
    )
    cfg.write_text(text, "utf-8")
    r = ballast_run(cfg)
    assert r.returncode in (0, 1), r.stderr[-2000:]
    run = tmp_path / "run"
    real = json.loads((run / "splits.json").read_text("utf-8"))["queries"]["human_dev"]
    net = json.loads((run / "train.json").read_text("utf-8"))["mix"]
    assert net["queries"] == "real" and net["dev_queries"] == len(real) > 0
    assert set(net["dev_scores"]) == {"0", "0.25", "0.5", "0.75", "1"}
    models = json.loads((run / "metrics.json").read_text("utf-8"))["splits"]["human_dev"]["models"]
    assert net["dev_scores"]["0"] == pytest.approx(models["base"]["ndcg@10"]["mean"], abs=1e-6)
    # what ships is the weight kept, and evaluate scores it as the net did
    kept = net["dev_scores"][f"{net['weight']:g}"]
    assert kept == pytest.approx(models["tuned"]["ndcg@10"]["mean"], abs=1e-6)


def test_the_net_on_real_questions_needs_some(tmp_path: Path) -> None:
    """With no real questions, train.mix_queries = "real" stops the run at the pre-flight
    check, before mining, with exit 2 and the key named."""
    cfg = project(tmp_path, 'mix_queries = "real"')
    r = ballast_run(cfg)
    assert r.returncode == 2, r.stderr[-2000:]
    assert "pre-flight" in r.stderr and "train.mix_queries = 'real'" in r.stderr
    run = tmp_path / "run"
    assert "train.mix_queries" in (run / "check.json").read_text("utf-8")
    assert not (run / "negatives.jsonl").exists() and not (run / "model").exists()
