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
    skipped = stats.pop("skipped_files", [])
    write_jsonl(run.path("skipped.jsonl"), skipped)
    if skipped:
        run.progress.info(
            f"ingest: {len(skipped)} file(s) could not be read and were skipped "
            f"(ingest.on_error = \"skip\"), listed in {run.path('skipped.jsonl')}: "
            + "; ".join(f"{s['file']}: {s['reason']}" for s in skipped[:3])
            + (" …" if len(skipped) > 3 else "")
        )
    stats["skipped"] = len(skipped)
    return stats


def _docs_fingerprint(run: Run) -> str:
    from ballast.io.files import fingerprint_tree

    docs = Path(run.cfg.ingest.docs)
    if not docs.exists():
        return file_fingerprint(docs)  # "missing": the stage itself says what is wrong
    return fingerprint_tree(docs, skip_unreadable=run.cfg.ingest.on_error == "skip")


STAGE = Stage(
    "ingest",
    ingest,
    keys=("ingest",),
    outputs=("passages.jsonl", "skipped.jsonl"),
    external=lambda run: {"docs": _docs_fingerprint(run)},
    base_model=True,  # its tokenizer cuts the passages
)
