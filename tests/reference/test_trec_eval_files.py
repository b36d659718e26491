"""ballast.core.metrics on trec_eval's own published test files (usnistgov/trec_eval, test/).

Source: trec_eval's published test files, test/qrels.comment.test and
test/results.comment.test, copied byte for byte into data/trec_eval/ (see NOTICE.md there).

Expected values: trec_eval's Makefile `quicktest` target runs
    ./trec_eval test/qrels.comment.test test/results.comment.test | diff - test/out.test
so the published output for this pair of inputs is test/out.test; its values are quoted in
OUT_TEST below. trec_eval's published test files, test/out.comment.test, is also kept in
data/trec_eval/, but it is the output of a different, later run (runid "comment.test",
31 queries, 4463 relevant documents) whose inputs are not part of this copy;
test_out_comment_test_is_not_the_output_for_these_inputs pins that.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from pytest import approx

from ballast.core.metrics import (
    compute,
    map_at_k,
    mrr_at_k,
    ndcg_at_k,
    precision_at_k,
    recall_at_k,
)

DATA = Path(__file__).parent / "data" / "trec_eval"
QRELS_FILE = DATA / "qrels.comment.test"
RUN_FILE = DATA / "results.comment.test"
OUT_COMMENT_FILE = DATA / "out.comment.test"

# trec_eval prints 4 decimals (%.4f): the true value is within half a unit of the last digit
PRINTED = 5e-5
P_CUTOFFS = (5, 10, 15, 20, 30, 100, 200, 500, 1000)
# trec_eval evaluates the whole run for map and recip_rank; no query here ranks more than this
WHOLE_RUN = 1000

# trec_eval's published test files, test/out.test (usnistgov/trec_eval, commit
# 33dfa6d08953aa2613a23f00c93438e706f2a812): the expected output of
# `trec_eval test/qrels.comment.test test/results.comment.test` per trec_eval's Makefile.
# Only the measures ballast computes are quoted.
OUT_TEST = {
    "runid": "STANDARD",
    "num_q": "3",
    "num_ret": "1500",
    "num_rel": "561",
    "num_rel_ret": "131",
    "map": "0.1785",
    "recip_rank": "0.4064",
    "P_5": "0.2667",
    "P_10": "0.3000",
    "P_15": "0.3111",
    "P_20": "0.3667",
    "P_30": "0.3333",
    "P_100": "0.2467",
    "P_200": "0.1600",
    "P_500": "0.0873",
    "P_1000": "0.0437",
}


def _data_lines(path: Path) -> list[list[str]]:
    # trec_eval (get_qrels.c, get_trec_results.c) skips a line whose FIRST character is '#';
    # a '#' elsewhere is data (the qrels has the docno "CR93E-18#60"). Blank lines are skipped.
    return [
        line.split()
        for line in path.read_text(encoding="ascii").splitlines()
        if line.strip() and not line.startswith("#")
    ]


def _read_qrels(path: Path) -> dict[str, dict[str, int]]:
    """`qid iter docno rel` -> {qid: {docno: rel}}."""
    qrels: dict[str, dict[str, int]] = {}
    for fields in _data_lines(path):
        assert len(fields) == 4, fields
        qid, _iter, docno, rel = fields
        assert docno not in qrels.setdefault(qid, {}), (qid, docno)
        qrels[qid][docno] = int(rel)
    return qrels


def _read_run(path: Path) -> tuple[dict[str, dict[str, float]], set[str]]:
    """`qid Q0 docno rank score tag` -> ({qid: {docno: score}}, {tag}); the rank is ignored."""
    run: dict[str, dict[str, float]] = {}
    tags: set[str] = set()
    for fields in _data_lines(path):
        assert len(fields) == 6, fields
        qid, _q0, docno, _rank, score, tag = fields
        assert docno not in run.setdefault(qid, {}), (qid, docno)
        run[qid][docno] = float(score)
        tags.add(tag)
    return run, tags


def _read_trec_eval_output(path: Path) -> dict[str, str]:
    """trec_eval's summary output, `measure \\t all \\t value`, -> {measure: value}."""
    out: dict[str, str] = {}
    for line in path.read_text(encoding="ascii").splitlines():
        measure, scope, value = line.split("\t")
        assert scope == "all", line
        out[measure.strip()] = value
    return out


def _trec_order(scores: dict[str, float]) -> list[str]:
    # trec_eval ignores the rank column: score descending, ties by docno descending (strcmp)
    return [d for d, _ in sorted(scores.items(), key=lambda item: (item[1], item[0]), reverse=True)]


QRELS = _read_qrels(QRELS_FILE)
RUN, RUN_TAGS = _read_run(RUN_FILE)
# trec_eval averages over the queries that are in the run AND have judgements
QIDS = sorted(set(RUN) & set(QRELS))
RANKED = [_trec_order(RUN[q]) for q in QIDS]
QREL_LIST = [QRELS[q] for q in QIDS]


def _num_rel(rels: dict[str, int]) -> int:
    return sum(1 for g in rels.values() if g >= 1)


