"""ballast.core.splits: document-level splits, query assignment, TREC qrels, leakage audit.

Splitting by document, not by query, is common practice for retrieval test collections (no
passage of a held-out document is trained on). The qrels layout is TREC's, the trade's open
standard read by trec_eval: ``query_id iteration doc_id relevance``, iteration always 0.
"""

from __future__ import annotations

from collections import Counter

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from ballast import InputError
from ballast.config import SplitConfig
from ballast.core.records import qrels_for
from ballast.core.splits import (
    assign_documents,
    assign_queries,
    human_training_share,
    leakage_audit,
    training_query_ids,
)
from ballast.io.trec import format_qrels

DOCS = [f"doc-{i:03d}" for i in range(40)]


# ---------------------------------------------------------------- documents


def test_every_document_in_exactly_one_split() -> None:
    out = assign_documents(DOCS, SplitConfig(), seed=0)
    assert sorted(out) == DOCS
    assert set(out.values()) == {"train", "dev", "test"}
    # targets: test round(40 * 0.2) = 8, dev round(40 * 0.1) = 4, the rest train
    assert Counter(out.values()) == {"train": 28, "test": 8, "dev": 4}


def test_same_seed_same_split_other_seed_differs() -> None:
    cfg = SplitConfig()
    first = assign_documents(DOCS, cfg, seed=1)
    assert first == assign_documents(list(reversed(DOCS)), cfg, seed=1)  # input order is moot
    assert first != assign_documents(DOCS, cfg, seed=2)


def test_adding_documents_keeps_previous_assignments() -> None:
    cfg = SplitConfig()
    before = assign_documents(DOCS[:20], cfg, seed=0)
    after = assign_documents(DOCS, cfg, seed=0, previous=before)
    assert {d: after[d] for d in before} == before
    assert sorted(after) == DOCS
    assert Counter(after.values()) == {"train": 28, "test": 8, "dev": 4}


def test_previous_entries_for_removed_documents_are_dropped() -> None:
    previous = {"gone": "test", DOCS[0]: "dev", DOCS[1]: "bogus"}
    out = assign_documents(DOCS[:10], SplitConfig(), seed=0, previous=previous)
    assert "gone" not in out
    assert out[DOCS[0]] == "dev"
    assert out[DOCS[1]] in ("train", "dev", "test")


def test_too_few_documents() -> None:
    with pytest.raises(InputError, match="at least 3"):
        assign_documents(["a", "b"], SplitConfig(), seed=0)
    with pytest.raises(InputError, match="at least 2"):
        assign_documents(["a"], SplitConfig(dev_fraction=0.0), seed=0)
    assert sorted(assign_documents(["a", "b"], SplitConfig(dev_fraction=0.0), seed=0).values()) == [
        "test",
        "train",
    ]


@given(
    n=st.integers(3, 60),
    test=st.floats(0.05, 0.85),
    dev=st.floats(0.0, 0.5),
    seed=st.integers(0, 2**32 - 1),
)
@settings(max_examples=200, deadline=None)
def test_train_never_empty(n: int, test: float, dev: float, seed: int) -> None:
    if test + dev >= 0.99:
        dev = 0.0
    cfg = SplitConfig(test_fraction=test, dev_fraction=dev)
    counts = Counter(assign_documents([f"d{i}" for i in range(n)], cfg, seed).values())
    assert counts["train"] >= 1 and counts["test"] >= 1
    assert (counts["dev"] >= 1) == (dev > 0)
    assert sum(counts.values()) == n


def test_large_held_out_fractions_still_leave_a_train_document() -> None:
    out = assign_documents(["a", "b", "c"], SplitConfig(test_fraction=0.85, dev_fraction=0.1), 0)
    assert Counter(out.values()) == {"train": 1, "test": 1, "dev": 1}


# ---------------------------------------------------------------- queries and qrels

PASSAGES = {
    "p1": {"id": "p1", "doc_id": "a"},
    "p2": {"id": "p2", "doc_id": "b"},
    "p3": {"id": "p3", "doc_id": "c"},
}
DOC_SPLIT = {"a": "train", "b": "test", "c": "dev"}


