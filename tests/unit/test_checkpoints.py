"""Resume takes the last checkpoint that was saved whole (common practice: a checkpoint counts
once its last file, the trainer state, is written; transformers' Trainer writes
trainer_state.json after the weights and optimizer)."""

from __future__ import annotations

import json
from pathlib import Path

from ballast.stages.train.full import last_complete_checkpoint


class Notes:
    def __init__(self) -> None:
        self.lines: list[str] = []

    def info(self, text: str) -> None:
        self.lines.append(text)


def checkpoint(root: Path, step: int, *, state: bool = True, weights: bool = True) -> Path:
    d = root / f"checkpoint-{step}"
    d.mkdir(parents=True)
    if weights:
        (d / "model.safetensors").write_bytes(b"w")
    if state:
        (d / "trainer_state.json").write_text(json.dumps({"global_step": step}))
    return d


def test_a_half_written_checkpoint_is_removed_and_the_last_whole_one_taken(tmp_path: Path) -> None:
    checkpoint(tmp_path, 2)
    checkpoint(tmp_path, 10)  # numeric order, not text order: 10 > 4
    checkpoint(tmp_path, 4)
    checkpoint(tmp_path, 12, state=False)  # killed before the trainer state
    bad = checkpoint(tmp_path, 14)
    (bad / "trainer_state.json").write_text('{"global_st')  # killed mid-write
    checkpoint(tmp_path, 16, weights=False)
    notes = Notes()
    assert last_complete_checkpoint(tmp_path, notes) == tmp_path / "checkpoint-10"
    assert sorted(p.name for p in tmp_path.iterdir()) == [
        "checkpoint-10", "checkpoint-2", "checkpoint-4"
    ]
    assert len(notes.lines) == 3 and all("not saved whole" in n for n in notes.lines)


def test_no_checkpoint(tmp_path: Path) -> None:
    assert last_complete_checkpoint(tmp_path) is None
