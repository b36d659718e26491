"""The teach stage on a slice of the demo: the teacher check refuses a teacher that cannot beat
the base model (the base model as its own teacher ties it exactly), labels put the positive first
and come from training documents only, a pairwise teacher's scores are cached and not computed
twice, and training on the labels uses the distillation loss (common practice of teacher
distillation, GPL, Wang et al., NAACL 2022: candidates scored by the teacher, the student fit to
the scores)."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

from ballast import pipeline
from ballast.config import load_config
from ballast.stages import Run
from tests.conftest import tiny_docs, write_config
from tests.runfolder import base_model_dir

pytestmark = pytest.mark.slow

TRAIN = "batch_size = 8\nmax_seq_length = 64\nmix_weights = []\nbatching = \"length\""


def _project(tmp_path: Path, teach: str) -> Path:
    docs = tiny_docs(tmp_path, 5)
    return write_config(
        tmp_path, docs,
        split="test_fraction = 0.2\ndev_fraction = 0.2",
        gate="min_queries = 2", evaluate="bootstrap_resamples = 200",
        ingest="max_tokens = 64\noverlap_tokens = 8",
        train=TRAIN, teach=teach,
    )  # fmt: skip


def _run(cfg: Path, stop_before: str, *sets: str) -> Run:
    run = Run(load_config(cfg, list(sets)))
    pipeline.run_all(run, stop_before=stop_before)
    return run


def _rows(path: Path) -> list[dict]:
    return [json.loads(x) for x in path.read_text("utf-8").splitlines() if x.strip()]


def test_a_teacher_that_ties_the_base_model_is_refused_and_training_stays_contrastive(
    tmp_path: Path,
) -> None:
    cfg = _project(tmp_path, f'teacher = "bi-encoder"\nmodel = "{base_model_dir()}"')
    run = _run(cfg, "evaluate")
    info = json.loads(run.path("teacher.json").read_text("utf-8"))
    assert info["check"]["split"] == "dev"  # no real questions here: the synthetic ones
    assert info["check"]["difference"] == 0.0 and info["check"]["teacher"] == info["check"]["base"]
    assert "does not beat the base model" in info["refused"]
    assert _rows(run.path("labels.jsonl")) == []
    stats = json.loads(run.path("train.json").read_text("utf-8"))
    assert stats["teacher"]["used"] is False and stats["hard_negatives_per_pair"] == 1
    # batches of similar length compute fewer pad tokens than random ones (same seed)
    assert stats["batching"] == "length"
    assert stats["pad_share"]["length"] < stats["pad_share"]["random"]


def test_hybrid_labels_and_distillation_training(tmp_path: Path) -> None:
    cfg = _project(tmp_path, 'teacher = "hybrid"\ncheck = false\ncandidates = 3')
    run = _run(cfg, "evaluate")
    passages = {p["id"]: p for p in _rows(run.path("passages.jsonl"))}
    queries = {q["id"]: q for q in _rows(run.path("queries.jsonl"))}
    splits = json.loads(run.path("splits.json").read_text("utf-8"))
    train_docs = set(splits["documents"]["train"])
    labels = _rows(run.path("labels.jsonl"))
    assert [r["query_id"] for r in labels] == splits["queries"]["train"]
    for r in labels:
        ids = [c["id"] for c in r["candidates"]]
        assert ids[0] == queries[r["query_id"]]["passage_id"] and len(set(ids)) == len(ids) == 3
        assert {passages[i]["doc_id"] for i in ids} <= train_docs  # nothing of held-out docs
        # fused ranks: the positive of an inverse-cloze query holds the query's own words
        assert all(0 < c["score"] <= 2 / 61 + 1e-8 for c in r["candidates"])
    stats = json.loads(run.path("train.json").read_text("utf-8"))
    assert stats["teacher"] == {
        "teacher": "hybrid", "used": True, "candidates": 3, "loss": "listwise_kl",
        "temperature": 1.0, "contrastive_weight": 0.0,
    }  # fmt: skip
    assert stats["hard_negatives_per_pair"] == 2 and np.isfinite(stats["final_loss"])
    assert (run.path("model") / "model.safetensors").is_file()


def test_a_pairwise_teacher_scores_each_pair_once(tmp_path: Path) -> None:
    import torch
    from transformers import AutoTokenizer, BertConfig, BertForSequenceClassification

    tok = AutoTokenizer.from_pretrained(str(base_model_dir()), local_files_only=True)
    torch.manual_seed(0)
    ce = tmp_path / "ce"
    BertForSequenceClassification(BertConfig(
        vocab_size=tok.vocab_size, hidden_size=32, num_hidden_layers=1, num_attention_heads=2,
        intermediate_size=64, num_labels=1,
    )).save_pretrained(ce, safe_serialization=True)  # fmt: skip
    tok.save_pretrained(ce)
    cfg = _project(tmp_path, f'teacher = "cross-encoder"\nmodel = "{ce}"\ncheck = false')
    run = _run(cfg, "train")
    first = _rows(run.path("labels.jsonl"))
    cache = next(run.path("cache").glob("teacher-*.jsonl"))
    lines = cache.read_text("utf-8").count("\n")
    assert lines == len({(r["query_id"], c["id"]) for r in first for c in r["candidates"]})
    # fewer candidates: a new labelling, every score already cached
    run = _run(cfg, "train", "teach.candidates=2")
    second = _rows(run.path("labels.jsonl"))
    assert cache.read_text("utf-8").count("\n") == lines
    assert [r["candidates"] for r in second] == [r["candidates"][:2] for r in first]
