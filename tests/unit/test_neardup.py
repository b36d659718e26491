"""ballast.core.neardup and the bounded-memory leakage audit, checked against the plain computation:
Python sets of string shingles (``corpus.shingles``) compared pair by pair."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

from ballast import InputError
from ballast.core.neardup import (
    RarestFirst,
    ShingleHasher,
    prefix_lengths,
    shingle_sets,
    similar_pairs,
)
from ballast.core.splits import leakage_audit
from ballast.core.text import shingles
from ballast.io.files import read_jsonl, read_text

WORDS = "press rinse cold water batch dried storage tank cider mill label line".split()


def _texts(rng: np.random.Generator, n: int) -> list[str]:
    """Random short texts, many of them edited copies of earlier ones (near-duplicates)."""
    out: list[str] = []
    for _ in range(n):
        if out and rng.random() < 0.6:
            words = out[rng.integers(len(out))].split()
            for _ in range(rng.integers(0, 3)):  # replace, insert or drop a word
                k = int(rng.integers(len(words) + 1))
                op = rng.integers(3)
                if op == 0 and k < len(words):
                    words[k] = str(rng.choice(WORDS))
                elif op == 1:
                    words.insert(k, str(rng.choice(WORDS)))
                elif len(words) > 1:
                    words.pop(min(k, len(words) - 1))
        else:
            words = [str(w) for w in rng.choice(WORDS, size=int(rng.integers(0, 14)))]
        out.append(" ".join(w.upper() if rng.random() < 0.1 else w for w in words) + ".")
    return out


def _plain_audit(passages: list[dict], doc_split: dict[str, str], threshold: float, limit: int):
    """The audit as first written: every held-out x train pair, Python sets of strings."""
    sh = [shingles(p["text"]) for p in passages]
    pairs = []
    for i, p in enumerate(passages):
        if doc_split[p["doc_id"]] == "train":
            continue
        for j, q in enumerate(passages):
            if doc_split[q["doc_id"]] != "train":
                continue
            inter = len(sh[i] & sh[j])
            jac = inter / (len(sh[i]) + len(sh[j]) - inter)
            if jac >= threshold:
                split = doc_split[p["doc_id"]]
                pairs.append(
                    {
                        "held_out": p["id"],
                        "split": split,
                        "train": q["id"],
                        "jaccard": round(jac, 4),
                    }
                )
    pairs.sort(key=lambda x: (-x["jaccard"], x["held_out"], x["train"]))
    return {
        "threshold": threshold,
        "pairs_found": len(pairs),
        "pairs": pairs[:limit],
        "identical": sum(1 for x in pairs if x["jaccard"] >= 1.0),
    }


def test_hashed_sets_match_string_sets() -> None:
    texts = [*_texts(np.random.default_rng(0), 80), "", "one", "two words", "!!"]
    flat, offsets = ShingleHasher()(texts)
    sets = [set(flat[offsets[i] : offsets[i + 1]].tolist()) for i in range(len(texts))]
    for i, a in enumerate(texts):
        assert len(sets[i]) == len(shingles(a))
        for j, b in enumerate(texts):
            assert len(sets[i] & sets[j]) == len(shingles(a) & shingles(b))


def test_prefix_lengths() -> None:
    # s - ceil(t s) + 1: 10 tokens at t = 0.9 need 9 shared, so a 2-token prefix meets any match
    assert prefix_lengths(np.array([10, 1, 3]), 0.9).tolist() == [2, 1, 1]
    assert prefix_lengths(np.array([10]), 0.5).tolist() == [6]


def test_rarest_first_sorts_each_set_by_frequency() -> None:
    texts = ["a b c d", "a b c e", "a b c f", "x a b c"]  # "a b c" is in every set
    tok, offsets = shingle_sets(texts)
    common = ShingleHasher()(["a b c"])[0][0]
    assert [tok[offsets[i + 1] - 1] for i in range(4)] == [common] * 4  # last: the most common
    flat, _ = ShingleHasher()(texts)
    assert sorted(tok.tolist()) == sorted(flat.tolist())  # the same sets, reordered


@pytest.mark.parametrize("threshold", [0.3, 0.7, 0.9, 1.0])
@pytest.mark.parametrize("bits", [1, 22])  # 2 frequency buckets: a blurred order, same pairs
def test_similar_pairs_equal_all_pairs(threshold: float, bits: int) -> None:
    texts = _texts(np.random.default_rng(1), 120)
    flat, offsets = ShingleHasher()(texts)
    order = RarestFirst(bits)
    order.count(flat)
    tok = order.sort(flat, offsets)
    left, right = np.arange(0, 40), np.arange(40, 120)
    got = set()
    for i, j, inter, union in similar_pairs(tok, offsets, left, right, threshold, budget=7):
        got |= {
            (a, b, c / d) for a, b, c, d in zip(i.tolist(), j.tolist(), inter, union, strict=True)
        }
    want = set()
    for a in left.tolist():
        for b in right.tolist():
            sa, sb = shingles(texts[a]), shingles(texts[b])
            jac = len(sa & sb) / len(sa | sb)
            if jac >= threshold:
                want.add((a, b, jac))
    assert got == want and want  # and the data does hold near-duplicates


@pytest.mark.parametrize(("threshold", "limit"), [(0.5, 50), (0.8, 5), (1.0, 3)])
def test_leakage_audit_equals_the_plain_audit(threshold: float, limit: int) -> None:
    rng = np.random.default_rng(2)
    texts = _texts(rng, 150)
    docs = [f"d{int(rng.integers(40)):02d}" for _ in texts]
    split = {d: ("train", "test", "dev")[i % 3] for i, d in enumerate(sorted(set(docs)))}
    passages = [
        {"id": f"p{k:03d}", "doc_id": d, "text": t}
        for k, (t, d) in enumerate(zip(texts, docs, strict=True))
    ]
    want = _plain_audit(passages, split, threshold, limit)
    assert want["pairs_found"] > limit
    # small chunks: the streaming read and the batches are exercised too
    assert leakage_audit(iter(passages), split, threshold, limit, chunk=7) == want


def test_read_jsonl_streams_the_same_lines_as_a_whole_file_read(tmp_path: Path) -> None:
    p = tmp_path / "rows.jsonl"
    p.write_bytes('\ufeff{"a": 1}\r\n\n{"b": 2}\r{"c": "\u00e9"}\n\n{"d": 4}'.encode())
    plain = [  # the whole-file reading it replaced: read_text, then str.splitlines
        (n, json.loads(line))
        for n, line in enumerate(read_text(p).splitlines(), start=1)
        if line.strip()
    ]
    assert list(read_jsonl(p)) == plain == [
        (1, {"a": 1}), (3, {"b": 2}), (4, {"c": "\u00e9"}), (6, {"d": 4})
    ]  # fmt: skip
    p.write_bytes(b'{"a": 1}\n{"b": "\xff"}\n')
    with pytest.raises(InputError) as whole:
        read_text(p)
    with pytest.raises(InputError) as streamed:
        list(read_jsonl(p))
    assert str(streamed.value) == str(whole.value)  # same line (2) and byte offset (16)
    assert "offset 16" in str(whole.value) and streamed.value.line == 2
