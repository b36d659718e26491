"""Stage ingest: the documents folder -> passages.jsonl."""

from __future__ import annotations

from pathlib import Path
from typing import Any

from ..files import (
    write_jsonl,
)
from .run import Run


def ingest(run: Run) -> dict[str, Any]:
    from ..corpus import ingest as do_ingest
    from ..corpus import token_counter
    from ..models import load_tokenizer

    run.progress.info("ingest: reading documents")
    count = token_counter(load_tokenizer(run.base_path))
    result = do_ingest(Path(run.cfg.ingest.docs), run.cfg.ingest, count)
    write_jsonl(run.path("passages.jsonl"), result.passages)
    return result.stats
