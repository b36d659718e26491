"""ballast.config and the `ballast init` template (common practice: defaults, TOML, --set)."""

from __future__ import annotations

import dataclasses
import json
import tomllib
from pathlib import Path
from typing import Any

import pytest

from ballast import Config, ConfigError, load_config
from ballast.cli.template import TEMPLATE
from ballast.config import SECTIONS, build_config, load_run_config


def _write(path: Path, text: str | bytes) -> Path:
    path.parent.mkdir(parents=True, exist_ok=True)
    if isinstance(text, bytes):
        path.write_bytes(text)
    else:
        path.write_text(text, encoding="utf-8")
    return path


def _error(data: dict, overrides: tuple[str, ...] = ()) -> ConfigError:
    with pytest.raises(ConfigError) as info:
        build_config(data, list(overrides))
    return info.value


# ---------------------------------------------------------------- defaults and the template


def test_defaults_load() -> None:
    assert load_config() == Config()
    assert build_config({}) == Config()
    cfg = Config()
    assert cfg.name == "run"
    assert cfg.run_path == Path("runs/run")
    assert set(cfg.gate.splits) <= set(cfg.evaluate.splits)


def test_to_dict_round_trips_through_build_config() -> None:
    cfg = Config()
    plain = json.loads(json.dumps(cfg.to_dict()))  # config.json is written as JSON
    assert build_config(plain) == cfg


@pytest.fixture
def template_path(tmp_path: Path) -> Path:
    return _write(tmp_path / "proj" / "ballast.toml", TEMPLATE.replace("{name}", "proj"))


def test_template_loads_with_default_values(template_path: Path) -> None:
    cfg = load_config(template_path)
    default = Config()
    assert cfg.name == "proj"
    assert (cfg.seed, cfg.base_model) == (default.seed, default.base_model)
    assert cfg.run_path == template_path.parent / "runs" / "proj"  # beside the file
    for section in SECTIONS:
        got, want = getattr(cfg, section), getattr(default, section)
        if section == "ingest":  # the one non-empty relative path is resolved against the file
            assert got.docs == str(template_path.parent / default.ingest.docs)
            got = dataclasses.replace(got, docs=default.ingest.docs)
        assert got == want, section


# Keys the template does not show (none: it documents every key).
UNDOCUMENTED: set[tuple[str, str]] = set()


def test_template_lists_every_key_of_every_section() -> None:
    raw = tomllib.loads(TEMPLATE.replace("{name}", "proj"))
    for section, cls in SECTIONS.items():
        want = {f.name for f in dataclasses.fields(cls)} - {
            k for s, k in UNDOCUMENTED if s == section
        }
        assert set(raw[section]) == want, section
    top = {f.name for f in dataclasses.fields(Config)} - set(SECTIONS)
    assert top - set(raw) == {"run_dir"}  # run_dir is shown commented out
    assert "# run_dir" in TEMPLATE


def test_template_shows_ingest_extensions() -> None:
    raw = tomllib.loads(TEMPLATE.replace("{name}", "proj"))
    assert "extensions" in raw["ingest"]


# ---------------------------------------------------------------- errors name the key


def test_unknown_key_names_full_key_and_suggests() -> None:
    err = _error({"train": {"epoch": 2}})
    assert err.key == "train.epoch"
    assert "'train.epoch'" in str(err)
    assert "did you mean 'epochs'" in str(err)


def test_unknown_top_level_key_and_section() -> None:
    assert _error({"nmae": "x"}).key == "nmae"
    err = _error({"trian": {"epochs": 2}})
    assert err.key == "trian"
    assert "'train'" in str(err)


