"""Document-level splits, TREC qrels, and a leakage audit.

Documents, never queries, are assigned to splits, so no passage of a held-out document is ever
trained on. A document keeps its split when others are added: assignments found in the run
folder's previous ``splits.json`` (same seed) are kept, and only new documents are placed.
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Iterable
from typing import TYPE_CHECKING, Any

import numpy as np

from ballast.core.errors import InputError
from ballast.core.records import relevant_ids
from ballast.core.text import sha256_bytes

if TYPE_CHECKING:  # the section's type only: core imports nothing above it
    from ballast.config import SplitConfig

DOC_SPLITS = ("train", "dev", "test")


def _rank_key(seed: int, doc_id: str) -> str:
    return sha256_bytes(f"{seed}\0{doc_id}".encode())


def assign_documents(
    doc_ids: list[str], cfg: SplitConfig, seed: int, previous: dict[str, str] | None = None
) -> dict[str, str]:
    """doc_id -> split. New documents fill the split furthest below its target share."""
    n = len(doc_ids)
    need = 2 + (cfg.dev_fraction > 0)
    if n < need:
        raise InputError(
            f"{n} document(s): splitting by document needs at least {need} "
            "(train, test" + (", dev" if need == 3 else "") + ")",
            field="split",
        )
    target = {
        "test": max(1, round(n * cfg.test_fraction)),
        "dev": max(1, round(n * cfg.dev_fraction)) if cfg.dev_fraction > 0 else 0,
    }
    target["train"] = n - target["test"] - target["dev"]
    while target["train"] < 1:  # give train a document from the larger held-out split
        big = "test" if target["test"] >= target["dev"] else "dev"
        target[big] -= 1
        target["train"] += 1
    present = set(doc_ids)
    out = {d: s for d, s in (previous or {}).items() if d in present and s in DOC_SPLITS}
    counts = Counter(out.values())
    for d in sorted((d for d in doc_ids if d not in out), key=lambda d: _rank_key(seed, d)):
        split = max(DOC_SPLITS, key=lambda s: (target[s] - counts[s], -DOC_SPLITS.index(s)))
        out[d] = split
        counts[split] += 1
    return dict(sorted(out.items()))


# Real questions are split by the documents that answer them, like everything else.
HUMAN_SPLITS = {"train": "human", "dev": "human_dev", "test": "human_heldout"}


def assign_queries(
    queries: list[dict],
    passages: dict[str, dict],
    doc_split: dict[str, str],
    judges: frozenset[str] | set[str] = frozenset(),
) -> dict[str, list[str]]:
    """Split name -> query ids. Generated queries follow their document, except those of a
    judge generator (origin in ``judges``): on test documents they form ``judge``, elsewhere
    they are set aside (they never train, so that they judge independently). Real questions
    (origin ``human``) follow the documents of their answers: ``human`` when one lies in a
    training document (the model trained on that text, never on the question),
    ``human_dev`` when one lies in a dev document (never gated: where settings may be chosen),
    else ``human_heldout`` (documents the model never saw)."""
    out: dict[str, list[str]] = {s: [] for s in (*DOC_SPLITS, *HUMAN_SPLITS.values())}
    if judges:
        out["judge"] = []
    for q in queries:
        if q["origin"] in judges:
            if doc_split[passages[q["passage_id"]]["doc_id"]] == "test":
                out["judge"].append(q["id"])
        elif q["origin"] == "human":
            where = {doc_split[passages[r]["doc_id"]] for r in relevant_ids(q)}
            first = next(s for s in DOC_SPLITS if s in where)
            out[HUMAN_SPLITS[first]].append(q["id"])
        else:
            out[doc_split[passages[q["passage_id"]]["doc_id"]]].append(q["id"])
    return {s: sorted(ids) for s, ids in out.items()}


def human_training_share(
    q_split: dict[str, list[str]],
    queries: list[dict],
    passages: dict[str, dict],
    doc_split: dict[str, str],
    *,
    fraction: float,
    keep: int,
    seed: int,
) -> dict[str, list[str]]:
    """Move a seeded share of the ``human`` split into ``human_train``: real questions that train
    as pairs, like the generated queries, and never judge. Only questions whose every answer
    passage lies in a training document can train (the positive and the passages kept from the
    negatives are then training text). ``round(fraction * n)`` of the ``n`` questions in
    ``human``, but never so many that fewer than ``keep`` (``gate.min_queries``) stay to judge;
    the choice is by a hash of the seed and each question's id (the same questions for the same
    seed and file). The others keep their splits. With ``fraction`` 0 nothing changes (no
    ``human_train`` key: splits.json stays as it was before this option)."""
    if fraction <= 0:
        return q_split
    out = {s: list(ids) for s, ids in q_split.items()}
    out["human_train"] = []
    human = out.get("human", [])
    n = min(round(fraction * len(human)), max(0, len(human) - keep))
    if n <= 0:
        return out
    by_id = {q["id"]: q for q in queries}
    eligible = [
        qid for qid in human
        if all(doc_split[passages[r]["doc_id"]] == "train" for r in relevant_ids(by_id[qid]))
    ]  # fmt: skip
    chosen = set(sorted(eligible, key=lambda q: _rank_key(seed, q))[:n])
    out["human"] = [q for q in human if q not in chosen]
    out["human_train"] = sorted(chosen)
    return out


def training_query_ids(splits: dict[str, Any]) -> list[str]:
    """The queries that train: the training documents' generated queries and the real questions
    of ``human_train`` (splits.json from before that split has none)."""
    q = splits["queries"]
    return [*q.get("train", []), *q.get("human_train", [])]


# the dev queries by train.mix_queries: the synthetic queries on dev documents and the real
# questions about them ("all", also what train.eval_steps scores), or the real ones alone
DEV_SPLITS = {"all": ("dev", "human_dev"), "real": ("human_dev",)}


def dev_query_ids(splits: dict, which: str = "all") -> list[str]:
    """The ids of the dev queries of ``which`` (a key of DEV_SPLITS), split by split."""
    return [q for name in DEV_SPLITS[which] for q in splits["queries"].get(name, [])]


_SPLIT_CODE = {s: i for i, s in enumerate(DOC_SPLITS)}


def leakage_audit(
    passages: Iterable[dict],
    doc_split: dict[str, str],
    threshold: float,
    limit: int = 50,
    *,
    chunk: int = 20_000,
) -> dict[str, Any]:
    """Pairs of identical or near-identical passages (word 3-gram Jaccard, ``corpus.shingles``)
    on both sides of the train / held-out boundary.

    ``passages`` is read once, in order (a generator over passages.jsonl will do); memory holds
    the passage ids and hashed shingle sets (``neardup``), never the texts or a shingle index of
    strings. Only the ``limit`` best pairs are kept; ``pairs_found`` and ``identical`` count
    them all."""
    from ballast.core.neardup import RarestFirst, ShingleHasher, similar_pairs

    hasher, order = ShingleHasher(3), RarestFirst()
    ids: list[str] = []
    codes: list[int] = []
    parts: list[tuple[np.ndarray, np.ndarray]] = []
    texts: list[str] = []

    def flush() -> None:
        flat, offsets = hasher(texts)
        order.count(flat)
        parts.append((flat, offsets))
        texts.clear()

    for p in passages:
        ids.append(p["id"])
        codes.append(_SPLIT_CODE[doc_split[p["doc_id"]]])
        texts.append(p["text"])
        if len(texts) >= chunk:
            flush()
    if texts:
        flush()
    out: dict[str, Any] = {"threshold": threshold, "pairs_found": 0, "pairs": [], "identical": 0}
    if not ids:
        return out
    # every set sorted rarest first, into one preallocated array, a chunk at a time
    sizes = np.concatenate([np.diff(o) for _, o in parts])
    offsets = np.concatenate([[0], np.cumsum(sizes)]).astype(np.int64)
    tok = np.empty(int(offsets[-1]), dtype=np.uint64)
    at = 0
    while parts:  # each chunk freed once copied
        flat, offs = parts.pop(0)
        tok[at : at + len(flat)] = order.sort(flat, offs)
        at += len(flat)
    del order, sizes
    split = np.array(codes, dtype=np.int8)
    train = np.flatnonzero(split == _SPLIT_CODE["train"])
    held = np.flatnonzero(split != _SPLIT_CODE["train"])
    best = np.empty((0, 3))  # rows of (-jaccard rounded, held-out index, train index)
    id_rank: np.ndarray | None = None
    for i, j, inter, union in similar_pairs(tok, offsets, held, train, threshold):
        jac = inter / union
        values, inv = np.unique(jac, return_inverse=True)
        rounded = np.array([round(float(v), 4) for v in values])[inv.reshape(-1)]
        out["pairs_found"] += len(jac)
        out["identical"] += int((rounded >= 1.0).sum())
        if id_rank is None:
            from ballast.core.search import id_ranks

            id_rank = id_ranks(ids)
        cand = np.concatenate([best, np.column_stack([-rounded, i, j])])
        order = np.lexsort((id_rank[cand[:, 2].astype(np.int64)],
                            id_rank[cand[:, 1].astype(np.int64)], cand[:, 0]))  # fmt: skip
        best = cand[order[:limit]]
    out["pairs"] = [
        {
            "held_out": ids[int(h)],
            "split": DOC_SPLITS[int(split[int(h)])],
            "train": ids[int(t)],
            "jaccard": float(-neg),
        }
        for neg, h, t in best
    ]
    return out
