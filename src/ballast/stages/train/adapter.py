"""Frozen-encoder adapters: a residual linear map trained on cached base embeddings.

``W = I + D`` (``train.adapter_rank = 0``: ``D`` a full d x d matrix) or ``W = I + U V^T`` (a
low-rank update). A mapped embedding is ``normalize(W e)``. With ``adapter_side = "query"`` only
queries are mapped, so an index of the base model's document embeddings stays valid (Yoon et
al., ACL 2024, trained such query-side transforms on frozen embeddings). The loss is
MultipleNegativesRankingLoss's: softmax cross-entropy over the batch's positives and the mined
hard negatives, cosine scores times 20 (sentence-transformers' default scale).

With a ``score`` function (the dev split's primary metric of a map) the map of the best epoch is
kept, and the identity (epoch 0) competes: a map that does not beat the base model on dev is
never shipped. On the demo, at the first defaults (lr 1e-3, masked positives), the 147k
parameters fit 414 training pairs (train nDCG@10 0.79 -> 0.99 in 30 epochs) while dev fell
(0.77 -> 0.56): docs/training.md has the measurements (bench/adapter_fit.py).
"""

from __future__ import annotations

import time
from collections.abc import Callable
from typing import Any

import numpy as np

from ballast.core.progress import SILENT, Progress
from ballast.core.scoring import apply

SCALE = 20.0  # MultipleNegativesRankingLoss's default scale (a temperature of 0.05)


def init_params(dim: int, rank: int, gen: Any) -> dict[str, Any]:
    """Parameters of ``W = I + D``: ``D`` is zero (rank 0) or ``U V^T`` with ``V = 0``, so the
    map starts as the identity exactly."""
    import torch

    if rank == 0:
        return {"delta": torch.zeros(dim, dim, requires_grad=True)}
    u = (torch.randn(dim, rank, generator=gen) / np.sqrt(dim)).requires_grad_(True)
    return {"u": u, "v": torch.zeros(dim, rank, requires_grad=True)}


def matrix(params: dict[str, Any]) -> Any:
    """The d x d matrix ``W`` of the parameters."""
    import torch

    if "delta" in params:
        d = params["delta"]
        return torch.eye(d.shape[0]) + d
    u, v = params["u"], params["v"]
    return torch.eye(u.shape[0]) + u @ v.T


def dev_scorer(
    q_emb: np.ndarray,
    p_emb: np.ndarray,
    passage_ids: list[str],
    qrels: list[dict[str, int]],
    metric: str,
    side: str,
) -> Callable[[np.ndarray], float]:
    """``score(W)``: the mean ``metric`` of the dev queries (base embeddings ``q_emb``) ranked
    over the whole corpus (``p_emb``), the queries mapped by ``W`` (and the passages too when
    ``side = "both"``); ranked as ``ballast evaluate`` ranks (ties by passage id)."""
    from ballast.core.scoring import mean_metric

    def score(w: np.ndarray) -> float:
        docs = apply(p_emb, w) if side == "both" else p_emb
        return mean_metric(apply(q_emb, w), docs, passage_ids, qrels, metric)

    return score


def _batch_loss(w: Any, q: Any, docs: Any, mask: Any, both: bool) -> Any:
    import torch
    import torch.nn.functional as F

    qm = F.normalize(q @ w.T, dim=1)
    dm = F.normalize(docs @ w.T, dim=1) if both else docs
    logits = SCALE * qm @ dm.T
    logits = logits.masked_fill(mask, float("-inf"))
    return F.cross_entropy(logits, torch.arange(q.shape[0]))


