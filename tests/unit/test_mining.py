"""ballast.core.mining: positive-aware hard-negative mining (Moreira et al. 2024, "NV-Retriever:
Improving text embedding models with effective hard-negative mining": drop candidates scoring
above a fraction of the positive's score, or above the positive's score minus a margin), inside
a rank window of the base ranking; near-copies of the positive by word 3-gram Jaccard (the
shingling of Broder 1997, "On the resemblance and containment of documents"); and a second
opinion from a re-scorer (Sachan et al. 2022 for query likelihood; tested here with a fake)."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from ballast.config import MineConfig
from ballast.core.mining import (
    LazyShingles,
    jaccard,
    mine_one,
    sampling_order,
    screen,
    screen_queries,
    second_opinion,
    shingles,
    take,
)


def first_rule(i, s, positive, positive_score, doc_of, text_key, sh, cfg) -> str | None:
    """The rule that drops candidate i, straight from MineConfig's documentation."""
    if i == positive:
        return "positive"
    if text_key[i] == text_key[positive]:
        return "same_text"
    if cfg.near_duplicate > 0 and jaccard(sh[i], sh[positive]) >= cfg.near_duplicate:
        return "near_duplicate"
    if cfg.exclude_same_doc and doc_of[i] == doc_of[positive]:
        return "same_document"
    if cfg.max_score < 1.0 and s > cfg.max_score:
        return "above_max_score"
    if cfg.max_relative > 0 and s > cfg.max_relative * positive_score:
        return "above_relative_ceiling"
    if cfg.max_margin > 0 and s > positive_score - cfg.max_margin:
        return "above_margin_ceiling"
    return None


def oracle(ranked, scores, positive, positive_score, doc_of, text_key, sh, cfg) -> list[dict]:
    """The eligible candidates, in rank order."""
    out = []
    for rank, (i, s) in enumerate(zip(ranked, scores, strict=True)):
        if not cfg.window_start <= rank < cfg.window_end:
            continue
        if first_rule(i, s, positive, positive_score, doc_of, text_key, sh, cfg) is None:
            out.append({"index": i, "score": s, "rank": rank})
    return out


WORDS = ["press", "valve", "apple", "cider", "yeast", "tank", "seal", "pump"]


@st.composite
def cases(draw):
    n = draw(st.integers(1, 30))
    raw = draw(st.lists(st.integers(0, 20), min_size=n, max_size=n))
    scores_by_index = np.array(raw, dtype=np.float64) / 20  # round numbers: ties and equalities
    ranked = np.array(sorted(range(n), key=lambda i: (-scores_by_index[i], i)), dtype=np.int64)
    positive = draw(st.integers(0, n - 1))
    doc_of = [f"d{draw(st.integers(0, 3))}" for _ in range(n)]
    text_key = [f"t{draw(st.integers(0, n))}" for _ in range(n)]
    # texts from a small vocabulary, so word 3-gram overlaps of every size occur
    texts = [" ".join(draw(st.lists(st.sampled_from(WORDS), max_size=8))) for _ in range(n)]
    sh = [shingles(t) for t in texts]
    start = draw(st.integers(0, 10))
    cfg = MineConfig(
        negatives=draw(st.integers(0, 8)),
        window_start=start,
        window_end=draw(st.integers(start + 1, 35)),
        max_relative=draw(st.sampled_from([0.0, 0.5, 0.9, 0.95, 1.0])),
        max_margin=draw(st.sampled_from([0.0, 0.05, 0.1, 0.5])),
        max_score=draw(st.sampled_from([1.0, 0.9, 0.5, 0.0])),
        near_duplicate=draw(st.sampled_from([0.0, 0.3, 0.6, 1.0])),
        sample=draw(st.sampled_from(["random", "top"])),
        exclude_same_doc=draw(st.booleans()),
    )
    return (
        ranked,
        scores_by_index[ranked],
        positive,
        float(scores_by_index[positive]),
        doc_of,
        text_key,
        sh,
        cfg,
    )


def run(case, seed: int = 0):
    ranked, scores, positive, pos_score, doc_of, text_key, sh, cfg = case
    return mine_one(
        ranked,
        scores,
        positive,
        pos_score,
        doc_of=doc_of,
        text_key=text_key,
        shingles_of=sh,
        cfg=cfg,
        rng=np.random.default_rng(seed),
    )