@pytest.mark.parametrize(
    ("data", "key", "allowed"),
    [
        ({"train": {"batch_size": 0}}, "train.batch_size", "[2, 4096]"),
        ({"mine": {"sample": "best"}}, "mine.sample", "'random' or 'top'"),
        ({"evaluate": {"metrics": ["ndcg@0"]}}, "evaluate.metrics", "ndcg@10"),
        ({"evaluate": {"metrics": ["bleu@10"]}}, "evaluate.metrics", "recall, precision"),
        ({"split": {"test_fraction": 0.0}}, "split.test_fraction", "(0.0, 0.9]"),
        ({"synth": {"generators": ["gpt"]}}, "synth.generators", "'ict', 'keywords'"),
        ({"gate": {"splits": ["dev"]}}, "gate.splits", "are never gated"),
        ({"train": {"epochs": "two"}}, "train.epochs", "an integer"),
        ({"train": {"epochs": True}}, "train.epochs", "an integer"),
        ({"train": 5}, "train", "a table [train]"),
        ({"ingest": {"overlap_tokens": 61}}, "ingest.overlap_tokens", "[0, 60]"),
        ({"synth": {"max_passages": -1}}, "synth.max_passages", "[0, 1000000000]"),
        ({"train": {"matryoshka_dims": [64, 128]}}, "train.matryoshka_dims", "largest first"),
        ({"train": {"matryoshka_dims": [128, 128]}}, "train.matryoshka_dims", "distinct"),
        ({"train": {"matryoshka_dims": ["64"]}}, "train.matryoshka_dims", "whole numbers"),
        ({"train": {"matryoshka_dims": [0]}}, "train.matryoshka_dims", "[1, 65536]"),
        (
            {"train": {"matryoshka_dims": [64], "mode": "adapter"}},
            "train.mode",
            "when train.matryoshka_dims is set",
        ),
        ({"train": {"early_stopping_patience": 2}}, "train.eval_steps", "> 0 when early"),
        (
            {"train": {"eval_steps": 10, "checkpoint_steps": 15}},
            "train.checkpoint_steps",
            "a multiple of train.eval_steps (10)",
        ),
        ({"train": {"eval_steps": 5, "mode": "adapter"}}, "train.mode", "train.eval_steps"),
        ({"train": {"bf16": 1}}, "train.bf16", 'true, false or "auto"'),
        ({"train": {"bf16": "yes"}}, "train.bf16", 'true, false or "auto"'),
        ({"evaluate": {"encode_devices": ["gpu0"]}}, "evaluate.encode_devices", "'cuda:0'"),
        ({"evaluate": {"backend": "int8"}}, "evaluate.backend", "pytorch, onnx, onnx-int8"),
        (
            {"evaluate": {"backend": "onnx-int8", "bf16": True}},
            "evaluate.bf16",
            "applies to PyTorch only",
        ),
        (
            {"evaluate": {"backend": "onnx", "encode_devices": ["cpu", "cpu"]}},
            "evaluate.encode_devices",
            "one device or none",
        ),
    ],
)
def test_bad_value_names_key_and_allowed(data: dict, key: str, allowed: str) -> None:
    err = _error(data)
    assert err.key == key
    assert f"'{key}'" in str(err)
    assert allowed in str(err)


def test_bad_value_message_shows_the_value() -> None:
    assert "got 'best'" in str(_error({"mine": {"sample": "best"}}))
    assert "'ndcg@0'" in str(_error({"evaluate": {"metrics": ["ndcg@0"]}}))


def test_gate_splits_must_be_evaluated() -> None:
    err = _error({"evaluate": {"splits": ["dev", "test"]}, "gate": {"splits": ["test", "human"]}})
    assert err.key == "gate.splits"
    assert "'human'" in str(err)
    assert "['dev', 'test']" in str(err)
    ok = build_config({"evaluate": {"splits": ["test"]}, "gate": {"splits": ["test"]}})
    assert ok.gate.splits == ("test",)


# ---------------------------------------------------------------- --set overrides


def test_overrides_parse_toml_values() -> None:
    cfg = load_config(overrides=["train.epochs=3", "synth.generators=['ict']"])
    assert cfg.train.epochs == 3
    assert cfg.synth.generators == ("ict",)
    assert cfg.train.learning_rate == Config().train.learning_rate  # the rest untouched


def test_override_values_that_are_not_toml_are_strings() -> None:
    cfg = build_config({}, ["name=myrun", "mine.sample=top", "train.learning_rate=1e-4"])
    assert (cfg.name, cfg.mine.sample, cfg.train.learning_rate) == ("myrun", "top", 1e-4)


def test_a_list_of_numbers_takes_whole_numbers_too() -> None:
    # TOML writes 0 and 1 without a point; as weights they are the numbers 0.0 and 1.0
    assert build_config({}, ["train.mix_weights=[0, 0.5, 1]"]).train.mix_weights == (0.0, 0.5, 1.0)
    err = _error({}, ("train.mix_weights=['half']",))
    assert err.key == "train.mix_weights" and "a list of numbers" in str(err)


