"""The trade's records, one definition each: which passages are relevant to a query, the qrels
of a query set, the text a training pair's positive is, and one row of a metric comparison as
metrics.json holds it (read the same way by the terminal table, the report and the manifest)."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any


def relevant_ids(query: dict) -> list[str]:
    """The passages that answer ``query``: ``meta.relevant`` when a question names several (a
    human question whose quote occurs in more than one passage), else its own passage."""
    return list((query.get("meta") or {}).get("relevant") or [query["passage_id"]])


def qrels_for(queries: list[dict]) -> dict[str, dict[str, int]]:
    """Binary TREC-style judgements: every relevant passage of each query at grade 1."""
    return {q["id"]: {pid: 1 for pid in relevant_ids(q)} for q in queries}


def training_positive(query: dict, passage: dict) -> str:
    """The positive text a pair trains on: for a masked inverse-cloze query, the passage
    without the query sentence."""
    text = passage["text"]
    if query.get("meta", {}).get("masked"):
        text = " ".join(text.replace(query["text"], " ", 1).split())
    return text


@dataclass(frozen=True)
class MetricRow:
    """One metric of one split: both models' means and the paired comparison (None where
    metrics.json has no value)."""

    metric: str
    base: float | None
    tuned: float | None
    diff: float | None = None
    ci_low: float | None = None
    ci_high: float | None = None
    p_value: float | None = None
    wins: int | None = None
    losses: int | None = None
    ties: int | None = None

    @property
    def compared(self) -> bool:
        return self.diff is not None


def metric_rows(
    split: dict[str, Any], metrics: list[str], *, model: str = "tuned", baseline: str = "base"
) -> list[MetricRow]:
    """The rows of one split of metrics.json (``splits[name]``) for ``model`` against
    ``baseline``, in the order of ``metrics``."""
    comp = split.get("comparisons", {}).get(f"{model}_vs_{baseline}", {})
    models = split.get("models", {})
    rows = []
    for m in metrics:
        c = comp.get(m, {})
        rows.append(
            MetricRow(
                m,
                models.get(baseline, {}).get(m, {}).get("mean"),
                models.get(model, {}).get(m, {}).get("mean"),
                c.get("mean_diff"),
                c.get("ci_low"),
                c.get("ci_high"),
                c.get("p_value"),
                c.get("wins"),
                c.get("losses"),
                c.get("ties"),
            )
        )
    return rows
