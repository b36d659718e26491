"""ballast.stages.synth.filters: pure filters over generated queries.

Round-trip consistency as in Dai et al. (ICLR 2023): keep a generated query only if the
retriever ranks its passage within the top k. The n-gram overlap measure, the chatter patterns
and the thresholds are common practice; every expected value below is worked out by hand.
"""

from __future__ import annotations

import pytest

from ballast.stages.synth.filters import (
    RULES,
    chatter_reason,
    copy_overlap,
    counts,
    round_trip_filter,
    rule_filter,
)

PASSAGES = {
    "p1": {"id": "p1", "text": "The press hall is rinsed with cold water after every batch."},
    "p2": {"id": "p2", "text": "Forklift batteries are charged overnight in bay 3."},
}


def q(qid: str, text: str, pid: str = "p1", origin: str = "llm", **meta: object) -> dict:
    return {"id": qid, "text": text, "passage_id": pid, "origin": origin, "meta": dict(meta)}


def run_rules(queries: list[dict], **kw: object) -> tuple[list[dict], list[dict]]:
    args = {"min_words": 2, "max_words": 12, "max_copy_overlap": 0.75} | kw
    return rule_filter(queries, PASSAGES, **args)  # type: ignore[arg-type]


# ---------------------------------------------------------------- copy overlap


def test_copy_overlap_counts_shared_word_trigrams() -> None:
    # query trigrams: (how is the) (is the press) (the press hall) (press hall rinsed)
    # of these, only (the press hall) is a trigram of the passage
    assert copy_overlap("how is the press hall rinsed", PASSAGES["p1"]["text"]) == 1 / 4
    # a verbatim sentence: every trigram copied
    assert copy_overlap("The press hall is rinsed with cold water", PASSAGES["p1"]["text"]) == 1.0
    # punctuation and case do not matter
    assert copy_overlap("PRESS HALL, is rinsed!", PASSAGES["p1"]["text"]) == 1.0
    # (cold water temperature) is not in the passage; a two-word query uses bigrams
    assert copy_overlap("cold water temperature", PASSAGES["p1"]["text"]) == 0.0
    assert copy_overlap("cold water", PASSAGES["p1"]["text"]) == 1.0
    assert copy_overlap("water batch", PASSAGES["p1"]["text"]) == 0.0
    assert copy_overlap("", PASSAGES["p1"]["text"]) == 0.0


# ---------------------------------------------------------------- chatter


@pytest.mark.parametrize(
    ("text", "why"),
    [
        ("Sure! Here is a question: where are batteries charged?", "reply"),
        ("Here are three questions about the press", "reply"),
        ("I cannot write a question for this", "reply"),
        ("As an AI I think the hall is rinsed", "reply"),
        ("Okay, a question: where is bay 3?", "reply"),
        ("I'm sorry, the passage has no question", "reply"),
        ("I can write a question about batteries", "reply"),
        ("Question: where are batteries charged?", "label"),
        ("what does the passage say about batteries", "passage"),
        ("The hall is rinsed daily. It uses cold water.", "several sentences"),
    ],
)
def test_chatter_is_recognised(text: str, why: str) -> None:
    reason = chatter_reason(text)
    assert reason is not None and why in reason


@pytest.mark.parametrize(
    "text",
    [
        "where are the forklift batteries charged?",
        "forklift battery charging bay",
        "filler stopped with a red light. what now?",
        "Mr. Smith report on bay 3",
        "how do I rinse the press hall",
        "I can't start the pump after a clean",
        "I am getting error E4 on the press",
        "ok light keeps flashing on the filler",
        "surely the hall is rinsed daily?",
    ],
)
def test_queries_are_not_chatter(text: str) -> None:
    assert chatter_reason(text) is None


# ---------------------------------------------------------------- the rule filter