@given(cases(), st.integers(0, 2**32 - 1))
@settings(max_examples=200, deadline=None)
def test_negatives_obey_every_rule(case, seed: int) -> None:
    ranked, scores, positive, pos_score, doc_of, text_key, sh, cfg = case
    chosen, dropped = run(case, seed)
    eligible = oracle(
        ranked.tolist(), scores.tolist(), positive, pos_score, doc_of, text_key, sh, cfg
    )
    assert len(chosen) == min(cfg.negatives, len(eligible))
    assert all(c in eligible for c in chosen)
    assert [c["rank"] for c in chosen] == sorted({c["rank"] for c in chosen})  # rank order, once
    for c in chosen:
        # never the positive nor a text-identical copy of it; every ceiling respected
        assert c["index"] != positive
        assert text_key[c["index"]] != text_key[positive]
        assert cfg.window_start <= c["rank"] < cfg.window_end
        if cfg.max_relative > 0:
            assert c["score"] <= cfg.max_relative * pos_score
        if cfg.max_margin > 0:
            assert c["score"] <= pos_score - cfg.max_margin
        if cfg.max_score < 1.0:
            assert c["score"] <= cfg.max_score
        if cfg.near_duplicate > 0:
            assert jaccard(sh[c["index"]], sh[positive]) < cfg.near_duplicate
        if cfg.exclude_same_doc:
            assert doc_of[c["index"]] != doc_of[positive]
    if cfg.sample == "top":
        assert chosen == eligible[: cfg.negatives]
    # every dropped candidate is inside the window's end and carries the first rule it broke
    for d in dropped:
        assert d["rank"] < cfg.window_end
        i = d["index"]
        assert d["rule"] == first_rule(
            i, d["score"], positive, pos_score, doc_of, text_key, sh, cfg
        )
        if d["rule"] == "near_duplicate":
            assert d["jaccard"] == round(jaccard(sh[i], sh[positive]), 4)
    # nothing is lost: each candidate up to the window's end is dropped, eligible or early
    ranks = {d["rank"] for d in dropped} | {c["rank"] for c in eligible}
    assert ranks | set(range(min(cfg.window_start, len(ranked)))) >= set(
        range(min(cfg.window_end, len(ranked)))
    )


@given(cases(), st.integers(0, 2**32 - 1))
@settings(max_examples=50, deadline=None)
def test_same_seed_same_negatives(case, seed: int) -> None:
    assert run(case, seed) == run(case, seed)


def _fixed(cfg: MineConfig):
    # ten candidates, scores 0.9, 0.8, ... 0.0; the positive is index 0 with score 1.0
    ranked = np.arange(1, 11)
    scores = np.array([0.9 - 0.1 * r for r in range(10)])
    doc_of = ["a"] + ["a", "b"] * 5
    text_key = [f"t{i}" for i in range(11)]
    sh = [frozenset({f"t{i}"}) for i in range(11)]
    return ranked, scores, 0, 1.0, doc_of, text_key, sh, cfg


def test_top_takes_the_best_eligible() -> None:
    cfg = MineConfig(negatives=3, window_start=1, window_end=30, max_relative=0.85, sample="top")
    chosen, dropped = run(_fixed(cfg))
    # rank 0 (score 0.9 > 0.85) is dropped; rank 1 and up are in the window
    assert [c["index"] for c in chosen] == [2, 3, 4]
    assert [(d["index"], d["rule"]) for d in dropped] == [(1, "above_relative_ceiling")]


def test_random_samples_within_the_window() -> None:
    cfg = MineConfig(negatives=2, window_start=2, window_end=6, max_relative=1.0, sample="random")
    seen = set()
    for seed in range(60):
        chosen, _ = run(_fixed(cfg), seed)
        ranks = [c["rank"] for c in chosen]
        assert len(ranks) == 2 and all(2 <= r < 6 for r in ranks) and ranks == sorted(ranks)
        seen.update(ranks)
    assert seen == {2, 3, 4, 5}  # not just the top of the window
    one = run(_fixed(cfg), 1)[0]
    assert any(run(_fixed(cfg), s)[0] != one for s in range(2, 10))


