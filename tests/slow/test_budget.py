"""The training budget (stages/train/budget.py): the warm-up that times a step changes nothing
the training computes (same seed, byte-identical weights: `cmp` of model.safetensors, the
check a refactor owes), and a cap trains on a seeded choice of that many examples."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from ballast import pipeline
from ballast.config import load_config
from ballast.stages import Run
from tests.conftest import tiny_docs, write_config

pytestmark = pytest.mark.slow


@pytest.fixture(scope="module")
def project(tmp_path_factory) -> Path:
    root = tmp_path_factory.mktemp("budget")
    docs = tiny_docs(root, 3)
    return write_config(
        root, docs, gate="min_queries = 2", ingest="max_tokens = 64\noverlap_tokens = 8",
        train="batch_size = 4\nmax_seq_length = 64\nmix_weights = []",
    )  # fmt: skip


def _train(cfg: Path, folder: Path, *sets: str) -> dict:
    run = Run(load_config(cfg, [*sets, f"run_dir={folder}"]))
    pipeline.run_all(run, stop_before="evaluate")
    # the stage summary (train.done.json) holds the timings that train.json leaves out
    return json.loads(run.path("train.done.json").read_text("utf-8"))["summary"]


def test_the_warm_up_changes_no_weight_and_a_cap_keeps_that_many(project: Path) -> None:
    plain = _train(project, project.parent / "plain")
    assert plain["estimate"] is None  # a short training starts at once
    curve = json.loads((project.parent / "plain" / "train.json").read_text("utf-8"))
    # final_loss is the last logged loss (it was the mean over training, named as the last)
    assert plain["final_loss"] == curve["loss_history"][-1]["loss"]
    assert "seconds" not in curve and "seconds" in plain  # timings: the done marker only
    timed = _train(project, project.parent / "timed", "train.minutes=10000")
    assert timed["estimate"]["pairs_kept"] == plain["pairs"]
    assert timed["estimate"]["warmup_seconds_per_step"] > 0
    weights = [(project.parent / f / "model" / "model.safetensors").read_bytes()
               for f in ("plain", "timed")]  # fmt: skip
    assert weights[0] == weights[1]
    capped = _train(project, project.parent / "capped", "train.max_pairs=9")
    assert capped["pairs"] == 9 and capped["estimate"]["pairs_available"] == plain["pairs"]
    assert capped["steps"] == 3  # ceil(9 / 4)
