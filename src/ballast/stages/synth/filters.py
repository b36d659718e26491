"""Filters that keep only good query-passage pairs: pure functions over queries.

Each filter returns the kept queries and the removed ones, each removed query carrying the
rule that removed it and why, so the stage can count them per rule and write them out.

The rule filters (length, chatter, example, copy, duplicate) judge model-written queries (origins
``llm`` and ``http``): inverse-cloze queries are copies of a sentence by design, and human
questions are never filtered. The round-trip filter (Dai et al., ICLR 2023: keep a generated
query only if a retriever finds its passage) judges every generated origin, never ``human``.
Thresholds are common practice; the defaults are in the config template.
"""

from __future__ import annotations

import re
from collections import Counter
from collections.abc import Iterable, Sequence

from ballast.core.records import relevant_ids
from ballast.core.text import copy_overlap, words

MODEL_ORIGINS = ("llm", "http")
RULES = ("length", "chatter", "example", "copy", "duplicate", "round_trip")

# An assistant talking instead of writing a query.
_CHATTER_START = re.compile(
    r"^\s*(?:(?:sure|certainly|of course|okay|ok|great|absolutely)\s*[,!.:]|"
    r"here(?:'s| is| are)\b|as an ai\b|sorry\b|unfortunately\b|(?:the )?answer\b|note\b|"
    r"(?:this|the|in this) (?:passage|text)\b|"
    r"i(?:'m| am) (?:sorry|happy|glad|unable|an ai)\b|"
    r"i (?:can(?:not|'t)?|could|will|would) (?:help|write|create|generate|provide|not|only)\b)",
    re.IGNORECASE,
)
# A query about the prompt rather than the content ("what does the passage say ...").
_META = re.compile(
    r"\b(?:the|this|above|given|following)\s+(?:passage|text|excerpt|paragraph|context)\b",
    re.IGNORECASE,
)
# A prompt label left in the output ("Question: ...", "Passage: ...").
_LABEL = re.compile(
    r"\b(?:passage|question|answer|query|search|problem|request)\s*:", re.IGNORECASE
)
_SENTENCE_END = re.compile(r"[.!?]\s+[A-Z]")


def chatter_reason(text: str) -> str | None:
    """Why ``text`` reads as an answer or chatter rather than a query, or None."""
    if _CHATTER_START.search(text):
        return "starts like a reply, not a query"
    if _LABEL.search(text):
        return "holds a prompt label"
    if _META.search(text):
        return "asks about the passage, not its content"
    ends = len(_SENTENCE_END.findall(text))
    if ends >= 2 or (ends == 1 and text.rstrip().endswith(".")):
        return "several sentences: an answer, not a query"
    return None


def _remove(q: dict, rule: str, why: str) -> dict:
    return {**q, "filter": {"rule": rule, "why": why}}


def rule_filter(
    queries: Iterable[dict],
    passages: dict[str, dict],
    *,
    min_words: int,
    max_words: int,
    max_copy_overlap: float,
    origins: Sequence[str] = MODEL_ORIGINS,
) -> tuple[list[dict], list[dict]]:
    """Length bounds, chatter, repeats of a prompt's worked example (``meta.example``, set by
    the generator), near-copies of the passage, duplicates; in that order, each query judged
    by the first rule it breaks. Queries of other origins pass untouched."""
    kept, removed = [], []
    seen: dict[str, str] = {}
    for q in queries:
        if q.get("origin") not in origins:
            kept.append(q)
            continue
        text = q["text"]
        n = len(words(text))
        if n < min_words or n > max_words:
            removed.append(_remove(q, "length", f"{n} words; allowed {min_words}..{max_words}"))
            continue
        why = chatter_reason(text)
        if why:
            removed.append(_remove(q, "chatter", why))
            continue
        if (q.get("meta") or {}).get("example"):
            removed.append(_remove(q, "example", "repeats a worked example of its prompt"))
            continue
        overlap = copy_overlap(text, passages[q["passage_id"]]["text"])
        if overlap > max_copy_overlap:
            removed.append(
                _remove(q, "copy", f"{overlap:.2f} of its word 3-grams are in the passage")
            )
            continue
        norm = " ".join(words(text))
        if norm in seen:
            removed.append(_remove(q, "duplicate", f"same text as {seen[norm]}"))
            continue
        seen[norm] = q["id"]
        kept.append(q)
    return kept, removed


def round_trip_filter(
    queries: Sequence[dict], ranked: Sequence[Sequence[str]], k: int
) -> tuple[list[dict], list[dict]]:
    """Keep a query if one of its relevant passages is among the first ``k`` of ``ranked``
    (the base model's ranking of the corpus for that query; Dai et al., ICLR 2023)."""
    if len(queries) != len(ranked):
        raise ValueError(f"{len(queries)} queries but {len(ranked)} rankings")
    kept, removed = [], []
    for q, ids in zip(queries, ranked, strict=True):
        relevant = set(relevant_ids(q))
        if not any(pid in relevant for pid in ids[:k]):
            removed.append(_remove(q, "round_trip", f"its passage is not in the base top {k}"))
        else:
            kept.append(q)
    return kept, removed


def counts(removed: Iterable[dict], rules: Iterable[str]) -> dict[str, int]:
    """Removed queries per rule, every rule listed (0 where it removed nothing)."""
    c = Counter(r["filter"]["rule"] for r in removed)
    return {rule: c.get(rule, 0) for rule in rules}
