"""Writing real questions: a seeded sample of passages spread over the documents, in the
proportions the gate needs, and the questions file a person fills in (the format the synth
stage imports: ``{"id", "text", "passage_id", "author", "written_at"}``).

The sample: ``n`` passages, 45% from training documents (their questions form ``human``, which
must gain), 45% from test documents (``human_heldout``, which must not lose) and 10% from dev
documents (``human_dev``, where settings are chosen); within a split, documents take turns so
the questions spread over them (documents and passages in an order seeded by ``seed``). The
state is the questions file itself plus ``<file>.progress.json`` (passages skipped), both
written atomically after every answer: a killed session resumes where it stopped and never
asks about a passage twice.
"""

from __future__ import annotations

import csv
import io
import json
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from ballast.core.errors import InputError
from ballast.core.text import collapse, sha256_bytes
from ballast.io.files import read_jsonl, read_text, write_json, write_jsonl

SHARES = (("train", 0.45), ("test", 0.45), ("dev", 0.10))
MIN_WORDS = 3
MAX_COPY = 0.8  # more of the question's word 3-grams copied from the passage: a copy
WORKSHEET_FIELDS = ("passage_id", "split", "document", "position", "passage", "question")


@dataclass(frozen=True)
class Draft:
    """A passage to write a question about, with where it sits."""

    passage_id: str
    doc_id: str
    split: str
    position: int  # 1-based, among its document's passages
    of: int  # passages in that document
    text: str


def sample(
    passages: list[dict], doc_split: dict[str, str], n: int, seed: int
) -> list[Draft]:
    """``n`` passages spread over the documents, in the gate's proportions (see the module)."""
    by_doc: dict[str, list[dict]] = {}
    for p in passages:
        by_doc.setdefault(p["doc_id"], []).append(p)
    key = lambda x: sha256_bytes(f"{seed}\0{x}".encode())  # noqa: E731 - a seeded order
    # each split's share of n, rounded so that the shares add up to n (largest remainder)
    want = {s: int(n * share) for s, share in SHARES}
    by_rest = sorted(SHARES, key=lambda x: -(n * x[1] - int(n * x[1])))
    for s, _ in by_rest[: n - sum(want.values())]:
        want[s] += 1
    out: list[Draft] = []
    for split, _ in SHARES:
        docs = sorted((d for d in by_doc if doc_split.get(d) == split), key=key)
        if not docs:
            continue
        queues = {d: sorted(range(len(by_doc[d])), key=lambda i, d=d: key(by_doc[d][i]["id"]))
                  for d in docs}  # fmt: skip
        taken = 0
        while taken < want[split] and any(queues.values()):
            for d in docs:
                if taken >= want[split] or not queues[d]:
                    continue
                i = queues[d].pop(0)
                p = by_doc[d][i]
                out.append(Draft(p["id"], d, split, i + 1, len(by_doc[d]), p["text"]))
                taken += 1
    return out


def problem(text: str, passage: str, others: dict[str, str]) -> str | None:
    """Why a written question cannot be kept, or None: empty, too short, a copy of the passage
    (word 3-gram overlap, as the synth filters measure it), or a duplicate (``others``: normalised
    text -> the id of the question that has it)."""
    from ballast.core.text import copy_overlap

    words = collapse(text).split()
    if not words:
        return "empty"
    if len(words) < MIN_WORDS:
        return f"too short ({len(words)} word(s)); write the question a person would ask"
    share = copy_overlap(text, passage)
    if share > MAX_COPY:
        return (
            f"a copy of the passage ({share:.0%} of its word 3-grams are the passage's); ask in "
            "your own words"
        )
    if same_as(text) in others:
        return f"a duplicate of question {others[same_as(text)]}"
    return None


def same_as(text: str) -> str:
    """The form two questions are compared in: one line, single spaces, lower case."""
    return collapse(text).lower()


def question_id(passage_id: str) -> str:
    return "w-" + sha256_bytes(passage_id.encode())[:12]


