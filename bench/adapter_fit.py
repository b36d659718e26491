"""The frozen-encoder adapter's fit, epoch by epoch: what it learns on the training pairs against
what it does to held-out documents, side by side in one run.

    python -m bench.adapter_fit RUN_DIR [--epochs 30] [--every 5]

RUN_DIR is a finished run folder (``make demo`` leaves ``runs/demo``). For each variant (the
positive a query is pulled towards: the passage as the index holds it, or the masked
inverse-cloze positive the full fine-tune trains on; and the learning rate) one adapter is
trained with ballast's own code on the run's training pairs and mined negatives; after every
epoch the map is scored (nDCG@10, the whole corpus searched, as ``ballast evaluate`` ranks) on
the training queries and on each evaluated split. Printed: the curve every ``--every`` epochs,
and the epoch the dev split would choose (the identity, epoch 0, competing) with its scores.
A training score that climbs while the held-out ones fall is overfitting.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

import numpy as np

VARIANTS = [  # (name, positive, learning rate)
    ("masked positive, lr 1e-3", "masked", 1e-3),
    ("indexed passage, lr 1e-3", "indexed", 1e-3),
    ("masked positive, lr 1e-4", "masked", 1e-4),
    ("indexed passage, lr 1e-4 (default)", "indexed", 1e-4),
]


def _recorder(scorers: dict, curve: list[dict[str, float]]):  # noqa: ANN202
    """A ``score`` for train_adapter that records every split's score of each epoch's map in
    ``curve`` and returns dev's (0 without a dev split: the last map is then kept)."""

    def score(w: np.ndarray) -> float:
        curve.append({s: f(w) for s, f in scorers.items()})
        return curve[-1].get("dev", 0.0)

    return score


def main(argv: list[str] | None = None) -> int:
    from ballast.config import load_run_config
    from ballast.core.records import qrels_for, training_positive
    from ballast.io.files import read_jsonl
    from ballast.models.encode import encode_cached
    from ballast.models.loading import load_encoder
    from ballast.stages import Run
    from ballast.stages.train.adapter import dev_scorer, train_adapter

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("run_dir", type=Path)
    ap.add_argument("--epochs", type=int, default=30)
    ap.add_argument("--every", type=int, default=5)
    args = ap.parse_args(argv)

    run = Run(load_run_config(args.run_dir))
    cfg = run.cfg
    passages, queries, splits = run.passages(), run.queries(), run.splits()
    model = load_encoder(run.base_path, max_seq_length=cfg.train.max_seq_length)

    def enc(texts: list[str]) -> np.ndarray:
        return encode_cached(
            model, run.base_fp, texts, run.cache(), batch_size=cfg.evaluate.batch_size
        )

    pids = [p["id"] for p in passages]
    p_emb = enc([p["text"] for p in passages])
    row_of = {pid: i for i, pid in enumerate(pids)}
    by_pid = {p["id"]: p for p in passages}
    by_qid = {q["id"]: q for q in queries}
    qrels = qrels_for(queries)
    negs = {r["query_id"]: r for _, r in read_jsonl(run.need("negatives.jsonl", "mine"))}
    train_ids = [q for q in splits["queries"]["train"] if negs.get(q, {}).get("negatives")]
    anchors = enc([by_qid[q]["text"] for q in train_ids])
    indexed = np.array([row_of[by_qid[q]["passage_id"]] for q in train_ids])
    masked = enc([training_positive(by_qid[q], by_pid[by_qid[q]["passage_id"]]) for q in train_ids])
    neg_rows = np.array([[row_of[negs[q]["negatives"][0]["id"]]] for q in train_ids])

    scored = ["train", *(s for s in cfg.evaluate.splits if splits["queries"].get(s))]
    scorers = {}
    for s in scored:
        ids = train_ids if s == "train" else splits["queries"][s]
        q_emb = anchors if s == "train" else enc([by_qid[q]["text"] for q in ids])
        scorers[s] = dev_scorer(q_emb, p_emb, pids, [qrels[q] for q in ids], "ndcg@10", "query")
    if "dev" not in scorers:
        sys.stderr.write("the run's dev split has no queries: no epoch can be chosen on it\n")

    print(
        f"{len(train_ids)} training pairs (with a mined negative), {len(passages)} passages; "
        f"nDCG@10 by epoch (epoch 0 = the identity, the base model)\n"
    )
    print("| variant | epoch | " + " | ".join(scored) + " |")
    print("|---|---|" + "---|" * len(scored))
    chosen = []
    for name, positive, lr in VARIANTS:
        curve: list[dict[str, float]] = []
        score = _recorder(scorers, curve)
        positives = p_emb[indexed] if positive == "indexed" else masked
        pos_ids = indexed if positive == "indexed" else len(pids) + np.arange(len(train_ids))
        train_adapter(
            anchors,
            positives,
            p_emb[neg_rows],
            pos_ids,
            neg_rows,
            side="query",
            rank=0,
            epochs=args.epochs,
            batch_size=cfg.train.batch_size,
            learning_rate=lr,
            seed=cfg.seed,
            score=score,
        )
        for epoch, row in enumerate(curve):
            if epoch % args.every == 0 or epoch == len(curve) - 1:
                print(f"| {name} | {epoch} | " + " | ".join(f"{row[s]:.4f}" for s in scored) + " |")
        if "dev" in scorers:
            best = int(np.argmax([r["dev"] for r in curve]))
            chosen.append((name, best, curve[best], curve[0]))
    if chosen:
        print("\nThe epoch dev chooses (gain over the base model in brackets):\n")
        print("| variant | epoch | " + " | ".join(scored) + " |")
        print("|---|---|" + "---|" * len(scored))
        for name, best, row, base in chosen:
            cells = " | ".join(f"{row[s]:.4f} ({row[s] - base[s]:+.4f})" for s in scored)
            print(f"| {name} | {best} | {cells} |")
    return 0


if __name__ == "__main__":
    sys.exit(main())
