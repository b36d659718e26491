"""Judging search results: TREC-style pooling of several systems' top k for each query, shown
once per passage in a seeded shuffled order that hides which system found it, and graded
judgements (2 highly relevant, 1 relevant, 0 not relevant) saved as TREC qrels after every
mark; a second person's judgements of the same pool give Cohen's kappa.

Pooling as TREC does (Voorhees & Harman, "TREC: Experiment and Evaluation in Information
Retrieval", 2005): the union of the systems' top k is judged; passages outside the pool count
as not relevant. The graded qrels follow trec_eval's gain (nDCG with the grade as gain), which
ballast's metrics already use.
"""

from __future__ import annotations

import csv
import io
import json
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np

from ballast.core.errors import InputError
from ballast.core.text import sha256_bytes
from ballast.io.files import read_text, write_json, write_text_atomic
from ballast.io.trec import format_qrels, read_qrels

GRADES = {2: "highly relevant", 1: "relevant", 0: "not relevant"}
WORKSHEET_FIELDS = ("query_id", "query", "passage_id", "passage", "grade")


def pool(
    rankings: Mapping[str, Sequence[Sequence[str]]], qids: Sequence[str], k: int, seed: int
) -> dict[str, list[str]]:
    """Query id -> the union of every system's top ``k`` (``rankings[system][i]`` for query
    ``qids[i]``), each passage once, in an order seeded per query (no system's order shows)."""
    out = {}
    for i, q in enumerate(qids):
        seen: dict[str, None] = {}
        for ranked in rankings.values():
            for pid in ranked[i][:k]:
                seen.setdefault(pid, None)
        ids = sorted(seen)
        order = np.random.default_rng(int(sha256_bytes(f"{seed}\0{q}".encode())[:15], 16))
        out[q] = [ids[j] for j in order.permutation(len(ids))]
    return out


class JudgementBook:
    """Graded judgements of a pool as TREC qrels, written atomically after every mark; the pool
    itself is kept beside (``<qrels>.pool.json``) so a resumed session shows the same passages
    in the same order."""

    def __init__(self, path: str | Path, pooled: dict[str, list[str]] | None = None) -> None:
        self.path = Path(path)
        self.pool_path = self.path.with_name(self.path.name + ".pool.json")
        if self.pool_path.is_file():
            try:
                saved = json.loads(read_text(self.pool_path))
                self.pooled = {q: list(v) for q, v in saved.items()}
            except (ValueError, AttributeError, TypeError):
                raise InputError(
                    "not a pool file of `ballast judge`", path=self.pool_path
                ) from None
        elif pooled is not None:
            self.pooled = pooled
            write_json(self.pool_path, pooled)
        else:
            raise InputError("no pool to judge; start with `ballast judge ... --queries`",
                             path=self.pool_path)  # fmt: skip
        self.qrels: dict[str, dict[str, int]] = read_qrels(self.path) if self.path.is_file() else {}

    def pending(self) -> list[tuple[str, str]]:
        return [(q, p) for q, ps in self.pooled.items() for p in ps
                if p not in self.qrels.get(q, {})]  # fmt: skip

    def mark(self, qid: str, pid: str, grade: int) -> None:
        if grade not in GRADES:
            raise InputError(f"grade {grade!r}: expected 2, 1 or 0", field="grade")
        self.qrels.setdefault(qid, {})[pid] = grade
        self._save()

    def unmark(self, qid: str, pid: str) -> None:
        self.qrels.get(qid, {}).pop(pid, None)
        self._save()

    def replace(self, qrels: dict[str, dict[str, int]]) -> None:
        """Every grade at once (a filled worksheet), saved."""
        self.qrels = qrels
        self._save()

    def _save(self) -> None:
        write_text_atomic(self.path, format_qrels({q: v for q, v in self.qrels.items() if v}))


def worksheet_csv(
    pooled: dict[str, list[str]], queries: Mapping[str, str], passages: Mapping[str, str]
) -> str:
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(WORKSHEET_FIELDS)
    for q, pids in pooled.items():
        for p in pids:
            w.writerow([q, queries[q], p, passages[p], ""])
    return buf.getvalue()


