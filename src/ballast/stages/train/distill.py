"""Training on a teacher's scores (the teach stage's labels) with sentence-transformers' own
distillation losses.

The student's score of a (query, passage) pair is its cosine similarity times 20 (the scale of
the contrastive loss, MultipleNegativesRankingLoss); the teacher's is its standardised score
(core.teaching.standardise) divided by ``teach.temperature``. So both losses compare scores in
one unit whatever the teacher's own scale:

- ``listwise_kl``: KL(teacher softmax || student softmax) over each query's candidate list
  (sentence-transformers ``DistillKLDivLoss``; listwise distillation, Tamber et al. 2025);
- ``margin_mse``: the squared error between the student's and the teacher's margins, positive
  minus each other candidate (``MarginMSELoss``; Hofstätter et al. 2020).

With ``teach.contrastive_weight`` above 0, the contrastive loss over the query and its positive
(in-batch negatives only: the teacher's candidates are not treated as negatives) is added with
that weight; the embeddings are computed once for both.
"""

from __future__ import annotations

from typing import Any

from ballast.config import TeachConfig

STUDENT_SCALE = 20.0  # MultipleNegativesRankingLoss's default scale (sentence-transformers)


def scaled_cos(a: Any, b: Any) -> Any:
    """Row-wise cosine similarity times ``STUDENT_SCALE``."""
    from sentence_transformers.util import pairwise_cos_sim

    return pairwise_cos_sim(a, b) * STUDENT_SCALE


def distillation_loss(model: Any, teach: TeachConfig) -> Any:
    import torch
    from sentence_transformers.base.losses.merged_forward import embed_columns
    from sentence_transformers.sentence_transformer.losses import (
        DistillKLDivLoss,
        MarginMSELoss,
        MultipleNegativesRankingLoss,
    )

    if teach.loss == "listwise_kl":
        inner = DistillKLDivLoss(model, similarity_fct=scaled_cos, temperature=1.0)
    else:
        inner = MarginMSELoss(model, similarity_fct=scaled_cos)
    contrastive = (
        MultipleNegativesRankingLoss(model, scale=STUDENT_SCALE)
        if teach.contrastive_weight > 0
        else None
    )

    class Distillation(torch.nn.Module):
        def __init__(self) -> None:
            super().__init__()
            self.model = model
            self.inner, self.contrastive = inner, contrastive

        def forward(self, sentence_features: Any, labels: Any) -> Any:
            emb = embed_columns(self.model, sentence_features)
            target = labels.float() / teach.temperature
            out = {"distillation": self.inner.compute_loss_from_embeddings(emb, target)}
            if self.contrastive is not None:
                out["contrastive"] = teach.contrastive_weight * (
                    self.contrastive.compute_loss_from_embeddings(emb[:2], labels)
                )
            return out if len(out) > 1 else out["distillation"]

    return Distillation()
