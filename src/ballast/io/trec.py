"""The trade's open file formats: TREC qrels and run files, and simple query/passage files.

qrels: ``query_id 0 doc_id relevance`` (whitespace separated). run: ``query_id Q0 doc_id rank
score tag``. Queries and passages: JSONL with ``id`` and ``text``, or TSV ``id<TAB>text``.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ballast.core.errors import InputError
from ballast.io.files import read_jsonl, read_text, require_str


def format_qrels(qrels: dict[str, dict[str, int]]) -> str:
    return "".join(f"{q} 0 {d} {r}\n" for q in sorted(qrels) for d, r in sorted(qrels[q].items()))


def format_run(qids: list[str], ranked: list[list[str]], scores: np.ndarray, tag: str) -> str:
    lines = []
    for q, docs, sc in zip(qids, ranked, scores, strict=True):
        for r, (d, s) in enumerate(zip(docs, sc.tolist(), strict=True), start=1):
            lines.append(f"{q} Q0 {d} {r} {s:.6f} {tag}\n")
    return "".join(lines)


def read_qrels(path: str | Path) -> dict[str, dict[str, int]]:
    """Judgements per query; lines starting with '#' are comments."""
    out: dict[str, dict[str, int]] = {}
    for lineno, line in enumerate(read_text(path).splitlines(), start=1):
        if not line.strip() or line.lstrip().startswith("#"):
            continue
        parts = line.split()
        if len(parts) != 4:
            raise InputError(
                f"expected 4 fields 'query_id 0 doc_id relevance', found {len(parts)}",
                path=path,
                line=lineno,
            )
        q, _, d, rel = parts
        try:
            grade = int(float(rel))
        except ValueError:
            raise InputError(
                f"relevance {rel!r} is not a number", path=path, line=lineno, field="relevance"
            ) from None
        if d in out.setdefault(q, {}):
            raise InputError(f"document {d!r} judged twice for query {q!r}", path=path, line=lineno)
        out[q][d] = grade
    if not out:
        raise InputError("no judgements in the qrels file", path=path)
    return out


HEADER_IDS = {"id", "_id", "qid", "pid", "docid", "doc_id", "query_id", "query-id",
              "passage_id", "corpus-id", "did"}  # fmt: skip
HEADER_TEXTS = {"text", "query", "question", "passage", "contents", "content", "body"}


def is_header(line: str) -> bool:
    """Whether a TSV's first line names its columns (``id<TAB>text``, ``qid<TAB>query``, ...)
    rather than holding a text: both cells are such column names."""
    cells = [c.strip().lower() for c in line.split("\t")]
    return len(cells) == 2 and cells[0] in HEADER_IDS and cells[1] in HEADER_TEXTS


def read_texts(path: str | Path, what: str) -> list[tuple[str, str]]:
    """(id, text) pairs from a JSONL (``id``, ``text``) or a TSV (``id<TAB>text``) file; a
    TSV's first line is skipped when it is a header (``is_header``)."""
    path = Path(path)
    rows: list[tuple[str, str]] = []
    seen: dict[str, int] = {}
    if path.suffix.lower() == ".jsonl":
        items = (
            (
                ln,
                require_str(o, "id", path=path, line=ln),
                require_str(o, "text", path=path, line=ln),
            )
            for ln, o in read_jsonl(path)
        )
    else:

        def tsv():
            first = True
            for ln, line in enumerate(read_text(path).splitlines(), start=1):
                if not line.strip():
                    continue
                if first and is_header(line):
                    first = False
                    continue  # a header row names the columns; it is not a text
                first = False
                if "\t" not in line:
                    raise InputError(f"expected 'id<TAB>text' for each {what}", path=path, line=ln)
                i, t = line.split("\t", 1)
                if not i.strip() or not t.strip():
                    raise InputError(f"empty id or text for a {what}", path=path, line=ln)
                yield ln, i.strip(), t.strip()

        items = tsv()
    for ln, i, t in items:
        if i in seen:
            raise InputError(
                f"duplicate {what} id {i!r} (first on line {seen[i]})",
                path=path,
                line=ln,
                field="id",
            )
        seen[i] = ln
        rows.append((i, t))
    if not rows:
        raise InputError(f"no {what}s in the file", path=path)
    return rows
