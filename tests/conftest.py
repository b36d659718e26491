"""Shared fixtures: small corpora written into pytest's temporary folders, never the repo."""

from __future__ import annotations

import json
import os
import shutil
from pathlib import Path

import pytest

# A stage that reads a config key its declaration does not list fails the test that ran it.
os.environ["BALLAST_STRICT_READS"] = "1"

REPO = Path(__file__).resolve().parents[1]
DEMO = REPO / "data_demo"


def write_config(folder: Path, docs: Path, questions: Path | None = None, **extra: str) -> Path:
    """A config in ``folder`` pointing at ``docs``; ``extra`` adds raw TOML lines per section."""
    sections: dict[str, list[str]] = {"ingest": [f'docs = "{docs}"']}
    if questions:
        sections["synth"] = [f'questions = "{questions}"']
        sections["evaluate"] = ['splits = ["dev", "test", "human"]']
        sections["gate"] = ['splits = ["test", "human"]']
    for section, body in extra.items():
        sections.setdefault(section, []).append(body)
    lines = ['name = "t"', "seed = 7", 'run_dir = "run"']
    lines += [f"[{name}]\n" + "\n".join(body) for name, body in sections.items()]
    path = folder / "ballast.toml"
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


@pytest.fixture
def demo_slice(tmp_path: Path) -> tuple[Path, Path]:
    """Four documents of the demo handbook and the human questions about them."""
    return make_demo_slice(tmp_path)


def make_demo_slice(tmp_path: Path, n_docs: int = 4) -> tuple[Path, Path]:
    """Copy the first ``n_docs`` demo documents and their questions into ``tmp_path``."""
    docs = tmp_path / "docs"
    docs.mkdir()
    names = sorted(p.name for p in (DEMO / "docs").glob("*.md"))[:n_docs]
    for n in names:
        shutil.copy(DEMO / "docs" / n, docs / n)
    q = tmp_path / "questions.jsonl"
    rows = [json.loads(line) for line in (DEMO / "questions.jsonl").read_text("utf-8").splitlines()
            if line.strip()]
    q.write_text("".join(json.dumps(r) + "\n" for r in rows if r["doc_id"] in names), "utf-8")
    return docs, q


def tiny_docs(root: Path, n_docs: int = 3, chars: int = 2500) -> Path:
    """The first ``n_docs`` demo documents cut to ``chars`` characters, in ``root/docs``: a
    project small enough for a slow test to train on in seconds."""
    docs = root / "docs"
    docs.mkdir(parents=True)
    for name in sorted(p.name for p in (DEMO / "docs").glob("*.md"))[:n_docs]:
        (docs / name).write_text((DEMO / "docs" / name).read_text("utf-8")[:chars], "utf-8")
    return docs
