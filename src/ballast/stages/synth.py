"""Stage synth: passages -> queries.jsonl (generated queries and imported questions)."""

from __future__ import annotations

from typing import Any

from ..files import (
    write_jsonl,
)
from .run import Run


def synth(run: Run) -> dict[str, Any]:
    from ..synth import import_questions, synthesize

    passages = run.passages()
    queries, stats = synthesize(passages, run.cfg.synth, run.rng("synth"))
    if run.cfg.synth.questions:
        human = import_questions(run.cfg.synth.questions, passages)
        stats["human"] = len(human)
        queries.extend(human)
    write_jsonl(run.path("queries.jsonl"), queries)
    stats["total"] = len(queries)
    return stats
