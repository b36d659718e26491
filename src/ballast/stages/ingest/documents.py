"""Ingest: read a folder of documents, normalise, cut passages with the model's tokenizer.

A passage never crosses a section heading; passages are packed from whole sentences up to
``max_tokens`` and start with the last sentences of the previous one (``overlap_tokens``).
"""

from __future__ import annotations

import csv
import hashlib
import io
import re
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field
from html.parser import HTMLParser
from pathlib import Path
from typing import Any

from ballast.config import IngestConfig
from ballast.core.errors import InputError
from ballast.core.text import cap_length, collapse, normalise, passage_id, split_sentences
from ballast.io.files import read_jsonl, read_text, require_str


@dataclass
class Document:
    doc_id: str
    title: str
    sections: list[tuple[str, list[str]]]  # (heading, paragraphs)
    source: str
    paged: bool = False  # a PDF: each section is a page, headed "p. N"


@dataclass
class IngestResult:
    passages: list[dict[str, Any]]
    stats: dict[str, Any] = field(default_factory=dict)


# ---------------------------------------------------------------- readers

_MD_HEADING = re.compile(r"^(#{1,6})\s+(.*?)\s*#*\s*$")
_MD_LINK = re.compile(r"!?\[([^\]]*)\]\([^)]*\)")
_MD_MARKS = re.compile(r"(\*\*|__|\*|`+|~~)")
_MD_LIST = re.compile(r"^\s*(?:[-*+]|\d+[.)])\s+")


def _paragraphs(lines: list[str]) -> list[str]:
    paras, cur = [], []
    for ln in lines:
        if ln.strip():
            cur.append(ln.strip())
        elif cur:
            paras.append(" ".join(cur))
            cur = []
    if cur:
        paras.append(" ".join(cur))
    return paras


def parse_markdown(text: str, fallback_title: str) -> tuple[str, list[tuple[str, list[str]]]]:
    title, sections = "", []
    heading, buf = "", []
    in_fence = False
    for raw in normalise(text).split("\n"):
        if raw.startswith("```") or raw.startswith("~~~"):
            in_fence = not in_fence
            buf.append("")
            continue
        m = None if in_fence else _MD_HEADING.match(raw)
        if m:
            sections.append((heading, _paragraphs(buf)))
            buf = []
            heading = _MD_MARKS.sub("", m.group(2)).strip()
            if not title and len(m.group(1)) == 1:
                title = heading
            continue
        line = raw
        if not in_fence:
            line = line.lstrip("> ").rstrip() if line.startswith(">") else line
            if _MD_LIST.match(line):  # a list item is a paragraph of its own
                buf.append("")
                line = _MD_LIST.sub("", line)
            line = _MD_MARKS.sub("", _MD_LINK.sub(r"\1", line))
        buf.append(line)
    sections.append((heading, _paragraphs(buf)))
    return title or fallback_title, [(h, p) for h, p in sections if p]


class _HTMLText(HTMLParser):
    BLOCK = {
        "p",
        "div",
        "li",
        "br",
        "tr",
        "section",
        "article",
        "table",
        "ul",
        "ol",
        "pre",
        "blockquote",
        "dd",
        "dt",
    }
    SKIP = {"script", "style", "noscript", "template", "svg", "head"}

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.title = ""
        self.sections: list[tuple[str, list[str]]] = []
        self.heading = ""
        self.lines: list[str] = [""]
        self.skip = 0
        self.in_title = False
        self.in_heading: str | None = None
        self.heading_text = ""

    def handle_starttag(self, tag: str, attrs: Any) -> None:
        if tag == "title":
            self.in_title = True
        elif tag in self.SKIP:
            self.skip += 1
        elif tag in ("h1", "h2", "h3", "h4", "h5", "h6"):
            self.in_heading, self.heading_text = tag, ""
        elif tag in self.BLOCK:
            self.lines.append("")

    def handle_endtag(self, tag: str) -> None:
        if tag == "title":
            self.in_title = False
        elif tag in self.SKIP:
            self.skip = max(0, self.skip - 1)
        elif self.in_heading == tag:
            self.sections.append((self.heading, _paragraphs(self.lines)))
            self.heading, self.lines = " ".join(self.heading_text.split()), [""]
            if tag == "h1" and not self.title:
                self.title = self.heading
            self.in_heading = None
        elif tag in self.BLOCK:
            self.lines.append("")

    def handle_data(self, data: str) -> None:
        if self.in_title:
            self.title += data
        elif self.skip:
            return
        elif self.in_heading:
            self.heading_text += data
        else:
            self.lines[-1] += data

    def result(self, fallback: str) -> tuple[str, list[tuple[str, list[str]]]]:
        self.sections.append((self.heading, _paragraphs(self.lines)))
        title = " ".join(self.title.split()) or fallback
        return title, [(h, p) for h, p in self.sections if p]


