"""Shared fixtures: small corpora written into pytest's temporary folders, never the repo."""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[1]
DEMO = REPO / "data_demo"


def write_config(folder: Path, docs: Path, questions: Path | None = None, **extra: str) -> Path:
    """A config in ``folder`` pointing at ``docs``; ``extra`` adds raw TOML lines per section."""
    lines = ['name = "t"', "seed = 7", 'run_dir = "run"', f'[ingest]\ndocs = "{docs}"']
    if questions:
        lines.append(f'[synth]\nquestions = "{questions}"')
    else:
        lines.append('[evaluate]\nsplits = ["dev", "test"]\n[gate]\nsplits = ["test"]')
    for section, body in extra.items():
        lines.append(f"[{section}]\n{body}")
    path = folder / "ballast.toml"
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


@pytest.fixture
def demo_slice(tmp_path: Path) -> tuple[Path, Path]:
    """Four documents of the demo handbook and the human questions about them."""
    docs = tmp_path / "docs"
    docs.mkdir()
    names = sorted(p.name for p in (DEMO / "docs").glob("*.md"))[:4]
    for n in names:
        shutil.copy(DEMO / "docs" / n, docs / n)
    q = tmp_path / "questions.jsonl"
    rows = [json.loads(line) for line in (DEMO / "questions.jsonl").read_text("utf-8").splitlines()
            if line.strip()]
    q.write_text("".join(json.dumps(r) + "\n" for r in rows if r["doc_id"] in names), "utf-8")
    return docs, q