def test_window_end_stops_the_scan() -> None:
    cfg = MineConfig(negatives=10, window_start=0, window_end=3, max_relative=1.0, sample="top")
    chosen, dropped = run(_fixed(cfg))
    assert [c["rank"] for c in chosen] == [0, 1, 2] and dropped == []


def test_positive_and_same_text_are_dropped() -> None:
    ranked, scores, _, _, doc_of, text_key, sh, _ = _fixed(MineConfig())
    text_key = list(text_key)
    text_key[3] = text_key[1]  # index 3 copies the positive's (index 1's) text
    cfg = MineConfig(negatives=2, max_relative=1.0, sample="top")
    chosen, dropped = mine_one(
        ranked, scores, 1, 0.9, doc_of=doc_of, text_key=text_key, shingles_of=sh, cfg=cfg,
        rng=np.random.default_rng(0),
    )  # fmt: skip
    assert [(d["index"], d["rule"]) for d in dropped] == [(1, "positive"), (3, "same_text")]
    assert [c["index"] for c in chosen] == [2, 4]


@pytest.mark.parametrize("exclude", [False, True])
def test_exclude_same_doc(exclude: bool) -> None:
    cfg = MineConfig(negatives=3, max_relative=1.0, sample="top", exclude_same_doc=exclude)
    chosen, dropped = run(_fixed(cfg))
    # the positive (index 0) is in document 'a', as are odd indices 1, 3, 5, ...
    if exclude:
        assert [c["index"] for c in chosen] == [2, 4, 6]
        assert {d["rule"] for d in dropped} == {"same_document"}
    else:
        assert [c["index"] for c in chosen] == [1, 2, 3]
        assert dropped == []


def test_zero_negatives() -> None:
    chosen, _ = run(_fixed(MineConfig(negatives=0)))
    assert chosen == []


# ---------------------------------------------------------------- ceilings, one at a time


def _cfg(**kw) -> MineConfig:
    base = {"negatives": 10, "max_relative": 0.0, "near_duplicate": 0.0, "sample": "top"}
    return MineConfig(**(base | kw))


@pytest.mark.parametrize(
    ("kw", "rule", "dropped_ranks"),
    [
        # the positive scores 1.0; ranks 0..9 score 0.9, 0.8, ... 0.0 (common practice)
        ({"max_relative": 0.75}, "above_relative_ceiling", [0, 1]),  # > 0.75 * 1.0
        ({"max_margin": 0.25}, "above_margin_ceiling", [0, 1]),  # > 1.0 - 0.25
        ({"max_score": 0.55}, "above_max_score", [0, 1, 2, 3]),  # > 0.55
    ],
)
def test_each_ceiling_alone(kw: dict, rule: str, dropped_ranks: list[int]) -> None:
    chosen, dropped = run(_fixed(_cfg(**kw)))
    assert [(d["rank"], d["rule"]) for d in dropped] == [(r, rule) for r in dropped_ranks]
    assert [c["rank"] for c in chosen] == [r for r in range(10) if r not in dropped_ranks]


def test_ceilings_off_keep_everything() -> None:
    chosen, dropped = run(_fixed(_cfg()))  # 0, 0 and 1.0: every ceiling off
    assert dropped == [] and len(chosen) == 10


def test_relative_ceiling_scales_with_the_positive() -> None:
    ranked, scores, _, _, doc_of, text_key, sh, cfg = _fixed(_cfg(max_relative=0.5))
    for pos_score, n_dropped in [(1.3, 3), (0.9, 5), (1.7, 1)]:  # > 0.65, 0.45, 0.85
        _, dropped = mine_one(
            ranked, scores, 0, pos_score, doc_of=doc_of, text_key=text_key, shingles_of=sh,
            cfg=cfg, rng=np.random.default_rng(0),
        )  # fmt: skip
        assert len(dropped) == n_dropped, pos_score


def test_near_duplicate_needs_shingles() -> None:
    ranked, scores, pos, pos_score, doc_of, text_key, _, _ = _fixed(MineConfig())
    with pytest.raises(ValueError, match="shingles_of"):
        screen(ranked, scores, pos, pos_score, doc_of=doc_of, text_key=text_key, cfg=MineConfig())