def train_adapter(
    queries: np.ndarray,
    positives: np.ndarray,
    negatives: np.ndarray,
    pos_ids: np.ndarray,
    neg_ids: np.ndarray,
    *,
    side: str,
    rank: int,
    epochs: int,
    batch_size: int,
    learning_rate: float,
    seed: int,
    threads: int = 1,
    score: Callable[[np.ndarray], float] | None = None,
    patience: int = 0,
    progress: Progress = SILENT,
) -> tuple[np.ndarray, dict[str, Any]]:
    """Learn ``W`` from base embeddings: ``queries`` and ``positives`` (n, d), ``negatives``
    (n, k, d) with k >= 0. ``pos_ids``/``neg_ids`` (n,), (n, k) name the texts, so a text that
    is another row's positive is never scored as a negative of it. With ``score`` (higher is
    better) each epoch's map is scored and the best one returned, the identity included;
    ``patience`` > 0 stops after that many epochs without a gain. The products are small:
    ``threads`` (default one) torch threads, restored afterwards."""
    import torch

    before = torch.get_num_threads()
    torch.set_num_threads(max(1, threads))
    try:
        return _train(
            queries,
            positives,
            negatives,
            pos_ids,
            neg_ids,
            side=side,
            rank=rank,
            epochs=epochs,
            batch_size=batch_size,
            learning_rate=learning_rate,
            seed=seed,
            score=score,
            patience=patience,
            progress=progress,
        )
    finally:
        torch.set_num_threads(before)


def _train(
    queries: np.ndarray,
    positives: np.ndarray,
    negatives: np.ndarray,
    pos_ids: np.ndarray,
    neg_ids: np.ndarray,
    *,
    side: str,
    rank: int,
    epochs: int,
    batch_size: int,
    learning_rate: float,
    seed: int,
    score: Callable[[np.ndarray], float] | None,
    patience: int,
    progress: Progress,
) -> tuple[np.ndarray, dict[str, Any]]:
    import torch

    n, dim = queries.shape
    k = negatives.shape[1] if negatives.ndim == 3 else 0
    gen = torch.Generator().manual_seed(seed)
    params = init_params(dim, rank, gen)
    opt = torch.optim.Adam(list(params.values()), lr=learning_rate)
    q_all = torch.from_numpy(np.ascontiguousarray(queries, dtype=np.float32))
    p_all = torch.from_numpy(np.ascontiguousarray(positives, dtype=np.float32))
    n_all = torch.from_numpy(np.ascontiguousarray(negatives, dtype=np.float32).reshape(n, k, dim))
    pid = torch.from_numpy(np.asarray(pos_ids, dtype=np.int64))
    nid = torch.from_numpy(np.asarray(neg_ids, dtype=np.int64).reshape(n, k))
    steps_per_epoch = -(-n // batch_size)
    history, step, started = [], 0, time.perf_counter()
    best_w = np.eye(dim, dtype=np.float32)
    best = {"epoch": 0, "score": score(best_w)} if score else None
    dev_history = [{"epoch": 0, "score": round(best["score"], 6)}] if best else []
    for epoch in range(epochs):
        order = torch.randperm(n, generator=gen)
        total = 0.0
        for start in range(0, n, batch_size):
            idx = order[start : start + batch_size]
            b = len(idx)
            docs = torch.cat([p_all[idx], n_all[idx].reshape(b * k, dim)])
            doc_ids = torch.cat([pid[idx], nid[idx].reshape(b * k)])
            mask = doc_ids[None, :] == pid[idx][:, None]  # false negatives: the same text
            mask[torch.arange(b), torch.arange(b)] = False  # ... but never the own positive
            loss = _batch_loss(matrix(params), q_all[idx], docs, mask, side == "both")
            opt.zero_grad()
            loss.backward()
            opt.step()
            total += float(loss.detach()) * b
            step += 1
            progress.step("training adapter", step, epochs * steps_per_epoch)
        history.append({"step": step, "epoch": epoch + 1, "loss": round(total / n, 6)})
        with torch.no_grad():
            w = matrix(params).numpy().astype(np.float32)
        if best is None:
            best_w = w
            continue
        value = score(w)
        dev_history.append({"epoch": epoch + 1, "score": round(value, 6)})
        if value > best["score"]:
            best, best_w = {"epoch": epoch + 1, "score": value}, w
        elif patience and epoch + 1 - best["epoch"] >= patience:
            break
    seconds = time.perf_counter() - started
    stats = {
        "steps": step,
        "epochs_run": len(history),
        "seconds": round(seconds, 2),
        "final_loss": history[-1]["loss"] if history else None,
        "loss_history": history,
    }
    if best is not None:
        stats |= {
            "best_epoch": best["epoch"],
            "dev_score": round(best["score"], 6),
            "dev_identity": dev_history[0]["score"],
            "dev_history": dev_history,
            "stopped_early": len(history) < epochs,
        }
    return best_w, stats