class QuestionBook:
    """The questions file being written and its progress file, kept on disk after every step."""

    def __init__(self, path: str | Path, drafts: list[Draft], author: str = "") -> None:
        self.path = Path(path)
        self.progress_path = self.path.with_name(self.path.name + ".progress.json")
        self.drafts = drafts
        self.author = author
        self.rows: list[dict[str, Any]] = []
        self.skipped: list[str] = []
        if self.path.is_file():
            self.rows = [row for _, row in read_jsonl(self.path, allow_empty=True)]
        if self.progress_path.is_file():
            try:
                self.skipped = list(json.loads(read_text(self.progress_path))["skipped"])
            except (ValueError, KeyError, TypeError):
                raise InputError(
                    "not a progress file of `ballast write`", path=self.progress_path
                ) from None
        self._history: list[str] = [r["passage_id"] for r in self.rows] + self.skipped

    def done(self) -> set[str]:
        return {r["passage_id"] for r in self.rows} | set(self.skipped)

    def pending(self) -> list[Draft]:
        done = self.done()
        return [d for d in self.drafts if d.passage_id not in done]

    def others(self) -> dict[str, str]:
        return {same_as(r["text"]): r["id"] for r in self.rows}

    def answer(self, draft: Draft, text: str) -> str | None:
        """Keep the question (and save), or return why it cannot be kept."""
        why = problem(text, draft.text, self.others())
        if why is not None:
            return why
        self.rows.append(
            {
                "id": question_id(draft.passage_id),
                "text": collapse(text),
                "passage_id": draft.passage_id,
                "author": self.author,
                "written_at": time.strftime("%Y-%m-%dT%H:%M:%S%z"),
            }
        )
        self._history.append(draft.passage_id)
        self._save()
        return None

    def skip(self, draft: Draft) -> None:
        self.skipped.append(draft.passage_id)
        self._history.append(draft.passage_id)
        self._save()

    def back(self) -> Draft | None:
        """Undo the last answer or skip; the draft it was about is asked again next."""
        if not self._history:
            return None
        pid = self._history.pop()
        self.rows = [r for r in self.rows if r["passage_id"] != pid]
        self.skipped = [s for s in self.skipped if s != pid]
        self._save()
        return next((d for d in self.drafts if d.passage_id == pid), None)

    def add(self, rows: list[dict[str, Any]]) -> int:
        """Add questions read from a worksheet (those about a passage not yet answered), and
        save; returns how many were added."""
        have = {r["passage_id"] for r in self.rows}
        new = [r for r in rows if r["passage_id"] not in have]
        self.rows += new
        self._save()
        return len(new)

    def _save(self) -> None:
        write_jsonl(self.path, self.rows)
        write_json(self.progress_path, {"skipped": self.skipped})


def worksheet_csv(drafts: list[Draft]) -> str:
    """A worksheet to fill in a spreadsheet or an editor: one row a passage, the question
    column empty (leave it empty to skip the passage)."""
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(WORKSHEET_FIELDS)
    for d in drafts:
        w.writerow([d.passage_id, d.split, d.doc_id, f"{d.position}/{d.of}", d.text, ""])
    return buf.getvalue()


def read_worksheet(
    path: str | Path, passages: dict[str, dict], author: str = ""
) -> tuple[list[dict[str, Any]], int]:
    """(the questions of a filled worksheet, how many rows were left empty). A row that cannot
    be kept is an InputError naming the line, the field and why."""
    path = Path(path)
    reader = csv.DictReader(io.StringIO(read_text(path)))
    missing = [f for f in ("passage_id", "question") if f not in (reader.fieldnames or [])]
    if missing:
        raise InputError(f"no column {missing[0]!r}; expected a worksheet of `ballast write`",
                         path=path, line=1, field=missing[0])  # fmt: skip
    rows: list[dict[str, Any]] = []
    others: dict[str, str] = {}
    empty = 0
    stamp = time.strftime("%Y-%m-%dT%H:%M:%S%z", time.localtime(path.stat().st_mtime))
    end = reader.line_num  # the header's last line
    for r in reader:
        line, end = end + 1, reader.line_num  # where the row starts (a passage may span lines)
        pid, text = (r.get("passage_id") or "").strip(), r.get("question") or ""
        if not text.strip():
            empty += 1
            continue
        if pid not in passages:
            raise InputError(f"no passage with id {pid!r} in the run's passages",
                             path=path, line=line, field="passage_id")  # fmt: skip
        why = problem(text, passages[pid]["text"], others)
        if why is not None:
            raise InputError(f"the question cannot be kept: {why}",
                             path=path, line=line, field="question")  # fmt: skip
        qid = question_id(pid)
        if any(x["id"] == qid for x in rows):
            raise InputError(f"passage {pid!r} has a question already (one a passage)",
                             path=path, line=line, field="passage_id")  # fmt: skip
        others[same_as(text)] = qid
        rows.append({"id": qid, "text": collapse(text), "passage_id": pid,
                     "author": author, "written_at": stamp})  # fmt: skip
    return rows, empty
