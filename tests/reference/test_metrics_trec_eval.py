"""ballast.core.metrics against outside sources: trec_eval, Wikipedia's DCG example,
scikit-learn."""

from __future__ import annotations

from math import log2

import numpy as np
import pytest
from pytest import approx

from ballast.core.metrics import (
    hit_rate_at_k,
    map_at_k,
    mrr_at_k,
    ndcg_at_k,
    precision_at_k,
    recall_at_k,
)

pytrec_eval = pytest.importorskip(
    "pytrec_eval"
)  # package pytrec-eval-terrier: the trec_eval C code

N_QUERIES, RUN_LEN, POOL = 30, 40, 70


def _random_case(seed: int) -> tuple[dict, dict]:
    """A trec run with many score ties; graded qrels 0-3, some relevant docs never retrieved."""
    rng = np.random.default_rng(seed)
    run: dict[str, dict[str, float]] = {}
    qrel: dict[str, dict[str, int]] = {}
    for q in range(N_QUERIES):
        docs = [f"d{i:03d}" for i in rng.permutation(POOL)]
        retrieved, unretrieved = docs[:RUN_LEN], docs[RUN_LEN:]
        # 11 distinct values over 40 docs: ties are common
        scores = np.round(rng.uniform(0, 1, RUN_LEN), 1)
        run[f"q{q}"] = {d: float(s) for d, s in zip(retrieved, scores, strict=True)}
        judged = rng.choice(RUN_LEN, size=15, replace=False)
        # q0: nothing relevant retrieved
        grades = rng.integers(0, 4, size=15) if q else np.zeros(15, dtype=int)
        qrel[f"q{q}"] = {retrieved[j]: int(g) for j, g in zip(judged, grades, strict=True)}
        # every query has >= 1 relevant doc (pytrec_eval only reports judged queries),
        # and 1-3 relevant docs are never retrieved
        qrel[f"q{q}"].update(
            {d: int(rng.integers(1, 4)) for d in unretrieved[: int(rng.integers(1, 4))]}
        )
    return run, qrel


def _trec_order(scores: dict[str, float]) -> list[str]:
    # trec_eval breaks score ties by document id descending: sort by (score desc, docid desc)
    return [d for d, _ in sorted(scores.items(), key=lambda item: (item[1], item[0]), reverse=True)]


def _ballast_inputs(
    run: dict, qrel: dict
) -> tuple[list[str], list[list[str]], list[dict[str, int]]]:
    qids = sorted(run)
    return qids, [_trec_order(run[q]) for q in qids], [qrel[q] for q in qids]


@pytest.mark.parametrize("seed", [0, 1, 2, 3])
def test_against_trec_eval(seed: int) -> None:
    run, qrel = _random_case(seed)
    qids, ranked, qrels = _ballast_inputs(run, qrel)
    measures = {
        "recall.5,10",
        "P.5,10",
        "ndcg_cut.5,10",
        "map_cut.5,10",
        "recip_rank",
        "success.1,5,10",
    }
    trec = pytrec_eval.RelevanceEvaluator(qrel, measures).evaluate(run)
    assert sorted(trec) == qids
    assert (
        len({s for scores in run.values() for s in scores.values()}) <= 11
    )  # the run really has ties
    for k in (5, 10):
        checks = {
            f"recall_{k}": recall_at_k,  # trec_eval recall_k
            f"P_{k}": precision_at_k,  # trec_eval P_k
            f"ndcg_cut_{k}": ndcg_at_k,  # trec_eval ndcg_cut_k
            f"map_cut_{k}": map_at_k,  # trec_eval map_cut_k
            f"success_{k}": hit_rate_at_k,  # trec_eval success_k
        }
        for measure, fn in checks.items():
            expected = [trec[q][measure] for q in qids]
            assert fn(ranked, qrels, k).tolist() == approx(expected, abs=1e-9), measure
    # trec_eval recip_rank: cutoff longer than the run, so mrr@k is the uncut reciprocal rank
    assert mrr_at_k(ranked, qrels, 1000).tolist() == approx(
        [trec[q]["recip_rank"] for q in qids], abs=1e-9
    )
    assert hit_rate_at_k(ranked, qrels, 1).tolist() == approx(
        [trec[q]["success_1"] for q in qids], abs=1e-9
    )
    assert trec["q0"]["recip_rank"] == 0.0 and mrr_at_k(ranked[:1], qrels[:1], 1000)[0] == 0.0