def test_assign_queries() -> None:
    """Real questions follow the documents that answer them (common practice: split by
    document so that no document's text is on both sides)."""
    queries = [
        {"id": "q3", "passage_id": "p1", "origin": "ict"},
        {"id": "q1", "passage_id": "p1", "origin": "keywords"},
        {"id": "q2", "passage_id": "p2", "origin": "ict"},
        {"id": "q4", "passage_id": "p3", "origin": "ict"},
        {"id": "h1", "passage_id": "p1", "origin": "human"},  # answered in a training document
        {"id": "h0", "passage_id": "p2", "origin": "human"},  # in a held-out (test) document
        {"id": "h2", "passage_id": "p3", "origin": "human"},  # in a dev document
        # answered in a dev and a test document: dev (never gated) wins over held-out
        {"id": "h3", "passage_id": "p2", "origin": "human", "meta": {"relevant": ["p2", "p3"]}},
        # answered in a test and a training document: the model saw one answer's text
        {"id": "h4", "passage_id": "p2", "origin": "human", "meta": {"relevant": ["p2", "p1"]}},
    ]
    assert assign_queries(queries, PASSAGES, DOC_SPLIT) == {
        "train": ["q1", "q3"],
        "dev": ["q4"],
        "test": ["q2"],
        "human": ["h1", "h4"],
        "human_dev": ["h2", "h3"],
        "human_heldout": ["h0"],
    }


def test_judge_queries_never_train() -> None:
    """A judge generator's queries judge only held-out documents and never train (an
    independent synthetic judge: the model never saw queries of their kind)."""
    queries = [
        {"id": "j1", "passage_id": "p1", "origin": "headings"},  # a training document: aside
        {"id": "j2", "passage_id": "p2", "origin": "headings"},  # a test document: judges
        {"id": "j3", "passage_id": "p3", "origin": "headings"},  # a dev document: aside
        {"id": "q1", "passage_id": "p1", "origin": "ict"},
    ]
    got = assign_queries(queries, PASSAGES, DOC_SPLIT, {"headings"})
    assert got["judge"] == ["j2"] and got["train"] == ["q1"]
    assert not {"j1", "j3"} & {q for ids in got.values() for q in ids}
    assert "judge" not in assign_queries(queries[3:], PASSAGES, DOC_SPLIT)


def test_qrels_and_trec_format() -> None:
    queries = [
        {"id": "q2", "passage_id": "p2", "origin": "ict"},
        {"id": "h1", "passage_id": "p3", "origin": "human", "meta": {"relevant": ["p3", "p1"]}},
    ]
    qrels = qrels_for(queries)
    assert qrels == {"q2": {"p2": 1}, "h1": {"p3": 1, "p1": 1}}
    text = format_qrels(qrels)
    assert text == "h1 0 p1 1\nh1 0 p3 1\nq2 0 p2 1\n"
    for line in text.splitlines():  # four whitespace-separated columns, iteration 0
        qid, it, docid, rel = line.split()
        assert it == "0" and int(rel) >= 0


def test_format_qrels_keeps_grades() -> None:
    assert format_qrels({"q": {"b": 2, "a": 0}}) == "q 0 a 0\nq 0 b 2\n"


# ---------------------------------------------------------------- leakage audit

TEXT = "the press is rinsed with cold water after every batch and dried before storage"


def _passage(pid: str, doc: str, text: str) -> dict:
    return {"id": pid, "doc_id": doc, "text": text}


def test_leakage_audit_finds_identical_and_near_identical() -> None:
    near = TEXT.replace("storage", "the night")
    passages = [
        _passage("t1", "a", TEXT),
        _passage("t2", "a", "tanks are topped up weekly with fresh cider from the mill"),
        _passage("x1", "b", TEXT.upper()),  # identical once case and spacing are folded
        _passage("x2", "c", near),
        _passage("x3", "b", "labels are printed on the packaging line every morning"),
    ]
    out = leakage_audit(passages, DOC_SPLIT, threshold=0.7)
    # TEXT has 14 words -> 12 trigrams; near has 15 words -> 13 trigrams, 11 shared with TEXT:
    # Jaccard 11 / (12 + 13 - 11) = 11/14
    assert out["pairs"] == [
        {"held_out": "x1", "split": "test", "train": "t1", "jaccard": 1.0},
        {"held_out": "x2", "split": "dev", "train": "t1", "jaccard": round(11 / 14, 4)},
    ]
    assert (out["pairs_found"], out["identical"], out["threshold"]) == (2, 1, 0.7)
    assert leakage_audit(passages, DOC_SPLIT, threshold=0.8)["pairs_found"] == 1


