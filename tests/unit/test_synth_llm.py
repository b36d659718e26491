"""The local generator on a tiny causal model built here (random weights, a word-level
tokenizer): loading a folder, batching, seeded sampling, caching, and the refusals.

What the tiny model writes is noise; the checks are about the machinery (common practice):
a sample depends on its seed only, not on its batch, and a cached sample is not regenerated.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

from ballast import InputError
from ballast.config import SynthConfig
from ballast.stages.synth.generate import model_queries
from ballast.stages.synth.llm import LocalModel

WORDS = (
    "how where when what is the a press hall tank batteries charged rinsed label printer".split()
)
PASSAGES = [
    {"id": "p1", "doc_id": "d", "text": "The press hall is rinsed after every batch."},
    {"id": "p2", "doc_id": "d", "text": "Batteries are charged in bay 3."},
    {"id": "p3", "doc_id": "d", "text": "The label printer needs a new ribbon."},
]


@pytest.fixture(scope="module")
def tiny_model(tmp_path_factory: pytest.TempPathFactory) -> Path:
    import torch
    from tokenizers import Tokenizer
    from tokenizers.models import WordLevel
    from tokenizers.pre_tokenizers import Whitespace
    from transformers import GPT2Config, GPT2LMHeadModel, PreTrainedTokenizerFast

    folder = tmp_path_factory.mktemp("tiny-lm")
    vocab = {w: i for i, w in enumerate(["<pad>", "<unk>", "<eos>", *WORDS])}
    tok = Tokenizer(WordLevel(vocab, unk_token="<unk>"))
    tok.pre_tokenizer = Whitespace()
    fast = PreTrainedTokenizerFast(
        tokenizer_object=tok, pad_token="<pad>", unk_token="<unk>", eos_token="<eos>"
    )
    fast.save_pretrained(folder)
    torch.manual_seed(0)  # the fixture's own weights; ballast's code never seeds globally
    cfg = GPT2Config(
        vocab_size=len(vocab), n_positions=512, n_embd=16, n_layer=1, n_head=2,
        bos_token_id=2, eos_token_id=2, pad_token_id=0,
    )  # fmt: skip
    GPT2LMHeadModel(cfg).save_pretrained(folder, safe_serialization=True)
    return folder


def cfg(model: Path, **kw: object) -> SynthConfig:
    base = {
        "generators": ("llm",),
        "llm_model": str(model),
        "llm_max_new_tokens": 6,
        "llm_per_passage": 2,
        "styles": ("question", "keywords"),
    }
    return SynthConfig(**(base | kw))  # type: ignore[arg-type]


def generate(model: Path, cache: Path, **kw: object) -> tuple[list[dict], LocalModel]:
    c = cfg(model, **kw)
    backend = LocalModel(c)
    out = model_queries(backend, PASSAGES, c, np.random.default_rng(0), cache)
    return out, backend


def raw_texts(cache: Path) -> dict[str, str]:
    rows = [json.loads(x) for f in cache.glob("llm-*.jsonl") for x in f.read_text().splitlines()]
    return {r["key"]: r["raw"] for r in rows}


def test_folder_model_writes_seeded_queries_independent_of_batching(
    tiny_model: Path, tmp_path: Path
) -> None:
    one, _ = generate(tiny_model, tmp_path / "a", llm_batch_size=1)
    many, _ = generate(tiny_model, tmp_path / "b", llm_batch_size=6)
    assert len(one) == 6 and {q["origin"] for q in one} == {"llm"}
    assert [q["id"] for q in one] == [q["id"] for q in many]
    assert raw_texts(tmp_path / "a") == raw_texts(tmp_path / "b")
    texts = set(raw_texts(tmp_path / "a").values())
    assert len(texts) > 1  # sampled, not one fixed answer


def test_greedy_and_sampled_differ(tiny_model: Path, tmp_path: Path) -> None:
    greedy, _ = generate(tiny_model, tmp_path / "g", llm_temperature=0.0)
    sampled, _ = generate(tiny_model, tmp_path / "s", llm_temperature=1.0)
    assert [q["text"] for q in greedy] != [q["text"] for q in sampled]


def test_cached_samples_are_not_regenerated(tiny_model: Path, tmp_path: Path) -> None:
    first, backend = generate(tiny_model, tmp_path / "c")
    assert backend._loaded is not None
    again, backend = generate(tiny_model, tmp_path / "c")
    assert again == first
    assert backend._loaded is None  # every answer came from the cache: the model never loaded


def test_refusals(tiny_model: Path, tmp_path: Path) -> None:
    with pytest.raises(InputError, match="never downloads"):
        LocalModel(cfg(tmp_path / "absent")).fingerprint()
    with pytest.raises(InputError, match="unknown packaged model"):
        LocalModel(cfg(Path("."), llm_model="packaged:nope")).fingerprint()
    remote = tmp_path / "remote"
    remote.mkdir()
    for f in tiny_model.iterdir():
        (remote / f.name).write_bytes(f.read_bytes())
    conf = json.loads((remote / "config.json").read_text())
    (remote / "config.json").write_text(json.dumps(conf | {"auto_map": {"AutoModel": "x.Y"}}))
    with pytest.raises(InputError, match="remote code"):
        LocalModel(cfg(remote)).fingerprint()
    pickled = tmp_path / "pickled"
    pickled.mkdir()
    (pickled / "pytorch_model.bin").write_bytes(b"not really")
    with pytest.raises(InputError, match="pickle"):
        LocalModel(cfg(pickled)).fingerprint()