# ---------------------------------------------------------------- shingles and near-copies


def test_shingles_ignore_case_and_punctuation() -> None:
    assert shingles("The press, is OFF.") == shingles("the press is off")
    assert shingles("The press is off") == {"the press is", "press is off"}
    assert shingles("two words") == {"two words"}
    assert jaccard(shingles("a b c d"), shingles("a b c e")) == 1 / 3  # {abc,bcd} vs {abc,bce}
    assert jaccard(frozenset(), frozenset()) == 1.0


def test_lazy_shingles_compute_on_demand() -> None:
    lazy = LazyShingles(["one two three", "x"])
    assert lazy[1] == shingles("x") and list(lazy._cache) == [1]
    assert lazy[0] == shingles("one two three")


def _vocab(rng: np.random.Generator, n: int = 3000) -> list[str]:
    letters = np.array(list("abcdefghijklmnopqrstuvwxyz"))
    return ["".join(rng.choice(letters, size=int(rng.integers(3, 9)))) for _ in range(n)]


def _near_copy(words: list[str], rng: np.random.Generator, vocab: list[str]) -> str:
    """The positive with 2-10% of its words substituted, deleted or inserted, and case or
    punctuation changed: a lightly edited copy (another version of the same paragraph)."""
    out = list(words)
    for _ in range(max(1, round(rng.uniform(0.02, 0.10) * len(words)))):
        op, j = int(rng.integers(3)), int(rng.integers(len(out)))
        if op == 0:
            out[j] = vocab[int(rng.integers(len(vocab)))]
        elif op == 1 and len(out) > 3:
            del out[j]
        else:
            out.insert(j, vocab[int(rng.integers(len(vocab)))])
    text = " ".join(out)
    return text.upper() if rng.random() < 0.3 else text.replace(" ", ", ", 3) + "."


def test_planted_near_duplicates_are_caught() -> None:
    """A toy corpus: per query a positive, a planted near-copy of it, a passage overlapping a
    third of it (like neighbouring chunks), and unrelated passages; every score sits under the
    ceilings, so only the text rules can catch the copy (≥ 95% asked; common practice)."""
    rng = np.random.default_rng(11)
    vocab = _vocab(rng)
    cfg = MineConfig(negatives=4, sample="top")  # defaults: near_duplicate 0.5, max_relative 0.95
    caught = overlap_dropped = 0
    trials = 300
    for _ in range(trials):
        words = [vocab[i] for i in rng.integers(len(vocab), size=int(rng.integers(30, 100)))]
        third = len(words) // 3
        texts = [
            " ".join(words),  # 0: the positive
            _near_copy(words, rng, vocab),  # 1: planted
            " ".join(words[-third:] + [vocab[i] for i in rng.integers(len(vocab), size=60)]),
            *(" ".join(vocab[i] for i in rng.integers(len(vocab), size=50)) for _ in range(5)),
        ]
        order = rng.permutation(np.arange(1, len(texts)))  # where the copy ranks varies
        scores = np.sort(rng.uniform(0.3, 0.9, size=len(order)))[::-1]  # all <= 0.95 * 1.0
        _, dropped = mine_one(
            order, scores, 0, 1.0, doc_of=["d"] * len(texts),
            text_key=[t.lower() for t in texts], shingles_of=[shingles(t) for t in texts],
            cfg=cfg, rng=rng,
        )  # fmt: skip
        rules = {d["index"]: d["rule"] for d in dropped}
        caught += rules.get(1) in ("near_duplicate", "same_text")
        overlap_dropped += 2 in rules
    assert caught / trials >= 0.95
    assert overlap_dropped == 0  # sharing a third of the text is not a copy


# ---------------------------------------------------------------- the second opinion


def _orders(n_queries: int, n_cands: int, rng: np.random.Generator) -> list[list[dict]]:
    out = []
    for qi in range(n_queries):
        eligible = [{"index": 100 * qi + r, "score": 0.5, "rank": r} for r in range(n_cands)]
        out.append(sampling_order(eligible, 2, "random", rng))
    return out