def parse_html(text: str, fallback_title: str) -> tuple[str, list[tuple[str, list[str]]]]:
    parser = _HTMLText()
    parser.feed(normalise(text))
    parser.close()
    return parser.result(fallback_title)


def _record_docs(
    rows: Iterator[tuple[int, dict]], path: Path, rel: str, cfg: IngestConfig
) -> Iterator[Document]:
    for line, row in rows:
        doc_id = require_str(row, cfg.id_field, path=path, line=line)
        text = require_str(row, cfg.text_field, path=path, line=line)
        title = row.get(cfg.title_field) or ""
        if not isinstance(title, str):
            raise InputError(
                f"expected a string, found {type(title).__name__}",
                path=path,
                line=line,
                field=cfg.title_field,
            )
        paras = _paragraphs(normalise(text).split("\n"))
        yield Document(str(doc_id), normalise(title) or str(doc_id), [("", paras)], f"{rel}:{line}")


def _csv_rows(path: Path) -> Iterator[tuple[int, dict]]:
    text = read_text(path)
    # strict: a quote left open runs to the end of the file, swallowing every row after it
    reader = csv.DictReader(io.StringIO(text, newline=""), strict=True)
    n = 0
    try:
        if not reader.fieldnames:  # reads the header row
            raise InputError("the file is empty; expected a header row", path=path)
        for row in reader:
            if None in row:
                raise InputError(
                    f"more fields than the header's {len(reader.fieldnames)}",
                    path=path,
                    line=reader.line_num,
                )
            n += 1
            yield reader.line_num, row
    except csv.Error as exc:
        raise InputError(f"not valid CSV: {exc}", path=path, line=max(reader.line_num, 1)) from None
    if n == 0:
        raise InputError("no rows after the header", path=path)


def _parquet_rows(path: Path) -> Iterator[tuple[int, dict]]:
    try:
        import pyarrow.parquet as pq
    except ImportError:  # pragma: no cover - pyarrow comes with datasets
        raise InputError("reading parquet needs pyarrow", path=path) from None
    try:
        table = pq.read_table(path)
    except Exception as exc:  # pyarrow raises several types for corrupt files
        raise InputError(f"not a readable parquet file: {exc}", path=path) from None
    if table.num_rows == 0:
        raise InputError("the file has no rows", path=path)
    yield from enumerate(table.to_pylist(), start=1)


def read_folder(
    folder: Path, cfg: IngestConfig, skipped: list[dict[str, str]] | None = None
) -> Iterator[Document]:
    """Every document under ``folder`` in a stable order (sorted relative paths). With
    ``ingest.on_error = "skip"``, a file that cannot be read is left out and added to
    ``skipped`` with the reason; by default it stops the ingest."""
    if not folder.is_dir():
        raise InputError("documents folder not found", path=folder, field="ingest.docs")
    files = sorted(
        p
        for p in folder.rglob("*")
        if p.is_file() and not any(part.startswith(".") for part in p.relative_to(folder).parts)
    )
    if not files:
        raise InputError("the documents folder has no files", path=folder)
    for path in files:
        rel = path.relative_to(folder).as_posix()
        if cfg.on_error != "skip":
            yield from _read_file(path, rel, cfg)
            continue
        try:
            docs = list(_read_file(path, rel, cfg))  # all of a file or none of it
        except InputError as exc:
            if skipped is not None:
                where = f" (line {exc.line})" if exc.line is not None else ""
                skipped.append({"file": rel, "reason": exc.detail + where})
            continue
        yield from docs


