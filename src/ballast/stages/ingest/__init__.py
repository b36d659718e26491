"""Stage ingest: the documents folder -> passages.jsonl."""

from __future__ import annotations

from pathlib import Path
from typing import Any

from ballast.io.files import write_jsonl
from ballast.stages.base import Run, Stage, file_fingerprint


def ingest(run: Run) -> dict[str, Any]:
    from ballast.models.loading import load_tokenizer
    from ballast.stages.ingest.documents import iter_passages, token_counter

    run.progress.info("ingest: reading documents")
    count = token_counter(load_tokenizer(run.base_path))
    stats: dict[str, Any] = {}
    # streamed: passages go to the file as they are cut, never all held in memory
    write_jsonl(
        run.path("passages.jsonl"),
        iter_passages(Path(run.cfg.ingest.docs), run.cfg.ingest, count, stats),
    )
    return stats


STAGE = Stage(
    "ingest",
    ingest,
    keys=("ingest",),
    outputs=("passages.jsonl",),
    external=lambda run: {"docs": file_fingerprint(run.cfg.ingest.docs)},
    base_model=True,  # its tokenizer cuts the passages
)