def read_worksheet(path: str | Path, pooled: dict[str, list[str]]) -> dict[str, dict[str, int]]:
    """The graded judgements of a filled judging worksheet; every pooled pair must be graded
    2, 1 or 0 (an error names the line and field)."""
    path = Path(path)
    reader = csv.DictReader(io.StringIO(read_text(path)))
    for f in ("query_id", "passage_id", "grade"):
        if f not in (reader.fieldnames or []):
            raise InputError(f"no column {f!r}; expected a worksheet of `ballast judge`",
                             path=path, line=1, field=f)  # fmt: skip
    out: dict[str, dict[str, int]] = {}
    end = reader.line_num  # the header's last line
    for r in reader:
        line, end = end + 1, reader.line_num  # where the row starts (a passage may span lines)
        q, p, g = ((r.get(k, "") or "").strip() for k in ("query_id", "passage_id", "grade"))
        if p not in pooled.get(q, []):
            raise InputError(f"({q!r}, {p!r}) is not in the pool", path=path, line=line,
                             field="passage_id")  # fmt: skip
        if g not in ("0", "1", "2"):
            raise InputError(f"grade {g!r}: expected 2 (highly relevant), 1 (relevant) or 0",
                             path=path, line=line, field="grade")  # fmt: skip
        out.setdefault(q, {})[p] = int(g)
    missing = [(q, p) for q, ps in pooled.items() for p in ps if p not in out.get(q, {})]
    if missing:
        raise InputError(f"{len(missing)} pooled passage(s) left ungraded, the first "
                         f"{missing[0][1]!r} for query {missing[0][0]!r}", path=path,
                         field="grade")  # fmt: skip
    return out


def agreement(
    a: Mapping[str, Mapping[str, int]], b: Mapping[str, Mapping[str, int]]
) -> dict[str, Any]:
    """Cohen's kappa (scikit-learn's ``cohen_kappa_score``) of two people's grades over the
    pairs both judged, unweighted and linearly weighted, and the pairs they disagree on."""
    from sklearn.metrics import cohen_kappa_score

    pairs = sorted((q, p) for q in a for p in a[q] if p in b.get(q, {}))
    if not pairs:
        raise InputError("the two qrels files share no judged (query, passage) pair")
    x = [a[q][p] for q, p in pairs]
    y = [b[q][p] for q, p in pairs]
    same = len(set(x) | set(y)) == 1
    return {
        "pairs": len(pairs),
        "agreement": sum(i == j for i, j in zip(x, y, strict=True)) / len(pairs),
        "kappa": 1.0 if same else float(cohen_kappa_score(x, y, labels=[0, 1, 2])),
        "kappa_linear": 1.0 if same else float(cohen_kappa_score(x, y, labels=[0, 1, 2],
                                                                weights="linear")),  # fmt: skip
        "disagreements": [
            {"query_id": q, "passage_id": p, "a": i, "b": j}
            for (q, p), i, j in zip(pairs, x, y, strict=True) if i != j
        ],
    }


def system_rankings(run: Any, texts: Sequence[str], k: int) -> dict[str, list[list[str]]]:
    """Each system's top ``k`` passages of the run's collection for each query: the base
    model, the tuned model (when trained; with its query route) and BM25."""
    from ballast.core.lexical import BM25, bm25_rank
    from ballast.core.scoring import rank
    from ballast.models.loading import model_fingerprint
    from ballast.models.query_map import query_route

    passages = run.passages()
    pids, ptexts = [p["id"] for p in passages], [p["text"] for p in passages]
    systems: dict[str, tuple[Any, str, Any]] = {
        "base": (run.search_encoder(), run.base_fp, lambda e: e)
    }
    tuned = run.path("model")
    if tuned.is_dir():
        fp = model_fingerprint(tuned)
        systems["tuned"] = (run.search_encoder(tuned, fp), fp, query_route(tuned))
    out: dict[str, list[list[str]]] = {}
    for name, (model, fp, to_query) in systems.items():
        p_emb = run.encode(model, fp, ptexts, f"encoding passages ({name})")
        q_emb = to_query(run.encode(model, fp, list(texts), f"encoding queries ({name})"))
        out[name], _ = rank(q_emb, p_emb, pids, k)
    out["bm25"], _ = bm25_rank(BM25(ptexts), list(texts), pids, k)
    return out
