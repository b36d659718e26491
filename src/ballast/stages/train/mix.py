"""The safety net after training: interpolations of the base and the tuned weights, scored on
the dev queries, the best one kept (WiSE-FT, Wortsman et al., CVPR 2022: averaging fine-tuned
and base weights keeps most of the in-domain gain and recovers robustness; the mixing weight
is chosen on held-out data). Weight 0 is the base model itself, so a tuned model that loses
to the base on dev is never what ships.

Scoring every interpolation over a whole corpus would encode it once per weight; instead each
weight re-ranks the same candidates: the base model's top ``CANDIDATES`` for every dev query
plus the passages judged relevant (a common re-ranking approximation: a passage outside the
base model's top 100 rarely enters another model's top 10).
"""

from __future__ import annotations

from typing import Any

import numpy as np

from ballast.core.progress import SILENT, Progress

CANDIDATES = 100


def interpolate(base: dict[str, Any], tuned: dict[str, Any], weight: float) -> dict[str, Any]:
    """``(1 - weight) * base + weight * tuned`` for every floating-point tensor; the others
    (integer buffers such as position ids) are the tuned model's."""
    out = {}
    for name, t in tuned.items():
        b = base.get(name)
        if b is not None and t.is_floating_point() and b.shape == t.shape:
            out[name] = (1.0 - weight) * b + weight * t
        else:
            out[name] = t
    return out


def choose_weight(
    base_model: Any,
    tuned_model: Any,
    dev: Any,
    weights: tuple[float, ...],
    *,
    base_passages: np.ndarray,
    progress: Progress = SILENT,
) -> tuple[float, dict[str, float], int]:
    """(the chosen weight, each weight's dev score, candidates scored). ``dev``: a train.full
    DevSet; ``base_passages``: the base model's embeddings of ``dev.passage_texts``. Ties go to
    the smaller weight (closer to the base). ``tuned_model`` ends holding the chosen weights."""
    import torch

    from ballast.core.scoring import mean_metric, rank
    from ballast.models.encode import encode

    q_base = encode(base_model, dev.query_texts, batch_size=dev.batch_size)
    ranked, _ = rank(q_base, base_passages, dev.passage_ids, CANDIDATES)
    keep = sorted({p for r in ranked for p in r} | {p for q in dev.qrels for p in q})
    index = {p: i for i, p in enumerate(dev.passage_ids)}
    texts = [dev.passage_texts[index[p]] for p in keep]
    tuned_sd = {k: v.detach().clone() for k, v in tuned_model.state_dict().items()}
    base_sd = base_model.state_dict()
    scores: dict[str, float] = {}
    for w in weights:
        if w == 0.0:
            q, p = q_base, base_passages[[index[x] for x in keep]]
        else:
            with torch.no_grad():
                tuned_model.load_state_dict(interpolate(base_sd, tuned_sd, w))
            q = encode(tuned_model, dev.query_texts, batch_size=dev.batch_size)
            p = encode(tuned_model, texts, batch_size=dev.batch_size,
                       label=f"train: dev passages at weight {w:g}", progress=progress)  # fmt: skip
        scores[f"{w:g}"] = round(mean_metric(q, p, keep, dev.qrels, dev.metric), 6)
    best = max(weights, key=lambda w: (scores[f"{w:g}"], -w))
    with torch.no_grad():
        tuned_model.load_state_dict(interpolate(base_sd, tuned_sd, best))
    return best, scores, len(keep)