class FakeRescorer:
    """Rates a candidate by a fixed table; records what it was asked."""

    def __init__(self, table: dict[int, float]) -> None:
        self.table, self.calls = table, []

    def __call__(self, pairs: list[tuple[int, int]]) -> np.ndarray:
        self.calls.append(list(pairs))
        return np.array([self.table[pi] for _, pi in pairs])


@given(st.integers(0, 2**32 - 1), st.integers(0, 4), st.integers(0, 12))
@settings(max_examples=100, deadline=None)
def test_second_opinion_is_filter_then_sample(seed: int, negatives: int, n_cands: int) -> None:
    rng = np.random.default_rng(seed)
    orders = _orders(3, n_cands, rng)
    table = {c["index"]: float(rng.uniform()) for o in orders for c in o}
    pos = [0.8, 0.5, 0.1]
    fake = FakeRescorer(table)
    chosen, dropped, pairs = second_opinion(orders, negatives, fake, pos, 0.9)
    assert pairs == sum(len(c) for c in fake.calls)
    for qi, order in enumerate(orders):
        relevant = [c for c in order if table[c["index"]] >= 0.9 * pos[qi]]
        rest = [c for c in order if c not in relevant]
        # the same as dropping what the re-scorer judges relevant, then taking in order
        assert [c["index"] for c in chosen[qi]] == [c["index"] for c in take(rest, negatives)]
        assert all(d["rule"] == "rescorer" and d["rescore"] >= 0.9 * pos[qi] for d in dropped[qi])
        assert {d["index"] for d in dropped[qi]} <= {c["index"] for c in relevant}
        assert all(c["rescore"] < 0.9 * pos[qi] for c in chosen[qi])
    # it asks only as many as needed: no candidate after the last one taken
    asked = {pi for call in fake.calls for _, pi in call}
    for qi, order in enumerate(orders):
        mine = [c["index"] for c in order]
        if len(chosen[qi]) == negatives and mine:
            last = max(mine.index(c["index"]) for c in chosen[qi]) if negatives else -1
            assert not any(i in asked for i in mine[last + 1 :])


def test_second_opinion_batches_all_queries_per_round() -> None:
    orders = _orders(3, 5, np.random.default_rng(0))
    fake = FakeRescorer({c["index"]: 0.0 for o in orders for c in o})  # nothing relevant
    chosen, dropped, pairs = second_opinion(orders, 2, fake, [1.0] * 3, 0.95)
    assert len(fake.calls) == 1 and pairs == 6  # one call, two per query
    assert all(len(c) == 2 for c in chosen) and dropped == [[], [], []]


# ---------------------------------------------------------------- the audit sample


def test_audit_markdown_shows_texts_rules_and_is_seeded() -> None:
    from ballast.stages.mine import audit_markdown

    passages = {f"p{i}": {"id": f"p{i}", "text": f"passage {i} " + "word " * 100} for i in range(5)}
    near = {"id": "p1", "score": 0.88, "rank": 1, "rule": "near_duplicate", "jaccard": 0.8}
    rows, queries = [], []
    for k in range(30):
        rows.append(
            {
                "query_id": f"q{k}",
                "positive_id": "p0",
                "positive_score": 0.9,
                "negatives": [{"id": "p2", "score": 0.5, "rank": 3}],
                "dropped": [{"id": "p0", "score": 0.9, "rank": 0, "rule": "positive"}]
                + ([near] if k % 3 == 0 else []),
            }
        )
        queries.append({"id": f"q{k}", "text": f"question {k}", "origin": "ict"})
    counts = {"positive": 30, "near_duplicate": 10}
    md = audit_markdown(rows, queries, ["positive text"] * 30, passages, counts,
                        np.random.default_rng(0))  # fmt: skip
    assert md == audit_markdown(rows, queries, ["positive text"] * 30, passages, counts,
                                np.random.default_rng(0))  # fmt: skip
    assert md.count("## ") == 20
    assert "| near_duplicate | 10 |" in md and "**near_duplicate**" in md and "jaccard 0.8" in md
    # the ten queries with a telling drop are all shown
    assert all(f"query `q{k}`" in md for k in range(0, 30, 3))
    assert "passage 2 word" in md and "…" in md  # texts shown, shortened
    assert max(len(line) for line in md.splitlines()) < 400


