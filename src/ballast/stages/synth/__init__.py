"""Stage synth: passages -> queries.jsonl (generated queries and imported questions)."""

from __future__ import annotations

from typing import Any

from ballast.io.files import write_jsonl
from ballast.stages.base import Run, Stage, file_fingerprint


def synth(run: Run) -> dict[str, Any]:
    from ballast.stages.synth.dispatch import synthesize
    from ballast.stages.synth.extractive import budget
    from ballast.stages.synth.filters import MODEL_ORIGINS, RULES, counts, rule_filter
    from ballast.stages.synth.human import import_questions, set_aside_examples

    cfg = run.cfg.synth
    passages = run.passages()
    chosen = budget(passages, cfg.max_passages, run.cfg.seed)
    # The questions are read first: a mistake in their file stops the stage before any model
    # writes; those shown to the query writer as examples are set aside (they never judge).
    human = import_questions(cfg.questions, passages) if cfg.questions else []
    human, examples = set_aside_examples(human, passages, cfg.question_examples, run.cfg.seed)
    examples_path = run.path("synth.examples.jsonl")
    queries, stats = synthesize(
        chosen, cfg, run.rng("synth"), cache_dir=run.path("cache", "synth"),
        progress=run.progress, examples=examples,
    )  # fmt: skip
    if cfg.max_passages:
        stats["passages"] = {"chosen": len(chosen), "of": len(passages)}
    # Filters judge generated queries only: human questions are added after them.
    removed_path = run.path("synth.removed.jsonl")
    if any(g in MODEL_ORIGINS for g in cfg.all_generators) or cfg.round_trip_k:
        by_id = {p["id"]: p for p in passages}
        queries, removed = rule_filter(
            queries,
            by_id,
            min_words=cfg.min_words,
            max_words=cfg.max_words,
            max_copy_overlap=cfg.copy_overlap,
        )
        if cfg.round_trip_k:
            queries, dropped = _round_trip(run, queries, passages)
            removed += dropped
        stats["removed"] = counts(removed, RULES if cfg.round_trip_k else RULES[:-1])
        write_jsonl(removed_path, removed)
    else:
        removed_path.unlink(missing_ok=True)
    if cfg.questions:
        stats["human"] = len(human)
        queries.extend(human)
    if examples:
        stats["question_examples"] = len(examples)
        write_jsonl(examples_path, examples)
    else:
        examples_path.unlink(missing_ok=True)
    write_jsonl(run.path("queries.jsonl"), queries)
    stats["total"] = len(queries)
    return stats


def _round_trip(run: Run, queries: list[dict], passages: list[dict]) -> tuple[list, list]:
    """Round-trip consistency (Dai et al., ICLR 2023): the base model ranks the corpus for
    each generated query; a query whose passage is not in the top k is dropped."""
    from ballast.core.search import top_k
    from ballast.stages.synth.filters import round_trip_filter

    if not queries or not passages:
        return queries, []
    model = run.search_encoder()
    ids = [p["id"] for p in passages]
    p_emb = run.encode(model, run.base_fp, [p["text"] for p in passages], "round-trip passages")
    q_emb = run.encode(model, run.base_fp, [q["text"] for q in queries], "round-trip queries")
    k = run.cfg.synth.round_trip_k
    idx, _ = top_k(q_emb, p_emb, k, ids)
    return round_trip_filter(queries, [[ids[i] for i in row] for row in idx], k)


def external_inputs(run: Run) -> dict[str, str]:
    """Fingerprints of what the synth stage reads from outside the run folder, so that
    `ballast run` reruns it when the questions file, a prompt file, the local model or the base
    model (for the round-trip filter) changes. Missing ones read "missing"; the stage says what
    is wrong."""
    from ballast.core.errors import BallastError
    from ballast.io.files import fingerprint_tree
    from ballast.stages.synth.prompts import prompts_dir

    cfg = run.cfg.synth
    out: dict[str, str] = {}
    if cfg.questions:
        out["questions"] = file_fingerprint(cfg.questions)
    if any(g in ("llm", "http") for g in cfg.all_generators):
        try:
            out["prompts"] = fingerprint_tree(prompts_dir(cfg.prompts))
        except BallastError:
            out["prompts"] = "missing"
    if "llm" in cfg.all_generators:
        from ballast.stages.synth.llm import LocalModel

        try:
            out["llm_model"] = LocalModel(cfg).fingerprint()
        except BallastError:
            out["llm_model"] = "missing"
    if cfg.round_trip_k:
        out["base_model"] = run.base_fp
    return out


STAGE = Stage(
    "synth",
    synth,
    keys=("synth", "seed", "evaluate.batch_size", "evaluate.bf16", "evaluate.backend",
          "train.max_seq_length"),
    inputs=("passages.jsonl",),
    outputs=("queries.jsonl",),
    external=external_inputs,
)
