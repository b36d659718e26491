"""ballast.synth: inverse-cloze and keyword queries, and the import of human questions.

ICT as in Lee, Chang & Toutanova (ACL 2019): the query is one sentence of its passage, removed
from the positive with some probability. Other expectations are common practice.
"""

from __future__ import annotations

import json
import re
from pathlib import Path

import numpy as np
import pytest

from ballast import InputError
from ballast.config import SynthConfig
from ballast.core.errors import ConfigError
from ballast.core.text import split_sentences
from ballast.stages.synth.dispatch import synthesize
from ballast.stages.synth.extractive import budget, ict_queries, keyword_queries
from ballast.stages.synth.human import import_questions

WORDS = (
    "apple press barrel yeast cellar bottle label orchard pallet valve filter sugar acid "
    "sample tank hose pump crate ledger intake wash mill pomace juice"
).split()


def make_passages(n: int, seed: int = 0, sentences: int = 4) -> list[dict]:
    rng = np.random.default_rng(seed)
    vocab = [w + tail for w in WORDS for tail in ("", "s", "ing", "er", "ed", "y", "ish", "ness")]
    out = []
    for i in range(n):
        sents = []
        for _ in range(sentences):
            words = rng.choice(vocab, size=int(rng.integers(6, 12))).tolist()
            sents.append(" ".join([words[0].capitalize(), *words[1:]]) + ".")
        out.append({"id": f"p{i:04d}", "doc_id": f"d{i // 3}", "text": " ".join(sents)})
    return out


# ---------------------------------------------------------------- ICT


def test_ict_queries_are_sentences_of_their_passage() -> None:
    passages = make_passages(50)
    by_id = {p["id"]: p for p in passages}
    queries = ict_queries(passages, SynthConfig(ict_per_passage=2), np.random.default_rng(0))
    assert len(queries) == 100
    assert len({q["id"] for q in queries}) == 100
    for q in queries:
        assert q["origin"] == "ict" and q["id"].startswith("ict-")
        assert q["text"] in split_sentences(by_id[q["passage_id"]]["text"])
        assert isinstance(q["meta"]["masked"], bool)
    for pid in by_id:  # two different sentences per passage
        texts = [q["text"] for q in queries if q["passage_id"] == pid]
        assert len(set(texts)) == 2


def test_ict_is_seeded() -> None:
    passages = make_passages(40)
    cfg = SynthConfig()
    first = ict_queries(passages, cfg, np.random.default_rng(5))
    assert first == ict_queries(passages, cfg, np.random.default_rng(5))
    other = ict_queries(passages, cfg, np.random.default_rng(6))
    assert [q["text"] for q in first] != [q["text"] for q in other]


@pytest.mark.parametrize("prob", [0.0, 0.3, 0.9, 1.0])
def test_ict_masked_frequency_follows_remove_prob(prob: float) -> None:
    passages = make_passages(2000, sentences=2)
    queries = ict_queries(passages, SynthConfig(ict_remove_prob=prob), np.random.default_rng(1))
    share = np.mean([q["meta"]["masked"] for q in queries])
    # binomial: 2000 draws, standard error <= 0.0112; allow ~3.5 standard errors
    assert share == pytest.approx(prob, abs=0.04)


def test_ict_skips_single_sentences_and_short_sentences() -> None:
    passages = [
        {"id": "one", "doc_id": "d", "text": "Only one sentence here with enough words."},
        {"id": "short", "doc_id": "d", "text": "Too short. Also short."},
        {"id": "mixed", "doc_id": "d", "text": "Tiny. This sentence is long enough to use."},
    ]
    queries = ict_queries(passages, SynthConfig(ict_per_passage=3), np.random.default_rng(0))
    assert [(q["passage_id"], q["text"]) for q in queries] == [
        ("mixed", "This sentence is long enough to use.")
    ]


# ---------------------------------------------------------------- keywords


def test_keyword_queries_use_terms_of_their_passage_in_order() -> None:
    passages = make_passages(60)
    cfg = SynthConfig(keywords_per_passage=2, keywords_min_terms=2, keywords_max_terms=4)
    queries = keyword_queries(passages, cfg, np.random.default_rng(0))
    by_id = {p["id"]: p for p in passages}
    assert queries and len({q["id"] for q in queries}) == len(queries)
    for q in queries:
        text = by_id[q["passage_id"]]["text"]
        terms = q["text"].split()
        assert q["origin"] == "keywords"
        assert 2 <= len(terms) <= 4
        assert len(set(t.lower() for t in terms)) == len(terms)
        starts = []
        for t in terms:
            m = re.search(rf"(?<![\w-]){re.escape(t)}(?![\w-])", text)
            assert m is not None, (t, text)  # the term, as written in the passage
            starts.append(m.start())
        assert starts == sorted(starts)


