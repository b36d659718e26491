"""Stage ingest: the documents folder -> passages.jsonl."""

from __future__ import annotations

from pathlib import Path
from typing import Any

from ..files import (
    write_jsonl,
)
from .run import Run


def ingest(run: Run) -> dict[str, Any]:
    from ..corpus import iter_passages, token_counter
    from ..models import load_tokenizer

    run.progress.info("ingest: reading documents")
    count = token_counter(load_tokenizer(run.base_path))
    stats: dict[str, Any] = {}
    # streamed: passages go to the file as they are cut, never all held in memory
    write_jsonl(
        run.path("passages.jsonl"),
        iter_passages(Path(run.cfg.ingest.docs), run.cfg.ingest, count, stats),
    )
    return stats
