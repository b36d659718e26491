"""The trade's records, one definition each: which passages are relevant to a query, the qrels
of a query set, and the text a training pair's positive is."""

from __future__ import annotations


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