def test_each_rule_removes_and_says_why() -> None:
    queries = [
        q("a", "how is the press hall cleaned?"),
        q("b", "rinse"),  # 1 word
        q("c", " ".join(["word"] * 13)),  # 13 words
        q("d", "Sure, here is a question about rinsing"),
        q("e", "The press hall is rinsed with cold water after every batch."),  # verbatim
        q("f", "How is the press hall CLEANED"),  # duplicate of a (case, punctuation)
        q("g", "where do batteries get charged?", pid="p2"),
        q("h", "how long do we keep sample bottles?", example=True),
    ]
    kept, removed = run_rules(queries)
    assert [x["id"] for x in kept] == ["a", "g"]
    rules = {x["id"]: x["filter"]["rule"] for x in removed}
    assert rules == {
        "b": "length",
        "c": "length",
        "d": "chatter",
        "e": "copy",
        "f": "duplicate",
        "h": "example",
    }
    why = {x["id"]: x["filter"]["why"] for x in removed}
    assert why["b"] == "1 words; allowed 2..12"
    assert why["c"] == "13 words; allowed 2..12"
    assert why["e"] == "1.00 of its word 3-grams are in the passage"
    assert why["f"] == "same text as a"
    assert why["h"] == "repeats a worked example of its prompt"
    assert counts(removed, RULES) == {
        "length": 2,
        "chatter": 1,
        "example": 1,
        "copy": 1,
        "duplicate": 1,
        "round_trip": 0,
    }


def test_copy_threshold_is_a_strict_bound() -> None:
    # "how is the press hall rinsed" has overlap 1/4 (see above)
    text = "how is the press hall rinsed"
    assert [x["id"] for x in run_rules([q("a", text)], max_copy_overlap=0.25)[0]] == ["a"]
    assert run_rules([q("a", text)], max_copy_overlap=0.24)[0] == []


def test_rules_never_touch_human_or_extractive_queries() -> None:
    queries = [
        q("h", "rinse", origin="human"),
        q("i", "The press hall is rinsed with cold water after every batch.", origin="ict"),
        q("h2", "rinse", origin="human"),
        q("x", "rinse", origin="http"),
    ]
    kept, removed = run_rules(queries)
    assert [x["id"] for x in kept] == ["h", "i", "h2"]
    assert [(x["id"], x["filter"]["rule"]) for x in removed] == [("x", "length")]
    assert removed[0]["text"] == "rinse"  # the removed query keeps its fields


def test_duplicates_across_passages_and_origins_keep_the_first() -> None:
    queries = [
        q("a", "where are batteries charged", pid="p2", origin="llm"),
        q("b", "Where are batteries charged?", pid="p1", origin="http"),
    ]
    kept, removed = run_rules(queries)
    assert [x["id"] for x in kept] == ["a"]
    assert removed[0]["filter"] == {"rule": "duplicate", "why": "same text as a"}


# ---------------------------------------------------------------- round trip


def test_round_trip_keeps_queries_whose_passage_is_in_the_top_k() -> None:
    queries = [
        q("a", "x", pid="p1"),
        q("b", "y", pid="p2"),
        q("c", "z", pid="p3", relevant=["p3", "p9"]),  # any relevant passage counts
        q("d", "w", pid="p4", origin="ict"),
    ]
    ranked = [
        ["p1", "p2", "p3"],  # rank 1
        ["p1", "p3", "p2"],  # rank 3: out at k=2
        ["p5", "p9", "p3"],  # p9 at rank 2
        ["p5", "p6", "p7"],  # absent
    ]
    kept, removed = round_trip_filter(queries, ranked, 2)
    assert [x["id"] for x in kept] == ["a", "c"]
    assert [x["id"] for x in removed] == ["b", "d"]
    assert removed[0]["filter"] == {
        "rule": "round_trip",
        "why": "its passage is not in the base top 2",
    }
    assert [x["id"] for x in round_trip_filter(queries, ranked, 3)[0]] == ["a", "b", "c"]
    assert counts(removed, ["round_trip"]) == {"round_trip": 2}


def test_round_trip_needs_one_ranking_per_query() -> None:
    with pytest.raises(ValueError, match="2 queries but 1 rankings"):
        round_trip_filter([q("a", "x"), q("b", "y")], [["p1"]], 1)