def test_files_parse_as_trec_eval_reads_them() -> None:
    assert len(QRELS_FILE.read_text(encoding="ascii")) == 75117
    assert len(RUN_FILE.read_text(encoding="ascii")) == 65596
    assert QIDS == ["301", "302", "303"]
    assert sorted(RUN) == sorted(QRELS) == QIDS
    # 3684 non-blank qrels lines, 3 of them comments; 1503 run lines, 3 of them comments
    assert sum(len(r) for r in QRELS.values()) == 3681
    assert sum(len(r) for r in RUN.values()) == 1500
    # a '#' inside a docno is not a comment
    assert QRELS["301"]["CR93E-18#60"] == 0
    assert RUN_TAGS == {OUT_TEST["runid"]}


def test_run_has_score_ties_so_the_tie_break_is_exercised() -> None:
    ties = sum(len(s) - len(set(s.values())) for s in (RUN[q] for q in QIDS))
    assert ties > 0
    # FBIS3-3586 and FBIS3-3622 share a score in 301: docno descending puts FBIS3-3622 first
    assert RUN["301"]["FBIS3-3586"] == RUN["301"]["FBIS3-3622"]
    order = RANKED[QIDS.index("301")]
    assert order.index("FBIS3-3622") + 1 == order.index("FBIS3-3586")


def test_counts_match_trec_eval() -> None:
    assert len(QIDS) == int(OUT_TEST["num_q"])
    assert sum(len(r) for r in RANKED) == int(OUT_TEST["num_ret"])
    num_rel = np.array([_num_rel(r) for r in QREL_LIST])
    assert num_rel.sum() == int(OUT_TEST["num_rel"])
    # num_rel_ret through ballast's recall: recall * num_rel is the relevant-retrieved count
    rel_ret = recall_at_k(RANKED, QREL_LIST, WHOLE_RUN) * num_rel
    assert np.allclose(rel_ret, np.round(rel_ret))
    assert int(np.round(rel_ret).sum()) == int(OUT_TEST["num_rel_ret"])
    # and counted directly
    pairs = zip(RANKED, QREL_LIST, strict=True)
    direct = sum(sum(1 for d in ids if rels.get(d, 0) >= 1) for ids, rels in pairs)
    assert direct == int(OUT_TEST["num_rel_ret"])


def test_map_matches_trec_eval() -> None:
    assert max(len(r) for r in RANKED) <= WHOLE_RUN
    got = map_at_k(RANKED, QREL_LIST, WHOLE_RUN).mean()
    assert got == approx(float(OUT_TEST["map"]), abs=PRINTED)


def test_recip_rank_matches_trec_eval() -> None:
    got = mrr_at_k(RANKED, QREL_LIST, WHOLE_RUN).mean()
    assert got == approx(float(OUT_TEST["recip_rank"]), abs=PRINTED)


@pytest.mark.parametrize("k", P_CUTOFFS)
def test_precision_matches_trec_eval(k: int) -> None:
    # P_500 and P_1000 exceed the 500 documents ranked per query: trec_eval still divides by k
    got = precision_at_k(RANKED, QREL_LIST, k).mean()
    assert got == approx(float(OUT_TEST[f"P_{k}"]), abs=PRINTED)


def test_compute_agrees_with_the_functions() -> None:
    specs = ["map@1000", "mrr@1000", *(f"precision@{k}" for k in P_CUTOFFS)]
    got = compute(specs, RANKED, QREL_LIST)
    assert got["map@1000"].mean() == approx(float(OUT_TEST["map"]), abs=PRINTED)
    assert got["mrr@1000"].mean() == approx(float(OUT_TEST["recip_rank"]), abs=PRINTED)
    for k in P_CUTOFFS:
        assert got[f"precision@{k}"].mean() == approx(float(OUT_TEST[f"P_{k}"]), abs=PRINTED)


def test_per_query_matches_pytrec_eval() -> None:
    pytrec_eval = pytest.importorskip("pytrec_eval")  # pytrec-eval-terrier: trec_eval's C code
    evaluator = pytrec_eval.RelevanceEvaluator(QRELS, {"ndcg_cut", "map", "P", "recip_rank"})
    ref = evaluator.evaluate(RUN)
    assert sorted(ref) == QIDS
    ours = {
        "ndcg_cut_10": ndcg_at_k(RANKED, QREL_LIST, 10),
        "map": map_at_k(RANKED, QREL_LIST, WHOLE_RUN),
        "P_10": precision_at_k(RANKED, QREL_LIST, 10),
        "recip_rank": mrr_at_k(RANKED, QREL_LIST, WHOLE_RUN),
    }
    for measure, values in ours.items():
        expected = [ref[q][measure] for q in QIDS]
        assert values.tolist() == approx(expected, abs=1e-9), measure


def test_out_comment_test_is_not_the_output_for_these_inputs() -> None:
    # trec_eval's published test files, test/out.comment.test: parsed, but it reports a
    # different run than results.comment.test (see the module docstring), so nothing above
    # is compared with it.
    out = _read_trec_eval_output(OUT_COMMENT_FILE)
    assert out["runid"] == "comment.test" != OUT_TEST["runid"]
    assert int(out["num_q"]) == 31 != len(QIDS)
    assert int(out["num_rel"]) == 4463 != sum(_num_rel(r) for r in QREL_LIST)
    assert int(out["num_ret"]) == 3100 != sum(len(r) for r in RANKED)