def test_overrides_apply_over_the_file(tmp_path: Path) -> None:
    path = _write(tmp_path / "c.toml", "[train]\nepochs = 2\nbatch_size = 8\n")
    cfg = load_config(path, ["train.epochs=5"])
    assert (cfg.train.epochs, cfg.train.batch_size) == (5, 8)


def test_bad_overrides() -> None:
    assert "KEY=VALUE" in str(_error({}, ("train.epochs",)))
    assert _error({}, ("train.epoch=3",)).key == "train.epoch"
    assert _error({}, ("train.batch_size=1",)).key == "train.batch_size"
    assert _error({"train": {"epochs": 1}}, ("train.epochs.x=3",)).key == "train.epochs"


# ---------------------------------------------------------------- files


def test_relative_paths_resolve_against_config_folder(tmp_path: Path) -> None:
    other = tmp_path / "elsewhere" / "docs"
    path = _write(
        tmp_path / "conf" / "c.toml",
        'run_dir = "../runs/x"\n'
        'base_model = "models/mini"\n'
        f'[ingest]\ndocs = "{other.as_posix()}"\n'
        '[synth]\nquestions = "q.jsonl"\n'
        '[export]\ndir = "out"\n',
    )
    cfg = load_config(path)
    folder = tmp_path / "conf"
    assert cfg.run_dir == str(tmp_path / "runs" / "x")  # normalised: no "conf/.." left
    assert cfg.base_model == str(folder / "models/mini")
    assert cfg.ingest.docs == str(other)  # absolute: kept
    assert cfg.synth.questions == str(folder / "q.jsonl")
    assert cfg.export.dir == str(folder / "out")


def test_packaged_model_and_empty_paths_are_not_resolved(tmp_path: Path) -> None:
    path = _write(tmp_path / "c.toml", 'base_model = "packaged:all-MiniLM-L6-v2"\n')
    cfg = load_config(path)
    assert cfg.base_model == "packaged:all-MiniLM-L6-v2"
    assert cfg.export.dir == ""
    assert cfg.run_path == tmp_path / "runs" / "run"  # the default, beside the config file


def test_invalid_toml_names_the_file(tmp_path: Path) -> None:
    path = _write(tmp_path / "bad.toml", "[train\nepochs = 1\n")
    with pytest.raises(ConfigError) as info:
        load_config(path)
    assert info.value.source == str(path)
    assert str(path) in str(info.value)
    assert "TOML" in str(info.value)


def test_non_utf8_config_names_the_file(tmp_path: Path) -> None:
    path = _write(tmp_path / "latin1.toml", 'name = "caf\xe9"\n'.encode("latin-1"))
    with pytest.raises(ConfigError) as info:
        load_config(path)
    assert info.value.source == str(path)
    assert "UTF-8" in str(info.value)


def test_missing_config_file(tmp_path: Path) -> None:
    with pytest.raises(ConfigError) as info:
        load_config(tmp_path / "nope.toml")
    assert info.value.source == str(tmp_path / "nope.toml")


def test_error_in_a_file_names_file_and_key(tmp_path: Path) -> None:
    path = _write(tmp_path / "c.toml", "[train]\nepoch = 2\n")
    with pytest.raises(ConfigError) as info:
        load_config(path)
    err = info.value
    assert (err.source, err.key) == (str(path), "train.epoch")
    assert str(path) in str(err) and "'train.epoch'" in str(err) and "epochs" in str(err)


def test_load_run_config(tmp_path: Path) -> None:
    with pytest.raises(ConfigError) as info:
        load_run_config(tmp_path)
    assert "config.json" in str(info.value)
    assert info.value.source == str(tmp_path)

    run = tmp_path / "runs" / "x"
    _write(run / "config.json", json.dumps(Config(name="x", seed=4).to_dict()))
    cfg = load_run_config(run, ["train.epochs=2"])
    assert (cfg.name, cfg.seed, cfg.train.epochs, cfg.run_dir) == ("x", 4, 2, str(run))

    _write(run / "config.json", "{not json")
    with pytest.raises(ConfigError, match="damaged"):
        load_run_config(run)


