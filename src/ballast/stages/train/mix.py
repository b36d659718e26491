"""The safety net after training: interpolations of the base and the tuned weights, scored on
the dev queries, the best one kept (WiSE-FT, Wortsman et al., CVPR 2022: averaging fine-tuned
and base weights keeps most of the in-domain gain and recovers robustness; the mixing weight
is chosen on held-out data). Weight 0 is the base model itself, so a tuned model that loses
to the base on dev is never what ships.

Scoring every interpolation over a whole corpus would encode it once per weight; instead each
weight re-ranks the same candidates: the base model's top ``CANDIDATES`` for every dev query
plus the passages judged relevant (a common re-ranking approximation: a passage outside the
base model's top 100 rarely enters another model's top 10).

Each weight other than 0 costs one encoding of the candidates, so two things keep the net
short (docs/scale.md measures both):

- ``search = "descend"`` scores the weights from the largest down and stops at the first that
  scores below the one before it: on a curve with a single peak, the same weight as scoring
  them all. The base (0) costs nothing and is always scored. ``"all"`` scores every weight.
- ``bf16``: the mixes are encoded under bfloat16 autocast (where training ran in bfloat16; rankings
  within 0.003 nDCG@10 of float32 in docs/training.md). A weight kept by less than ``CLOSE``
  over the base is scored again in float32 and kept only if it still beats the base there
  (the base, too, in float32: where the run encodes in bfloat16, ``evaluate.bf16``, its
  embeddings come from the run's cache in bfloat16 and are encoded again for the check);
  else the next best is tried, then the base.
"""

from __future__ import annotations

from collections.abc import Callable, Iterable
from typing import Any

import numpy as np

from ballast.core.progress import SILENT, Progress

CANDIDATES = 100
CLOSE = 0.005  # above the largest bfloat16 difference measured (0.003)


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


def search(
    weights: Iterable[float], score: Callable[[float], float], *, descend: bool
) -> dict[float, float]:
    """Each scored weight's score. Weight 0 first; then the others from the largest down,
    all of them, or with ``descend`` until one scores below the one before it."""
    weights = sorted(weights, reverse=True)
    scores = {0.0: score(0.0)} if 0.0 in weights else {}
    previous = None
    for w in (x for x in weights if x != 0.0):
        scores[w] = score(w)
        if descend and previous is not None and scores[w] < previous:
            break
        previous = scores[w]
    return scores


def keep_best(
    scores: dict[float, float],
    exact: Callable[[float], float],
    *,
    close: float,
    base_exact: bool = True,
) -> tuple[float, dict[float, float]]:
    """(the weight kept, the float32 scores checked). The best-scoring weight, ties to the
    smaller, the base (0) when nothing beats it; a weight that beats the base by less than
    ``close`` is kept only if ``exact`` (float32) still has it above the base, else the next
    best is tried. The base's own score is taken as it is when ``base_exact`` (it was computed
    in float32), else scored by ``exact(0)`` once, at the first check. Without a score for 0,
    nothing is compared to the base."""
    base = scores.get(0.0, float("-inf"))
    checked: dict[float, float] = {}
    for w in sorted((w for w in scores if w != 0.0), key=lambda w: (-scores[w], w)):
        if scores[w] <= base:
            break
        if scores[w] - base >= close:
            return w, checked
        if not base_exact and 0.0 not in checked:
            checked[0.0] = exact(0.0)
        checked[w] = exact(w)
        if checked[w] > checked.get(0.0, base):
            return w, checked
    return 0.0, checked  # reached only when 0 is scored and nothing beats it


def choose_weight(
    base_model: Any,
    tuned_model: Any,
    dev: Any,
    weights: tuple[float, ...],
    *,
    base_passages: np.ndarray,
    base_queries: np.ndarray | None = None,
    base_bf16: bool = False,
    descend: bool = False,
    bf16: bool = False,
    progress: Progress = SILENT,
) -> dict[str, Any]:
    """What train.json records of the net: ``weight`` (the one kept), ``dev_scores`` (each
    weight scored), ``candidates`` (passages scored), ``search``, ``precision`` and, when a
    close weight was checked in float32, ``float32_check``. ``dev``: a train.full DevSet;
    ``base_passages``: the base model's embeddings of ``dev.passage_texts``, ``base_queries``
    of ``dev.query_texts`` (none: encoded here, in float32); ``base_bf16``: they were
    computed in bfloat16, so a float32 check scores the base again in float32. Ties go to the
    smaller weight (closer to the base). ``tuned_model`` ends holding the kept weights."""
    import torch

    from ballast.core.scoring import mean_metric, rank
    from ballast.models.encode import encode

    q_base = base_queries
    if q_base is None:
        q_base = encode(base_model, dev.query_texts, batch_size=dev.batch_size)
    ranked, _ = rank(q_base, base_passages, dev.passage_ids, CANDIDATES)
    keep = sorted({p for r in ranked for p in r} | {p for q in dev.qrels for p in q})
    index = {p: i for i, p in enumerate(dev.passage_ids)}
    texts = [dev.passage_texts[index[p]] for p in keep]
    tuned_sd = {k: v.detach().clone() for k, v in tuned_model.state_dict().items()}
    base_sd = base_model.state_dict()

    def score(w: float, half: bool = bf16) -> float:
        if w == 0.0 and (half or not base_bf16):
            q, p = q_base, base_passages[[index[x] for x in keep]]
        elif w == 0.0:  # the base in float32, for a float32 check
            q = encode(base_model, dev.query_texts, batch_size=dev.batch_size)
            p = encode(base_model, texts, batch_size=dev.batch_size, progress=progress,
                       label="train: dev passages of the base in float32")  # fmt: skip
        else:
            with torch.no_grad():
                tuned_model.load_state_dict(interpolate(base_sd, tuned_sd, w))
            q = encode(tuned_model, dev.query_texts, batch_size=dev.batch_size, bf16=half)
            p = encode(tuned_model, texts, batch_size=dev.batch_size, bf16=half,
                       label=f"train: dev passages at weight {w:g}", progress=progress)  # fmt: skip
        return round(mean_metric(q, p, keep, dev.qrels, dev.metric), 6)

    scores = search(weights, score, descend=descend)
    out: dict[str, Any] = {
        "dev_scores": {f"{w:g}": s for w, s in sorted(scores.items())},
        "candidates": len(keep),
        "search": "descend" if descend else "all",
        "precision": "bfloat16" if bf16 else "float32",
    }
    best, checked = keep_best(scores, lambda w: score(w, half=False),
                              close=CLOSE if bf16 else 0, base_exact=not base_bf16)  # fmt: skip
    if checked:
        out["float32_check"] = {f"{w:g}": s for w, s in checked.items()}
    with torch.no_grad():
        tuned_model.load_state_dict(interpolate(base_sd, tuned_sd, best))
    return {"weight": best, **out}