def _read_file(path: Path, rel: str, cfg: IngestConfig) -> Iterator[Document]:
    from ballast.stages.ingest.formats import is_docx, is_pdf, read_docx, read_pdf

    ext = path.suffix.lower()
    if ext not in cfg.extensions:
        raise InputError(
            f"unknown file type '{ext or path.name}'; expected one of "
            f"{', '.join(cfg.extensions)} (set ingest.extensions, or move the file out)",
            path=path,
        )
    if ext == ".pdf":
        yield Document(rel, *read_pdf(path), rel, paged=True)
        return
    if ext == ".docx":
        title, sections = read_docx(path)
        if not sections:
            raise InputError("the document has no text", path=path)
        yield Document(rel, title, sections, rel)
        return
    if ext != ".parquet" and (is_pdf(path) or is_docx(path)):
        kind = "a PDF" if is_pdf(path) else "a Word .docx"
        raise InputError(
            f"this is {kind} file named '{ext}': rename it so ingest reads it as one",
            path=path,
        )
    if ext in (".jsonl", ".csv", ".parquet"):
        rows = {
            ".jsonl": lambda p: read_jsonl(p),
            ".csv": _csv_rows,
            ".parquet": _parquet_rows,
        }[ext](path)
        yield from _record_docs(rows, path, rel, cfg)
        return
    text = read_text(path)
    if not text.strip():
        raise InputError("the document is empty", path=path)
    if ext == ".md":
        title, sections = parse_markdown(text, path.stem)
    elif ext in (".html", ".htm"):
        title, sections = parse_html(text, path.stem)
    else:
        title, sections = path.stem, [("", _paragraphs(normalise(text).split("\n")))]
    if not sections:
        raise InputError("the document has no text", path=path)
    yield Document(rel, title, sections, rel)


# ---------------------------------------------------------------- chunking

Counter = Callable[[list[str]], list[int]]


# A "sentence" longer than max_tokens x this many characters is cut at spaces before it is
# tokenized (no real sentence is that long; a file of one line or without punctuation is)
CHARS_PER_TOKEN_CAP = 16
COUNT_CHARS = 200_000  # characters tokenized at a time: the tokenizer's memory stays bounded


def token_counter(tokenizer: Any) -> Counter:
    def count(texts: list[str]) -> list[int]:
        out: list[int] = []
        batch: list[str] = []
        size = 0
        for t in [*texts, None]:
            if t is None or (batch and size + len(t) > COUNT_CHARS):
                if batch:
                    enc = tokenizer(batch, add_special_tokens=False)["input_ids"]
                    out.extend(len(x) for x in enc)
                batch, size = [], 0
            if t is not None:
                batch.append(t)
                size += len(t)
        return out

    return count


def _split_long(sentence: str, max_tokens: int, count: Counter) -> list[str]:
    """Cut a sentence longer than max_tokens at word boundaries."""
    words, pieces, cur = sentence.split(), [], []
    lens = count(words)
    total = 0
    for w, n in zip(words, lens, strict=True):
        if cur and total + n > max_tokens:
            pieces.append(" ".join(cur))
            cur, total = [], 0
        cur.append(w)
        total += n
    if cur:
        pieces.append(" ".join(cur))
    return pieces


def chunk_sentences(
    sentences: list[str], lens: list[int], max_tokens: int, overlap_tokens: int
) -> list[list[int]]:
    """Greedy packing of sentence indices into chunks, with sentence-level overlap."""
    chunks: list[list[int]] = []
    cur: list[int] = []
    total = 0
    i = 0
    while i < len(sentences):
        n = lens[i]
        if cur and total + n > max_tokens:
            chunks.append(cur)
            back, kept = 0, []
            for j in reversed(cur):
                if back + lens[j] > overlap_tokens or len(kept) + 1 >= len(cur):
                    break
                kept.insert(0, j)
                back += lens[j]
            cur, total = kept, back
            if total + n > max_tokens:
                cur, total = [], 0
            continue
        cur.append(i)
        total += n
        i += 1
    if cur:
        chunks.append(cur)
    return chunks


