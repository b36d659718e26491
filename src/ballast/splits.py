"""Document-level splits, TREC qrels, and a leakage audit.

Documents, never queries, are assigned to splits, so no passage of a held-out document is ever
trained on. A document keeps its split when others are added: assignments found in the run
folder's previous ``splits.json`` (same seed) are kept, and only new documents are placed.
"""

from __future__ import annotations

from collections import Counter, defaultdict
from typing import Any

from .config import SplitConfig
from .corpus import shingles
from .errors import InputError
from .files import sha256_bytes

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


def assign_queries(
    queries: list[dict], passages: dict[str, dict], doc_split: dict[str, str]
) -> dict[str, list[str]]:
    """Split name -> query ids. Human questions form 'human'; those whose answers all lie in
    held-out documents also form 'human_heldout' (real questions about documents the model
    never trained on). Generated queries follow their document."""
    out: dict[str, list[str]] = {s: [] for s in (*DOC_SPLITS, "human", "human_heldout")}
    for q in queries:
        if q["origin"] == "human":
            out["human"].append(q["id"])
            relevant = q.get("meta", {}).get("relevant") or [q["passage_id"]]
            if all(doc_split[passages[r]["doc_id"]] != "train" for r in relevant):
                out["human_heldout"].append(q["id"])
        else:
            out[doc_split[passages[q["passage_id"]]["doc_id"]]].append(q["id"])
    return {s: sorted(ids) for s, ids in out.items()}


def qrels_for(queries: list[dict]) -> dict[str, dict[str, int]]:
    rel: dict[str, dict[str, int]] = {}
    for q in queries:
        ids = q.get("meta", {}).get("relevant") or [q["passage_id"]]
        rel[q["id"]] = {pid: 1 for pid in ids}
    return rel


def leakage_audit(
    passages: list[dict], doc_split: dict[str, str], threshold: float, limit: int = 50
) -> dict[str, Any]:
    """Pairs of identical or near-identical passages (word 3-gram Jaccard) on both sides of
    the train / held-out boundary."""
    sh = [shingles(p["text"]) for p in passages]
    index: dict[str, list[int]] = defaultdict(list)
    train = [i for i, p in enumerate(passages) if doc_split[p["doc_id"]] == "train"]
    for i in train:
        for s in sh[i]:
            index[s].append(i)
    pairs = []
    for i, p in enumerate(passages):
        split = doc_split[p["doc_id"]]
        if split == "train":
            continue
        shared: Counter[int] = Counter()
        for s in sh[i]:
            shared.update(index.get(s, ()))
        for j, inter in shared.items():
            jac = inter / (len(sh[i]) + len(sh[j]) - inter)
            if jac >= threshold:
                pairs.append(
                    {
                        "held_out": p["id"],
                        "split": split,
                        "train": passages[j]["id"],
                        "jaccard": round(jac, 4),
                    }
                )
    pairs.sort(key=lambda x: (-x["jaccard"], x["held_out"], x["train"]))
    return {
        "threshold": threshold,
        "pairs_found": len(pairs),
        "pairs": pairs[:limit],
        "identical": sum(1 for x in pairs if x["jaccard"] >= 1.0),
    }