def test_keyword_queries_are_seeded_and_skip_stop_words() -> None:
    passages = make_passages(30)
    passages.append({"id": "stop", "doc_id": "z", "text": "It is what it is. And so on."})
    cfg = SynthConfig()
    first = keyword_queries(passages, cfg, np.random.default_rng(3))
    assert first == keyword_queries(passages, cfg, np.random.default_rng(3))
    assert "stop" not in {q["passage_id"] for q in first}
    assert keyword_queries([], cfg, np.random.default_rng(0)) == []


def test_synthesize_runs_each_generator() -> None:
    passages = make_passages(20)
    cfg = SynthConfig(generators=("ict", "keywords"))
    queries, stats = synthesize(passages, cfg, np.random.default_rng(0))
    assert stats == {"ict": 20, "keywords": 20}
    assert [q["origin"] for q in queries] == ["ict"] * 20 + ["keywords"] * 20
    assert (queries, stats) == synthesize(passages, cfg, np.random.default_rng(0))
    only, stats = synthesize(passages, SynthConfig(generators=("ict",)), np.random.default_rng(0))
    assert stats == {"ict": 20} and {q["origin"] for q in only} == {"ict"}


def test_budget_keeps_n_passages_in_order_chosen_by_id_and_seed() -> None:
    passages = make_passages(50)
    assert budget(passages, 0, 7) is passages and budget(passages, 50, 7) is passages
    chosen = budget(passages, 10, 7)
    assert len(chosen) == 10
    assert [p["id"] for p in chosen] == sorted(p["id"] for p in chosen)  # input order kept
    # The draw depends on ids and seed, not on the order of the input.
    shuffled = [passages[i] for i in np.random.default_rng(1).permutation(50)]
    assert {p["id"] for p in budget(shuffled, 10, 7)} == {p["id"] for p in chosen}
    assert {p["id"] for p in budget(passages, 10, 8)} != {p["id"] for p in chosen}
    # A larger budget keeps every passage a smaller one chose.
    assert {p["id"] for p in chosen} <= {p["id"] for p in budget(passages, 20, 7)}


def test_budget_is_validated() -> None:
    with pytest.raises(ConfigError, match="synth.max_passages"):
        SynthConfig(max_passages=-1)


# ---------------------------------------------------------------- human questions

PASSAGES = [
    {
        "id": "p-a1",
        "doc_id": "press.md",
        "text": "Check the hoses before milling. The press is rinsed with cold water "
        "after every batch.",
    },
    {
        "id": "p-a2",
        "doc_id": "press.md",
        "text": "Dry it with a clean cloth before storage. Log the rinse in the ledger.",
    },
    {"id": "p-b1", "doc_id": "cellar.md", "text": "Tanks are topped up weekly."},
]


def write_questions(tmp_path: Path, rows: list[dict | str]) -> Path:
    tmp_path.mkdir(parents=True, exist_ok=True)
    path = tmp_path / "questions.jsonl"
    path.write_text("".join((r if isinstance(r, str) else json.dumps(r)) + "\n" for r in rows))
    return path


def test_quote_locates_the_passage(tmp_path: Path) -> None:
    path = write_questions(
        tmp_path,
        [
            {"id": "h1", "text": "  how is the\npress cleaned ", "doc_id": "press.md",
             "quote": "RINSED with  cold water"},
            {"id": "h2", "text": "topping up", "passage_id": "p-b1"},
        ],
    )  # fmt: skip
    out = import_questions(path, PASSAGES)
    assert out == [
        {
            "id": "h1",
            "text": "how is the press cleaned",
            "passage_id": "p-a1",
            "origin": "human",
            "meta": {"relevant": ["p-a1"]},
        },
        {
            "id": "h2",
            "text": "topping up",
            "passage_id": "p-b1",
            "origin": "human",
            "meta": {"relevant": ["p-b1"]},
        },
    ]


def test_quote_crossing_a_chunk_edge_uses_longest_match(tmp_path: Path) -> None:
    # 42 of the quote's 49 characters lie in p-a1, the rest at the start of p-a2
    quote = "rinsed with cold water after every batch. Dry it"
    path = write_questions(
        tmp_path, [{"id": "h", "text": "q", "doc_id": "press.md", "quote": quote}]
    )
    assert import_questions(path, PASSAGES)[0]["passage_id"] == "p-a1"