@pytest.mark.parametrize("seed", [0, 5])
@pytest.mark.parametrize("k", [1, 3, 10])
def test_mrr_at_k_against_truncated_trec_eval(seed: int, k: int) -> None:
    run, qrel = _random_case(seed)
    qids, ranked, qrels = _ballast_inputs(run, qrel)
    # trec_eval recip_rank on the run truncated to its top k (in trec_eval's own order) is MRR@k
    truncated = {q: {d: run[q][d] for d in _trec_order(run[q])[:k]} for q in qids}
    trec = pytrec_eval.RelevanceEvaluator(qrel, {"recip_rank"}).evaluate(truncated)
    assert mrr_at_k(ranked, qrels, k).tolist() == approx(
        [trec[q]["recip_rank"] for q in qids], abs=1e-9
    )


def test_wikipedia_dcg_example() -> None:
    # Wikipedia, "Discounted cumulative gain", example: D1..D6 retrieved with grades
    # 3, 2, 3, 0, 1, 2, and two more known documents D7 (grade 3) and D8 (grade 2),
    # so the ideal order is 3, 3, 3, 2, 2, 2.
    # Wikipedia's example uses the linear-gain formula rel_i / log2(i + 1), as ballast does.
    ranked = [["D1", "D2", "D3", "D4", "D5", "D6"]]
    qrels = [{"D1": 3, "D2": 2, "D3": 3, "D4": 0, "D5": 1, "D6": 2, "D7": 3, "D8": 2}]
    dcg = 3 + 2 / log2(3) + 3 / log2(4) + 0 + 1 / log2(6) + 2 / log2(7)
    idcg = 3 + 3 / log2(3) + 3 / log2(4) + 2 / log2(5) + 2 / log2(6) + 2 / log2(7)
    assert dcg == approx(6.861, abs=1e-3) and idcg == approx(
        8.740, abs=1e-3
    )  # Wikipedia's DCG_6 and IDCG_6
    ndcg = ndcg_at_k(ranked, qrels, 6)[0]
    assert ndcg == approx(dcg / idcg, abs=1e-12)
    assert ndcg == approx(0.785, abs=1e-3)  # Wikipedia's nDCG_6


@pytest.mark.parametrize("seed", range(5))
def test_ndcg_against_sklearn(seed: int) -> None:
    from sklearn.metrics import ndcg_score

    rng = np.random.default_rng(seed)
    n_docs = 25
    y_true = rng.integers(0, 4, size=(8, n_docs))
    y_true[:, 0] = np.maximum(y_true[:, 0], 1)  # at least one relevant per query
    y_score = (
        rng.permutation(8 * n_docs).reshape(8, n_docs).astype(float)
    )  # distinct scores: no ties
    docs = [f"d{i}" for i in range(n_docs)]
    ranked = [[docs[j] for j in np.argsort(-row)] for row in y_score]
    qrels = [dict(zip(docs, map(int, row), strict=True)) for row in y_true]
    for k in (1, 5, 10, n_docs):
        ours = ndcg_at_k(ranked, qrels, k)
        # scikit-learn ndcg_score (linear gain, log2 discount) on one query at a time
        expected = [ndcg_score(y_true[i : i + 1], y_score[i : i + 1], k=k) for i in range(8)]
        assert ours.tolist() == approx(expected, abs=1e-9)
