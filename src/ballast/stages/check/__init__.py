"""Stage check (pre-flight): before the expensive stages, can the gate decide anything?

Every gated split needs ``gate.min_queries`` queries: with fewer the gate can only fail, so the
run stops here (exit 2) and says what to add; so does a safety net asked to score real dev
questions (``train.mix_queries = "real"``) where there are none. For each gated split it also
estimates the smallest gain the paired test could detect: from the base model's per-query
scores of the primary metric on that split (their standard deviation standing in for that of
the per-query differences, which training has not produced yet), at ``gate.alpha`` and 80%
power (core.stats.min_detectable_effect). Writes check.json; the report shows it.
"""

from __future__ import annotations

from typing import Any

from ballast.core.errors import StageError
from ballast.io.files import write_json
from ballast.stages.base import Run, Stage

POWER = 0.8


def check(run: Run) -> dict[str, Any]:
    from ballast.core.gate import preflight_problems

    cfg = run.cfg.gate
    splits = run.splits()
    counts = {s: len(splits["queries"].get(s, [])) for s in cfg.splits if s != "guard"}
    problems = preflight_problems(splits, run.cfg)
    result: dict[str, Any] = {
        "min_queries": cfg.min_queries,
        "alpha": cfg.alpha,
        "power": POWER,
        "metric": cfg.primary_metric,
        "splits": {s: {"queries": n} for s, n in counts.items()},
        "problems": problems,
    }
    if problems:
        write_json(run.path("check.json"), result)
        raise StageError("pre-flight: " + "; ".join(problems))
    for split, info in _detectable(run, counts).items():
        result["splits"][split] |= info
    write_json(run.path("check.json"), result)
    for split, info in result["splits"].items():
        run.progress.info(
            f"check: {split}: {info['queries']} queries, base {cfg.primary_metric} "
            f"{info['base_mean']:.4f}; the smallest gain it can detect is about "
            f"{info['min_detectable_gain']:+.4f}"
        )
    return {s: info["queries"] for s, info in result["splits"].items()}


def _detectable(run: Run, counts: dict[str, int]) -> dict[str, dict[str, float]]:
    """Per gated split: the base model's mean primary metric, its per-query standard
    deviation, and the minimum detectable gain."""
    import numpy as np

    from ballast.core.records import qrels_for
    from ballast.core.scoring import metric_values
    from ballast.core.stats import min_detectable_effect

    cfg = run.cfg.gate
    if not counts:
        return {}
    passages, queries, splits = run.passages(), run.queries(), run.splits()
    by_qid = {q["id"]: q for q in queries}
    qrels = qrels_for(queries)
    model = run.search_encoder()
    pids = [p["id"] for p in passages]
    p_emb = run.encode(model, run.base_fp, [p["text"] for p in passages],
                       "encoding passages (base)")  # fmt: skip
    out = {}
    for split in counts:
        qids = splits["queries"][split]
        q_emb = run.encode(model, run.base_fp, [by_qid[q]["text"] for q in qids],
                           f"encoding {split} queries (base)")  # fmt: skip
        values = metric_values(q_emb, p_emb, pids, [qrels[q] for q in qids], cfg.primary_metric)
        sd = float(np.std(values, ddof=1)) if len(values) > 1 else 0.0
        out[split] = {
            "base_mean": round(float(np.mean(values)), 6),
            "base_sd": round(sd, 6),
            "min_detectable_gain": round(
                min_detectable_effect(sd, len(values), alpha=cfg.alpha, power=POWER), 6
            ),
        }
    return out


STAGE = Stage(
    "check",
    check,
    keys=(
        "gate.splits",
        "gate.min_queries",
        "gate.primary_metric",
        "gate.alpha",
        "evaluate.batch_size",
        "evaluate.bf16",
        "evaluate.backend",
        "train.max_seq_length",
        "train.mix_queries",
    ),
    inputs=("passages.jsonl", "queries.jsonl", "splits.json"),
    outputs=("check.json",),
    base_model=True,
)