def iter_passages(
    folder: Path, cfg: IngestConfig, count: Counter, stats: dict[str, Any] | None = None
) -> Iterator[dict[str, Any]]:
    """The passages of every document under ``folder``, in order, one at a time: memory holds a
    document at a time plus one id per document and a 16-byte digest per kept passage (to drop
    duplicates), so a million documents ingest in bounded memory. ``stats`` is filled in when
    the iteration ends."""
    seen_docs: dict[str, str] = {}
    seen_text: set[bytes] = set()
    dup = short = kept = tokens = 0
    skipped: list[dict[str, str]] = []
    for d in read_folder(folder, cfg, skipped):
        if d.doc_id in seen_docs:
            rel, _, line = d.source.rpartition(":")  # "<file>:<line>" for a record's source
            if not (rel and line.isdigit()):
                rel, line = d.source, ""
            raise InputError(
                f"duplicate document id {d.doc_id!r} (first seen at {seen_docs[d.doc_id]})",
                path=folder / rel,
                line=int(line) if line.isdigit() else None,
                field=cfg.id_field,
            )
        seen_docs[d.doc_id] = d.source
        index = 0
        for heading, paras in d.sections:
            sentences: list[str] = []
            limit = cfg.max_tokens * CHARS_PER_TOKEN_CAP
            for p in paras:
                for sentence in split_sentences(p):
                    sentences.extend(cap_length(sentence, limit))
            lens = count(sentences)
            flat, flat_lens = [], []
            for s, n in zip(sentences, lens, strict=True):
                # a sentence longer than a passage is cut in halves-of-a-passage, so its first
                # piece can still share a passage with the sentence before it
                parts = [s] if n <= cfg.max_tokens else _split_long(s, cfg.max_tokens // 2, count)
                flat.extend(parts)
                flat_lens.extend([n] if len(parts) == 1 else count(parts))
            for idxs in chunk_sentences(flat, flat_lens, cfg.max_tokens, cfg.overlap_tokens):
                text = " ".join(flat[j] for j in idxs)
                ntok = sum(flat_lens[j] for j in idxs)
                if ntok < cfg.min_tokens:
                    short += 1
                    continue
                key = hashlib.blake2b(collapse(text).lower().encode(), digest_size=16).digest()
                if key in seen_text:
                    dup += 1
                    continue
                seen_text.add(key)
                title = d.title if not heading or heading == d.title else f"{d.title} — {heading}"
                meta: dict[str, Any] = {"index": index, "tokens": ntok, "section": heading}
                if d.paged:
                    meta["page"] = int(heading.removeprefix("p. "))
                yield {
                    "id": passage_id(d.doc_id, text),
                    "doc_id": d.doc_id,
                    "text": text,
                    "title": title,
                    "meta": meta,
                }
                index += 1
                kept += 1
                tokens += ntok
    if not kept:
        why = f" ({len(skipped)} file(s) skipped as unreadable)" if skipped else ""
        raise InputError(f"no passages: every document was empty or too short{why}", path=folder)
    if stats is not None:
        stats.update(
            {
                "documents": len(seen_docs),
                "skipped_files": skipped,
                "passages": kept,
                "duplicates_dropped": dup,
                "too_short_dropped": short,
                "mean_tokens": round(tokens / kept, 1),
            }
        )


def ingest(folder: Path, cfg: IngestConfig, count: Counter) -> IngestResult:
    """Every passage in a list (``iter_passages`` streams them instead)."""
    stats: dict[str, Any] = {}
    passages = list(iter_passages(folder, cfg, count, stats))
    return IngestResult(passages, stats)