def test_leakage_audit_ignores_pairs_within_train_and_within_held_out() -> None:
    passages = [
        _passage("t1", "a", TEXT),
        _passage("t2", "a", TEXT + " again"),
        _passage("x1", "b", "labels are printed on the packaging line every morning"),
        _passage("x2", "c", "labels are printed on the packaging line every morning"),
    ]
    out = leakage_audit(passages, DOC_SPLIT, threshold=0.5)
    assert out["pairs_found"] == 0 and out["pairs"] == [] and out["identical"] == 0


def test_leakage_audit_limit() -> None:
    passages = [_passage("t1", "a", TEXT)] + [_passage(f"x{i}", "b", TEXT) for i in range(5)]
    out = leakage_audit(passages, DOC_SPLIT, threshold=0.9, limit=2)
    assert out["pairs_found"] == 5 and out["identical"] == 5
    assert [p["held_out"] for p in out["pairs"]] == ["x0", "x1"]


# ---------------------------------------------------------------- real questions that train


def _human(n: int) -> tuple[list[dict], dict[str, list[str]]]:
    queries = [{"id": f"h{i:02d}", "passage_id": "p1", "origin": "human"} for i in range(n)]
    queries.append({"id": "q1", "passage_id": "p1", "origin": "ict"})
    return queries, assign_queries(queries, PASSAGES, DOC_SPLIT)


def test_a_share_of_the_real_questions_trains_and_the_rest_judges() -> None:
    """Common practice: a query that trains never judges (the share is split off the human
    split, seeded, and the rest judges)."""
    queries, split = _human(20)
    out = human_training_share(split, queries, PASSAGES, DOC_SPLIT, fraction=0.5, keep=5, seed=0)
    assert len(out["human_train"]) == 10 and len(out["human"]) == 10
    assert sorted(out["human"] + out["human_train"]) == split["human"]
    assert not set(out["human"]) & set(out["human_train"])
    assert out["train"] == ["q1"] and out["human_train"] == sorted(out["human_train"])
    again = human_training_share(split, queries, PASSAGES, DOC_SPLIT, fraction=0.5, keep=5,
                                 seed=0)  # fmt: skip
    other = human_training_share(split, queries, PASSAGES, DOC_SPLIT, fraction=0.5, keep=5,
                                 seed=1)  # fmt: skip
    assert again == out and other["human_train"] != out["human_train"]
    assert training_query_ids({"queries": out}) == ["q1", *out["human_train"]]


def test_the_human_split_keeps_gate_min_queries() -> None:
    queries, split = _human(12)
    whole = human_training_share(split, queries, PASSAGES, DOC_SPLIT, fraction=1.0, keep=5, seed=0)
    assert len(whole["human"]) == 5 and len(whole["human_train"]) == 7
    few = human_training_share(split, queries, PASSAGES, DOC_SPLIT, fraction=1.0, keep=12, seed=0)
    assert few["human_train"] == [] and few["human"] == split["human"]
    off = human_training_share(split, queries, PASSAGES, DOC_SPLIT, fraction=0.0, keep=0, seed=0)
    assert off == split  # the default leaves splits.json as it was


def test_only_questions_answered_wholly_in_training_documents_train() -> None:
    """A question also answered in a held-out document stays to judge: training on it would
    put a held-out document's question into training."""
    queries, _ = _human(0)
    queries += [
        {"id": "h1", "passage_id": "p1", "origin": "human"},
        {"id": "h2", "passage_id": "p1", "origin": "human", "meta": {"relevant": ["p1", "p2"]}},
        {"id": "h3", "passage_id": "p1", "origin": "human", "meta": {"relevant": ["p1", "p3"]}},
    ]
    split = assign_queries(queries, PASSAGES, DOC_SPLIT)
    assert split["human"] == ["h1", "h2", "h3"]
    out = human_training_share(split, queries, PASSAGES, DOC_SPLIT, fraction=1.0, keep=0, seed=0)
    assert out["human_train"] == ["h1"] and out["human"] == ["h2", "h3"]


def test_a_splits_file_from_before_human_train_still_reads() -> None:
    assert training_query_ids({"queries": {"train": ["a", "b"]}}) == ["a", "b"]
