"""Questions written by people, imported with origin ``human``.

Each line of the questions file is ``{"id", "text", "doc_id", "quote"}`` (the quote locates the
answer passage inside that document) or ``{"id", "text", "passage_id"}``; optional
``"author"`` and ``"written_at"`` (what `ballast write` records) are kept in the query's meta.
"""

from __future__ import annotations

import difflib
from pathlib import Path

from ballast.core.errors import InputError
from ballast.core.text import collapse, sha256_bytes
from ballast.io.files import read_jsonl, require_str


def import_questions(path: str | Path, passages: list[dict]) -> list[dict]:
    by_doc: dict[str, list[dict]] = {}
    by_id = {p["id"]: p for p in passages}
    for p in passages:
        by_doc.setdefault(p["doc_id"], []).append(p)
    out, seen = [], {}
    for line, row in read_jsonl(path):
        qid = require_str(row, "id", path=path, line=line)
        text = require_str(row, "text", path=path, line=line)
        if qid in seen:
            raise InputError(
                f"duplicate question id {qid!r} (first on line {seen[qid]})",
                path=path,
                line=line,
                field="id",
            )
        seen[qid] = line
        if "passage_id" in row:
            pid = require_str(row, "passage_id", path=path, line=line)
            if pid not in by_id:
                raise InputError(
                    f"no passage with id {pid!r} in the corpus",
                    path=path,
                    line=line,
                    field="passage_id",
                )
            relevant = [pid]
        else:
            doc = require_str(row, "doc_id", path=path, line=line)
            quote = require_str(row, "quote", path=path, line=line)
            if doc not in by_doc:
                raise InputError(
                    f"no document {doc!r} among the ingested documents",
                    path=path,
                    line=line,
                    field="doc_id",
                )
            relevant = locate(quote, by_doc[doc])
            if not relevant:
                raise InputError(
                    f"quote not found in document {doc!r}; expected words copied "
                    "from the passage that answers the question",
                    path=path,
                    line=line,
                    field="quote",
                )
        meta: dict = {"relevant": relevant}
        for key in ("author", "written_at"):  # who wrote it and when (`ballast write` records)
            if row.get(key):
                meta[key] = require_str(row, key, path=path, line=line)
        out.append(
            {
                "id": qid,
                "text": collapse(text),
                "passage_id": relevant[0],
                "origin": "human",
                "meta": meta,
            }
        )
    return out


def set_aside_examples(
    human: list[dict], passages: list[dict], n: int, seed: int
) -> tuple[list[dict], list[dict]]:
    """(the questions that stay, the ``n`` set aside as prompt examples): a seeded choice, the
    ``n`` first by a hash of seed and question id (not by the file's order). An example is the
    question with the text of its first answer passage; the model-written queries then read
    like this collection's real questions (Promptagator, Dai et al., ICLR 2023, prompted with
    about 8 real examples per collection). The examples never judge: a question shown to the
    query writer is no longer an independent test."""
    if n <= 0 or not human:
        return human, []
    text = {p["id"]: p["text"] for p in passages}
    rank = sorted(human, key=lambda q: sha256_bytes(f"{seed}\0{q['id']}".encode()))
    chosen = {q["id"] for q in rank[:n]}
    examples = [
        {"id": q["id"], "text": q["text"], "passage_id": q["passage_id"],
         "passage": text[q["passage_id"]]}
        for q in rank[:n]
    ]  # fmt: skip
    return [q for q in human if q["id"] not in chosen], examples


def locate(quote: str, passages: list[dict]) -> list[str]:
    """Passages holding the quote; else the one holding most of it (a quote cut by a chunk edge)."""
    q = collapse(quote).lower()
    texts = [collapse(p["text"]).lower() for p in passages]
    hits = [p["id"] for p, t in zip(passages, texts, strict=True) if q in t]
    if hits:
        return hits
    words = q.split()
    for k in range(1, len(words)):  # the quote runs from the end of one passage into the next
        head, tail = " ".join(words[:k]), " ".join(words[k:])
        ends = [p["id"] for p, t in zip(passages, texts, strict=True) if t.endswith(head)]
        starts = [p["id"] for p, t in zip(passages, texts, strict=True) if t.startswith(tail)]
        if ends and starts:
            return sorted(set(ends + starts), key=[p["id"] for p in passages].index)
    best, best_len = None, 0
    for p in passages:
        t = collapse(p["text"]).lower()
        m = difflib.SequenceMatcher(None, q, t, autojunk=False).find_longest_match(
            0, len(q), 0, len(t)
        )
        if m.size > best_len:
            best, best_len = p["id"], m.size
    return [best] if best is not None and best_len >= 0.6 * len(q) else []