def test_quote_in_two_overlapping_passages_lists_both(tmp_path: Path) -> None:
    passages = [
        *PASSAGES,
        {"id": "p-a3", "doc_id": "press.md", "text": "Log the rinse in the ledger."},
    ]
    path = write_questions(
        tmp_path, [{"id": "h", "text": "q", "doc_id": "press.md", "quote": "rinse in the ledger"}]
    )
    q = import_questions(path, passages)[0]
    assert q["meta"]["relevant"] == ["p-a2", "p-a3"]
    assert q["passage_id"] == "p-a2"


def _error(tmp_path: Path, rows: list[dict | str]) -> InputError:
    path = write_questions(tmp_path, rows)
    with pytest.raises(InputError) as info:
        import_questions(path, PASSAGES)
    assert info.value.path == str(path)
    return info.value


GOOD = {"id": "h0", "text": "fine", "doc_id": "press.md", "quote": "cold water"}


def test_unknown_doc_id(tmp_path: Path) -> None:
    err = _error(tmp_path, [GOOD, {"id": "h1", "text": "q", "doc_id": "nope.md", "quote": "x"}])
    assert (err.line, err.field) == (2, "doc_id")


def test_missing_quote(tmp_path: Path) -> None:
    err = _error(tmp_path, [GOOD, {"id": "h1", "text": "q", "doc_id": "press.md"}])
    assert (err.line, err.field) == (2, "quote")


def test_quote_not_found(tmp_path: Path) -> None:
    err = _error(
        tmp_path,
        [GOOD, "", {"id": "h1", "text": "q", "doc_id": "press.md", "quote": "sparkling wine"}],
    )
    assert (err.line, err.field) == (3, "quote")  # blank lines count


def test_quote_from_another_document_not_found(tmp_path: Path) -> None:
    err = _error(
        tmp_path, [{"id": "h1", "text": "q", "doc_id": "cellar.md", "quote": "cold water"}]
    )
    assert (err.line, err.field) == (1, "quote")


def test_duplicate_question_id(tmp_path: Path) -> None:
    err = _error(tmp_path, [GOOD, dict(GOOD, text="other"), dict(GOOD)])
    assert (err.line, err.field) == (2, "id")
    assert "line 1" in str(err)


def test_unknown_passage_id_and_missing_text(tmp_path: Path) -> None:
    err = _error(tmp_path / "a", [{"id": "h1", "text": "q", "passage_id": "p-zz"}])
    assert (err.line, err.field) == (1, "passage_id")
    err = _error(tmp_path / "b", [GOOD, {"id": "h1", "doc_id": "press.md", "quote": "x"}])
    assert (err.line, err.field) == (2, "text")


def test_malformed_questions_line(tmp_path: Path) -> None:
    err = _error(tmp_path, [GOOD, '{"id": "h1", '])
    assert err.line == 2


# ---------------------------------------------------------------- real questions as examples


def test_examples_are_chosen_by_seed_and_id_not_by_file_order() -> None:
    """set_aside_examples: n questions leave the judging list, each with its passage's text;
    the choice follows the seed and the ids (a seeded choice is common practice)."""
    from ballast.stages.synth.human import set_aside_examples

    passages = make_passages(12)
    human = [{"id": f"q{i}", "text": f"question {i}?", "passage_id": p["id"], "origin": "human"}
             for i, p in enumerate(passages)]  # fmt: skip
    stay, shown = set_aside_examples(human, passages, 4, seed=0)
    assert len(shown) == 4 and len(stay) == 8
    assert {q["id"] for q in stay} | {e["id"] for e in shown} == {q["id"] for q in human}
    assert [q["id"] for q in stay] == [q["id"] for q in human if q in stay]  # order kept
    text = {p["id"]: p["text"] for p in passages}
    assert all(e["passage"] == text[e["passage_id"]] for e in shown)
    _, reversed_shown = set_aside_examples(human[::-1], passages, 4, seed=0)
    assert reversed_shown == shown
    _, other = set_aside_examples(human, passages, 4, seed=1)
    assert {e["id"] for e in other} != {e["id"] for e in shown}
    assert set_aside_examples(human, passages, 0, seed=0) == (human, [])
    assert len(set_aside_examples(human, passages, 99, seed=0)[0]) == 0