def test_splits_follow_the_evidence_by_default() -> None:
    """evaluate.splits and gate.splits left empty: real questions judge when there are some
    (both sides), else a judge generator's queries, else the synthetic test split."""
    from ballast.config import Config, GateConfig, GuardConfig, SynthConfig

    plain = Config()
    assert plain.evaluate.splits == ("dev", "test") and plain.gate.splits == ("test",)
    judged = Config(synth=SynthConfig(judge_generators=("headings",)))
    assert judged.gate.splits == ("judge",) and "judge" in judged.evaluate.splits
    real = Config(synth=SynthConfig(questions="q.jsonl", judge_generators=("headings",)))
    assert real.gate.splits == ("human", "human_heldout")
    assert {"human", "human_dev", "human_heldout"} <= set(real.evaluate.splits)
    guard = Config(guard=GuardConfig(queries="q", qrels="r", passages="p"))
    assert guard.gate.splits == ("test", "guard") and "guard" in guard.evaluate.splits
    explicit = Config(synth=SynthConfig(questions="q.jsonl"), gate=GateConfig(splits=("test",)))
    assert explicit.gate.splits == ("test",)  # an explicit list is kept as written
    with pytest.raises(ConfigError, match="evaluate.splits") as err:  # a guard nothing reads
        build_config({"evaluate": {"splits": ["test"]},
                      "guard": {"queries": "q", "qrels": "r", "passages": "p"}})  # fmt: skip
    assert "'guard'" in str(err.value)


def test_a_judge_must_be_a_generator_the_training_does_not_use() -> None:
    from ballast.config import SynthConfig

    with pytest.raises(ConfigError, match="synth.judge_generators"):
        SynthConfig(generators=("ict", "headings"), judge_generators=("headings",))


def test_the_run_folder_defaults_to_runs_beside_the_config_file(tmp_path: Path) -> None:
    cfg_file = tmp_path / "project" / "ballast.toml"
    cfg_file.parent.mkdir()
    cfg_file.write_text('name = "manuals"\n', "utf-8")
    assert load_config(cfg_file).run_path == tmp_path / "project" / "runs" / "manuals"
    assert load_config(cfg_file, ["name=v2"]).run_path == tmp_path / "project" / "runs" / "v2"
    cfg_file.write_text('name = "manuals"\nrun_dir = "out"\n', "utf-8")
    assert load_config(cfg_file).run_path == tmp_path / "project" / "out"


def test_min_steps_epochs_and_refusal() -> None:
    """train.min_steps: the epochs are the fewest whole passes over the training examples (or
    train.max_pairs of them) that make the floor of optimizer steps, a step being one batch
    (common practice); the adapter mode, whose epochs are its own key, refuses it."""
    from ballast.stages.train.full import with_min_steps

    def epochs(n: int, **train: Any) -> int:
        return with_min_steps(build_config({"train": train}).train, n).epochs

    assert epochs(96, min_steps=32) == 11  # 3 batches of 32 an epoch: 33 steps
    assert epochs(96, min_steps=0, epochs=2) == 2
    assert epochs(2000, min_steps=32) == 1  # 63 steps in one epoch already
    assert epochs(96, min_steps=32, epochs=20) == 20  # never lowered
    assert epochs(5000, min_steps=32, max_pairs=64) == 16  # 2 batches of the 64 kept
    with pytest.raises(ConfigError) as info:
        build_config({"train": {"min_steps": 10, "mode": "adapter"}})
    assert info.value.key == "train.min_steps"


def test_mix_queries_chooses_the_dev_queries_the_net_scores() -> None:
    """train.mix_queries: "all" scores the net on the synthetic dev split and the real dev
    questions, in that order (what train.eval_steps scores too), "real" on the real ones alone;
    any other value is refused naming the key."""
    from ballast.core.splits import dev_query_ids

    splits = {"queries": {"dev": ["d1", "d2"], "human_dev": ["h1"], "human": ["x"]}}
    assert dev_query_ids(splits) == ["d1", "d2", "h1"]
    assert dev_query_ids(splits, "real") == ["h1"]
    assert dev_query_ids({"queries": {"dev": ["d1"]}}, "real") == []
    assert build_config({"train": {"mix_queries": "real"}}).train.mix_queries == "real"
    with pytest.raises(ConfigError) as info:
        build_config({"train": {"mix_queries": "synthetic"}})
    assert info.value.key == "train.mix_queries"
