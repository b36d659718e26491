"""ballast.core.search.top_k against a brute-force oracle: a full sort of every score by
(-score, id), the tie-break STYLE.md asks for (as sentence-transformers does). Embeddings hold
small integers, so every dot product is exact and ties are frequent. FAISS's exact
inner-product search (faiss.knn, the kernel behind IndexFlatIP) must give the same ranking."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from ballast.core.search import choose_engine, id_ranks, search, top_k, top_k_faiss


def brute_force(q: np.ndarray, c: np.ndarray, k: int, ids: list[str]) -> tuple[list, list]:
    scores = q @ c.T
    idx, sc = [], []
    for row in scores:
        order = sorted(range(len(ids)), key=lambda j: (-row[j], ids[j]))[:k]
        idx.append(order)
        sc.append([row[j] for j in order])
    return idx, sc


def data(seed: int, nq: int, n: int, dim: int = 3, hi: int = 2) -> tuple:
    rng = np.random.default_rng(seed)
    q = rng.integers(-hi, hi + 1, size=(nq, dim)).astype(np.float32)
    c = rng.integers(-hi, hi + 1, size=(n, dim)).astype(np.float32)
    ids = [f"p{int(x):05d}" for x in rng.permutation(10 * n)[:n]]  # ids not in row order
    return q, c, ids


@pytest.mark.parametrize("query_chunk", [1, 3, 256])
@pytest.mark.parametrize("corpus_chunk", [1, 2, 7, 50, 65536])
def test_equals_full_sort_for_every_chunk_size(query_chunk: int, corpus_chunk: int) -> None:
    q, c, ids = data(0, nq=9, n=50)
    want_idx, want_sc = brute_force(q, c, 10, ids)
    idx, sc = top_k(q, c, 10, ids, query_chunk=query_chunk, corpus_chunk=corpus_chunk)
    assert idx.shape == sc.shape == (9, 10)
    assert idx.tolist() == want_idx
    assert sc.tolist() == want_sc


@given(
    seed=st.integers(0, 10_000),
    nq=st.integers(1, 6),
    n=st.integers(1, 40),
    k=st.integers(1, 50),
    query_chunk=st.integers(1, 8),
    corpus_chunk=st.integers(1, 45),
)
@settings(max_examples=150, deadline=None)
def test_chunked_top_k_is_the_full_sort(
    seed: int, nq: int, n: int, k: int, query_chunk: int, corpus_chunk: int
) -> None:
    q, c, ids = data(seed, nq, n, dim=2, hi=1)  # few distinct scores: many ties
    want_idx, want_sc = brute_force(q, c, k, ids)
    idx, sc = top_k(q, c, k, ids, query_chunk=query_chunk, corpus_chunk=corpus_chunk)
    assert idx.tolist() == want_idx
    assert sc.tolist() == want_sc


def test_all_tied_scores_rank_by_id() -> None:
    c = np.ones((6, 2), dtype=np.float32)
    ids = ["f", "b", "e", "a", "d", "c"]
    idx, sc = top_k(np.ones((1, 2), dtype=np.float32), c, 4, ids, corpus_chunk=2)
    assert [ids[i] for i in idx[0]] == ["a", "b", "c", "d"]
    assert sc[0].tolist() == [2.0] * 4


def test_k_larger_than_corpus() -> None:
    q, c, ids = data(1, nq=2, n=5)
    idx, sc = top_k(q, c, 100, ids, corpus_chunk=2)
    assert idx.shape == (2, 5)
    assert [sorted(r) for r in idx.tolist()] == [list(range(5))] * 2
    assert idx.tolist() == brute_force(q, c, 5, ids)[0]


@pytest.mark.parametrize("k", [0, -1])
def test_k_below_one(k: int) -> None:
    q, c, ids = data(2, nq=1, n=3)
    with pytest.raises(ValueError, match="k must be >= 1"):
        top_k(q, c, k, ids)


def test_id_ranks() -> None:
    assert id_ranks(["c", "a", "b"]).tolist() == [2, 0, 1]


# ---------------------------------------------------------------- FAISS agrees with exact


@given(
    seed=st.integers(0, 10_000),
    nq=st.integers(1, 12),
    n=st.integers(1, 120),
    k=st.integers(1, 60),
    hi=st.sampled_from([1, 2, 30]),
)
@settings(max_examples=100, deadline=None)
def test_faiss_equals_exact_search(seed: int, nq: int, n: int, k: int, hi: int) -> None:
    q, c, ids = data(seed, nq, n, dim=4, hi=hi)  # hi=1: ties everywhere; hi=30: few ties
    want = top_k(q, c, k, ids, corpus_chunk=7)
    got = top_k_faiss(q, c, k, ids, query_chunk=4)
    assert got[0].tolist() == want[0].tolist()
    assert got[1].tolist() == want[1].tolist()


def test_faiss_on_unit_vectors_agrees_up_to_float_noise() -> None:
    rng = np.random.default_rng(3)
    c = rng.standard_normal((3000, 32)).astype(np.float32)
    c /= np.linalg.norm(c, axis=1, keepdims=True)
    q = c[rng.integers(0, 3000, size=25)] + 0.1 * rng.standard_normal((25, 32)).astype(np.float32)
    ids = [f"p{i:05d}" for i in range(3000)]
    ei, es = top_k(q, c, 30, ids, corpus_chunk=1000)
    fi, fs = top_k_faiss(q, c, 30, ids)
    np.testing.assert_allclose(fs, es, atol=1e-5)
    # ranks may swap only between scores closer than float noise
    for r in range(25):
        for j in np.flatnonzero(ei[r] != fi[r]):
            assert abs(float(es[r, j]) - float(fs[r, j])) < 1e-5


def test_faiss_refetches_ties_past_what_it_fetched() -> None:
    c = np.ones((200, 2), dtype=np.float32)  # all tied: faiss alone cannot know the id order
    ids = [f"p{i:03d}" for i in np.random.default_rng(0).permutation(200)]
    idx, _ = top_k_faiss(np.ones((2, 2), dtype=np.float32), c, 5, ids)
    assert [ids[i] for i in idx[0]] == ["p000", "p001", "p002", "p003", "p004"]


def test_faiss_k_larger_than_corpus_and_k_below_one() -> None:
    q, c, ids = data(1, nq=2, n=5)
    assert top_k_faiss(q, c, 100, ids)[0].tolist() == top_k(q, c, 100, ids)[0].tolist()
    with pytest.raises(ValueError, match="k must be >= 1"):
        top_k_faiss(q, c, 0, ids)


def test_engine_is_chosen_by_size() -> None:
    assert choose_engine(10, "auto", faiss_above=11) == "exact"
    assert choose_engine(11, "auto", faiss_above=11) == "faiss"
    assert choose_engine(10**6, "exact") == "exact"
    assert choose_engine(1, "faiss") == "faiss"
    with pytest.raises(ValueError, match="unknown search method"):
        choose_engine(1, "annoy")


def test_search_reports_the_engine_and_agrees() -> None:
    q, c, ids = data(4, nq=5, n=60)
    a = search(q, c, 10, ids, method="auto", faiss_above=61)
    b = search(q, c, 10, ids, method="auto", faiss_above=60)
    assert (a[2], b[2]) == ("exact", "faiss")
    assert a[0].tolist() == b[0].tolist() and a[1].tolist() == b[1].tolist()