# ---------------------------------------------------------------- the [mine] settings


@pytest.mark.parametrize(
    ("data", "key", "allowed"),
    [
        ({"max_relative": 1.5}, "mine.max_relative", "0 (off) or a number in (0, 1]"),
        ({"max_margin": -0.1}, "mine.max_margin", "[0.0, 2.0]"),
        ({"max_score": -1.0}, "mine.max_score", "(-1.0, 1.0]"),
        ({"near_duplicate": 1.2}, "mine.near_duplicate", "[0.0, 1.0]"),
        ({"rescorer": "bm25"}, "mine.rescorer", "'cross-encoder' or 'query-likelihood'"),
        ({"rescorer": "cross-encoder"}, "mine.rescorer_model", "a local model folder"),
        ({"rescorer_model": "m"}, "mine.rescorer", "when mine.rescorer_model is set"),
        ({"rescorer_threshold": 0.0}, "mine.rescorer_threshold", "(0.0, 10.0]"),
        ({"search": "annoy"}, "mine.search", "'auto', 'exact' or 'faiss'"),
        ({"faiss_above": 0}, "mine.faiss_above", "[1, 1000000000]"),
        ({"window_end": 0}, "mine.window_end", "[1, 10000]"),
    ],
)
def test_mine_settings_are_checked(data: dict, key: str, allowed: str) -> None:
    from ballast.config import build_config
    from ballast.core.errors import ConfigError

    with pytest.raises(ConfigError) as info:
        build_config({"mine": data})
    assert info.value.key == key and allowed in str(info.value)


def test_rescorer_model_resolves_against_the_config_file(tmp_path) -> None:
    from ballast.config import load_config

    path = tmp_path / "c.toml"
    path.write_text('[mine]\nrescorer = "cross-encoder"\nrescorer_model = "models/ce"\n')
    assert load_config(path).mine.rescorer_model == str(tmp_path / "models" / "ce")


def test_the_stage_loop_screens_each_query_and_draws_in_order() -> None:
    """screen_queries (the mine stage's loop, models left out) gives every query what screen and
    sampling_order give it alone, with one rng drawn from query after query; a passage judged
    relevant to a query (a human question naming several) is dropped as a positive, never taken
    as its negative (common practice: a judged-relevant passage is no negative)."""
    cfg = MineConfig(negatives=2, window_end=6, max_relative=0.0, sample="random")
    n = 8
    doc_of = [f"d{i}" for i in range(n)]
    text_key = [f"t{i}" for i in range(n)]
    sh = LazyShingles([f"passage number {i} about topic {i}" for i in range(n)])
    ranked = np.array(
        [[0, 1, 2, 3, 4, 5, 6, 7], [7, 6, 5, 4, 3, 2, 1, 0], [3, 1, 4, 0, 5, 2, 6, 7]]
    )
    scores = np.sort(np.random.default_rng(1).uniform(0.1, 0.9, (3, n)), axis=1)[:, ::-1]
    positives, pos_scores = [0, 7, 3], [0.95, 0.95, 0.95]
    relevant = [frozenset({0, 2}), frozenset({7}), frozenset({3})]
    orders, dropped = screen_queries(
        ranked, scores, positives, pos_scores, relevant,
        doc_of=doc_of, text_key=text_key, cfg=cfg, rng=np.random.default_rng(5), shingles_of=sh,
    )  # fmt: skip
    rng = np.random.default_rng(5)
    for qi in range(3):
        eligible, gone = screen(
            ranked[qi], scores[qi], positives[qi], pos_scores[qi], doc_of=doc_of,
            text_key=text_key, cfg=cfg, shingles_of=sh, also_relevant=relevant[qi],
        )  # fmt: skip
        assert orders[qi] == sampling_order(eligible, cfg.negatives, cfg.sample, rng)
        assert dropped[qi] == gone
    assert {d["index"]: d["rule"] for d in dropped[0]} == {0: "positive", 2: "positive"}
    assert 2 not in {c["index"] for c in take(orders[0], cfg.negatives)}
    assert all(len(take(o, cfg.negatives)) == 2 for o in orders)
