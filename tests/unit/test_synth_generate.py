"""The parts of model-written query synthesis that need no model: prompt files, the work
plan, the generation cache, cleaning answers, and the seeded sampler.

The Gumbel-max trick (Gumbel 1954; Maddison, Tarlow & Minka, NeurIPS 2014): the arg-max of
logits plus independent Gumbel(0, 1) noise is a draw from the softmax of the logits. The rest
is common practice (few-shot prompts, append-only caches).
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

from ballast import ConfigError
from ballast.config import SynthConfig
from ballast.stages.synth.cache import GenerationCache, entry_key
from ballast.stages.synth.generate import clean_query, item_seed, plan
from ballast.stages.synth.prompts import default_prompts_dir, load_template, load_templates

PASSAGES = [
    {"id": f"p{i}", "doc_id": "d", "text": f"Passage number {i} about the press hall."}
    for i in range(40)
]


def write_prompt(folder: Path, name: str, body: str) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / f"{name}.toml"
    path.write_text(body, encoding="utf-8")
    return path


GOOD = """style = "q"
instruction = "Write a question."
passage_label = "Passage"
query_label = "Question"
[[examples]]
passage = "Crates are stacked five high."
query = "how high can crates be stacked?"
"""


# ---------------------------------------------------------------- prompt files


def test_shipped_prompts_load_for_every_default_style() -> None:
    templates = load_templates("", SynthConfig().styles)
    assert set(templates) == {"question", "keywords", "troubleshooting"}
    for t in templates.values():
        assert len(t.examples) >= 2 and t.instruction and t.query_label
    assert default_prompts_dir().is_dir()


def test_completion_and_chat_renderings(tmp_path: Path) -> None:
    t = load_template(write_prompt(tmp_path, "q", GOOD))
    assert t.completion("Tanks are  topped\nup weekly.") == (
        "Write a question.\n\n"
        "Passage: Crates are stacked five high.\n"
        "Question: how high can crates be stacked?\n\n"
        "Passage: Tanks are topped up weekly.\n"
        "Question:"
    )
    assert t.messages("Tanks are topped up weekly.") == [
        {"role": "system", "content": "Write a question."},
        {"role": "user", "content": "Passage: Crates are stacked five high."},
        {"role": "assistant", "content": "how high can crates be stacked?"},
        {"role": "user", "content": "Passage: Tanks are topped up weekly."},
    ]


def test_template_hash_ignores_comments_but_not_content(tmp_path: Path) -> None:
    a = load_template(write_prompt(tmp_path / "a", "q", GOOD))
    b = load_template(write_prompt(tmp_path / "b", "q", "# a comment\n" + GOOD))
    c = load_template(write_prompt(tmp_path / "c", "q", GOOD.replace("five", "six")))
    assert a.hash == b.hash != c.hash


@pytest.mark.parametrize(
    ("body", "key"),
    [
        (GOOD.replace('style = "q"', 'style = "other"'), "style"),
        (GOOD.replace('instruction = "Write a question."', 'instruction = ""'), "instruction"),
        ("temperature = 1\n" + GOOD, "temperature"),
        (GOOD + "temperature = 1\n", "examples[0].temperature"),
        (GOOD.replace('query = "how', 'answer = "how'), "examples[0].answer"),
        (GOOD.replace('"how high can crates be stacked?"', '"""a\nb"""'), "examples[0].query"),
    ],
)
def test_bad_prompt_file_names_file_and_key(tmp_path: Path, body: str, key: str) -> None:
    path = write_prompt(tmp_path, "q", body)
    with pytest.raises(ConfigError) as info:
        load_template(path)
    assert info.value.source == str(path) and info.value.key == key


def test_prompt_file_that_is_not_toml(tmp_path: Path) -> None:
    path = write_prompt(tmp_path, "q", "style = \n")
    with pytest.raises(ConfigError, match="not valid TOML") as info:
        load_template(path)
    assert info.value.source == str(path)


def test_missing_style_and_missing_folder(tmp_path: Path) -> None:
    write_prompt(tmp_path, "q", GOOD)
    with pytest.raises(ConfigError) as info:
        load_templates(str(tmp_path), ("q", "nope"))
    assert info.value.key == "synth.styles" and "nope.toml" in str(info.value)
    assert "styles there: q" in str(info.value)
    with pytest.raises(ConfigError) as info:
        load_templates(str(tmp_path / "absent"), ("q",))
    assert info.value.key == "synth.prompts"


# ---------------------------------------------------------------- the plan


def test_plan_is_seeded_and_follows_the_style_mix() -> None:
    templates = load_templates("", ("question", "keywords"))
    cfg = SynthConfig(styles=("question", "question", "question", "keywords"), llm_per_passage=5)
    jobs = plan(PASSAGES, cfg, templates, "ident", 11)
    assert len(jobs) == 200 and len({j.key for j in jobs}) == 200
    assert jobs == plan(PASSAGES, cfg, templates, "ident", 11)
    # a job does not depend on which other passages are planned
    of_p7 = [j for j in jobs if j.passage["id"] == "p7"]
    assert plan(PASSAGES[7:8], cfg, templates, "ident", 11) == of_p7
    share = np.mean([j.style == "question" for j in jobs])
    # binomial, 200 draws at p = 3/4: standard error 0.031; allow ~3.5 standard errors
    assert share == pytest.approx(0.75, abs=0.11)
    other = plan(PASSAGES, cfg, templates, "ident", 12)
    assert [j.seed for j in other] != [j.seed for j in jobs]


def test_item_seed_depends_on_each_part() -> None:
    s = item_seed(1, "text", 0)
    assert 0 <= s < 2**60
    assert len({s, item_seed(2, "text", 0), item_seed(1, "text!", 0), item_seed(1, "text", 1)}) == 4


def test_entry_key_depends_on_each_part() -> None:
    k = entry_key("gen", "prompt", "passage", 0)
    others = [
        entry_key("gen2", "prompt", "passage", 0),
        entry_key("gen", "prompt2", "passage", 0),
        entry_key("gen", "prompt", "passage2", 0),
        entry_key("gen", "prompt", "passage", 1),
    ]
    assert len({k, *others}) == 5


# ---------------------------------------------------------------- the cache


def test_cache_survives_a_torn_last_line(tmp_path: Path) -> None:
    cache = GenerationCache(tmp_path, "llm", "abc")
    cache.put("k1", {"raw": "one"})
    cache.put("k2", {"raw": "two"})
    with open(cache.path, "ab") as fh:  # a kill in the middle of a write
        fh.write(b'{"key": "k3", "raw": "thr')
    again = GenerationCache(tmp_path, "llm", "abc")
    assert len(again) == 2 and "k3" not in again
    again.put("k4", {"raw": "four"})  # starts on a fresh line
    third = GenerationCache(tmp_path, "llm", "abc")
    assert {k: third.get(k)["raw"] for k in ("k1", "k2", "k4")} == {
        "k1": "one",
        "k2": "two",
        "k4": "four",
    }
    lines = cache.path.read_text().splitlines()
    assert json.loads(lines[-1]) == {"key": "k4", "raw": "four"}


def test_cache_files_are_per_generator_identity(tmp_path: Path) -> None:
    GenerationCache(tmp_path, "llm", "a" * 64).put("k", {"raw": "x"})
    assert "k" not in GenerationCache(tmp_path, "llm", "b" * 64)
    assert "k" not in GenerationCache(tmp_path, "http", "a" * 64)
    assert "k" in GenerationCache(tmp_path, "llm", "a" * 64)


# ---------------------------------------------------------------- cleaning answers


@pytest.mark.parametrize(
    ("raw", "clean"),
    [
        (" how is the press cleaned?\n\nPassage: next one", "how is the press cleaned?"),
        ("Question: how is the press cleaned?", "how is the press cleaned?"),
        ("**Search:** press cleaning", "press cleaning"),
        ('"press   cleaning"', "press cleaning"),
        ("1. press cleaning\n2. other", "press cleaning"),
        ("- press cleaning", "press cleaning"),
        ("\n\n  where is bay 3?  ", "where is bay 3?"),
        ("", ""),
    ],
)
def test_clean_query(raw: str, clean: str) -> None:
    t = load_templates("", ("keywords",))["keywords"]
    assert clean_query(raw, t) == clean


# ---------------------------------------------------------------- the sampler


def test_gumbel_sampler_draws_from_the_softmax() -> None:
    import torch

    from ballast.stages.synth.llm import _gumbel_sampler

    logits = torch.log(torch.tensor([[1.0, 2.0, 3.0]]))  # softmax: 1/6, 2/6, 3/6
    seeds = list(range(3000))
    proc = _gumbel_sampler(seeds, 1.0)
    picks = proc(None, logits.expand(len(seeds), 3)).argmax(dim=1).numpy()
    freq = np.bincount(picks, minlength=3) / len(seeds)
    # 3000 draws: standard error <= 0.0092; allow ~4 standard errors
    assert freq == pytest.approx([1 / 6, 2 / 6, 3 / 6], abs=0.037)
    # one row's draw depends on its own seed only, not on its batch
    alone = _gumbel_sampler([seeds[5]], 1.0)(None, logits).argmax(dim=1).item()
    assert alone == picks[5]
    # temperature sharpens: at T = 0.05 the largest logit nearly always wins
    cold = _gumbel_sampler(seeds, 0.05)(None, logits.expand(len(seeds), 3)).argmax(dim=1)
    assert (cold == 2).float().mean().item() > 0.99


# ---------------------------------------------------------------- config keys


@pytest.mark.parametrize(
    ("synth", "key", "allowed"),
    [
        ({"generators": ["gpt"]}, "synth.generators", "'llm', 'http'"),
        ({"styles": []}, "synth.styles", "at least one style"),
        ({"styles": ["../etc"]}, "synth.styles", "letters, digits"),
        ({"llm_temperature": 3.0}, "synth.llm_temperature", "[0.0, 2.0]"),
        ({"http_concurrency": 0}, "synth.http_concurrency", "[1, 64]"),
        ({"http_timeout_s": 0}, "synth.http_timeout_s", "(0.0, 3600.0]"),
        ({"min_words": 5, "max_words": 4}, "synth.max_words", "[5, 1000]"),
        ({"copy_overlap": 0.0}, "synth.copy_overlap", "(0.0, 1.0]"),
        ({"round_trip_k": -1}, "synth.round_trip_k", "[0, 10000]"),
        ({"http_base_url": "ftp://h/v1"}, "synth.http_base_url", "http://127.0.0.1:8080/v1"),
    ],
)
def test_bad_synth_keys_name_key_and_allowed(synth: dict, key: str, allowed: str) -> None:
    from ballast.config import build_config

    with pytest.raises(ConfigError) as info:
        build_config({"synth": synth})
    assert info.value.key == key and allowed in str(info.value)
