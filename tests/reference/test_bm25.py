"""BM25 and reciprocal rank fusion (ballast.core.lexical) against the published formulas and a
second implementation.

- Robertson & Zaragoza (2009), "The Probabilistic Relevance Framework: BM25 and Beyond", eq.
  3.15: a term's weight tf / (k1 ((1 - b) + b dl/avdl) + tf) times its idf; Lucene's idf
  ln(1 + (N - n + 0.5) / (n + 0.5)). Worked by hand below.
- rank-bm25 0.2.2 (BM25Okapi): the same formula with the original idf ln((N - n + 0.5) / (n +
  0.5)) and the constant factor (k1 + 1), which R&Z note does not change the ranking; so on a
  corpus where every idf is positive its scores are exactly (k1 + 1) times ours.
- Cormack, Clarke & Büttcher (SIGIR 2009): RRF score = sum of 1 / (60 + rank).
"""

from __future__ import annotations

import math
import random

import numpy as np
import pytest
from rank_bm25 import BM25Okapi

from ballast.core.lexical import BM25, K1, RRF_K, B, bm25_rank, rrf, tokens


def test_worked_example_by_hand() -> None:
    docs = ["valve PR-7 leaks", "the valve is shut", "press the reset key", "PR-7 PR-7 manual"]
    index = BM25(docs)
    n_docs = 4
    lengths = [len(tokens(d)) for d in docs]  # "PR-7" is two tokens, pr and 7
    assert lengths == [4, 4, 4, 5]
    avdl = sum(lengths) / n_docs

    def weight(tf: int, dl: int, df: int) -> float:
        idf = math.log(1 + (n_docs - df + 0.5) / (df + 0.5))
        return idf * tf / (K1 * ((1 - B) + B * dl / avdl) + tf)

    got = index.scores("PR-7 valve")
    # doc 0: pr (tf 1, df 2), 7 (tf 1, df 2), valve (tf 1, df 2)
    assert got[0] == pytest.approx(3 * weight(1, 4, 2), rel=1e-12)
    # doc 1: valve only; doc 2: none; doc 3: pr and 7 twice each
    assert got[1] == pytest.approx(weight(1, 4, 2), rel=1e-12)
    assert got[2] == 0.0
    assert got[3] == pytest.approx(2 * weight(2, 5, 2), rel=1e-12)
    assert tokens("PR-7 Valve") == ["pr", "7", "valve"]


def test_matches_rank_bm25_up_to_its_constant_factor() -> None:
    rng = random.Random(3)
    vocab = [f"w{i}" for i in range(80)]
    docs = [" ".join(rng.choice(vocab) for _ in range(rng.randint(3, 20))) for _ in range(60)]
    ours = BM25(docs, method="robertson")
    ref = BM25Okapi([tokens(d) for d in docs], k1=K1, b=B)
    for _ in range(20):
        q = " ".join(rng.choice(vocab) for _ in range(4))
        df = {w: sum(w in tokens(d) for d in docs) for w in tokens(q)}
        assert all(n < len(docs) / 2 for n in df.values())  # every idf positive: no flooring
        np.testing.assert_allclose(ref.get_scores(tokens(q)), (K1 + 1) * ours.scores(q), rtol=1e-9)


def test_ranking_ties_by_id_and_skips_non_matching_passages() -> None:
    index = BM25(["alpha beta", "alpha beta", "gamma", "alpha"])
    ranked, scores = bm25_rank(index, ["alpha beta", "zeta", "gamma"], ["d9", "d1", "d5", "d3"], 3)
    assert ranked[0] == ["d1", "d9", "d3"]  # d1 and d9 tie: by id
    assert scores[0][0] == scores[0][1] > scores[0][2] > 0
    assert ranked[1] == [] and len(scores[1]) == 0  # no word known: nothing retrieved
    assert ranked[2] == ["d5"]


def test_reciprocal_rank_fusion_by_hand() -> None:
    fused, scores = rrf([[["a", "b", "c"]], [["c", "a"]]], 3)
    expect = {"a": 1 / (RRF_K + 1) + 1 / (RRF_K + 2), "b": 1 / (RRF_K + 2),
              "c": 1 / (RRF_K + 3) + 1 / (RRF_K + 1)}  # fmt: skip
    assert fused == [["a", "c", "b"]]
    np.testing.assert_allclose(scores[0], [expect["a"], expect["c"], expect["b"]])
